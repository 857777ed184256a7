"""Structures stage: seeded conformers, force-field fallbacks, truncation, shard I/O."""

from __future__ import annotations

import pandas as pd
import pytest
from rdkit import Chem

from screen.structures import (StructureOptions, build_structure, conformer_count, read_structures,
                               run_structures, truncate_side_chains)


def test_conformer_count_grows_with_rotors():
    opts = StructureOptions()
    rigid = conformer_count(Chem.MolFromSmiles("c1ccc2ccccc2c1"), opts)
    floppy = conformer_count(Chem.MolFromSmiles("CCCCCCc1ccc(-c2ccc(CCCCCC)s2)s1"), opts)
    assert rigid == opts.conformers_base
    assert rigid < floppy <= opts.conformers_max


def test_same_seed_same_geometry():
    a, _ = build_structure("CCCCc1ccc(-c2cccs2)s1")
    b, _ = build_structure("CCCCc1ccc(-c2cccs2)s1")
    assert (a.GetConformer().GetPositions() == b.GetConformer().GetPositions()).all()


def test_uff_fallback_for_boron():
    # MMFF94 has no boron parameters; UFF does
    _, info = build_structure("OB(O)c1ccccc1")
    assert info["forcefield"] == "UFF"


def test_no_forcefield_falls_back_to_xtb_geometry():
    # neither MMFF94 nor UFF types aromatic selenium: the engine optimises the geometry
    mol, info = build_structure("c1cc[se]c1")
    assert info["forcefield"] == "none" and info["geometry"] == "xtb" and info["opt_converged"] is True
    se = [a.GetIdx() for a in mol.GetAtoms() if a.GetSymbol() == "Se"][0]
    c = [n.GetIdx() for n in mol.GetAtomWithIdx(se).GetNeighbors()][0]
    from rdkit.Chem import rdMolTransforms

    # C–Se bond of selenophene ≈ 1.855 Å (microwave structure; from memory): a sane, optimised geometry
    assert rdMolTransforms.GetBondLength(mol.GetConformer(), se, c) == pytest.approx(1.86, abs=0.08)


@pytest.mark.parametrize("smiles,expected,n", [
    ("CCCCCCc1ccsc1", "Cc1ccsc1", 1),
    ("CCCCC(CC)Cn1c2ccccc2c2ccccc21", "Cn1c2ccccc2c2ccccc21", 1),
    ("CCc1ccsc1", "CCc1ccsc1", 0),             # ethyl is shorter than the 3-carbon threshold
    ("CCOC(=O)c1ccccc1", "CCOC(=O)c1ccccc1", 0),  # ester alkoxy: kept
])
def test_truncate_side_chains(smiles, expected, n):
    mol, count = truncate_side_chains(Chem.MolFromSmiles(smiles))
    assert Chem.MolToSmiles(mol) == Chem.CanonSmiles(expected)
    assert count == n


def test_truncation_is_recorded():
    _, info = build_structure("CCCCCCc1ccc(-c2cccs2)s1", StructureOptions(truncate_side_chains=True))
    assert info["truncated_chains"] == 1
    assert info["smiles_computed"] == Chem.CanonSmiles("Cc1ccc(-c2cccs2)s1")


def test_xtb_geometry_route_converges():
    mol, info = build_structure("c1ccc(-c2ccccc2)cc1", StructureOptions(geometry="xtb"))
    assert info["geometry"] == "xtb" and info["opt_converged"] is True
    # GFN2-xTB biphenyl is twisted (gas-phase electron diffraction ≈ 44°; from memory): not planar
    from rdkit.Chem import rdMolTransforms

    conf = mol.GetConformer()
    patt = Chem.MolFromSmarts("c:c-c:c")
    i, j, k, l_ = mol.GetSubstructMatch(patt)
    assert 20 < abs(rdMolTransforms.GetDihedralDeg(conf, i, j, k, l_)) < 160


def test_run_structures_accounts_for_every_key(tmp_path):
    shard = pd.DataFrame({"key": ["ma", "mb"], "smiles": ["c1ccsc1", "c1ccccc1"], "id": ["a", "b"]})
    shard.to_csv(tmp_path / "shard-000.csv", index=False)
    table = run_structures(tmp_path / "shard-000.csv", tmp_path / "s.sdf", tmp_path / "s.csv")
    assert list(table["key"]) == ["ma", "mb"] and set(table["status"]) == {"ok"}
    mols = read_structures(tmp_path / "s.sdf")
    assert set(mols) == {"ma", "mb"} and mols["ma"].GetNumAtoms() == 9
    assert not list(tmp_path.glob("*.journal.jsonl"))  # journal removed once the output is complete
    assert not list(tmp_path.glob(".*.tmp"))
