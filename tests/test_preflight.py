"""Pre-flight checks: every refusal before the workflow starts is exit code 2 and one message, no traceback,
and nothing is computed (the output folder is not even created)."""

from __future__ import annotations

import fcntl
import subprocess
import sys

import pytest
import yaml

from screen.cli import main
from screen.preflight import check_out, check_sets


def _run(capsys, *args):
    rc = main(list(args))
    captured = capsys.readouterr()
    return rc, captured.out, captured.err


def _refused(capsys, *args, message: str):
    rc, out, err = _run(capsys, *args)
    assert rc == 2, (rc, out, err)
    assert message in err, err
    assert "Traceback" not in err + out
    assert len([line for line in err.splitlines() if line.startswith("dascreen:")]) == 1, err
    return err


@pytest.fixture()
def good(tmp_path):
    path = tmp_path / "good.csv"
    path.write_text("id,smiles\nA,c1ccsc1\n", encoding="utf-8")
    return path


def test_missing_input_names_a_close_file(capsys, tmp_path, good):
    out = tmp_path / "out"
    err = _refused(capsys, "run", str(tmp_path / "goood.csv"), "--out", str(out), message="does not exist")
    assert "did you mean" in err and "good.csv" in err
    assert not out.exists()  # nothing started


def test_empty_input_file(capsys, tmp_path):
    empty = tmp_path / "empty.csv"
    empty.write_text("")
    _refused(capsys, "run", str(empty), "--out", str(tmp_path / "o"), message="is empty: nothing to screen")
    assert not (tmp_path / "o").exists()


def test_header_without_rows(capsys, tmp_path):
    path = tmp_path / "header.csv"
    path.write_text("id,smiles\n")
    _refused(capsys, "run", str(path), "--out", str(tmp_path / "o"), message="holds a header but no rows")


def test_sdf_without_records(capsys, tmp_path):
    path = tmp_path / "none.sdf"
    path.write_text("just text\n")
    _refused(capsys, "run", str(path), "--out", str(tmp_path / "o"), message="holds no SD record")


def test_missing_smiles_column(capsys, tmp_path):
    path = tmp_path / "cols.csv"
    path.write_text("id,structure\nA,c1ccsc1\n")
    _refused(capsys, "run", str(path), "--out", str(tmp_path / "o"), message="no 'smiles' column")


def test_unknown_file_type(capsys, tmp_path):
    path = tmp_path / "list.xlsx"
    path.write_text("x")
    _refused(capsys, "run", str(path), "--out", str(tmp_path / "o"), message="unknown candidate file type")


def test_unknown_partner_says_did_you_mean(capsys, tmp_path, good):
    err = _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--partner", "y7",
                   message="unknown partner 'y7'")
    assert "Did you mean y6?" in err


def test_unknown_partner_in_a_rank_list(capsys, tmp_path):
    levels = tmp_path / "lv.csv"
    levels.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale\nKF-D01,-5.4,-3.9,1.5,film\n")
    err = _refused(capsys, "rank", "--levels", str(levels), "--out", str(tmp_path / "o"), "--partner",
                   "y6,c-70", message="unknown partner 'c-70'")
    assert "Did you mean c70" in err
    err = _refused(capsys, "rank", "--levels", str(levels), "--out", str(tmp_path / "o"), "--partner",
                   "id:KF-D1", message="no row with id 'KF-D1'")
    assert "did you mean id:KF-D01" in err
    assert not (tmp_path / "o").exists()


def test_set_key_typo_blames_the_set(capsys, tmp_path, good):
    err = _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--set", "device.eqee=0.7",
                   message="--set device.eqee=0.7: no field device.eqee")
    assert "did you mean device.eqe?" in err and "config.yaml" not in err


def test_set_bad_value_lists_the_allowed_values(capsys, tmp_path, good):
    err = _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--set", "device.eqe=2",
                   message="--set device.eqe=2")
    assert "allowed for device.eqe: number > 0 and <= 1, or null" in err
    _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--set", "structures.geometry=dft",
             message="allowed for structures.geometry: one of ff, xtb")
    _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--set", "device.eqe",
             message="expected SECTION.KEY=VALUE")


def test_out_is_a_file(capsys, tmp_path, good):
    target = tmp_path / "afile"
    target.write_text("x")
    _refused(capsys, "run", str(good), "--out", str(target), message="is a file, not a folder")


def test_out_holds_something_else(capsys, tmp_path, good):
    other = tmp_path / "home"
    other.mkdir()
    (other / "thesis.tex").write_text("x")
    _refused(capsys, "run", str(good), "--out", str(other), message="holds no dascreen run")
    assert sorted(p.name for p in other.iterdir()) == ["thesis.tex"]
    runs = tmp_path / "results"  # a folder of earlier run folders (e.g. results/calibration) is fine
    (runs / "calibration").mkdir(parents=True)
    (runs / "calibration" / "config.yaml").write_text("{}")
    check_out(runs, good)


def test_out_holds_the_run_of_another_list(capsys, tmp_path, good):
    out = tmp_path / "run"
    out.mkdir()
    (out / "config.yaml").write_text(yaml.safe_dump({"candidates": str(tmp_path / "other.csv")}))
    err = _refused(capsys, "run", str(good), "--out", str(out), message="holds the run of")
    assert "--overwrite" in err
    check_out(out, good, overwrite=True)  # the user says so: accepted
    check_out(out, tmp_path / "other.csv")  # the same list again: a resume, accepted


def test_out_in_use_by_a_running_dascreen(capsys, tmp_path, good):
    out = tmp_path / "busy"
    out.mkdir()
    with open(out / ".dascreen.lock", "w") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX | fcntl.LOCK_NB)
        _refused(capsys, "run", str(good), "--out", str(out), message="another dascreen run is using")


def test_several_partners_for_run_are_refused_with_a_hint(capsys, tmp_path, good):
    _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--partner", "y6,c60",
             message="dascreen rank --partner a,b")


def test_check_sets_returns_the_nested_overrides():
    assert check_sets(["device.eqe=0.7", "rank.role=donor", "electronic.solvent=null"]) == \
        {"device": {"eqe": 0.7}, "rank": {"role": "donor"}, "electronic": {"solvent": None}}


def test_a_real_process_prints_one_line_and_no_traceback(tmp_path):
    empty = tmp_path / "e.csv"
    empty.write_text("")
    proc = subprocess.run([sys.executable, "-m", "screen.cli", "run", str(empty), "--out", str(tmp_path / "o")],
                          capture_output=True, text=True, timeout=300)
    assert proc.returncode == 2 and proc.stderr.strip().count("\n") == 0, proc.stderr
    assert "Traceback" not in proc.stderr


# --------------------------------------------------------------------------- energy scales and calibration

@pytest.fixture()
def no_workflow(monkeypatch):
    """A refusal must come before the workflow starts: starting it fails the test."""
    import screen.cli

    monkeypatch.setattr(screen.cli, "run_workflow", lambda *a, **k: pytest.fail("the workflow was started"))


def test_gas_levels_against_a_film_partner_are_refused_before_any_work(capsys, tmp_path, good, no_workflow):
    # every built-in partner is on the film scale (screen/data/partners.csv); y6 is the default partner
    err = _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--set", "levels.scale=gas",
                   message="partner 'y6' (built-in library) is on the 'film' scale")
    assert "'gas' scale (levels.scale=gas)" in err and "drop levels.scale=gas" in err and "smiles:" in err
    _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--set", "levels.scale=gas",
             "--partner", "c60", message="partner 'c60' (built-in library) is on the 'film' scale")
    film = tmp_path / "film.csv"
    film.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale,role\nmine,-6.0,-4.0,1.8,film,acceptor\n")
    _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--set", "levels.scale=gas",
             "--partner", str(film), message=f"partner 'mine' (file {film}) is on the 'film' scale")
    assert not (tmp_path / "o").exists()


def test_partners_on_the_runs_scale_pass_the_scale_check(tmp_path):
    from screen.preflight import check_partner_scales

    gas = tmp_path / "gas.csv"
    gas.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale,role\nmine,-7.6,-2.7,2.2,gas,acceptor\n")
    check_partner_scales([str(gas), "smiles:c1ccsc1", "id:A"], "gas")  # smiles:/id: are computed on the run's scale
    check_partner_scales(["y6", "c60"], "film")


def test_polymer_settings_without_calibration_are_refused_naming_the_difference(capsys, tmp_path, good,
                                                                                no_workflow):
    """The shipped calibration was fitted with polymer.n_max 4 (its fingerprint); 2 would start hours of
    reference computation as a side effect, so the run stops and says which setting differs and the ways on."""
    err = _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--set", "polymer.n_max=2",
                   message="polymer.n_max: 2 here, 4 in the shipped calibration")
    assert "nothing was computed" in err and "reference materials" in err
    assert "--set polymer.n_max=4" in err  # back to the shipped calibration
    assert "dascreen calibrate --set polymer.n_max=2 --install" in err  # calibrate once
    assert "--set calibration.refit=always" in err  # or within this run
    assert not (tmp_path / "o").exists()
    err = _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--set", "electronic.method=IPEA1-xTB",
                   message="has no shipped calibration; the closest")
    assert "electronic.method: IPEA1-xTB here, GFN2-xTB in the shipped calibration" in err
    _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--set", "polymer.n_max=2",
             "--set", "calibration.refit=never", message="calibration.refit is 'never'")


def test_opting_in_calibrates_within_the_run_and_says_what_it_costs(capsys, tmp_path, good, monkeypatch):
    import screen.cli

    calls = []
    monkeypatch.setattr(screen.cli, "run_workflow", lambda cfg, out, *a, **k: calls.append(cfg) or 0)
    rc, _, err = _run(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--set", "polymer.n_max=2",
                      "--set", "calibration.refit=always", "--dry-run")
    assert rc == 0 and len(calls) == 1 and calls[0]["polymer"]["n_max"] == 2
    assert "polymer.n_max: 2 here, 4 in the shipped calibration" in err and "hours" in err
    assert "This run does that first" in err


def test_a_calibration_of_other_settings_is_never_suggested_into_the_shipped_folder(tmp_path):
    # polymer settings and reference data are not part of the protocol id: installing their calibration into the
    # folder of the shipped one would replace it, so the refusal suggests a folder of its own and how to use it
    from pathlib import Path

    import screen
    from screen.config import Config
    from screen.errors import ConfigError
    from screen.preflight import check_calibration

    models = Path(screen.__file__).resolve().parents[1] / "models"
    cfg = Config.of({"polymer": {"n_max": 2}, "calibration": {"models": str(models)}})
    with pytest.raises(ConfigError) as err:
        check_calibration(cfg, tmp_path / "out")
    text = str(err.value)
    assert f"--install {models.with_name('models-custom')}" in text
    assert f"--set calibration.models={models.with_name('models-custom')}" in text
    assert f"--install {models} " not in text + " "
