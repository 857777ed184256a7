"""Unusual environments (an audit of them): a console that is not UTF-8, a read-only HOME or run folder, ``~`` in
paths, a group umask, signals, a narrow or dumb terminal, ``NO_COLOR``, file names that are not UTF-8 or start
with ``-``, a deleted current folder.

Runs as root are made to meet file permissions as a user does with ``setpriv`` (the capabilities that override
them dropped); without ``setpriv`` those tests are skipped for root.
"""

from __future__ import annotations

import fcntl
import io
import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest

DASCREEN = str(Path(sys.executable).with_name("dascreen"))
#: ids an ASCII or Latin-1 console cannot print (Turkish dotted capital I and dotless i; Japanese)
IDS = ("thiophène-日本", "BTD-İı")
#: frontier levels of two made-up donors [eV]; any values the ranking accepts serve (common practice: a donor
#: HOMO near -5.3 eV, a gap near 1.8 eV)
LEVELS = ("id,smiles,homo_ev,lumo_ev,gap_opt_ev,scale,role\n"
          f"{IDS[0]},c1ccsc1,-5.40,-3.00,1.80,film,donor\n"
          f"{IDS[1]},c1ccc2nsnc2c1,-5.30,-3.10,1.70,film,donor\n")
#: the capabilities through which root ignores file permissions
NO_OVERRIDE = ["setpriv", "--bounding-set=-dac_override,-dac_read_search,-fowner,-linux_immutable"]


def _levels(folder: Path, name: str = "levels.csv") -> Path:
    path = folder / name
    path.write_text(LEVELS, encoding="utf-8")
    return path


def _env(**extra) -> dict:
    env = {k: v for k, v in os.environ.items() if k not in ("COLUMNS", "NO_COLOR", "MPLCONFIGDIR")}
    env.update(DASCREEN_STORE="", **extra)
    return env


def _run(args, cwd, prefix=(), **env) -> subprocess.CompletedProcess:
    return subprocess.run([*prefix, DASCREEN, *args], cwd=cwd, env=_env(**env), capture_output=True, timeout=120)


def _as_user() -> list[str]:
    """The command prefix under which permissions hold for this process: none for a user, ``setpriv`` for root."""
    if os.geteuid() != 0:
        return []
    try:
        ok = subprocess.run([*NO_OVERRIDE, "true"], capture_output=True).returncode == 0
    except FileNotFoundError:
        ok = False
    if not ok:
        pytest.skip("root without setpriv: file permissions cannot be made to hold")
    return NO_OVERRIDE


def _read_only(*paths: Path) -> None:
    for path in paths:
        for p in [path, *path.rglob("*")] if path.is_dir() else [path]:
            p.chmod(p.stat().st_mode & ~0o222)


def _writable_again(*paths: Path) -> None:
    for path in paths:
        for p in [path, *path.rglob("*")] if path.is_dir() else [path]:
            p.chmod(p.stat().st_mode | 0o200)


def _one_line(stderr: bytes) -> str:
    lines = [line for line in stderr.decode("utf-8", "replace").splitlines() if line.strip()
             and not line.startswith("dascreen rank: ")]  # the ranking's own notices (no σ, no shortlist)
    assert len(lines) == 1 and "Traceback" not in stderr.decode("utf-8", "replace"), stderr.decode()
    return lines[0]


# --------------------------------------------------------------------------- 1. a console that is not UTF-8

@pytest.mark.parametrize("console", [{"LC_ALL": "C", "PYTHONUTF8": "0"}, {"PYTHONIOENCODING": "latin-1"}],
                         ids=["C-locale-ascii", "latin-1"])
def test_a_console_that_is_not_utf8_prints_the_ranking(tmp_path, console):
    """The ranking's ids are printed escaped (``\\u0130``) instead of a UnicodeEncodeError traceback, exit 1."""
    levels = _levels(tmp_path)
    done = _run(["rank", "--levels", str(levels), "--out", str(tmp_path / "out")], tmp_path, **console)
    assert done.returncode == 0 and b"Traceback" not in done.stderr, done.stderr.decode()
    assert b"BTD-\\u0130\\u0131" in done.stdout and b"ranking -> " in done.stdout


def test_the_console_error_handler_escapes_characters_and_keeps_file_name_bytes():
    from screen.cli import _console_errors  # noqa: F401 - registers the handler

    assert "İ lat\udce9".encode("ascii", "dascreen-console") == b"\\u0130 lat\xe9"


# --------------------------------------------------------------------------- 2. a read-only HOME

def test_failure_cause_names_the_path_of_a_system_error():
    from screen.launch import failure_cause

    log = "Traceback ...\nPermissionError: [Errno 13] Permission denied: '/home/u/.cache'\n"
    assert failure_cause(log) == "Permission denied (errno 13, EACCES): /home/u/.cache"


def test_the_workflow_gets_fallback_folders_only_when_home_cannot_be_written(tmp_path):
    from screen.launch import fallback_folders

    home = tmp_path / "home"
    home.mkdir()
    assert fallback_folders(tmp_path / "r", {"HOME": str(home), "XDG_CACHE_HOME": str(home),
                                             "XDG_CONFIG_HOME": str(home)}) == {}  # an ordinary user: nothing
    blocked = tmp_path / "afile"
    blocked.write_text("x")
    assert fallback_folders(tmp_path / "r", {"XDG_CACHE_HOME": str(blocked), "XDG_CONFIG_HOME": str(blocked)}) == {
        "XDG_CACHE_HOME": str(tmp_path / "r" / ".snakemake" / "cache"),
        "MPLCONFIGDIR": str(tmp_path / "r" / ".snakemake" / "matplotlib")}


def test_a_run_with_a_read_only_home_starts_the_workflow(tmp_path):
    """Snakemake's source cache in ~/.cache stopped the run: "Permission denied (errno 13, EACCES)"."""
    prefix = _as_user()
    home = tmp_path / "home"
    home.mkdir()
    (tmp_path / "one.csv").write_text("id,smiles\nm1,c1ccsc1\n")
    _read_only(home)
    try:
        env = {"HOME": str(home), "XDG_CACHE_HOME": "", "XDG_CONFIG_HOME": "", "TMPDIR": str(tmp_path)}
        done = _run(["run", "one.csv", "--out", "out", "--dry-run"], tmp_path, prefix, **env)
    finally:
        _writable_again(home)
    assert done.returncode == 0, (done.stdout + done.stderr).decode()[-2000:]
    assert (tmp_path / "out" / ".snakemake" / "cache").is_dir()


def test_rank_with_a_read_only_home_gives_no_matplotlib_warning(tmp_path):
    prefix = _as_user()
    home = tmp_path / "home"
    home.mkdir()
    levels = _levels(tmp_path)
    _read_only(home)
    try:
        env = {"HOME": str(home), "XDG_CACHE_HOME": "", "XDG_CONFIG_HOME": "", "TMPDIR": str(tmp_path)}
        done = _run(["rank", "--levels", str(levels), "--out", "out"], tmp_path, prefix, **env)
    finally:
        _writable_again(home)
    assert done.returncode == 0, done.stderr.decode()
    assert b"Matplotlib created a temporary" not in done.stderr and b"MPLCONFIGDIR" not in done.stderr, \
        done.stderr.decode()


# --------------------------------------------------------------------------- 3. a run folder read-only for us

def _run_folder(out: Path) -> Path:
    """The files ``dascreen status`` reads of a finished one-molecule run."""
    for stage in ("prepared", "structures", "electronic"):
        (out / "work" / "candidates" / stage).mkdir(parents=True)
        (out / "work" / "candidates" / stage / "shard-000.csv").write_text("key,id\nm0000000000000001,a\n")
    (out / "levels.csv").write_text("id,status\na,ok\n")
    (out / ".dascreen.lock").write_text("")
    return out


def test_status_of_a_run_folder_that_can_be_read_but_not_written(tmp_path):
    prefix = _as_user()
    out = _run_folder(tmp_path / "run")
    _read_only(out)
    try:
        done = _run(["status", "--out", str(out)], tmp_path, prefix)
    finally:
        _writable_again(out)
    assert done.returncode == 0, done.stderr.decode()
    assert b"1/1 molecules computed" in done.stdout


def test_a_running_dascreen_is_seen_through_a_read_only_lock_file(tmp_path):
    prefix = _as_user()
    out = _run_folder(tmp_path / "run")
    code = f"from screen.preflight import run_active; print(run_active({str(out)!r}))"
    with open(out / ".dascreen.lock", "w") as held:  # as a running dascreen holds it
        fcntl.flock(held, fcntl.LOCK_EX | fcntl.LOCK_NB)
        _read_only(out)
        try:
            done = subprocess.run([*prefix, sys.executable, "-c", code], capture_output=True, timeout=60)
        finally:
            _writable_again(out)
    assert done.stdout.strip() == b"True", done.stderr.decode()
    lockless = tmp_path / "new"
    lockless.mkdir()
    from screen.preflight import run_active

    assert not run_active(lockless) and not (lockless / ".dascreen.lock").exists()  # only looks


# --------------------------------------------------------------------------- 4. ~ in every path option

def test_tilde_is_expanded_in_every_path_option():
    import argparse

    from screen.cli import PATH_OPTIONS, _expand_user

    args = argparse.Namespace(**{dest: "~/x" for dest in PATH_OPTIONS})
    args.from_raw = ["~/m"]
    _expand_user(args)
    home = os.path.expanduser("~")
    assert all(getattr(args, d) == os.path.join(home, "x") for d in PATH_OPTIONS if d != "from_raw")
    assert args.from_raw == [os.path.join(home, "m")]


def test_rank_with_tilde_paths_uses_the_home_folder(tmp_path, monkeypatch, capsys):
    import yaml

    from screen.cli import main
    from screen.config import Config

    home, work = tmp_path / "home", tmp_path / "work"
    home.mkdir()
    work.mkdir()
    _levels(home)
    (home / "cfg.yaml").write_text(yaml.safe_dump(Config.load(None).to_dict()))
    monkeypatch.setenv("HOME", str(home))
    monkeypatch.chdir(work)
    rc = main(["rank", "--levels", "~/levels.csv", "--out", "~/out", "--config", "~/cfg.yaml"])
    assert rc == 0, capsys.readouterr().err
    assert (home / "out" / "rankings").is_dir() and not (work / "~").exists()


# --------------------------------------------------------------------------- 5. the umask

@pytest.mark.parametrize("mask", [0o002, 0o077])
def test_a_new_store_follows_the_umask(tmp_path, mask):
    """SQLite made a new store rw-r--r-- whatever the umask: a group sharing it under umask 002 could not write."""
    from screen.store import ResultStore

    before = os.umask(mask)
    try:
        store = ResultStore(tmp_path / "s.sqlite")
        assert store.writable()
        store.close()
    finally:
        os.umask(before)
    assert (tmp_path / "s.sqlite").stat().st_mode & 0o777 == 0o666 & ~mask


def test_the_partner_matrix_overview_follows_a_group_umask(tmp_path):
    levels = _levels(tmp_path)
    done = subprocess.run(["sh", "-c", f"umask 002 && exec {DASCREEN} rank --levels {levels} --out out "
                                       "--partner y6,itic"], cwd=tmp_path, env=_env(), capture_output=True,
                          timeout=120)
    assert done.returncode == 0, done.stderr.decode()
    overview = next((tmp_path / "out" / "rankings").glob("matrix--*/overview.html"))
    assert overview.stat().st_mode & 0o777 == 0o664


# --------------------------------------------------------------------------- 6. signals

_RANK_WAITS_TO_WRITE = """
import sys
import screen.io


def write_csv(*args, **kwargs):  # the ranking is done and about to be written: say so, wait for the signal
    print("ready", flush=True)
    sys.stdin.readline()
    raise AssertionError("the signal did not stop dascreen rank")


screen.io.write_csv = write_csv
from screen.cli import main

sys.exit(main(sys.argv[1:]))
"""


def _signal_when_ranking(tmp_path, signum) -> tuple[int, bytes]:
    """``dascreen rank`` (screen.cli.main in a child) sent ``signum`` once it has ranked, before it has written: its
    write_csv says "ready" and waits on its standard input, so the signal comes at that point however slow the
    machine is."""
    levels = _levels(tmp_path)
    proc = subprocess.Popen([sys.executable, "-c", _RANK_WAITS_TO_WRITE, "rank", "--levels", str(levels), "--out",
                             "out"], cwd=tmp_path, env=_env(), stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    try:
        lines = []
        while not lines or lines[-1] not in (b"ready\n", b""):  # b"": it ended without reaching the writing
            lines.append(proc.stdout.readline())
        assert lines[-1] == b"ready\n", b"".join(lines) + proc.stderr.read()
        proc.send_signal(signum)
        _, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    return proc.returncode, err


@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM], ids=["SIGINT", "SIGTERM"])
def test_rank_stopped_by_a_signal_says_so_in_one_line(tmp_path, signum):
    rc, err = _signal_when_ranking(tmp_path, signum)
    assert rc == 128 + signum
    assert _one_line(err).startswith(f"dascreen: stopped by {signal.Signals(signum).name}")


def test_ctrl_c_before_the_workflow_starts_gives_one_line(monkeypatch, capsys):
    """A Ctrl-C while the inputs are checked (imports, the calibration check) gave a KeyboardInterrupt traceback."""
    import screen.cli as cli

    def interrupted(args):
        raise KeyboardInterrupt

    built = cli.build_parser

    def build():  # the command's function as the parser binds it
        parser = built()
        parser._subparsers._group_actions[0].choices["partners"].set_defaults(func=interrupted)
        return parser

    monkeypatch.setattr(cli, "build_parser", build)
    before = signal.getsignal(signal.SIGINT)
    assert cli.main(["partners"]) == 130
    assert signal.getsignal(signal.SIGINT) is before  # restored
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("dascreen: stopped by SIGINT (Ctrl-C)"), err


_SECOND_CTRL_C = """
import subprocess, sys
from screen import launch

# the engine's stand-in: on SIGINT it says "stopping" and takes until the test says so (a line on standard input)
child = subprocess.Popen([sys.executable, "-c", "import signal, sys, time\\n"
                          "def slow(*a):\\n    print('stopping', flush=True); sys.stdin.readline(); sys.exit(0)\\n"
                          "signal.signal(signal.SIGINT, slow)\\nprint('ready', flush=True)\\ntime.sleep(600)"])
wait = child.wait


def waiting(*args, **kwargs):  # says when dascreen waits for the engine, where a Ctrl-C is meant to come
    print("waiting", flush=True)
    return wait(*args, **kwargs)


child.wait = waiting
launch._wait(child)
"""


def _line(proc) -> bytes:
    line = proc.stdout.readline()
    assert line, proc.stderr.read().decode()  # the wrapper ended before the line came
    return line.strip()


def test_a_second_ctrl_c_while_the_workflow_stops_gives_no_traceback(tmp_path):
    """The engine takes a while to stop after the first Ctrl-C; a second one came while dascreen waited for it.

    The engine's stand-in shares dascreen's standard streams: it says "ready" (its handler is set) and, once dascreen
    has forwarded the first Ctrl-C, "stopping" (the clean-up has begun); it stops only after the second Ctrl-C was
    sent, when the test writes a line to it."""
    proc = subprocess.Popen([sys.executable, "-c", _SECOND_CTRL_C], cwd=tmp_path, stdin=subprocess.PIPE,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    try:
        assert {_line(proc), _line(proc)} == {b"ready", b"waiting"}
        proc.send_signal(signal.SIGINT)
        assert _line(proc) == b"stopping"
        proc.send_signal(signal.SIGINT)  # dascreen ignores it by now (kill() returns once it is delivered or dropped)
        _, err = proc.communicate(b"go\n", timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == 130, err.decode()
    assert b"Traceback" not in err and err.decode().strip().startswith("dascreen: stopped by SIGINT")


# --------------------------------------------------------------------------- 8. the progress display

class _Clock:
    def __init__(self):
        self.now = 1000.0

    def __call__(self):
        return self.now


@pytest.fixture
def clock(monkeypatch):
    import screen.io

    c = _Clock()
    monkeypatch.setattr(screen.io.time, "monotonic", c)
    return c


def test_the_bar_fits_a_narrow_terminal(monkeypatch, clock):
    from screen.io import Progress

    monkeypatch.setenv("COLUMNS", "40")
    monkeypatch.delenv("TERM", raising=False)
    buf = io.StringIO()
    bar = Progress("dascreen", stream=buf, bar=True)
    for done in range(4):
        clock.now += 7.0
        bar.report(done, 3, note="structures 1/3; 2 of them oligomers of 1 polymer(s)")
    drawn = [part.removeprefix("\033[K") for part in buf.getvalue().split("\r") if part]
    assert drawn and all(len(part) <= 39 for part in drawn), drawn


def test_a_dumb_terminal_gets_no_control_sequence(monkeypatch, clock):
    from screen.io import Progress

    monkeypatch.setenv("TERM", "dumb")
    monkeypatch.setenv("COLUMNS", "200")
    buf = io.StringIO()
    bar = Progress("dascreen", stream=buf, bar=True)
    bar.message("preparing the candidates ...")
    bar.report(0, 2)
    assert "\033" not in buf.getvalue()
    first, second = buf.getvalue().split("\r")[1:]
    assert len(second) >= len(first)  # the longer text before is overwritten with spaces


def test_the_rate_stops_when_every_molecule_is_done_and_the_last_line_comes_once(clock):
    from screen.io import Progress

    buf = io.StringIO()
    plain = Progress("dascreen", stream=buf, every_s=60.0)
    plain.rebase(0)
    clock.now += 10.0
    plain.report(2, 2, note="levels, ranking and report ...")
    for _ in range(3):  # the levels and the ranking take a while
        clock.now += 5.0
        plain.report(2, 2, note="levels, ranking and report ...")
    lines = buf.getvalue().splitlines()
    assert len(lines) == 1 and "5.00 s/molecule" in lines[0], lines


def test_molecules_from_the_store_are_left_out_of_the_rate(clock):
    from screen.io import Progress

    p = Progress("dascreen", stream=io.StringIO(), bar=True)
    p.rebase(0, 0)
    clock.now += 10.0
    p.report(12, 20, stored=10)  # 10 served by the store in no time, 2 computed in 10 s
    assert "5.00 s/molecule" in p.line(12, 20)


def test_the_journal_and_the_run_count_molecules_from_the_store(tmp_path):
    from screen.io import Journal, run_progress
    from screen.store import StoredRecord

    work = tmp_path / "work" / "candidates"
    (work / "prepared").mkdir(parents=True)
    (work / "electronic").mkdir()
    for shard in ("shard-000", "shard-001"):
        (work / "prepared" / f"{shard}.csv").write_text("key,smiles\nm1,C\nm2,CC\nm3,CCC\n")
    journal = Journal(work / "electronic" / "shard-000.csv.journal.jsonl", tag="e1")
    journal.append(StoredRecord({"key": "m1", "status": "ok"}))
    journal.append({"key": "m2", "status": "ok"})
    read = Journal(journal.path, tag="e1")
    assert read.load() == {"m1": {"key": "m1", "status": "ok"}, "m2": {"key": "m2", "status": "ok"}}  # as before
    assert read.from_store == {"m1"}
    (work / "electronic" / "shard-001.csv").write_text("key\nm4\nm5\nm6\n")  # finished: its log says it
    log = tmp_path / "logs" / "candidates" / "compute" / "shard-001.log"
    log.parent.mkdir(parents=True)
    log.write_text("compute shard-001: 3 of 3 molecules from the results store, 0 computed (structures)\n"
                   "compute shard-001: 2 of 3 molecules from the results store, 1 computed (electronic)\n")
    p = run_progress(tmp_path)
    assert (p["done"], p["stored"]) == (5, 3)


# --------------------------------------------------------------------------- 9. NO_COLOR

def test_no_color_turns_off_the_engines_colours(tmp_path, monkeypatch):
    from screen.launch import _command

    monkeypatch.delenv("NO_COLOR", raising=False)
    assert "--nocolor" not in _command(tmp_path, tmp_path / "c.yaml", 1, [], [], False, None)
    monkeypatch.setenv("NO_COLOR", "1")
    assert "--nocolor" in _command(tmp_path, tmp_path / "c.yaml", 1, [], [], False, None)
    assert _command(tmp_path, tmp_path / "c.yaml", 1, [], ["--nocolor"], False, None).count("--nocolor") == 1


# --------------------------------------------------------------------------- 10. file names that are not UTF-8

def test_an_out_folder_whose_name_is_not_utf8_gets_its_shortlist(tmp_path):
    """RDKit's SD writer took the file name as UTF-8 text: a traceback, "surrogates not allowed"."""
    levels = _levels(tmp_path)
    done = subprocess.run([DASCREEN, "rank", "--levels", str(levels), "--out", b"lat\xe9out"], cwd=tmp_path,
                          env=_env(), capture_output=True, timeout=120)
    assert done.returncode == 0 and b"Traceback" not in done.stderr, done.stderr.decode("utf-8", "replace")
    assert b"lat\xe9out/rankings/" in done.stdout  # the name's own bytes, as the C locale prints them
    out = Path(os.fsdecode(bytes(tmp_path) + b"/lat\xe9out"))
    assert next(out.glob("rankings/*/shortlist.sdf")).stat().st_size > 0


def test_a_levels_file_whose_name_is_not_utf8_is_refused_in_one_line(tmp_path, capsys):
    from screen.cli import main

    levels = _levels(tmp_path, os.fsdecode(b"lev\xe9.csv"))
    assert main(["rank", "--levels", str(levels), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "lev\\xe9.csv: this path is not UTF-8 text (byte 0xe9)" in err, err
    assert not (tmp_path / "out").exists()


def test_a_run_folder_whose_name_is_not_utf8_is_refused_before_the_engine_starts(tmp_path, capsys):
    """The workflow engine stopped with "UnicodeEncodeError: … surrogates not allowed" (exit 1)."""
    from screen.cli import main

    (tmp_path / "one.csv").write_text("id,smiles\nm1,c1ccsc1\n")
    out = os.fsdecode(bytes(tmp_path) + b"/lat\xe9run")
    assert main(["run", str(tmp_path / "one.csv"), "--out", out, "--dry-run"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "lat\\xe9run: the workflow engine cannot work in a folder" in err, err
    assert not os.path.exists(out)


# --------------------------------------------------------------------------- 11. names starting with '-'

@pytest.mark.parametrize("argv, hint", [
    (["run", "-two.csv"], "write ./-two.csv"),
    (["run", "--", "-two.csv"], "everything after a bare -- goes to the workflow engine"),
    (["rank", "--levels", "-lev.csv"], "write --levels ./-lev.csv"),
])
def test_a_name_starting_with_a_dash_gets_a_hint(tmp_path, monkeypatch, capsys, argv, hint):
    from screen.cli import main

    monkeypatch.chdir(tmp_path)
    (tmp_path / "-two.csv").write_text("id,smiles\nm1,C\n")
    with pytest.raises(SystemExit) as stop:
        main(argv)
    assert stop.value.code == 2
    assert hint in capsys.readouterr().err


# --------------------------------------------------------------------------- 12. smaller ones

def test_rank_into_a_read_only_folder_is_refused_before_the_work(tmp_path):
    prefix = _as_user()
    levels = _levels(tmp_path)
    folder = tmp_path / "ro"
    folder.mkdir()
    _read_only(folder)
    try:
        done = _run(["rank", "--levels", str(levels), "--out", "ro"], tmp_path, prefix)
    finally:
        _writable_again(folder)
    assert done.returncode == 2
    assert _one_line(done.stderr).startswith("dascreen: configuration error: --out ro is not writable")


def test_a_read_only_ranking_folder_is_refused_before_replacing_it(tmp_path):
    prefix = _as_user()
    levels = _levels(tmp_path)
    assert _run(["rank", "--levels", str(levels), "--out", "out"], tmp_path).returncode == 0
    levels.write_text(LEVELS.replace("-5.40", "-5.45"), encoding="utf-8")  # other levels: the ranking is replaced
    rankings = tmp_path / "out" / "rankings"
    _read_only(rankings)
    try:
        done = _run(["rank", "--levels", str(levels), "--out", "out"], tmp_path, prefix)
    finally:
        _writable_again(rankings)
    err = done.stderr.decode()
    assert done.returncode == 2 and "replacing" not in err and ".tmp" not in err, err
    assert "cannot write the ranking" in err and "is not writable" in err


def test_the_stale_lock_line_goes_to_standard_error(tmp_path, monkeypatch, capsys, cfg):
    import screen.launch as launch
    import screen.store

    out = tmp_path / "out"
    (out / ".snakemake" / "locks").mkdir(parents=True)
    (out / ".snakemake" / "locks" / "0.input.lock").write_text("")
    monkeypatch.setattr(launch.subprocess, "call", lambda *a, **k: 0)
    monkeypatch.setattr(launch, "_quiet", lambda *a, **k: 0)
    monkeypatch.setattr(launch, "calibration_pin", lambda *a, **k: None)
    monkeypatch.setattr(screen.store, "run_store", lambda *a, **k: (None, []))
    assert launch.run_workflow(cfg, out, 1) == 0
    captured = capsys.readouterr()
    assert "removed the lock left by an interrupted run" in captured.err
    assert "removed the lock" not in captured.out


def test_a_deleted_current_folder_is_named(tmp_path):
    levels = _levels(tmp_path)
    gone = tmp_path / "gone"
    gone.mkdir()
    done = subprocess.run(["sh", "-c", f"cd {gone} && rmdir {gone} && exec {DASCREEN} rank --levels {levels}"],
                          env=_env(PWD=str(gone)), capture_output=True, timeout=60)
    assert done.returncode == 2
    line = _one_line(done.stderr)
    assert f"the current folder {gone} no longer exists" in line and "--out results" in line, line


def test_a_read_only_run_folder_with_a_writable_rankings_folder_is_ranked(tmp_path):
    # a review: `rank` refused a read-only OUT although the ranking goes to OUT/rankings, which could be written
    prefix = _as_user()
    levels = _levels(tmp_path)
    assert _run(["rank", "--levels", str(levels), "--out", "out"], tmp_path).returncode == 0
    out = tmp_path / "out"
    out.chmod(out.stat().st_mode & ~0o222)  # the run folder alone read-only; rankings/ stays writable
    try:
        done = _run(["rank", "--levels", str(levels), "--out", "out", "--partner", "c60"], tmp_path, prefix)
    finally:
        out.chmod(out.stat().st_mode | 0o200)
    assert done.returncode == 0, done.stderr.decode()
    assert list((out / "rankings").glob("c60--*/ranking.csv"))
