"""An installed calibration is replaced only when asked, and a lab's own reference data are the ones fitted on.

The findings of a second lab's audit (adopting dascreen with its own reference data):

1. ``dascreen calibrate --out <repository>`` fitted straight into ``<repository>/models/<protocol-id>``;
2. ``--install`` compared only the reference hash: other polymer settings replaced an installed calibration;
3. ``dascreen dyecell --refit`` fitted the dye models on the shipped ``dyes.csv`` whatever ``calibration.reference``
   said, and the dye reference rows were not checked (a potential vs Ag/AgCl dropped, millivolts fitted);
4. with ``calibration.models`` set and ``calibration.reference`` forgotten, the fix offered was a refit on the
   shipped reference data under a custom name;
5. ``dascreen calibrate`` now prints the shipped calibration's figures beside the new ones.

No test computes a molecule: every fit is a refit from the raw values stored beside the shipped models, two in this
file (``lab_fit``, ``shipped_fit``: each some 5 to 15 s of leave-one-out fits on a 2-core machine); the check of
``--install`` after the fit is called directly on the second one's output.
Numbers checked against the shipped files are the project's own (a refit of the same data must reproduce them);
the Ag/AgCl offset is the one of ``screen/data/electrodes.csv`` (Bard and Faulkner, Electrochemical Methods, 2nd ed.
(2001), +0.197 V vs NHE for saturated KCl, as recorded there).
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pandas as pd
import pytest

from screen.cli import main
from screen.config import Config

REPO = Path(__file__).resolve().parent.parent
PID = Config.of({}).protocol_id
SHIPPED = REPO / "models" / PID
MODELS = ("ip", "ea", "gap_opt", "homo_film", "lumo_film", "gap_opt_film")
#: E vs NHE of the saturated Ag/AgCl electrode [V] (screen/data/electrodes.csv: Bard and Faulkner 2001)
AG_AGCL_SAT_V = 0.197


def _cli(capsys, *args):
    rc = main([str(a) for a in args])
    captured = capsys.readouterr()
    return rc, captured.out, captured.err


def _one_line(err: str) -> None:
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err, err


def _my_reference(tmp_path: Path, name: str = "myref") -> Path:
    """A copy of the shipped reference data with one film HOMO changed (a lab's own value; not a real measurement)."""
    mine = tmp_path / name
    shutil.copytree(REPO / "models" / "reference", mine)
    film = mine / "levels_film.csv"
    text = film.read_text(encoding="utf-8")
    assert "-5.49,-3.64,1.80" in text
    film.write_text(text.replace("-5.49,-3.64,1.80", "-5.40,-3.64,1.80", 1), encoding="utf-8")
    return mine


def _installed_copy(folder: Path) -> Path:
    """A copy of the shipped calibration installed in ``folder`` (``folder/<protocol-id>``)."""
    shutil.copytree(SHIPPED, folder / PID)
    return folder / PID


def _bytes(folder: Path) -> dict:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir()) if p.is_file()}


def _quiet_cli(*args) -> tuple[int, str, str]:
    """``dascreen ARGS`` in this process, its output captured (for module fixtures, where capsys is not at hand)."""
    import contextlib
    import io

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        rc = main([str(a) for a in args])
    return rc, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def lab_fit(tmp_path_factory):
    """A lab's calibration: the shipped raw values refitted on its own reference data, installed (one refit)."""
    tmp = tmp_path_factory.mktemp("lab")
    mine = _my_reference(tmp)
    rc, out, err = _quiet_cli("calibrate", "--from-raw", SHIPPED, "--reference", mine, "--out", tmp / "cal",
                              "--install", tmp / "labmodels")
    assert rc == 0, err
    return {"tmp": tmp, "reference": mine, "out": tmp / "cal", "installed": tmp / "labmodels" / PID, "stdout": out}


@pytest.fixture(scope="module")
def shipped_fit(tmp_path_factory):
    """The shipped raw values refitted on the shipped reference data and installed over a copy of the shipped
    calibration (one refit): the same numbers, so installed without --replace-installed."""
    tmp = tmp_path_factory.mktemp("same")
    _installed_copy(tmp / "models")
    rc, out, err = _quiet_cli("calibrate", "--from-raw", SHIPPED, "--install", tmp / "models", "--out", tmp / "cal")
    return {"rc": rc, "stdout": out, "stderr": err, "installed": tmp / "models" / PID,
            "target": tmp / "cal" / "models" / PID}


# --------------------------------------------------------------------------- 1: --out over an installed calibration

def test_out_whose_models_are_the_shipped_calibration_is_refused(tmp_path, capsys, monkeypatch, no_workflow):
    # a repository whose models/<protocol-id> is the shipped calibration (the package's own tree, patched to a copy)
    import screen.config

    repo = tmp_path / "repo"
    _installed_copy(repo / "models")
    shutil.copytree(REPO / "models" / "reference", repo / "models" / "reference")
    monkeypatch.setattr(screen.config, "PACKAGE_ROOT", repo)
    monkeypatch.chdir(tmp_path)
    before = _bytes(repo / "models" / PID)
    # even with the shipped data (the same numbers): --out is a work folder, never the shipped calibration
    rc, _, err = _cli(capsys, "calibrate", "--from-raw", SHIPPED, "--out", repo)
    assert rc == 2 and f"{repo / 'models' / PID} is the shipped calibration" in err, err
    assert "choose a new --out" in err and "--install DIR" in err
    _one_line(err)
    assert _bytes(repo / "models" / PID) == before and not (repo / ".dascreen-calibrate.json").exists()


def test_out_holding_an_installed_calibration_of_other_data_is_refused(tmp_path, capsys):
    lab = tmp_path / "lab"  # e.g. a copy of the repository, or a folder installed with --install lab/models
    installed = _installed_copy(lab / "models")
    before = _bytes(installed)
    mine = _my_reference(tmp_path)
    rc, _, err = _cli(capsys, "calibrate", "--from-raw", SHIPPED, "--reference", mine, "--out", lab)
    assert rc == 2 and "holds an installed calibration" in err and "fitted on other reference data" in err, err
    assert str(mine) in err and "choose a new --out" in err
    _one_line(err)
    assert _bytes(installed) == before


def test_a_calibration_work_folder_is_refitted_as_before(lab_fit, tmp_path):
    # the output of an earlier `dascreen calibrate --out` is that command's to replace, whatever the data; the same
    # folder without the mark of that command is an installed calibration
    from screen.calibrate import fingerprint
    from screen.cli import CALIBRATE_MARK, _check_out_models
    from screen.errors import ConfigError

    out = tmp_path / "cal"
    shutil.copytree(lab_fit["out"], out)
    from screen.config import data_path

    cfg = Config.of({}).with_paths(data_path)
    expected = fingerprint(cfg, cfg["calibration"]["reference"])  # the shipped data: not the lab's
    assert (out / CALIBRATE_MARK).is_file()
    _check_out_models(out, "cal", cfg, expected)
    (out / CALIBRATE_MARK).unlink()
    with pytest.raises(ConfigError, match="holds an installed calibration"):
        _check_out_models(out, "cal", cfg, expected)


# --------------------------------------------------------------------------- 2: --install compares every setting

def test_install_over_a_calibration_of_other_polymer_settings_is_refused(tmp_path, capsys):
    installed = _installed_copy(tmp_path / "fake_models")
    before = _bytes(installed)
    rc, _, err = _cli(capsys, "calibrate", "--from-raw", SHIPPED, "--set", "polymer.fit_rms_tol_ev=0.2",
                      "--install", tmp_path / "fake_models", "--out", tmp_path / "cal")
    assert rc == 2, err
    assert "polymer.fit_rms_tol_ev: 0.2 here, 0.05 in the installed one" in err  # 0.05: the schema default
    assert "--replace-installed" in err and "--set polymer.fit_rms_tol_ev=0.2" in err
    _one_line(err)
    assert _bytes(installed) == before and not (tmp_path / "cal").exists()  # refused before the fit


def test_install_over_the_same_settings_but_other_numbers_is_refused(shipped_fit, tmp_path):
    # same fingerprint, other coefficients (e.g. fitted on other raw values): not replaced without being asked. The
    # check `dascreen calibrate --install` makes after its fit, on the fit of shipped_fit (no third refit)
    from screen.calibrate import load_models
    from screen.cli import _check_install_numbers
    from screen.config import data_path
    from screen.errors import ConfigError

    assert shipped_fit["rc"] == 0, shipped_fit["stderr"]
    cfg = Config.of({}).with_paths(data_path)
    target = shipped_fit["target"]
    models = load_models(target, cfg)
    installed = _installed_copy(tmp_path / "models")
    _check_install_numbers(installed, target, models, cfg, str(tmp_path / "models"))  # the same numbers: goes on
    ip = json.loads((installed / "ip.json").read_text())
    ip["model"]["intercept"] += 0.1
    (installed / "ip.json").write_text(json.dumps(ip))
    before = _bytes(installed)
    with pytest.raises(ConfigError) as exc:
        _check_install_numbers(installed, target, models, cfg, str(tmp_path / "models"))
    err = str(exc.value)
    assert "but the models ip have other numbers" in err and "--replace-installed" in err, err
    assert err.endswith(f"; the new models stay in {target}") and "\n" not in err, err
    assert _bytes(installed) == before and (target / "ip.json").is_file()


def test_install_of_the_same_calibration_goes_on(shipped_fit):
    from screen.calibrate import REFERENCE_RECORD

    assert shipped_fit["rc"] == 0, shipped_fit["stderr"]
    for name in MODELS:  # the shipped numbers, as the refit reproduces them (tests/test_refit.py)
        new = json.loads((shipped_fit["installed"] / f"{name}.json").read_text())
        assert new == json.loads((SHIPPED / f"{name}.json").read_text()), name
    # fitted on the shipped reference data: no record of the folder (the shipped calibration carries no machine's
    # path; it is found by its hash)
    assert not (shipped_fit["target"] / REFERENCE_RECORD).exists() and not (SHIPPED / REFERENCE_RECORD).exists()


# --------------------------------------------------------------------------- 4: the reference folder it was fitted on

def test_the_reference_folder_is_recorded_beside_the_models_without_changing_them(lab_fit):
    from screen.calibrate import REFERENCE_RECORD, fitted_reference
    from screen.provenance import CALIBRATION_FILES

    installed = lab_fit["installed"]
    record = json.loads((installed / REFERENCE_RECORD).read_text())
    fp = json.loads((installed / "ip.json").read_text())["fingerprint"]
    assert record == {"reference_folder": str(lab_fit["reference"]), "reference_sha256": fp["reference_sha256"]}
    assert set(fp) == {"protocol_id", "protocol", "polymer", "engine_version", "reference_sha256"}  # as before
    assert REFERENCE_RECORD not in CALIBRATION_FILES  # the models' hash (calibration_record) does not include it
    assert fitted_reference(installed) == {"sha256": fp["reference_sha256"], "folder": lab_fit["reference"],
                                           "current": True}


def test_models_of_other_reference_data_name_the_folder_they_were_fitted_on(lab_fit, tmp_path):
    from screen.calibrate import REFERENCE_RECORD, CalibrationError, load_models

    mine = lab_fit["reference"]
    installed = tmp_path / "labmodels" / PID
    shutil.copytree(lab_fit["installed"], installed)
    forgot = Config.of({"calibration": {"models": str(tmp_path / "labmodels")}})  # calibration.reference forgotten
    with pytest.raises(CalibrationError) as exc:
        load_models(installed, forgot)
    text = str(exc.value)
    assert f"--set calibration.reference={mine}" in text
    assert "leave calibration.models out" in text and "--from-raw" not in text  # no shipped numbers renamed
    # another reference folder of one's own: the refit on it is offered after the folder fitted on
    other = _my_reference(tmp_path, "other")
    (other / "ip_gas.csv").write_text((other / "ip_gas.csv").read_text() + "\n", encoding="utf-8")
    with pytest.raises(CalibrationError) as exc:
        load_models(installed, forgot.with_overrides({"calibration": {"reference": str(other)}}))
    assert f"--set calibration.reference={mine}" in str(exc.value)
    assert f"--from-raw {installed} --reference {other}" in str(exc.value)
    # older model files record no folder: the hash of their data is named
    (installed / REFERENCE_RECORD).unlink()
    fp = json.loads((installed / "ip.json").read_text())["fingerprint"]
    with pytest.raises(CalibrationError) as exc:
        load_models(installed, forgot)
    assert f"SHA-256 {fp['reference_sha256'][:12]}" in str(exc.value) and "--from-raw" not in str(exc.value)


# --------------------------------------------------------------------------- 5: the shipped figures beside the new

def test_calibrate_prints_the_shipped_figures_beside_the_new_ones(lab_fit, shipped_fit):
    out = lab_fit["stdout"]
    assert f"beside the shipped calibration of this protocol ({SHIPPED}" in out
    stats = pd.read_csv(SHIPPED / "statistics.csv").set_index("model")
    for name in MODELS:
        (line,) = [ln for ln in out.splitlines() if ln.strip().startswith(f"{name}: n ")]
        assert f" vs {stats.loc[name, 'loo_mae_ev']:.3f} (" in line, line  # the shipped LOO MAE, statistics.csv
    assert "these are the numbers of the shipped calibration" in shipped_fit["stdout"]


# --------------------------------------------------------------------------- 3: the dye reference set

DYE_HEADER = "name,smiles,e_ox_v,e_ox_reference,e_ox_v_nhe,e00_ev,solvent,exclude_reason\n"
DYE = "OC(=O)C(C#N)=Cc1ccc(N(c2ccccc2)c2ccccc2)cc1"


def _dye_file(tmp_path: Path, row: str) -> Path:
    """The shipped dyes.csv with its first dye (same structure) replaced by ``row`` (values: this test's)."""
    from screen.dyecell.calibrate import REFERENCE_FILE

    frame = pd.read_csv(REFERENCE_FILE, dtype=str, keep_default_na=False)
    assert frame.loc[0, "smiles"] == DYE
    path = tmp_path / "dyes.csv"
    frame.iloc[1:].to_csv(path, index=False)
    lines = path.read_text(encoding="utf-8").splitlines(keepends=True)
    new = pd.read_csv(pd.io.common.StringIO(DYE_HEADER + row + "\n"), dtype=str, keep_default_na=False)
    body = new.reindex(columns=frame.columns, fill_value="").to_csv(index=False).splitlines(keepends=True)[1]
    path.write_text(lines[0] + body + "".join(lines[1:]), encoding="utf-8")
    return path


def test_a_dye_potential_vs_ag_agcl_is_converted_with_the_electrode_table(tmp_path):
    from screen.dyecell.calibrate import reference_table

    table = reference_table(_dye_file(tmp_path, f"L0 lab,{DYE},0.98,ag-agcl-sat,,2.84,MeCN,"))
    row = table[table["name"] == "L0 lab"].iloc[0]
    assert row["e_ox_v_nhe"] == pytest.approx(0.98 + AG_AGCL_SAT_V, abs=1e-9)


@pytest.mark.parametrize("row, said", [
    (f"L0 lab,{DYE},0.98,Ag/AgCl,0.98,2.84,,", "(= 1.18 V vs NHE) disagree"),       # e_ox_v_nhe of another electrode
    (f"L0 lab,{DYE},,,1180,2.84,,", "1180 looks like millivolts"),
    (f"L0 lab,{DYE},,,-5.62,2.84,,", "looks like a vacuum-scale energy"),
    (f"L0 lab,{DYE},0.98,,,2.84,,", "e_ox_v needs the reference electrode"),
])
def test_an_impossible_dye_reference_row_is_refused_with_file_line_and_column(tmp_path, row, said):
    from screen.dyecell.calibrate import reference_table
    from screen.errors import InputError

    path = _dye_file(tmp_path, row)
    with pytest.raises(InputError) as exc:
        reference_table(path)
    text = str(exc.value)
    assert text.startswith(f"dye reference file {path}: line 2 (name 'L0 lab'), column e_ox_v") and said in text, text


def test_the_python_refit_reads_the_reference_folder_and_records_it(tmp_path):
    from screen.dyecell.calibrate import fit_models, refit

    raw = pd.read_csv(SHIPPED / "reference_raw.csv", keep_default_na=False, na_values=[""])
    levels = tmp_path / "levels.csv"
    raw.to_csv(levels, index=False)
    Path(f"{levels}.meta.json").write_text(json.dumps({"protocol_id": PID}))
    ref = tmp_path / "ref"
    ref.mkdir()
    _dye_file(ref, f"L0 lab,{DYE},0.98,ag-agcl-sat,,2.84,MeCN,")
    folder = refit(levels, reference=ref, root=tmp_path / "dye")
    model = json.loads((folder / "e_ox.json").read_text())
    assert "reference_file" not in model["fingerprint"]  # no machine's path in a model file: named beside it
    record = json.loads((folder / "reference_file.json").read_text())
    assert record["reference_file"] == str((ref / "dyes.csv").resolve())
    (mine,) = [r for r in model["residuals"] if r["name"] == "L0 lab"]
    assert mine["measured"] == pytest.approx(0.98 + AG_AGCL_SAT_V, abs=1e-9)
    # the shipped dye reference set, checked the same way, gives the shipped dye models' numbers
    shipped = fit_models(raw, protocol_id=PID, engine_version="0.8")
    for name, new in shipped.items():
        old = json.loads((REPO / "models" / "dyecell" / PID / f"{name}.json").read_text())
        assert {k: v for k, v in new.items() if k != "fingerprint"} == {
            k: v for k, v in old.items() if k != "fingerprint"}, name


def test_dyecell_refit_fits_on_the_configured_reference_folder(tmp_path, capsys, monkeypatch):
    import screen.dyecell.calibrate as dcal

    ref = tmp_path / "myref"
    shutil.copytree(REPO / "models" / "reference", ref)
    # name, SMILES and E0-0 of the shipped row kept: the level calibration's reference hash is the shipped one
    _dye_file(ref, f"L0,{DYE},0.98,ag-agcl-sat,,2.84,MeCN,")
    seen = {}

    def workflow(cfg, out, cores, targets, **kw):
        seen["input"] = pd.read_csv(Path(cfg["candidates"]))
        return 0

    def fake_refit(levels, reference=None, root=None, feature_sets=None):
        seen["reference"] = reference
        return Path(root) / PID

    monkeypatch.setattr("screen.launch.run_workflow", workflow)
    monkeypatch.setattr(dcal, "refit", fake_refit)
    rc, out, err = _cli(capsys, "dyecell", "--refit", "--models", tmp_path / "dye", "--set",
                        f"calibration.reference={ref}", "--out", tmp_path / "o")
    assert rc == 0, err
    assert seen["reference"] == ref / "dyes.csv" and f"(fitted on {ref / 'dyes.csv'})" in out
    fitted = pd.read_csv(ref / "dyes.csv", dtype=str, keep_default_na=False)
    fitted = fitted[fitted["exclude_reason"].str.strip() == ""]  # the rows a fit takes (exclude_reason empty)
    assert len(fitted) > 0
    assert "L0" in set(seen["input"]["name"]) and sorted(seen["input"]["name"]) == sorted(fitted["name"])


def test_dyecell_refit_with_a_bad_or_missing_dye_reference_is_refused_before_computing(tmp_path, capsys,
                                                                                     no_workflow):
    ref = tmp_path / "myref"
    shutil.copytree(REPO / "models" / "reference", ref)
    _dye_file(ref, f"L0 lab,{DYE},,,1180,2.84,,")
    rc, _, err = _cli(capsys, "dyecell", "--refit", "--models", tmp_path / "dye", "--set",
                      f"calibration.reference={ref}", "--out", tmp_path / "o")
    assert rc == 2 and "1180 looks like millivolts" in err and str(ref / "dyes.csv") in err, err
    _one_line(err)
    (ref / "dyes.csv").unlink()
    rc, _, err = _cli(capsys, "dyecell", "--refit", "--models", tmp_path / "dye", "--set",
                      f"calibration.reference={ref}", "--out", tmp_path / "o")
    assert rc == 2 and f"{ref / 'dyes.csv'}, which does not exist" in err, err
    _one_line(err)
