"""Polymer rows through prepare and levels: oligomer rows, the oligomers map, chain limits, the sidecar.

No quantum chemistry here: the electronic tables are written by hand from a Kuhn-type series (the
functional form of Gierschner, Cornil, Egelhaaf, Adv. Mater. 19 (2007) 173, doi:10.1002/adma.200600277).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

from screen.levels import CHAIN_COLUMNS, SIDECAR_COLUMNS
from screen.prepare import PolymerOptions, prepare, read_oligomers
from screen.stages import main as stage_main


def _kuhn(n, e0, x, m=2):
    return e0 * np.sqrt(1 + 2 * x * np.cos(np.pi / (m * np.asarray(n, float) + 1)))


def _batch(tmp_path, rows, polymer=PolymerOptions()):
    src = tmp_path / "c.csv"
    pd.DataFrame(rows, columns=["id", "smiles"]).to_csv(src, index=False)
    prepare(src, tmp_path / "prepared", polymer=polymer)
    return tmp_path / "prepared"


def _electronic(prepared, values, fail=()):
    """One electronic table for every shard row; ``values(smiles, n)`` gives the raw columns."""
    olig = read_oligomers(prepared / "oligomers.csv")
    n_of = dict(zip(olig["key"], olig["n"]))
    shards = pd.concat([pd.read_csv(p, dtype=str, keep_default_na=False) for p in sorted(prepared.glob("shard-*.csv"))])
    rows = []
    for key, smi in zip(shards["key"], shards["smiles"]):
        n = n_of.get(key, 1)
        bad = key in fail
        rows.append({"key": key, "status": "failed" if bad else "ok", "error": "electronic: SCF" if bad else "",
                     **({} if bad else values(smi, n))})
    path = prepared.parent / "electronic.csv"
    pd.DataFrame(rows).to_csv(path, index=False)
    return path


def _levels(tmp_path, prepared, electronic):
    out = tmp_path / "levels.csv"
    rc = stage_main(["--config", json.dumps({"polymer": {"n_max": 4}}), "levels", "--manifest",
                     str(prepared / "manifest.csv"), "--electronic", str(electronic), "--out", str(out)])
    assert rc == 0
    return pd.read_csv(out, dtype={"id": str}, keep_default_na=False, na_values=[""]), out


def _cos(n, a, b, m=2):
    """Tight-binding (Hückel) level of a chain of N = m n coupled units: a + b cos(π/(N+1)); limit a + b."""
    return a + b * np.cos(np.pi / (m * np.asarray(n, float) + 1))


def _kuhn_values(smiles, n):
    """Levels in the tight-binding form, the gap in Kuhn's (the forms each kind of quantity is fitted with)."""
    return {"xtb_ip_ev": float(_cos(n, 7.0, -1.2)), "xtb_ea_ev": float(_cos(n, 1.0, 1.0)),
            "xtb_homo_ev": float(_cos(n, -6.0, 0.9)), "xtb_lumo_ev": -3.0, "xtb_gap_ev": float(_kuhn(n, 4.0, -0.45))}


def test_polymer_levels_at_the_chain_limit_with_sidecar(tmp_path):
    prepared = _batch(tmp_path, [("pt", "[*]c1ccc([*])s1"), ("thio", "c1ccsc1"), ("pt2", "[*:1]c1ccc([*:2])s1")])
    olig = read_oligomers(prepared / "oligomers.csv")
    assert list(olig["n"]) == [1, 2, 3, 4] and set(olig["per_unit"]) == {2}
    levels, out = _levels(tmp_path, prepared, _electronic(prepared, _kuhn_values))
    assert set(CHAIN_COLUMNS) <= set(levels.columns)
    pt, thio, pt2 = (levels.iloc[i] for i in range(3))
    assert (pt.status, pt.representation, thio.representation) == ("ok", "polymer", "molecule")
    assert int(pt.chain_n_max) == 4 and pt.chain_fit_quality == "good"
    assert pt.chain_fit.startswith("ip:cos ea:cos homo:cos") and "gap:kuhn" in pt.chain_fit
    # Kuhn data are extrapolated exactly: E(inf) = E0 sqrt(1 + 2x); tight-binding levels: a + b
    assert pt.xtb_gap_ev == pytest.approx(4.0 * math.sqrt(1 - 0.9), abs=1e-3)
    assert pt.xtb_ip_ev == pytest.approx(7.0 - 1.2, abs=1e-6)
    assert pt.xtb_ea_ev == pytest.approx(1.0 + 1.0, abs=1e-6)
    assert pt.xtb_homo_ev == pytest.approx(-6.0 + 0.9, abs=1e-6)
    # the molecule thiophene is the n = 1 oligomer: its own values, no chain columns
    assert thio.xtb_gap_ev == pytest.approx(float(_kuhn(1, 4.0, -0.45)), abs=1e-9) and thio.chain_fit != thio.chain_fit
    assert pt2.duplicate_of == "pt" and pt2.xtb_gap_ev == pt.xtb_gap_ev
    side = pd.read_csv(out.with_name("levels.oligomers.csv"), dtype={"n": str}, keep_default_na=False)
    assert list(side.columns) == SIDECAR_COLUMNS
    gap = side[side.quantity == "xtb_gap_ev"]
    assert list(gap.n) == ["1", "2", "3", "4", "inf"] and gap.iloc[-1].method == "kuhn"
    assert np.all(np.diff(gap.value.iloc[:4].astype(float)) < 0)


def test_failed_oligomer_and_poor_fit_are_reported(tmp_path):
    prepared = _batch(tmp_path, [("pt", "[*]c1ccc([*])s1")])
    olig = read_oligomers(prepared / "oligomers.csv")

    def wiggly(smiles, n):  # not a saturating series: no fit accepted
        return {**_kuhn_values(smiles, n), "xtb_gap_ev": [2.0, 3.0, 2.9, 1.5][n - 1]}

    levels, _ = _levels(tmp_path, prepared, _electronic(prepared, wiggly, fail={olig.key.iloc[2]}))
    row = levels.iloc[0]
    assert row.status == "ok" and row.chain_fit_quality == "poor" and "gap:longest" in row.chain_fit
    assert "chain_fit_poor" in row.note and "gap" in row.note and "oligomer_failed: n=3" in row.note
    assert row.xtb_gap_ev == 1.5  # the longest oligomer computed
    every = _electronic(prepared, wiggly, fail=set(olig.key))
    levels, _ = _levels(tmp_path, prepared, every)
    assert levels.iloc[0].status == "failed" and "every oligomer failed" in levels.iloc[0].error
    # only the monomer computed: no chain limit (it came out with the monomer's values and spread 0 before)
    levels, _ = _levels(tmp_path, prepared, _electronic(prepared, wiggly, fail=set(olig.key[olig.n > 1])))
    assert levels.iloc[0].status == "failed" and levels.iloc[0].error.startswith("no chain limit: n=1 is the only")


def test_atom_limit_and_methyl_caps(tmp_path):
    prepared = _batch(tmp_path, [("ppv", "[*]/C=C/c1ccc([*])cc1")], PolymerOptions(n_max=6, max_atoms=40, cap="methyl"))
    olig = read_oligomers(prepared / "oligomers.csv")
    assert list(olig.n) == [1, 2] and (olig.n_atoms <= 40).iloc[1:].all()
    assert olig.smiles.iloc[0] == "C/C=C/c1ccc(C)cc1" and set(olig.per_unit) == {3}


def test_atom_limit_counts_the_truncated_oligomer(tmp_path):
    """A dodecyl side chain is cut before computing, so the atom limit counts the cut oligomer.

    Hand count: the 2-methylthiophene-diyl unit computed has 5 C, 1 S and 5 H after the cut
    (C12H25 → CH3); a 4-mer with H caps has 4·11 + 2 = 46 atoms, within 100, while the
    uncut 2-mer already has 88 atoms and the uncut 3-mer 131.
    """
    rows = [("p12", "[*]c1sc([*])cc1CCCCCCCCCCCC")]
    src = tmp_path / "c.csv"
    pd.DataFrame(rows, columns=["id", "smiles"]).to_csv(src, index=False)
    polymer = PolymerOptions(n_max=4, max_atoms=100)
    prepare(src, tmp_path / "uncut", polymer=polymer)
    prepare(src, tmp_path / "cut", polymer=polymer, truncate_min_carbons=6)
    assert list(read_oligomers(tmp_path / "uncut" / "oligomers.csv").n) == [1, 2]
    assert list(read_oligomers(tmp_path / "cut" / "oligomers.csv").n) == [1, 2, 3, 4]


def test_progress_says_how_many_structures_are_oligomers(tmp_path):
    # a polymer is several structures: the progress count is of structures, and says how many are oligomers
    from screen.io import run_progress

    batch = tmp_path / "out" / "work" / "candidates"
    batch.mkdir(parents=True)
    prepared = _batch(batch, [("pt", "[*]c1ccc([*])s1"), ("thio", "c1ccsc1")])
    p = run_progress(tmp_path / "out")
    assert p["prepared"] and (p["oligomers"], p["polymers"]) == (4, 1)
    assert p["total"] >= 4  # thiophene itself is the n = 1 oligomer: one structure for both rows
    assert (prepared / "oligomers.csv").is_file()


def test_a_polymer_with_its_real_side_chains_gets_the_reference_polymers_oligomers():
    # a polymer audit: PM6 entered with its 2-ethylhexyl chains was cut to 2-methylpropyl stubs (the molecules'
    # rule), a structure the calibration never saw (its reference polymers are written with methyl stubs,
    # models/reference/levels_film.csv), and its series stopped at the dimer within polymer.max_atoms; the
    # HOMO came out -5.68 eV against -5.49 eV published (levels_film.csv PM6 row: Zhang et al., Adv. Mater. 27 (2015)
    # 4655, doi:10.1002/adma.201502110, value read in the OPV2D data set) and PM6:Y6 was called not viable
    from screen.prepare.polymers import oligomer_table

    film = pd.read_csv("models/reference/levels_film.csv")
    reference = film.loc[film["name"].str.startswith("PM6"), "smiles"].iloc[0]
    real = (reference.replace("c(-c3cc(F)c(C)s3)", "c(-c3cc(F)c(CC(CC)CCCC)s3)")
            .replace("c5c(C)sc(C)c5", "c5c(CC(CC)CCCC)sc(CC(CC)CCCC)c5"))
    assert real != reference

    def table(smiles):
        manifest = pd.DataFrame({"key": ["p"], "id": ["PM6"], "smiles": [smiles], "status": ["ok"],
                                 "representation": ["polymer"]})
        return oligomer_table(manifest, PolymerOptions(), truncate_min_carbons=6)

    mine, theirs = table(real), table(reference)
    assert list(mine["key"]) == list(theirs["key"]) and len(mine) >= 3
    assert mine["side_chains_cut"].iloc[0].split(";") == ["C8H17->CH3"] * 4
    assert theirs["side_chains_cut"].iloc[0] == ""


# a new-user robustness audit: a repeat unit attached through an aromatic nitrogen (N-linked carbazole, pyrrole,
# imidazole) crashed the whole batch with RDKit's KekulizeException: the H cap left the ring nitrogen without its H
N_LINKED = ["[*]n1c2ccccc2c2cc([*])ccc21", "[*]n1cccc1[*]", "[*]c1cccn1[*]", "[*]n1ccnc1[*]"]


@pytest.mark.parametrize("unit", N_LINKED)
@pytest.mark.parametrize("cap", ["H", "methyl"])
def test_n_linked_repeat_units_give_sanitizable_oligomers(unit, cap):
    from rdkit import Chem

    from screen.oligomers import oligomer_series

    series = oligomer_series(unit, n_max=3, max_atoms=1000, cap=cap)
    assert [n for n, _ in series] == [1, 2, 3]
    atoms = []
    for n, smiles in series:
        mol = Chem.MolFromSmiles(smiles)  # sanitizes: kekulisable, valences right
        assert mol is not None, (unit, n, smiles)
        assert not [a for a in mol.GetAtoms() if a.GetNumRadicalElectrons()], smiles
        nh = sum(1 for a in mol.GetAtoms() if a.GetSymbol() == "N" and a.GetIsAromatic() and a.GetTotalNumHs())
        # the H cap on a ring nitrogen gives back its N-H (at most one per chain end); a methyl cap leaves none
        assert nh <= 2 and (cap == "H" or nh == 0), smiles
        atoms.append(Chem.AddHs(mol).GetNumAtoms())
    # every repeat adds the same atoms: one unit minus the two H the new bond replaces
    assert atoms[2] - atoms[1] == atoms[1] - atoms[0] > 0


def test_n_linked_carbazole_oligomers_have_the_formula_counted_by_hand():
    from rdkit import Chem
    from rdkit.Chem.rdMolDescriptors import CalcMolFormula

    from screen.oligomers import oligomer_smiles

    unit = "[*]n1c2ccccc2c2cc([*])ccc21"
    # hand count: carbazole is C12H9N (8 C-H, 1 N-H); the N(9)-C(3') bond of a dimer replaces one H of each
    # carbazole: C24H16N2 with H caps, the N-H kept at the head; methyl caps replace the two end H: C26H20N2
    assert CalcMolFormula(Chem.MolFromSmiles(oligomer_smiles(unit, 1))) == "C12H9N"
    dimer = Chem.MolFromSmiles(oligomer_smiles(unit, 2))
    assert CalcMolFormula(dimer) == "C24H16N2"
    assert dimer.HasSubstructMatch(Chem.MolFromSmarts("[nH]")) and dimer.HasSubstructMatch(Chem.MolFromSmarts("n-c"))
    assert CalcMolFormula(Chem.MolFromSmiles(oligomer_smiles(unit, 2, cap="methyl"))) == "C26H20N2"
    assert CalcMolFormula(Chem.MolFromSmiles(oligomer_smiles(unit, 3))) == "C36H23N3"


def test_n_linked_carbazole_polymer_goes_through_prepare_beside_other_rows(tmp_path):
    rows = [("cz", "[*]n1c2ccccc2c2cc([*])ccc21"), ("pt", "[*]c1ccc([*])s1"), ("npyr", "[*]n1cccc1[*]"),
            ("benz", "c1ccccc1")]
    prepared = _batch(tmp_path, rows, PolymerOptions(n_max=3))
    manifest = pd.read_csv(prepared / "manifest.csv", dtype=str, keep_default_na=False)
    assert list(manifest.status) == ["ok"] * 4
    olig = read_oligomers(prepared / "oligomers.csv")
    assert list(olig[olig.polymer_id == "cz"].n) == [1, 2, 3]
    assert olig[olig.polymer_id == "cz"].smiles.iloc[0] == "c1ccc2c(c1)[nH]c1ccccc12"  # carbazole itself


def test_a_repeat_unit_whose_oligomers_cannot_be_built_rejects_its_row_only(tmp_path, monkeypatch):
    from rdkit import Chem

    import screen.oligomers as oligomers

    real = oligomers.oligomer_series

    def unbuildable(unit, *args, **kwargs):  # RDKit's own exception, as the N-linked units raised it
        if "s" in unit.smiles:
            Chem.SanitizeMol(Chem.MolFromSmiles("c1ccnc1", sanitize=False))
        return real(unit, *args, **kwargs)

    monkeypatch.setattr(oligomers, "oligomer_series", unbuildable)
    rows = [("pt", "[*]c1ccc([*])s1"), ("cz", "[*]n1c2ccccc2c2cc([*])ccc21"), ("benz", "c1ccccc1"),
            ("pt-again", "[*:1]c1ccc([*:2])s1")]
    prepared = _batch(tmp_path, rows, PolymerOptions(n_max=2))
    manifest = pd.read_csv(prepared / "manifest.csv", dtype=str, keep_default_na=False)
    assert list(manifest.status) == ["rejected", "ok", "ok", "rejected"]
    assert list(manifest.reason) == ["oligomer_build_failed", "", "", "oligomer_build_failed"]
    assert "could not be built" in manifest.error[0] and "kekulize" in manifest.error[0]
    assert manifest.key[0] == "" and manifest.duplicate_of[3] == ""
    olig = read_oligomers(prepared / "oligomers.csv")
    assert set(olig.polymer_id) == {"cz"}
    shards = pd.concat([pd.read_csv(p, dtype=str, keep_default_na=False) for p in prepared.glob("shard-*.csv")])
    assert not shards["id"].str.startswith("pt").any() and "benz" in set(shards["id"])
    meta = json.loads((prepared / "manifest.meta.json").read_text())
    assert meta["counts"]["rejected"] == 2 and meta["counts"]["ok"] == 2
