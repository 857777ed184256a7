"""dascreen from Python (a Python user's audit): levels from SMILES as ``dascreen run`` writes them, the spawn
guard of scripts, the data folders from any working directory, engine argument checks, and the examples of
``docs/python.md`` and the dye-refit snippet of ``DEVELOPERS.md``.

The runs here use no results store (``tests/conftest.py``): the command and :func:`screen.api.levels_of`
compute every molecule afresh, so equal numbers mean equal computations, not one stored result read twice.
No physical value is checked here: the tests compare dascreen with itself.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

REPO = Path(__file__).resolve().parent.parent
PY = sys.executable


def _run_script(path: Path, cwd: Path, timeout: float = 240) -> subprocess.CompletedProcess:
    return subprocess.run([PY, str(path)], cwd=cwd, capture_output=True, text=True, timeout=timeout)


# --------------------------------------------------------------------------- finding 1: levels_of


@pytest.fixture(scope="module")
def command_and_api(tmp_path_factory):
    """One small batch (a molecule, a polymer repeat unit, a refused row) through `dascreen run` and levels_of."""
    from screen.api import levels_of
    from screen.cli import main

    base = tmp_path_factory.mktemp("python_api")
    candidates = base / "c.csv"
    candidates.write_text("id,smiles,role\nt1,c1ccsc1,donor\np1,[*]c1ccc([*])cc1,donor\nbad,C1CC,\n",
                          encoding="utf-8")
    assert main(["run", str(candidates), "--out", str(base / "run"), "--cores", "1"]) == 0
    api = levels_of(candidates, workdir=base / "api")
    return base, api


def test_levels_of_equals_the_levels_file_of_dascreen_run(command_and_api):
    from screen.levels import read_levels

    base, api = command_and_api
    cli = read_levels(base / "run" / "levels.csv")
    assert list(api.columns) == list(cli.columns)
    same = [c for c in cli.columns if not c.endswith("wall_s")]  # timings differ between two runs
    pd.testing.assert_frame_equal(api[same], cli[same])
    # the polymer's per-n values and chain limit are those of the command as well
    assert (base / "api" / "levels.oligomers.csv").read_bytes() == (base / "run" / "levels.oligomers.csv").read_bytes()
    assert api.loc[api["id"] == "p1", "representation"].item() == "polymer"
    # the refused row keeps its place, status and reason, as in levels.csv
    bad = api[api["id"] == "bad"].iloc[0]
    assert bad["status"] == "rejected" and bad["reason"] == "unparsable" and "unclosed ring" in bad["error"]
    assert np.isnan(bad["homo_ev"])
    assert api.attrs["protocol_id"] == json.loads((base / "run" / "levels.csv.meta.json").read_text())["protocol_id"]


def test_levels_of_takes_a_mapping_with_roles_as_the_file(command_and_api):
    """The same molecule given as a mapping (no file) gives the same numbers; ids come from the keys."""
    from screen.api import levels_of

    _, api = command_and_api
    one = levels_of({"t1": "c1ccsc1"}, roles="donor")
    cols = ["id", "status", "ip_ev", "ea_ev", "homo_ev", "lumo_ev", "gap_opt_ev", "homo_sigma_ev", "role"]
    pd.testing.assert_frame_equal(one[cols], api[api["id"] == "t1"][cols].reset_index(drop=True))


@pytest.mark.parametrize("args, kwargs, message", [
    (([],), {}, "no SMILES given"),
    ((["c1ccsc1", None],), {}, "SMILES 1 is None"),
    ((["c1ccsc1"], ["a", "b"]), {}, "ids has 2 entries for 1 SMILES"),
    ((pd.DataFrame({"x": ["c1ccsc1"]}),), {}, "has no 'smiles' column"),
])
def test_levels_of_refuses_bad_input_before_any_work(args, kwargs, message):
    from screen.api import levels_of
    from screen.errors import InputError

    with pytest.raises(InputError, match=re.escape(message)):
        levels_of(*args, **kwargs)


def test_levels_of_names_the_settings_no_calibration_serves():
    from screen.api import levels_of
    from screen.errors import ConfigError

    with pytest.raises(ConfigError, match=r"polymer\.n_max: 2 here, 4 in the shipped calibration.*nothing was "):
        levels_of("c1ccsc1", config={"polymer": {"n_max": 2}})
    with pytest.raises(ConfigError, match="levels_of uses an installed one"):  # never hours of reference molecules
        levels_of("c1ccsc1", config={"calibration": {"refit": "always"}})


# --------------------------------------------------------------------------- finding 2: the spawn guard

_SHARD = "key,smiles\nm1,C\n"


def test_a_script_without_the_main_guard_is_refused_with_one_message(tmp_path):
    """Before: each worker re-ran the script; its molecule failed with the bootstrapping error and both processes
    wrote the same files."""
    (tmp_path / "shard.csv").write_text(_SHARD, encoding="utf-8")
    script = tmp_path / "noguard.py"
    script.write_text(textwrap.dedent("""\
        from screen.compute import run_compute
        print("script body runs")
        s, e = run_compute("shard.csv", "s.sdf", "s.csv", "e.csv", store=False)
        print("status:", s.status.tolist(), e.status.tolist())
        """), encoding="utf-8")
    done = _run_script(script, tmp_path)
    assert done.returncode != 0
    assert done.stdout.count("script body runs") == 1  # no worker was started, so nothing ran twice
    last = done.stderr.strip().splitlines()[-1]
    assert last.startswith("screen.isolation.MainGuardMissing: ") and f"{script}, line 3" in last
    assert 'if __name__ == "__main__":' in last and "docs/python.md" in last
    assert "bootstrapping" not in done.stderr
    assert not (tmp_path / "s.sdf").exists() and not (tmp_path / "e.csv").exists()


def test_a_script_with_the_main_guard_computes(tmp_path):
    (tmp_path / "shard.csv").write_text(_SHARD, encoding="utf-8")
    script = tmp_path / "guard.py"
    script.write_text(textwrap.dedent("""\
        from screen.compute import run_compute

        def main():
            s, e = run_compute("shard.csv", "s.sdf", "s.csv", "e.csv", store=False)
            print("status:", s.status.tolist(), e.status.tolist())

        if __name__ == "__main__":
            main()
        """), encoding="utf-8")
    done = _run_script(script, tmp_path)
    assert done.returncode == 0, done.stderr
    assert "status: ['ok'] ['ok']" in done.stdout


def test_a_worker_started_from_a_thread_of_an_unguarded_script_stops_its_child(tmp_path):
    """Where the parent cannot see the call (a thread), the child stops while it re-imports the script and the
    parent raises the same error (before: the child's thread failed, the child went on)."""
    script = tmp_path / "thread.py"
    script.write_text(textwrap.dedent("""\
        import math, threading
        from screen.isolation import IsolatedWorker
        print("body runs")

        def work():
            with IsolatedWorker(math.sqrt) as w:
                print("sqrt", w(16.0))

        t = threading.Thread(target=work); t.start(); t.join()
        """), encoding="utf-8")
    done = _run_script(script, tmp_path, timeout=120)
    assert "screen.isolation.MainGuardMissing: the main script" in done.stderr
    assert "sqrt 4.0" not in done.stdout


def test_a_session_without_a_script_needs_no_guard(tmp_path):
    """A notebook or `python -` has no main script to re-import: levels_of works as it is."""
    code = ("from screen.api import levels_of\nlv = levels_of({'m': 'C'})\nprint(lv.loc[0, 'status'])\n")
    done = subprocess.run([PY, "-"], input=code, cwd=tmp_path, capture_output=True, text=True, timeout=240,
                          env={**__import__("os").environ, "DASCREEN_STORE": ""})
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip().splitlines()[-1] == "ok"


def test_guarded_lines_of_a_script():
    from screen.isolation import _guarded_lines

    source = textwrap.dedent("""\
        import x
        if __name__ == "__main__":
            x.run()
        if "__main__" != __name__:
            pass
        else:
            x.other()
        if x.flag:
            x.no()
        if __name__ == "__main__" and len(x.argv) >= 1:
            x.run()
        if __name__ in ("__main__",):
            x.run()
        """)
    # a review: guards written with ``and`` or ``in`` are guards too
    assert _guarded_lines(source) == [(3, 3), (7, 7), (11, 11), (13, 13)]


# --------------------------------------------------------------------------- finding 3: data folders


def test_shipped_calibration_is_found_from_any_working_directory(tmp_path, monkeypatch):
    """Before: outside the repository find_models returned None and load_models refused the shipped models as
    fitted on other reference data (the hash of a folder that does not exist)."""
    from screen.calibrate import FINGERPRINT_KEYS, find_models, fingerprint, load_models
    from screen.config import Config

    monkeypatch.chdir(tmp_path)
    cfg = Config.of(None)
    folder = find_models(cfg)
    assert folder == REPO / "models" / cfg.protocol_id
    assert set(load_models(folder, cfg)) >= {"ip", "ea", "gap_opt"}
    # protocol ids and fingerprints are those of the shipped models
    shipped = json.loads((folder / "ip.json").read_text(encoding="utf-8"))["fingerprint"]
    here = fingerprint(cfg, cfg["calibration"]["reference"])
    assert {k: here[k] for k in FINGERPRINT_KEYS} == {k: shipped[k] for k in FINGERPRINT_KEYS}
    assert cfg.located()["calibration"]["models"] == str(REPO / "models")


def test_a_missing_reference_folder_is_said_not_a_mismatch(tmp_path):
    from screen.calibrate import CalibrationMismatchError, find_models, load_models
    from screen.config import Config
    from screen.errors import ConfigError

    cfg = Config.of({"calibration": {"reference": str(tmp_path / "nope")}})
    shipped = REPO / "models" / cfg.protocol_id
    for call in (lambda: find_models(cfg), lambda: load_models(shipped, cfg)):
        with pytest.raises(ConfigError, match=f"reference folder {re.escape(str(tmp_path / 'nope'))} does not "
                                              "exist") as err:
            call()
        assert not isinstance(err.value, CalibrationMismatchError) and "refit" not in str(err.value)


def test_load_models_of_none_says_why_none_was_found(tmp_path):
    from screen.calibrate import CalibrationError, load_models
    from screen.config import Config

    cfg = Config.of({"calibration": {"models": str(tmp_path / "nomodels")}})
    with pytest.raises(CalibrationError, match=r"model_dir is None\); calibration\.models .*nomodels does not exist"):
        load_models(None, cfg)


def test_other_reference_data_suggest_the_refit_from_raw_values(tmp_path):
    """A reference set edited by the user: the refit from the stored raw values (seconds), not an hour-long one."""
    import shutil

    from screen.calibrate import CalibrationMismatchError, load_models
    from screen.config import Config

    reference = tmp_path / "reference"
    shutil.copytree(REPO / "models" / "reference", reference)
    with open(reference / "ip_gas.csv", "a", encoding="utf-8") as fh:
        fh.write("\n")
    cfg = Config.of({"calibration": {"reference": str(reference)}})
    with pytest.raises(CalibrationMismatchError, match="dascreen calibrate --from-raw"):
        load_models(REPO / "models" / cfg.protocol_id, cfg)


# --------------------------------------------------------------------------- finding 4: make_engine


@pytest.mark.parametrize("kwargs, message", [
    ({"accuracy": -1}, "accuracy=-1 is not allowed; give a number above 0"),
    ({"accuracy": float("nan")}, "accuracy=nan is not allowed"),
    ({"max_iter": 0}, "max_iter=0 is not allowed; give a whole number of SCF cycles of 1 or more"),
    ({"electronic_temperature_k": -300}, "electronic_temperature_k=-300 is not allowed; give a temperature of 0 K"),
    ({"mixer_damping": 2.0}, "mixer_damping=2.0 is not allowed"),
    ({"accuracy": "1"}, "accuracy='1' is not allowed"),
    ({"foo": 1}, "make_engine has no setting 'foo'; its settings are name, method, solvent and accuracy"),
    ({"threads": 4}, "make_engine has no setting 'threads': the OpenMP threads of the engine are set by the "
                     "environment variable OMP_NUM_THREADS"),
    ({"solvent": ""}, "solvent='' is not a solvent name"),
])
def test_make_engine_checks_every_argument_up_front(kwargs, message):
    from screen.engines import EngineError, make_engine

    with pytest.raises(EngineError, match=re.escape(message)):
        make_engine(**kwargs)


def test_make_engine_takes_valid_settings():
    from screen.engines import make_engine

    engine = make_engine(accuracy=0.5, max_iter=100, mixer_damping=0.2, electronic_temperature_k=0.0)
    assert (engine.scf.accuracy, engine.scf.max_iter, engine.scf.electronic_temperature_k) == (0.5, 100, 0.0)


@pytest.mark.parametrize("numbers, positions, message", [
    ([1, 1, 1], [[0, 0, 0], [0, 0, 1.4]], "positions have shape (2, 3) for 3 atomic numbers"),
    ([1, 1], [0, 0.74], "positions have shape (2,) for 2 atomic numbers"),
    ([], np.zeros((0, 3)), "atomic numbers must be a list of one number per atom"),
    ([1, 0], [[0, 0, 0], [0, 0, 1.4]], "atomic numbers must be whole numbers from 1 to 118"),
    ([1, 1], [[0, 0, 0], [0, 0, float("nan")]], "not finite"),
])
def test_singlepoint_checks_the_geometry_first(numbers, positions, message):
    """Before: a length mismatch said "charge 0 with 0 unpaired electrons is impossible"."""
    from screen.engines import EngineError, make_engine

    with pytest.raises(EngineError, match=re.escape(message)):
        make_engine().singlepoint(numbers, positions)


# --------------------------------------------------------------------------- finding 5 and the docs


def test_dye_refit_snippet_of_developers_md_runs_from_any_folder(tmp_path, monkeypatch):
    """The snippet read models/<pid> under the working directory while save_models writes beside the package.

    The package's models folder is a copy here (``MODELS_DIR`` moved into ``tmp_path``): the snippet reads the level
    calibration beside ``MODELS_DIR`` and writes the dye models under it, so nothing is written into the repository."""
    import shutil

    import screen.dyecell.calibrate as dcal
    from screen.config import Config

    pid = Config.of({}).protocol_id
    package = tmp_path / "package" / "models"
    shutil.copytree(REPO / "models" / pid, package / pid)  # the level calibration the snippet reads
    monkeypatch.setattr(dcal, "MODELS_DIR", package / "dyecell")
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    text = (REPO / "DEVELOPERS.md").read_text(encoding="utf-8")
    block = next(b for b in re.findall(r"```python\n(.*?)```", text, re.S) if "save_models" in b)
    code = textwrap.dedent(block).replace("<protocol-id>", pid)
    exec(compile(code, "DEVELOPERS.md", "exec"), {"__name__": "snippet"})
    assert not any(elsewhere.iterdir())  # nothing written under the working directory
    written = {p.name for p in (package / "dyecell" / pid).iterdir()}
    assert written == {"e_ox.json", "e00.json"}  # save_models without root: MODELS_DIR / pid
    for name in written:  # the shipped dye models' numbers, refitted on the shipped raw values
        new = json.loads((package / "dyecell" / pid / name).read_text(encoding="utf-8"))
        old = json.loads((REPO / "models" / "dyecell" / pid / name).read_text(encoding="utf-8"))
        assert new["fingerprint"]["protocol_id"] == pid
        assert {k: v for k, v in new.items() if k != "fingerprint"} == {
            k: v for k, v in old.items() if k != "fingerprint"}, name


def test_python_md_examples_run(tmp_path, monkeypatch, capsys):
    """Every python block of docs/python.md, in order, in one session (from a folder outside the repository)."""
    text = (REPO / "docs" / "python.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```python\n(.*?)```", text, re.S)
    assert len(blocks) >= 5
    monkeypatch.chdir(tmp_path)
    namespace = {"__name__": "docs_python"}
    for i, block in enumerate(blocks):
        exec(compile(block, f"docs/python.md block {i + 1}", "exec"), namespace)
    out = capsys.readouterr().out
    assert "refused: levels_of config: field levels.scale" in out
    # the engine example's H2 energy [Eh], as docs/python.md and the TbliteEngine example print it; GFN2-xTB gives
    # about -0.98 Eh for H2 (from memory, GFN2-xTB H2): a check that the example ran, not a validated number
    assert "-0.982" in out
