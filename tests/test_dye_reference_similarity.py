"""Dye-cell mode: a dye whose structure is unlike every calibration dye is told so (synthetic levels; no engine).

The dye models (``models/dyecell/<protocol>/``) are fitted on ~30 reference dyes, nearly all triarylamine,
indoline, coumarin or squaraine push-pull dyes with a cyanoacrylic or carboxylic acid. An audit found a BODIPY
dye's E(S⁺/S) predicted at 1.37 V vs NHE where about 1.75 V is measured (from memory), and a dye of only C, H, N,
O and S unlike every calibration dye was told nothing. The dye table now carries ``reference_similarity`` (nearest-neighbour similarity to the ``e_ox`` model's
reference dyes, :func:`screen.calibration.domain.nearest_similarity` on bits) and the ranking the info flag
``unlike_reference_dyes`` below :data:`screen.flags.FAR_FROM_REFERENCE_SIMILARITY` (0.30, the threshold of the
bulk-heterojunction ``far_from_reference``).

The raw xTB values below are synthetic (IP 12.0 eV, EA 6.0 eV give E(S⁺/S) ≈ 1.2 V vs NHE and E₀₋₀ ≈ 2.6 eV with
the shipped models): the similarity depends only on the structure.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from screen.dyecell import calibrate as dcal
from screen.dyecell.flags import FLAGS, INFO_FLAGS
from screen.dyecell.library import resolve_mediator, resolve_oxide
from screen.dyecell.options import RankOptions
from screen.dyecell.rank import dye_table, dyes_from_file, rank_dyes

#: meso-(4-carboxyphenyl)-1,3,5,7-tetramethyl BODIPY: boron and fluorine, and a core unlike any calibration dye
BODIPY = "Cc1cc(C)n2c1C(c1ccc(C(=O)O)cc1)=C1C(C)=CC(C)=[N+]1[B-]2(F)F"
#: perylene-3-carboxylic acid: only C, H and O (all in the calibration set), but no dye of the set looks like it
PERYLENE_ACID = "OC(=O)c1ccc2c3cccc4cccc(c5cccc1c25)c43"
_RAW = {"xtb_ip_ev": 12.0, "xtb_ea_ev": 6.0, "xtb_homo_ev": -10.2, "xtb_lumo_ev": -8.5, "xtb_gap_ev": 1.7}
_FAST = RankOptions(n_samples=200)


def _folder() -> Path:
    """A shipped dye-model folder (any protocol: the similarity uses only the reference dyes' structures)."""
    return next(p for p in sorted(dcal.MODELS_DIR.iterdir()) if (p / "e_ox.json").is_file()
                and (p / "e00.json").is_file())


def _models() -> dict:
    return dcal.load_models(None, folder=_folder())


def _d35() -> str:
    ref = dcal.reference_table()
    return str(ref.loc[ref["name"].eq("D35"), "smiles"].iloc[0])


def _rows(**smiles) -> pd.DataFrame:
    return pd.DataFrame([{"id": k, "smiles": s, "status": "ok", **_RAW} for k, s in smiles.items()])


def _rank(table: pd.DataFrame) -> pd.DataFrame:
    return rank_dyes(table, resolve_oxide("tio2-anatase"), resolve_mediator("co-bpy3"), options=_FAST).set_index("id")


def test_the_flag_is_information_and_says_why():
    assert "unlike_reference_dyes" in INFO_FLAGS
    text = FLAGS["unlike_reference_dyes"].text
    assert "0.30" in text and "calibration" in text and "extrapolation" in text and "σ" in text


def test_a_bodipy_dye_is_unlike_every_calibration_dye():
    cal = dcal.apply_models(_rows(bodipy=BODIPY), _models())
    assert cal.loc[0, "reference_similarity"] < 0.30
    assert bool(cal.loc[0, "unlike_reference_dyes"])
    ranking = _rank(dye_table(_rows(bodipy=BODIPY), _models()))
    assert "unlike_reference_dyes" in ranking.loc["bodipy", "flags"].split(";")
    assert ranking.loc["bodipy", "reference_similarity"] < 0.30


def test_a_reference_dye_is_like_itself_and_not_flagged():
    table = dye_table(_rows(d35=_d35()), _models())
    assert table.loc[0, "reference_similarity"] == 1.0 and not bool(table.loc[0, "unlike_reference_dyes"])
    ranking = _rank(table)
    assert ranking.loc["d35", "reference_similarity"] == 1.0
    assert "unlike_reference_dyes" not in ranking.loc["d35", "flags"].split(";")


def test_the_flag_is_about_structure_not_only_elements():
    # no element outside the calibration set (no element_uncalibrated), yet no calibration dye is a rylene
    ranking = _rank(dye_table(_rows(perylene=PERYLENE_ACID, d35=_d35()), _models()))
    codes = ranking.loc["perylene", "flags"].split(";")
    assert "unlike_reference_dyes" in codes and "element_uncalibrated" not in codes
    assert ranking.loc["perylene", "reference_similarity"] < 0.30
    # two decimals, as the bulk-heterojunction column is judged on what is written
    assert ranking.loc["perylene", "reference_similarity"] == round(ranking.loc["perylene", "reference_similarity"], 2)


def test_rows_without_a_computed_structure_get_no_similarity():
    rows = pd.concat([_rows(bodipy=BODIPY, nosmiles=""),
                      pd.DataFrame([{"id": "failed", "smiles": BODIPY, "status": "failed",
                                     **{k: np.nan for k in _RAW}}])], ignore_index=True)
    cal = dcal.apply_models(rows, _models())
    assert math.isnan(cal.loc[1, "reference_similarity"]) and not bool(cal.loc[1, "unlike_reference_dyes"])
    assert math.isnan(cal.loc[2, "reference_similarity"]) and not bool(cal.loc[2, "unlike_reference_dyes"])


def test_measured_levels_get_no_similarity_and_no_flag():
    # a user's own measured potentials: nothing was calibrated from the structure, whatever it is
    table = dyes_from_file(pd.DataFrame({"id": ["bodipy"], "smiles": [BODIPY], "e_ox_v_nhe": [1.75],
                                         "e00_ev": [2.4]}))
    assert math.isnan(table.loc[0, "reference_similarity"]) and not bool(table.loc[0, "unlike_reference_dyes"])
    ranking = _rank(table)
    assert "unlike_reference_dyes" not in ranking.loc["bodipy", "flags"].split(";")
    assert math.isnan(ranking.loc["bodipy", "reference_similarity"])


def test_the_stage_writes_column_and_flag_to_ranking_csv(tmp_path):
    from screen.dyecell.stage import run_dyecell

    folder = _folder()
    levels = tmp_path / "levels.csv"
    _rows(bodipy=BODIPY, d35=_d35()).to_csv(levels, index=False)
    Path(f"{levels}.meta.json").write_text(json.dumps({"protocol_id": folder.name}))
    path = run_dyecell(levels, tmp_path / "out", oxide="tio2-anatase", mediator="co-bpy3",
                       models_root=folder.parent, settings={"n_samples": 200}, report=False)
    ranking = pd.read_csv(path, keep_default_na=False, dtype={"id": str}).set_index("id")
    assert "reference_similarity" in ranking.columns
    assert float(ranking.loc["bodipy", "reference_similarity"]) < 0.30
    assert "unlike_reference_dyes" in ranking.loc["bodipy", "flags"].split(";")
    assert float(ranking.loc["d35", "reference_similarity"]) == 1.0
    assert "unlike_reference_dyes" not in ranking.loc["d35", "flags"].split(";")
    meta = json.loads((path.parent / "ranking.meta.json").read_text())
    assert "0.30" in meta["flag_text"]["unlike_reference_dyes"]

    measured = tmp_path / "measured.csv"
    pd.DataFrame({"id": ["bodipy"], "smiles": [BODIPY], "e_ox_v_nhe": [1.75], "e00_ev": [2.4]}).to_csv(measured,
                                                                                                       index=False)
    path = run_dyecell(measured, tmp_path / "out2", oxide="tio2-anatase", mediator="co-bpy3",
                       settings={"n_samples": 200}, report=False)
    ranking = pd.read_csv(path, keep_default_na=False, dtype={"id": str}).set_index("id")
    assert ranking.loc["bodipy", "reference_similarity"] == ""
    assert "unlike_reference_dyes" not in ranking.loc["bodipy", "flags"].split(";")
