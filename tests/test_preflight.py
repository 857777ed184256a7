"""Pre-flight checks: every refusal before the workflow starts is exit code 2 and one message, no traceback,
and nothing is computed (the output folder is not even created)."""

from __future__ import annotations

import fcntl
import os
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
    assert "Did you mean y6 (acceptor)?" in err  # candidates without roles: each suggestion says its role


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
        _refused(capsys, "run", str(good), "--out", str(out), message="another run (dascreen or snakemake) is using")


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


def test_the_xtb_geometry_protocol_is_found_with_its_earlier_embedding_rule(capsys, tmp_path, good, no_workflow):
    """The xTB-geometry calibration was computed before structures.rigid_embedding existed (rule cycle_rank, left
    out of its fingerprint): with the new default the run is refused with the one setting that finds it."""
    err = _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--set", "structures.geometry=xtb",
                   message="structures.rigid_embedding: fused_system (the default) here, cycle_rank in the shipped "
                           "calibration")
    assert "use the shipped calibration: add --set structures.rigid_embedding=cycle_rank\n" in err  # not "drop"
    assert "tblite-gfn2-xtb-3ce6def9" in err and not (tmp_path / "o").exists()
    # calibrating fits the run's own settings, not only those that differ from the closest calibration
    assert "dascreen calibrate --set structures.geometry=xtb --install" in err


def test_a_rerun_into_a_folder_of_another_protocol_says_so(capsys, tmp_path, good, monkeypatch):
    # an upgrade audit: a new default protocol recomputed an earlier run's levels and rankings without a word
    import yaml

    import screen.cli
    from screen.config import Config

    monkeypatch.setattr(screen.cli, "run_workflow", lambda *a, **k: 0)
    out = tmp_path / "o"
    out.mkdir()
    old = Config.of({"candidates": str(good.resolve()), "out": str(out)}).to_dict()
    del old["structures"]["rigid_embedding"]  # as written before the option existed
    (out / "config.yaml").write_text(yaml.safe_dump(old), encoding="utf-8")
    rc, _, err = _run(capsys, "run", str(good), "--out", str(out), "--dry-run")
    assert rc == 0 and f"holds a run of protocol tblite-gfn2-ff-cf90d5d7; these settings give {Config().protocol_id}" \
        in err


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


# --------------------------------------------------------------------------- a new user's robustness audit

@pytest.mark.parametrize("make, said", [
    (lambda p: None, "no such folder"),
    (lambda p: p.write_text("cores: 1\n"), "is a file, not a folder"),
    (lambda p: p.mkdir(), "the folder holds no config.yaml"),
    (lambda p: (p.mkdir(), (p / "config.yaml").write_text("cores: [1\n")), "not valid YAML at line 2"),
    (lambda p: (p.mkdir(), (p / "config.yaml").write_bytes(b"cores: 1\n\xff\n")), "not UTF-8 text"),
    (lambda p: (p.mkdir(), (p / "config.yaml").write_text("- cores\n")), "holds list, not a mapping"),
    (lambda p: (p.mkdir(), (p / "config.yaml").write_text("coress: 2\n")), "'coress', not an option of the workflow"),
    (lambda p: (p.mkdir(), (p / "config.yaml").write_text("executor: nosuchexecutor\n")), "is not installed"),
])
def test_a_profile_that_is_no_profile_folder_is_refused_before_the_run(capsys, tmp_path, good, no_workflow, make,
                                                                      said):
    # a missing --profile was ignored (the run went on locally, exit 0); a broken config.yaml stopped the workflow
    # engine with exit 1 and its 80-line usage text
    profile = tmp_path / "prof"
    make(profile)
    err = _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--profile", str(profile),
                   message=f"--profile {profile}")
    assert said in err and "usage:" not in err
    assert not (tmp_path / "o").exists()


def test_the_shipped_local_profile_passes_the_profile_check():
    from pathlib import Path

    from screen.preflight import check_profile

    check_profile(Path(__file__).resolve().parent.parent / "profiles" / "local-generic")


@pytest.fixture()
def dry(monkeypatch):
    """The workflow is not started; the configuration it would get is recorded."""
    import screen.cli

    calls = []
    monkeypatch.setattr(screen.cli, "run_workflow", lambda cfg, out, *a, **k: calls.append(cfg) or 0)
    return calls


def test_run_refuses_an_id_partner_that_is_no_candidate_before_any_work(capsys, tmp_path, good, no_workflow):
    # found by the ranking job after every level was computed: exit 1, 47 lines and a traceback
    err = _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--partner", "id:NOPE",
                   message="partner 'id:NOPE': no candidate with id 'NOPE' in")
    assert "Traceback" not in err
    err = _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--partner", "id:a",
                   message="no candidate with id 'a'")
    assert "did you mean id:A?" in err
    assert not (tmp_path / "o").exists()


def test_run_asks_for_the_role_of_a_roleless_partner_and_takes_role(capsys, tmp_path, dry):
    both = tmp_path / "both.csv"
    both.write_text("id,smiles,role\nD1,c1ccsc1,donor\nA1,c1ccoc1,acceptor\nN1,c1ccncc1,\n", encoding="utf-8")
    for partner, said in (("smiles:c1ccccc1", "has no role of its own"), ("id:N1", "its row in")):
        err = _refused(capsys, "run", str(both), "--out", str(tmp_path / "o"), "--partner", partner,
                       message="--role donor|acceptor")
        assert said in err and "the candidates do not imply one" in err
    err = _refused(capsys, "run", str(both), "--out", str(tmp_path / "o"), "--partner", "smiles:c1ccccc1",
                   message="has no role of its own")
    assert f"the role column of {both}" in err  # the run's own file, not "the levels file"
    assert not dry and not (tmp_path / "o").exists()
    # `dascreen run` has --role now (the message told users to pass it); it is rank.role
    rc, _, err = _run(capsys, "run", str(both), "--out", str(tmp_path / "o"), "--partner", "smiles:c1ccccc1",
                      "--role", "donor", "--dry-run")
    assert rc == 0 and len(dry) == 1 and dry[0]["rank"]["role"] == "donor", err
    _refused(capsys, "run", str(both), "--out", str(tmp_path / "o"), "--role", "donor", "--set", "rank.role=acceptor",
             message="--role donor and --set rank.role=acceptor give rank.role two values")


@pytest.mark.parametrize("item, field", [
    ("rank.target_pce_pct=.nan", "rank.target_pce_pct"),
    ("rank.gap_min_ev=.nan", "rank.gap_min_ev"),
    ("dyecell.target_pce_pct=.nan", "dyecell.target_pce_pct"),
    ("device.eqe=.nan", "device.eqe"),
    ("rank.gap_max_ev=.inf", "rank.gap_max_ev"),
])
def test_a_setting_that_is_not_a_finite_number_is_refused(capsys, tmp_path, good, no_workflow, item, field):
    # `--set rank.target_pce_pct=.nan` ranked with "target nan % PCE" and P(PCE > target) = 0 for every row;
    # `rank.gap_min_ev=.nan` switched the gap window off (NaN passes every min/max comparison)
    err = _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--set", item,
                   message=f"--set {item}: ")
    assert "not a finite number" in err and field in err
    section, key = field.split(".")
    value = ".inf" if "inf" in item else ".nan"
    cfg = tmp_path / "mine.yaml"
    cfg.write_text(f"{section}:\n  {key}: {value}\n", encoding="utf-8")
    err = _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--config", str(cfg),
                   message=f"field {field}: ")
    assert "not a finite number" in err
    assert not (tmp_path / "o").exists()


def test_calibration_models_that_do_not_exist_are_named_as_such(capsys, tmp_path, good, no_workflow):
    # said "no calibration ... calibrate these settings once (hours)"
    missing = tmp_path / "nonexist"
    err = _refused(capsys, "run", str(good), "--out", str(tmp_path / "o"), "--set", f"calibration.models={missing}",
                   message=f"calibration.models {missing} does not exist")
    assert "hours" not in err and "dascreen calibrate" not in err
    assert not (tmp_path / "o").exists()


@pytest.mark.parametrize("command", ["run", "rank", "dyecell", "store", "calibrate"])
def test_a_config_file_that_is_not_utf8_is_refused_naming_it(capsys, tmp_path, good, no_workflow, command):
    binary = tmp_path / "bin.yaml"
    binary.write_bytes(b"rank:\n  seed: 1\n\xff\xfe\n")
    out = tmp_path / "o"
    args = {"run": ["run", str(good), "--out", str(out)],
            "rank": ["rank", "--levels", str(_levels(tmp_path)), "--out", str(out)],
            "dyecell": ["dyecell", str(good), "--out", str(out)],
            "store": ["store", "list"],
            "calibrate": ["calibrate", "--out", str(out)]}[command]
    err = _refused(capsys, *args, "--config", str(binary), message=f"{binary}: the config file is not UTF-8 text")
    assert "UnicodeDecodeError" not in err
    assert not out.exists()


def _levels(tmp_path):
    path = tmp_path / "lv.csv"
    path.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale,role\nKF-D01,-5.4,-3.9,1.5,film,donor\n", encoding="utf-8")
    return path


def test_a_run_folder_whose_config_yaml_is_not_utf8_is_refused(capsys, tmp_path, good, no_workflow):
    out = tmp_path / "o"
    out.mkdir()
    (out / "config.yaml").write_bytes(b"candidates: x\n\xff\n")
    (out / "levels.csv").write_text(_levels(tmp_path).read_text())
    err = _refused(capsys, "run", str(good), "--out", str(out), message=f"{out / 'config.yaml'}")
    assert "not UTF-8 text" in err and "--overwrite" in err
    _refused(capsys, "rank", "--out", str(out), "--partner", "y6",
             message=f"{out / 'config.yaml'}: the config file is not UTF-8 text")
    assert sorted(p.name for p in out.iterdir()) == ["config.yaml", "levels.csv"]


@pytest.mark.skipif(not os.path.isdir("/proc/self"), reason="needs /proc (a folder no one can create in)")
def test_an_out_folder_that_cannot_be_created_is_refused_naming_path_and_reason(capsys, tmp_path, good):
    # /sys/x and /proc/x gave a PermissionError traceback or a bare "[Errno 2] ..."
    from pathlib import Path

    import screen.launch
    from screen.config import Config

    started = []
    monkey = pytest.MonkeyPatch()
    monkey.setattr(screen.launch, "_start", lambda *a, **k: started.append(a) or pytest.fail("engine started"))
    try:
        err = _refused(capsys, "run", str(good), "--out", "/proc/dascreen-x", "--dry-run",
                       message="--out /proc/dascreen-x: cannot create the folder /proc/dascreen-x: ")
        err = _refused(capsys, "rank", "--levels", str(_levels(tmp_path)), "--out", "/proc/dascreen-x",
                       "--partner", "y6", message="--out /proc/dascreen-x: cannot create the folder")
        assert "Errno" not in err and "dascreen rank:" not in err  # refused before the ranking says anything
        raw = Path(__file__).resolve().parent.parent / "models" / Config().protocol_id
        _refused(capsys, "calibrate", "--from-raw", str(raw), "--out", "/proc/dascreen-x",
                 message="--out /proc/dascreen-x: cannot create the folder")
    finally:
        monkey.undo()
    assert not started


def test_an_empty_out_is_refused_by_rank_and_run(capsys, tmp_path, good, no_workflow, monkeypatch):
    # `dascreen rank --out ''` wrote into the current folder
    monkeypatch.chdir(tmp_path)
    before = sorted(p.name for p in tmp_path.iterdir())
    for args in (["rank", "--levels", str(_levels(tmp_path)), "--partner", "y6"], ["run", str(good)]):
        _refused(capsys, *args, "--out", "", message="--out '' names no folder")
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(before + ["lv.csv"])


def test_partner_suggestions_keep_to_the_role_the_candidates_need(capsys, tmp_path):
    # an acceptor abbreviation missing from the library got "Did you mean pcdtbt?" (a donor polymer)
    donors = _levels(tmp_path)
    err = _refused(capsys, "rank", "--levels", str(donors), "--out", str(tmp_path / "o"), "--partner", "pcdtbx",
                   message="unknown partner 'pcdtbx'")
    assert "Did you mean idtbr? (only acceptors are named: the candidates are donors)" in err
    assert "Did you mean pcdtbt" not in err
    err = _refused(capsys, "rank", "--levels", str(donors), "--out", str(tmp_path / "o"), "--partner", "ptb8",
                   "--role", "acceptor", message="unknown partner 'ptb8'")
    assert "Did you mean pcdtbt or ptb7-th? (only donors are named" in err
    plain = tmp_path / "plain.csv"
    plain.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale\nX1,-5.4,-3.9,1.5,film\n", encoding="utf-8")
    err = _refused(capsys, "rank", "--levels", str(plain), "--out", str(tmp_path / "o"), "--partner", "pcdtbx",
                   message="unknown partner 'pcdtbx'")
    assert "Did you mean pcdtbt (donor) or idtbr (acceptor)?" in err  # no role known: each with its role
    both = tmp_path / "cands.csv"
    both.write_text("id,smiles,role\nD1,c1ccsc1,donor\n", encoding="utf-8")
    err = _refused(capsys, "run", str(both), "--out", str(tmp_path / "o"), "--partner", "pcdtbx",
                   message="unknown partner 'pcdtbx'")
    assert "Did you mean idtbr? (only acceptors" in err
    assert not (tmp_path / "o").exists()


def test_run_help_says_what_a_dry_run_writes(capsys):
    with pytest.raises(SystemExit):
        main(["run", "--help"])
    text = " ".join(capsys.readouterr().out.split())
    assert "run nothing" not in text and "OUT/config.dry-run.yaml" in text and "--role {donor,acceptor}" in text


def test_a_truncated_gzipped_sd_file_is_refused_in_one_line(tmp_path):
    # a robustness audit: a truncated .sdf.gz gave an EOFError traceback from the preflight record count
    import gzip

    from screen.errors import InputError
    from screen.preflight import check_candidates

    whole = gzip.compress(b"\n  x\n\n  0  0  0  0  0  0  0  0  0  0999 V2000\nM  END\n$$$$\n" * 50)
    path = tmp_path / "cut.sdf.gz"
    path.write_bytes(whole[: len(whole) // 2])
    with pytest.raises(InputError, match="cannot be read as UTF-8 SD file"):
        check_candidates(path)
