"""An installation without the repository's models/ folder, and the packaging metadata (a packaging audit).

``pip install .`` puts the ``screen`` package in site-packages without ``models/`` (the calibration, the fitted
device model, the reference data): the commands that need them must stop before any work with one line that says
so and how to install (exit 2, no traceback); the others keep working. Simulated in-process by pointing
``screen.config.PACKAGE_ROOT`` at an empty folder, as site-packages is for such an installation. No test computes a
molecule: the workflow is replaced by the conftest's stub that fails the test if it is started.
"""

from __future__ import annotations

import tomllib
import warnings
from pathlib import Path

import pandas as pd
import pytest

from screen.cli import main
from screen.config import PACKAGE_ROOT, install_problem

REPO = Path(__file__).resolve().parent.parent
# two donors on the film scale; the numbers only have to be plausible levels (common practice), nothing is ranked
# with them where the command is refused
LEVELS = "id,homo_ev,lumo_ev,gap_opt_ev,scale\nD1,-5.2,-3.0,1.9,film\nD2,-5.4,-3.2,1.8,film\n"
CANDIDATES = "id,smiles\nC1,c1ccc(-c2cccs2)s1\n"
PROBLEM = "dascreen: this installation has no models folder ("


@pytest.fixture
def installed(tmp_path, monkeypatch) -> Path:
    """``PACKAGE_ROOT`` as after ``pip install .``: a site-packages folder without ``models/``."""
    site = tmp_path / "site-packages"
    site.mkdir()
    monkeypatch.setattr("screen.config.PACKAGE_ROOT", site)
    return site


def _cli(capsys, *args):
    rc = main(list(args))
    captured = capsys.readouterr()
    return rc, captured.out, captured.err


def _write(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


def test_checkout_has_no_install_problem():
    assert install_problem() == ""
    assert (PACKAGE_ROOT / "models" / "device" / "fitted.json").is_file()


def test_checkout_without_fitted_json_is_no_install_problem(tmp_path, monkeypatch):
    """A checkout whose fitted.json was removed to be written again keeps the message that says how."""
    (tmp_path / "models" / "reference").mkdir(parents=True)
    monkeypatch.setattr("screen.config.PACKAGE_ROOT", tmp_path)
    assert install_problem() == ""


def test_install_problem_names_folder_and_fix(installed):
    text = install_problem()
    assert str(installed / "models") in text and "pip install -e" in text and "\n" not in text


def test_unrelated_models_package_in_site_packages_is_no_shipped_models(installed):
    """site-packages may hold another distribution's top-level ``models`` package: not the shipped data."""
    (installed / "models").mkdir()
    (installed / "models" / "__init__.py").write_text("")
    assert install_problem() != ""


@pytest.mark.parametrize("command", [
    ["run", "{cands}", "--out", "{out}"],
    ["calibrate", "--out", "{out}"],
    ["rank", "--levels", "{levels}", "--out", "{out}"],  # the default device model is the fitted one
    ["rank", "--levels", "{levels}", "--out", "{out}", "--set", "device.model=fitted"],
    ["rank", "--levels", "{levels}", "--out", "{out}", "--set", "device.model=scharber", "--partner", "smiles:C1=CC=CC=C1"],
    ["dyecell", "{cands}", "--out", "{out}"],
    ["dyecell", "--refit", "--out", "{out}"],
])
def test_commands_that_need_models_refuse_in_one_line(installed, tmp_path, capsys, no_workflow, command):
    cands = _write(tmp_path / "c.csv", CANDIDATES)
    levels = _write(tmp_path / "levels.csv", LEVELS)
    out = tmp_path / "out"
    rc, stdout, err = _cli(capsys, *(a.format(cands=cands, levels=levels, out=out) for a in command))
    assert rc == 2, err
    assert err.startswith(PROBLEM) and err.count("\n") == 1 and "Traceback" not in err, err
    assert str(installed / "models") in err and "pip install -e" in err
    assert not out.exists()  # before any work


def test_commands_without_models_keep_working(installed, tmp_path, capsys):
    with pytest.raises(SystemExit) as stop:
        main(["--version"])
    assert stop.value.code == 0
    for command in (["partners"], ["config"], ["dyecell", "--list"]):
        rc, stdout, err = _cli(capsys, *command)
        assert rc == 0 and PROBLEM not in err, (command, err)


def test_rank_with_scharber_model_is_not_refused(installed, tmp_path, capsys):
    """The published rule needs no fitted model (ranked in an installed copy during the audit)."""
    levels = _write(tmp_path / "levels.csv", LEVELS)
    rc, stdout, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(tmp_path / "out"),
                           "--set", "device.model=scharber")
    assert PROBLEM not in err and rc == 0, err


def test_devicefit_entry_refuses_in_one_line(installed, tmp_path, monkeypatch, capsys):
    """`python -m screen.devicefit --write` ended in a FileNotFoundError traceback (models/reference/devices.csv)."""
    import screen.devicefit as devicefit

    # the module's paths as in the installation; nothing of the checkout may be written
    monkeypatch.setattr(devicefit, "DEVICES_PATH", installed / "models" / "reference" / "devices.csv")
    monkeypatch.setattr(devicefit, "FILM_PATH", installed / "models" / "reference" / "levels_film.csv")
    monkeypatch.setattr(devicefit, "FITTED_PATH", tmp_path / "fitted.json")
    monkeypatch.setattr(devicefit, "LEVELS_TABLE_PATH", tmp_path / "device_levels.csv")
    for argv in (["--write"], []):
        assert devicefit.main(argv) == 2
        err = capsys.readouterr().err
        assert err.startswith("python -m screen.devicefit: this installation has no models folder (")
        assert err.count("\n") == 1 and "pip install -e" in err
    assert not (tmp_path / "fitted.json").exists()


def test_engine_args_check_survives_a_changed_private_api(monkeypatch):
    """launch.check_engine_args caught only ImportError around snakemake.cli.get_argument_parser (preflight's
    _engine_options catches every exception): an engine whose private API changed crashed ``dascreen run -- ...``."""
    import snakemake.cli

    from screen.launch import check_engine_args

    def changed():
        raise TypeError("get_argument_parser() missing 1 required positional argument: 'profiles'")

    monkeypatch.setattr(snakemake.cli, "get_argument_parser", changed)
    assert check_engine_args(["--keep-going"]) is None  # the engine checks its arguments itself


def test_partner_library_empty_column_reads_without_future_warning(tmp_path):
    """``replace("", nan)`` on an all-empty text column warned about downcasting under pandas 2.2; the values are
    NaN either way."""
    from screen.partner_library import LIBRARY_PATH, _read_library

    frame = pd.read_csv(LIBRARY_PATH, dtype=str, keep_default_na=False).head(3)
    frame["fc_reference_ev"] = ""  # a column left empty in every row
    path = tmp_path / "partners.csv"
    frame.to_csv(path, index=False)
    with warnings.catch_warnings():
        warnings.simplefilter("error", FutureWarning)
        read = _read_library(path)
    assert read["fc_reference_ev"].isna().all() and read["fc_reference_ev"].dtype == float
    assert read["homo_ev"].tolist() == [float(v) for v in frame["homo_ev"]]


def test_packaging_metadata_can_be_met():
    """setuptools < 77 refuses the SPDX ``license = "MIT"``; snakemake >= 8 (every 8.x/9.x release), numpy 2.4 and
    pandas 3 require Python >= 3.11; under pandas 2.2 the CSV reader cut an id at a NUL byte."""
    meta = tomllib.loads((REPO / "pyproject.toml").read_text(encoding="utf-8"))
    assert meta["project"]["license"] == "MIT"
    assert "setuptools>=77" in meta["build-system"]["requires"]
    assert meta["project"]["requires-python"] == ">=3.11"
    assert "pandas>=3.0" in meta["project"]["dependencies"]
