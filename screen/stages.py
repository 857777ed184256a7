"""Job-level entry points: ``python -m screen.stages <stage> ...``.

The workflow rules call these so that each job is its own process (a native
crash costs one job, never the scheduler) with its own thread settings. Each
sub-command is a thin wrapper around a function of the stage's module, which
is what Python users call directly.
"""

from __future__ import annotations

import argparse
import gzip
import json
import math
import os
import sys
from dataclasses import replace

from screen.config import Config
from screen.errors import DascreenError, exit_code
from screen.provenance import provenance

__all__ = ["main", "EXECUTION_ENV", "EXIT_STRICT"]

#: environment variable with the ``execution`` section (JSON) the workflow hands its jobs
#: (``rules/common.smk``): it changes no number, so it is no param of a rule (a change would re-run the jobs); a
#: job's own ``--config`` section ``execution`` wins
EXECUTION_ENV = "DASCREEN_EXECUTION"
#: exit code of the ``strict`` job when a row was rejected or failed (that of ``dascreen run --strict``)
EXIT_STRICT = 3


def _prepare(args, cfg):
    from screen.prepare import options_from_config, prepare

    opts, polymer, truncate = options_from_config(cfg)
    if args.max_shards:
        n_rows = _count_rows(args.input)
        opts = replace(opts, shard_size=max(opts.shard_size, math.ceil(n_rows / args.max_shards)))
    summary = prepare(args.input, args.outdir, opts, polymer, truncate)
    print(json.dumps(summary))


def _count_rows(path) -> int:
    """Candidates a file holds at most: its lines, or for an SD file its records (``$$$$`` lines; a second API pass:
    500 molecules as SD records counted 97 500 lines, so the 400-shard cap made 4 shards of them instead of 13)."""
    sd = str(path).lower().endswith((".sdf", ".sd", ".sdf.gz"))
    opener = gzip.open if str(path).lower().endswith(".gz") else open
    with opener(path, "rb") as fh:
        if sd:
            return max(1, sum(1 for line in fh if line.strip() == b"$$$$"))
        return sum(1 for _ in fh)


def _structures(args, cfg):
    from screen.structures import run_structures

    ex = cfg.execution
    table = run_structures(args.shard, args.sdf, args.table, cfg.structures, isolate=ex.isolate,
                           timeout_s=ex.molecule_timeout_s)
    print(table["status"].value_counts().to_dict())


def _electronic(args, cfg):
    from screen.electronic import run_electronic

    ex = cfg.execution
    table = run_electronic(args.sdf, args.table, args.out, cfg.electronic, isolate=ex.isolate,
                           timeout_s=ex.molecule_timeout_s)
    print(table["status"].value_counts().to_dict())


def _compute(args, cfg):
    from screen.compute import run_compute

    ex = cfg.execution
    structures, electronic = run_compute(args.shard, args.sdf, args.table, args.out, cfg.structures, cfg.electronic,
                                         isolate=ex.isolate, timeout_s=ex.molecule_timeout_s)
    print({"structures": structures["status"].value_counts().to_dict(),
           "electronic": electronic["status"].value_counts().to_dict()})


class CalibrationChanged(Exception):
    """The calibration a levels job is to use is not the one the run was started with, or no longer matches the
    run's settings: the job stops with this message (no traceback, no level calibrated)."""


def _calibration_fix(folder) -> str:
    return (f"Run the same `dascreen run` command again: it checks the installed calibration anew and reuses every "
            f"molecule computed so far; if it then finds no calibration of this run's settings (reference data "
            f"edited, models not yet refitted), it names the command that refits one from the stored raw values in "
            f"seconds (`dascreen calibrate --from-raw {folder} ...`)")


def _fingerprint_changes(models: dict, cfg, folder) -> list[str]:
    """How the models' fingerprint differs from the run's (the keys :func:`screen.calibrate.load_models` checks)."""
    from screen.calibrate import FINGERPRINT_KEYS, fingerprint

    ref = cfg["calibration"]["reference"]
    expected = fingerprint(cfg, ref)
    out = []
    for key in FINGERPRINT_KEYS:
        found = {json.dumps(m.get("fingerprint", {}).get(key), sort_keys=True) for m in models.values()}
        if found == {json.dumps(expected[key], sort_keys=True)}:
            continue
        if key == "reference_sha256":
            fitted = ", ".join(f"{json.loads(f) or '?'}"[:12] + "\u2026" for f in sorted(found))
            out.append(f"the reference data in {ref} are not those the models in {folder} were fitted on (SHA-256 "
                       f"{expected[key][:12]}\u2026 now; fitted on {fitted})")
        else:
            out.append(f"{key}: the models in {folder} have {', '.join(sorted(found))}, this run "
                       f"{json.dumps(expected[key])}")
    return out


def _pinned_models(folder, cfg, pinned: str):
    """The models of ``folder`` and their :func:`screen.provenance.calibration_record`, checked.

    ``pinned``: the record of the calibration the ``dascreen`` command found when it started the workflow (JSON
    text, :data:`screen.launch.PIN_ENV`; ``""`` for a bare snakemake run). The model files must still be those
    (same SHA-256) and still match the run's settings and reference data; otherwise :class:`CalibrationChanged`
    says what changed and the fix.
    """
    from screen.calibrate import CalibrationError, load_models
    from screen.provenance import calibration_record

    record = calibration_record(folder)
    pin = json.loads(pinned) if pinned else None
    changed = []
    if pin and pin.get("models_sha256") != record["models_sha256"]:
        now = (f"{record['models_sha256'][:12]}\u2026 now" if record["models_sha256"] else
               "now a model file is missing")
        changed.append(f"{record['folder']} holds other model files than at the start (SHA-256 "
                       f"{str(pin.get('models_sha256'))[:12]}\u2026 when the run was started, {now})")
    try:
        models = load_models(folder, cfg, check=False)
    except CalibrationError as exc:  # a model file missing or unreadable
        models = None
        if not changed:
            changed.append(str(exc).split("; run `dascreen calibrate`")[0])
    changed += _fingerprint_changes(models, cfg, record["folder"]) if models else []
    if not changed:
        return models, record
    if pin:
        raise CalibrationChanged(
            f"the calibration changed during this run: {'; '.join(changed)}; no level was calibrated with it. "
            f"{_calibration_fix(record['folder'])}")
    # a bare snakemake run: the models it chose at the start no longer match
    raise CalibrationChanged(
        f"the calibration in {record['folder']} no longer matches this run: {'; '.join(changed)}. It may have "
        "changed since the workflow started: start the workflow again (with calibration.refit: auto it then fits a "
        f"calibration of its own, hours), or install a matching one (`dascreen calibrate --from-raw "
        f"{record['folder']} ...`)")


def _levels(args, cfg):
    from screen.io import write_json
    from screen.levels import read_computed, summarise, write_levels

    models = calibration = None
    if args.models:  # checked before anything is read: a changed calibration stops the job at once
        models, calibration = _pinned_models(args.models, cfg, args.pinned)
    levels, sidecar = read_computed(args.manifest, args.electronic, cfg)
    if models is not None:
        from screen.calibrate import apply_models

        levels = apply_models(levels, models, scale=cfg["levels"]["scale"])
    side_path = write_levels(levels, sidecar, args.out)
    # absolute paths (a direct snakemake run gives them relative to its working directory)
    meta = {**provenance(cfg), "counts": summarise(levels), "input": os.path.abspath(args.input or cfg["candidates"]),
            "scale": cfg["levels"]["scale"], "models": os.path.abspath(args.models) if args.models else None,
            "calibration_models": calibration,
            "polymer": cfg["polymer"],
            "oligomers": str(side_path) if side_path else None}
    write_json(meta, f"{args.out}.meta.json" if not args.meta else args.meta)
    print(json.dumps(summarise(levels)))


def _reference_input(args, cfg):
    from screen.calibrate import read_reference, reference_inputs
    from screen.io import write_csv

    frame = reference_inputs(read_reference(args.reference))
    write_csv(frame, args.out)
    print(f"{len(frame)} distinct reference structures")


def _calibrate(args, cfg):
    from screen.calibrate import fingerprint, fit_all, read_reference, save_calibration
    from screen.levels import read_computed

    computed, sidecar = read_computed(args.manifest, args.electronic, cfg)
    models = fit_all(read_reference(args.reference), computed)
    # with the raw values fitted on and the per-n values of the reference polymers: hold-out tests and
    # refits (`dascreen calibrate --from-raw`) need no recomputation
    _, table = save_calibration(models, computed, sidecar, args.models_root, fingerprint(cfg, args.reference),
                                reference_dir=args.reference)
    print(table.to_string(index=False))


def _rank(args, cfg):
    from screen.rank_io import run_rank

    path = run_rank(args.levels, args.partner, args.out, cfg, partner_levels=args.partner_levels or None)
    print(f"ranking -> {path}")


def _strict(args, cfg):
    """``strict: true`` of a direct snakemake run: fail when a row of the levels file was rejected or failed."""
    import pandas as pd

    from screen.levels import summarise

    counts = summarise(pd.read_csv(args.levels, dtype=str, keep_default_na=False))
    line = (f"{counts['rows']} rows: {counts['ok']} ok, {counts['rejected']} rejected, {counts['failed']} failed "
            f"({args.levels})")
    print(f"strict: {line}")
    if counts["rejected"] or counts["failed"]:
        print(f"dascreen: error: strict: {line}; their status and error columns say why; levels.csv and the "
              "ranking are written; set strict: false to accept them", file=sys.stderr)
        return EXIT_STRICT
    from screen.io import atomic_path

    with atomic_path(args.out) as tmp:
        tmp.write_text(line + "\n", encoding="utf-8")
    return 0


def _partner_input(args, cfg):
    import pandas as pd

    from screen.io import write_csv
    from screen.partners import partner_key

    canonical, key = partner_key(args.partner)
    write_csv(pd.DataFrame([{"id": f"smiles:{canonical}", "smiles": canonical}]), args.out)
    print(f"partner {key}: {canonical}")


def main(argv: list[str] | None = None) -> int:
    """Run one stage job; see ``python -m screen.stages --help``."""
    parser = argparse.ArgumentParser(prog="python -m screen.stages", description=__doc__)
    parser.add_argument("--config", required=True,
                        help="the configuration sections this job depends on, as JSON text (defaults fill the rest)")
    sub = parser.add_subparsers(dest="stage", required=True)
    p = sub.add_parser("prepare")
    p.add_argument("--input", required=True)
    p.add_argument("--outdir", required=True)
    p.add_argument("--max-shards", type=int, default=0)
    p = sub.add_parser("structures")
    p.add_argument("--shard", required=True)
    p.add_argument("--sdf", required=True)
    p.add_argument("--table", required=True)
    p = sub.add_parser("electronic")
    p.add_argument("--sdf", required=True)
    p.add_argument("--table", required=True)
    p.add_argument("--out", required=True)
    p = sub.add_parser("compute", help="structures and electronic stages of one shard in one job")
    p.add_argument("--shard", required=True)
    p.add_argument("--sdf", required=True, help="structures SD file")
    p.add_argument("--table", required=True, help="structures status table")
    p.add_argument("--out", required=True, help="electronic table")
    p = sub.add_parser("levels")
    p.add_argument("--manifest", required=True)
    p.add_argument("--electronic", nargs="*", default=[])
    p.add_argument("--models", default="")
    p.add_argument("--out", required=True)
    p.add_argument("--meta", default="")
    p.add_argument("--input", default="", help="what the batch was made from (default: the candidates file)")
    p.add_argument("--pinned", default="",
                   help="JSON record of the calibration the dascreen command started the run with (it must still be "
                        "the one in --models)")
    p = sub.add_parser("reference-input")
    p.add_argument("--reference", required=True)
    p.add_argument("--out", required=True)
    p = sub.add_parser("calibrate")
    p.add_argument("--reference", required=True)
    p.add_argument("--manifest", required=True)
    p.add_argument("--electronic", nargs="*", default=[])
    p.add_argument("--models-root", required=True)
    p = sub.add_parser("rank")
    p.add_argument("--levels", required=True)
    p.add_argument("--partner", required=True)
    p.add_argument("--out", required=True, help="output folder; the ranking goes to OUT/rankings/<slug>/")
    p.add_argument("--partner-levels", default="", help="levels file of a smiles: partner's batch")
    p = sub.add_parser("strict", help="exit code 3 when a row of the levels file was rejected or failed")
    p.add_argument("--levels", required=True)
    p.add_argument("--out", required=True, help="one line with the counts, written when every row is ok")
    p = sub.add_parser("partner-input")
    p.add_argument("--partner", required=True, help="smiles:<SMILES>")
    p.add_argument("--out", required=True, help="one-row candidate CSV of the partner's batch")
    args = parser.parse_args(argv)

    try:
        cfg = _job_config(args.config)
    except DascreenError as exc:
        print(f"dascreen: error: {exc}", file=sys.stderr)
        return exit_code(exc)
    # the thread count the rule set (OMP_NUM_THREADS={threads} of the compute rule: electronic.threads, or a
    # profile's set-threads) is kept; electronic.threads only when nothing set it (a job started by hand)
    os.environ.setdefault("OMP_NUM_THREADS", str(cfg.electronic.threads))
    handler = {"prepare": _prepare, "structures": _structures, "electronic": _electronic, "compute": _compute,
               "levels": _levels, "reference-input": _reference_input, "calibrate": _calibrate, "rank": _rank,
               "partner-input": _partner_input, "strict": _strict}
    try:
        return handler[args.stage](args, cfg) or 0
    except CalibrationChanged as exc:  # one message in the job's log, no traceback (the dascreen command repeats it)
        print(f"dascreen: error: {exc}", file=sys.stderr)
        return 2
    except DascreenError as exc:  # a partner or scale refused, a bad input: one line, no traceback
        print(f"dascreen: error: {exc}", file=sys.stderr)
        return exit_code(exc)


def _job_config(text: str) -> Config:
    """The job's configuration: its ``--config`` sections, and ``execution`` from :data:`EXECUTION_ENV` when they
    have none.

    Examples
    --------
    >>> import os
    >>> os.environ[EXECUTION_ENV] = '{"isolate": false}'
    >>> _job_config('{"structures": {}}').execution.isolate, _job_config('{"execution": {}}').execution.isolate
    (False, True)
    >>> del os.environ[EXECUTION_ENV]
    """
    cfg = Config.from_json(text, "workflow configuration")
    given = os.environ.get(EXECUTION_ENV, "").strip()
    if given and "execution" not in json.loads(text):
        try:
            execution = json.loads(given)
        except ValueError:
            from screen.errors import ConfigError

            raise ConfigError(f"the environment variable {EXECUTION_ENV} is not the JSON the workflow writes: "
                              f"{given[:80]!r}; unset it") from None
        cfg = cfg.with_overrides({"execution": execution}, f"{EXECUTION_ENV} and workflow configuration")
    return cfg


if __name__ == "__main__":
    sys.exit(main())
