"""The ``dascreen`` command line.

Sub-commands
------------
run         the whole pipeline (Snakemake) from a candidate list to levels and ranking
rank        ranking and report only, from an existing levels file (seconds)
calibrate   fit calibration models on the reference sets and print their statistics
partners    list the built-in partner materials
config      print the default configuration (every option, with its default)
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import threading
from pathlib import Path

import yaml

from screen import __version__
from screen.config import Config, merge
from screen.errors import CalculationError, ConfigError, DascreenError, InputError, exit_code

__all__ = ["main", "build_parser"]

WORKFLOW = Path(__file__).parent / "workflow" / "Snakefile"

EXIT_OK, EXIT_ERROR, EXIT_STRICT = 0, 1, 3


def _parse_set(items: list[str]) -> dict:
    """``section.key=value`` pairs (values parsed as YAML) into a nested dict."""
    out: dict = {}
    for item in items or []:
        if "=" not in item:
            raise ConfigError(f"--set {item!r}: expected section.key=value, e.g. --set device.eqe=0.7")
        path, raw = item.split("=", 1)
        node = out
        parts = path.strip().split(".")
        for part in parts[:-1]:
            node = node.setdefault(part, {})
        node[parts[-1]] = yaml.safe_load(raw)
    return out


def _drop_none(extra: dict) -> dict:
    out = {}
    for key, value in extra.items():
        if isinstance(value, dict):
            value = _drop_none(value)
        if value is not None:
            out[key] = value
    return out


def _load(args, extra: dict) -> Config:
    """The process's one :class:`Config`: config file, then ``--set``, then ``extra`` (None values skipped).

    The data folders become absolute paths (the workflow runs in the output folder).
    """
    overrides = _parse_set(getattr(args, "set", []))
    merge(overrides, _drop_none(extra))
    return Config.load(getattr(args, "config", None), overrides).with_paths(data_path)


def _print_summary(levels_csv: Path) -> dict:
    import pandas as pd

    from screen.levels import summarise

    levels = pd.read_csv(levels_csv, dtype=str, keep_default_na=False)
    counts = summarise(levels)
    print(f"dascreen: {counts['rows']} rows: {counts['ok']} ok, {counts['rejected']} rejected, "
          f"{counts['failed']} failed -> {levels_csv}")
    bad = levels[levels["status"] != "ok"]
    for _, row in bad.head(20).iterrows():
        ident = row["id"].replace("\n", "\\n")[:60]
        print(f"  {row['status']:8s} {ident}: {row['error'][:160]}")
    if len(bad) > 20:
        print(f"  ... and {len(bad) - 20} more (see levels.csv)")
    return counts


def cmd_run(args) -> int:
    """Run the workflow through Snakemake in a subprocess."""
    candidates = Path(args.candidates)
    if not candidates.is_file():
        raise ConfigError(f"candidates file {str(candidates)!r} does not exist")
    out = Path(args.out).resolve()
    cfg = _load(args, {"candidates": str(candidates.resolve()), "out": str(out),
                       "partner": _partner_arg(args.partner), "strict": True if args.strict else None})
    rc = _snakemake(cfg, out, args.cores, [], args.snakemake_args, args.dry_run, args.profile)
    if rc != 0:
        print(f"dascreen: the workflow stopped with exit code {rc}; see the log above and {out}/logs/",
              file=sys.stderr)
        return EXIT_ERROR
    if args.dry_run:
        return EXIT_OK
    counts = _print_summary(out / "levels.csv")
    _print_ranking_of_run(cfg, out)
    if cfg["strict"] and (counts["rejected"] or counts["failed"]):
        print("dascreen: --strict: some rows were rejected or failed", file=sys.stderr)
        return EXIT_STRICT
    return EXIT_OK


def data_path(path: str | Path) -> Path:
    """Absolute path of a data folder: as given if absolute or present under the
    working directory, else the copy shipped beside the package (``models/``)."""
    path = Path(path)
    if path.is_absolute() or path.exists():
        return path.resolve()
    return Path(__file__).resolve().parent.parent / path


def _snakemake(cfg: Config, out: Path, cores: int, targets: list[str], extra: list[str] | None = None,
               dry_run: bool = False, profile: str | None = None, cfg_file: Path | None = None) -> int:
    """Write the resolved config (default ``out/config.yaml``) and run the packaged workflow on it."""
    import fcntl

    out.mkdir(parents=True, exist_ok=True)
    # our own lock: flock is released by the kernel even when a run is killed with SIGKILL, so holding
    # it proves that any Snakemake lock left in the folder is stale
    lock = open(out / ".dascreen.lock", "w")  # noqa: SIM115 - held for the whole run
    try:
        fcntl.flock(lock, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        raise ConfigError(f"another dascreen run is using {out}; wait for it or choose another --out") from None
    cfg_file = cfg_file or out / "config.yaml"
    cfg_file.parent.mkdir(parents=True, exist_ok=True)
    cfg_file.write_text(yaml.safe_dump(cfg.to_dict(), sort_keys=False), encoding="utf-8")
    cmd = [sys.executable, "-m", "snakemake", "--snakefile", str(WORKFLOW), "--directory", str(out),
           "--configfile", str(cfg_file), "--cores", str(cores), "--rerun-incomplete", "--show-failed-logs"]
    locks = out / ".snakemake" / "locks"
    if locks.is_dir() and any(locks.iterdir()):
        subprocess.call(cmd + ["--unlock"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        print("dascreen: removed the lock left by an interrupted run; resuming", flush=True)
    if dry_run:
        cmd.append("--dry-run")
    if profile:
        cmd += ["--workflow-profile", str(Path(profile).resolve())]
    cmd += list(extra or []) + list(targets)
    print("dascreen: snakemake --cores", cores, "in", out, flush=True)
    stop = threading.Event()
    reporter = threading.Thread(target=_report_progress, args=(out, stop), daemon=True)
    reporter.start()
    try:
        return subprocess.call(cmd)
    finally:
        stop.set()


def _report_progress(out: Path, stop: threading.Event, every_s: float = 60.0) -> None:
    """Every minute of a long run: molecules done / total and the ETA."""
    from screen.io import batch_progress

    while not stop.wait(every_s):
        if (out / "work" / "candidates" / "prepared").is_dir():
            try:
                print(_progress_line(batch_progress(out)), flush=True)
            except OSError:  # a file moved while being counted: try again next time
                pass


def cmd_calibrate(args) -> int:
    """Compute the reference molecules with the run's protocol and fit the models."""
    import shutil

    import pandas as pd

    from screen.calibrate import load_models, stats_table

    out = Path(args.out).resolve()
    overrides = {"out": str(out), "calibration": {"refit": "always"}}
    if args.reference:
        overrides["calibration"]["reference"] = str(Path(args.reference).resolve())
    cfg = _load(args, overrides)
    pid = cfg.protocol_id
    target = out / "models" / pid
    rc = _snakemake(cfg, out, args.cores, [str(target)])
    if rc != 0:
        print(f"dascreen: calibration stopped with exit code {rc}; see {out}/logs/", file=sys.stderr)
        return EXIT_ERROR
    models = load_models(target, cfg)
    pd.set_option("display.width", 200)
    print(f"\ncalibration models for protocol {pid} (reference: {cfg['calibration']['reference']})")
    print(stats_table(models).to_string(index=False))
    failures = pd.read_csv(target / "reference_failures.csv")
    if len(failures):
        print(f"{len(failures)} reference molecule(s) could not be computed: see {target / 'reference_failures.csv'}")
    if args.install:
        dest = Path(args.install).resolve() / pid
        if dest.exists():
            shutil.rmtree(dest)
        shutil.copytree(target, dest, ignore=shutil.ignore_patterns(".snakemake*"))
        print(f"dascreen: models copied to {dest}")
    print(f"dascreen: models in {target}")
    return EXIT_OK


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


def _print_ranking(ranking_csv: Path, top: int = 10) -> None:
    """Print the best ``top`` rows of a ranking.csv and its path."""
    import pandas as pd

    table = pd.read_csv(ranking_csv, dtype={"id": str}, keep_default_na=False, na_values=[""])
    show = table.head(top).copy()
    show["id"] = [str(i).replace("\n", "\\n").replace("\r", "\\r")[:28] for i in show["id"]]
    show["flags"] = show["flags"].fillna("").astype(str).str.slice(0, 40)
    cols = ["rank", "id", "role", "homo_ev", "lumo_ev", "gap_opt_ev", "delta_lumo_ev", "delta_homo_ev", "voc_v",
            "jsc_ma_cm2", "pce_pct", "pce_sigma_pct", "p_above_target", "passes", "flags"]
    passing = int(table["passes"].astype(str).str.lower().eq("true").sum()) if len(table) else 0
    partner = table["partner"].iloc[0] if len(table) else "?"
    print(f"dascreen: {len(table)} ranked against {partner}, {passing} pass the filters; top {min(top, len(table))}:")
    if len(show):
        with pd.option_context("display.width", 250, "display.max_columns", 30):
            print(show[cols].to_string(index=False, na_rep="-", float_format=lambda x: f"{x:.3g}"))
    print(f"dascreen: ranking -> {ranking_csv}")


def _print_ranking_of_run(cfg: Config, out: Path) -> None:
    from screen.partners import PartnerError, partner_slug
    from screen.rank_io import ranking_folder

    try:
        path = out / "rankings" / ranking_folder(partner_slug(cfg["partner"]), cfg) / "ranking.csv"
    except PartnerError:
        return
    if path.is_file():
        _print_ranking(path)


def _compute_partner(cfg: Config, out: Path) -> Path | None:
    """Run the workflow for a ``smiles:`` partner's batch only (cached); return its levels file."""
    from screen.calibrate import find_models
    from screen.partners import PartnerError, partner_kind, partner_levels_path

    spec = cfg["partner"]
    if partner_kind(spec) != "smiles":
        return None
    target = partner_levels_path(spec, out)
    pid = cfg.protocol_id
    if cfg["calibration"]["refit"] != "always" and find_models(cfg) is None and not (out / "models" / pid).is_dir():
        raise PartnerError(
            f"partner {spec!r} is computed like the candidates and needs the calibration models of protocol "
            f"{pid}; none found in {cfg['calibration']['models']}/{pid}. Run `dascreen calibrate --install "
            "models` (or the pipeline) first, or pass the models folder with --models")
    rc = _snakemake(cfg, out, 1, [str(target)], cfg_file=target.parent / "config.yaml")
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
    """Rank a levels file against a partner; a new smiles: partner is computed by the workflow first."""
    from screen.rank_io import run_rank

    out = Path(args.out).resolve()
    levels = Path(args.levels) if args.levels else out / "levels.csv"
    if not levels.is_file():
        raise InputError(f"levels file {str(levels)!r} does not exist; run `dascreen run` first or pass "
                         "--levels FILE (columns id,homo_ev,lumo_ev,gap_opt_ev,scale)")
    if args.config is None and (out / "config.yaml").is_file():
        args.config = str(out / "config.yaml")  # the run's own settings, so smiles: partners share its protocol
        print(f"dascreen: using the run's configuration {args.config}")
    cfg = _load(args, {"partner": args.partner, **_models_override(args.models),
                       "rank": {"role": args.role, "sort_by": args.sort_by, "target_pce_pct": args.target_pce}})
    if args.models and Path(args.models).resolve().name != cfg.protocol_id:
        raise ConfigError(f"--models {args.models!r} is not a folder of this run's protocol {cfg.protocol_id}")
    partner_levels = _compute_partner(cfg, out)
    try:
        path = run_rank(levels, cfg["partner"], out, cfg, partner_levels=partner_levels)
    except RuntimeError as exc:  # the report failed after the ranking was written
        print(f"dascreen: error: {exc}", file=sys.stderr)
        return EXIT_ERROR
    _print_ranking(path, args.top)
    return EXIT_OK


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
    """Print how far a (running) batch has got."""
    from screen.io import batch_progress

    out = Path(args.out)
    if not (out / "work" / "candidates" / "prepared").is_dir():
        raise ConfigError(f"{out} holds no prepared batch (is it the --out folder of a dascreen run?)")
    print(_progress_line(batch_progress(out)))
    return EXIT_OK


def _progress_line(p: dict) -> str:
    pct = 100.0 * p["done"] / p["total"] if p["total"] else 100.0
    eta = "unknown" if p["eta_s"] != p["eta_s"] else f"{p['eta_s'] / 60:.1f} min"
    return (f"dascreen: {p['done']}/{p['total']} molecules computed ({pct:.0f}%), "
            f"{p['elapsed_s'] / 60:.1f} min elapsed, ETA {eta}")


def cmd_config(args) -> int:
    """Print the default configuration."""
    print(yaml.safe_dump(Config.load(None).to_dict(), sort_keys=False), end="")
    return EXIT_OK


def _add_run(sub) -> None:
    """The ``run`` sub-command."""
    p = sub.add_parser("run", help="whole pipeline: candidates -> levels.csv -> ranking and report",
                       description="Run the whole pipeline through Snakemake: prepare, structures, electronic "
                                   "(xTB), levels (calibrated) and the ranking against the partner.")
    p.add_argument("candidates", help="candidate list: .csv (id,smiles[,name,role,...]), .smi or .sdf")
    p.add_argument("--partner", default=None,
                   help="partner material: library name (see `dascreen partners`), a one-row levels CSV, "
                        "smiles:<SMILES> or id:<ID> (default from config: scharber-reference-acceptor)")
    p.add_argument("--out", default="results", help="output folder (default: ./results)")
    p.add_argument("--cores", type=int, default=os.cpu_count() or 1, help="CPU cores to use (default: all)")
    p.add_argument("--config", default=None, help="YAML config file (see `dascreen config` for every field)")
    p.add_argument("--set", action="append", default=[], metavar="SECTION.KEY=VALUE",
                   help="override one config field, e.g. --set structures.geometry=xtb (repeatable)")
    p.add_argument("--strict", action="store_true",
                   help="exit with code 3 if any row is rejected or fails (default: report them, exit 0)")
    p.add_argument("--dry-run", action="store_true", help="show the jobs Snakemake would run, run nothing")
    p.add_argument("--profile", default=None,
                   help="Snakemake workflow profile folder (e.g. profiles/slurm for a cluster)")
    p.set_defaults(func=cmd_run)
    p.epilog = "Arguments after a bare `--` are passed to Snakemake unchanged (e.g. -- --keep-going)."


def _add_calibrate(sub) -> None:
    """The ``calibrate`` sub-command."""
    p = sub.add_parser("calibrate", help="fit calibration models on the reference sets and print statistics",
                       description="Compute the reference molecules with this run's protocol (same conformer "
                                   "route, engine and method as the candidates), fit the linear models and print "
                                   "n, slope, intercept, R², leave-one-out MAE/RMSE, max error and σ.")
    p.add_argument("--config", default=None, help="YAML config file (protocol settings are what matter)")
    p.add_argument("--set", action="append", default=[], metavar="SECTION.KEY=VALUE",
                   help="override one config field, e.g. --set electronic.method=IPEA1-xTB (repeatable)")
    p.add_argument("--reference", default=None,
                   help="reference folder with ip_gas.csv, ea_gas.csv, gap_optical.csv, levels_film.csv "
                        "(default: the shipped models/reference); e.g. a copy with your own measured film levels")
    p.add_argument("--out", default="results/calibration", help="work and output folder")
    p.add_argument("--cores", type=int, default=os.cpu_count() or 1, help="CPU cores to use")
    p.add_argument("--install", default=None, metavar="MODELS_DIR",
                   help="also copy the fitted models to MODELS_DIR/<protocol-id>/ (e.g. models) so later runs "
                        "use them without refitting")
    p.set_defaults(func=cmd_calibrate)


def _add_rank(sub) -> None:
    """The ``rank`` sub-command."""
    p = sub.add_parser("rank", help="ranking and report only, from an existing levels file (seconds)",
                       description="Pair every candidate of a levels file with a partner material, estimate "
                                   "Voc/Jsc/PCE with the Scharber model, apply the filters and write "
                                   "OUT/rankings/<partner>/ (ranking.csv, shortlist.sdf, ranking.meta.json, report). "
                                   "Runs no quantum chemistry, except that a new smiles: partner is computed once "
                                   "through the workflow, with the run's protocol and calibration.")
    p.add_argument("--partner", default=None,
                   help="library name (see `dascreen partners`), a one-row levels CSV, smiles:<SMILES> or "
                        "id:<ID> of a levels row (default from config: scharber-reference-acceptor)")
    p.add_argument("--levels", default=None,
                   help="levels file to rank (default OUT/levels.csv); any CSV with id,homo_ev,lumo_ev,gap_opt_ev,"
                        "scale works, e.g. your own cyclic-voltammetry levels")
    p.add_argument("--out", default="results", help="output folder (default: ./results)")
    p.add_argument("--role", choices=["donor", "acceptor"], default=None,
                   help="role of rows without a role column value (default: the partner's complement)")
    p.add_argument("--sort-by", choices=["pce_pct", "p_above_target"], default=None,
                   help="ranking key after the pass/fail split (default pce_pct)")
    p.add_argument("--target-pce", type=float, default=None, metavar="PCT",
                   help="efficiency threshold for p_above_target, in %% (default 10)")
    p.add_argument("--config", default=None,
                   help="YAML config file (default: OUT/config.yaml if present, else the defaults)")
    p.add_argument("--set", action="append", default=[], metavar="SECTION.KEY=VALUE",
                   help="override one config field, e.g. --set device.eqe=0.7 (repeatable)")
    p.add_argument("--models", default=None, metavar="DIR",
                   help="models/<protocol-id> folder to calibrate a smiles: partner with (default: the run's)")
    p.add_argument("--top", type=int, default=10, help="rows to print (default 10)")
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
    p.add_argument("--out", default="results", help="the run's output folder")
    p.set_defaults(func=cmd_status)

    p = sub.add_parser("config", help="print the default configuration with every field",
                       description="Print the complete default configuration as YAML.")
    p.set_defaults(func=cmd_config)


def build_parser() -> argparse.ArgumentParser:
    """The argument parser (exposed for documentation and tests)."""
    parser = argparse.ArgumentParser(
        prog="dascreen",
        description="Screen organic-photovoltaic donor/acceptor candidates: calibrated xTB frontier levels, "
                    "offsets to a partner material, Scharber-model Voc/Jsc/PCE and a ranked report. "
                    "Results are screening estimates, not measurements.",
    )
    parser.add_argument("--version", action="version", version=f"dascreen {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for add in (_add_run, _add_calibrate, _add_rank, _add_small):
        add(sub)
    return parser

def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``dascreen`` console script."""
    parser = build_parser()
    argv = list(sys.argv[1:] if argv is None else argv)
    passthrough: list[str] = []
    if "--" in argv:  # everything after a bare -- goes to Snakemake unchanged (run only)
        cut = argv.index("--")
        argv, passthrough = argv[:cut], argv[cut + 1:]
    args = parser.parse_args(argv)
    args.snakemake_args = passthrough
    try:
        return args.func(args)
    except DascreenError as exc:  # refused input or a failed calculation: one message, no traceback
        kind = "configuration error" if isinstance(exc, ConfigError) else "error"
        print(f"dascreen: {kind}: {exc}", file=sys.stderr)
        return exit_code(exc)
    except FileNotFoundError as exc:  # a named file that does not exist is the user's input, not a bug
        print(f"dascreen: error: {exc}", file=sys.stderr)
        return exit_code(InputError(str(exc)))

if __name__ == "__main__":
    sys.exit(main())
