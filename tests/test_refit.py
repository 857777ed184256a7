"""Refitting the calibration from stored raw values (``dascreen calibrate --from-raw``).

The check value is the project's own shipped model folder: a refit from its
``reference_raw.csv`` on the shipped reference data must reproduce its models
and statistics exactly (same data, same code — nothing may depend on a
recomputation). The other cases are refusals.
"""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from screen.config import Config
from screen.errors import ConfigError
from screen.refit import missing_structures, read_raw_source, refit_from_raw

REPO = Path(__file__).resolve().parent.parent
CFG = Config.of({})
SHIPPED = REPO / "models" / CFG.protocol_id
MODELS = ("ip", "ea", "gap_opt", "gap_opt_film", "homo_film", "lumo_film")


@pytest.fixture(scope="module")
def refit(tmp_path_factory):
    out = tmp_path_factory.mktemp("refit")
    folder, table = refit_from_raw(CFG, [SHIPPED], out)
    return folder, table


def test_refit_reproduces_the_shipped_models(refit):
    folder, _ = refit
    for name in MODELS:
        new = json.loads((folder / f"{name}.json").read_text())
        old = json.loads((SHIPPED / f"{name}.json").read_text())
        assert new == old, f"{name}: a refit from the stored raw values differs from the shipped model"
    for table in ("statistics.csv", "reference_raw.csv", "reference_oligomers.csv"):
        assert (folder / table).read_bytes() == (SHIPPED / table).read_bytes(), table


def test_a_new_reference_structure_without_raw_values_is_listed(tmp_path):
    ref = tmp_path / "reference"
    shutil.copytree(REPO / "models" / "reference", ref)
    ip = pd.read_csv(ref / "ip_gas.csv", dtype=str, keep_default_na=False)
    extra = {c: "" for c in ip.columns}
    extra.update(name="biphenylene", smiles="c1ccc2c(c1)-c1ccccc1-2", value_ev="7.56", kind="adiabatic", phase="gas",
                 source="test row: a structure the raw table lacks (value not used)", from_memory="true")
    pd.concat([ip, pd.DataFrame([extra])]).to_csv(ref / "ip_gas.csv", index=False)
    cfg = Config.of({"calibration": {"reference": str(ref)}})
    with pytest.raises(ConfigError, match=r"1 reference structure\(s\) have no raw values \(biphenylene\)"):
        refit_from_raw(cfg, [SHIPPED], tmp_path / "out")
    listed = pd.read_csv(tmp_path / "out" / "missing_reference.csv")
    assert listed["smiles"].tolist() == ["c1ccc2c(c1)-c1ccccc1-2"]


def test_every_shipped_reference_structure_has_raw_values():
    from screen.calibration.reference import read_reference

    raw, _ = read_raw_source(SHIPPED, CFG.protocol_id)
    missing = missing_structures(read_reference(CFG["calibration"]["reference"]), raw)
    assert missing.empty, missing["name"].tolist()


def test_a_source_of_another_protocol_is_refused(tmp_path):
    src = tmp_path / "models" / "other"
    shutil.copytree(SHIPPED, src)
    model = json.loads((src / "ip.json").read_text())
    model["fingerprint"]["protocol_id"] = "tblite-gfn1-ff-00000000"
    (src / "ip.json").write_text(json.dumps(model))
    with pytest.raises(ConfigError, match="computed with protocol tblite-gfn1-ff-00000000"):
        read_raw_source(src, CFG.protocol_id)


def test_cli_refuses_a_folder_without_raw_values(tmp_path):
    proc = subprocess.run([sys.executable, "-m", "screen.cli", "calibrate", "--from-raw", str(tmp_path),
                           "--out", str(tmp_path / "out")], capture_output=True, text=True, cwd=REPO)
    assert proc.returncode == 2
    assert "no reference_raw.csv (model folder) or levels.csv (run folder)" in proc.stderr
    assert "Traceback" not in proc.stderr
