"""Edges a review of the round's changes found: the hartree check on computed and typed levels, a
closed standard output, a charged or odd-electron molecule at the geometry step, a dry run's job table, a file system
without flock, a ./models folder hiding the shipped calibration, option values (Decimal, arrays, seeds, numbers with
an exponent, ``~`` paths, the gap window), a levels_of work folder holding other files, and the SD-file row count.

(Script guards written with ``and``/``in`` are tested in tests/test_python_api.py, the known-bias notes in
tests/test_known_bias.py.)"""

from __future__ import annotations

import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd

from screen.levels_check import inconsistent_rows, row_problems


def test_a_computed_shallow_lumo_is_no_unit_slip() -> None:
    # dascreen's film levels of furan (computed, 2026-12-05): LUMO -0.789 eV, a small molecule outside the screen;
    # typed by a person the same numbers look like hartree and are refused with the conversion
    homo, lumo, gap = -6.27, -0.789, 4.9
    assert not inconsistent_rows(pd.DataFrame({"homo_ev": [homo], "lumo_ev": [lumo], "gap_opt_ev": [gap],
                                               "scale": ["film"]})).any()
    assert not row_problems(homo, lumo, gap, "film", deficit=False, typed=False)
    typed = row_problems(homo, lumo, gap, "film")
    assert typed and typed[0][0] == "lumo_ev" and "check the units" in typed[0][2]


def test_a_closed_standard_output_is_no_traceback(tmp_path: Path) -> None:
    exe = shutil.which("dascreen", path=str(Path(sys.executable).parent))
    assert exe
    done = subprocess.run(["sh", "-c", f'exec "{exe}" partners >&-'], capture_output=False, stderr=subprocess.PIPE,
                          text=True, cwd=tmp_path, timeout=120)
    assert done.returncode == 0 and "Traceback" not in done.stderr, done.stderr


def test_the_geometry_step_refuses_a_charged_molecule_from_any_route() -> None:
    # a referee's check: PrepareOptions(allow_charged=True) through the Python stage functions still computed methyl
    # viologen's dication as its neutral (xTB IP 8.9 eV; a dication's gas-phase IP lies well above 10 eV, from memory)
    import pytest

    from screen.structures import build_structure

    with pytest.raises(ValueError, match=r"net charge \+2: levels are computed for neutral closed-shell"):
        build_structure("C[n+]1ccc(-c2cc[n+](C)cc2)cc1")
    with pytest.raises(ValueError, match="radical or odd-electron"):
        build_structure("CC(C)(C)c1cc(C(C)(C)C)c([O])c(C(C)(C)C)c1")


def test_a_dry_run_prints_the_job_table_and_leaves_the_plan_in_a_log(tmp_path: Path, capfd) -> None:
    # a new user's audit: about 80 lines of the engine's reasons came before the summary of how the file is read
    from screen.cli import main

    candidates = tmp_path / "c.csv"
    candidates.write_text("id,smiles\nT1,c1ccsc1\n", encoding="utf-8")
    assert main(["run", str(candidates), "--out", str(tmp_path / "out"), "--cores", "1", "--dry-run"]) == 0
    out, err = capfd.readouterr()
    assert len(out.splitlines()) < 20, out
    assert "dry run: the jobs the workflow would run" in out and "prepare" in out
    plan = tmp_path / "out" / "logs" / "workflow.dry-run.log"
    assert plan.is_file() and str(plan) in out and "Reasons" in plan.read_text()
    assert "reads as 1 row" in err


def test_a_file_system_without_flock_is_refused_in_one_line(tmp_path: Path, monkeypatch) -> None:
    # a review: Lustre mounted without `-o flock` raises OSError (not BlockingIOError) and gave a traceback
    import errno
    import fcntl

    import pytest

    from screen import launch
    from screen.errors import ConfigError

    def no_flock(*_args):
        raise OSError(errno.ENOLCK, "No locks available")

    monkeypatch.setattr(fcntl, "flock", no_flock)
    with pytest.raises(ConfigError, match="does not lock files"):
        launch._lock(tmp_path)


def test_a_models_folder_in_the_working_directory_is_named_as_hiding_the_shipped_one(tmp_path: Path, monkeypatch,
                                                                                      capsys) -> None:
    # a review: an empty ./models (a machine-learning project's) hid the shipped calibration and the message only
    # suggested fitting one (hours)
    from screen.cli import main

    (tmp_path / "models").mkdir()
    (tmp_path / "c.csv").write_text("id,smiles\nT,c1ccsc1\n", encoding="utf-8")
    monkeypatch.chdir(tmp_path)
    assert main(["run", "c.csv", "--out", "o", "--dry-run"]) == 2
    err = capsys.readouterr().err
    assert "used before the shipped one" in err and "--set calibration.models=" in err and "Traceback" not in err


def test_options_take_decimals_and_arrays_and_refuse_bad_seeds() -> None:
    # an adversarial check: Decimal('NaN') raised from inside the schema check, an array raised ValueError, a
    # negative Monte-Carlo seed crashed numpy after the ranking had started, RDKit takes seed -1 as "random"
    from decimal import Decimal

    import pytest

    from screen.errors import ConfigError
    from screen.options import StructureOptions
    from screen.rank import RankOptions

    with pytest.raises(ConfigError, match="not a finite number"):
        RankOptions(target_pce_pct=Decimal("NaN"))
    assert RankOptions(target_pce_pct=Decimal("12.5")).target_pce_pct == 12.5
    assert StructureOptions(planar_tolerances_deg=np.array([5.0, 25.0])).planar_tolerances_deg == (5.0, 25.0)
    # 2147000000: the schema's bound (screen/workflow/schemas/config.schema.yaml; RDKit refuses 2**31 and more)
    for bad, said in ((-1, "field structures.seed: -1 is less than the minimum of 0"),
                      (2**31, "field structures.seed: 2147483648 is greater than the maximum of 2147000000")):
        with pytest.raises(ConfigError, match=re.escape(said)):
            StructureOptions(seed=bad)
    with pytest.raises(ConfigError, match=re.escape("field rank.seed: -1 is less than the minimum of 0")):
        RankOptions(seed=-1)


def test_numbers_with_an_exponent_and_home_paths_are_read_as_meant(tmp_path: Path, monkeypatch) -> None:
    # YAML 1.1 reads 1e3 as text ("'1e3' is not of type 'integer'"); a ~ in a config path reached the workflow
    from screen.preflight import check_sets
    from screen.schema import resolve

    monkeypatch.setenv("HOME", str(tmp_path))
    cfg = resolve({"rank": {"n_samples": "1e3", "target_pce_pct": "1.2e1"}, "partner": "~/acc.csv"})
    assert cfg["rank"]["n_samples"] == 1000 and cfg["rank"]["target_pce_pct"] == 12.0
    assert cfg["partner"] == str(tmp_path / "acc.csv")
    assert check_sets(["rank.n_samples=1e3", "out=~/res"]) == {"rank": {"n_samples": 1000}, "out": str(tmp_path / "res")}
    # 1 and 1.0 of a number setting that defaults to null are one setting (one ranking folder)
    assert resolve({"device": {"eqe": 1}})["device"] == resolve({"device": {"eqe": 1.0}})["device"]


def test_a_hartree_hint_only_where_the_conversion_lands_on_a_real_level() -> None:
    # LUMO -0.45 eV beside a HOMO of -5.40 eV was told to be -12.25 eV; -0.13 there lands on a film LUMO (-3.54 eV;
    # 1 Eh = 27.211386 eV, CODATA 2018). A whole row in hartree: tests/test_api_options.py
    problems = row_problems(-5.40, -0.45, 3.2, "film")
    assert problems and "hartree" not in problems[0][2] and "lies above -1 eV" in problems[0][2]
    (column, _, text), = row_problems(-5.40, -0.13, 3.2, "film")
    assert column == "lumo_ev" and "-0.13 looks like hartree: write -0.13 × 27.2114 = -3.54 eV" in text, text


def test_a_levels_of_workdir_must_not_hold_other_files(tmp_path: Path) -> None:
    # a second API pass: a run folder's levels.csv and a user's candidates.csv were overwritten
    import pytest

    from screen.api import _check_workdir
    from screen.errors import InputError

    (tmp_path / "levels.csv").write_text("id\nmine\n")
    with pytest.raises(InputError, match="already holds files"):
        _check_workdir(tmp_path)
    _check_workdir(tmp_path / "new")  # a new folder is fine


def test_an_sd_file_counts_its_records_for_the_shard_cap(tmp_path: Path) -> None:
    from screen.stages import _count_rows

    record = "x\n  RDKit\n\n  0  0  0  0  0  0  0  0  0  0999 V2000\nM  END\n$$$$\n"
    (tmp_path / "c.sdf").write_text(record * 3)
    (tmp_path / "c.csv").write_text("id,smiles\na,C\nb,CC\n")
    assert _count_rows(tmp_path / "c.sdf") == 3 and _count_rows(tmp_path / "c.csv") == 3


def test_the_gap_window_is_bounded_and_infinity_is_named_as_such() -> None:
    # an API pass: rank.gap_max_ev=1500 (a wavelength) was accepted; a bound must not hide the non-finite message
    import pytest

    from screen.errors import ConfigError
    from screen.preflight import check_sets

    with pytest.raises(ConfigError, match="greater than the maximum of 15"):
        check_sets(["rank.gap_max_ev=1500"])
    with pytest.raises(ConfigError, match="not a finite number"):
        check_sets(["rank.gap_max_ev=.inf"])
    assert check_sets(["rank.gap_max_ev=3.2"]) == {"rank": {"gap_max_ev": 3.2}}
