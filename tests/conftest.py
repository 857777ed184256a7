"""Shared fixtures: small molecules with cached geometries so tests stay fast."""

from __future__ import annotations

import csv
import functools
import os
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
