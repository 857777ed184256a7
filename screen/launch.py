"""Starting the packaged workflow from the ``dascreen`` command: quiet, with one progress display.

:func:`run_workflow` writes the run's resolved configuration (its ``store.path`` the store the jobs use), takes
the run folder's lock, checks the results store once and says on the console which one the run uses (or one
warning why it cannot: the run computes every molecule), tells the jobs where it is (environment variable
:data:`screen.store.STORE_ENV`) and runs Snakemake in a subprocess.  By
default the workflow engine's own log goes to ``OUT/logs/<name>.log`` and the
terminal shows one progress bar (molecules done / total, rate, ETA), or plain
lines every minute when standard error is not a terminal; ``verbose`` shows
Snakemake's log as it runs.  When the workflow fails, the console gets one line: the cause
(:func:`failure_cause`) and the path of the whole log; the engine's text (its error part repeats each
failed job's command line, 2 kB of JSON twice, an overnight operator's report) stays in the log.  A new
attempt in the same folder keeps the logs of the earlier ones (``workflow.1.log`` the last one, up to
:data:`KEEP_LOGS`), each log opened and closed by a dated ``# dascreen:`` line that says how the attempt
ended (an exit code, or the signal that stopped it).

Snakemake runs in ``dascreen``'s own process group, so a signal to the group (Ctrl-C in
a terminal, ``kill -- -PGID``, SIGKILL of the whole group) reaches every process at once.
A signal to ``dascreen`` alone (SIGTERM from ``kill PID`` or ``timeout``, SIGHUP when the
terminal closes, or Ctrl-C) is passed on to Snakemake and every process below it
(SIGKILL for what is left after :data:`STOP_GRACE_S`), and ``dascreen`` exits with
128 + the signal number (130, 143).

The run is pinned to the calibration the ``dascreen`` command found (:func:`calibration_pin`, handed to the
workflow in the environment variable :data:`PIN_ENV`): the workflow uses that folder and never decides on
its own to fit one (an overnight operator's report: a ``git pull`` of the installation during a run made
the workflow compute 389 reference molecules for 2.3 h, said only in its log), and the levels jobs stop
with one message when the calibration is no longer the one of the start. Only ``calibration.refit:
always``, announced before the run, fits one. A bare ``snakemake`` run decides by itself, as documented.
"""

from __future__ import annotations

import errno
import json
import os
import re
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import yaml

from screen.config import Config, nearest_existing, read_problem
from screen.errors import ConfigError, FolderInUse

__all__ = ["WORKFLOW", "STOP_GRACE_S", "PIN_ENV", "KEEP_LOGS", "ENGINE_OPTIONS_SET", "run_workflow", "error_excerpt",
           "calibration_pin", "pinned_calibration", "failure_cause", "failure_cause_in", "rotate_log",
           "check_engine_args", "check_engine_path", "can_write", "fallback_folders", "matplotlib_unwritable"]

WORKFLOW = Path(__file__).parent / "workflow" / "Snakefile"
#: environment variable that hands the workflow the calibration the ``dascreen`` command pinned (JSON of
#: :func:`calibration_pin`); unset in a bare snakemake run
PIN_ENV = "DASCREEN_CALIBRATION_PIN"
#: seconds the workflow's process group has to stop after the signal before it is killed [s]
STOP_GRACE_S = 30.0
#: logs of earlier attempts kept next to the workflow log (``workflow.1.log`` the last one ... ``workflow.9.log``)
KEEP_LOGS = 9

_ERROR_START = re.compile(r"^(Error in rule|Error:|WorkflowError|RuleException|MissingInputException|"
                          r"Traceback|.*Exception( in rule|:))")


def error_excerpt(log_text: str, tail: int = 80) -> str:
    """The part of a Snakemake log that explains a failure: from the first error line to the end.

    Examples
    --------
    >>> error_excerpt("Building DAG\\nrule x\\nError in rule x:\\n  boom\\n")
    'Error in rule x:\\n  boom'
    >>> error_excerpt("a\\nb\\n", tail=1)
    'b'
    """
    lines = log_text.rstrip("\n").splitlines()
    for i, line in enumerate(lines):
        if _ERROR_START.match(line):
            return "\n".join(lines[i:])
    return "\n".join(lines[-tail:])


#: a system error as Python words it (``[Errno 13] Permission denied: '/r/x'``): number, text and the path it names
_ERRNO = re.compile(r"\[Errno (\d+)\] ([A-Za-z][^:\]\)\n'\"]*)(?:: '([^'\n]+)'|: \"([^\"\n]+)\")?")
_STAGE_ERROR = re.compile(r"^dascreen: error: (.+)$", re.M)
#: a Python exception's last line in a job log the engine quotes (``module.SomeError: text``)
_EXCEPTION = re.compile(r"^(?:[A-Za-z_][\w]*\.)*([A-Za-z_]\w*(?:Error|Exception)): (\S.*)$", re.M)
#: the engine's own wrappers, which say nothing about the cause
_ENGINE_EXCEPTIONS = {"WorkflowError", "RuleException", "CalledProcessError", "MissingInputException",
                      "MissingOutputException", "IncompleteFilesException", "LockException"}
_FAILED_RULE = re.compile(r"^Error in rule (\S+?):\s*$", re.M)
_RULE_LOG = re.compile(r"^\s+log: (\S+)", re.M)
#: longest cause on the console line [characters]
_CAUSE_MAX = 400


def failure_cause(log_text: str) -> str | None:
    """Why a workflow stopped, in words for the one-line console message (``None`` when the log does not say).

    A full disk first (the system's text, e.g. ``No space left on device``: the engine's own line about it said
    "Please ensure write permissions", an overnight operator's report), then a job's own ``dascreen: error:``
    message (a calibration that changed during the run; one that lists problems below it with the first of them,
    :func:`_stage_message`), then a job killed by a signal (exit status 137:
    ``killed (signal 9: out of memory?)``) with its own log, then any other system error, then the last Python
    exception a job log ends with (``CalibrationMismatchError: ...``), then the failed job and its own log (that of
    its ``Error in rule`` block).

    Examples
    --------
    >>> failure_cause("WorkflowError:\\nError recording metadata for finished job ([Errno 28] No space left on "
    ...               "device). Please ensure write permissions for the directory /r/.snakemake")  # doctest: +ELLIPSIS
    'No space left on device (errno 28, ENOSPC): the disk ... is full; free space ... and run the same command ...'
    >>> failure_cause("Traceback ...\\nPermissionError: [Errno 13] Permission denied: '/r/x'")
    'Permission denied (errno 13, EACCES): /r/x'
    >>> failure_cause("Error in rule levels:\\n  jobid: 1\\nTraceback (most recent call last):\\n"
    ...               "screen.calibrate.CalibrationMismatchError: model x does not belong to this run")
    'CalibrationMismatchError: model x does not belong to this run (job levels)'
    >>> failure_cause("Error in rule x:\\n    log: /r/logs/x.log (check log file(s) for error details)\\n")
    'job x failed; its log: /r/logs/x.log'
    >>> failure_cause("Error in rule x:\\n  boom") is None
    True
    """
    found: dict[int, str] = {}
    paths: dict[int, str] = {}  # the file a system error names (a path the user can act on: make it writable)
    for match in _ERRNO.finditer(log_text):
        found.setdefault(int(match.group(1)), match.group(2).strip().rstrip("."))
        if match.group(3) or match.group(4):
            paths.setdefault(int(match.group(1)), match.group(3) or match.group(4))
    for number in (errno.ENOSPC, errno.EDQUOT):
        if number in found:
            return (f"{found[number]} (errno {number}, {errno.errorcode[number]}): the disk (or quota) of the run "
                    "folder or the results store is full; free space there and run the same command again (it "
                    "resumes)")
    stage = _STAGE_ERROR.search(log_text)
    if stage:
        return _stage_message(log_text, stage)
    failed = _failed_jobs(log_text)
    killed = [(rule, log, how) for rule, log, how in failed if how]
    if killed:  # a job killed by a signal (the kernel's out-of-memory killer, a scheduler): no exception to show
        rule, log, how = killed[0]
        return f"job {rule} was {how}" + (f"; its log: {log}" if log else "")
    if found:  # the first system error the log names
        number, text = next(iter(found.items()))
        where = f": {paths[number]}" if number in paths else ""
        return f"{text} (errno {number}, {errno.errorcode.get(number, '?')}){where}"
    rules = list(dict.fromkeys(_FAILED_RULE.findall(log_text)))
    jobs = f" (job{'s' if len(rules) > 1 else ''} {', '.join(rules)})" if rules else ""
    raised = [m for m in _EXCEPTION.finditer(log_text) if m.group(1) not in _ENGINE_EXCEPTIONS]
    if raised:
        text = f"{raised[-1].group(1)}: {raised[-1].group(2).strip()}"
        return (text if len(text) <= _CAUSE_MAX else text[:_CAUSE_MAX - 1] + "…") + jobs
    # the failed jobs' own logs (a concurrency audit: the first log the engine's log named, that of the prepare job
    # which had finished, was given for a failed compute job)
    logs = list(dict.fromkeys(log for _, log, _ in failed if log))
    if rules and logs:
        which = "its log" if len(logs) == 1 else "their logs"
        return f"job{'s' if len(rules) > 1 else ''} {', '.join(rules)} failed; {which}: {', '.join(logs)}"
    return None


#: the exit status of a job's command as the engine quotes it (``returned non-zero exit status 137``, or a Python
#: ``died with <Signals.SIGKILL: 9>``)
_EXIT_STATUS = re.compile(r"returned non-zero exit status (-?\d+)|died with <Signals\.\w+: (\d+)>")


def _killed(status: int) -> str | None:
    """``killed (signal 9: out of memory?)`` for a job's exit status that means a signal (128 + N from the shell,
    -N from Python), else None."""
    number = -status if status < 0 else status - 128 if 128 < status < 128 + 65 else None
    if number is None:
        return None
    if number == signal.SIGKILL:
        return "killed (signal 9: out of memory?)"
    try:
        return f"killed by signal {number} ({signal.Signals(number).name})"
    except ValueError:
        return f"killed by signal {number}"


def _failed_jobs(log_text: str) -> list[tuple[str, str | None, str | None]]:
    """``(rule, log, killed)`` of each ``Error in rule`` block of the engine's log: the rule, the log its own block
    names (None: none), and how it was killed when the exit status the engine quoted before the block is a
    signal's (None: it was not)."""
    out = []
    start = 0
    for match in _FAILED_RULE.finditer(log_text):
        block = []
        for line in log_text[match.end():match.end() + 20000].lstrip("\n").splitlines():
            if line.strip() and not line[:1].isspace():
                break
            block.append(line)
        log = _RULE_LOG.search("\n".join(block))
        statuses = [int(a or b) * (1 if a else -1) for a, b in _EXIT_STATUS.findall(log_text[start:match.start()])]
        out.append((match.group(1), log.group(1) if log else None, _killed(statuses[-1]) if statuses else None))
        start = match.end()
    return out


#: the head of a job's message that lists its problems on the lines below (``… 6 problems (first 5 shown):``)
_LISTED = re.compile(r"\s*\(first \d+ shown\)\s*:$|\s*:$")
#: characters of such a message with its first problem at most (a problem names a file, a column, a value and the
#: fix: 400 cut the fix of a σ from a broken calibration)
_LISTED_MAX = 700


def _stage_message(log_text: str, stage: re.Match) -> str:
    """A job's ``dascreen: error:`` message as one line: a head that lists problems on the indented lines below
    it (``levels.csv: 6 problems (first 5 shown):``) gets the first of them; it alone ended the console line (a
    custom-calibration audit: "…: 6 problems (first 5 shown):;" and nothing after it).

    Examples
    --------
    >>> log = "dascreen: error: l.csv: 6 problems (first 5 shown):\\n  line 2 (id 'a'), column x = 5: bad\\n  line 3\\n"
    >>> _stage_message(log, _STAGE_ERROR.search(log))
    "l.csv: 6 problems, the first: line 2 (id 'a'), column x = 5: bad"
    >>> _stage_message("dascreen: error: one thing\\n  x\\n", _STAGE_ERROR.search("dascreen: error: one thing\\n"))
    'one thing'
    """
    head = stage.group(1).strip()
    if not head.endswith(":"):
        return head
    below = log_text[stage.end():].lstrip("\r\n").splitlines()
    first = below[0].strip() if below and below[0][:1].isspace() else ""
    if not first:
        return head
    text = f"{_LISTED.sub('', head)}, the first: {first}"
    return text if len(text) <= _LISTED_MAX else text[:_LISTED_MAX - 1] + "\u2026"


def failure_cause_in(log_path: Path) -> str | None:
    """:func:`failure_cause` of the engine's log file ``log_path`` (``None`` when it cannot be read)."""
    try:
        return failure_cause(Path(log_path).read_text(encoding="utf-8", errors="replace"))
    except OSError:
        return None


def calibration_pin(cfg: Config, out: Path) -> dict | None:
    """The calibration a run started by the ``dascreen`` command is pinned to (``None``: not pinned).

    ``calibration.refit: always`` is not pinned: the run fits its own calibration, as the command announced.
    Otherwise the shipped calibration that matches the run's settings (:func:`screen.calibrate.find_models`),
    else the one an earlier run fitted in ``out`` (:func:`screen.preflight.fitted_in`): the pre-flight check
    (:func:`screen.preflight.check_calibration`) let the run start because of it. The pin is its
    :func:`screen.provenance.calibration_record` (folder, fingerprint, SHA-256 of the model files);
    ``{"folder": None}`` when none matches any more, which makes the workflow stop instead of fitting one.
    """
    if cfg["calibration"]["refit"] == "always":
        return None
    from screen.calibrate import find_models
    from screen.preflight import fitted_in
    from screen.provenance import calibration_record

    try:
        folder = find_models(cfg)
        if folder is None and fitted_in(out, cfg):
            folder = Path(out) / "models" / cfg.protocol_id
    except (OSError, ValueError, ConfigError):
        folder = None
    return {"folder": None} if folder is None else calibration_record(folder)


def pinned_calibration(environ=None) -> dict | None:
    """The calibration pin the ``dascreen`` command handed to the workflow (``None`` in a bare snakemake run).

    Examples
    --------
    >>> pinned_calibration({})
    >>> pinned_calibration({PIN_ENV: '{"folder": "/m/p"}'})
    {'folder': '/m/p'}
    """
    text = (os.environ if environ is None else environ).get(PIN_ENV, "")
    if not text.strip():
        return None
    try:
        pin = json.loads(text)
    except ValueError:
        raise ConfigError(f"the environment variable {PIN_ENV} is not the JSON the dascreen command writes: "
                          f"{text[:80]!r}; unset it") from None
    if not isinstance(pin, dict) or "folder" not in pin:
        raise ConfigError(f"the environment variable {PIN_ENV} names no calibration folder: {text[:80]!r}; unset it")
    return pin


#: signals that stop a running workflow like Ctrl-C does (SIGHUP: the terminal was closed)
_STOP_SIGNALS = (signal.SIGTERM, signal.SIGHUP)
#: signals ignored while the workflow is being stopped: a second Ctrl-C (or SIGTERM) gave a traceback from
#: the middle of the clean-up and left the jobs running
_IGNORED_WHILE_STOPPING = (signal.SIGINT, *_STOP_SIGNALS)


class _Signalled(Exception):
    """SIGTERM or SIGHUP arrived while the workflow ran (raised by the handler in the main thread)."""

    def __init__(self, signum: int) -> None:
        super().__init__(signum)
        self.signum = signum


def _raise_signalled(signum, frame) -> None:
    raise _Signalled(signum)


def _start(cmd: list[str], env: dict, **popen) -> subprocess.Popen:
    """Start the workflow engine in ``dascreen``'s process group (a group signal reaches it and its jobs too)."""
    return subprocess.Popen(cmd, env=env, **popen)


def _process_table() -> dict[int, tuple[int, str]] | None:
    """pid → (parent pid, state) of every process, from /proc (None where there is no /proc)."""
    proc_fs = Path("/proc")
    if not proc_fs.is_dir():
        return None
    table = {}
    for stat in proc_fs.glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()  # after "pid (comm)": state ppid ...
            table[int(stat.parent.name)] = (int(fields[1]), fields[0])
        except (OSError, IndexError, ValueError):
            continue
    return table


def _tree(root: int, table: dict[int, tuple[int, str]]) -> set[int]:
    """``root`` and every process below it."""
    children: dict[int, list[int]] = {}
    for pid, (ppid, _) in table.items():
        children.setdefault(ppid, []).append(pid)
    out, todo = {root}, [root]
    while todo:
        for child in children.get(todo.pop(), []):
            if child not in out:
                out.add(child)
                todo.append(child)
    return out


def _signal_all(pids, signum: int) -> None:
    for pid in pids:
        try:
            os.kill(pid, signum)
        except (ProcessLookupError, PermissionError):
            pass


def _stop_tree(proc: subprocess.Popen, signum: int) -> None:
    """Send ``signum`` to the workflow engine and every process below it (its jobs) and wait until all are gone;
    SIGKILL what is left after :data:`STOP_GRACE_S`. The tree is read before the signal, so jobs whose parent
    exits first are still found."""
    import time

    deadline = time.monotonic() + STOP_GRACE_S
    table = _process_table()
    if table is None:  # not Linux: the engine only
        proc.send_signal(signum)
        try:
            proc.wait(timeout=STOP_GRACE_S)
        except subprocess.TimeoutExpired:
            proc.kill()
        proc.wait()
        return
    tree = _tree(proc.pid, table)
    _signal_all(tree, signum)
    while time.monotonic() < deadline:
        proc.poll()  # reap the engine, so that it does not count as running
        table = _process_table() or {}
        tree |= _tree(proc.pid, table) if proc.returncode is None else set()
        if not any(pid in table and table[pid][1] != "Z" for pid in tree):
            break
        time.sleep(0.1)
    else:
        _signal_all(tree, signal.SIGKILL)
    proc.wait()


def _wait(proc: subprocess.Popen) -> int:
    """Wait for the workflow engine; on Ctrl-C, SIGTERM or SIGHUP stop it and its jobs and exit with 128 + signal.

    Raises
    ------
    SystemExit
        130 after Ctrl-C (SIGINT), 143 after SIGTERM (129 after SIGHUP), once the workflow has stopped.
    """
    main_thread = threading.current_thread() is threading.main_thread()
    # a signal the caller ignores stays ignored (`nohup dascreen run ...`: closing the terminal stopped the run)
    previous = {sig: signal.signal(sig, _raise_signalled) for sig in _STOP_SIGNALS
                if signal.getsignal(sig) != signal.SIG_IGN} if main_thread else {}
    if main_thread:
        previous[signal.SIGINT] = signal.getsignal(signal.SIGINT)  # restored below; ignored while stopping
    try:
        return proc.wait()
    except (KeyboardInterrupt, _Signalled) as exc:
        signum = exc.signum if isinstance(exc, _Signalled) else signal.SIGINT
        if main_thread:  # a second signal (Ctrl-C pressed again) must not cut the clean-up short
            for sig in _IGNORED_WHILE_STOPPING:
                signal.signal(sig, signal.SIG_IGN)
        _stop_tree(proc, signum)
        print(f"dascreen: stopped by {signal.Signals(signum).name}; the workflow was stopped too (the same command "
              "resumes it)", file=sys.stderr, flush=True)
        raise SystemExit(128 + signum) from None
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler if handler is not None else signal.SIG_DFL)


def _lock(out: Path):
    """Take the run folder's lock (flock: released by the kernel even when a run is killed)."""
    import fcntl

    lock = open(out / ".dascreen.lock", "w")  # noqa: SIM115 - held for the whole run
    try:
        fcntl.flock(lock, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        lock.close()
        raise FolderInUse.of(out) from None
    except OSError as exc:  # a file system without flock (a cluster's Lustre mounted without -o flock; a review)
        lock.close()
        raise ConfigError(f"--out {out}: its file system does not lock files ({read_problem(exc)}), so two runs in "
                          "it could not be kept apart; choose a folder on a file system with flock (a local disk, "
                          "or ask for the mount option flock)") from None
    return lock


def forget_other_input(out: Path, candidates: Path) -> list[str]:
    """Make a run follow its candidate file's content, not its timestamp; return the notes to print.

    The workflow engine decides what to redo by modification times, so a candidate file replaced by one with an
    older time (``cp -p``, ``rsync -a``, an unpacked archive) or a moved run folder looked up to date, and the run
    reported the old list (a new user's audit). The prepare stage records its input's path and SHA-256
    (``work/candidates/prepared/manifest.meta.json``); when they differ from the file given now, the prepared batch
    is removed (the workflow rebuilds it; molecules already computed come from the results store) and so are the
    rankings of the old list (``OUT/rankings/``), which no longer match the levels.

    Examples
    --------
    >>> import tempfile
    >>> forget_other_input(Path(tempfile.mkdtemp()), Path("any.csv"))  # nothing prepared yet
    []
    """
    import shutil

    from screen.io import read_json
    from screen.provenance import sha256_file

    prepared = out / "work" / "candidates" / "prepared"
    try:
        recorded = read_json(prepared / "manifest.meta.json").get("input") or {}
    except (OSError, ValueError, AttributeError):
        return []
    now = Path(candidates).resolve()
    if recorded.get("path") == str(now) and recorded.get("sha256") == sha256_file(now):
        return []
    was = recorded.get("path") or "another file"
    notes = [f"dascreen: {now} is not the candidate list prepared in {out} ({was}, SHA-256 "
             f"{str(recorded.get('sha256'))[:12]}…): its prepared batch is rebuilt"]
    shutil.rmtree(prepared)
    rankings = out / "rankings"
    old = sorted(p.name for p in rankings.iterdir()) if rankings.is_dir() else []
    if old:
        shutil.rmtree(rankings)
        (out / "rankings-index.csv").unlink(missing_ok=True)  # it listed them
        notes.append(f"dascreen: removed {len(old)} ranking folder(s) of the earlier list from {rankings} "
                     f"({', '.join(old[:4])}{', …' if len(old) > 4 else ''}); `dascreen rank --out {out} --partner …` "
                     "makes them again for the new list")
    return notes


#: the workflow engine's options that ``dascreen run`` sets itself or that stop the run before its levels, by the
#: engine's name for them (its ``dest``), each with what to do instead: given after ``--`` they won (the engine
#: takes the last ``--cores``), moved the engine's state out of the run folder (``--directory``) or ended the run
#: without levels.csv and with a bare "[Errno 2]" line (``--until``), a careless user's audit
ENGINE_OPTIONS_SET = {
    "cores": "is set by dascreen: give `dascreen run ... --cores N` before the --",
    "directory": "is set by dascreen: the workflow runs in the --out folder; give --out instead",
    "snakefile": "is set by dascreen: it runs its packaged workflow",
    "configfile": "is set by dascreen: it writes the run's configuration from --config and --set; give those "
                  "before the --",
    "config": "would bypass dascreen's checks of the settings; give --set SECTION.KEY=VALUE or --config FILE "
              "before the --",
    "workflow_profile": "is set by dascreen: give `dascreen run ... --profile FOLDER` before the --",
    "dryrun": "is dascreen's own option: give `dascreen run ... --dry-run`",
    "until": "stops the run before its levels.csv and ranking, which `dascreen run` then reports on; run the whole "
             "pipeline (molecules already computed are not computed again) or see the jobs with --dry-run",
    "omit_from": "stops the run before its levels.csv and ranking, which `dascreen run` then reports on; run the "
                 "whole pipeline (molecules already computed are not computed again) or see the jobs with --dry-run",
    # a review: a target after -- ran part of the workflow, and `dascreen run` then reported an earlier levels.csv
    # and ranking as this run's result; --touch and the delete options change the folder without running it
    "targets": "(a target file or rule) runs part of the workflow, after which `dascreen run` would report the "
               "folder's earlier results as this run's; run the whole pipeline (molecules already computed are not "
               "computed again)",
    "touch": "marks outputs up to date without computing them; run the pipeline instead",
    "delete_all_output": "deletes the run's results; remove the --out folder instead",
    "delete_temp_output": "deletes files the run resumes from; leave it out",
}


def check_engine_args(extra) -> None:
    """Refuse arguments for the workflow engine (after a bare ``--``) that it does not know or that dascreen sets.

    The arguments are parsed by the engine's own parser without running anything; an unknown option or a bad value
    gave about 100 lines of the engine's usage text and exit code 1 after the run had started, and an option of
    :data:`ENGINE_OPTIONS_SET` overrode dascreen's own (a careless user's audit).

    Raises
    ------
    ConfigError
        One line naming the argument and what to do instead (exit code 2).

    Examples
    --------
    >>> check_engine_args([])
    >>> check_engine_args(["--keep-going"])
    >>> try:
    ...     check_engine_args(["--cores", "5"])
    ... except ConfigError as exc:
    ...     print(str(exc))
    arguments after -- (passed to the workflow engine): --cores/-c is set by dascreen: give `dascreen run ... --cores N` before the --
    """
    extra = [str(a) for a in (extra or [])]
    if not extra:
        return
    import argparse

    head = "arguments after -- (passed to the workflow engine)"
    if any(a in ("-h", "--help", "--version", "-v") for a in extra):
        raise ConfigError(f"{head}: {' '.join(extra)} asks the engine to print its help or version and stop; "
                          "`python -m snakemake --help` prints the engine's options")
    try:
        from snakemake.cli import get_argument_parser

        parser, blank = get_argument_parser(), get_argument_parser()
    except (ImportError, AttributeError, TypeError):  # an engine without this (private) API or with another
        return  # signature checks its arguments itself (only ImportError was caught: a changed API crashed)

    class _Refused(Exception):
        pass

    def refuse(message):
        raise _Refused(message)

    for p in (parser, blank):
        p.error = refuse  # argparse calls self.error: one line here instead of the usage text and SystemExit
    try:  # argparse's own parsing: the engine's parser subclass also reads profiles and environment variables
        given, unknown = argparse.ArgumentParser.parse_known_args(parser, extra, argparse.Namespace())
        default, _ = argparse.ArgumentParser.parse_known_args(blank, [], argparse.Namespace())
    except _Refused as exc:
        raise ConfigError(f"{head}: {' '.join(extra)}: the engine refuses it: {exc}; `python -m snakemake --help` "
                          "lists its options") from None
    except SystemExit:
        raise ConfigError(f"{head}: {' '.join(extra)} asks the engine to print something and stop") from None
    if unknown:
        raise ConfigError(f"{head}: the engine has no option {' '.join(unknown)}; `python -m snakemake --help` "
                          "lists its options")
    names = {a.dest: "/".join(a.option_strings) for a in parser._actions if a.option_strings}
    for dest, instead in ENGINE_OPTIONS_SET.items():
        if getattr(given, dest, None) != getattr(default, dest, None):
            raise ConfigError(f"{head}: {names.get(dest, dest)} {instead}")


def check_engine_path(out: Path) -> None:
    """Refuse a run folder whose path is not UTF-8 text (a name made on a Latin-1 system, ``lat\\xe9``), before
    anything is created: the workflow engine stopped with "UnicodeEncodeError: … surrogates not allowed" (an audit
    of unusual environments).

    Raises
    ------
    ConfigError
        Naming the path (its bytes escaped) and the fix.

    Examples
    --------
    >>> try:
    ...     check_engine_path(Path("/r/lat\\udce9"))
    ... except ConfigError as exc:
    ...     print(str(exc).split(";")[0])
    --out /r/lat\\xe9: the workflow engine cannot work in a folder whose path is not UTF-8 text
    """
    try:
        str(out).encode("utf-8")
    except UnicodeEncodeError:
        shown = os.fsencode(str(out)).decode("utf-8", "backslashreplace")
        raise ConfigError(f"--out {shown}: the workflow engine cannot work in a folder whose path is not UTF-8 text; "
                          "rename it (or the folder above it that is not) to a UTF-8 name, or choose another --out"
                          ) from None


def _command(out: Path, cfg_file: Path, cores: int, targets, extra, dry_run: bool, profile) -> list[str]:
    cmd = [sys.executable, "-m", "snakemake", "--snakefile", str(WORKFLOW), "--directory", str(out),
           "--configfile", str(cfg_file), "--cores", str(cores), "--rerun-incomplete", "--show-failed-logs"]
    if os.environ.get("NO_COLOR") and "--nocolor" not in (extra or []):  # https://no-color.org: any non-empty value
        cmd.append("--nocolor")  # `--verbose` showed the engine's colour codes
    if dry_run:
        cmd.append("--dry-run")
    if profile:
        cmd += ["--workflow-profile", str(Path(profile).resolve())]
    return cmd + list(extra or []) + list(targets)


def run_workflow(cfg: Config, out: Path, cores: int, targets=(), *, extra=None, dry_run: bool = False,
                 profile: str | None = None, cfg_file: Path | None = None, verbose: bool = False,
                 log_name: str = "workflow", label: str = "dascreen", batch: str | None = None,
                 explain: bool = True) -> int:
    """Run the packaged workflow on ``cfg`` in ``out``; return Snakemake's exit code.

    The workflow is pinned to the calibration found now (:func:`calibration_pin`; not pinned with
    ``calibration.refit: always``, which fits one).

    Parameters
    ----------
    cfg : Config
        The run's configuration (written to ``cfg_file``, default ``out/config.yaml``).
    out : pathlib.Path
        Run folder (Snakemake's working directory).
    cores : int
        ``--cores`` of Snakemake.
    targets : sequence of str
        Files to make (default: the workflow's default target).
    extra : list of str, optional
        Arguments passed to Snakemake unchanged.
    dry_run : bool
        Show the jobs only (always verbose); computes nothing, but creates ``out`` with the configuration it
        would run with (``out/config.dry-run.yaml``) and the workflow engine's ``.snakemake`` folder.
    profile : str, optional
        Snakemake workflow profile folder.
    cfg_file : pathlib.Path, optional
        Where to write the configuration.
    verbose : bool
        Show Snakemake's log instead of the progress display.
    log_name : str
        The log goes to ``out/logs/<log_name>.log`` when not verbose.
    label : str
        Leading word of the progress display.
    batch : str, optional
        Count only this batch (``OUT/work/<batch>``) in the progress display: a ``smiles:`` partner's
        computation is one molecule, not the whole run folder.
    explain : bool
        On a failure (not verbose), print one line with the cause and the log's path; ``False``: the caller
        says it (``dascreen run`` ends with its own one line, :func:`screen.cli._why_stopped`).

    Raises
    ------
    ConfigError
        Another ``dascreen`` holds the folder's lock (:class:`FolderInUse`), or ``out`` cannot be created (the
        path and the system's reason; before, a traceback).
    """
    from screen.preflight import make_out_folder
    from screen.store import STORE_ENV, run_store

    check_engine_path(out)
    make_out_folder(out)
    lock = _lock(out)
    try:
        # a dry run writes its configuration aside: out/config.yaml names the run the folder holds (a dry run of
        # another file made the real run of it refused as 'holds the run of ...', a batch user's audit)
        cfg_file = cfg_file or out / ("config.dry-run.yaml" if dry_run else "config.yaml")
        cfg_file.parent.mkdir(parents=True, exist_ok=True)
        # the store is checked once here: which file the jobs use, or one warning why they cannot (they compute)
        store, notes = run_store(cfg, cfg_file)
        _say_store(out, notes)
        cfg_file.write_text(yaml.safe_dump(_recorded(cfg, store), sort_keys=False), encoding="utf-8")
        cmd = _command(out, cfg_file, cores, targets, extra, dry_run, profile)
        env = {**os.environ, STORE_ENV: str(store or ""), **fallback_folders(out)}
        env.pop(PIN_ENV, None)
        pinned = calibration_pin(cfg, out)
        if pinned is not None:  # the workflow uses this calibration and never fits one by itself
            env[PIN_ENV] = json.dumps(pinned, sort_keys=True)
        # the workflow engine inherits the lock's file descriptor: the folder stays locked while it runs, even if
        # this process is killed on its own (before, `kill -9` of dascreen left Snakemake running while
        # `dascreen status` said "not running" and a second run started in the same folder); the workflow tells
        # a run started here from a direct one by that descriptor (common.smk), the --unlock call included
        hold = (lock.fileno(),)
        locks = out / ".snakemake" / "locks"
        if locks.is_dir() and any(locks.iterdir()):  # we hold our lock, so Snakemake's is stale
            subprocess.call(cmd + ["--unlock"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env,
                            pass_fds=hold)
            print("dascreen: removed the lock left by an interrupted run; resuming", file=sys.stderr, flush=True)
        started = time.time()
        try:
            if verbose:
                print("dascreen: snakemake --cores", cores, "in", out, flush=True)
                return _wait(_start(cmd, env, pass_fds=hold))
            if dry_run:
                return _dry_run(cmd, env, out / "logs" / f"{log_name}.dry-run.log", hold)
            return _quiet(cmd, env, out, out / "logs" / f"{log_name}.log", label, hold, batch, explain=explain)
        finally:  # the jobs' store problems reach the console, not only their logs (a filesystem audit)
            unstored = None if dry_run else unstored_results(out, started, store)
            if unstored:
                print(unstored, file=sys.stderr, flush=True)
    finally:
        lock.close()


def _unstored_pattern() -> re.Pattern:
    """The job log lines of :func:`screen.batch.report_store_hits` that say new results were not stored / the store
    could not be read (the cache's write_problem / read_problem), built from the phrases the writer uses
    (:data:`screen.batch.STORE_NOT_WRITTEN` and the others: a rewording there cannot lose the warning here);
    ``N computed`` / ``N molecules computed`` counts the molecules."""
    from screen.batch import RESUMED_FROM_JOURNAL, STORE_NOT_USABLE, STORE_NOT_WRITTEN

    return re.compile(rf"; (?:{re.escape(STORE_NOT_WRITTEN)}|{re.escape(STORE_NOT_USABLE)}): (?P<why>.*?)"
                      rf"(?:; \d+ {re.escape(RESUMED_FROM_JOURNAL)}.*?)?(?: \([a-z_ -]+\))?$")


def unstored_results(out: Path, since: float, store: Path | None = None) -> str | None:
    """One console line when jobs of this attempt (logs under ``out/logs`` written since ``since``, a Unix time)
    could not store their new results; None when they all could (or had no store).

    A filesystem audit: a store locked during a run lost the run's new results with exit code 0 and a normal
    summary; "new results were not stored" was only in a compute job's log, and the next run silently computed
    the molecules again.

    Examples
    --------
    >>> import tempfile, time
    >>> out = Path(tempfile.mkdtemp())
    >>> (out / "logs" / "c").mkdir(parents=True)
    >>> _ = (out / "logs" / "c" / "shard-000.log").write_text(
    ...     "compute shard-000: 0 of 2 molecules from the results store, 2 computed; new results were not stored: "
    ...     "database is locked (electronic)\\n")
    >>> print(unstored_results(out, time.time() - 60, Path("/s/store.sqlite")))
    dascreen: warning: new results were not stored in the results store /s/store.sqlite (database is locked; see logs/c/shard-000.log): the next run computes up to 2 molecules again
    >>> unstored_results(out, time.time() + 60) is None  # a log of an earlier attempt
    True
    """
    logs = Path(out) / "logs"
    unstored = _unstored_pattern()
    molecules, why, where = 0, [], []
    try:
        found = sorted(logs.rglob("*.log")) if logs.is_dir() else []
    except OSError:
        return None
    for log in found:
        try:
            if log.stat().st_mtime < since - 1:  # an earlier attempt's log (1 s: coarse file-system clocks)
                continue
            text = log.read_text(encoding="utf-8", errors="replace")
        except OSError:
            continue
        if text.startswith("# dascreen: attempt"):  # the engine's own log (it may repeat a job's lines)
            continue
        most = None
        for line in text.splitlines():
            hit = unstored.search(line)
            if hit is None or line.startswith("dascreen: "):
                continue
            counts = re.findall(r"(\d+) (?:molecules? )?computed", line)
            most = max(most or 0, int(counts[0]) if counts else 0)
            why.append(hit["why"])
        if most is not None:
            molecules += most
            where.append(str(log.relative_to(out)))
    if not where:
        return None
    reasons = "; ".join(dict.fromkeys(why))
    shown = ", ".join(where[:3]) + (f" and {len(where) - 3} more" if len(where) > 3 else "")
    named = f" {store}" if store else ""
    return (f"dascreen: warning: new results were not stored in the results store{named} ({reasons}; see {shown}): "
            f"the next run computes up to {molecules} molecule{'' if molecules == 1 else 's'} again")


#: the store lines said last per run folder: a command that starts the workflow twice in one folder says them once
_STORE_SAID: dict[str, list[str]] = {}


def can_write(folder) -> bool:
    """Whether this process can write in ``folder``, or create it (its nearest existing parent is a folder it can
    write in).

    Examples
    --------
    >>> import tempfile
    >>> can_write(Path(tempfile.mkdtemp()) / "new" / "sub")
    True
    """
    folder = nearest_existing(folder)
    return folder.is_dir() and os.access(folder, os.W_OK | os.X_OK)


def user_folder(xdg: str, fallback: str, environ=None) -> Path:
    """A user folder as the XDG base-directory rules give it: ``$XDG_CACHE_HOME`` (``xdg``) when set and not blank,
    else ``~/.cache`` (``fallback``); what Snakemake (through platformdirs) and matplotlib use on Linux.

    Examples
    --------
    >>> user_folder("XDG_CACHE_HOME", "~/.cache", {"XDG_CACHE_HOME": "/c"})
    PosixPath('/c')
    """
    given = (os.environ if environ is None else environ).get(xdg, "")
    return Path(given) if given.strip() else Path(fallback).expanduser()


def matplotlib_folders(environ=None) -> tuple[Path, Path]:
    """matplotlib's configuration and cache folders when ``MPLCONFIGDIR`` is not set (Linux: the XDG folders;
    elsewhere ``~/.matplotlib``)."""
    if not sys.platform.startswith(("linux", "freebsd")):
        return (Path("~/.matplotlib").expanduser(),) * 2
    return (user_folder("XDG_CONFIG_HOME", "~/.config", environ) / "matplotlib",
            user_folder("XDG_CACHE_HOME", "~/.cache", environ) / "matplotlib")


def matplotlib_unwritable(environ=None) -> bool:
    """True when ``MPLCONFIGDIR`` is not set and matplotlib's own folders cannot be written (a read-only HOME):
    matplotlib then prints a two-line warning on each start and rebuilds its font cache every time."""
    environ = os.environ if environ is None else environ
    return not environ.get("MPLCONFIGDIR") and not all(map(can_write, matplotlib_folders(environ)))


def fallback_folders(out: Path, environ=None) -> dict[str, str]:
    """Environment variables for the workflow engine when the user's cache folders cannot be written (a read-only
    HOME); ``{}`` otherwise, so nothing changes for an ordinary user.

    Snakemake creates its source cache in ``$XDG_CACHE_HOME`` (default ``~/.cache``) before it runs anything, and
    stopped with "Permission denied" (an audit of unusual environments): ``XDG_CACHE_HOME`` becomes
    ``OUT/.snakemake/cache``. matplotlib (the report's figures) gets ``MPLCONFIGDIR=OUT/.snakemake/matplotlib``
    when its folders cannot be written. The results store is not affected: its place is handed to the jobs
    (:data:`screen.store.STORE_ENV`).

    Examples
    --------
    >>> import tempfile
    >>> home = tempfile.mkdtemp()
    >>> fallback_folders(Path("/r"), {"XDG_CACHE_HOME": home, "XDG_CONFIG_HOME": home})
    {}
    >>> blocked = tempfile.mkstemp()[1]  # a file: nothing can be created below it
    >>> fallback_folders(Path("/r"), {"XDG_CACHE_HOME": blocked, "XDG_CONFIG_HOME": home})
    {'XDG_CACHE_HOME': '/r/.snakemake/cache', 'MPLCONFIGDIR': '/r/.snakemake/matplotlib'}
    """
    environ = os.environ if environ is None else environ
    extra = {}
    if not can_write(user_folder("XDG_CACHE_HOME", "~/.cache", environ) / "snakemake" / "source-cache"):
        extra["XDG_CACHE_HOME"] = str(Path(out) / ".snakemake" / "cache")
    if matplotlib_unwritable(environ):
        extra["MPLCONFIGDIR"] = str(Path(out) / ".snakemake" / "matplotlib")
    return extra


def _say_store(out: Path, notes: list[str]) -> None:
    """Print the console lines about the run's results store (:func:`screen.store.run_store`), unless this process
    said the same ones for ``out`` already."""
    if _STORE_SAID.get(str(out)) == notes:
        return
    _STORE_SAID[str(out)] = notes
    for line in notes:
        print(line, file=sys.stderr, flush=True)


def _recorded(cfg: Config, store: Path | None) -> dict:
    """The configuration written for the run, its ``store.path`` the store the jobs use (a concurrency audit:
    with ``DASCREEN_STORE`` set, ``config.yaml`` recorded the ``--set store.path`` the run did not use). Left as
    given when the environment does not override it and the store can be used."""
    from screen.store import STORE_ENV, store_location

    data = cfg.to_dict()
    if STORE_ENV in os.environ or (store is None and store_location(cfg) is not None):
        data["store"] = {**(data.get("store") or {}), "path": str(store) if store else None}
    return data


def rotate_log(log_path: Path, keep: int = KEEP_LOGS) -> Path | None:
    """Keep the log of the earlier attempt: ``name.log`` → ``name.1.log`` → ``name.2.log`` ... (``keep`` of
    them, the oldest dropped); return where the earlier log went (``None``: there was none).

    An overnight operator's report: every attempt overwrote ``logs/workflow.log``, so the night's
    interruptions were not recorded.

    Examples
    --------
    >>> import tempfile
    >>> log = Path(tempfile.mkdtemp()) / "workflow.log"
    >>> for attempt in "abc":
    ...     _ = rotate_log(log, keep=1)
    ...     _ = log.write_text(attempt)
    >>> sorted(p.name for p in log.parent.iterdir()), log.with_name("workflow.1.log").read_text()
    (['workflow.1.log', 'workflow.log'], 'b')
    """
    if not log_path.exists():
        return None

    def nth(k: int) -> Path:
        return log_path.with_name(f"{log_path.stem}.{k}{log_path.suffix}")

    try:
        nth(keep).unlink(missing_ok=True)
        for k in range(keep - 1, 0, -1):
            if nth(k).exists():
                os.replace(nth(k), nth(k + 1))
        if keep >= 1:
            os.replace(log_path, nth(1))
        return nth(1) if keep >= 1 else None
    except OSError:  # a full disk or a read-only log folder must not stop the run: the log is overwritten
        return None


def _stamp() -> str:
    import time

    return time.strftime("%Y-%m-%d %H:%M:%S %z")


def job_table(text: str) -> list[str]:
    r"""The lines of the engine's table of planned jobs (``job  count`` … ``total  N``) in its output, [] if none.

    Examples
    --------
    >>> job_table("Building DAG\njob      count\n-------  -----\nprepare      1\ntotal        1\nReasons: ...")
    ['job      count', '-------  -----', 'prepare      1', 'total        1']
    """
    lines = text.splitlines()
    start = next((i for i, ln in enumerate(lines) if ln.split()[:2] == ["job", "count"]), None)
    if start is None:
        return []
    end = next((i for i in range(start, len(lines)) if lines[i].split()[:1] == ["total"]), len(lines) - 1)
    return lines[start:end + 1]


def _dry_run(cmd: list[str], env: dict, log_path: Path, hold=()) -> int:
    """A dry run with the engine's whole plan in ``log_path``: the console gets its table of jobs and the log's
    path (a new user's audit: about 80 lines of the engine's reasons came before the summary of how the
    candidate file is read)."""
    log_path.parent.mkdir(parents=True, exist_ok=True)
    with open(log_path, "w", encoding="utf-8") as log:
        rc = _wait(_start(cmd, env, stdout=log, stderr=subprocess.STDOUT, pass_fds=tuple(hold)))
    if rc != 0:
        cause = failure_cause_in(log_path)
        print(f"dascreen: the dry run failed{': ' + cause if cause else ''}; its whole log: {log_path}",
              file=sys.stderr)
        return rc
    table = job_table(log_path.read_text(encoding="utf-8", errors="replace"))
    print("\n".join(["dascreen: dry run: the jobs the workflow would run" if table else
                      "dascreen: dry run: nothing to run", *table, f"the engine's whole plan: {log_path}"]), flush=True)
    return rc


def _quiet(cmd: list[str], env: dict, out: Path, log_path: Path, label: str, hold=(), batch: str | None = None,
           explain: bool = True) -> int:
    """Snakemake with its log in a file and a progress display; on failure one line (cause and log path).

    The log of an earlier attempt is kept (:func:`rotate_log`); the log starts and ends with a dated ``# dascreen:``
    line (started; ended with exit code N, or stopped by a signal). ``hold``: file descriptors the engine inherits
    (the run folder's lock). ``explain``: print the failure line (``False``: the caller does)."""
    log_path.parent.mkdir(parents=True, exist_ok=True)
    earlier = rotate_log(log_path)
    stop = threading.Event()
    with open(log_path, "a", encoding="utf-8") as log:  # append: the engine writes at the end too
        log.write(f"# dascreen: attempt started {_stamp()} (pid {os.getpid()})"
                  f"{f'; the earlier attempt: {earlier.name}' if earlier else ''}\n")
        log.flush()
        proc = _start(cmd, env, stdout=log, stderr=subprocess.STDOUT, pass_fds=tuple(hold))
        watcher = threading.Thread(target=_watch, args=(out, stop, label), kwargs={"batch": batch}, daemon=True)
        watcher.start()
        ended = "ended abnormally"
        try:
            rc = _wait(proc)
            ended = f"ended with exit code {rc}"
        except SystemExit as exc:  # stopped by a signal: the workflow was stopped too
            code = exc.code if isinstance(exc.code, int) else 1
            ended = (f"stopped by {signal.Signals(code - 128).name}" if 128 < code < 128 + signal.NSIG
                     else f"stopped (exit code {code})")
            raise
        finally:
            stop.set()
            watcher.join(timeout=5)
            try:
                log.write(f"# dascreen: attempt {ended} {_stamp()}\n")
                log.flush()
            except OSError:  # a full disk
                pass
    if rc != 0 and explain:
        cause = failure_cause_in(log_path)
        print(f"dascreen: the workflow failed{': ' + cause if cause else ''}; its whole log: {log_path}",
              file=sys.stderr)
    return rc


def _watch(out: Path, stop: threading.Event, label: str, stream=None, tick: float | None = None,
           batch: str | None = None) -> None:
    """Redraw the progress bar every second (a terminal) or print a line every minute (not a terminal)."""
    from screen.io import Progress, run_progress

    stream = stream or sys.stderr
    progress = Progress(label, stream=stream, every_s=60.0)
    tick = tick or (1.0 if progress.bar else 5.0)
    based = False
    while not stop.wait(tick):
        try:
            p = run_progress(out, batch)
        except OSError:  # a file moved while being counted: next time
            continue
        if not p["prepared"]:
            progress.message("preparing the candidates ...")
            continue
        if not based:
            progress.rebase(p["done"], p.get("stored", 0))
            based = True
        note = "levels, ranking and report ..." if p["total"] and p["done"] >= p["total"] else \
            f"structures {p['structures']}/{p['total']}"
        if p.get("polymers"):  # the count is of structures: a polymer is several oligomers
            note += f"; {p['oligomers']} of them oligomers of {p['polymers']} polymer(s)"
        progress.report(p["done"], p["total"], note=note, stored=p.get("stored", 0))
    try:
        p = run_progress(out, batch)
        if p["prepared"] and progress.bar:
            progress.report(p["done"], p["total"], note="done", stored=p.get("stored", 0))
    except OSError:
        pass
    progress.close()
