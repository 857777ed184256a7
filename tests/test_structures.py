"""Structures stage: seeded conformers, force-field fallbacks, truncation, shard I/O."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from rdkit import Chem

from screen.structures import (
    PLANAR_TOLERANCE_DEG,
    StructureOptions,
    build_structure,
    conformer_count,
    read_structures,
    run_structures,
    truncate_side_chains,
)


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


@pytest.mark.parametrize("smiles,expected,cuts", [
    ("CCCCCCc1ccsc1", "Cc1ccsc1", ["C6H13->CH3"]),                        # n-hexyl -> methyl
    ("CCCCC(CC)Cn1c2ccccc2c2ccccc21", "CC(C)Cn1c2ccccc2c2ccccc21", ["C8H17->C4H9"]),  # 2-ethylhexyl
    ("CCCCCCCCCCC(CCCCCCCC)Cc1ccsc1", "CC(C)Cc1ccsc1", ["C20H41->C4H9"]),  # 2-octyldodecyl
    ("CCCCCc1ccsc1", "CCCCCc1ccsc1", []),           # pentyl: shorter than 6 carbons, kept as written
    ("CCOC(=O)c1ccccc1", "CCOC(=O)c1ccccc1", []),   # ester alkoxy: kept
    ("CCCCCCCCOc1ccccc1", "COc1ccccc1", ["C8H17->CH3"]),  # octyloxy: the alkyl part is cut
    ("OCCCCCCCc1ccccc1", "OCCCCCCCc1ccccc1", []),   # not a pure alkyl group (bonded twice): kept
    ("CCCCCCCC", "CCCCCCCC", []),                   # a whole alkane is not a side chain
])
def test_truncate_side_chains(smiles, expected, cuts):
    mol, done = truncate_side_chains(Chem.MolFromSmiles(smiles))
    assert Chem.MolToSmiles(mol) == Chem.CanonSmiles(expected)
    assert done == cuts


def test_truncation_never_merges_short_substituents():
    # methyl, isopropyl, tert-butyl and tert-amyl esters of one fullerene-adduct-type scaffold
    # (a methanofullerene-like cyclopropane on a phenyl-butanoate; a small core keeps the test fast)
    scaffold = "O=C(O{R})CCCC1(c2ccccc2)C2C=CC=CC21"
    variants = {r: scaffold.format(R=r) for r in ("C", "C(C)C", "C(C)(C)C", "C(C)(C)CC")}
    computed = {Chem.MolToSmiles(truncate_side_chains(Chem.MolFromSmiles(s))[0]) for s in variants.values()}
    assert len(computed) == 4
    assert computed == {Chem.CanonSmiles(s) for s in variants.values()}  # nothing cut at all


def test_truncation_is_on_by_default_and_recorded():
    assert StructureOptions().truncate_side_chains and StructureOptions().truncate_min_carbons == 6
    _, info = build_structure("CCCCC(CC)Cc1ccc(-c2cccs2)s1")
    assert info["truncated_chains"] == 1 and info["truncated_groups"] == "C8H17->C4H9"
    assert info["smiles_computed"] == Chem.CanonSmiles("CC(C)Cc1ccc(-c2cccs2)s1")


def test_truncation_can_be_switched_off():
    _, info = build_structure("CCCCCCc1ccsc1", StructureOptions(truncate_side_chains=False))
    assert info["truncated_chains"] == 0 and info["smiles_computed"] == Chem.CanonSmiles("CCCCCCc1ccsc1")


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


class _CountingEngine:
    """Wraps the default engine and counts single points."""

    def __init__(self):
        from screen.engines import make_engine

        self.inner, self.calls = make_engine(), 0

    def singlepoint(self, *args, **kwargs):
        self.calls += 1
        return self.inner.singlepoint(*args, **kwargs)


def test_conformer_and_ranking_counts_shrink_with_size():
    from screen.structures import ranked_count

    opts = StructureOptions(size_caps_min_atoms=0)  # caps on every molecule (the default starts them at 150 atoms)
    mol = Chem.MolFromSmiles("CCOc1ccc(-c2ccc(OCC)cc2)cc1")  # 36 atoms, 5 rotatable bonds
    assert conformer_count(mol, opts) == min(opts.conformers_max, opts.conformers_base + 5 * opts.conformers_per_rotor)
    assert conformer_count(mol, StructureOptions(conformer_atom_budget=36 * 3, size_caps_min_atoms=0)) == 3
    assert conformer_count(mol, StructureOptions(conformer_atom_budget=10, size_caps_min_atoms=0)) == 2  # at least 2
    assert [ranked_count(n, opts) for n in (40, 100, 180, 250)] == [6, 3, 2, 1]
    assert [ranked_count(n) for n in (40, 100, 180, 250)] == [6, 6, 2, 1]  # default: caps from 150 atoms


def test_ff_window_prunes_before_any_xtb_call():
    engine = _CountingEngine()  # ranking calls only: the planar variants (their own tests) add single points
    _, wide = build_structure("CCCCc1ccc(-c2ccccc2)s1", StructureOptions(ff_window_kcal_mol=50.0, **TIGHT), engine)
    wide_calls, engine.calls = engine.calls, 0
    _, narrow = build_structure("CCCCc1ccc(-c2ccccc2)s1", StructureOptions(ff_window_kcal_mol=0.0,
                                                                         planar_variants=False), engine)
    assert wide["n_ranked"] == wide_calls > 1
    assert narrow["n_ranked"] == 1 and engine.calls == 0  # only the force-field minimum: nothing to rank


def test_big_molecule_gets_one_conformer_without_ranking_single_point():
    engine = _CountingEngine()
    _, info = build_structure("c1ccc(-c2ccc(-c3cccs3)s2)s1", StructureOptions(rank_atom_budget=20, size_caps_min_atoms=0),
                              engine)
    assert info["n_ranked"] == 1 and engine.calls == 0 and np.isnan(info["xtb_rank_energy_eh"])


@pytest.mark.parametrize("section,key,value", [
    ("structures", "truncate_side_chains", False), ("structures", "truncate_min_carbons", 8),
    ("structures", "ff_window_kcal_mol", 3.0), ("structures", "conformer_atom_budget", 600),
    ("structures", "rank_atom_budget", 720), ("structures", "size_caps_min_atoms", 0),
    ("structures", "rank_warm_start", False), ("structures", "rank_scf_accuracy", None),
    ("electronic", "accuracy", 1.0), ("electronic", "film_epsilon", None),
    ("electronic", "film_epsilon", 4.0), ("structures", "rigid_embedding", "cycle_rank"),
])
def test_every_number_changing_setting_changes_the_protocol_id(section, key, value):
    from screen.config import Config, protocol
    from screen.options import EARLIER_PROTOCOL_VALUES

    base, changed = Config.of({}), Config.of({section: {key: value}})
    assert changed.protocol_id != base.protocol_id
    if EARLIER_PROTOCOL_VALUES.get(section, {}).get(key, object()) == value:  # the route before the key existed
        assert key not in protocol(changed)[section] and key in protocol(base)[section]
    else:
        assert protocol(changed)[section][key] == value


def test_a_number_written_with_or_without_decimals_gives_one_protocol_id():
    # the id hashes JSON text, where 10 and 10.0 differ: a config writing accuracy: 10.0 must still find the
    # shipped models of the default protocol (else a full reference refit would run)
    from screen.config import Config

    default = Config.of({}).protocol_id
    assert Config.of({"electronic": {"accuracy": 10.0}}).protocol_id == default
    assert Config.of({"structures": {"rank_scf_accuracy": 10.0, "ff_window_kcal_mol": 6}}).protocol_id == default
    assert Config.of({"electronic": {"accuracy": 10.5}}).protocol_id != default


def test_threads_do_not_change_the_protocol_id():
    from screen.config import Config

    assert Config.of({"electronic": {"threads": 2}}).protocol_id == Config.of({}).protocol_id


# ---------------------------------------------------------------- issue 13: pruning that keeps the choice

#: the values of the three ranking keys that give the route shipped before they became defaults
EARLIER = {"size_caps_min_atoms": 0, "rank_warm_start": False, "rank_scf_accuracy": None}
#: tight ranking only, every SCF from scratch (a ranking single point per conformer, nothing else)
TIGHT = {"rank_warm_start": False, "rank_scf_accuracy": None, "planar_variants": False}


def test_pruning_defaults_and_the_earlier_route():
    from screen.config import Config
    from screen.options import EARLIER_ROUTE_VALUES
    from screen.schema import section_defaults

    # the store leaves exactly these values out of its ids (the three ranking keys and the cage route)
    assert EARLIER_ROUTE_VALUES["structures"] == {**EARLIER, "cage_geometry": "ff", "planar_variants": False,
                                                  "rigid_embedding": "cycle_rank"}
    defaults = {k: section_defaults("structures")[k] for k in EARLIER}
    assert defaults == {"size_caps_min_atoms": 150, "rank_warm_start": True, "rank_scf_accuracy": 10}
    assert {k: Config.of({}).protocol["structures"][k] for k in EARLIER} == defaults
    assert {k: getattr(StructureOptions(), k) for k in EARLIER} == defaults
    assert section_defaults("electronic")["accuracy"] == 10
    earlier = Config.of({"structures": EARLIER, "electronic": {"accuracy": 1.0}})
    assert earlier.protocol_id != Config.of({}).protocol_id


def test_protocol_ids_of_settings_from_before_the_embedding_rule_are_kept():
    from screen.config import Config

    # ids of the previous release (before structures.rigid_embedding): the xTB-geometry protocol, the default
    # and the default with the force-field cage route; each is reached again with the earlier embedding rule
    earlier = {"rigid_embedding": "cycle_rank"}
    assert Config.of({"structures": {"geometry": "xtb", **earlier}}).protocol_id == "tblite-gfn2-xtb-3ce6def9"
    assert Config.of({"structures": earlier}).protocol_id == "tblite-gfn2-ff-cf90d5d7"
    assert Config.of({"structures": {"cage_geometry": "ff", **earlier}}).protocol_id == "tblite-gfn2-ff-80414bed"
    assert Config.of({}).protocol_id not in {"tblite-gfn2-ff-cf90d5d7", "tblite-gfn2-ff-80414bed"}


def test_a_run_record_written_before_the_embedding_rule_keeps_its_protocol(tmp_path):
    # an upgrade audit: `dascreen rank --out OLD_RUN` read the old run's config.yaml (every structures key but
    # rigid_embedding) with the new default and refused its own levels as "of another protocol"
    import yaml

    from screen.config import Config

    old = Config.of({}).to_dict()
    del old["structures"]["rigid_embedding"]
    path = tmp_path / "config.yaml"
    path.write_text(yaml.safe_dump(old), encoding="utf-8")
    assert Config.load(path).protocol_id == "tblite-gfn2-ff-cf90d5d7"
    path.write_text(yaml.safe_dump({"structures": {"seed": old["structures"]["seed"]}}), encoding="utf-8")
    assert Config.load(path).protocol_id == Config.of({}).protocol_id  # a hand-written file takes the defaults


def test_loose_ranking_accuracy_is_bounded():
    from screen.config import Config
    from screen.errors import ConfigError

    with pytest.raises(ConfigError, match="rank_scf_accuracy"):
        StructureOptions(rank_scf_accuracy=100.0)  # loose energies off by 7e-4 Eh there: beyond the recheck window
    with pytest.raises(ConfigError):
        Config.of({"structures": {"rank_scf_accuracy": 31}})


def test_size_caps_act_only_from_size_caps_min_atoms():
    from screen.structures import ranked_count

    mol = Chem.MolFromSmiles("CCOc1ccc(-c2ccc(OCC)cc2)cc1")  # 36 atoms, 5 rotatable bonds
    capped = StructureOptions(conformer_atom_budget=36 * 3, rank_atom_budget=36 * 2, size_caps_min_atoms=0)
    assert conformer_count(mol, capped) == 3 and ranked_count(36, capped) == 2
    above = StructureOptions(conformer_atom_budget=36 * 3, rank_atom_budget=36 * 2, size_caps_min_atoms=37)
    assert conformer_count(mol, above) == conformer_count(mol, StructureOptions())  # 36 < 37: no cap
    assert ranked_count(36, above) == StructureOptions().rank_max_conformers
    at = StructureOptions(conformer_atom_budget=36 * 3, rank_atom_budget=36 * 2, size_caps_min_atoms=36)
    assert conformer_count(mol, at) == 3 and ranked_count(36, at) == 2


class _RecordingEngine(_CountingEngine):
    """Counts single points and records their energies, guesses and SCF accuracy."""

    def __init__(self):
        super().__init__()
        self.log = []

    def singlepoint(self, numbers, positions_bohr, **kwargs):
        sp = super().singlepoint(numbers, positions_bohr, **kwargs)
        ladder = kwargs.get("ladder")
        accuracy = ladder[0].get("accuracy", self.inner.scf.accuracy) if ladder else self.inner.scf.accuracy
        self.log.append({"positions": np.array(positions_bohr), "energy": sp.energy_eh,
                         "warm": kwargs.get("guess") is not None, "accuracy": accuracy})
        return sp


FLEXIBLE = "CCCCc1ccc(-c2ccc(OCC)cc2)s1"  # 35 atoms, 7 rotatable bonds: several conformers within the window


def test_warm_and_loose_ranking_keep_the_cold_choice_and_energies():
    cold_engine, fast_engine = _RecordingEngine(), _RecordingEngine()
    cold_mol, cold = build_structure(FLEXIBLE, StructureOptions(ff_window_kcal_mol=50.0, **TIGHT), cold_engine)
    fast_mol, fast, sp = build_structure(
        FLEXIBLE, StructureOptions(ff_window_kcal_mol=50.0, rank_warm_start=True, rank_scf_accuracy=10.0,
                                   planar_variants=False),
        fast_engine, return_singlepoint=True)
    n = cold["n_ranked"]
    assert n == fast["n_ranked"] >= 3 and cold_engine.calls == n
    # same conformer, same energy: the SCF energy threshold at accuracy 1 is 1e-6 Eh (tblite default)
    assert np.array_equal(cold_mol.GetConformer().GetPositions(), fast_mol.GetConformer().GetPositions())
    assert fast["xtb_rank_energy_eh"] == pytest.approx(cold["xtb_rank_energy_eh"], abs=1e-6)
    assert sp.energy_eh == fast["xtb_rank_energy_eh"]
    loose, tight = fast_engine.log[:n], fast_engine.log[n:]
    assert [x["warm"] for x in loose] == [False] + [True] * (n - 1)  # each from the previous conformer
    assert all(x["accuracy"] == 10.0 for x in loose) and all(x["accuracy"] == 1.0 and x["warm"] for x in tight)
    assert 1 <= len(tight) < n  # only conformers within the recheck window get a tight single point
    for a, b in zip(cold_engine.log, loose):  # every conformer: loose warm energy vs cold tight energy
        assert np.array_equal(a["positions"], b["positions"])
        assert b["energy"] == pytest.approx(a["energy"], abs=1e-4)  # RECHECK_WINDOW_EH


def test_warm_started_ranking_gives_cold_energies():
    cold_engine, warm_engine = _RecordingEngine(), _RecordingEngine()
    build_structure(FLEXIBLE, StructureOptions(ff_window_kcal_mol=50.0, **TIGHT), cold_engine)
    build_structure(FLEXIBLE, StructureOptions(ff_window_kcal_mol=50.0, rank_warm_start=True, rank_scf_accuracy=None,
                                               planar_variants=False), warm_engine)
    assert len(cold_engine.log) == len(warm_engine.log) >= 3
    for a, b in zip(cold_engine.log, warm_engine.log):
        assert b["energy"] == pytest.approx(a["energy"], abs=1e-6)  # SCF energy threshold (tblite default)


# ---------------------------------------------------------------- planar variants of conjugated single bonds

def _max_twist(mol, smarts: str) -> float:
    from rdkit.Chem import rdMolTransforms

    conf, twists = mol.GetConformer(), []
    for i, j, k, l in mol.GetSubstructMatches(Chem.MolFromSmarts(smarts)):
        x = abs(rdMolTransforms.GetDihedralDeg(conf, i, j, k, l))
        twists.append(min(x, 180.0 - x))
    return max(twists)


#: ring–vinyl torsions: aromatic C–C(aromatic), the bond, the vinyl C=C
RING_VINYL = "c:c-!@[CX3]=[CX3]"
#: the opt-in route with planar variants
PLANAR = StructureOptions(planar_variants=True)


def test_planar_variant_keeps_phenylene_vinylene_chains_planar():
    # trans-stilbene and the oligo(p-phenylene vinylene)s are planar, or within a few degrees of it, in the gas
    # phase and in their crystals (from memory: jet spectroscopy of stilbene, crystal structures of the
    # distyrylbenzenes); MMFF94 twists every ring–vinyl bond of 1,4-distyrylbenzene by 37–40°
    smiles = "c1ccc(/C=C/c2ccc(/C=C/c3ccccc3)cc2)cc1"
    old, old_info = build_structure(smiles)  # the default route: no variants (opt-in)
    new, info = build_structure(smiles, PLANAR)
    assert _max_twist(old, RING_VINYL) > 30.0 and old_info["planar_variant"] == ""
    assert _max_twist(new, RING_VINYL) <= PLANAR_TOLERANCE_DEG + 2.0  # any of the four atom choices per bond
    assert info["planar_variant"] == "aryl-vinyl ±5°"  # the 25° copy is higher: planar wins
    assert info["xtb_rank_energy_eh"] < old_info["xtb_rank_energy_eh"]  # xTB chose it: lower energy


def test_planar_variant_leaves_biphenyl_twisted():
    # biphenyl is twisted by about 44° in the gas phase (electron diffraction; from memory): no bond of the two
    # sets (ring–vinyl, biaryl to a five-membered ring), so the route is the one before the variants
    mol, info = build_structure("c1ccc(-c2ccccc2)cc1", PLANAR)
    assert info["planar_variant"] == "" and _max_twist(mol, "c:c-!@c:c") > 30.0


def test_planar_variant_is_chosen_by_xtb_not_imposed():
    # a copy that xTB puts higher is not kept: with the ring–vinyl set already planar (stilbene from its embedding),
    # 2,2'-bithiophene (planar anti in MMFF94 too) builds no copy at all
    for smiles in ("c1ccc(/C=C/c2ccccc2)cc1", "c1csc(-c2cccs2)c1"):
        mol, info = build_structure(smiles, PLANAR)
        assert info["planar_variant"] == ""


def test_planar_variants_are_opt_in_and_leave_the_shipped_ids_alone():
    from screen.config import Config
    from screen.store import stage_protocol_id

    on, xtb = {"planar_variants": True}, {"geometry": "xtb"}
    assert StructureOptions().planar_variants is False
    # off (the default) or on the xTB-geometry route (skipped there): the ids of the route without the key
    assert Config.of({"structures": {"planar_variants": False}}).protocol_id == Config.of({}).protocol_id
    assert Config.of({"structures": {**xtb, **on}}).protocol_id == Config.of({"structures": xtb}).protocol_id
    assert stage_protocol_id("structures", StructureOptions(geometry="xtb", planar_variants=True)) == \
        stage_protocol_id("structures", StructureOptions(geometry="xtb"))
    # on the force-field route it is a protocol of its own
    assert Config.of({"structures": on}).protocol_id != Config.of({}).protocol_id
    assert stage_protocol_id("structures", StructureOptions(planar_variants=True)) != \
        stage_protocol_id("structures", StructureOptions())


def test_the_xtb_geometry_route_skips_the_planar_variants(monkeypatch):
    import screen.structures as structures

    calls = []
    real = structures.planar_variants
    monkeypatch.setattr(structures, "planar_variants", lambda *a: calls.append(1) or real(*a))
    structures.build_structure("C=Cc1ccccc1", StructureOptions(planar_variants=True))  # styrene: MMFF94 twists it
    assert calls == [1]
    _, info = structures.build_structure("C=Cc1ccccc1", StructureOptions(planar_variants=True, geometry="xtb"))
    assert calls == [1] and info["planar_variant"] == "" and info["geometry"] == "xtb"
