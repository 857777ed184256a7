"""Calibrated levels from SMILES in a Python session: what ``dascreen run`` computes up to ``levels.csv``.

:func:`levels_of` runs the command's own stage functions on a temporary folder, in the command's order and
with its settings: the prepare checks (:func:`screen.prepare.prepare`: a refused row comes back
``rejected`` with its reason), structures and ΔSCF levels shard by shard
(:func:`screen.compute.run_compute`, through the results store the command uses), polymers as oligomer series
extrapolated to the chain limit (:func:`screen.levels.chain_limits`) and the calibration
(:func:`screen.calibrate.apply_models`). The table it returns is the command's ``levels.csv`` read back as
``dascreen rank`` reads it (:func:`screen.levels.read_levels`): the same numbers, columns and row order,
ready for :func:`screen.rank.rank_candidates`. Only the wall times (``*_wall_s``) differ between two runs.

Ranking needs no wrapper: ``rank_candidates(levels, resolve_partner("y6"))`` (see ``docs/python.md``).

Worker processes: with ``execution.isolate`` (the default) every molecule is computed in a ``spawn`` child
process, which imports the main script again; a script must keep its work under
``if __name__ == "__main__":`` (:class:`screen.isolation.MainGuardMissing` says so otherwise). A notebook or
an interactive session needs nothing.
"""

from __future__ import annotations

import csv
import io
import os
import sys
import tempfile
from collections.abc import Mapping
from pathlib import Path

from screen.config import Config
from screen.errors import ConfigError, InputError

__all__ = ["levels_of", "MAX_SHARDS"]

#: most shards a batch is split into (the workflow's ``MAX_SHARDS``, ``rules/common.smk``); shards only group the
#: molecules into worker processes and change no number
MAX_SHARDS = 400


def _config(config) -> Config:
    """The run configuration: a :class:`Config`, a mapping of sections, a YAML file's path or None (defaults), with
    the data folders found as the command finds them (:meth:`Config.located`)."""
    if isinstance(config, (str, os.PathLike)):
        cfg = Config.load(config)
    elif config is None or isinstance(config, Mapping):
        cfg = Config.of(config, "levels_of config")
    else:
        raise ConfigError(f"levels_of: config is a {type(config).__name__}; give a mapping of config sections "
                          "(e.g. {'levels': {'scale': 'gas'}}), a Config, the path of a YAML config file or None")
    return cfg.located()


def _texts(values, what: str, n: int, repeat: bool) -> list[str]:
    """``values`` (one per row, or with ``repeat`` one text for every row) as a list of n texts."""
    if isinstance(values, str):
        values = [values] * n if repeat else [values]
    values = list(values)
    if len(values) != n:
        raise InputError(f"levels_of: {what} has {len(values)} {'entry' if len(values) == 1 else 'entries'} for {n} "
                         "SMILES; give one per SMILES")
    bad = [i for i, v in enumerate(values) if not isinstance(v, (str, int)) or isinstance(v, bool)]
    if bad:
        raise InputError(f"levels_of: {what}[{bad[0]}] is {values[bad[0]]!r}; give text")
    return [str(v) for v in values]


def _write_candidates(smiles, ids, roles, folder: Path) -> Path:
    """The candidate file of the call in ``folder`` (a file given as a path is used as it is)."""
    import pandas as pd

    from screen.io import write_csv

    if isinstance(smiles, os.PathLike):
        if ids is not None or roles is not None:
            raise InputError("levels_of: ids and roles come from the candidate file itself; leave them out")
        return Path(smiles)
    if isinstance(smiles, pd.DataFrame):
        if ids is not None or roles is not None:
            raise InputError("levels_of: a DataFrame gives its own id and role columns; leave ids and roles out")
        if not any(str(c).strip().lower() == "smiles" for c in smiles.columns):
            raise InputError(f"levels_of: the DataFrame has no 'smiles' column (columns: "
                             f"{', '.join(map(str, smiles.columns)) or 'none'}); give one SMILES per row in it")
        target = folder / "candidates.csv"
        write_csv(smiles.astype(object).where(smiles.notna(), ""), target)  # a CR in a cell quoted (screen.io)
        return target
    if isinstance(smiles, str):
        smiles = [smiles]
    if isinstance(smiles, Mapping):
        if ids is not None:
            raise InputError("levels_of: a mapping gives the ids as its keys; leave ids out")
        ids, smiles = [str(k) for k in smiles], list(smiles.values())
    if not hasattr(smiles, "__iter__"):
        raise InputError(f"levels_of: smiles is a {type(smiles).__name__}; give a SMILES, a list of them, a "
                         "mapping id -> SMILES, a DataFrame with a smiles column or a pathlib.Path of a file")
    smiles = list(smiles)
    if not smiles:
        raise InputError("levels_of: no SMILES given: nothing to compute")
    bad = [i for i, s in enumerate(smiles) if not isinstance(s, str)]
    if bad:
        raise InputError(f"levels_of: SMILES {bad[0]} is {smiles[bad[0]]!r}, not text; give SMILES strings")
    n = len(smiles)
    ids = [f"line-{k}" for k in range(1, n + 1)] if ids is None else _texts(ids, "ids", n, repeat=False)
    columns = {"id": ids, "smiles": smiles}
    if roles is not None:
        columns["role"] = _texts(roles, "roles", n, repeat=True)
    target = folder / "candidates.csv"
    with open(target, "w", encoding="utf-8", newline="") as fh:
        writer = csv.writer(fh)
        writer.writerow(list(columns))
        writer.writerows(zip(*columns.values()))
    return target


def _calibration(cfg: Config) -> Path:
    """The installed calibration of these settings (none is fitted here: that computes every reference molecule)."""
    from screen.calibrate import find_models

    if cfg["calibration"]["refit"] == "always":
        raise ConfigError("levels_of: calibration.refit 'always' fits a calibration within the run (every reference "
                          "molecule is computed: hours); levels_of uses an installed one: fit it once with "
                          "`dascreen calibrate --install DIR` and give calibration.models=DIR, or leave "
                          "calibration.refit out")
    folder = find_models(cfg)
    if folder is None:
        from screen.preflight import calibration_text

        text = calibration_text(cfg) or "no calibration matches these settings"
        raise ConfigError(f"levels_of: {text}; nothing was computed. Use the settings of a shipped calibration, or "
                          "fit one once with `dascreen calibrate --install DIR` (same settings) and give "
                          "calibration.models=DIR")
    return folder


def _store(cfg: Config, say) -> Path | None:
    """The results store the command would use (``DASCREEN_STORE``, else ``store.path``), checked as it checks it;
    its warnings go to standard error, the other lines only when ``say`` is true."""
    from screen.store import run_store

    path, lines = run_store(cfg)
    for line in lines:
        if say or "warning" in line:
            print(line, file=sys.stderr, flush=True)
    return path


def _run(candidates: Path, work: Path, cfg: Config, folder: Path, verbose: bool):
    """The command's prepare, compute and levels jobs on ``work``: the levels table as read back, and the store
    used (None: none)."""
    import glob
    import math
    from dataclasses import replace

    from screen.calibrate import apply_models, load_models
    from screen.compute import run_compute
    from screen.io import Progress
    from screen.levels import read_levels
    from screen.prepare import options_from_config, prepare
    from screen.levels import read_computed, write_levels
    from screen.stages import _count_rows

    models = load_models(folder, cfg)  # checked before any work, as the levels job checks its pinned calibration
    store = _store(cfg, verbose)
    prepared = work / "prepared"
    opts, polymer, truncate = options_from_config(cfg)
    opts = replace(opts, shard_size=max(opts.shard_size, math.ceil(_count_rows(candidates) / MAX_SHARDS)))
    prepare(candidates, prepared, opts, polymer, truncate)
    ex = cfg.execution
    tables = []
    saved = os.environ.get("OMP_NUM_THREADS")
    if ex.isolate:  # the workers get the job's thread count, as `python -m screen.stages` gives its own
        os.environ["OMP_NUM_THREADS"] = str(cfg.electronic.threads)
    try:
        for shard in sorted(glob.glob(str(prepared / "shard-*.csv"))):
            name = Path(shard).stem
            stream = sys.stderr if verbose else io.StringIO()
            run_compute(shard, work / "structures" / f"{name}.sdf", work / "structures" / f"{name}.csv",
                        work / "electronic" / f"{name}.csv", cfg.structures, cfg.electronic, isolate=ex.isolate,
                        timeout_s=ex.molecule_timeout_s, store=store if store is not None else False,
                        progress=Progress(f"compute {name}", stream=stream))
            tables.append(str(work / "electronic" / f"{name}.csv"))
    finally:
        if ex.isolate:
            if saved is None:
                os.environ.pop("OMP_NUM_THREADS", None)
            else:
                os.environ["OMP_NUM_THREADS"] = saved
    levels, sidecar = read_computed(prepared / "manifest.csv", tables, cfg)
    levels = apply_models(levels, models, scale=cfg["levels"]["scale"])
    path = work / "levels.csv"
    write_levels(levels, sidecar, path)  # as the levels job: an earlier call's per-n file in a reused workdir goes
    return read_levels(path), store


#: the file that marks a folder as a ``levels_of`` work folder, which a later call may write over
WORKDIR_MARK = ".dascreen-levels-of"


def _check_workdir(work: Path) -> None:
    """Refuse a ``workdir`` that holds files ``levels_of`` did not write (a second API pass: a run folder's
    ``levels.csv`` and a user's ``candidates.csv`` were overwritten without a word)."""
    if work.exists() and not work.is_dir():
        raise InputError(f"levels_of: workdir {work} is a file; give a folder")
    if work.is_dir() and any(work.iterdir()) and not (work / WORKDIR_MARK).is_file():
        raise InputError(f"levels_of: workdir {work} already holds files that levels_of did not write (a run folder, "
                         "a project folder); give an empty or new folder, or one an earlier levels_of call used")


def levels_of(smiles, ids=None, config=None, *, roles=None, workdir=None, verbose: bool = False):
    """Calibrated frontier levels of molecules and polymer repeat units, as ``dascreen run`` writes them.

    Runs what ``dascreen run`` runs up to ``levels.csv`` (prepare checks, structures, ΔSCF levels, polymers as
    oligomer series extrapolated to the chain limit, calibration) with the same stage functions, on a
    temporary folder, and returns ``levels.csv`` as ``dascreen rank`` reads it. Molecules already in the results
    store (``DASCREEN_STORE``, else ``store.path``, as for the command) are not computed again. Nothing is
    fitted: the installed calibration of the settings is used (the shipped one for the defaults).

    Parameters
    ----------
    smiles : str, sequence of str, mapping, pandas.DataFrame or pathlib.Path
        One SMILES, a list of them, a mapping ``id -> SMILES``, a table with a ``smiles`` column (``id``,
        ``role``, ``name`` and any other columns as in a candidate CSV) or the path of a candidate file
        (``.csv``, ``.smi``, ``.sdf``; a ``pathlib.Path``: a ``str`` is always a SMILES). A polymer is its
        repeat unit with two ``[*]`` attachment points.
    ids : sequence of str, optional
        One id per SMILES (default ``line-1``, ``line-2``, …: the k-th SMILES, as for a SMILES file without ids).
    config : mapping, Config, path-like or None
        Settings as config sections (``{"levels": {"scale": "gas"}}``), a :class:`screen.config.Config` or a
        YAML config file; None: the defaults. ``calibration.models``/``calibration.reference`` are found as the
        command finds them (:func:`screen.config.data_path`).
    roles : str or sequence of str, optional
        ``"donor"``, ``"acceptor"``, ``"dye"`` or ``""`` for every row, or one per SMILES (the ``role`` column).
    workdir : path-like, optional
        Keep the run's files here (``candidates.csv``, ``prepared/``, ``structures/``, ``electronic/``,
        ``levels.csv`` and, with polymers, ``levels.oligomers.csv``: the per-n values); default: a temporary folder,
        removed after. It must be new, empty or one an earlier call used (marked by a ``.dascreen-levels-of``
        file): a folder with other files (a run folder) is refused.
    verbose : bool
        Print the results store line and each shard's progress on standard error (warnings are always printed).

    Returns
    -------
    pandas.DataFrame
        One row per input row, in input order: ``id``, ``smiles``, ``status`` (``ok``, ``rejected`` by the
        prepare checks, ``failed`` in a calculation) and ``error`` (the reason, empty for ``ok``), the calibrated
        ``ip_ev``, ``ea_ev``, ``homo_ev``, ``lumo_ev``, ``gap_opt_ev`` [eV, vacuum scale; HOMO/LUMO negative]
        with their σ columns [eV], ``scale`` (``film`` or ``gas``), the raw ``xtb_*`` values [eV] and the other
        ``levels.csv`` columns (``docs/contracts.md``). Rows that are not ``ok`` have empty (NaN) levels.
        ``attrs``: ``protocol_id``, ``calibration`` (the model folder) and ``store`` (the store file, or None).

    Raises
    ------
    InputError
        No SMILES, ids or roles of another length, a non-text SMILES, or a candidate file the command refuses.
    ConfigError
        An invalid setting, no installed calibration of these settings (the message names the differences from
        the shipped ones), or a missing reference folder.
    screen.isolation.MainGuardMissing
        Called at the top level of a script, outside ``if __name__ == "__main__":``, with ``execution.isolate``.

    See Also
    --------
    screen.rank.rank_candidates : rank the returned table against a partner.

    Examples
    --------
    A molecule (a few seconds; none when the results store holds it) and a row the prepare checks refuse;
    levels in eV on the vacuum scale:

    >>> lv = levels_of({"thiophene": "c1ccsc1", "bad": "C1CC"})
    >>> lv[["id", "status", "homo_ev", "lumo_ev", "gap_opt_ev", "scale"]].round(2)  # doctest: +NORMALIZE_WHITESPACE
              id    status  homo_ev  lumo_ev  gap_opt_ev scale
    0  thiophene        ok    -6.48    -1.55        4.25  film
    1        bad  rejected      NaN      NaN         NaN
    >>> lv.loc[1, "error"]
    'SMILES syntax error: unclosed ring'

    A polymer is given as its repeat unit (its oligomers n = 1 … 4 are computed: some seconds more):

    >>> levels_of(["[*]c1ccc([*])cc1"])[["id", "representation", "chain_n_max"]]  # doctest: +SKIP
           id representation  chain_n_max
    0  line-1        polymer            4
    """
    cfg = _config(config)
    folder = _calibration(cfg)
    with tempfile.TemporaryDirectory(prefix="dascreen-levels-") as tmp:
        work = Path(workdir).expanduser().absolute() if workdir is not None else Path(tmp)
        _check_workdir(work)
        work.mkdir(parents=True, exist_ok=True)
        (work / WORKDIR_MARK).touch()
        candidates = _write_candidates(smiles, ids, roles, work)
        from screen.preflight import check_candidates

        check_candidates(candidates)  # a file the command refuses is refused here, before any work
        levels, store = _run(candidates.resolve(), work, cfg, folder, verbose)
    levels.attrs.update(protocol_id=cfg.protocol_id, calibration=str(folder),
                        store=str(store) if store is not None else None)
    return levels
