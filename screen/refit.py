"""Refit the calibration from stored raw values, without recomputing anything.

A calibration run (``dascreen calibrate``) stores beside its models the raw
GFN2-xTB values it was fitted on (``reference_raw.csv``, polymers at the chain
limit, and ``reference_oligomers.csv``, the per-n values). When only reference
*values* change — a recalled number replaced by one read in a paper, a row
excluded — those raw values are still valid and a refit takes seconds. New
reference structures need raw values too: compute them as ordinary candidates
(``dascreen run new.csv --out DIR``, same protocol) and pass ``DIR`` as a second
source; :func:`refit_from_raw` lists any structure still missing and writes it to
``missing_reference.csv`` ready for such a run.

A polymer's raw values are its chain limits.  Where the per-n values are stored,
:func:`rechain` extrapolates them again with the code's own rule
(:func:`screen.levels.chain_limits`), so a refit after a change of the
extrapolation rule gives what a computing run would give.

Every source must prove that it was computed with the run's protocol: a model
folder by the fingerprint of its model files, a run folder by
``levels.csv.meta.json``. A source of another protocol is refused (its raw
values would calibrate the wrong numbers).

Examples
--------
>>> import screen
>>> from screen.config import Config
>>> cfg = Config.of({})
>>> folder = Path(screen.__file__).resolve().parents[1] / "models" / cfg.protocol_id  # the shipped models
>>> raw, sidecar = read_raw_source(folder, cfg.protocol_id)
>>> bool(len(raw) > 100), set(raw["status"]) <= {"ok", "failed", "rejected"}
(True, True)
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from screen.calibrate import fingerprint, fit_all, read_reference, save_calibration
from screen.calibration.reference import canonical, reference_inputs
from screen.config import Config, calibration_set_args
from screen.errors import ConfigError
from screen.io import read_csv_checked, read_json, write_csv

__all__ = ["read_raw_source", "missing_structures", "refit_from_raw", "rechain"]

_RAW_NEEDED = ["smiles", "status", "xtb_ip_ev", "xtb_ea_ev"]


def _source_protocol(folder: Path) -> str | None:
    """Protocol id a raw-value folder was computed with (model folder or run folder), or ``None``."""
    meta = folder / "levels.csv.meta.json"
    if meta.is_file():
        return read_json(meta).get("protocol_id")
    model = folder / "ip.json"
    if model.is_file():
        return read_json(model).get("fingerprint", {}).get("protocol_id")
    return None


def read_raw_source(source: str | Path, protocol_id: str) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Raw values and per-n oligomer values of one source folder.

    Parameters
    ----------
    source : path-like
        A model folder (``models/<protocol-id>``, holding ``reference_raw.csv``)
        or a run folder (holding ``levels.csv`` and its ``.meta.json``).
    protocol_id : str
        The protocol the refit is for; the source must have been computed with it.

    Returns
    -------
    raw, oligomers : pandas.DataFrame
        One row per computed structure; the per-n table (empty when none).

    Raises
    ------
    ConfigError
        The folder holds no raw values, or they belong to another protocol.
    """
    folder = Path(source)
    table = folder / "reference_raw.csv"
    if not table.is_file():
        table = folder / "levels.csv"
    if not table.is_file():
        raise ConfigError(f"--from-raw {source}: no reference_raw.csv (model folder) or levels.csv (run folder) "
                          "there")
    found = _source_protocol(folder)
    if found != protocol_id:
        raise ConfigError(f"--from-raw {source}: its raw values were computed with protocol {found or 'unknown'}, "
                          f"this refit is for {protocol_id}; give a source of the same protocol")
    raw = read_csv_checked(table, _RAW_NEEDED, what="raw-value table", error=ConfigError, keep_default_na=False,
                           na_values=[""])
    if "chain_n_max" in raw.columns:  # an oligomer count: keep it an integer beside the empty cells
        raw["chain_n_max"] = pd.to_numeric(raw["chain_n_max"], errors="coerce").astype("Int64")
    side = next((p for p in (folder / "reference_oligomers.csv", folder / "levels.oligomers.csv") if p.is_file()),
                None)
    oligomers = pd.read_csv(side, dtype=str, keep_default_na=False) if side else pd.DataFrame()  # copied as text
    return raw, oligomers


def rechain(raw: pd.DataFrame, oligomers: pd.DataFrame, rms_tol_ev: float = 0.05) -> tuple[pd.DataFrame,
                                                                                            pd.DataFrame]:
    """Polymer rows of ``raw`` with their chain limits extrapolated again from the stored per-n values.

    Parameters
    ----------
    raw : pandas.DataFrame
        Raw values (``key``, ``smiles``, the ``xtb_*`` columns; polymers at the chain limit).
    oligomers : pandas.DataFrame
        The per-n sidecar (:data:`screen.levels.SIDECAR_COLUMNS`, as text or numbers); empty: nothing to do.
    rms_tol_ev : float
        ``polymer.fit_rms_tol_ev`` [eV].

    Returns
    -------
    raw, oligomers : pandas.DataFrame
        ``raw`` with every polymer that has per-n values refitted (chain-limit values, ``chain_fit``,
        ``chain_fit_quality``, ``chain_n_max``, ``chain_spread_*``); the sidecar rebuilt from the same values.
    """
    from screen.levels import chain_limits
    from screen.oligomers import RepeatUnit

    if not len(oligomers) or "polymer_key" not in oligomers:
        return raw, oligomers
    n = pd.to_numeric(oligomers["n"], errors="coerce")
    per = oligomers[np.isfinite(n)].copy()  # the per-n rows ("inf" holds the old fit)
    per["n"] = n[np.isfinite(n)].astype(int)
    smiles = dict(zip(raw["key"].astype(str), raw["smiles"].astype(str)))
    per = per[per["polymer_key"].isin(smiles)]
    if not len(per):
        return raw, oligomers
    status = per.groupby("key")["status"].first()
    elec = per.pivot_table(index="key", columns="quantity", values="value", aggfunc="first")
    elec = elec.apply(pd.to_numeric, errors="coerce").reset_index()
    elec["status"] = elec["key"].map(status).fillna("failed")
    elec["error"] = np.where(elec["status"].eq("ok"), "", "not computed")
    olig = per[["polymer_key", "polymer_id", "n", "key", "smiles"]].drop_duplicates(["polymer_key", "n"])
    olig["per_unit"] = [RepeatUnit.from_smiles(smiles[k]).conjugation_length for k in olig["polymer_key"]]
    limits, side = chain_limits(elec, olig.sort_values(["polymer_key", "n"]), rms_tol_ev)
    out = raw.copy()
    ok = limits[limits["status"].eq("ok")]
    cols = [c for c in ok.columns if c in out.columns and (c.startswith(("xtb_", "chain_")))]
    for c in cols:
        if c.startswith("chain_") and out[c].dtype != object and ok[c].dtype == object:
            out[c] = out[c].astype(object)
    rows = out["key"].astype(str).isin(ok.index)
    for c in cols:
        out.loc[rows, c] = out.loc[rows, "key"].astype(str).map(ok[c]).to_numpy()
    kept = oligomers[~oligomers["polymer_key"].isin(set(ok.index))]
    side = side[side["polymer_key"].isin(set(ok.index))]
    return out, pd.concat([kept, side.astype(str).replace("nan", "")], ignore_index=True)


def missing_structures(sets: dict[str, pd.DataFrame], raw: pd.DataFrame) -> pd.DataFrame:
    """Reference structures without a raw value (``id, smiles, name``), in reference order."""
    have = {canonical(s) for s in raw["smiles"].astype(str)}
    wanted = reference_inputs(sets)
    keep = [canonical(s) not in have for s in wanted["smiles"]]
    return wanted[keep].reset_index(drop=True)


def _refuse_unscreenable(missing: pd.DataFrame, cfg: Config) -> None:
    """Refuse reference structures that a run with these settings rejects, naming each one's reason: "compute them
    with `dascreen run`" sent a charged molecule's row (``C[n+]1ccccc1``) to a run that rejects it."""
    if not len(missing):
        return
    from screen.prepare import options_from_config, validate

    checked = validate(pd.DataFrame({"id": missing["name"].astype(str), "smiles": missing["smiles"].astype(str)}),
                       options_from_config(cfg)[0])
    bad = checked[checked["status"].ne("ok")]
    if len(bad):
        said = "; ".join(f"{row.id} ({row.smiles_input}): {row.error}" for row in bad.head(3).itertuples())
        more = f" (and {len(bad) - 3} more)" if len(bad) > 3 else ""
        raise ConfigError(f"--from-raw: {len(bad)} reference structure(s) cannot be computed with these settings: "
                          f"{said}{more}; correct or remove those rows of the reference files")


def refit_from_raw(config, sources, out_root: str | Path) -> tuple[Path, pd.DataFrame]:
    """Fit every calibration model on the reference data and stored raw values.

    Parameters
    ----------
    config : Config or mapping
        The run configuration (protocol, ``calibration.reference``).
    sources : sequence of path-like
        Raw-value folders (see :func:`read_raw_source`); for a structure in
        several sources the first one wins.
    out_root : path-like
        Models go to ``<out_root>/<protocol-id>/`` with ``statistics.csv``,
        ``reference_raw.csv``, ``reference_oligomers.csv`` and
        ``reference_failures.csv``, as after a computing calibration run.

    Returns
    -------
    folder : pathlib.Path
        The model folder written.
    statistics : pandas.DataFrame
        :func:`screen.calibrate.stats_table` of the new models.

    Raises
    ------
    ConfigError
        No source, a source of another protocol, or reference structures
        without raw values (listed, and written to
        ``<out_root>/missing_reference.csv`` for a ``dascreen run``).
    """
    cfg = Config.of(config)
    if not sources:
        raise ConfigError("--from-raw needs at least one model or run folder")
    reference = cfg["calibration"]["reference"]
    sets = read_reference(reference)
    raws, sides = zip(*(read_raw_source(s, cfg.protocol_id) for s in sources))
    computed = pd.concat(raws, ignore_index=True)
    computed["_can"] = [canonical(s) for s in computed["smiles"].astype(str)]
    computed = computed.drop_duplicates("_can").drop(columns="_can").reset_index(drop=True)
    missing = missing_structures(sets, computed)
    _refuse_unscreenable(missing, cfg)
    if len(missing):
        Path(out_root).mkdir(parents=True, exist_ok=True)
        listing = Path(out_root) / "missing_reference.csv"
        write_csv(missing, listing)
        names = ", ".join(missing["name"].head(8)) + (" …" if len(missing) > 8 else "")
        settings = "".join(f" {word}" for word in calibration_set_args(cfg))
        raise ConfigError(f"--from-raw: {len(missing)} reference structure(s) have no raw values ({names}); "
                          f"compute them with `dascreen run {listing} --out DIR{settings}` and add `--from-raw DIR` "
                          "(that run needs a calibration of these settings fitted on its reference data: when the "
                          "reference files changed since, give it `--set calibration.reference=FOLDER` with the files "
                          "the calibration was fitted on, e.g. a copy from version control)")
    parts = [s for s in sides if len(s)]
    oligomers = pd.concat(parts, ignore_index=True).drop_duplicates() if parts else pd.DataFrame()
    computed, oligomers = rechain(computed, oligomers, cfg["polymer"]["fit_rms_tol_ev"])
    return save_calibration(fit_all(sets, computed), computed, oligomers, out_root, fingerprint(cfg, reference),
                            reference_dir=reference)
