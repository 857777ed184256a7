"""Python callers are refused what the command line refuses (an API audit).

The options dataclasses, ``rank_candidates``, ``rank_dyes`` and ``run_dyecell`` took values that a config file
or ``--set`` is refused for, and gave wrong numbers with them (``target_pce_pct=nan``: P(PCE > target) = 0 for
every row; ``n_samples=3``: P = 1.0 or 0.667; ``e_ox_v_nhe=1050``: "E(S+/S*) = +1047.90 V"). Each test below
names the finding it covers; the physical bounds are marked with their source.
"""

from __future__ import annotations

import csv
import math

import numpy as np
import pandas as pd
import pytest

from screen import errors
from screen.config import Config
from screen.device import DeviceModel
from screen.partners import Partner, PartnerError, resolve_partner
from screen.rank import RankOptions, rank_candidates


def _levels(**kw) -> pd.DataFrame:
    row = {"id": "d1", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5, "scale": "film", "role": "donor"}
    row.update(kw)
    return pd.DataFrame({k: [v] for k, v in row.items()})


def _partner(**kw) -> Partner:
    # a hand-built acceptor with levels of a fused-ring acceptor (film HOMO -5.7, LUMO -4.1 eV: from memory)
    base = dict(id="p", name="p", role="acceptor", homo_ev=-5.7, lumo_ev=-4.1, gap_opt_ev=1.4, scale="film")
    return Partner(**{**base, **kw})


# --------------------------------------------------------------------------- 1. options dataclasses


@pytest.mark.parametrize("kw, field", [
    ({"target_pce_pct": float("nan")}, "rank.target_pce_pct"),
    ({"target_pce_pct": -5}, "rank.target_pce_pct"),
    ({"target_pce_pct": 150}, "rank.target_pce_pct"),
    ({"n_samples": 2.5}, "rank.n_samples"),
    ({"n_samples": 3}, "rank.n_samples"),       # the schema's minimum is 10; the dataclass allowed 2
    ({"partner_sigma": "no"}, "rank.partner_sigma"),
    ({"seed": "x"}, "rank.seed"),
    ({"seed": 1.5}, "rank.seed"),
    ({"shortlist_size": -3}, "rank.shortlist_size"),
    ({"gap_min_ev": -1}, "rank.gap_min_ev"),
    ({"max_heavy_atoms": -1}, "rank.max_heavy_atoms"),
])
def test_rank_options_are_held_to_the_schema(kw, field):
    with pytest.raises(errors.ConfigError, match=f"RankOptions: field {field}: "):
        RankOptions(**kw)
    with pytest.raises(errors.ConfigError, match=f"field {field}: "):  # the docstring's promise
        RankOptions.from_mapping(kw)
    section, key = field.split(".")
    with pytest.raises(errors.ConfigError, match=f"field {field}"):   # the config path says the same
        Config.of({section: {key: next(iter(kw.values()))}})


def test_rank_options_from_a_validated_config_are_unchanged():
    cfg = Config.of({"rank": {"target_pce_pct": 9, "n_samples": 500}})
    opts = RankOptions.from_mapping(cfg["rank"])
    assert opts == RankOptions(target_pce_pct=9.0, n_samples=500) and RankOptions.from_mapping({}) == RankOptions()
    # numbers are stored as the schema writes them; numpy scalars are numbers
    assert type(RankOptions(n_samples=500.0).n_samples) is int
    assert type(RankOptions(target_pce_pct=9).target_pce_pct) is float
    assert RankOptions(n_samples=np.int64(500), partner_sigma=np.bool_(False)) == RankOptions(n_samples=500,
                                                                                            partner_sigma=False)


@pytest.mark.parametrize("kw, field", [
    ({"n_samples": 3}, "dyecell.n_samples"),
    ({"target_pce_pct": -5}, "dyecell.target_pce_pct"),
    ({"target_pce_pct": float("nan")}, "dyecell.target_pce_pct"),
    ({"target_pce_pct": "abc"}, "dyecell.target_pce_pct"),
    ({"seed": "x"}, "dyecell.seed"),
])
def test_dye_cell_rank_options_are_held_to_the_schema(kw, field):
    from screen.dyecell.options import RankOptions as DyeRankOptions

    with pytest.raises(errors.ConfigError, match=f"field {field}: "):
        DyeRankOptions(**kw)
    assert DyeRankOptions.from_mapping({"target_pce_pct": 6}).target_pce_pct == 6.0


@pytest.mark.parametrize("kw, field", [
    ({"engine": "foo"}, "electronic.engine"),
    ({"threads": 0}, "electronic.threads"),
    ({"accuracy": -1}, "electronic.accuracy"),
    ({"film_epsilon": 0.5}, "electronic.film_epsilon"),
    ({"method": "B3LYP"}, "electronic.method"),
    ({"accuracy": float("inf")}, "electronic.accuracy"),
])
def test_electronic_options_are_held_to_the_schema(kw, field):
    from screen.options import ElectronicOptions

    with pytest.raises(errors.ConfigError, match=f"ElectronicOptions: field {field}: "):
        ElectronicOptions(**kw)


def test_structure_and_execution_options_are_held_to_the_schema():
    from screen.options import EARLIER_ROUTE_VALUES, ExecutionOptions, StructureOptions

    with pytest.raises(errors.ConfigError, match="field structures.conformers_max: 0 is less than the minimum"):
        StructureOptions(conformers_max=0)
    with pytest.raises(errors.ConfigError, match="field structures.geometry: 'XTB' is not one of"):
        StructureOptions(geometry="XTB")
    with pytest.raises(errors.ConfigError, match=r"structures.planar_tolerances_deg.*greater than the maximum of 45"):
        StructureOptions(planar_tolerances_deg=(5.0, 60.0))
    with pytest.raises(errors.ConfigError, match="field execution.molecule_timeout_s"):
        ExecutionOptions(molecule_timeout_s=-1)
    # what the stages and the store build stays accepted, tuples stay tuples
    assert StructureOptions(**EARLIER_ROUTE_VALUES["structures"]).planar_tolerances_deg == (5.0, 25.0)
    assert Config.of({}).structures == StructureOptions() and Config.of({}).electronic.engine == "tblite"


# --------------------------------------------------------------------------- 2. run_dyecell settings


def test_run_dyecell_refuses_an_unknown_setting_naming_the_allowed_ones(tmp_path):
    from screen.dyecell.stage import run_dyecell

    with pytest.raises(errors.ConfigError, match=r"'n_sample' was unexpected.*allowed fields: .*n_samples"):
        run_dyecell(tmp_path / "dyes.csv", tmp_path / "out", settings={"n_sample": 3})
    with pytest.raises(errors.ConfigError, match="field dyecell.n_samples: 3 is less than the minimum of 10"):
        run_dyecell(tmp_path / "dyes.csv", tmp_path / "out", settings={"n_samples": 3})
    assert not (tmp_path / "out").exists()


# --------------------------------------------------------------------------- 3. rank_candidates' arguments


def test_a_levels_table_without_a_required_column_is_refused_naming_it():
    y6 = resolve_partner("y6")
    with pytest.raises(errors.InputError, match=r"needs columns .*missing \['id'\]"):
        rank_candidates(_levels().drop(columns="id"), y6)
    with pytest.raises(errors.InputError, match=r"missing \['gap_opt_ev'\]"):
        rank_candidates(_levels().drop(columns="gap_opt_ev"), y6)
    with pytest.raises(errors.InputError, match="expected a pandas DataFrame"):
        rank_candidates([{"id": "d1"}], y6)
    with pytest.raises(PartnerError, match="resolve_partner"):
        rank_candidates(_levels(), "y6")
    with pytest.raises(errors.ScaleMismatchError, match="no 'scale' column"):  # as before
        rank_candidates(_levels().drop(columns="scale"), y6)


def test_a_partner_whose_role_is_not_donor_or_acceptor_is_refused():
    with pytest.raises(PartnerError, match="role 'dye'"):
        rank_candidates(_levels(), _partner(role="dye"))
    # case and spaces are ignored, as in a partner file; the same ranking as with 'acceptor', role not assumed
    a = rank_candidates(_levels(), _partner(role="acceptor"))
    b = rank_candidates(_levels(), _partner(role=" Acceptor"))
    assert a["pce_pct"].tolist() == b["pce_pct"].tolist() and b.attrs["partner_role_assumed"] is False


# --------------------------------------------------------------------------- 4. rank_dyes: the dye file's checks


@pytest.fixture(scope="module")
def dye_cell():
    from screen.dyecell.library import resolve_mediator, resolve_oxide
    from screen.dyecell.rank import dyes_from_file

    # a cyanoacrylic-acid dye with E(S+/S) 1.07 V vs NHE and E0-0 1.96 eV (illustrative values, common practice)
    good = dyes_from_file(pd.DataFrame({"id": ["a"], "e_ox_v_nhe": [1.07], "e00_ev": [1.96],
                                        "smiles": ["OC(=O)C(C#N)=Cc1ccc(N(C)C)cc1"]}))
    return good, resolve_oxide("tio2-anatase"), resolve_mediator("co-bpy3")


@pytest.mark.parametrize("column, value, words", [
    ("e_ox_v_nhe", 1050.0, "looks like millivolts"),
    ("e_ox_v_nhe", -5.5, "looks like a vacuum-scale energy"),
    ("e00_ev", 650.0, "looks like a wavelength in nm"),
    ("e_ox_sigma_v", -0.1, "an uncertainty must be >= 0"),   # was a ValueError of the sampler
    ("e00_sigma_ev", 150.0, "looks like millielectronvolts"),
])
def test_rank_dyes_holds_a_typed_dye_table_to_the_dye_file_checks(dye_cell, column, value, words):
    from screen.dyecell.rank import rank_dyes

    good, ox, med = dye_cell
    bad = good.copy()
    bad[column] = value
    with pytest.raises(errors.InputError, match=f"dye table: line 2 \\(id 'a'\\), column {column} = .*{words}"):
        rank_dyes(bad, ox, med)


def test_rank_dyes_keeps_ranking_calibrated_rows_and_a_transparent_dye(dye_cell):
    from screen.dyecell.rank import CALIBRATED_SOURCE, rank_dyes

    good, ox, med = dye_cell
    assert rank_dyes(good, ox, med)["passes"].tolist() == [True]
    computed = good.copy()
    computed["source"], computed["e_ox_v_nhe"] = CALIBRATED_SOURCE, 3.5  # a calibration far from its data: ranked
    assert rank_dyes(computed, ox, med)["viable"].tolist() == [False]
    clear = good.copy()
    clear["e00_ev"] = 4.91  # a transparent molecule: not viable, "absorbs no sunlight" (not a unit slip)
    assert rank_dyes(clear, ox, med)["flags"].tolist() == ["no_sunlight"]


def test_rank_dyes_holds_oxide_mediator_and_model_to_the_file_checks(dye_cell):
    import dataclasses

    from screen.dyecell.model import DyeCellModel
    from screen.dyecell.rank import rank_dyes

    good, ox, med = dye_cell
    with pytest.raises(errors.InputError, match=r"oxide 'tio2-anatase', potential_v_nhe = -500.0: .*millivolts"):
        rank_dyes(good, dataclasses.replace(ox, potential_v_nhe=-500.0), med)
    with pytest.raises(errors.InputError, match="vacuum-scale energy"):
        rank_dyes(good, dataclasses.replace(ox, potential_v_nhe=-4.0), med)
    with pytest.raises(errors.InputError, match=r"mediator 'co-bpy3', potential_v_nhe = 350.0: .*millivolts"):
        rank_dyes(good, ox, dataclasses.replace(med, potential_v_nhe=350.0))
    with pytest.raises(errors.InputError, match="the oxide is a Material of role 'mediator'"):
        rank_dyes(good, med, ox)
    with pytest.raises(errors.InputError, match=r"type = 'P'; allowed: 'n' .*, 'p' .* or ''"):
        rank_dyes(good, dataclasses.replace(ox, type="P"), med)  # the model read it as n-type
    assert rank_dyes(good, dataclasses.replace(ox, type=""), med)["passes"].tolist() == [True]  # n, as a file
    with pytest.raises(errors.InputError, match="min_drive_reg_ev = 5: 5 eV is above 2 eV"):
        rank_dyes(good, ox, dataclasses.replace(med, min_drive_reg_ev=5.0))
    with pytest.raises(errors.ConfigError, match=r"field dyecell.voc_loss_v: 200 is greater than the maximum of 2 "
                                                 r"\(dyecell.voc_loss_v is in V\)"):
        DyeCellModel(voc_loss_v=200)  # millivolts: refused when the model is made, not only by a ranking
    with pytest.raises(errors.ConfigError, match="the model must be a screen.dyecell.model.DyeCellModel, not dict"):
        rank_dyes(good, ox, med, {"voc_loss_v": 0.2})


# --------------------------------------------------------------------------- 5. the default model, documented


def test_rank_candidates_documents_its_default_model_as_the_fitted_one():
    doc = rank_candidates.__doc__
    assert "Scharber parameters" not in doc and "DeviceModel()" in doc and "fitted" in doc
    r = rank_candidates(_levels(), resolve_partner("y6"))
    assert r["model"].tolist() == [DeviceModel().model] == ["fitted"]


# --------------------------------------------------------------------------- 6. unit guards


@pytest.mark.parametrize("field, value", [
    ("device.loss_v", 300),             # 0.3 V written in mV
    ("device.min_delta_lumo_ev", 300),  # 0.3 eV written in meV
    ("device.min_delta_homo_ev", 300),
    ("dyecell.voc_loss_v", 200),
    ("dyecell.voc_loss_p_v", 50),
])
def test_a_loss_or_offset_in_millivolts_is_refused_naming_the_unit(field, value):
    from screen.preflight import check_sets

    section, key = field.split(".")
    unit = "V" if key.endswith("_v") else "eV"
    with pytest.raises(errors.ConfigError, match=f"field {field}: {value} is greater than the maximum of 2 "
                                                 f"\\({field} is in {unit}\\)"):
        Config.of({section: {key: value}})
    with pytest.raises(errors.ConfigError, match=f"--set {field}={value}: .*maximum of 2"):
        check_sets([f"{field}={value}"])
    # the published model's values (Scharber et al. 2006: loss 0.3 V, offsets 0.3 eV) and the bound itself pass
    for ok in (0.3, 2):
        assert Config.of({section: {key: ok}})[section][key] == ok


def test_a_device_model_in_millivolts_is_refused_when_it_is_made():
    """The model held only a lower bound; a ranking alone refused loss_v=300 (millivolts), so a Python caller of
    DeviceModel.evaluate got Voc = E_CT - 300 V, not viable for every pair, without a word."""
    with pytest.raises(errors.ConfigError, match=r"DeviceModel: field device.loss_v: 300 is greater than the "
                                                 r"maximum of 2 \(device.loss_v is in V\)"):
        DeviceModel(loss_v=300)
    with pytest.raises(errors.ConfigError, match="device.min_delta_lumo_ev"):
        DeviceModel(min_delta_lumo_ev=300)
    with pytest.raises(errors.ConfigError, match="model must be a screen.device.DeviceModel, not dict"):
        rank_candidates(_levels(), resolve_partner("y6"), {"loss_v": 0.3})


def test_levels_in_hartree_are_refused_with_the_conversion():
    from screen.levels_check import check_levels

    # HOMO -0.2, LUMO -0.14, gap 0.05 Eh; 1 Eh = 27.2114 eV (CODATA 2018: 27.211386 eV)
    with pytest.raises(errors.InputError) as err:
        check_levels(_levels(homo_ev=-0.2, lumo_ev=-0.14, gap_opt_ev=0.05), "mine.csv")
    text = str(err.value)
    assert "3 problems" in text and "-0.2 looks like hartree: write -0.2 × 27.2114 = -5.44 eV" in text
    assert "-0.14 × 27.2114 = -3.81 eV" in text and "0.05 × 27.2114 = 1.36 eV" in text
    with pytest.raises(errors.InputError, match="looks like hartree"):
        rank_candidates(_levels(homo_ev=-0.2, lumo_ev=-0.14, gap_opt_ev=0.05), resolve_partner("y6"))
    with pytest.raises(errors.InputError, match="film LUMO of -0.14 eV is no organic semiconductor's"):
        rank_candidates(_levels(lumo_ev=-0.14), resolve_partner("y6"))
    with pytest.raises(errors.InputError, match=r"partner 'p' .*column homo_ev = -0.21: .*looks like hartree"):
        rank_candidates(_levels(), _partner(homo_ev=-0.21, lumo_ev=-0.15, gap_opt_ev=0.05))
    with pytest.raises(errors.InputError, match="a HOMO of -1.5 eV is no material's .* check the units"):
        check_levels(_levels(homo_ev=-1.5), "mine.csv")


def test_no_real_material_looks_like_hartree(repo_dir):
    from screen.levels_check import FILM_LUMO_MAX_EV, HOMO_MAX_EV, row_problems

    # bounds: film HOMO of organic semiconductors -4.5...-7 eV, film LUMO -2...-4.5 eV (from memory)
    assert HOMO_MAX_EV == -2.0 and FILM_LUMO_MAX_EV == -1.0
    ref = repo_dir / "models" / "reference"
    film = []
    with open(ref / "levels_film.csv", newline="") as fh:
        film += [(float(r["homo_ev"]), float(r["lumo_ev"]), float(r["gap_opt_ev"])) for r in csv.DictReader(fh)]
    with open(ref / "devices.csv", newline="") as fh:
        for r in csv.DictReader(fh):
            for side in ("donor", "acceptor"):
                film.append(tuple(float(r[f"{side}_{c}"] or "nan") for c in ("homo_ev", "lumo_ev", "gap_opt_ev")))
    assert len(film) > 50
    for homo, lumo, gap in film:
        assert not [p for p in row_problems(homo, lumo, gap, "film") if "hartree" in p[2] or "no material" in p[2]
                    or "no organic semiconductor" in p[2]], (homo, lumo, gap)
    # the gas scale: HOMO = -IP and LUMO = -EA of the same molecules (EA of 0-1 eV gives a LUMO of 0...-1 eV)
    with open(ref / "ip_gas.csv", newline="") as fh:
        ip = {r["name"]: float(r["value_ev"]) for r in csv.DictReader(fh) if r["value_ev"]}
    with open(ref / "ea_gas.csv", newline="") as fh:
        ea = {r["name"]: float(r["value_ev"]) for r in csv.DictReader(fh) if r["value_ev"]}
    both = sorted(set(ip) & set(ea))
    assert len(both) > 10 and any(-1.0 < -ea[n] < 0 for n in both)
    for name in both:
        assert not row_problems(-ip[name], -ea[name], math.nan, "gas"), name
    for p in ("y6", "pm6", "c60", "itic", "scharber-reference-acceptor"):
        part = resolve_partner(p)
        assert not row_problems(part.homo_ev, part.lumo_ev, part.gap_opt_ev, part.scale), p
