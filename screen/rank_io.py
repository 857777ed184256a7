"""Ranking stage, files in → files out: levels file + partner → ranking folder.

:func:`run_rank` reads a levels file, resolves the partner, ranks with
:func:`screen.rank.rank_candidates` and writes ``ranking.csv``, ``shortlist.sdf``,
``ranking.meta.json`` and (through :mod:`screen.report`) the report.

References
----------
.. [1] M. C. Scharber, D. Mühlbacher, M. Koppe, P. Denk, C. Waldauf,
   A. J. Heeger, C. J. Brabec, Adv. Mater. 18 (2006) 789.
   :doi:`10.1002/adma.200501717`
"""

from __future__ import annotations

import importlib.util
import math
import sys
from dataclasses import asdict
from pathlib import Path

import pandas as pd

from screen.config import Config
from screen.device import DeviceModel
from screen.partners import Partner, PartnerError, resolve_partner
from screen.rank import (EXTRA_COLUMNS, RANKING_COLUMNS, RankOptions, rank_candidates)

__all__ = ["write_shortlist", "run_rank"]


# --------------------------------------------------------------------------- outputs

def _sd_text(value) -> str:
    """SD property/title text: one line, no record separators."""
    text = "" if value is None or (isinstance(value, float) and math.isnan(value)) else str(value)
    text = " ".join(text.replace("\r", "\n").split("\n"))
    return text.replace("$$$$", "$ $ $ $")


_SD_PROPS = ["rank", "id", "name", "role", "partner", "homo_ev", "lumo_ev", "gap_opt_ev", "homo_sigma_ev",
             "lumo_sigma_ev", "gap_opt_sigma_ev", "delta_lumo_ev", "delta_homo_ev", "voc_v", "jsc_ma_cm2", "ff",
             "pce_pct", "pce_sigma_pct", "p_above_target", "passes", "flags", "smiles"]


def write_shortlist(ranking: pd.DataFrame, target: str | Path, size: int, scale: str = "") -> dict:
    """Write the top passing rows as an SD file with 2D coordinates.

    Parameters
    ----------
    ranking : pandas.DataFrame
        From :func:`rank_candidates` (best first).
    target : path-like
        SD file, written atomically (also when empty).
    size : int
        Number of passing rows to write.
    scale : str
        Energy scale written as a property.

    Returns
    -------
    dict
        ``written`` (records) and ``skipped`` (ids of shortlisted rows whose
        SMILES is missing or does not parse).

    Notes
    -----
    The title line is the id with line breaks replaced by spaces, cut to 80
    characters (the V2000 title-line width, from memory of the CTfile
    format); the full id is the ``id`` property.  Coordinates are RDKit 2D depictions, not the computed
    geometries.
    """
    from rdkit import Chem, rdBase
    from rdkit.Chem import rdDepictor

    from screen.io import atomic_path

    top = ranking[ranking["passes"].astype(bool)].head(int(size))
    written, skipped = 0, []
    with atomic_path(target) as tmp:
        writer = Chem.SDWriter(str(tmp))
        with rdBase.BlockLogs():
            for row in top.to_dict("records"):
                mol = Chem.MolFromSmiles(row["smiles"]) if row["smiles"] else None
                if mol is None:
                    skipped.append(row["id"])
                    continue
                rdDepictor.Compute2DCoords(mol)
                mol.SetProp("_Name", _sd_text(row["id"])[:80])
                for prop in _SD_PROPS:
                    mol.SetProp(prop, _sd_text(row.get(prop)))
                if scale:
                    mol.SetProp("scale", scale)
                writer.write(mol)
                written += 1
        writer.close()
    return {"written": written, "skipped": skipped}


def _levels_meta(levels_path: Path) -> dict | None:
    from screen.io import read_json

    side = Path(f"{levels_path}.meta.json")
    if side.is_file():
        try:
            return read_json(side)
        except ValueError:
            return {"error": f"{side} is not valid JSON"}
    return None


def _models_from_meta(meta: dict | None, levels_path: Path) -> Path | None:
    """The calibration folder recorded in the levels sidecar, if it still exists."""
    folder = (meta or {}).get("models")
    if not folder:
        return None
    folder = Path(folder)
    for cand in ([folder] if folder.is_absolute() else [folder, levels_path.parent / folder]):
        if cand.is_dir():
            return cand.resolve()
    return None


def _calibration_stats(folder: Path | None) -> dict:
    """Leave-one-out statistics of the calibration models in ``folder`` (empty if unreadable)."""
    from screen.io import read_json

    out = {}
    if folder is None:
        return out
    for path in sorted(Path(folder).glob("*.json")):
        try:
            model = read_json(path)
        except ValueError:
            continue
        if isinstance(model, dict) and "loo_mae_ev" in model:
            out[path.stem] = {k: model.get(k) for k in ("n", "loo_mae_ev", "loo_rmse_ev", "scale")}
    return out


def _write_report(ranking, levels, partner, meta, out_dir) -> str:
    """Call ``screen.report.write_report`` when that module exists; return what happened."""
    if importlib.util.find_spec("screen.report") is None:
        return "skipped: screen.report is not installed"
    import screen.report as report

    if not hasattr(report, "write_report"):
        return "skipped: screen.report has no write_report"
    try:
        report.write_report(ranking=ranking, levels=levels, partner=partner, meta=meta, out_dir=out_dir)
    except Exception as exc:
        raise RuntimeError(f"the ranking is written to {out_dir}, but the report failed: "
                           f"{type(exc).__name__}: {exc}") from exc
    return "written"


def _partner(partner_spec: str, levels: pd.DataFrame, levels_path: Path, meta_in: dict | None, out_dir: Path,
             partner_levels) -> Partner:
    """Resolve the partner; a ``smiles:`` partner comes from its batch's levels file (same protocol)."""
    from screen.io import read_json
    from screen.partners import partner_kind, partner_levels_path

    if partner_kind(partner_spec) != "smiles":
        return resolve_partner(partner_spec, levels=levels)
    path = Path(partner_levels) if partner_levels is not None else partner_levels_path(partner_spec, out_dir)
    side = Path(f"{path}.meta.json")
    ran = (meta_in or {}).get("protocol_id")
    computed = read_json(side).get("protocol_id") if side.is_file() else None
    if ran and computed and ran != computed:
        raise PartnerError(
            f"partner {partner_spec!r} was computed with protocol {computed}, but the levels in {levels_path} were "
            f"computed with protocol {ran}; rank with the run's configuration (e.g. "
            f"{levels_path.parent / 'config.yaml'}) so that partner and candidates share one protocol")
    return resolve_partner(partner_spec, levels=levels, partner_levels=path)


def _rank_meta(ranking, levels, levels_path: Path, meta_in, partner: Partner, model: DeviceModel,
               options: RankOptions, short: dict) -> dict:
    """The content of ``ranking.meta.json``."""
    from screen import __version__
    from screen.provenance import sha256_file

    flags = pd.Series([f for s in ranking["flags"] for f in str(s).split(";") if f]).value_counts()
    status = (levels["status"].fillna("").astype(str).str.strip().str.lower() if "status" in levels
              else pd.Series("ok", index=levels.index))
    levels_meta = dict(meta_in) if isinstance(meta_in, dict) else {}
    if levels_meta and "calibration" not in levels_meta:
        cal = _calibration_stats(_models_from_meta(meta_in, levels_path))
        if cal:
            levels_meta["calibration"] = cal
    return {
        "dascreen": __version__,
        "stage": "rank",
        "partner": partner.as_dict(),
        "partner_role": ranking.attrs["partner_role"],
        "partner_role_assumed": ranking.attrs["partner_role_assumed"],
        "scale": partner.scale,
        "device": model.as_dict(),
        "rank": asdict(options),
        "filters": {"gap_min_ev": options.gap_min_ev, "gap_max_ev": options.gap_max_ev,
                    "max_heavy_atoms": options.max_heavy_atoms, "min_delta_lumo_ev": model.value("min_delta_lumo_ev"),
                    "min_delta_homo_ev": model.value("min_delta_homo_ev") if model.absorber == "both" else None,
                    "absorber": model.absorber, "model": model.model},
        "sign_convention": "delta_lumo_ev = LUMO_donor - LUMO_acceptor; delta_homo_ev = HOMO_donor - "
                           "HOMO_acceptor (both > 0 for a type-II heterojunction)",
        "levels": {"path": str(levels_path.resolve()), "sha256": sha256_file(levels_path),
                   "rows": int(len(levels)),
                   "sidecar": f"{levels_path.name}.meta.json" if meta_in is not None else None},
        "levels_meta": levels_meta or None,
        "counts": {"rows": int(len(levels)), "ok": int(status.eq("ok").sum()),
                   "rejected": int(status.eq("rejected").sum()), "failed": int(status.eq("failed").sum()),
                   "ranked": int(len(ranking)), "passing": int(ranking["passes"].astype(bool).sum()),
                   "not_ranked": ranking.attrs["not_ranked"], "flags": {str(k): int(v) for k, v in flags.items()},
                   "shortlist": short["written"], "shortlist_skipped_no_smiles": short["skipped"]},
        "columns": RANKING_COLUMNS + EXTRA_COLUMNS,
        "outputs": {"ranking": "ranking.csv", "shortlist": "shortlist.sdf", "meta": "ranking.meta.json"},
    }


def run_rank(levels_path, partner_spec: str, out_dir, config=None, *, partner_levels=None,
             report: bool = True) -> Path:
    """Rank a levels file against a partner and write the ranking folder.

    Parameters
    ----------
    levels_path : path-like
        ``OUT/levels.csv`` of a run or any levels file (a user's own
        measurements: ``id, homo_ev, lumo_ev, gap_opt_ev, scale`` at least).
        Its sidecar ``<levels>.meta.json`` is recorded when present.
    partner_spec : str
        See :func:`screen.partners.resolve_partner`.
    out_dir : path-like
        Output folder; results go to ``out_dir/rankings/<partner slug>/``.
    config : screen.config.Config or mapping, optional
        Run configuration (sections ``device`` and ``rank``).
    partner_levels : path-like, optional
        Levels file of a ``smiles:`` partner's workflow batch; default
        :func:`screen.partners.partner_levels_path` under ``out_dir``.  Its
        protocol must be that of the levels being ranked.
    report : bool
        Call ``screen.report.write_report`` if that module is present.

    Returns
    -------
    pathlib.Path
        Path of ``ranking.csv``.  Beside it: ``shortlist.sdf`` (top
        ``rank.shortlist_size`` passing rows), ``ranking.meta.json`` (partner,
        device model, filters, levels provenance, counts) and, with the report
        module, ``report.html`` and ``ranking.safe.csv``.

    Raises
    ------
    ScaleMismatchError, PartnerError, InputError
        See :func:`rank_candidates` and :func:`screen.partners.resolve_partner`.
    RuntimeError
        The report module failed (the ranking files are written).

    Notes
    -----
    Only levels files are read: no quantum-chemistry engine is imported.

    References
    ----------
    .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789.
       :doi:`10.1002/adma.200501717`
    """
    from screen.io import write_csv, write_json
    from screen.levels import read_levels

    cfg = Config.of(config)
    levels_path = Path(levels_path)
    out_dir = Path(out_dir)
    levels = read_levels(levels_path)
    levels.attrs["source"] = str(levels_path)  # named in input errors (screen.levels_check)
    meta_in = _levels_meta(levels_path)
    partner = _partner(partner_spec, levels, levels_path, meta_in, out_dir, partner_levels)
    model = DeviceModel(**cfg["device"])
    options = RankOptions.from_mapping(cfg["rank"])
    ranking = rank_candidates(levels, partner, model, options)

    target = out_dir / "rankings" / partner.slug
    write_csv(ranking, target / "ranking.csv")
    short = write_shortlist(ranking, target / "shortlist.sdf", options.shortlist_size, partner.scale)
    meta = _rank_meta(ranking, levels, levels_path, meta_in, partner, model, options, short)
    write_json(meta, target / "ranking.meta.json")
    if report:
        status = _write_report(ranking, levels, partner.as_dict(), meta, target)
        if status != "written":
            print(f"dascreen rank: report {status}", file=sys.stderr)
    return target / "ranking.csv"
