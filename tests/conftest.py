"""Shared fixtures: small molecules with cached geometries so tests stay fast."""

from __future__ import annotations

import csv
import functools
import os
import shutil
import tempfile
from pathlib import Path

import pytest

DATA = Path(__file__).parent / "data"
REPO = Path(__file__).resolve().parent.parent

# Acene series, benzene → pentacene.
ACENES = {
    "benzene": "c1ccccc1",
    "naphthalene": "c1ccc2ccccc2c1",
    "anthracene": "c1ccc2cc3ccccc3cc2c1",
    "tetracene": "c1ccc2cc3cc4ccccc4cc3cc2c1",
    "pentacene": "c1ccc2cc3cc4cc5ccccc5cc4cc3cc2c1",
}


#: one made-up donor row of a levels file for command-line tests (no measurement)
LEVELS_HEADER = "id,smiles,homo_ev,lumo_ev,gap_opt_ev,scale,role\n"
LEVELS_ROW = "KF-D01,c1ccc(-c2cccs2)s1,-5.55,-3.60,1.95,film,donor\n"


def cli_run(capsys, *args):
    """``screen.cli.main`` on ``args`` (made text): ``(exit code, stdout, stderr)``."""
    from screen.cli import main

    rc = main([str(a) for a in args])
    captured = capsys.readouterr()
    return rc, captured.out, captured.err


def one_error_line(err: str) -> str:
    """The one ``dascreen: error`` line of ``err``, asserting there is exactly one and no traceback."""
    lines = [line for line in err.splitlines() if line.startswith("dascreen: error")]
    assert "Traceback" not in err and len(lines) == 1, err
    return lines[0]


@pytest.fixture()
def one_row_levels(tmp_path):
    """A levels file of :data:`LEVELS_ROW` in ``tmp_path``."""
    path = tmp_path / "lv.csv"
    path.write_text(LEVELS_HEADER + LEVELS_ROW, encoding="utf-8")
    return path


@functools.lru_cache(maxsize=None)
def structure(smiles: str):
    """Default-route geometry of a molecule (cached across tests)."""
    from screen.structures import build_structure

    return build_structure(smiles)[0]


@functools.lru_cache(maxsize=None)
def raw_levels(smiles: str, engine: str = "tblite", method: str = "GFN2-xTB") -> dict:
    """Raw ΔSCF levels of a molecule at its default geometry (cached)."""
    from screen.electronic import molecule_numbers_positions, vertical_levels
    from screen.engines import make_engine

    z, pos = molecule_numbers_positions(structure(smiles))
    return vertical_levels(z, pos, make_engine(engine, method))


@pytest.fixture
def no_workflow(monkeypatch):
    """A refusal must come before the workflow starts: starting the workflow engine fails the test."""
    def started(*args, **kwargs):
        pytest.fail("the workflow was started; the command line should have been refused first")

    monkeypatch.setattr("screen.launch.run_workflow", started)
    monkeypatch.setattr("screen.cli.run_workflow", started)


@pytest.fixture(scope="session")
def data_dir() -> Path:
    return DATA


@pytest.fixture(scope="session")
def repo_dir() -> Path:
    return REPO


@pytest.fixture(scope="session")
def reference_rows(repo_dir) -> list[dict]:
    """Every row of the calibration reference sets (``models/reference/*.csv``) as dicts of strings."""
    rows = []
    for name in ("ip_gas", "ea_gas", "gap_optical", "gap_series", "levels_film", "dyes"):
        with open(repo_dir / "models" / "reference" / f"{name}.csv", newline="") as fh:
            rows.extend(csv.DictReader(fh))
    return rows


@pytest.fixture(scope="module")
def cfg(repo_dir):
    """The default configuration with the repository's shipped models and reference sets."""
    from screen.config import load_config

    return load_config(repo_dir / "config" / "config.yaml",
                       {"calibration": {"models": str(repo_dir / "models"),
                                        "reference": str(repo_dir / "models" / "reference")}})


@pytest.fixture(scope="session", autouse=True)
def _no_results_store():
    """Runs started by the tests use no results store unless a test names one (DASCREEN_STORE): tests stay
    independent of each other and never touch a user's store."""
    before = os.environ.get("DASCREEN_STORE")
    os.environ["DASCREEN_STORE"] = ""
    yield
    if before is None:
        os.environ.pop("DASCREEN_STORE", None)
    else:
        os.environ["DASCREEN_STORE"] = before


#: the cache folders of a test session (pytest_configure): variable -> folder under one temporary folder
_CACHE_VARIABLES = {"XDG_CACHE_HOME": "xdg", "DASCREEN_CACHE": "dascreen"}
_saved_environment: dict = {}


def pytest_configure(config):
    """Every cache the tests' runs write goes to a temporary folder of this session, never to the user's ~/.cache:
    Snakemake's source cache and matplotlib's font cache (``XDG_CACHE_HOME``) and dascreen's spectrum cache
    (``DASCREEN_CACHE``). Set in ``os.environ`` before the test modules are imported, so that this process and every
    subprocess the tests start (they inherit the environment, or copy ``os.environ``) use it; a test that needs
    another value sets its own (tests/test_environment.py, tests/test_spectrum_cache.py). Each session starts with
    empty caches, so no test depends on what an earlier session or the user left there."""
    root = Path(tempfile.mkdtemp(prefix="dascreen-tests-cache-"))
    _saved_environment.update({name: os.environ.get(name) for name in _CACHE_VARIABLES})
    _saved_environment["_root"] = root
    for name, folder in _CACHE_VARIABLES.items():
        os.environ[name] = str(root / folder)


def pytest_unconfigure(config):
    root = _saved_environment.pop("_root", None)
    for name in _CACHE_VARIABLES:
        if name in _saved_environment:
            before = _saved_environment.pop(name)
            if before is None:
                os.environ.pop(name, None)
            else:
                os.environ[name] = before
    if root is not None:
        shutil.rmtree(root, ignore_errors=True)
