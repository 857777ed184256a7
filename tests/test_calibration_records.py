"""What a calibration records beside its models, and decisions taken on structured results, not on message words.

Findings of a review of the lab-calibration change:

A. whether ``models/<pid>/reference_folder.json`` was written, and which folder it named, depended on which folders
   ``fingerprint`` had hashed earlier in the process (module state): the caller now gives the folder;
B. the dye models' fingerprint carried an absolute path of one machine (``reference_file``): it is named in a side
   record (``reference_file.json``) instead, and the shipped dye models load as before;
C. ``check_calibration`` branched on the words ``leave calibration.models out`` of ``reference_ways``' texts, and the
   dye reference check rewrote ``check_dye_file``'s messages and passed stand-in values for a missing target.

No test computes a molecule; the one fit is a dye refit from the raw values stored beside the shipped models (a
second or two). The numbers compared are the project's own shipped files (a refit of the same data must reproduce
them).
"""

from __future__ import annotations

import hashlib
import json
import shutil
from pathlib import Path

import pandas as pd
import pytest

from screen.config import Config

REPO = Path(__file__).resolve().parent.parent
PID = Config.of({}).protocol_id
SHIPPED = REPO / "models" / PID
SHIPPED_DYE = REPO / "models" / "dyecell"


def _reference_copy(tmp_path: Path, name: str) -> Path:
    folder = tmp_path / name
    shutil.copytree(REPO / "models" / "reference", folder)
    return folder


def _shipped_models_and_raw():
    from screen.calibrate import load_models

    models = load_models(SHIPPED, check=False)
    computed = pd.read_csv(SHIPPED / "reference_raw.csv", keep_default_na=False, na_values=[""])
    return models, computed


# --------------------------------------------------------------------------- A: the folder is given, not remembered

def test_the_reference_record_names_the_folder_the_caller_gives_not_the_last_hashed(tmp_path):
    from screen.calibrate import REFERENCE_RECORD, fingerprint, save_calibration

    first, second = _reference_copy(tmp_path, "first"), _reference_copy(tmp_path, "second")  # the same data
    cfg = Config.of({})
    fp = fingerprint(cfg, first)
    assert fingerprint(cfg, second) == fp  # equal data, equal fingerprint: only the folder tells them apart
    models, computed = _shipped_models_and_raw()
    target, _ = save_calibration(models, computed, pd.DataFrame(), tmp_path / "out", fp, reference_dir=first)
    record = json.loads((target / REFERENCE_RECORD).read_text(encoding="utf-8"))
    assert record == {"reference_folder": str(first.resolve()), "reference_sha256": fp["reference_sha256"]}
    # without a folder given nothing is recorded, whatever was hashed before in this process
    target, _ = save_calibration(models, computed, pd.DataFrame(), tmp_path / "out", fp)
    assert not (target / REFERENCE_RECORD).exists()


def test_the_calibrate_stage_and_the_refit_give_their_reference_folder():
    import inspect

    import screen.calibrate as cal
    import screen.refit as refit
    import screen.stages as stages

    assert not hasattr(cal, "_FOLDER_OF_HASH")
    assert "reference_dir=args.reference" in inspect.getsource(stages._calibrate)
    assert "reference_dir=reference" in inspect.getsource(refit)


# --------------------------------------------------------------------------- B: no machine path in dye model files

def test_a_dye_refit_names_its_reference_file_beside_the_models_not_in_them(tmp_path):
    from screen.dyecell.calibrate import REFERENCE_RECORD, fitted_on, refit

    raw = pd.read_csv(SHIPPED / "reference_raw.csv", keep_default_na=False, na_values=[""])
    levels = tmp_path / "levels.csv"
    raw.to_csv(levels, index=False)
    Path(f"{levels}.meta.json").write_text(json.dumps({"protocol_id": PID}))
    ref = _reference_copy(tmp_path, "labref")
    folder = refit(levels, reference=ref, root=tmp_path / "dye")
    for name in ("e_ox", "e00"):
        fp = json.loads((folder / f"{name}.json").read_text(encoding="utf-8"))["fingerprint"]
        assert "reference_file" not in fp and str(tmp_path) not in json.dumps(fp)
    record = json.loads((folder / REFERENCE_RECORD).read_text(encoding="utf-8"))
    assert record["reference_file"] == str((ref / "dyes.csv").resolve())
    assert fitted_on(folder) == str((ref / "dyes.csv").resolve())
    # fitted on the shipped file: no record (found by its hash), as the level calibration
    again = refit(levels, root=tmp_path / "dye")
    assert again == folder and not (folder / REFERENCE_RECORD).exists()


def test_the_shipped_dye_models_are_unchanged_and_load():
    from screen.dyecell.calibrate import REFERENCE_FILE, fitted_on, load_models
    from screen.provenance import sha256_file

    # the shipped files' SHA-256 as committed (git show HEAD:models/dyecell/<pid>/*.json | sha256sum)
    committed = {
        "tblite-gfn2-ff-eaf1c554/e00.json": "d7ba56ce38c34e4dcf66bd72aac0c770e7538d2cff337689624c398da41f8d05",
        "tblite-gfn2-ff-eaf1c554/e_ox.json": "a9a7d30461df53357b452ae6999b17a190fe18e8ce66cf9267d9b4fc88fc6c9f",
        "tblite-gfn2-xtb-3ce6def9/e00.json": "0e182dc92fb4d9cd02da84284a291804744c24eba4e9c196d5a8817abce6c868",
        "tblite-gfn2-xtb-3ce6def9/e_ox.json": "52e17b41a4d90ac0ad98eac53c3bd80c4bfbac4fec557c2b0f17ce7eb5e37bb4",
    }
    for rel, sha in committed.items():
        assert hashlib.sha256((SHIPPED_DYE / rel).read_bytes()).hexdigest() == sha, rel
    for pid in {rel.split("/")[0] for rel in committed}:
        models = load_models(pid, reference=REFERENCE_FILE)
        assert set(models) == {"e_ox", "e00"}
        assert fitted_on(SHIPPED_DYE / pid) == str(REFERENCE_FILE)
        assert models["e_ox"]["fingerprint"]["reference_sha256"] == sha256_file(REFERENCE_FILE)


# --------------------------------------------------------------------------- C: structured results, not words

def test_check_calibration_follows_the_flag_of_reference_ways_not_its_words(tmp_path, monkeypatch):
    import screen.calibrate as cal
    from screen.cli_shared import data_path
    from screen.errors import ConfigError
    from screen.preflight import check_calibration

    mine = _reference_copy(tmp_path, "mine")
    film = mine / "levels_film.csv"  # one film HOMO of a lab's own (not a real measurement): other reference data
    text = film.read_text(encoding="utf-8")
    assert "-5.49,-3.64,1.80" in text
    film.write_text(text.replace("-5.49,-3.64,1.80", "-5.40,-3.64,1.80", 1), encoding="utf-8")
    cfg = Config.of({"calibration": {"reference": str(mine)}}).with_paths(data_path)

    def ways(texts, serves):
        monkeypatch.setattr(cal, "reference_ways", lambda *a, **k: cal.ReferenceWays(tuple(texts), serves))
        with pytest.raises(ConfigError) as exc:
            check_calibration(cfg, tmp_path / "run")
        return str(exc.value)

    said = ways(["use the shipped models (worded anyhow)"], True)
    assert "use the shipped models (worded anyhow)" in said and "calibrate these settings once" not in said
    said = ways(["leave calibration.models out (worded so, but the flag says no)"], False)
    assert "calibrate these settings once" in said


def test_reference_ways_says_whether_the_shipped_calibration_serves(tmp_path):
    from screen.calibrate import ReferenceWays, reference_ways

    labmodels = tmp_path / "labmodels" / PID  # another calibration, asked about the shipped reference data
    shutil.copytree(SHIPPED, labmodels)
    got = reference_ways(labmodels, "models/reference")
    assert isinstance(got, ReferenceWays) and got.shipped_serves
    assert not reference_ways(SHIPPED, "models/reference").shipped_serves


def test_the_dye_reference_check_asks_for_names_and_one_target_without_stand_ins(tmp_path, monkeypatch):
    """With the parameters proposed for check_dye_file (label, one_target) the reference check passes the rows as
    they are: named by column name, no stand-in value for a target a row does not give."""
    import screen.dyecell.checks as checks
    from screen.dyecell.calibrate import reference_table

    seen = {}

    def check_dye_file(frame, where="dye file", *, label="id", one_target=False):
        seen.update(frame=frame.copy(), label=label, one_target=one_target)
        return pd.to_numeric(frame["e_ox_v_nhe"], errors="coerce").to_numpy()

    monkeypatch.setattr(checks, "check_dye_file", check_dye_file)
    f = tmp_path / "dyes.csv"
    f.write_text("name,smiles,e_ox_v_nhe,e00_ev\nA,OC(=O)c1ccccc1,1.1,\nB,OC(=O)c1ccccc1C,,2.5\n", encoding="utf-8")
    table = reference_table(f)
    assert seen["label"] == "name" and seen["one_target"] is True
    assert "id" not in seen["frame"] and list(seen["frame"]["name"]) == ["A", "B"]
    assert list(seen["frame"]["e_ox_v_nhe"]) == ["1.1", ""] and list(seen["frame"]["e00_ev"]) == ["", "2.5"]
    assert table["e_ox_v_nhe"].tolist()[0] == pytest.approx(1.1) and pd.isna(table["e_ox_v_nhe"].tolist()[1])


# --------------------------------------------------------------------------- D: one comparison, one reader

def test_one_comparison_and_no_engine_version_across_engines():
    from screen.calibrate import fingerprint, fingerprint_differences, fingerprint_fields

    base = fingerprint(Config.of({}), "models/reference")
    other = {**base, "engine_version": "0.1", "protocol": {
        **base["protocol"], "electronic": {**base["protocol"]["electronic"], "engine": "xtb"}}}
    said = fingerprint_differences(other, base)
    assert said == ["electronic.engine: tblite here, xtb in the installed calibration"], said  # no "engine version"
    same_engine = {**base, "engine_version": "0.1"}
    assert fingerprint_fields(same_engine, base) == [("engine_version", base["engine_version"], "0.1")]


def test_installed_fingerprint_reads_ip_json_once_for_everyone(tmp_path):
    import inspect

    import screen.cli as cli
    import screen.preflight as preflight
    from screen.calibrate import installed_fingerprint

    assert installed_fingerprint(SHIPPED) == json.loads((SHIPPED / "ip.json").read_text())["fingerprint"]
    (tmp_path / "ip.json").write_text("[1, 2]")  # not an object: no fingerprint, no crash
    assert installed_fingerprint(tmp_path) == {}
    for source in (inspect.getsource(cli._check_out_models), inspect.getsource(cli._check_install_folder),
                   inspect.getsource(preflight.calibration_differences)):
        assert "read_json(" not in source and "json.loads(" not in source  # installed_fingerprint reads it
