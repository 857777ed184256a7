"""Levels stage: one row per input row, raw engine values and calibrated levels.

This module joins the prepare manifest (every input row, in input order) with
the per-shard electronic tables (one row per unique structure), so duplicate
structures share one computation and rejected rows keep their reason. When
calibration models are supplied, :func:`apply_models` adds the calibrated
columns of the ``levels.csv`` contract (see ``docs/contracts.md``).

Energy scales: ``ip_ev``/``ea_ev``/``gap_fund_ev`` are isolated-molecule
(gas-phase) values; ``homo_ev``/``lumo_ev`` are on the scale named in the
``scale`` column of the same row (``film`` by default).

Polymers
--------
A polymer row (``representation == "polymer"``) was computed as its oligomers
n = 1 … N (``prepared/oligomers.csv``, :mod:`screen.prepare.polymers`). Each raw
quantity of :data:`CHAIN_QUANTITIES` is extrapolated to the chain limit with its
own fit (:func:`screen.extrapolate.extrapolate`, ``per_unit`` = the repeat unit's
:attr:`~screen.oligomers.RepeatUnit.conjugation_length`; the levels of :data:`LEVEL_QUANTITIES`
with the cosine form first, the gap and descriptors with Kuhn's), and the polymer row's
raw columns hold those limits, so the calibration treats a polymer like any
molecule. Added columns: ``chain_n_max`` (longest oligomer computed),
``chain_fit`` (method per quantity, e.g. ``ip:cos ea:exp … gap:kuhn``; ``conv`` for a series that has
stopped moving, :func:`screen.extrapolate.extrapolate`), ``chain_fit_quality``
(``good``/``poor`` over :data:`QUALITY_QUANTITIES`: no saturating fit accepted on a series still moving, or a
fit on a series that
has not started to saturate; a poor fit adds a ``chain_fit_poor`` item to ``note``) and
``chain_spread_<quantity>`` (:attr:`~screen.extrapolate.ChainFit.spread_ev`, which
the calibration adds to the σ); the conformer-spread columns are those of the
longest oligomer that has one (:mod:`screen.conformer_spread`). The per-n values and every fit's details go to
the sidecar ``levels.oligomers.csv`` (:func:`chain_limits`).

References
----------
.. [1] J. Gierschner, J. Cornil, H.-J. Egelhaaf, Adv. Mater. 19 (2007) 173.
   :doi:`10.1002/adma.200600277`

Examples
--------
>>> import pandas as pd
>>> olig = pd.DataFrame({"polymer_key": ["mp"] * 4, "polymer_id": ["p"] * 4, "n": [1, 2, 3, 4],
...                      "key": ["m1", "m2", "m3", "m4"], "smiles": ["a", "b", "c", "d"], "per_unit": 2})
>>> elec = pd.DataFrame({"key": ["m1", "m2", "m3", "m4"], "status": "ok", "error": "",
...                      "xtb_gap_ev": [4.0, 3.2, 2.9, 2.75]})
>>> limits, side = chain_limits(elec, olig)
>>> limits.loc["mp", "chain_fit"], int(limits.loc["mp", "chain_n_max"])
('gap:kuhn', 4)
>>> round(float(limits.loc["mp", "xtb_gap_ev"]), 2) < 2.75
True
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path

import numpy as np
import pandas as pd

from screen.columns import (CALIBRATED_COLUMNS, CONFORMER_SPREAD_COLUMNS, ELECTRONIC_COLUMNS, LEVELS_CONTRACT_COLUMNS,
                            LEVELS_MIN_COLUMNS, RAW_COLUMNS)
from screen.io import read_csv_checked, text_cells

#: leading columns of levels.csv, in order (:data:`screen.columns.LEVELS_CONTRACT_COLUMNS`)
CONTRACT_COLUMNS = LEVELS_CONTRACT_COLUMNS

__all__ = ["CONTRACT_COLUMNS", "CALIBRATED_COLUMNS", "CHAIN_QUANTITIES", "CHAIN_COLUMNS", "SIDECAR_COLUMNS",
           "sidecar_path",
           "assemble", "chain_limits", "read_computed", "write_levels", "summarise", "read_levels", "LEVELS_MIN_COLUMNS"]

_EXTRA = ["name", "role", "key", "duplicate_of", "heavy_atoms", "reason"]

#: raw quantities extrapolated to the chain limit for polymers (those present in the electronic tables):
#: ΔSCF IP/EA, orbital energies and gap, HOMO→LUMO exchange/Coulomb integrals and overlap
#: (:mod:`screen.excitation`), and the ΔSCF IP/EA in a dielectric continuum (film)
CHAIN_QUANTITIES = ["xtb_ip_ev", "xtb_ea_ev", "xtb_homo_ev", "xtb_lumo_ev", "xtb_gap_ev", "xtb_k_hl_ev",
                    "xtb_j_hl_ev", "xtb_overlap_hl", "xtb_ip_film_ev", "xtb_ea_film_ev"]
#: quantities whose fit decides ``chain_fit_quality`` (the levels and gaps; the exchange/Coulomb/overlap
#: descriptors are extrapolated and recorded but a poor fit of theirs alone does not flag the row)
QUALITY_QUANTITIES = ["xtb_ip_ev", "xtb_ea_ev", "xtb_homo_ev", "xtb_lumo_ev", "xtb_gap_ev", "xtb_ip_film_ev",
                      "xtb_ea_film_ev"]
#: columns added to levels.csv for the chain limit (empty for molecules)
CHAIN_COLUMNS = ["representation", "chain_n_max", "chain_fit", "chain_fit_quality"]
#: columns of the sidecar ``levels.oligomers.csv`` (one row per polymer, quantity and n; n = ``inf`` for the limit)
SIDECAR_COLUMNS = ["polymer_key", "polymer_id", "quantity", "n", "key", "smiles", "status", "value", "method",
                   "rms", "spread", "quality", "kuhn", "cosine", "exponential", "inverse", "longest"]


def sidecar_path(levels_path) -> Path:
    """``levels.csv`` → ``levels.oligomers.csv``: where the per-n table of a levels file's polymers is written.

    Examples
    --------
    >>> sidecar_path("out/levels.csv").name
    'levels.oligomers.csv'
    """
    path = Path(levels_path)
    return path.with_name(path.name.removesuffix(".csv") + ".oligomers.csv")


_SHORT = {"kuhn": "kuhn", "cosine": "cos", "exponential": "exp", "inverse": "inv", "longest": "longest"}
#: short method names in ``chain_fit`` (a fit's candidates are the keys of _SHORT; ``converged`` is a method only)
_METHOD_SHORT = {**_SHORT, "converged": "conv"}
#: quantities on an arbitrary zero (levels): extrapolated with the cosine (tight-binding) form first, the others
#: (the orbital gap and the positive exchange/Coulomb/overlap descriptors) with Kuhn's (screen.extrapolate.FORMS)
LEVEL_QUANTITIES = ("xtb_ip_ev", "xtb_ea_ev", "xtb_homo_ev", "xtb_lumo_ev", "xtb_ip_film_ev", "xtb_ea_film_ev")


def _short(quantity: str) -> str:
    return quantity.removeprefix("xtb_").removesuffix("_ev")


def _one_polymer(pkey: str, group: pd.DataFrame, elec: pd.DataFrame, quantities: list[str],
                 rms_tol_ev: float) -> tuple[dict, list[dict]]:
    """Chain-limit row and sidecar rows of one polymer (``group``: its oligomer rows, n increasing)."""
    found = elec.reindex(group["key"])
    ok = found["status"].eq("ok").to_numpy()
    pid = str(group["polymer_id"].iloc[0])
    side = [{"polymer_key": pkey, "polymer_id": pid, "quantity": q, "n": int(n), "key": k, "smiles": smi,
             "status": st if isinstance(st, str) else "failed", "value": v}
            for q in quantities
            for n, k, smi, st, v in zip(group["n"], group["key"], group["smiles"], found["status"], found[q])]
    failed = [f"n={n}: {e if isinstance(e, str) and e else 'not computed'}"
              for n, e, good in zip(group["n"], found["error"], ok) if not good]
    if not ok.any():
        return {"status": "failed", "error": "every oligomer failed (" + "; ".join(failed) + ")"}, side
    n = group["n"].to_numpy()[ok]
    if n.size < 2:  # a polymer audit: a monomer-only "series" came out with its monomer values and spread 0
        why = ("the only oligomer built within polymer.max_atoms" if len(group) == 1
               else "the only oligomer computed (" + "; ".join(failed) + ")")
        return {"status": "failed",
                "error": f"no chain limit: n={int(n[0])} is {why}, and a chain limit needs at least two oligomers; "
                         "raise polymer.max_atoms (each oligomer is a molecule of the run) or write a smaller "
                         "repeat unit"}, side
    row = {"status": "ok", "error": "", "chain_n_max": int(n.max()), "_failed": failed}
    from screen.extrapolate import extrapolate  # scipy: loaded only where chains are fitted, not to read levels

    methods, poor = [], []
    for q in quantities:
        fit = extrapolate(n, pd.to_numeric(found[q], errors="coerce").to_numpy(float)[ok],
                          per_unit=int(group["per_unit"].iloc[0]), rms_tol_ev=rms_tol_ev,
                          form="level" if q in LEVEL_QUANTITIES else "gap")
        row[q], row[f"chain_spread_{q}"] = fit.limit_ev, fit.spread_ev
        methods.append(f"{_short(q)}:{_METHOD_SHORT[fit.method]}")
        if fit.quality != "good" and q in QUALITY_QUANTITIES:
            poor.append((_short(q), fit.method))
        side.append({"polymer_key": pkey, "polymer_id": pid, "quantity": q, "n": "inf", "status": "ok",
                     "value": fit.limit_ev, "method": fit.method, "rms": fit.rms_ev, "spread": fit.spread_ev,
                     "quality": fit.quality, **{k: fit.candidates.get(k) for k in _SHORT}})
    row.update(_longest_spread(found[ok], n))
    row.update(_longest_structure(found[ok], n))
    cut = str(group["side_chains_cut"].iloc[0]) if "side_chains_cut" in group else ""
    if cut and cut != "nan":  # the repeat unit's side chains, cut to methyl before the oligomers were built
        row["truncated_groups"] = "per repeat unit: " + cut
        row["truncated_chains"] = len(cut.split(";"))
    row["chain_fit"] = " ".join(methods)
    row["chain_fit_quality"] = "poor" if poor else "good"
    row["_poor"] = poor
    return row, side


#: structure columns a polymer row takes from its longest computed oligomer (what was computed, side chains cut)
LONGEST_OLIGOMER_COLUMNS = ("smiles_computed", "n_atoms", "truncated_chains", "truncated_groups")


def _longest_structure(found: pd.DataFrame, n: np.ndarray) -> dict:
    """:data:`LONGEST_OLIGOMER_COLUMNS` of the longest computed oligomer (those the electronic table has).

    Examples
    --------
    >>> f = pd.DataFrame({"smiles_computed": ["Cc1cccs1", "Cc1ccc(-c2cccs2)s1"], "n_atoms": [12, 19]})
    >>> _longest_structure(f, np.array([1, 2]))
    {'smiles_computed': 'Cc1ccc(-c2cccs2)s1', 'n_atoms': 19}
    """
    if not len(found):
        return {}
    last = found.iloc[int(np.argmax(n))]
    return {c: (last[c].item() if hasattr(last[c], "item") else last[c]) for c in LONGEST_OLIGOMER_COLUMNS
            if c in found.columns}


def _longest_spread(found: pd.DataFrame, n: np.ndarray) -> dict:
    """The conformer spread of the longest oligomer that has one (:mod:`screen.conformer_spread`); NaN if none."""
    cols = CONFORMER_SPREAD_COLUMNS
    if cols[0] not in found:
        return {}
    spread = found[cols].apply(pd.to_numeric, errors="coerce").to_numpy(float)
    for i in np.argsort(-n, kind="stable"):
        if np.isfinite(spread[i, 0]):
            return dict(zip(cols, spread[i].tolist()))
    return {c: np.nan for c in cols}


def chain_limits(electronic: pd.DataFrame, oligomers: pd.DataFrame,
                 rms_tol_ev: float = 0.05) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Chain-limit raw values of every polymer from its oligomers' electronic results.

    Parameters
    ----------
    electronic : pandas.DataFrame
        Electronic rows (``key, status, error`` and raw columns) of the batch.
    oligomers : pandas.DataFrame
        ``prepared/oligomers.csv`` (:data:`screen.prepare.OLIGOMER_COLUMNS`).
    rms_tol_ev : float
        Largest RMS residual of an accepted saturating fit [eV] (``polymer.fit_rms_tol_ev``).

    Returns
    -------
    limits : pandas.DataFrame
        Indexed by polymer key: ``status, error``, the chain-limit raw values, ``chain_n_max``,
        ``chain_fit``, ``chain_fit_quality``, ``chain_spread_<quantity>`` and ``note``.
    sidecar : pandas.DataFrame
        :data:`SIDECAR_COLUMNS`: the per-n values (status of each oligomer) and, with
        ``n = "inf"``, each quantity's chosen fit, RMS, spread, quality and every fit's limit.
    """
    elec = electronic.drop_duplicates("key", keep="last").set_index("key")
    quantities = [q for q in CHAIN_QUANTITIES if q in elec.columns]
    for q in quantities:
        elec[q] = pd.to_numeric(elec[q], errors="coerce")
    rows, side = {}, []
    for pkey, group in oligomers.groupby("polymer_key", sort=False):
        row, srows = _one_polymer(pkey, group.sort_values("n"), elec, quantities, rms_tol_ev)
        notes = []
        poor = row.pop("_poor", [])
        longest = [q for q, method in poor if method == "longest"]
        unsaturated = [f"{q} ({method})" for q, method in poor if method != "longest"]
        if longest:
            notes.append(f"chain_fit_poor: no saturating fit accepted for {', '.join(longest)} "
                         f"(value of the longest oligomer, n={row['chain_n_max']}, used)")
        if unsaturated:
            notes.append(f"chain_fit_poor: the oligomers up to n={row['chain_n_max']} have not started to saturate "
                         f"for {', '.join(unsaturated)}; the fit's limit is used, the chain limit may lie further towards the "
                         "1/n limit and σ carries that spread (screen.extrapolate)")
        failed = row.pop("_failed", [])
        if failed:
            notes.append("oligomer_failed: " + ", ".join(failed))
        row["note"] = "; ".join(notes)
        rows[pkey] = row
        side.extend(srows)
    limits = pd.DataFrame.from_dict(rows, orient="index")
    return limits, pd.DataFrame(side, columns=SIDECAR_COLUMNS)


def assemble(manifest: pd.DataFrame, electronic: Iterable[pd.DataFrame],
             limits: pd.DataFrame | None = None) -> pd.DataFrame:
    """Join the manifest with electronic results: every input row, input order.

    Parameters
    ----------
    manifest : pandas.DataFrame
        ``manifest.csv`` from :func:`screen.prepare.prepare` (columns ``row, id,
        key, smiles, status, reason, error, duplicate_of, ...``).
    electronic : iterable of pandas.DataFrame
        Per-shard tables with :data:`screen.electronic.ELECTRONIC_COLUMNS`.
    limits : pandas.DataFrame, optional
        Chain-limit rows of the batch's polymers (:func:`chain_limits`), indexed by polymer key.

    Returns
    -------
    pandas.DataFrame
        Contract columns first (calibrated ones empty), then raw ``xtb_*``
        columns, then :data:`CHAIN_COLUMNS` and ``chain_spread_*``, then
        provenance and pass-through columns. ``status`` is ``rejected``
        (prepare), ``failed`` (structures/electronic, or a structure that was
        never computed) or ``ok``. A polymer row carries its chain-limit values.
    """
    parts = [t for t in electronic if len(t)]
    elec = (pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=ELECTRONIC_COLUMNS))
    elec = elec.drop_duplicates("key", keep="last").set_index("key")
    if limits is not None and len(limits):
        elec = pd.concat([elec, limits.drop(columns=["note"], errors="ignore")])
        elec = elec[~elec.index.duplicated(keep="last")]
    out = manifest.copy()
    ok = out["status"].eq("ok")
    keys = out["key"].where(ok, "")
    found = keys.isin(elec.index)
    status = out["status"].copy()
    error = out["error"].pipe(text_cells).copy()
    missing = ok & ~found
    status[missing] = "failed"
    error[missing] = "not computed: the structure has no electronic result (was its shard run?)"
    sub = elec.reindex(keys.where(found))
    sub.index = out.index
    computed = ok & found
    status[computed] = sub.loc[computed, "status"].astype(str)
    error[computed] = sub.loc[computed, "error"].pipe(text_cells)
    out["status"], out["error"] = status, error
    extra_raw = [c for c in CHAIN_QUANTITIES if c not in RAW_COLUMNS and c in elec.columns]
    for col in list(ELECTRONIC_COLUMNS) + extra_raw:
        if col in ("key", "status", "error"):
            continue
        out[col] = sub[col].where(computed) if col in sub else np.nan
    for col in RAW_COLUMNS + extra_raw:
        out[col] = pd.to_numeric(out[col], errors="coerce")
    _chain_columns(out, sub, limits, computed)
    for col in CALIBRATED_COLUMNS:
        out[col] = np.nan if col != "scale" else ""
    if "smiles" not in out:
        out["smiles"] = ""
    if "smiles_input" in out:  # rows that never got a canonical SMILES show what the user wrote
        out["smiles"] = (out["smiles"].pipe(text_cells)
                         .mask(lambda s: s.eq(""), out["smiles_input"]))
    for col in ("n_atoms", "n_conformers", "conf_spread_n", "truncated_chains", "chain_n_max"):
        out[col] = pd.to_numeric(out[col], errors="coerce").astype("Int64")
    spreads = [c for c in out.columns if c.startswith("chain_spread_")]
    lead = CONTRACT_COLUMNS + RAW_COLUMNS + extra_raw + CHAIN_COLUMNS + spreads
    rest = [c for c in _EXTRA if c in out and c not in lead]
    tail = [c for c in out.columns if c not in lead and c not in rest and c != "row"]
    return out.sort_values("row", kind="stable")[lead + rest + tail].reset_index(drop=True)


def _chain_columns(out: pd.DataFrame, sub: pd.DataFrame, limits: pd.DataFrame | None, computed: pd.Series) -> None:
    """Fill :data:`CHAIN_COLUMNS`, the spreads and the chain notes in place."""
    if "representation" not in out:
        out["representation"] = "molecule"
    out["representation"] = out["representation"].pipe(text_cells)
    polymer = computed & out["representation"].eq("polymer")
    for col in ("chain_n_max", "chain_fit", "chain_fit_quality"):
        out[col] = sub[col].where(polymer) if col in sub else np.nan
    for col in [c for c in sub.columns if c.startswith("chain_spread_")]:
        out[col] = pd.to_numeric(sub[col].where(polymer), errors="coerce")
    for col in ("chain_fit", "chain_fit_quality"):
        out[col] = out[col].pipe(text_cells)
    if limits is None or "note" not in getattr(limits, "columns", []):
        return
    chain_note = out["key"].map(limits["note"]).where(polymer, "").pipe(text_cells)
    note = out["note"].pipe(text_cells) if "note" in out else pd.Series("", index=out.index)
    out["note"] = [("; ".join(p for p in (a, b) if p)) for a, b in zip(note, chain_note)]


def read_computed(manifest_path, electronic_paths, cfg):
    """Levels rows of a prepared batch (polymers at the chain limit) and the per-n sidecar table: what the levels
    job, the calibration job, the dye-cell mode and :func:`screen.api.levels_of` read from computed shards.

    ``cfg``: the configuration (its ``polymer.fit_rms_tol_ev``).
    """
    from screen.prepare import read_oligomers

    manifest = pd.read_csv(manifest_path, dtype=str, keep_default_na=False)
    manifest["row"] = manifest["row"].astype(int)
    tables = [pd.read_csv(p, dtype={"key": str, "status": str, "error": str}, keep_default_na=False,
                          na_values=[""]) for p in electronic_paths]
    oligomers = read_oligomers(Path(manifest_path).with_name("oligomers.csv"))
    limits, sidecar = None, pd.DataFrame()
    if len(oligomers):
        parts = [t for t in tables if len(t)]
        elec = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=["key", "status", "error"])
        limits, sidecar = chain_limits(elec, oligomers, cfg["polymer"]["fit_rms_tol_ev"])
    return assemble(manifest, tables, limits), sidecar



def write_levels(levels: pd.DataFrame, sidecar: pd.DataFrame, path) -> Path | None:
    """Write ``levels.csv`` and, with polymers, its per-n sidecar; remove an earlier sidecar otherwise (a folder used
    again: its old per-n values no longer belong to the file). Returns the sidecar's path, or None."""
    from screen.io import write_csv

    write_csv(levels, path)
    side = sidecar_path(path)
    if len(sidecar):
        write_csv(sidecar, side)
        return side
    if side.is_file():
        side.unlink()
    return None


def summarise(levels: pd.DataFrame) -> dict:
    """Counts of ok / rejected / failed rows."""
    counts = levels["status"].value_counts()
    return {"rows": int(len(levels)), **{s: int(counts.get(s, 0)) for s in ("ok", "rejected", "failed")}}


def read_levels(path) -> pd.DataFrame:
    """Read a levels file (ours or a user's) and check the minimum columns.

    Raises
    ------
    InputError
        The file is missing or unreadable, or a required column is missing
        (naming the file and the columns found).
    """
    frame = read_csv_checked(path, LEVELS_MIN_COLUMNS, what="a levels file", dtype={"id": str},
                             keep_default_na=False, na_values=[""])
    frame["id"] = frame["id"].pipe(text_cells)
    frame["scale"] = frame["scale"].pipe(text_cells)
    return frame
