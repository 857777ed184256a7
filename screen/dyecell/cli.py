"""The ``dascreen dyecell`` sub-command: rank sensitiser dyes for an oxide and a mediator.

``dascreen dyecell CANDIDATES --oxide ID --mediator ID`` runs the shared stages
(prepare, structures, electronic — the same workflow, protocol and results
store as ``dascreen run``), joins the raw values into
``OUT/dyecell/levels_raw.csv`` and ranks into
``OUT/dyecell/<oxide>--<mediator>--<settings hash>/``; ``--levels FILE`` ranks an
existing levels file (a run's ``levels.csv`` or a file of measured dye
potentials) in seconds (not both) — in an ``OUT`` that holds a run, a file that
is not the run's own levels goes to a folder of its own
(``…--levels-<file>-<hash>``, :func:`screen.dyecell.stage.levels_tag`) and does
not become the default input; without either it re-ranks the input ranked
last in ``OUT`` (recorded in ``OUT/dyecell/inputs.json``); ``--list`` prints the
oxide and mediator libraries and the reference electrodes; ``--refit`` computes
the dye reference set (``dyes.csv`` of ``calibration.reference``, the file the
level calibration reads its dye E0-0 from) with the run's protocol and installs
the dye models (replacing installed ones only with ``--replace-installed``;
never with a ``--levels`` file of measured values).
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

from screen.cli_shared import _at_least_one, _percent, cut_cell, fixed_decimals
from screen.errors import ConfigError, InputError
from screen.preflight import GivenOnce

__all__ = ["add_dyecell", "cmd_dyecell"]


def _print_libraries() -> None:
    import pandas as pd

    from screen.dyecell.library import (
        MEDIATORS_FILE,
        OXIDES_FILE,
        load_mediators,
        load_oxides,
    )

    with pd.option_context("display.width", 200, "display.max_colwidth", 60):
        ox = load_oxides()[["id", "type", "band_edge", "band_edge_v_nhe", "from_memory", "name"]]
        print(ox.to_string(index=False))
        print(f"({OXIDES_FILE}; band edges in V vs NHE, they move about -59 mV per pH unit and with additives)\n")
        med = load_mediators()[["id", "e_redox_v_nhe", "min_drive_reg_ev", "from_memory", "name"]]
        print(med.to_string(index=False, na_rep="-"))
        print(f"({MEDIATORS_FILE}; potentials in V vs NHE; min_drive_reg_ev '-' = the configured threshold)")
        from screen.dyecell.scales import ELECTRODES_FILE, electrodes

        ref = electrodes().reset_index()
        ref = ref[ref["id"].ne("vacuum")][["id", "e_vs_nhe_v", "solvent", "from_memory", "name"]]
        print()
        print(ref.to_string(index=False, na_rep="-"))
        print(f"({ELECTRODES_FILE}; reference electrodes: E vs NHE = E vs the reference + e_vs_nhe_v; column "
              "reference takes an id, or NHE, SCE, Ag/AgCl, or Fc with the solvent in column solvent: acetonitrile "
              "(MeCN), dichloromethane (CH2Cl2), DMF or THF)")
    print("Own values: a one-row CSV (id,band_edge_v_nhe[,type] or id,e_redox_v_nhe; or band_edge_v/e_redox_v with a "
          "column reference, and solvent for Fc) passed as --oxide/--mediator.")


#: fixed decimals of the console table per column (``.3g`` printed Voc "0.86" beside PCE "5.31" and "13" for 13.0):
#: potentials and driving forces 2, Voc 3, Jsc 1, PCE and σ 1, probabilities 2
CONSOLE_DECIMALS = {"e_ox_v_nhe": 2, "e00_ev": 2, "e_ox_excited_v_nhe": 2, "drive_inj_ev": 2, "drive_reg_ev": 2,
                    "voc_v": 3, "jsc_ma_cm2": 1, "pce_pct": 1, "pce_sigma_pct": 1, "p_viable": 2, "p_above_target": 2}


def _print_ranking(path: Path, top: int, listed: frozenset = frozenset()) -> None:
    """The top of ``ranking.csv``, the reasons of the not-viable dyes and the rows that were not ranked.

    ``listed``: ``(id, error)`` of rows printed already (the levels summary of a computing run).
    """
    import json

    import pandas as pd

    table = pd.read_csv(path, dtype={"id": str}, keep_default_na=False, na_values=[""])
    meta = json.loads((path.parent / "ranking.meta.json").read_text(encoding="utf-8"))
    dye_table = Path(meta.get("dye_table") or path.parent.parent / "dyes.csv")
    show = table.head(top).copy()
    show["id"] = [cut_cell(str(i).replace("\n", "\\n"), 24) for i in show["id"]]
    show["flags"] = show["flags"].map(lambda v: "" if pd.isna(v) else cut_cell(v, 36))
    for col, decimals in CONSOLE_DECIMALS.items():
        if col in show:
            show[col] = [fixed_decimals(v, decimals) for v in show[col]]
    cols = ["rank", "id", "e_ox_v_nhe", "e00_ev", "e_ox_excited_v_nhe", "drive_inj_ev", "drive_reg_ev", "voc_v",
            "jsc_ma_cm2", "pce_pct", "pce_sigma_pct", "p_viable", "p_above_target", "passes", "flags"]
    viable = int(table["viable"].astype(str).str.lower().eq("true").sum()) if len(table) else 0
    ox, med = meta["oxide"]["id"], meta["mediator"]["id"]
    not_ranked = meta["counts"]["rows"] - len(table)
    rest = f"; {not_ranked} row(s) not ranked (rejected or failed)" if not_ranked else ""
    dyes = f"{len(table)} dye{'' if len(table) == 1 else 's'}"
    print(f"dascreen: {dyes} ranked on {ox} with {med}; {viable} viable{rest}; top {min(top, len(table))} "
          "(potentials in V vs NHE, driving forces in eV):")
    if len(show):
        with pd.option_context("display.width", 250, "display.max_columns", 30):
            print(show[cols].to_string(index=False, na_rep="-"))
        if str(meta["oxide"].get("type", "")).strip().lower() == "p":
            print("  (p-type oxide: e_ox_excited_v_nhe is the dye's estimated reduction potential E(S/S-) ~ "
                  "E(S+/S) - E00/e)")
    for _, row in table[~table["viable"].astype(str).str.lower().eq("true")].head(top).iterrows():
        print(f"  {str(row['id'])[:24]}: {row['viability']}")
    if not_ranked:
        dyes = pd.read_csv(dye_table, dtype=str, keep_default_na=False)
        new = pd.Series([(i, e) not in listed for i, e in zip(dyes["id"], dyes["error"])], index=dyes.index)
        bad = dyes[dyes["status"].ne("ok") & new]
        for _, row in bad.head(20).iterrows():
            ident = row["id"].replace("\n", "\\n")[:60]
            print(f"  {row['status']:8s} {ident}: {row['error'][:160]}")
        if len(bad) > 20:
            print(f"  ... and {len(bad) - 20} more (see report.html)")
    report = Path(path).parent / "report.html"
    print(f"dascreen: ranking -> {path}" + (f"; report -> {report}" if report.is_file() else ""))


def _not_ok(levels_csv: Path) -> frozenset:
    """``(id, error)`` of the rows of a levels file that are not ``ok`` (printed by its summary)."""
    import pandas as pd

    done = pd.read_csv(levels_csv, dtype=str, keep_default_na=False, usecols=["id", "status", "error"])
    bad = done[done["status"].ne("ok")]
    return frozenset(zip(bad["id"], bad["error"]))


def _models_root(args, cfg) -> Path:
    """Where the dye models of this command are read from and ``--refit`` installs them: ``--models DIR``, else
    ``<calibration.models>/dyecell`` (the shipped ``models/dyecell`` by default)."""
    from screen.dyecell.calibrate import MODELS_DIR

    if args.models:
        return Path(args.models).expanduser().resolve()
    return Path(cfg["calibration"]["models"]) / "dyecell" if cfg["calibration"]["models"] else MODELS_DIR


def _own_reference(cfg) -> Path | None:
    """``calibration.reference`` when it is a folder of the user's own (the dye models must then have been fitted on
    its ``dyes.csv``), None for the shipped reference data (any dye models may be ranked with, e.g. ``--models``)."""
    from screen.config import PACKAGE_ROOT

    given = Path(cfg["calibration"]["reference"])
    shipped = PACKAGE_ROOT / "models" / "reference"
    try:
        return None if given.resolve() == shipped.resolve() else given
    except OSError:
        return given


def _check_refit(args, cfg) -> None:
    """Refuse a ``--refit`` that has nothing to fit for, or would replace installed dye models without being asked.

    ``dascreen dyecell --levels measured.csv --refit`` computed the 30 reference dyes and rewrote the shipped models
    in ``models/dyecell`` without a word, although measured values use no model (a careless user's audit).  As
    ``dascreen calibrate --install`` (:func:`screen.cli._check_install`), replacing installed models takes
    ``--replace-installed``; ``--models DIR`` fits into a folder of one's own.

    Raises
    ------
    ConfigError
        ``--refit`` with a ``--levels`` file of measured values (no ``xtb_ip_ev`` column), or a model folder of
        this protocol that holds dye models already, without ``--replace-installed`` (exit code 2).
    """
    from screen.dyecell.calibrate import TARGETS, fitted_on, model_folder, reference_table
    from screen.io import csv_header

    if args.levels:
        if "xtb_ip_ev" not in (csv_header(args.levels) or []):  # screen.dyecell.stage.read_input: a dye file of measured values
            raise ConfigError(f"--refit fits the dye models that compute E(S+/S) and E0-0 from xTB levels; --levels "
                              f"{args.levels} gives measured values (it has no xtb_ip_ev column), which need no "
                              "model: leave --refit out")
    reference = _dye_reference(cfg)
    folder = model_folder(cfg.protocol_id, _models_root(args, cfg))
    held = [f"{name}.json" for name in TARGETS if (folder / f"{name}.json").is_file()]
    if held and not args.replace_installed:
        then = fitted_on(folder)
        said = f"; fitted on {then}, this refit fits on {reference}" if then and then != str(reference) else ""
        raise ConfigError(f"--refit would replace the dye models installed in {folder} ({', '.join(held)}{said}), "
                          "which every dye ranking of this protocol uses. Pass --replace-installed to replace them, "
                          "or --models DIR to fit into a folder of your own (and rank with --models DIR later)")
    reference_table(reference)  # a bad reference row is refused before the dye reference set is computed


def _dye_reference(cfg) -> Path:
    """The dye reference file of the configured reference folder: ``<calibration.reference>/dyes.csv``, the file
    whose E0-0 values the level calibration reads too (:mod:`screen.calibration.reference`).

    ``dascreen dyecell --refit --set calibration.reference=MINE`` fitted the dye models on the shipped ``dyes.csv``
    without a word, while the level calibration read ``MINE/dyes.csv`` (a second lab's audit).

    Raises
    ------
    ConfigError
        The folder holds no ``dyes.csv`` (exit code 2), with the fix.
    """
    from screen.config import data_path

    folder = data_path(cfg["calibration"]["reference"])
    path = folder / "dyes.csv"
    if not path.is_file():
        raise ConfigError(f"--refit fits the dye models on the dye reference set of calibration.reference, "
                          f"{path}, which does not exist; copy the shipped one ({data_path('models/reference')}"
                          "/dyes.csv) there and add your rows, or leave calibration.reference out for the shipped "
                          "reference data")
    return path


def _refit(args, cfg, out: Path) -> Path:
    """Compute the dye reference set with this protocol (workflow batch of its own) and install the models
    (:func:`_models_root`; checked by :func:`_check_refit` before anything was computed)."""
    from screen.dyecell.calibrate import reference_input, refit
    from screen.io import write_csv
    from screen.launch import run_workflow

    reference = _dye_reference(cfg)  # the configured reference folder's, as the level calibration's E0-0 rows
    work = out / "dyecell" / "reference"
    inp = work / "input.csv"
    write_csv(reference_input(reference), inp)
    ref_cfg = cfg.with_overrides({"candidates": str(inp), "out": str(work)})
    rc = run_workflow(ref_cfg, work, args.cores, [str(work / "levels.csv")], verbose=args.verbose,
                      log_name="dyecell-reference-workflow")
    if rc != 0:
        raise ConfigError(f"computing the dye reference set stopped with exit code {rc}; see {work}/logs/")
    folder = refit(work / "levels.csv", reference=reference, root=_models_root(args, cfg))
    print(f"dascreen: dye models installed in {folder} (fitted on {reference})")
    return folder


def _check_levels_file(given: str, out_text: str) -> None:
    """Refuse a ``--levels`` that names no file: empty, a folder or missing (exit code 2, before any work).

    ``--levels ''`` ranked the input ranked last in ``OUT`` without a word, while ``--partner ''`` and ``--out ''``
    were refused (a careless user's audit).
    """
    if not given.strip():
        raise ConfigError("--levels '' names no file; give a run's levels.csv or id,e_ox_v_nhe,e00_ev[,smiles] "
                          "measured values, or leave --levels out to re-rank the input ranked last in --out")
    levels = Path(given)
    if levels.is_dir():
        inside = [str(p) for p in (levels / "dyecell" / "levels_raw.csv", levels / "levels.csv") if p.is_file()]
        hint = f" (it holds {' and '.join(inside)})" if inside else ""
        raise InputError(f"--levels {given!r} is a directory, not a file{hint}; give the file itself: a "
                         f"run's levels.csv (or OUT/dyecell/levels_raw.csv of a dye run), or "
                         "id,e_ox_v_nhe,e00_ev[,smiles] measured values; to re-rank a run folder, give it as "
                         "--out without --levels")
    if not levels.is_file() and levels.exists():  # a FIFO or <(cat f.csv) was called missing (a maintainer's review)
        from screen.cli_shared import not_regular_levels

        raise InputError(not_regular_levels(given))
    if not levels.is_file():
        raise InputError(f"--levels {given!r} does not exist; give a run's levels.csv "
                         f"(or {out_text}/dyecell/levels_raw.csv of a dye run), or id,e_ox_v_nhe,e00_ev[,smiles] "
                         "measured values")


def _default_levels(out: Path, out_text: str) -> Path:
    """The input a re-rank without ``--levels`` ranks: the one ranked last in ``OUT``.

    That is the file recorded in ``OUT/dyecell/inputs.json`` (the
    ``levels_raw.csv`` of a computing run, or the ``--levels`` file of the last
    ranking); in a folder without the record, ``OUT/dyecell/levels_raw.csv``,
    else ``OUT/levels.csv`` (a ``dascreen run`` folder).  In a folder that holds
    a run, only the run's own levels are a default: a record of another file
    (written by a version before another file got its own ranking folder) is
    passed over, with a note.

    Raises
    ------
    InputError
        Nothing to rank: says which files were looked for and what to pass.
    """
    from screen.dyecell.stage import levels_tag, own_levels, read_inputs

    last = read_inputs(out).get("levels")
    own = own_levels(out)
    if last and own and levels_tag(last, out):
        print(f"dascreen: re-ranking {own[0]}, this run's own levels ({last}, recorded as the last input, is "
              f"another file: --levels {last} ranks it into a folder of its own)")
        return own[0]
    if last:
        if Path(last).is_file():
            print(f"dascreen: re-ranking {last} (the input ranked last in {out_text}; --levels FILE ranks another)")
            return Path(last)
        raise InputError(f"the input ranked last in --out {out_text}, {last}, no longer exists; give --levels FILE "
                         "or the candidates again (dascreen dyecell CANDIDATES --out ...)")
    for path in (out / "dyecell" / "levels_raw.csv", out / "levels.csv"):
        if path.is_file():
            return path
    raise InputError(f"nothing to re-rank in --out {out_text}: it holds neither {out_text}/dyecell/levels_raw.csv "
                     f"(written by `dascreen dyecell CANDIDATES --out {out_text}`) nor {out_text}/levels.csv (of "
                     "`dascreen run`), and no earlier --levels input; give CANDIDATES to compute the levels, or "
                     "--levels FILE (a run's levels.csv, or id,e_ox_v_nhe,e00_ev[,smiles] measured values)")


def _check_same_candidates(out: Path, given: Path, overwrite: bool) -> dict:
    """Refuse a candidate file other than the one this ``--out`` holds the run of; the record of ``given``.

    What the user gave is compared, not the copy the shared stages read
    (``OUT/dyecell/candidates.csv`` for every file with a ``role`` column or a
    polymer row): the path and sha256 recorded in ``OUT/dyecell/inputs.json``,
    or, in a folder without the record, the candidate file in its ``config.yaml``
    (a ``dascreen run`` folder).  The same path, or a file of the same content
    elsewhere, is the same run.

    Returns
    -------
    dict
        ``{"path", "sha256"}`` of ``given`` (recorded once the run starts).

    Raises
    ------
    ConfigError
        Another file (without ``overwrite``), naming both of the user's files.
    """
    import yaml

    from screen.config import load_yaml
    from screen.dyecell.stage import read_inputs
    from screen.provenance import sha256_file

    now = {"path": str(given), "sha256": sha256_file(given)}
    before = read_inputs(out).get("candidates") or {}
    if not before and (out / "config.yaml").is_file():
        try:
            recorded = load_yaml((out / "config.yaml").read_text(encoding="utf-8"))  # a folder may come from others
            named = recorded.get("candidates") if isinstance(recorded, dict) else None
        except (OSError, UnicodeDecodeError, yaml.YAMLError):
            named = None
        internal = (out / "dyecell" / "candidates.csv").resolve()
        if named and Path(str(named)).resolve() != internal:  # the copy: the original is not known
            before = {"path": str(Path(str(named)).resolve())}
            if Path(before["path"]).is_file():
                before["sha256"] = sha256_file(before["path"])
    if overwrite or not before.get("path") or before["path"] == now["path"]:
        return now
    if before.get("sha256") and before["sha256"] == now["sha256"]:
        return now
    raise ConfigError(f"--out {out} holds the run of {before['path']}; this run is of {now['path']} (another "
                      "file). Choose another --out (molecules already computed come from the results store) or "
                      "pass --overwrite")


def _compute(args, cfg, out: Path, aside=None) -> Path | None:
    """The shared stages for the candidates (prepare, structures, electronic) and their raw levels file.

    Only the molecules' ΔSCF values are needed, so the bulk-heterojunction
    calibration of the protocol is not run; the results store and the journals
    make a repeated run free.  ``aside``: rows left out of the computation
    (:func:`_set_aside`), put back into the levels file as rejected rows.
    """
    from screen.dyecell.stage import raw_levels
    from screen.launch import run_workflow

    prepared = out / "work" / "candidates" / "prepared"
    rc = run_workflow(cfg, out, args.cores, [str(prepared)], verbose=args.verbose)
    if rc == 0:
        shards = sorted(prepared.glob("shard-*.csv"))
        targets = [str(out / "work" / "candidates" / "electronic" / s.name) for s in shards]
        rc = run_workflow(cfg, out, args.cores, targets, verbose=args.verbose) if targets else 0
    if rc != 0:
        print(f"dascreen: the workflow stopped with exit code {rc}; job logs in {out}/logs/", file=sys.stderr)
        return None
    return raw_levels(out, cfg, set_aside=aside)


#: columns of :func:`screen.prepare.read_candidates` that are not passthrough columns
_READ_COLUMNS = ("row", "id", "smiles_input", "name", "role", "note", "read_error")


def _set_aside(candidates: Path):
    """The rows of a candidate file that the dye mode does not compute: polymer repeat units.

    The file is read and classified by the prepare stage's own reader and checks
    (:func:`screen.prepare.read_candidates`, :func:`screen.prepare.validate`:
    ``representation == "polymer"``); only rows whose SMILES holds an attachment
    point are checked, so this costs nothing for a file without one.  When a
    polymer is found, rows that could not be read (an SDF record) are set aside
    too, with the prepare stage's reason, because the copy given to the shared
    stages is a CSV.

    Returns
    -------
    (pandas.DataFrame or None, pandas.DataFrame)
        The file as read (None when it holds no ``*``, ``R#``, drawn attachment point (``M  APO``,
        ``ATTCHPT``) or polymer bracket (``SRU``) at all) and the
        rows set aside: ``row`` (0-based input position), ``id``, ``smiles``,
        ``smiles_input``, ``name``, ``status``, ``reason``, ``error``, ``representation``.
    """
    import pandas as pd

    from screen.dyecell.rank import NOT_A_DYE
    from screen.prepare import PrepareOptions, read_candidates, validate

    aside = pd.DataFrame(columns=["row", "id", "smiles", "smiles_input", "name", "status", "reason", "error",
                                  "representation"])
    if candidates.suffix.lower() != ".gz":
        data = candidates.read_bytes()
        # the marks the reader turns into attachment points (screen.prepare.readers: R-group atoms, a drawing
        # program's attachment points, an SRU bracket)
        if not any(mark in data for mark in (b"*", b"R#", b"M  APO", b"ATTCHPT", b"SRU")):
            return None, aside
    frame = read_candidates(candidates)
    maybe = frame["smiles_input"].str.contains("*", regex=False) | frame["read_error"].ne("")
    if not maybe.any():
        return frame, aside
    checked = validate(frame[maybe].reset_index(drop=True), PrepareOptions())
    poly = checked["representation"].eq("polymer")
    if not poly.any():
        return frame, aside
    unread = checked["row"].isin(frame.loc[frame["read_error"].ne(""), "row"])
    rows = checked[poly | unread].copy()
    rows.loc[poly, "status"] = "rejected"
    rows.loc[poly, "reason"] = "not_a_dye"
    rows.loc[poly, "error"] = NOT_A_DYE
    return frame, rows[list(aside.columns)].reset_index(drop=True)


def _dye_candidates(candidates: Path, out: Path, write: bool = True, read=None) -> Path:
    """The candidate list for the shared stages: without polymer repeat units; ``role`` kept as ``input_role``.

    Roles (donor/acceptor) mean nothing in a dye cell, and the prepare stage
    rejects any other value (e.g. ``dye``); the copy keeps every other row and
    column.  A polymer repeat unit is not a dye: it is left out of the copy
    (nothing is computed for it) and returned to the levels file as a rejected
    row (:func:`_set_aside`, :func:`screen.dyecell.stage.raw_levels`).  A file
    without either is used as it is.
    """
    import pandas as pd

    from screen.dyecell.rank import NOT_A_DYE
    from screen.io import write_csv

    frame, aside = _set_aside(candidates) if read is None else read
    target = out / "dyecell" / "candidates.csv"
    if len(aside):
        kept = frame[~frame["row"].isin(aside["row"])]
        if kept.empty:
            raise InputError(f"{candidates}: no molecule to compute: every row is a polymer repeat unit or "
                             f"unreadable ({', '.join(map(repr, aside['id'][:5]))}); {NOT_A_DYE}")
        if not write:
            return target
        copy = pd.DataFrame({"id": kept["id"], "smiles": kept["smiles_input"]})
        if kept["name"].ne("").any():
            copy["name"] = kept["name"]
        if kept["role"].ne("").any():
            copy["input_role"] = kept["role"]
        for col in (c for c in frame.columns if c not in _READ_COLUMNS and c not in copy.columns):
            copy[col] = kept[col]
        write_csv(copy, target)
        for row in aside.itertuples():
            print(f"dascreen: {row.status} {str(row.id)[:60]}: {row.error}")
        print(f"dascreen: {len(aside)} row(s) set aside before computing; the other {len(copy)} in {target}")
        return target
    if candidates.suffix.lower() != ".csv":
        return candidates
    frame = pd.read_csv(candidates, dtype=str, keep_default_na=False)
    if "role" not in frame.columns:
        return candidates
    if not write:
        return target
    write_csv(frame.rename(columns={"role": "input_role"}), target)
    print(f"dascreen: the dye-cell mode ignores the role column; kept as input_role in {target}")
    return target


def cmd_dyecell(args) -> int:
    """Run the shared stages if needed, then rank the dyes for one oxide and one mediator."""
    from screen.cli_shared import EXIT_ERROR, EXIT_OK, _load, _print_summary
    from screen.dyecell.library import resolve_material
    from screen.dyecell.stage import levels_tag, own_levels, record_inputs, run_dyecell
    from screen.preflight import (check_calibration, check_candidates, check_out, check_out_folder,
                                  check_out_writable, check_rank_config, check_rank_sets, make_out_folder)

    if args.list:
        _print_libraries()
        return EXIT_OK
    if args.candidates and args.levels:
        raise ConfigError(f"give either CANDIDATES or --levels, not both (got {args.candidates} and --levels "
                          f"{args.levels}): CANDIDATES computes the levels and ranks them, --levels FILE ranks an "
                          "existing levels or dye file")
    out = Path(args.out).resolve()
    check_out_folder(out, args.out)
    check_out_writable(out, args.out)  # before any work, as `dascreen rank` and `run` do
    if args.levels is not None:  # before anything is computed: a typo was found after the dye reference set
        _check_levels_file(args.levels, args.out)
    if not (args.candidates or args.refit):  # a re-ranking: settings of how levels are computed cannot apply
        check_rank_sets(args.set, "dyecell")
    extra = {"dyecell": {"oxide": args.oxide, "mediator": args.mediator, "target_pce_pct": args.target_pce}}
    aside, source = None, None
    if args.candidates:
        given = Path(args.candidates).resolve()
        check_candidates(given)
        read = _set_aside(given)
        aside = read[1]
        check_out(out, None, overwrite=args.overwrite)
        source = _check_same_candidates(out, given, args.overwrite)
        candidates = _dye_candidates(given, out, write=False, read=read)  # refuses a file with nothing to compute
        extra.update({"candidates": str(candidates.resolve()), "out": str(out)})
    cfg = _load(args, extra)
    for role in ("oxide", "mediator"):  # a typo stops the command before anything is computed or written
        resolve_material(role, cfg["dyecell"][role])
    if args.refit:  # before the calibration check: a --refit that has nothing to fit is the first thing to say
        _check_refit(args, cfg)
    elif args.replace_installed:
        raise ConfigError("--replace-installed goes with --refit (it lets the refit replace installed dye models); "
                          "leave it out, or add --refit")
    if args.candidates or args.refit:  # both compute levels: hours of reference computation only when asked for
        check_calibration(cfg, out, args.config)
    make_out_folder(out, args.out)  # the first write: --out /proc/x gave a bare "[Errno 2]" line
    if args.candidates:
        record_inputs(out, candidates=source)
        _dye_candidates(given, out, read=read)
    if args.refit:
        _refit(args, cfg, out)
    computed, listed = None, frozenset()
    if args.candidates:
        computed = _compute(args, cfg, out, aside)
        if computed is None:
            return EXIT_ERROR
        _print_summary(computed)
        listed = _not_ok(computed)
    if args.levels:
        levels = Path(args.levels)
    elif computed is not None:
        levels = computed
    elif args.refit and not (out / "dyecell" / "levels_raw.csv").is_file() and not (out / "levels.csv").is_file():
        return EXIT_OK
    else:
        levels = _default_levels(out, args.out)
    if not (args.candidates or args.refit):
        check_rank_config(args.config, levels, "dyecell")
    models_root = _models_root(args, cfg)
    path = run_dyecell(levels, out, settings=cfg["dyecell"], models_root=models_root,
                       current_protocol=cfg.protocol_id, reference=_own_reference(cfg))
    tag = levels_tag(levels, out)
    if tag:  # another file than the run's own levels: ranked aside, never the default
        own_folder = path.parent.with_name(path.parent.name[: -len(tag) - 2])  # the same name without --<tag>
        where = f" ({own_folder})" if (own_folder / "ranking.csv").is_file() else ""
        print(f"dascreen: {levels} is not this run's own levels ({own_levels(out)[0]}): its ranking went to "
              f"{path.parent}; the run's own ranking{where} is untouched, and its levels stay what `dascreen "
              f"dyecell --out {args.out}` re-ranks", file=sys.stderr)
    else:
        record_inputs(out, levels=str(levels.resolve()))
    _print_ranking(path, args.top, listed=listed)
    return EXIT_OK


def add_dyecell(sub) -> None:
    """The ``dyecell`` sub-command (added to the ``dascreen`` parser)."""
    p = sub.add_parser("dyecell", help="dye-cell mode: rank sensitiser dyes for an oxide and a redox mediator",
                       description="Rank organic sensitiser dyes for a dye-sensitised cell: E(S+/S) and E0-0 from "
                                   "the calibrated xTB levels (or your measured values), injection into the oxide, "
                                   "regeneration by the mediator, Voc/Jsc/PCE with a Monte-Carlo spread. Writes "
                                   "OUT/dyecell/<oxide>--<mediator>--<settings hash>/ (ranking.csv, shortlist.sdf, "
                                   "report.html; the hash changes with the other dyecell settings, so a ranking "
                                   "with another threshold or loss gets its own folder). Without CANDIDATES or "
                                   "--levels it re-ranks the input ranked last in OUT: switching oxide or mediator "
                                   "takes seconds.")
    p.add_argument("candidates", nargs="?", default=None,
                   help="dye list (.csv id,smiles[,name]; .smi; .sdf): runs the shared stages first")
    p.add_argument("--levels", default=None, action=GivenOnce,
                   help="rank this file instead of computing (not with CANDIDATES): a run's levels.csv or your own "
                        "id,e_ox_v_nhe (or e_ox_v + e_ox_reference (or reference) + solvent),e00_ev[,smiles] file. In "
                        "an OUT that holds a run, another file than the run's own levels is ranked into "
                        "<oxide>--<mediator>--<settings hash>--levels-<file>-<hash>/ and the run's ranking stays. "
                        "Without CANDIDATES and --levels: the input ranked last in OUT (OUT/dyecell/levels_raw.csv of "
                        "a computing run, or the last --levels file), else OUT/levels.csv")
    p.add_argument("--oxide", default=None, action=GivenOnce,
                   help="semiconductor: library id (see --list) or a one-row CSV (default tio2-anatase)")
    p.add_argument("--mediator", default=None, action=GivenOnce,
                   help="redox mediator: library id (see --list) or a one-row CSV (default co-bpy3)")
    p.add_argument("--out", default="results", help="output folder (default: ./results)")
    p.add_argument("--cores", type=_at_least_one, default=os.cpu_count() or 1,
                   help="CPU cores to use, 1 or more (default: all)")
    p.add_argument("--target-pce", type=_percent, default=None, metavar="PCT", action=GivenOnce,
                   help="efficiency threshold for p_above_target, in %% (default 8)")
    p.add_argument("--config", default=None, help="YAML config file (see `dascreen config`, section dyecell)")
    p.add_argument("--set", action="append", default=[], metavar="SECTION.KEY=VALUE",
                   help="override one config field, e.g. --set dyecell.voc_loss_v=0.25 (repeatable)")
    p.add_argument("--models", default=None, metavar="DIR",
                   help="root of the dye models (DIR/<protocol-id>/e_ox.json, e00.json; default <calibration.models>/dyecell, "
                        "i.e. models/dyecell with the default settings)")
    p.add_argument("--refit", action="store_true",
                   help="compute the dye reference set (dyes.csv of calibration.reference: models/reference/dyes.csv "
                        "by default; rows held to the checks of a dye file, potentials vs other electrodes "
                        "converted) with this protocol and install the fitted dye models first, into --models "
                        "DIR/<protocol-id> (default: see --models); "
                        "refused where dye models of this protocol are installed already (see --replace-installed) "
                        "and with a --levels file of measured values, which uses no model")
    p.add_argument("--replace-installed", action="store_true",
                   help="with --refit: replace the dye models installed for this protocol (e.g. the shipped ones)")
    p.add_argument("--list", action="store_true",
                   help="print the oxide and mediator libraries and the reference electrodes, and stop")
    p.add_argument("--overwrite", action="store_true",
                   help="accept an output folder that holds the run of another candidate file (compared by "
                        "path and content of the file you give)")
    p.add_argument("--verbose", action="store_true", help="show Snakemake's log instead of the progress display")
    p.add_argument("--top", type=_at_least_one, default=10, help="rows to print, 1 or more (default 10)")
    p.set_defaults(func=cmd_dyecell)
