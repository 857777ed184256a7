"""The ``dascreen`` command line.

Sub-commands
------------
run         the whole pipeline (Snakemake) from a candidate list to levels and ranking
rank        ranking and report only, from an existing levels file (seconds)
calibrate   fit calibration models on the reference sets and print their statistics
partners    list the built-in partner materials
status      molecules done / total of a run folder, finished or with an ETA
config      every configuration field with its description, unit, default and allowed values
store       list, export or prune the results store shared by runs
dyecell     dye-cell mode: sensitiser dyes against an oxide and a redox mediator (screen.dyecell.cli)

Inputs, options and the output folder are checked before the workflow starts
(:mod:`screen.preflight`): a refused one exits with code 2 and one message.
"""

from __future__ import annotations

import argparse
import atexit
import codecs
import errno
import gc
import os
import re
import signal
import sys
import threading
from pathlib import Path


class _Stopped(BaseException):
    """SIGTERM or SIGHUP arrived while a command ran (raised by :func:`_raise_stopped`; a BaseException, so no
    ``except Exception`` of a command takes it for an error of its own)."""

    def __init__(self, signum: int) -> None:
        super().__init__(signum)
        self.signum = signum


def _raise_stopped(signum, frame) -> None:
    raise _Stopped(signum)


#: signals that stop a command with one line and exit code 128 + N (SIGINT arrives as KeyboardInterrupt)
_STOP_SIGNALS = (signal.SIGTERM, signal.SIGHUP)


def _stopped_line(signum: int) -> str:
    """The one line a command stopped by a signal prints.

    Examples
    --------
    >>> _stopped_line(signal.SIGINT)
    'dascreen: stopped by SIGINT (Ctrl-C); nothing more was done: run the same command again to finish'
    """
    name = signal.Signals(signum).name + (" (Ctrl-C)" if signum == signal.SIGINT else "")
    return f"dascreen: stopped by {name}; nothing more was done: run the same command again to finish"


def _interrupted_while_loading(kind, value, tb, _previous=sys.excepthook) -> None:
    """``sys.excepthook`` of the ``dascreen`` script while its modules load: Ctrl-C (or SIGTERM) then gave a
    traceback of whatever module was being imported (an audit of unusual environments); one line and exit code
    128 + N instead. Any other exception goes to the usual hook."""
    if issubclass(kind, (KeyboardInterrupt, _Stopped)):
        signum = value.signum if isinstance(value, _Stopped) else signal.SIGINT
        try:
            print(_stopped_line(signum), file=sys.stderr, flush=True)
        finally:
            os._exit(128 + signum)
    _previous(kind, value, tb)


if os.path.basename(sys.argv[0] if sys.argv else "") == "dascreen":  # the console script only, not an importer
    sys.excepthook = _interrupted_while_loading
    for _sig in _STOP_SIGNALS:
        if signal.getsignal(_sig) == signal.SIG_DFL:  # an ignored one (nohup) stays ignored
            signal.signal(_sig, _raise_stopped)

import yaml  # noqa: E402

from screen import __version__  # noqa: E402
from screen.config import Config, install_problem, nearest_existing  # noqa: E402
from screen.errors import CalculationError, ConfigError, DascreenError, InputError, exit_code  # noqa: E402
from screen.cli_shared import (EXIT_ERROR, EXIT_OK, EXIT_STRICT, _at_least_one, _days, _load,  # noqa: F401,E402
                               _percent,
                               cut_cell, fixed_decimals, not_regular_levels,
                               _print_summary, data_path)
from screen.launch import WORKFLOW, check_engine_args, run_workflow  # noqa: E402
from screen.preflight import GivenOnce  # noqa: E402

__all__ = ["main", "build_parser", "WORKFLOW", "DEFAULT_OUT"]

#: the output folder of ``run``, ``rank`` and ``status`` without --out (the schema's ``out`` default serves a
#: snakemake run started without this command)
DEFAULT_OUT = "results"

def _resolved_out(given: str, option: str = "--out") -> Path:
    """``Path(given).resolve()``, refusing a symbolic-link loop in one line (it gave a "RuntimeError: Symlink loop"
    traceback, an audit of hostile file systems).

    Raises
    ------
    InputError
        Naming the option, the path and the fix.
    """
    try:
        return Path(given).resolve()
    except (RuntimeError, OSError) as exc:  # Python 3.11: RuntimeError("Symlink loop from ..."); later: ELOOP
        if isinstance(exc, OSError) and exc.errno != errno.ELOOP:  # any other OSError is no loop: said as itself
            raise
        raise _loop_error(option, given, exc) from None


def _loop_error(option: str, value, exc=None) -> InputError:
    """The refusal of a path option in which a symbolic link points back to itself (``exc``: what found it)."""
    found = f" ({exc})" if exc is not None else ""
    return InputError(f"{option} {value}: a symbolic link in this path points back to itself{found}; fix the link, "
                      f"or choose another {option}")


def cmd_run(args) -> int:
    """Check the inputs, then run the workflow through Snakemake in a subprocess."""
    from screen.partners import split_partners
    from screen.preflight import (check_calibration, check_candidates, check_out, check_partner_scales,
                                  check_partners, check_profile, check_run_partners)

    check_engine_args(args.snakemake_args)  # before anything is read: the engine's own usage text came at the end
    candidates = Path(args.candidates)
    check_candidates(candidates)
    check_profile(args.profile)  # a missing folder was ignored, a broken one stopped the engine with its usage text
    if args.partner is not None and not args.partner.strip(","+" "):
        raise ConfigError(f"--partner {args.partner!r} names no partner; give a library name (`dascreen partners`), "
                          "a one-row levels CSV, smiles:<SMILES> or id:<ID>, or leave --partner out for the default")
    partners = split_partners([args.partner] if args.partner else [])
    if len(partners) > 1:
        raise ConfigError(f"--partner {args.partner!r}: `dascreen run` ranks against one partner; run with one and "
                          "then `dascreen rank --partner a,b,...` for the partner matrix")
    check_partners(partners, role=args.role, roles_of=candidates)
    out = _resolved_out(args.out)
    check_out(out, candidates, overwrite=args.overwrite, given=args.out)
    cfg = _load(args, {"candidates": str(candidates.resolve()), "out": str(out),
                       "partner": _partner_arg(partners[0] if partners else None),
                       "strict": True if args.strict else None, "rank": {"role": args.role}})
    if not partners:  # the partner of the config (file or default): checked like a --partner
        check_partners([cfg["partner"]], role=cfg["rank"]["role"], roles_of=candidates)
    check_partner_scales(partners or [cfg["partner"]], cfg["levels"]["scale"])
    # an id: partner that is no candidate, or a partner without a role among candidates of both roles, was found
    # by the ranking job after every level was computed (exit 1 and a traceback)
    check_run_partners(partners or [cfg["partner"]], candidates, cfg["rank"])
    check_calibration(cfg, out, args.config)  # hours of reference computation only when asked for
    notice = calibration_notice(cfg, out)
    if notice:
        print(notice, file=sys.stderr)
    earlier = _protocol_of_folder(out)
    if earlier and earlier != cfg.protocol_id:  # an upgrade audit: a new default protocol replaced a run silently
        print(f"dascreen: note: {out} holds a run of protocol {earlier}; these settings give {cfg.protocol_id}, so "
              "its levels and rankings are computed again (the results store serves every molecule both protocols "
              "compute alike)", file=sys.stderr)
    if not args.dry_run:
        from screen.launch import forget_other_input

        for note in forget_other_input(out, candidates):
            print(note, file=sys.stderr)
        _set_aside_foreign_ranking(cfg, out)
    # pinned to the calibration checked above: the workflow never fits one this command did not announce, and its
    # levels job stops with one message if the calibration changes during the run (screen.launch.calibration_pin)
    rc = run_workflow(cfg, out, args.cores, extra=args.snakemake_args, dry_run=args.dry_run, profile=args.profile,
                      verbose=args.verbose, explain=False)  # the one line below says why
    if rc != 0:
        whole = "" if args.verbose or args.dry_run else f"; the engine's whole log: {out / 'logs' / 'workflow.log'}"
        print(f"dascreen: the workflow stopped with exit code {rc}{_why_stopped(out, args)}; job logs in {out}/logs/"
              f"{whole}", file=sys.stderr)
        return EXIT_ERROR
    if args.dry_run:  # last, after the jobs: how the file will be read, which rows are taken as what, which not
        from screen.prepare import options_from_config, preview, preview_lines

        for line in preview_lines(candidates.name, preview(candidates, *options_from_config(cfg))):
            print(line, file=sys.stderr)
        return EXIT_OK
    if not (out / "levels.csv").is_file() and args.snakemake_args:  # e.g. a target of an earlier stage after --
        print(f"dascreen: the workflow stopped before levels.csv, as the arguments after -- asked "
              f"({' '.join(args.snakemake_args)}); the same command without them goes on from there", file=sys.stderr)
        return EXIT_OK
    counts = _print_summary(out / "levels.csv")
    _print_ranking_of_run(cfg, out)
    _refresh_matrices_of_run(cfg, out)
    if cfg["strict"] and (counts["rejected"] or counts["failed"]):
        print("dascreen: --strict: some rows were rejected or failed", file=sys.stderr)
        return EXIT_STRICT
    return EXIT_OK


def _why_stopped(out: Path, args) -> str:
    """``": <cause>"`` for the one-line message of a failed run (a full disk, a job's own message), else ``""``.

    A full disk was said only in a job log while the console said "Please ensure write permissions" (an
    overnight operator's report): :func:`screen.launch.failure_cause` reads the engine's log. This line is all the
    console gets of a failure: the engine's error text (each failed job's command line twice) stays in the log."""
    from screen.launch import failure_cause_in

    if args.verbose or args.dry_run:  # the engine's log went to the terminal
        return ""
    cause = failure_cause_in(out / "logs" / "workflow.log")
    return f": {cause}" if cause else ""


def _protocol_of_folder(out: Path) -> str | None:
    """The protocol id of the run recorded in ``out/config.yaml`` (None without a readable one)."""
    from screen.config import Config

    try:
        return Config.load(out / "config.yaml").protocol_id if (out / "config.yaml").is_file() else None
    except DascreenError:
        return None


def cmd_calibrate(args) -> int:
    """Compute the reference molecules with the run's protocol and fit the models."""
    import shutil

    import pandas as pd

    from screen.calibrate import fingerprint, load_models, stats_table
    from screen.preflight import check_out_folder, check_out_writable, check_reference

    out = Path(args.out).resolve()
    check_out_folder(out, args.out)
    check_out_writable(out, args.out)
    overrides = {"out": str(out), "calibration": {"refit": "always"}}
    if args.reference is not None:
        if not args.reference.strip():
            raise ConfigError("--reference '' names no folder; give a copy of models/reference with your own values, "
                              "or leave --reference out for the shipped reference data")
        overrides["calibration"]["reference"] = str(Path(args.reference).resolve())
    cfg = _load(args, overrides)
    check_reference(cfg["calibration"]["reference"], args.reference, from_raw=bool(args.from_raw))  # before the work
    pid = cfg.protocol_id
    target = out / "models" / pid
    expected = fingerprint(cfg, cfg["calibration"]["reference"])  # what the new models will record
    _check_out_models(out, args.out, cfg, expected)  # --out <repository> replaced the shipped calibration in place
    if args.install is not None:  # a file as --install ended in a traceback after the fit (a careless user's audit)
        _check_install_folder(args.install, pid)
    if args.install and not args.replace_installed:  # refused before anything is computed
        _check_install(Path(args.install).expanduser().resolve() / pid, cfg, args.install, expected)
    mark = _is_calibrate_out(out) or not (target / "ip.json").is_file()  # not a calibration installed there
    new = _made_out_folder(out, args.out)  # --out /sys/x gave a traceback
    if args.from_raw:
        from screen.refit import refit_from_raw

        try:
            refit_from_raw(cfg, [Path(s).resolve() for s in args.from_raw], out / "models")
        except DascreenError:  # a refused source: leave no empty folder behind
            _remove_empty(out, new)
            raise
    else:
        rc = run_workflow(cfg, out, args.cores, [str(target)], verbose=args.verbose, log_name="calibrate-workflow")
        if rc != 0:
            print(f"dascreen: calibration stopped with exit code {rc}; see {out}/logs/", file=sys.stderr)
            return EXIT_ERROR
    if mark:
        _mark_calibrate_out(out, target)
    models = load_models(target, cfg)
    pd.set_option("display.width", 200)
    print(f"\ncalibration models for protocol {pid} (reference: {cfg['calibration']['reference']})")
    print(stats_table(models).to_string(index=False))
    _print_beside_shipped(models, cfg, target)
    failures = pd.read_csv(target / "reference_failures.csv")
    if len(failures):
        print(f"{len(failures)} reference molecule(s) could not be computed: see {target / 'reference_failures.csv'}")
    if args.install:
        dest = Path(args.install).expanduser().resolve() / pid
        if not args.replace_installed:  # same settings and data, yet other numbers (other raw values)
            _check_install_numbers(dest, target, models, cfg, args.install)
        staged = dest.with_name(f".{pid}.installing")
        try:  # copied beside it first: a failed copy leaves the installed calibration as it was
            if staged.exists():
                shutil.rmtree(staged)
            shutil.copytree(target, staged, ignore=shutil.ignore_patterns(".snakemake*"))
            if dest.exists():
                shutil.rmtree(dest)
            staged.rename(dest)
        except OSError as exc:  # checked before the fit; a disk that filled up since is said in one line
            from screen.config import read_problem

            shutil.rmtree(staged, ignore_errors=True)
            raise InputError(f"--install {args.install}: the models were fitted into {target}, but copying them to "
                             f"{dest} failed: {read_problem(exc)}; copy that folder by hand") from None
        print(f"dascreen: models copied to {dest}")
    print(f"dascreen: models in {target}")
    return EXIT_OK


#: the file that marks an ``--out`` folder as the work folder of ``dascreen calibrate`` (its ``models/<protocol-id>``
#: is that command's output, which a later calibration there may replace; :func:`_check_out_models`)
CALIBRATE_MARK = ".dascreen-calibrate.json"


def _mark_calibrate_out(out: Path, target: Path) -> None:
    """Record that ``out`` is the work folder of ``dascreen calibrate`` (:data:`CALIBRATE_MARK`)."""
    from screen.io import write_json

    try:
        write_json({"written_by": "dascreen calibrate", "models": str(target)}, out / CALIBRATE_MARK)
    except OSError:
        pass  # only a later calibration into this --out is checked more strictly without it


def _is_calibrate_out(out: Path) -> bool:
    """True for an ``--out`` that an earlier ``dascreen calibrate`` (:data:`CALIBRATE_MARK`) or a dascreen run or
    calibration workflow (``config.yaml`` and ``logs/``, :func:`screen.launch.run_workflow`) worked in."""
    return (out / CALIBRATE_MARK).is_file() or ((out / "config.yaml").is_file() and (out / "logs").is_dir())


def _same_folder(a: Path, b: Path) -> bool:
    try:
        return a.exists() and b.exists() and os.path.samefile(a, b)
    except OSError:
        return False


def _check_out_models(out: Path, given: str, cfg: Config, expected: dict) -> None:
    """Refuse an ``--out`` whose ``models/<protocol-id>`` is an installed calibration, before anything is computed.

    ``dascreen calibrate --out <repository>`` fitted straight into ``<repository>/models/<protocol-id>``: the shipped
    calibration was replaced in place, past the check of ``--install`` (a second lab's audit). Refused: the shipped
    calibration, always; any other calibration there that was fitted with other settings or data
    (:func:`screen.calibrate.fingerprint_differences`), unless ``--out`` is the work folder of an earlier
    calibration (:func:`_is_calibrate_out`), whose output a new one replaces as before.

    Raises
    ------
    ConfigError
        Naming the folder and the fix: a new ``--out``, and ``--install DIR`` to install (exit code 2).
    """
    from screen.calibrate import fingerprint_differences, installed_fingerprint
    from screen.config import PACKAGE_ROOT, data_path

    pid = cfg.protocol_id
    target = out / "models" / pid
    if not (target / "ip.json").is_file():
        return
    fix = ("choose a new --out for the work (a folder of its own, e.g. --out results/mycal) and add --install DIR to "
           "copy the models where runs find them (a folder of your own; --install's check keeps an installed "
           "calibration unless --replace-installed)")
    shipped = PACKAGE_ROOT / "models" / pid
    if _same_folder(target, shipped) or _same_folder(target, data_path("models") / pid):
        raise ConfigError(f"--out {given}: {target} is the shipped calibration of protocol {pid}, which "
                          f"calibrating into --out {given} would replace in place; {fix}")
    if _is_calibrate_out(out):
        return
    found = installed_fingerprint(target)
    diffs = fingerprint_differences(found, expected, "the calibration there", target, cfg["calibration"]["reference"])
    if diffs:
        raise ConfigError(f"--out {given}: {target} holds an installed calibration of protocol {pid}, not the work of "
                          f"an earlier dascreen calibrate, fitted with other settings or data ({'; '.join(diffs)}), "
                          f"which calibrating into --out {given} would replace in place; {fix}")


def _check_install_folder(given: str, pid: str | None) -> None:
    """Refuse an ``--install`` that is not a folder and cannot become one, before anything is computed.

    ``pid``: the protocol id, whose sub-folder must not be a file either (None: the folder alone).

    Raises
    ------
    ConfigError
        ``--install ''``, a file, a path inside a file or a folder that cannot be written, with the fix.

    Examples
    --------
    >>> import tempfile
    >>> f = Path(tempfile.mkdtemp()) / "good.csv"; _ = f.write_text("id")
    >>> try:
    ...     _check_install_folder(str(f), None)
    ... except ConfigError as exc:
    ...     print(str(exc).split("; ", 1)[0].endswith("good.csv is a file, not a folder"))
    True
    """
    about = "give the models folder the calibration goes into, e.g. --install models (it gets a <protocol-id> folder)"
    if not given.strip():
        raise ConfigError(f"--install '' names no folder; {about}")
    folder = Path(given).expanduser().absolute()
    if folder.exists() and not folder.is_dir():
        raise ConfigError(f"--install {given} is a file, not a folder; {about}")
    parent = nearest_existing(folder.parent)
    if not folder.exists() and not parent.is_dir():
        raise ConfigError(f"--install {given}: {parent} is a file, not a folder; {about}")
    existing = folder if folder.exists() else parent
    if not os.access(existing, os.W_OK | os.X_OK):
        raise ConfigError(f"--install {given}: {existing} cannot be written to; {about} that you can write to")
    if pid is not None and (folder / pid).exists() and not (folder / pid).is_dir():
        raise ConfigError(f"--install {given}: {folder / pid} is a file, not a folder; move it away or {about}")


def _check_install(dest: Path, cfg: Config, given: str, expected: dict | None = None) -> None:
    """Refuse to install over a calibration of this protocol fitted with other settings or data.

    Installing into the shipped ``models`` folder with your own reference data replaced the shipped calibration,
    and every default run was then refused with a message about the reference data (a new user's audit); with the
    same reference data but ``--set polymer.fit_rms_tol_ev=0.2`` it was replaced without a word, as only the
    reference hash was compared (a second lab's audit). Every setting and datum of the fingerprint counts
    (:func:`screen.calibrate.fingerprint_differences`); ``--replace-installed`` replaces deliberately, in the words of
    ``dascreen dyecell --refit``.

    ``expected``: the fingerprint of the new models (default: :func:`screen.calibrate.fingerprint` of ``cfg``).
    """
    from screen.calibrate import fingerprint, fingerprint_differences, installed_fingerprint

    found = installed_fingerprint(dest)
    if not found:  # nothing installed there yet
        return
    ref = cfg["calibration"]["reference"]
    expected = expected or fingerprint(cfg, ref)
    diffs = fingerprint_differences(found, expected, "the installed one", dest, ref)
    if diffs:
        raise ConfigError(_replace_text(given, dest, cfg, "; ".join(diffs)))


def _replace_text(given: str, dest: Path, cfg: Config, why: str) -> str:
    """The refusal of an ``--install`` over an installed calibration, in the words of ``dascreen dyecell --refit``
    (:func:`screen.dyecell.cli._check_refit`)."""
    import shlex

    from screen.config import PACKAGE_ROOT, calibration_set_args, data_path

    shipped = _same_folder(dest.parent, PACKAGE_ROOT / "models") or _same_folder(dest.parent, data_path("models"))
    users = ("every run with the default calibration.models" if shipped else
             f"every run with --set calibration.models={shlex.quote(str(dest.parent))}")
    own = f"{Path(given).name or 'models'}-mine"
    ref = cfg["calibration"]["reference"]
    run = [f"--set calibration.models={own}"]
    if not _same_folder(Path(ref), PACKAGE_ROOT / "models" / "reference"):
        run.append(f"--set calibration.reference={shlex.quote(str(ref))}")
    run += calibration_set_args(cfg)
    return (f"--install {given} would replace the calibration of protocol {cfg.protocol_id} installed in {dest}, "
            f"which {users} of this protocol uses; it differs from this one in what changes the numbers ({why}). "
            f"Pass --replace-installed to replace it, or install into a folder of your own (--install {own}, then "
            f"run with {' '.join(run)})")


def _check_install_numbers(dest: Path, target: Path, models: dict, cfg: Config, given: str) -> None:
    """After the fit: refuse to install over a calibration of the same settings and data whose numbers differ.

    The fingerprint (:func:`_check_install`) does not cover the raw values a refit reads (``--from-raw`` of another
    computation): models of equal fingerprints but other coefficients or statistics are not installed over each
    other without ``--replace-installed``. The new models stay in ``target``.
    """
    from screen.calibrate import MODEL_NAMES
    from screen.io import read_json

    if not (dest / "ip.json").is_file():
        return
    changed = []
    for name in MODEL_NAMES:
        try:
            old = read_json(dest / f"{name}.json")
        except (OSError, ValueError):
            old = None
        if not isinstance(old, dict) or _numbers(old) != _numbers(models[name]):
            changed.append(name)
    if changed:
        raise ConfigError(_replace_text(given, dest, cfg, "same settings and reference data, but the models "
                                        f"{', '.join(changed)} have other numbers: fitted on other raw values")
                          + f"; the new models stay in {target}")


def _numbers(model: dict) -> dict:
    """A model record without its fingerprint: what its numbers depend on and are."""
    return {k: v for k, v in model.items() if k != "fingerprint"}


def _print_beside_shipped(models: dict, cfg: Config, target: Path) -> None:
    """The new leave-one-out figures beside those of the shipped calibration of the same protocol, one line per model:
    how much a lab's own reference rows (or settings) moved the fit (a second lab's audit)."""
    import math

    from screen.calibrate import CalibrationError, MODEL_NAMES, fingerprint_differences, load_models
    from screen.config import PACKAGE_ROOT

    shipped = PACKAGE_ROOT / "models" / cfg.protocol_id
    if not (shipped / "ip.json").is_file() or _same_folder(shipped, target):
        return
    try:
        old = load_models(shipped, check=False)
    except (CalibrationError, OSError, ValueError):
        return
    same = all(_numbers(models[n]) == _numbers(old[n]) for n in MODEL_NAMES)
    if same:
        print(f"dascreen: these are the numbers of the shipped calibration of this protocol ({shipped})")
        return
    diffs = fingerprint_differences(old[MODEL_NAMES[0]].get("fingerprint") or {},
                                    models[MODEL_NAMES[0]].get("fingerprint") or {}, "the shipped one", shipped,
                                    cfg["calibration"]["reference"])

    def ev(value) -> str:
        return "-" if value is None or not math.isfinite(float(value)) else f"{float(value):.3f}"

    print(f"beside the shipped calibration of this protocol ({shipped}"
          + (f"; {'; '.join(diffs)}" if diffs else "") + "): leave-one-out and grouped MAE in eV, here vs shipped")
    for name in MODEL_NAMES:
        a, b = models[name], old[name]
        change = round(float(a["loo_mae_ev"]) - float(b["loo_mae_ev"]), 3) or 0.0  # no "-0.000"
        print(f"  {name:>12s}: n {a['n']} vs {b['n']}; LOO MAE {ev(a['loo_mae_ev'])} vs {ev(b['loo_mae_ev'])} "
              f"({change:+.3f}); grouped MAE {ev(a.get('grouped_mae_ev'))} vs {ev(b.get('grouped_mae_ev'))}")


def _partner_arg(spec: str | None) -> str | None:
    """A partner given as a path to an existing file becomes absolute (the workflow runs elsewhere)."""
    if spec is None:
        return None
    from screen.partners import PartnerError, partner_kind

    try:
        if partner_kind(spec) == "file":
            return str(Path(spec).expanduser().resolve())
    except PartnerError:
        pass  # reported with the library ids when the partner is resolved
    return spec


def calibration_notice(cfg: Config, out: Path) -> str | None:
    """What a run must compute first when it calibrates (``None`` when it uses a calibration as it is).

    A run without a calibration of its settings (protocol, polymer settings,
    engine version, reference data) computes every reference material before any
    level can be calibrated: said before the run starts, with the count and the
    settings that differ from the shipped calibration, because it takes hours.
    ``dascreen run`` gets here only when the run opted in
    (:func:`screen.preflight.check_calibration` refuses the others).
    """
    from screen.preflight import calibration_text, fitted_in, reference_count

    target = out / "models" / cfg.protocol_id
    if fitted_in(out, cfg):
        return None
    text = calibration_text(cfg)
    if text is None:
        if cfg["calibration"]["refit"] != "always":
            return None
        text = (f"calibration.refit=always: this run fits the calibration anew; that computes the "
                f"{reference_count(cfg)} reference materials first — hours on a few cores")
    return (f"dascreen: {text}. This run does that first and fits the models into {target} "
            f"(`dascreen calibrate ... --install {cfg['calibration']['models']}` keeps a calibration for later runs)")


#: the ranking keys in words (``rank.sort_by``), said in the console header when not the default
SORT_WORDS = {"pce_pct": "PCE estimate", "p_above_target": "P(PCE > target)"}

#: fixed decimals of the console tables per column (a meeting-day audit: ``.3g`` printed LUMO "-3" for -3.0014, Voc
#: "1" for 1.0004 and PCE "13" where the report shows 13.0): levels and offsets 2, Voc 3, Jsc 1, PCE and σ 1,
#: probabilities 2
CONSOLE_DECIMALS = {"homo_ev": 2, "lumo_ev": 2, "gap_opt_ev": 2, "delta_lumo_ev": 2, "delta_homo_ev": 2, "voc_v": 3,
                    "jsc_ma_cm2": 1, "pce_pct": 1, "pce_sigma_pct": 1, "p_above_target": 2, "p_aligned": 2}


def _ranked_with(ranking_csv: Path) -> str:
    """``<model> device model, absorber ...; target <t> % PCE; sorted by ...; set ...`` from the ranking's
    sidecar ('' without one).

    A meeting-day audit: the console named neither the device model nor the target of a re-ranking; a later one:
    a ``--set device.min_delta_homo_ev=0.1`` or ``--sort-by`` re-ranking printed the header of the default run.
    """
    import json

    from screen.rank_index import non_default_settings

    try:
        meta = json.loads((Path(ranking_csv).parent / "ranking.meta.json").read_text(encoding="utf-8"))
        device, rank = meta.get("device") or {}, meta.get("rank") or {}
    except (OSError, ValueError, AttributeError):
        return ""
    words = []
    if device.get("model"):
        words.append(f"{device['model']} device model" + (f", absorber {device['absorber']}"
                                                          if device.get("absorber") else ""))
    if rank.get("target_pce_pct") is not None:
        words.append(f"target {_pct_text(rank['target_pce_pct'])} % PCE")
    sort_by = rank.get("sort_by")
    if sort_by and sort_by != "pce_pct":
        words.append(f"sorted by {SORT_WORDS.get(sort_by, sort_by)} ({sort_by})")
    try:
        changed = non_default_settings(meta, skip=("device.model", "device.absorber", "rank.target_pce_pct",
                                                   "rank.sort_by"))
    except Exception:  # noqa: BLE001 - an unreadable schema must not stop the console table
        changed = []
    if changed:
        words.append(f"set {', '.join(changed)}")
    return "; ".join(words)


def _pct_text(value) -> str:
    """A percentage as the console echoes it: four significant digits, no negative zero (``--target-pce -0`` was
    echoed as "-0 %", ``1e-320`` as "9.99989e-321 %", a careless user's audit).

    Examples
    --------
    >>> _pct_text(10.0), _pct_text(12.25), _pct_text(-0.0), _pct_text(1e-320)
    ('10', '12.25', '0', '1e-320')
    """
    return f"{float(value) + 0.0:.4g}"


def _not_ranked_text(ranking_csv: Path) -> str:
    """``" (1 row not ranked: 1 failed)"`` from the ranking's sidecar (``counts.not_ranked``), ``""`` when every row
    was ranked.

    A levels file with a failed row printed "1 donors ranked" and nothing about the other row, while ``dyecell``
    said "1 row(s) not ranked" (a careless user's audit)."""
    from screen.io import read_json

    try:
        meta = read_json(Path(ranking_csv).parent / "ranking.meta.json")
        counts = {str(k): int(v) for k, v in ((meta.get("counts") or {}).get("not_ranked") or {}).items() if v}
    except (OSError, ValueError, AttributeError, TypeError):
        return ""
    total = sum(counts.values())
    if not total:
        return ""
    return (f" ({total} row{'s' if total > 1 else ''} not ranked: "
            f"{', '.join(f'{n} {status}' for status, n in sorted(counts.items()))}; "
            "the reasons are in the levels file)")


def _ranked_count(table) -> tuple[str, str]:
    """``20 donors ranked against`` … ``(12 not paired: same role as the partner)`` of a ranking table: rows of the
    partner's own role cannot pair and are not counted as ranked (a meeting-day audit read "32 ranked against y6"
    of 20 donors and 12 acceptors)."""
    from screen.io import text_cells

    flags = table["flags"].pipe(text_cells) if "flags" in table else None
    same = flags.str.split(";").map(lambda f: "same_role_as_partner" in f) if flags is not None else None
    n_same = int(same.sum()) if same is not None else 0
    paired = table[~same] if same is not None else table
    roles = set(paired["role"].astype(str)) if "role" in paired else set()
    noun = {"donor": "donors", "acceptor": "acceptors"}.get(roles.pop(), "candidates") if len(roles) == 1 else \
        "candidates"
    noun = noun[:-1] if len(paired) == 1 else noun  # "1 donor", not "1 donors"
    return f"{len(paired)} {noun}", (f" ({n_same} not paired: same role as the partner)" if n_same else "")


def _print_ranking(ranking_csv: Path, top: int = 10) -> None:
    """Print the best ``top`` rows of a ranking.csv and its path."""
    import pandas as pd

    from screen.io import text_cells

    table = pd.read_csv(ranking_csv, dtype={"id": str}, keep_default_na=False, na_values=[""])
    show = table.head(top).copy()
    show["id"] = [cut_cell(str(i).replace("\n", "\\n").replace("\r", "\\r"), 28) for i in show["id"]]
    show["flags"] = [cut_cell(v, 40) for v in show["flags"].pipe(text_cells)]
    cols = ["rank", "id", "role", "homo_ev", "lumo_ev", "gap_opt_ev", "delta_lumo_ev", "delta_homo_ev", "voc_v",
            "jsc_ma_cm2", "pce_pct", "pce_sigma_pct", "p_above_target", "p_aligned", "passes", "flags"]
    if not len(table):
        print(f"dascreen: no candidate to rank (every row was rejected or failed; the reasons are in levels.csv); "
              f"empty ranking -> {ranking_csv}")
        return
    cols = [c for c in cols if c in show]
    for col, decimals in CONSOLE_DECIMALS.items():
        if col in show:
            show[col] = [fixed_decimals(v, decimals) for v in show[col]]
    passing = int(table["passes"].astype(str).str.lower().eq("true").sum())
    partner = table["partner"].iloc[0]
    ranked, not_paired = _ranked_count(table)
    settings = _ranked_with(ranking_csv)
    print(f"dascreen: {ranked} ranked against {partner}{not_paired}{_not_ranked_text(ranking_csv)}"
          f"{'; ' + settings if settings else ''}; {passing} pass the filters; top {min(top, len(table))}:")
    with pd.option_context("display.width", 250, "display.max_columns", 30):
        print(show[cols].to_string(index=False, na_rep="-"))
    report = Path(ranking_csv).parent / "report.html"
    # the file a reader wants is the report (a new user's audit: the last line named only the CSV)
    print(f"dascreen: ranking -> {ranking_csv}" + (f"; report -> {report}" if report.is_file() else ""))


def _print_ranking_of_run(cfg: Config, out: Path) -> None:
    from screen.partners import PartnerError, partner_slug
    from screen.rank_io import ranking_folder

    try:
        path = out / "rankings" / ranking_folder(partner_slug(cfg["partner"]), cfg) / "ranking.csv"
    except PartnerError:
        return
    if path.is_file():
        _print_ranking(path)


def _set_aside_foreign_ranking(cfg: Config, out: Path) -> None:
    """Move the ranking of another levels file out of the run's own ranking folder before the workflow ranks
    (:func:`screen.rank_io.set_aside_foreign`, also for a run that resumes before it has its ``levels.csv``: it
    replaced a ranking of measured levels made in its folder meanwhile without a word, a careless user's audit),
    and say so on stderr."""
    from screen.partners import PartnerError, partner_slug
    from screen.rank_io import ranking_folder, set_aside_foreign

    try:
        folder = ranking_folder(partner_slug(cfg["partner"]), cfg)
    except PartnerError:
        return
    moved = set_aside_foreign(out, folder)
    if moved:
        print(f"dascreen: rankings/{folder} held the ranking of another levels file; moved to rankings/{moved}, "
              "and this run's levels are ranked again", file=sys.stderr)
        from screen.rank_index import write_ranking_index

        try:
            write_ranking_index(out)
        except (OSError, ValueError):
            pass  # the run's ranking job writes it again


def _refresh_matrices_of_run(cfg: Config, out: Path) -> None:
    """Rebuild the partner matrices that join the run's own ranking when its levels changed."""
    from screen.matrix import refresh_after_run
    from screen.partners import PartnerError, partner_slug
    from screen.rank_io import ranking_folder

    try:
        refresh_after_run(out, ranking_folder(partner_slug(cfg["partner"]), cfg))
    except PartnerError:
        return


def _compute_partner(cfg: Config, out: Path, spec: str, verbose: bool = False) -> Path | None:
    """Run the workflow for a ``smiles:`` partner's batch only (cached); return its levels file."""
    from screen.partners import partner_kind, partner_levels_path

    if partner_kind(spec) != "smiles":
        return None
    from screen.preflight import calibration_text  # only here: the calibration modules are not needed otherwise

    cfg = cfg.with_overrides({"partner": spec})
    target = partner_levels_path(spec, out)
    missing = None if cfg["calibration"]["refit"] == "always" else calibration_text(cfg, out)
    if missing:
        from screen.partners import PartnerError

        raise PartnerError(
            f"partner {spec!r} is computed like the candidates and needs a calibration of the run's settings: "
            f"{missing}. Run `dascreen calibrate --install {cfg['calibration']['models']}` with those settings "
            "first, pass a models folder with --models, or add --set calibration.refit=always to calibrate now")
    rc = run_workflow(cfg, out, 1, [str(target)], cfg_file=target.parent / "config.yaml", verbose=verbose,
                      log_name=f"{target.parent.name}/workflow", label=f"dascreen partner {spec}",
                      batch=target.parent.name)
    if rc != 0:
        raise CalculationError(f"the workflow computing partner {spec!r} stopped with exit code {rc}; see "
                               f"{out}/logs/{target.parent.name}/")
    return target


def _models_override(models: str | None) -> dict:
    """``--models DIR`` (a models/<protocol-id> folder) as config overrides."""
    if not models:
        return {}
    folder = Path(models).resolve()
    if not folder.is_dir():
        raise InputError(f"--models {models!r}: no such folder (a models/<protocol-id> folder is expected)")
    return {"calibration": {"models": str(folder.parent), "refit": "never"}}


def cmd_rank(args) -> int:
    """Rank a levels file against one or more partners (a partner matrix for several); a new smiles:
    partner is computed by the workflow first."""
    from screen.partners import partner_kind, split_partners
    from screen.preflight import (check_out_folder, check_out_writable, check_partners, check_rank_config,
                                  check_rank_sets)
    from screen.rank_io import check_before_computing, run_rank

    out = _resolved_out(args.out)
    check_out_folder(out, args.out)
    # before any work: a read-only folder said "…/rankings: Permission denied" after the ranking; the folder the
    # ranking goes to is what must be writable (a read-only run folder with a writable rankings/ was ranked before)
    # (a rankings/ folder that exists is checked where the ranking is written, rank_io.check_writable)
    rankings = out / "rankings"
    if not rankings.is_dir():
        check_out_writable(out, args.out, f" (the ranking goes to {rankings}; a read-only run's levels are ranked "
                                          f"with --levels {out / 'levels.csv'} --out NEW_FOLDER)")
    if args.partner is not None and not split_partners(args.partner):
        raise ConfigError(f"--partner {' '.join(repr(p) for p in args.partner)} names no partner; give a library name "
                          "(`dascreen partners`), a one-row levels CSV, smiles:<SMILES> or id:<ID>, or leave "
                          "--partner out for the run's partner")
    partners = split_partners(args.partner or [])
    if not any(spec.strip().lower().startswith("smiles:") for spec in partners):  # computed: they apply
        check_rank_sets(args.set, "rank")
    if args.levels is not None and not args.levels.strip():  # fell back to OUT/levels.csv without a word
        raise ConfigError("--levels '' names no file; give a levels file (id,homo_ev,lumo_ev,gap_opt_ev,scale), or "
                          "leave --levels out to rank OUT/levels.csv of a run")
    levels = Path(args.levels) if args.levels else out / "levels.csv"
    if levels.is_dir():
        raise InputError(f"levels file {str(levels)!r} is a folder; give a levels file with --levels FILE (a CSV "
                         "with columns id,homo_ev,lumo_ev,gap_opt_ev,scale, e.g. OUT/levels.csv of a run)")
    if not levels.is_file() and not args.levels:
        from screen.preflight import run_active

        if run_active(out):  # the run is still computing: its levels.csv comes at the end
            raise InputError(f"{out} holds a run that is still computing (no levels.csv yet); wait for it "
                             f"(`dascreen status --out {args.out}`) or pass --levels FILE")
    if not levels.is_file() and levels.exists():  # <(cat f.csv), a FIFO or /dev/null: read once, or nothing
        raise InputError(not_regular_levels(levels))
    if not levels.is_file():
        raise InputError(f"levels file {str(levels)!r} does not exist; run `dascreen run` first or pass "
                         "--levels FILE (columns id,homo_ev,lumo_ev,gap_opt_ev,scale)")
    note = None
    if args.config is None and (out / "config.yaml").is_file():
        args.config = str(out / "config.yaml")  # the run's own settings, so smiles: partners share its protocol
        note = f"dascreen: using the run's configuration {args.config}"  # said once the checks have passed
    check_partners(partners, levels, role=args.role)
    check_rank_config(args.config, levels, "rank", implied=note is not None)
    # out: a smiles: partner is computed into this folder (not the one a copied run's config.yaml names)
    cfg = _load(args, {**_models_override(args.models), "out": str(out),
                       "rank": {"role": args.role, "sort_by": args.sort_by, "target_pce_pct": args.target_pce}})
    if args.models and Path(args.models).resolve().name != cfg.protocol_id:
        raise ConfigError(f"--models {args.models!r} is not a folder of this run's protocol {cfg.protocol_id}")
    partners = partners or [cfg["partner"]]
    smiles = any(partner_kind(spec) == "smiles" for spec in partners)
    if smiles or len(partners) > 1:  # refused now, not after computing a partner or ranking the ones before it
        check_before_computing(levels, partners, cfg, out_dir=out)
    if note:
        print(note)
    computed = {spec: _compute_partner(cfg, out, spec, args.verbose) for spec in partners}  # smiles: ones only
    if smiles and len(partners) > 1:  # the computed partners' own levels, before any ranking is written
        check_before_computing(levels, partners, cfg, out_dir=out, partner_levels=computed)
    new = _made_out_folder(out, args.out)  # before any ranking: --out /sys/x gave a traceback
    paths, replaced = [], []
    try:
        for spec in partners:
            paths.append(run_rank(levels, spec, out, cfg.with_overrides({"partner": spec}),
                                  partner_levels=computed[spec], replaced=replaced if len(partners) > 1 else None))
    except DascreenError:  # refused before anything was written: leave no empty folder behind
        _remove_empty(out, new)
        raise
    except RuntimeError as exc:  # the report failed after the ranking was written
        if isinstance(exc, DascreenError):
            raise
        print(f"dascreen: error: {exc}", file=sys.stderr)
        return EXIT_ERROR
    for path in paths:
        _print_ranking(path, args.top)
    if len(paths) > 1:
        from screen.matrix import run_matrix

        folder = run_matrix(paths, out, cfg)
        print(f"dascreen: partner matrix ({len(paths)} partners) -> {folder / 'matrix.csv'} and "
              f"{folder / 'overview.html'}")
    if replaced:  # other matrices that join a re-ranked folder: rebuilt once, now that every partner is ranked
        from screen.matrix import refresh_matrices

        for name in dict.fromkeys(replaced):
            refresh_matrices(out, name, skip=(folder,) if len(paths) > 1 else ())
    return EXIT_OK


def _made_out_folder(out: Path, given: str) -> Path | None:
    """Create ``--out`` (:func:`screen.preflight.make_out_folder`); the first folder made here, for
    :func:`_remove_empty` (None when ``out`` existed)."""
    from screen.preflight import make_out_folder

    new = next((p for p in [*reversed(out.parents), out] if not p.exists()), None)
    make_out_folder(out, given)
    return new


def _remove_empty(out: Path, top: Path | None) -> None:
    """Remove ``out`` and its parents up to ``top`` (the first folder a command created) while they are empty."""
    if top is None:
        return
    for folder in [out, *out.parents]:
        try:
            folder.rmdir()  # only an empty folder
        except OSError:
            return
        if folder == top:
            return


def cmd_partners(args) -> int:
    """Print the built-in partner library."""
    import pandas as pd

    from screen.partners import LIBRARY_PATH, library_table

    table = library_table(source_width=0 if args.full else 70)
    with pd.option_context("display.width", 250, "display.max_colwidth", None):
        print(table.to_string(index=False, float_format=lambda x: f"{x:.2f}"))
    print(f"\n{len(table)} partners in {LIBRARY_PATH}; energies in eV on the vacuum scale. Use one with "
          "--partner ID; or a one-row levels CSV, smiles:<SMILES> or id:<ID of a levels row>.")
    return EXIT_OK


def cmd_status(args) -> int:
    """Print how far a run has got: running with an ETA, stopped, or finished."""
    from screen.io import run_progress
    from screen.preflight import run_active

    out = Path(args.out)
    if not args.out.strip():
        raise InputError("--out '' names no folder; give the --out folder of a dascreen run")
    if not out.exists():
        raise InputError(f"--out {args.out}: no such folder; give the --out folder of a dascreen run")
    if not out.is_dir():
        raise InputError(f"--out {args.out} is a file, not a folder; give the --out folder of a dascreen run")
    p = run_progress(out)
    if not p["prepared"]:
        raise InputError(f"--out {args.out} holds no prepared batch: it is not the --out folder of a dascreen run, "
                         "or its run has not got past the prepare stage yet")
    pct = 100.0 * p["done"] / p["total"] if p["total"] else 100.0
    counts = f"{p['done']}/{p['total']} molecules computed ({pct:.0f}%)"
    levels = out / "levels.csv"
    dye = out / "dyecell" / "levels_raw.csv"
    if not levels.is_file() and dye.is_file():  # a dye-cell run writes its levels there (a meeting audit)
        levels = dye
    if run_active(out):
        elapsed = _now() - p["started"]
        eta = elapsed / p["done"] * (p["total"] - p["done"]) if p["done"] else float("nan")
        print(f"dascreen: running: {counts}, structures {p['structures']}/{p['total']}, {_minutes(elapsed)} "
              f"elapsed, ETA {'unknown' if eta != eta else _minutes(eta)}")
    elif (levels.is_file() and p["done"] >= p["total"] and levels.stat().st_mtime >= p["started"]
          and levels != dye and (unranked := _run_ranking_problem(out))):  # a full disk or a kill at the ranking
        print(f"dascreen: not finished: {counts}, but its ranking rankings/{unranked[0]} is incomplete "
              f"({unranked[1]}); `dascreen run` with the same --out finishes it")
    elif levels.is_file() and p["done"] >= p["total"] and levels.stat().st_mtime >= p["started"]:
        took = _minutes(levels.stat().st_mtime - p["started"])
        print(f"dascreen: finished: {counts} in {took}; results in {levels}")
    else:
        again = "`dascreen dyecell` with the same candidates and --out" if levels == dye else "`dascreen run` with the same --out"
        print(f"dascreen: not running: {counts}; {again} resumes it")
    _print_rankings(out)
    _print_dye_rankings(out)
    return EXIT_OK


def _ranking_problem(folder: Path) -> str | None:
    """Why a ranking folder is incomplete (a full disk or a kill while it was written), None when complete:
    ``ranking.meta.json`` is written last (:func:`screen.rank_io.run_rank`), and the report goes with it when the
    meta says one was to be written (not with ``run_rank(report=False)`` or a report module that is not there)."""
    from screen.rank_io import RANKING_META, RANKING_REPORT

    if not (folder / RANKING_META).is_file():
        return f"no {RANKING_META}: it stopped before it was finished"
    if _report_expected(folder) and not (folder / RANKING_REPORT).is_file():
        return f"its {RANKING_REPORT} is missing"
    return None


def _report_expected(folder: Path) -> bool:
    """Whether a ranking folder's report.html was to be written: its ``ranking.meta.json`` says ``"report":
    "written"`` or ``"failed: ..."`` (:func:`screen.rank_io.run_rank`), or has no such key (written before it was
    recorded); not ``"off"`` or ``"skipped: ..."``. A meta that cannot be read expects it."""
    from screen.io import read_json
    from screen.rank_io import RANKING_META

    try:
        said = read_json(folder / RANKING_META).get("report")
    except (OSError, ValueError, AttributeError, DascreenError):
        return True
    return not (isinstance(said, str) and (said == "off" or said.startswith("skipped")))


def _run_ranking_problem(out: Path) -> tuple[str, str] | None:
    """``(folder, why)`` when the run's own ranking (its config.yaml's partner) is missing or incomplete."""
    from screen.partners import partner_slug
    from screen.rank_io import ranking_folder

    try:
        cfg = Config.load(out / "config.yaml")
        folder = ranking_folder(partner_slug(cfg["partner"]), cfg)
    except (DascreenError, OSError, ValueError, KeyError):
        return None  # no readable configuration: nothing to say about its ranking
    if not (out / "rankings" / folder).is_dir():
        return folder, "not written yet"
    why = _ranking_problem(out / "rankings" / folder)
    return (folder, why) if why else None


def _incomplete_folders(out: Path) -> list[str]:
    """The ranking folders of ``OUT/rankings`` without ``ranking.meta.json`` (partner matrices left out)."""
    from screen.rank_io import RANKING_META

    root = out / "rankings"
    if not root.is_dir():
        return []
    return [f.name for f in sorted(root.iterdir()) if f.is_dir() and not f.name.startswith("matrix--")
            and not (f / RANKING_META).is_file()]


def _print_rankings(out: Path, limit: int = 12) -> None:
    """The folder's rankings, most recent first (:mod:`screen.rank_index`; a meeting-day audit found eight
    ``y6--<hash>`` folders and nothing that said what set them apart); then the incomplete ones."""
    from screen.rank_index import ranking_index

    index = ranking_index(out)
    incomplete = _incomplete_folders(out)
    for name in incomplete:  # left out of the index: a ranking.csv there may be beside nothing else
        print(f"dascreen: ranking {out / 'rankings' / name} is incomplete ({_ranking_problem(out / 'rankings' / name)}); "
              "rank again (the same `dascreen rank` or `dascreen run`) to finish it")
    if not len(index):
        return
    print(f"dascreen: {len(index)} ranking(s) in {out / 'rankings'}, most recent first:")
    rows = list(index.head(limit).itertuples())
    for r in rows:
        levels = "" if Path(str(r.levels)).resolve() == (out / "levels.csv").resolve() else f", levels {r.levels}"
        missing = r.target_pce_pct is None or r.target_pce_pct != r.target_pce_pct  # None or NaN
        target = "" if missing else f", target {_pct_text(r.target_pce_pct)} %"
        settings = r.settings if isinstance(r.settings, str) and r.settings else ""
        settings = f"; set {settings}" if settings else ""
        print(f"  {r.written_utc}  {r.folder}: against {r.partner}, {r.model} model{target}, sorted by {r.sort_by}"
              f"{settings}{levels}; {r.passing} of {r.ranked} pass{_stale_text(out, r)}{_report_text(out, r)}")
    _more(len(index) - len(rows), out / "rankings-index.csv", out / "rankings")


def _report_text(out: Path, row) -> str:
    """What ``status`` adds to a ranking whose report.html is missing (a full disk while it was written); nothing
    when it was written without a report on purpose (:func:`_report_expected`)."""
    from screen.rank_io import RANKING_REPORT

    folder = out / "rankings" / row.folder
    if (folder / RANKING_REPORT).is_file() or not _report_expected(folder):
        return ""
    return f"; incomplete: its {RANKING_REPORT} is missing (rank again to write it)"


def _stale_text(out: Path, row) -> str:
    """What ``status`` adds to a ranking whose levels file changed since it was ranked (``levels_state`` of
    :mod:`screen.rank_index`): that it is stale and the command that ranks it again; or that the file is gone;
    ``""`` for a current one.

    After a run went on or ran again, ``status`` listed the rankings made from its earlier ``levels.csv`` as if they
    were current (a careless user's audit)."""
    import shlex

    from screen.io import read_json

    state = getattr(row, "levels_state", "current")
    if state not in ("changed", "missing"):
        return ""
    if state == "missing":
        return f"; its levels file {row.levels} is gone"
    try:
        spec = (read_json(out / "rankings" / row.folder / "ranking.meta.json").get("partner") or {}).get("spec")
    except (OSError, ValueError, AttributeError):
        spec = None
    words = ["dascreen", "rank", "--out", str(out), "--partner", str(spec or row.partner)]
    if Path(str(row.levels)).resolve() != (out / "levels.csv").resolve():
        words += ["--levels", str(row.levels)]
    settings = row.settings if isinstance(row.settings, str) else ""
    for item in (part.strip() for part in settings.split(";")):
        if item:
            words += ["--set", item]
    return f"; ranked from an earlier version of its levels file; re-rank with `{shlex.join(words)}`"


def _print_dye_rankings(out: Path, limit: int = 12) -> None:
    """The dye-cell rankings of a run folder (``OUT/dyecell/<oxide>--<mediator>--<hash>/``), most recent first."""
    from screen.io import read_json

    found = sorted((out / "dyecell").glob("*/ranking.meta.json"), key=lambda p: p.stat().st_mtime, reverse=True)
    if not found:
        return
    print(f"dascreen: {len(found)} dye-cell ranking(s) in {out / 'dyecell'}, most recent first (re-rank against "
          f"another oxide or mediator with `dascreen dyecell --out {out} --mediator M`):")
    shown = 0
    for path in found[:limit]:
        try:
            meta = read_json(path)
        except (OSError, ValueError):
            continue
        counts = meta.get("counts") or {}
        oxide, mediator = ((meta.get(part) or {}).get("id") or "?" for part in ("oxide", "mediator"))
        print(f"  {path.parent.name}: {oxide} with {mediator}; {counts.get('viable', '?')} of "
              f"{counts.get('ranked', '?')} viable, {counts.get('passing', '?')} pass")
        shown += 1
    _more(len(found) - shown, None, out / "dyecell")


def _more(hidden: int, index: Path | None, folder: Path) -> None:
    """The line after a cut list of rankings: how many are not shown and where they all are (before, ``status``
    listed 12 of 13 rankings without a word, an overnight operator's report)."""
    if hidden <= 0:
        return
    where = f"{index} lists every one" if index is not None and index.is_file() else f"every one is in {folder}"
    print(f"  ... and {hidden} more not shown ({where})")


def _now() -> float:
    import time

    return time.time()


def _minutes(seconds: float) -> str:
    return "an unknown time" if seconds != seconds else f"{seconds / 60:.1f} min"


def cmd_config(args) -> int:
    """Print every configuration field with its description, unit, default and allowed values."""
    if args.yaml:
        print(f"# candidates and out serve a snakemake run started without the dascreen command; `dascreen run` "
              f"takes them\n# from its CANDIDATES argument and --out (default ./{DEFAULT_OUT})")
        print(yaml.safe_dump(Config.load(None).to_dict(), sort_keys=False), end="")
        return EXIT_OK
    from screen.preflight import config_text

    print(config_text(cli_defaults=_CLI_DEFAULTS), end="")
    return EXIT_OK


#: fields the dascreen command sets itself, whatever the schema's default (shown by `dascreen config`)
_CLI_DEFAULTS = {
    "candidates": "none (the CANDIDATES argument of dascreen run)",
    "out": f"./{DEFAULT_OUT} (--out)",
}


def cmd_store(args) -> int:
    """List, export or prune the results store."""
    import sqlite3

    from screen.store import ResultStore, damaged_store_text, store_location, store_text

    if args.action == "export":  # --to x.xyz wrote SD records under another name
        _check_export_target(args.to)
    path = Path(args.store).expanduser() if args.store else store_location(_load(args, {}))
    if path is None:
        raise ConfigError("no results store: store.path is null (or DASCREEN_STORE is empty); pass --store FILE")
    if path.is_dir():
        raise InputError(f"results store {path} is a folder; give the store file (store.path, default "
                         "~/.cache/dascreen/store.sqlite)")
    if not path.is_file():
        raise InputError(f"results store {path} does not exist (a run creates it)")
    # checked without changing it (list and export only read): a file that is not a store is refused, never made
    # into one; prune opens it for writing once it checked out
    store = ResultStore(path, read_only=True)
    try:  # closed at the end: the process exits without collecting it, which left the -wal and -shm files
        store.check()
        if args.protocol:  # an unknown protocol wrote an empty export and pruned nothing, both with exit 0
            held = store.protocols()
            unknown = [p for p in dict.fromkeys(args.protocol) if p not in held]
            if unknown:
                raise InputError(f"unknown protocol {', '.join(unknown)}; the store {path} holds: "
                                 f"{', '.join(held) if held else 'no rows'} (`dascreen store list`)")
        if args.action == "list":
            print(store_text(store, keys=args.keys, used=_store_ids_in_use(_load(args, {}))), end="")
        elif args.action == "export":
            _store_export(args, path, store)
        else:
            if not args.dry_run:  # checked read-only above; now opened to delete
                store.close()
                store = ResultStore(path)
            _store_prune(args, path, store)
    except sqlite3.DatabaseError as exc:  # a damaged page met while reading ended in a traceback (an audit)
        raise InputError(damaged_store_text(path, exc)) from None
    finally:
        store.close()
    return EXIT_OK


def _store_export(args, path: Path, store) -> None:
    """``dascreen store export``."""
    from screen.config import read_problem
    from screen.store import export_store

    try:
        n = export_store(store, args.to, protocol=args.protocol)
    except OSError as exc:  # /sys/x.sdf gave a traceback
        raise InputError(f"--to {args.to}: cannot write {Path(args.to).absolute()}: {read_problem(exc)}; "
                         "choose a file in a folder you can write to") from None
    print(f"dascreen: {n} records of {path} -> {args.to}")


def _store_prune(args, path: Path, store) -> None:
    """``dascreen store prune`` (``store`` opened for writing unless ``--dry-run``; a read-only store refuses
    to delete with one message, exit code 2)."""
    days = args.older_than
    read = _store_ids_in_use(_load(args, {}))
    for pid in dict.fromkeys(args.protocol or ()):
        if pid in read:  # an upgrade audit: the earlier rule's structures id was pruned without a word
            which = read[pid].removeprefix("yes").removeprefix(", ")
            print(f"dascreen: note: {pid} is read by the current settings{' ' + which if which else ''}; "
                  "its molecules will be computed again when a run needs them", file=sys.stderr)
    gone = store.prune(protocols=args.protocol or (), dry_run=args.dry_run,
                       older_than_s=None if days is None else days * 86400.0)
    verb = "would delete" if args.dry_run else "deleted"
    age = f"{gone['old']} older than {days:g} days" if days is not None else "no age limit given"
    print(f"dascreen: {verb} {sum(gone.values())} rows of {path} ({gone['protocol']} of the given "
          f"protocols, {age}, {gone['corrupt']} that do not check out)")


def _store_ids_in_use(cfg) -> dict[str, str]:
    """The stage protocol ids a run with these settings reads, each with a note (``dascreen store list``)."""
    from screen.store import earlier_structures_id, stage_protocol_id

    structures, earlier = stage_protocol_id("structures", cfg.structures), earlier_structures_id(cfg.structures)
    used = {structures: "yes", stage_protocol_id("electronic", cfg.electronic): "yes"}
    if earlier != structures:
        used[earlier] = "yes, for molecules that newer structures options leave unchanged"
    return used


def _check_export_target(to: str) -> None:
    """Refuse an export file of another type than ``.sdf`` or ``.csv`` or in a folder that does not exist."""
    target = Path(to).expanduser()
    if target.suffix.lower() not in (".sdf", ".csv"):
        raise InputError(f"--to {to}: the export is written as .sdf (geometries with their raw levels) or .csv (every "
                         f"row); give a file name ending in one of them, e.g. --to {target.stem or 'store-export'}.sdf")
    if target.is_dir():
        raise InputError(f"--to {to} is a folder; give a file name, e.g. --to {Path(to) / 'store-export.sdf'}")
    parent = target.absolute().parent
    if not parent.is_dir():
        raise InputError(f"--to {to}: the folder {parent} does not exist; create it first or choose another file")


def _add_run(sub) -> None:
    """The ``run`` sub-command."""
    p = sub.add_parser("run", help="whole pipeline: candidates -> levels.csv -> ranking and report",
                       description="Run the whole pipeline through Snakemake: prepare, structures, electronic "
                                   "(xTB), levels (calibrated) and the ranking against the partner.")
    p.add_argument("candidates", help="candidate list: .csv (id,smiles[,name,role,...]), .smi or .sdf")
    p.add_argument("--partner", default=None, action=GivenOnce,
                   help="partner material: library name (see `dascreen partners`), a one-row levels CSV, "
                        "smiles:<SMILES> or id:<ID> (default: the config's partner, {default:partner})")
    p.add_argument("--role", choices=["donor", "acceptor"], default=None, action=GivenOnce,
                   help="role of candidates without a role column value; a smiles: or id: partner takes the other "
                        "role (config rank.role; needed when such a partner meets candidates of both roles)")
    p.add_argument("--out", default=DEFAULT_OUT, help="output folder (default: ./%(default)s)")
    p.add_argument("--cores", type=_at_least_one, default=os.cpu_count() or 1,
                   help="CPU cores to use, 1 or more (default: all)")
    p.add_argument("--config", default=None, help="YAML config file (see `dascreen config` for every field)")
    p.add_argument("--set", action="append", default=[], metavar="SECTION.KEY=VALUE",
                   help="override one config field, e.g. --set structures.geometry=xtb (repeatable)")
    p.add_argument("--strict", action="store_true",
                   help="exit with code 3 if any row is rejected or fails (default: report them, exit 0)")
    p.add_argument("--dry-run", action="store_true",
                   help="show the jobs Snakemake would run, then say how CANDIDATES will be read (rows accepted as "
                        "molecules or polymers, rows rejected and why); computes nothing, writes only "
                        "OUT/config.dry-run.yaml "
                        "(the configuration it would run with) and the engine's OUT/.snakemake folder")
    p.add_argument("--profile", default=None,
                   help="Snakemake workflow profile: a folder holding config.yaml with the engine's options (e.g. "
                        "profiles/slurm for a cluster); checked before the run starts")
    p.add_argument("--verbose", action="store_true",
                   help="show the workflow engine's log as it runs (default: a progress display; the log goes to "
                        "OUT/logs/workflow.log)")
    p.add_argument("--overwrite", action="store_true",
                   help="accept an --out folder that holds the run of another candidate file (its results are "
                        "replaced)")
    p.set_defaults(func=cmd_run)
    p.epilog = ("Arguments after a bare `--` are passed to Snakemake (e.g. -- --keep-going), checked first by its own "
                "parser; the options dascreen sets itself (--cores, --directory, --snakefile, --configfile, --config, "
                "--workflow-profile, --dry-run, --until, --omit-from) are refused: use dascreen's own.")


def _add_calibrate(sub) -> None:
    """The ``calibrate`` sub-command."""
    p = sub.add_parser("calibrate", help="fit calibration models on the reference sets and print statistics",
                       description="Compute the reference molecules with this run's protocol (same conformer "
                                   "route, engine and method as the candidates), fit the linear models and print "
                                   "n, slope, intercept, R², leave-one-out MAE/RMSE, max error and σ, and beside "
                                   "them the leave-one-out and grouped MAE of the shipped calibration of the same "
                                   "protocol, one line per model.")
    p.add_argument("--config", default=None, help="YAML config file (protocol settings are what matter)")
    p.add_argument("--set", action="append", default=[], metavar="SECTION.KEY=VALUE",
                   help="override one config field, e.g. --set electronic.method=IPEA1-xTB (repeatable)")
    p.add_argument("--reference", default=None,
                   help="reference folder with ip_gas.csv, ea_gas.csv, gap_optical.csv, levels_film.csv "
                        "(default: the shipped models/reference); e.g. a copy with your own measured film levels")
    p.add_argument("--out", default="results/calibration",
                   help="work and output folder (the models go to OUT/models/<protocol-id>/); refused when that "
                        "folder is the shipped calibration, or an installed one fitted with other settings or data "
                        "(use --install for that)")
    p.add_argument("--cores", type=_at_least_one, default=os.cpu_count() or 1, help="CPU cores to use, 1 or more")
    p.add_argument("--install", default=None, metavar="MODELS_DIR",
                   help="also copy the fitted models to MODELS_DIR/<protocol-id>/ (e.g. models) so later runs "
                        "use them without refitting; refused when that folder holds this protocol's calibration "
                        "fitted with other settings or data: other reference data, polymer or protocol settings, "
                        "engine version, or other numbers from other raw values (see --replace-installed)")
    p.add_argument("--replace-installed", action="store_true",
                   help="with --install: replace a calibration of this protocol fitted with other settings or data")
    p.add_argument("--from-raw", action="append", default=[], metavar="FOLDER",
                   help="refit from stored raw values instead of computing: a model folder (models/<protocol-id>, "
                        "its reference_raw.csv) or a run folder whose levels.csv holds new reference structures "
                        "(repeatable; same protocol required). Seconds instead of hours after a reference value "
                        "changed")
    p.add_argument("--verbose", action="store_true", help="show the workflow engine's log as it runs")
    p.set_defaults(func=cmd_calibrate)


def _add_rank(sub) -> None:
    """The ``rank`` sub-command."""
    p = sub.add_parser("rank", help="ranking and report only, from an existing levels file (seconds)",
                       description="Pair every candidate of a levels file with a partner material, estimate "
                                   f"Voc/Jsc/PCE with the device model ({_DEVICE_MODELS}), apply the filters "
                                   "and write "
                                   "OUT/rankings/<partner>--<settings hash>/ (ranking.csv, shortlist.sdf, ranking.meta.json, "
                                   "report); with several partners also OUT/rankings/matrix--<hash>/. "
                                   "Runs no quantum chemistry, except that a new smiles: partner is computed once "
                                   "through the workflow, with the run's protocol and calibration.")
    p.add_argument("--partner", action="append", default=None, metavar="P",
                   help="library name (see `dascreen partners`), a one-row levels CSV, smiles:<SMILES> or "
                        "id:<ID> of a levels row (default: the partner of OUT/config.yaml or --config, else "
                        "{default:partner}). Repeat it or give a comma list for "
                        "several partners: one ranking each plus a candidates x partners matrix and overview")
    p.add_argument("--levels", default=None, action=GivenOnce,
                   help="levels file to rank (default OUT/levels.csv); any CSV with id,homo_ev,lumo_ev,gap_opt_ev,"
                        "scale works, e.g. your own cyclic-voltammetry levels")
    p.add_argument("--out", default=DEFAULT_OUT, help="output folder (default: ./%(default)s)")
    p.add_argument("--role", choices=["donor", "acceptor"], default=None, action=GivenOnce,
                   help="role of rows without a role column value (default: the partner's complement; such a row is "
                        "flagged role_from_levels or role_unsupported by what its levels support)")
    p.add_argument("--sort-by", choices=["pce_pct", "p_above_target"], default=None, action=GivenOnce,
                   help="ranking key after the pass/fail split (default {default:rank.sort_by})")
    p.add_argument("--target-pce", type=_percent, default=None, metavar="PCT", action=GivenOnce,
                   help="efficiency threshold for p_above_target, in %%, from 0 to 100 (default "
                        "{default:rank.target_pce_pct})")
    p.add_argument("--config", default=None,
                   help="YAML config file (default: OUT/config.yaml if present, else the defaults)")
    p.add_argument("--set", action="append", default=[], metavar="SECTION.KEY=VALUE",
                   help="override one config field, e.g. --set device.eqe=0.7 (repeatable)")
    p.add_argument("--models", default=None, metavar="DIR",
                   help="models/<protocol-id> folder to calibrate a smiles: partner with (default: the run's)")
    p.add_argument("--top", type=_at_least_one, default=10, help="rows to print, 1 or more (default 10)")
    p.add_argument("--verbose", action="store_true", help="show the workflow engine's log of a smiles: partner")
    p.set_defaults(func=cmd_rank)


def _add_small(sub) -> None:
    """The ``partners``, ``status`` and ``config`` sub-commands."""
    p = sub.add_parser("partners", help="list the built-in partner materials",
                       description="Print the built-in partner library (id, role, HOMO, LUMO, optical gap, scale, "
                                   "source).")
    p.add_argument("--full", action="store_true", help="do not shorten the sources")
    p.set_defaults(func=cmd_partners)

    p = sub.add_parser("status", help="molecules done / total of a run folder, with an ETA",
                       description="Count the molecules a (running) batch has finished, from its shard outputs "
                                   "and journals, and estimate the time left.")
    p.add_argument("--out", default=DEFAULT_OUT, help="the run's output folder (default: ./%(default)s)")
    p.set_defaults(func=cmd_status)

    p = sub.add_parser("config", help="every configuration field: description, unit, default, allowed values",
                       description="Print every configuration field with its description, unit, default and "
                                   "allowed values (--yaml: a complete config file with the defaults).")
    p.add_argument("--yaml", action="store_true", help="print the default configuration as YAML")
    p.set_defaults(func=cmd_config)


def _add_store(sub) -> None:
    """The ``store`` sub-command."""
    p = sub.add_parser("store", help="list, export or prune the results store shared by runs",
                       description="The results store keeps every computed geometry and raw xTB result, so no "
                                   "molecule is computed twice with one protocol (config store.path, default "
                                   "~/.cache/dascreen/store.sqlite; DASCREEN_STORE overrides it).")
    p.add_argument("action", choices=["list", "export", "prune"],
                   help="list: rows per stage and protocol; export: geometries (.sdf) or all results (.csv); "
                        "prune: delete rows of some protocols, old rows and rows that do not check out")
    p.add_argument("--store", default=None, metavar="FILE", help="the store file (default: from the config)")
    p.add_argument("--config", default=None, help="YAML config file (for store.path)")
    p.add_argument("--set", action="append", default=[], metavar="SECTION.KEY=VALUE", help="e.g. --set store.path=F")
    p.add_argument("--keys", action="store_true", help="list: every row, not only the counts")
    p.add_argument("--to", default="store-export.sdf", metavar="FILE",
                   help="export: target file, .sdf (geometries with raw levels) or .csv (default store-export.sdf)")
    p.add_argument("--protocol", action="append", default=None, metavar="ID",
                   help="export: only this stage protocol; prune: delete its rows (repeatable)")
    p.add_argument("--older-than", type=_days, default=None, metavar="DAYS", help="prune: rows older than DAYS (>= 0)")
    p.add_argument("--dry-run", action="store_true", help="prune: count, delete nothing")
    p.set_defaults(func=cmd_store)


#: the device models in words, for help texts ({default:...} is filled in when the help is printed)
_DEVICE_MODELS = ("device.model, default {default:device.model}: fitted = an energy-loss model fitted on published "
                  "devices, scharber = the published Scharber rule")


def _schema_default(path: str) -> str:
    """The schema's default of a config field in words (``partner`` → ``y6``)."""
    from screen.schema import defaults

    value = defaults()
    for part in path.split("."):
        value = value[part]
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    return f"{value:g}" if isinstance(value, float) else str(value)


class _HelpFormatter(argparse.HelpFormatter):
    """Fills ``{default:FIELD}`` of help texts with the schema's default when the help is printed.

    The defaults stay in the schema alone (the single source of every default), and a command that
    prints no help never reads it.
    """

    _FIELD = re.compile(r"\{default:([\w.]+)\}")

    def _fill(self, text: str) -> str:
        return self._FIELD.sub(lambda m: _schema_default(m.group(1)), text) if text and "{default:" in text else text

    def _format_text(self, text: str) -> str:
        return super()._format_text(self._fill(text))

    def _get_help_string(self, action) -> str:
        return self._fill(super()._get_help_string(action))


class _Parser(argparse.ArgumentParser):
    """An argument parser with :class:`_HelpFormatter` (its sub-command parsers are of this class too); its errors
    add a hint when a name starting with ``-`` was read as an option (:func:`_dash_hint`)."""

    def __init__(self, *args, **kwargs):
        kwargs.setdefault("formatter_class", _HelpFormatter)
        super().__init__(*args, **kwargs)

    def error(self, message):
        super().error(message + _dash_hint(self, message))


def _parser_of(parser: argparse.ArgumentParser, args) -> argparse.ArgumentParser:
    """The sub-command parser a command line ended in (``dascreen rank …`` → rank's), for its usage."""
    current = parser
    while True:
        sub = next((a for a in current._actions if isinstance(a, argparse._SubParsersAction)), None)
        name = getattr(args, sub.dest, None) if sub is not None and sub.dest else None
        if name not in (sub.choices if sub is not None else {}):
            return current
        current = sub.choices[name]


def build_parser() -> argparse.ArgumentParser:
    """The argument parser (exposed for documentation and tests)."""
    parser = _Parser(
        prog="dascreen",
        description="Screen organic-photovoltaic donor/acceptor candidates: calibrated xTB frontier levels, "
                    f"offsets to a partner material, Voc/Jsc/PCE estimates from a device model ({_DEVICE_MODELS}) "
                    "and a ranked report. Results are screening estimates, not measurements.",
    )
    parser.add_argument("--version", action="version", version=f"dascreen {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    from screen.dyecell.cli import add_dyecell

    for add in (_add_run, _add_calibrate, _add_rank, _add_small, _add_store, add_dyecell):
        add(sub)
    return parser


def _freeze_at_exit() -> None:
    """Leave the process's objects out of the garbage collections Python runs while it shuts down.

    A command ends with its process, which returns all memory at once; the cyclic
    collections of interpreter shutdown only cost time (0.16 s of CPU after a
    10 000-row ``dascreen rank``).  :func:`gc.freeze` at exit (after the output is
    written) moves every object to the permanent generation that collections skip;
    objects are still released by reference counting, and finalizers of objects in
    reference cycles are not guaranteed at exit by Python anyway.  Registered once
    per process.
    """
    atexit.unregister(gc.freeze)
    atexit.register(gc.freeze)


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``dascreen`` console script."""
    _freeze_at_exit()
    _console_streams()
    handlers = _catch_stop_signals()
    try:
        return _main(argv)
    except (KeyboardInterrupt, _Stopped) as exc:  # Ctrl-C, SIGTERM or SIGHUP: one line, 128 + N, no traceback
        signum = exc.signum if isinstance(exc, _Stopped) else signal.SIGINT
        if threading.current_thread() is threading.main_thread():
            for sig in (signal.SIGINT, *_STOP_SIGNALS):  # a second Ctrl-C must not cut this line short
                signal.signal(sig, signal.SIG_IGN)
        try:
            print(_stopped_line(signum), file=sys.stderr, flush=True)
        except (OSError, ValueError):  # the terminal has gone (SIGHUP)
            pass
        return 128 + signum
    finally:
        for sig, handler in handlers.items():
            signal.signal(sig, handler if handler is not None else signal.SIG_DFL)


def _console_errors(exc: UnicodeError):
    """The error handler of the console streams (:func:`_console_streams`): a character the stream's encoding
    lacks is written as its escape (``\\u0130``, as ``backslashreplace``), a byte of a file name that is not
    UTF-8 as that byte (as ``surrogateescape``, the rule under the C locale).

    Examples
    --------
    >>> print("BTD-İı lat\\udce9".encode("latin-1", "dascreen-console"))
    b'BTD-\\\\u0130\\\\u0131 lat\\xe9'
    """
    if not isinstance(exc, UnicodeEncodeError):
        raise exc
    out = bytearray()
    for char in exc.object[exc.start:exc.end]:
        code = ord(char)
        if 0xDC80 <= code <= 0xDCFF:
            out.append(code - 0xDC00)
        else:
            out += (f"\\x{code:02x}" if code <= 0xFF else f"\\u{code:04x}" if code <= 0xFFFF
                    else f"\\U{code:08x}").encode("ascii")
    return bytes(out), exc.end


codecs.register_error("dascreen-console", _console_errors)


def _console_streams() -> None:
    """Let the console streams write any text: a character the terminal's encoding lacks (an id "BTD-İı" under
    ``LC_ALL=de_DE.ISO-8859-1`` or ``LC_ALL=C PYTHONUTF8=0``) is written as ``\\u0130`` instead of stopping the
    command with a traceback after its work was done (an audit of unusual environments); a file name's byte
    that is not UTF-8 is written as that byte, as the C locale's ``surrogateescape`` does
    (:func:`_console_errors`). A stream with another handler (``backslashreplace``, standard error's) or one that
    replaced the console's is left as it is."""
    if sys.stdout is None:  # started with standard output closed (`dascreen partners >&-`): print nowhere (a review:
        sys.stdout = open(os.devnull, "w", encoding="utf-8")  # noqa: SIM115 - an AttributeError traceback before)
    if sys.stderr is None:
        sys.stderr = open(os.devnull, "w", encoding="utf-8")  # noqa: SIM115
    for stream, console in ((sys.stdout, sys.__stdout__), (sys.stderr, sys.__stderr__)):
        if stream is not console:  # replaced (a test's capture, a program that calls main): left as it is
            continue
        if getattr(stream, "errors", None) in ("strict", "surrogateescape") and hasattr(stream, "reconfigure"):
            try:
                stream.reconfigure(errors="dascreen-console")
            except (AttributeError, ValueError, OSError):
                pass


def _catch_stop_signals() -> dict:
    """Make SIGTERM and SIGHUP raise :class:`_Stopped` in the main thread (their default ended ``dascreen rank``
    with exit code 143 and no word); a signal the caller ignores (``nohup``) stays ignored. Returns the handlers
    to restore."""
    if threading.current_thread() is not threading.main_thread():
        return {}
    previous = {signal.SIGINT: signal.getsignal(signal.SIGINT)}  # unchanged; restored after a Ctrl-C's line
    for sig in _STOP_SIGNALS:
        current = signal.getsignal(sig)
        if current != signal.SIG_IGN:
            previous[sig] = signal.signal(sig, _raise_stopped)
    return previous


#: options and arguments that name a file or folder: ``~`` is expanded in each (``--out '~/x'`` made a folder
#: named ``~`` in the current one, and ``run '~/c.csv'``, ``--levels '~/l.csv'``, ``--config '~/c.yaml'`` said
#: "does not exist", while ``--partner`` and ``--install`` expanded it; an audit of unusual environments)
PATH_OPTIONS = ("candidates", "out", "levels", "config", "profile", "reference", "install", "from_raw", "models",
                "store", "to", "oxide", "mediator")

#: path options whose name a command records in its outputs (the report, the sidecars) as UTF-8 text
_RECORDED_PATHS = {"candidates": "CANDIDATES", "levels": "--levels"}


def _expand_user(args) -> None:
    """``~`` and ``~user`` at the start of every path option (:data:`PATH_OPTIONS`) expanded, as a shell does.

    Examples
    --------
    >>> ns = argparse.Namespace(out="~/x", levels=None, from_raw=["~/m", "n"], oxide="tio2")
    >>> _expand_user(ns)
    >>> ns.out == os.path.expanduser("~/x"), ns.from_raw[1], ns.oxide
    (True, 'n', 'tio2')
    """
    def expand(value):
        return os.path.expanduser(value) if isinstance(value, str) and value.startswith("~") else value

    for dest in PATH_OPTIONS:
        value = getattr(args, dest, None)
        if isinstance(value, list):
            setattr(args, dest, [expand(v) for v in value])
        elif value is not None:
            setattr(args, dest, expand(value))


def _option_name(dest: str) -> str:
    """The command-line spelling of a path option's ``dest`` (``from_raw`` -> ``--from-raw``; ``CANDIDATES``)."""
    return "CANDIDATES" if dest == "candidates" else "--" + dest.replace("_", "-")


def _check_symlink_loops(args) -> None:
    """Refuse a path option in which a symbolic link points back to itself, for every command (``dyecell --levels``
    and ``calibrate --out`` gave a "RuntimeError: Symlink loop" traceback, a maintainer's review).

    Raises
    ------
    InputError
        Naming the option, the path and the fix.
    """
    for dest in PATH_OPTIONS:
        values = getattr(args, dest, None)
        for value in values if isinstance(values, list) else [values]:
            if not isinstance(value, str) or not value:
                continue
            try:
                os.stat(value)
            except OSError as exc:
                if exc.errno == errno.ELOOP:
                    raise _loop_error(_option_name(dest), value) from None
            except ValueError:  # a NUL byte: said by the command that uses it
                continue


def _check_path_names(args) -> None:
    """Refuse an input file whose path is not UTF-8 text (a name made on a Latin-1 system: ``lev\\xe9.csv``), and
    a path option with a symbolic-link loop (:func:`_check_symlink_loops`).

    Its path is recorded in the report and sidecars as text, and writing them stopped with "report failed:
    UnicodeEncodeError" after the ranking was written (an audit of unusual environments).

    Raises
    ------
    InputError
        Naming the option, the byte and the fix.
    """
    _check_symlink_loops(args)
    for dest, option in _RECORDED_PATHS.items():
        value = getattr(args, dest, None)
        if not isinstance(value, str) or not value:
            continue
        try:
            full = os.path.abspath(value)
        except OSError:  # no current folder: said by _check_current_folder
            full = value
        try:
            full.encode("utf-8")
        except UnicodeEncodeError as exc:
            byte = ord(full[exc.start]) - 0xDC00 if 0xDC80 <= ord(full[exc.start]) <= 0xDCFF else None
            shown = os.fsencode(full).decode("utf-8", "backslashreplace")
            which = f" (byte 0x{byte:02x})" if byte is not None else ""
            raise InputError(f"{option} {shown}: this path is not UTF-8 text{which}, and the report records it as "
                             "text; rename the file or its folder to a UTF-8 name (or copy it to one)") from None


def _check_current_folder(args) -> None:
    """Refuse relative paths when the current folder no longer exists (deleted or moved under the shell): the
    system's "[Errno 2] No such file or directory" named no path (an audit of unusual environments)."""
    try:
        os.getcwd()
        return
    except FileNotFoundError:
        pass
    relative = []
    for dest in PATH_OPTIONS:
        if dest == "to" and getattr(args, "action", None) != "export":
            continue
        values = getattr(args, dest, None)
        for value in values if isinstance(values, list) else [values]:
            if isinstance(value, str) and value and not os.path.isabs(value):
                relative.append(f"{'--' + dest.replace('_', '-') if dest != 'candidates' else 'CANDIDATES'} {value}")
    if relative:
        where = os.environ.get("PWD") or "the current folder"
        raise InputError(f"the current folder {where} no longer exists (deleted or moved), and {', '.join(relative)} "
                         "is relative to it; cd to an existing folder, or give absolute paths")


def _matplotlib_fallback() -> None:
    """Point matplotlib at a folder of its own when HOME's folders cannot be written (a read-only HOME): it printed
    a two-line warning on every ranking and rebuilt its font cache each time. A per-user folder in the temporary
    folder (created ``rwx------``, used only when it is this user's and not writable by others), else a new
    temporary one; nothing when ``MPLCONFIGDIR`` is set or matplotlib's folders can be written."""
    import stat
    import tempfile

    from screen.launch import matplotlib_unwritable

    if not matplotlib_unwritable():
        return
    try:
        folder = Path(tempfile.gettempdir()) / f"dascreen-matplotlib-{os.getuid()}"
        folder.mkdir(mode=0o700, exist_ok=True)
        info = folder.lstat()
        if not stat.S_ISDIR(info.st_mode) or info.st_uid != os.getuid() or info.st_mode & 0o022:
            folder = Path(tempfile.mkdtemp(prefix="dascreen-matplotlib-"))
    except (OSError, AttributeError):  # no writable temporary folder either: matplotlib says so itself
        return
    os.environ["MPLCONFIGDIR"] = str(folder)


#: the command line :func:`main` parses: before a bare ``--`` and after it (for :meth:`_Parser.error`'s hints)
_COMMAND_LINE: list[list[str]] = [[], []]


def _dash_hint(parser: argparse.ArgumentParser, message: str) -> str:
    """``"; a file name starting with '-' is read as an option: write ./-two.csv"`` for an argparse error that a
    name starting with ``-`` caused (``dascreen run -two.csv`` said "the following arguments are required:
    candidates"; ``dascreen run -- -two.csv`` handed the file to the workflow engine), else ``""``.

    Examples
    --------
    >>> p = build_parser()
    >>> run = p._subparsers._group_actions[0].choices["run"]
    >>> _COMMAND_LINE[:] = ["run", "-two.csv"], []
    >>> _dash_hint(run, "the following arguments are required: candidates")
    "; a file name starting with '-' is read as an option: write ./-two.csv"
    >>> _COMMAND_LINE[:] = ["rank", "--out", "-x"], []
    >>> _dash_hint(run, "argument --out: expected one argument")
    "; a value starting with '-' is read as an option: write --out ./-x (or --out=-x)"
    >>> _COMMAND_LINE[:] = [], []
    """
    argv, after = _COMMAND_LINE
    known = set(getattr(parser, "_option_string_actions", {}))
    expected = re.match(r"argument (\S+?)(?:/\S+)?: expected one argument", message)
    if expected:
        action = parser._option_string_actions.get(expected.group(1)) if known else None
        strings = set(action.option_strings) if action is not None else {expected.group(1)}
        for option, value in zip(argv, argv[1:]):
            if option in strings and value.startswith("-") and value not in known:
                return (f"; a value starting with '-' is read as an option: write {option} ./{value} "
                        f"(or {option}={value})")
        return ""
    if not ("required" in message or "unrecognized arguments" in message):
        return ""

    def file_like(token: str) -> bool:
        try:
            float(token)
            return False  # a negative number
        except ValueError:
            pass
        return (len(token) > 1 and token.startswith("-") and not token.startswith("--") and token not in known
                and (os.path.exists(token) or "." in token or "/" in token))

    named = [t for t in argv if file_like(t)]
    if named:
        return f"; a file name starting with '-' is read as an option: write ./{named[0]}"
    named = [t for t in after if file_like(t)]
    if named and "required" in message:
        return (f"; everything after a bare -- goes to the workflow engine, so {named[0]} was not read as a file: "
                f"write ./{named[0]} (without the --)")
    return ""


def _needs_models(args) -> bool:
    """Whether this command reads the shipped ``models/`` folder (the calibration, the reference data or the fitted
    device model; :func:`screen.config.install_problem`): ``run`` and ``calibrate`` always, ``dyecell`` when it
    computes levels (CANDIDATES or ``--refit``), ``rank`` with the fitted device model or a ``smiles:`` partner.
    ``partners``, ``config``, ``status``, ``store``, ``dyecell --list`` and re-rankings of a dye file do not."""
    command = args.command
    if command in ("run", "calibrate"):
        return True
    if command == "dyecell":
        return not args.list and bool(args.candidates or args.refit)
    if command != "rank":
        return False
    from screen.partners import split_partners

    ns = argparse.Namespace(**vars(args))
    implied = Path(args.out) / "config.yaml"
    if ns.config is None and implied.is_file():  # the run's own settings, as cmd_rank reads them
        ns.config = str(implied)
    try:
        partners = split_partners(args.partner or [])
        cfg = _load(ns, {"rank": {"role": args.role}})
        partners = partners or [cfg["partner"]]
    except DascreenError:  # refused by the command itself, after this line
        return True
    smiles = any(str(spec).strip().lower().startswith("smiles:") for spec in partners)
    return smiles or cfg["device"]["model"] == "fitted"


#: errno values of a path the user gave that cannot be used as given (exit 2), with the fix; any other OSError is a
#: failure while writing or reading (exit 1: a full disk, a quota, a read-only file system, an I/O error)
_PATH_ERRORS = {errno.ENOTDIR: "a part of this path is a file where a folder is needed; move it away or choose "
                               "another path",
                errno.EISDIR: "this is a folder where a file is needed; move it away or choose another path",
                errno.EEXIST: "a file is in the way where a folder is needed; move it away or choose another path",
                errno.ELOOP: "a symbolic link in this path points back to itself; fix the link or choose another path",
                errno.ENAMETOOLONG: "the name is too long for the file system; choose a shorter path"}
_WRITE_ERRORS = {errno.ENOSPC: "free some space there (or choose another --out), then run the command again",
                 errno.EDQUOT: "your disk quota is used up; free some space (or choose another --out), then run the "
                               "command again",
                 errno.EFBIG: "the file is larger than the file system or your limits allow (ulimit -f); choose "
                              "another --out, then run the command again",
                 errno.EROFS: "the file system is read-only; choose another --out"}


def _shown_path(filename) -> str:
    """The file an OSError names, with a temporary file of :func:`screen.io.atomic_path` (``.name.x1y2.tmp``)
    shown as the file it was to become.

    Examples
    --------
    >>> _shown_path("/r/y6--0/.ranking.meta.json.ab_12x.tmp"), _shown_path("/r/a.csv"), _shown_path(None)
    ('/r/y6--0/ranking.meta.json', '/r/a.csv', 'a file')
    """
    if filename is None:
        return "a file"
    path = Path(os.fsdecode(filename))
    name = path.name
    if name.startswith(".") and name.endswith(".tmp") and name.count(".") >= 3:
        return str(path.with_name(name[1:-4].rsplit(".", 1)[0]))
    return str(path)


def _is_input_path(filename, args) -> bool:
    """Whether ``filename`` is (or lies in) a path the command reads: an input option other than --out / --to /
    --install (compared as absolute paths)."""
    if filename is None:
        return False
    try:
        name = os.path.abspath(os.fsdecode(filename))
    except (OSError, ValueError):
        return False
    for dest in PATH_OPTIONS:
        if dest in ("out", "to", "install", "store"):
            continue
        values = getattr(args, dest, None)
        for value in values if isinstance(values, list) else [values]:
            if isinstance(value, str) and value:
                given = os.path.abspath(value)
                if name == given or name.startswith(given.rstrip(os.sep) + os.sep):
                    return True
    return False


#: files a command reads from its --out folder without an option naming them (``rank`` without --levels reads
#: OUT/levels.csv): an error there is one of reading (they are written by the workflow's own processes)
_OUT_INPUTS = ("levels.csv", "levels.csv.meta.json", "config.yaml", "levels.oligomers.csv")


def _is_out_input(filename, args) -> bool:
    """Whether ``filename`` is one of :data:`_OUT_INPUTS` in the command's --out folder.

    Examples
    --------
    >>> ns = argparse.Namespace(out="/r")
    >>> _is_out_input("/r/levels.csv", ns), _is_out_input("/r/rankings/y6--0/ranking.csv", ns)
    (True, False)
    """
    out = getattr(args, "out", None)
    if filename is None or not isinstance(out, str) or not out:
        return False
    try:
        name, folder = os.path.abspath(os.fsdecode(filename)), os.path.abspath(out)
    except (OSError, ValueError):
        return False
    return any(name == os.path.join(folder, inside) for inside in _OUT_INPUTS)


def _os_error_text(exc: OSError, args) -> tuple[str, int]:
    """The one line and exit code of an OSError no command handled itself (see :data:`_PATH_ERRORS`): "cannot
    write" only for the errors of writing (:data:`_WRITE_ERRORS`), "cannot read" for an input, else "cannot use"
    (an I/O error on OUT/levels.csv was said as "cannot write", a maintainer's review)."""
    path = _shown_path(exc.filename)
    cause = exc.strerror or str(exc)
    if exc.errno in _PATH_ERRORS:
        return f"{path}: {cause}; {_PATH_ERRORS[exc.errno]}", exit_code(InputError(cause))
    if exc.errno in _WRITE_ERRORS:
        return f"cannot write {path}: {cause}; {_WRITE_ERRORS[exc.errno]}", EXIT_ERROR
    read = _is_input_path(exc.filename, args) or _is_out_input(exc.filename, args)
    return (f"{'cannot read' if read else 'cannot use'} {path}: {cause}; check the disk and the path, then run the "
            "command again"), EXIT_ERROR


def _main(argv: list[str] | None = None) -> int:
    """:func:`main` without its signal handling."""
    parser = build_parser()
    argv = list(sys.argv[1:] if argv is None else argv)
    passthrough: list[str] = []
    if "--" in argv:  # everything after a bare -- goes to Snakemake unchanged (run only)
        cut = argv.index("--")
        argv, passthrough = argv[:cut], argv[cut + 1:]
    _COMMAND_LINE[:] = argv, passthrough
    args, unknown = parser.parse_known_args(argv)
    if unknown:  # an unknown option after the sub-command gets the sub-command's usage, not the top level's
        command = argv.index(args.command) if args.command in argv else len(argv)
        first = argv.index(unknown[0]) if unknown[0] in argv else len(argv)
        (_parser_of(parser, args) if first > command else parser).error(
            f"unrecognized arguments: {' '.join(unknown)}")
    args.snakemake_args = passthrough
    try:
        if passthrough and args.command != "run":  # were dropped without a word
            raise ConfigError(f"arguments after -- ({' '.join(passthrough)}) go to the workflow engine of `dascreen "
                              f"run` only; `dascreen {args.command}` takes none")
        _expand_user(args)
        _check_current_folder(args)
        _check_path_names(args)
        problem = install_problem()  # a non-editable install has no models/ folder (a packaging audit)
        if problem and _needs_models(args):  # before any work, one line (a run stopped after its checks before)
            print(f"dascreen: {problem}", file=sys.stderr)
            return exit_code(ConfigError(problem))
        _matplotlib_fallback()
        rc = args.func(args)
        sys.stdout.flush()  # a closed pipe is found here, not while Python shuts down
        return rc
    except BrokenPipeError:  # `dascreen status | head -1`: the reader has gone, which is no error of ours
        # the recipe of the Python docs (signal, "Note on SIGPIPE"): no output goes anywhere after this
        try:
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        except (OSError, ValueError, AttributeError):  # a stdout without a file descriptor (a test's capture)
            pass
        return 128 + signal.SIGPIPE  # what a program stopped by SIGPIPE returns (141), as the shells expect
    except DascreenError as exc:  # refused input or a failed calculation: one message, no traceback
        # a class may name itself (errors.FolderInUse: "folder in use", not a configuration problem)
        kind = getattr(exc, "console_kind", None) or ("configuration error" if isinstance(exc, ConfigError)
                                                       else "error")
        print(f"dascreen: {kind}: {exc}", file=sys.stderr)
        return exit_code(exc)
    except FileNotFoundError as exc:  # a named file that does not exist is the user's input, not a bug
        print(f"dascreen: error: {exc}", file=sys.stderr)
        return exit_code(InputError(str(exc)))
    except PermissionError as exc:  # a path the user may not write or read (the commands check theirs first)
        if exc.filename is None:  # raised inside a library, naming no path: a real bug shows its traceback
            raise
        if _is_input_path(exc.filename, args) or _is_out_input(exc.filename, args):  # "choose a path you can write
            # to" was said of an unreadable input (also OUT/levels.csv, read when --levels is not given)
            print(f"dascreen: error: cannot read {exc.filename}: {exc.strerror}; make it readable (chmod u+r), or "
                  "give a copy you can read", file=sys.stderr)
        else:
            print(f"dascreen: error: cannot write {_shown_path(exc.filename)}: {exc.strerror}; choose a path you can "
                  "write to", file=sys.stderr)
        return exit_code(InputError(str(exc)))
    except OSError as exc:  # a full disk, a file where a folder goes, ...: one line naming the path, no traceback
        if exc.filename is None:  # ENOMEM, or one raised inside a library: a real bug shows its traceback
            raise
        text, code = _os_error_text(exc, args)
        print(f"dascreen: error: {text}", file=sys.stderr)
        return code
    except UnicodeDecodeError as exc:  # a file read as text that is not UTF-8 (the readers name theirs first)
        print(f"dascreen: error: a file given is not UTF-8 text ({exc}); save it as UTF-8", file=sys.stderr)
        return exit_code(InputError(str(exc)))

if __name__ == "__main__":
    sys.exit(main())
