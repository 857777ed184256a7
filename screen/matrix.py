"""The partner matrix: candidates × partners, the best viable PCE estimate in each cell.

``dascreen rank --partner a --partner b`` (or ``--partner a,b``) writes one
ranking per partner (:func:`screen.rank_io.run_rank`) and then, here, one
table over all of them: a row per candidate, a column per partner, in each
cell the candidate's best PCE estimate against that partner among its rows
that pass (and, when the ranking says so, are viable); an empty cell means
not viable, or not paired: a candidate of the partner's own role, listed in
that partner's ``not_paired`` in ``matrix.meta.json`` (:func:`cell_notes`).  The folder ``OUT/rankings/matrix--<hash>/`` (hash of the
rankings it joins) holds ``matrix.csv``, ``matrix.meta.json`` and
``overview.html``, a small page with the table as a heatmap that links to
each partner's report (:mod:`screen.report.matrix_page`).

Examples
--------
>>> import pandas as pd
>>> a = pd.DataFrame({"id": ["D1", "D2"], "smiles": ["C", "CC"], "pce_pct": [9.0, 4.0], "passes": [True, False]})
>>> b = pd.DataFrame({"id": ["D2", "D1"], "smiles": ["CC", "C"], "pce_pct": [7.5, 3.0], "passes": [True, True]})
>>> m = partner_matrix([("y6", a), ("c60", b)])
>>> m[["id", "y6", "c60", "best_partner"]].values.tolist()
[['D1', 9.0, 3.0, 'y6'], ['D2', nan, 7.5, 'c60']]

Whether the best partner is told apart from the others (:func:`best_partner_verdict`) needs the
rankings' ``pce_sigma_pct``; without it the matrix says it cannot tell:

>>> m[["id", "best_partner_resolved"]].values.tolist()
[['D1', <NA>], ['D2', True]]
"""

from __future__ import annotations

import hashlib
import json
import math
import sys
from pathlib import Path

import numpy as np
import pandas as pd

from screen.columns import TIE_SEPARATOR
from screen.io import text_cells
from screen.viability import WRITTEN_DECIMALS

__all__ = ["MATRIX_LEAD", "TIE_SEPARATOR", "BEST_PARTNER_RULE", "cell_notes", "partner_matrix", "best_partner_verdict",
           "matrix_folder", "run_matrix", "refresh_matrices", "refresh_after_run",
           "matrices_joining", "stale_columns"]

#: the leading columns of ``matrix.csv``; one column per partner follows, named by the partner id
MATRIX_LEAD = ["id", "name", "smiles", "best_partner", "best_pce_pct", "viable_partners", "best_partner_resolved",
               "best_partner_note"]

#: how ``best_partner`` and ``best_partner_resolved`` are decided (recorded in ``matrix.meta.json``)
BEST_PARTNER_RULE = ("every partner of the largest cell (equal pce_pct as written, 4 decimals: a tie), joined by ';'; "
                     "resolved = false on a tie or when another viable partner k has PCE_best - PCE_k < "
                     "sqrt(sigma_best^2 + sigma_k^2) (pce_sigma_pct of the two ranking rows, taken as independent), "
                     "empty when a sigma needed is not known")
#: decimals at which two cells count as one exact tie: those ``ranking.csv`` writes ``pce_pct`` with
_TIE_DECIMALS = WRITTEN_DECIMALS


def _viable(ranking: pd.DataFrame) -> pd.Series:
    """Rows that pass the filters (and are viable, when the ranking has that column)."""
    ok = ranking["passes"].astype(str).str.lower().isin(["true", "1"])
    if "viable" in ranking:
        ok &= ranking["viable"].astype(str).str.lower().isin(["true", "1"])
    return ok & pd.to_numeric(ranking["pce_pct"], errors="coerce").notna()


def _has_flag(ranking: pd.DataFrame, code: str) -> pd.Series:
    """Rows whose ``flags`` (``;``-separated codes) hold ``code`` (all False without a flags column)."""
    if "flags" not in ranking:
        return pd.Series(False, index=ranking.index)
    return ranking["flags"].pipe(text_cells).str.split(";").map(lambda f: code in f)


def cell_notes(ranking: pd.DataFrame) -> dict:
    """What the matrix's cells of one partner cannot say by a number: ``paired`` (rows that can pair: not of the
    partner's own role), ``not_paired`` (ids of the partner's own role: an empty cell that is no verdict on the
    pair) and ``alignment_uncertain`` (ids of paired rows with the info flag ``alignment_uncertain``: P(aligned)
    between 0.25 and 0.75).

    A meeting-day audit: same-role cells looked exactly like not-viable ones, and the column head "17/32 viable"
    counted candidates that cannot pair.

    Examples
    --------
    >>> r = pd.DataFrame({"id": ["D1", "D2", "A1"], "flags": ["alignment_uncertain", "", "same_role_as_partner"]})
    >>> cell_notes(r)
    {'paired': 2, 'not_paired': ['A1'], 'alignment_uncertain': ['D1']}
    """
    same = _has_flag(ranking, "same_role_as_partner")
    uncertain = _has_flag(ranking, "alignment_uncertain") & ~same
    ids = ranking["id"].astype(str)
    return {"paired": int((~same).sum()), "not_paired": list(dict.fromkeys(ids[same])),
            "alignment_uncertain": list(dict.fromkeys(ids[uncertain]))}


def partner_matrix(rankings) -> pd.DataFrame:
    """Candidates × partners table of the best viable PCE estimate [%].

    Parameters
    ----------
    rankings : sequence of (str, pandas.DataFrame)
        Partner id and its ``ranking.csv`` (columns ``id, smiles, pce_pct, passes``; ``viable`` and
        ``name`` when present).

    Returns
    -------
    pandas.DataFrame
        :data:`MATRIX_LEAD` then one column per partner (NaN: not viable); rows in order of the
        best estimate, best first, candidates without any viable partner last (input order).
        ``best_partner``, ``best_partner_resolved`` (nullable boolean) and ``best_partner_note`` are those of
        :func:`best_partner_verdict`, from the cells and the ``pce_sigma_pct`` [%] of the rows that hold them.
    """
    cells: dict[str, pd.Series] = {}
    sigmas: dict[str, pd.Series] = {}
    names: dict[tuple, str] = {}
    order: list[tuple] = []
    for partner, ranking in rankings:
        frame = ranking.copy()
        frame["smiles"] = frame.get("smiles", pd.Series("", index=frame.index)).pipe(text_cells)
        frame["id"] = frame["id"].astype(str)
        idx = list(zip(frame["id"], frame["smiles"]))
        given = frame.get("name", pd.Series("", index=frame.index)).pipe(text_cells)
        for ident, name in zip(idx, given):
            if ident not in names:
                names[ident] = name
                order.append(ident)
        cells[partner], sigmas[partner] = _best_cells(frame)
    index = pd.MultiIndex.from_tuples(order)
    table = pd.DataFrame({p: s.reindex(index) for p, s in cells.items()}, index=index)
    spread = pd.DataFrame({p: s.reindex(index) for p, s in sigmas.items()}, index=index)
    partners = list(cells)
    values = table[partners].to_numpy(dtype=float).reshape(len(table), len(partners))
    sigma = spread[partners].to_numpy(dtype=float).reshape(len(table), len(partners))
    filled = np.where(np.isnan(values), -np.inf, values)
    best_at = filled.argmax(axis=1) if len(partners) else np.zeros(len(table), dtype=int)
    best = np.array([values[i, j] if np.isfinite(filled[i, j]) else np.nan for i, j in enumerate(best_at)])
    verdicts = [best_partner_verdict(partners, v, s) for v, s in zip(values, sigma)]
    out = pd.DataFrame({
        "id": [i for i, _ in order], "name": [names[k] for k in order], "smiles": [s for _, s in order],
        "best_partner": [v[0] for v in verdicts],
        "best_pce_pct": best, "viable_partners": (~np.isnan(values)).sum(axis=1),
        "best_partner_resolved": pd.array([v[1] for v in verdicts], dtype="boolean"),
        "best_partner_note": [v[2] for v in verdicts],
    })
    for p in partners:
        out[p] = table[p].to_numpy()
    out["_order"] = range(len(out))
    out = out.sort_values(["best_pce_pct", "_order"], ascending=[False, True], na_position="last")
    return out.drop(columns="_order").reset_index(drop=True)


def _best_cells(frame: pd.DataFrame) -> tuple[pd.Series, pd.Series]:
    """One partner's cells: the best viable ``pce_pct`` [%] per (id, smiles) and the ``pce_sigma_pct`` [%] of the
    row that holds it (the larger one when two rows hold it; NaN when the ranking has no such column or left it
    empty)."""
    pce = pd.to_numeric(frame["pce_pct"], errors="coerce").where(_viable(frame))
    sig = pd.to_numeric(frame["pce_sigma_pct"], errors="coerce") if "pce_sigma_pct" in frame else np.nan
    rows = pd.DataFrame({"id": frame["id"], "smiles": frame["smiles"], "pce": pce, "sigma": sig})
    rows = rows.dropna(subset=["pce"]).sort_values(["pce", "sigma"], ascending=False, na_position="last")
    top = rows.drop_duplicates(["id", "smiles"]).set_index(["id", "smiles"])
    return top["pce"], top["sigma"]


def _within(best: float, best_sigmas: list, other: float, other_sigma: float) -> float | None:
    """The ± [PCE points] of the difference ``best - other`` when ``other`` lies within it, NaN when it lies outside,
    None when that cannot be told (a σ is unknown, or both are 0: levels given without σ).

    ``best_sigmas`` holds the σ of every partner tied at ``best``: ``other`` is within when it is within the ±
    of its difference from any of them (the largest such ± is returned). With one σ unknown the ± is at least that
    of the known one: a difference inside that is within already (an adversarial tester: a rival 0.07 points
    behind, with a σ of 1.58, was left unnamed because the other σ was missing).

    Examples
    --------
    >>> nan = float("nan")
    >>> _within(9.0, [nan], 8.93, 1.58), _within(9.0, [nan], 5.0, 1.58), _within(9.0, [0.0], 8.9, 0.0)
    (1.58, None, None)
    """
    def known(s: float) -> float:
        return 0.0 if math.isnan(s) else s

    combined = [math.hypot(s, other_sigma) for s in best_sigmas]
    inside = [c for c in combined if not math.isnan(c) and c > 0 and best - other < c]
    inside += [math.hypot(known(s), known(other_sigma)) for s, c in zip(best_sigmas, combined)
               if math.isnan(c) and best - other < math.hypot(known(s), known(other_sigma))]
    if inside:
        return max(inside)
    return None if any(math.isnan(c) or c == 0 for c in combined) else math.nan


def best_partner_verdict(partners, values, sigmas) -> tuple[str, bool | None, str]:
    """The best partner of one matrix row, and whether the estimates tell it apart from the other partners.

    Parameters
    ----------
    partners : sequence of str
        The partner ids (column order).
    values : sequence of float
        The row's cells: best viable PCE estimate [%] per partner (NaN: no viable pair).
    sigmas : sequence of float
        ``pce_sigma_pct`` [%] of each cell's ranking row: the Monte-Carlo spread of the PCE over the levels'
        uncertainties (NaN: not known).

    Returns
    -------
    best_partner : str
        The partner of the largest cell; on an exact tie (equal ``pce_pct`` as ``ranking.csv`` writes it, 4
        decimals) every tied partner, in column order, joined by :data:`TIE_SEPARATOR`; "" without a viable cell.
    resolved : bool or None
        True when no other viable partner comes within the uncertainty of the difference (so also with one viable
        partner); False on an exact tie or when one does; None when it cannot be told (no viable cell, or a σ
        needed for the comparison is not known and no other partner is already within).
    note : str
        Plain words for a row that is not resolved (the tied partners, or each partner within the uncertainty with
        its estimate, the difference [PCE points] and the ± of the difference); "" when resolved or no cell.

    Notes
    -----
    The rule: another viable partner k is *within the uncertainty* of the best partner b when
    ``PCE_b - PCE_k < sqrt(sigma_b**2 + sigma_k**2)``, the ± of the difference of two independent estimates
    (one standard deviation); on a tie, when that holds for any of the tied partners. Reasons and limits:

    - the σ are what the rankings already carry per pair (``pce_sigma_pct``); the paired Monte-Carlo samples are
      not kept, so the covariance of the two estimates is not known;
    - the two estimates share the candidate's own level errors (its HOMO, LUMO and gap are drawn in both), which
      correlate them positively; the true ± of the difference is then smaller than the independent sum, so the
      rule calls some differences unresolved that a paired comparison would resolve: it errs on the side of not
      recommending a partner, the safe side for a synthesis or purchase decision;
    - one σ is a low bar: a difference just outside it still leaves the other order a chance of about
      Φ(−1) ≈ 0.16 (normal errors), so "resolved" means "not inside the ±", not "significant"; the σ scatter
      by 0.01–0.05 points between Monte-Carlo seeds (:data:`screen.viability.MC_DECIMALS`), so a difference
      that close to the ± can flip between runs;
    - σ covers the levels' uncertainties only, not the device model's own error.

    Examples
    --------
    >>> nan = float("nan")
    >>> best_partner_verdict(["pm6", "d18", "pbdb-t"], [13.54, 13.54, 13.54], [3.6, 3.6, 3.6])[:2]
    ('pm6;d18;pbdb-t', False)
    >>> label, resolved, note = best_partner_verdict(["pm6", "d18"], [12.79, 12.81], [3.6, 3.6])
    >>> label, resolved
    ('d18', False)
    >>> note
    'not resolved: pm6 12.79 ± 3.60 % lies 0.02 points below d18 12.81 ± 3.60 %, within the ± 5.09 of the \
difference'
    >>> best_partner_verdict(["pm6", "d18", "pbdb-t"], [13.54, 13.54, 11.0], [3.6, 3.6, 0.1])[2]
    'not resolved: pm6 and d18 tie at 13.54 %; pbdb-t 11.00 ± 0.10 % lies 2.54 points below the tie at 13.54 %, \
within the ± 3.60 of the difference'
    >>> best_partner_verdict(["pm6", "d18"], [9.0, 7.0], [0.5, nan])[1:]
    (None, 'cannot tell: the PCE spread (pce_sigma_pct) of d18 is not known, so whether d18 lies within the \
uncertainty is not tested')
    >>> best_partner_verdict(["pm6", "d18"], [9.0, 8.9], [0.5, nan])[1]  # within the known σ alone already
    False
    >>> best_partner_verdict(["pm6", "d18"], [9.0, 8.9], [0.0, 0.0])[1:]
    (None, 'cannot tell: the levels were given without σ (pce_sigma_pct 0), so whether d18 lies within the \
uncertainty is not tested')
    >>> best_partner_verdict(["pm6", "d18"], [9.0, 3.0], [0.5, 0.6])
    ('pm6', True, '')
    >>> best_partner_verdict(["pm6", "d18"], [9.0, nan], [nan, nan])  # one viable partner: nothing to tell apart
    ('pm6', True, '')
    >>> best_partner_verdict(["pm6", "d18"], [nan, nan], [nan, nan])
    ('', None, '')
    """
    values = np.asarray(values, dtype=float)
    sigmas = np.asarray(sigmas, dtype=float)
    if values.size == 0 or np.isnan(values).all():
        return "", None, ""
    written = np.round(values, _TIE_DECIMALS)
    top = np.nanmax(written)
    tied = [j for j in range(len(partners)) if written[j] == top]
    ref = tied[0]
    close, unknown = {}, []
    for k in range(len(partners)):
        if k in tied or np.isnan(values[k]):
            continue
        pm = _within(values[ref], [sigmas[j] for j in tied], values[k], sigmas[k])
        if pm is None:
            unknown.append(k)
        elif not math.isnan(pm):
            close[k] = pm
    label = TIE_SEPARATOR.join(str(partners[j]) for j in tied)
    names = [str(partners[j]) for j in tied]
    best = f"{names[0]} {_pm(values[ref], sigmas[ref])}" if len(tied) == 1 else f"the tie at {values[ref]:.2f} %"
    parts = [f"{_and(names)} tie at {values[ref]:.2f} %"] if len(tied) > 1 else []
    groups: dict[tuple, list] = {}  # partners of one estimate, ± and difference said once (two of equal levels)
    for k, pm in close.items():
        groups.setdefault((_pm(values[k], sigmas[k]), f"{values[ref] - values[k]:.2f}", f"{pm:.2f}"), []).append(k)
    parts += [f"{_and([str(partners[k]) for k in ks])} {pce} {'lies' if len(ks) == 1 else 'lie'} {gap} points below "
              f"{best}, within the ± {pm} of the difference" for (pce, gap, pm), ks in groups.items()]
    if parts:
        return label, False, "not resolved: " + "; ".join(parts)
    if unknown:
        missing = [str(partners[j]) for j in [*tied, *unknown] if np.isnan(sigmas[j])]
        why = (f"the PCE spread (pce_sigma_pct) of {_and(missing)} is not known" if missing else
               "the levels were given without σ (pce_sigma_pct 0)")
        return label, None, (f"cannot tell: {why}, so whether "
                             f"{_and([str(partners[k]) for k in unknown])} lie{'s' if len(unknown) == 1 else ''} "
                             f"within the uncertainty is not tested")
    return label, True, ""


def _pm(value: float, sigma: float) -> str:
    """``12.81 ± 3.60 %`` (no ± when σ is not known)."""
    return f"{value:.2f} %" if math.isnan(sigma) else f"{value:.2f} ± {sigma:.2f} %"


def _and(words: list) -> str:
    """``a``, ``a and b``, ``a, b and c``."""
    return words[0] if len(words) == 1 else ", ".join(words[:-1]) + " and " + words[-1]


def matrix_folder(ranking_dirs) -> str:
    """``matrix--<8 hex>``: the folder name of the matrix over these ranking folders (order kept).

    Examples
    --------
    >>> matrix_folder(["y6--1", "c60--1"]) != matrix_folder(["c60--1", "y6--1"])
    True
    """
    text = json.dumps([Path(d).name for d in ranking_dirs])
    return "matrix--" + hashlib.sha256(text.encode("utf-8")).hexdigest()[:8]


def run_matrix(ranking_paths, out_dir, config=None) -> Path:
    """Join the rankings of several partners into the matrix folder; return that folder.

    Parameters
    ----------
    ranking_paths : sequence of path-like
        ``ranking.csv`` files written by :func:`screen.rank_io.run_rank` (their
        ``ranking.meta.json`` beside them names the partner).
    out_dir : path-like
        The output folder (``OUT``); the matrix goes to ``OUT/rankings/matrix--<hash>/``.
    config : screen.config.Config or mapping, optional
        Recorded in ``matrix.meta.json`` (device and rank sections).

    Returns
    -------
    pathlib.Path

    Notes
    -----
    When the rankings were made from levels of different content (a member
    re-ranked alone after its levels file changed: :func:`refresh_matrices`),
    ``matrix.meta.json`` gets a ``stale`` entry, the overview a banner and
    stderr one line, naming the columns ranked from other levels than the
    newest ranking and the command that brings them up to date.
    """
    from screen.config import Config

    cfg = Config.of(config)
    folder, meta = _write_matrix(ranking_paths, out_dir, cfg["device"], cfg["rank"])
    if meta["stale"]:
        print(f"dascreen: partner matrix {folder}: {meta['stale']['summary']}", file=sys.stderr)
    return folder


def _write_matrix(ranking_paths, out_dir, device: dict, rank: dict) -> tuple[Path, dict]:
    """:func:`run_matrix` with the recorded ``device`` and ``rank`` sections; the folder and its meta."""
    from screen import __version__
    from screen.io import read_json, write_csv, write_json
    from screen.report.matrix_page import write_overview

    paths = [Path(p) for p in ranking_paths]
    rankings, partners, tests = [], [], None
    for path in paths:
        meta = read_json(path.parent / "ranking.meta.json")
        tests = tests or meta.get("device_tests")  # same levels and device model for every partner
        partner = meta["partner"]
        table = pd.read_csv(path, dtype={"id": str, "smiles": str, "name": str}, keep_default_na=False,
                            na_values=[""])
        label = partner["id"] if partner["id"] not in {p["id"] for p in partners} else \
            f"{partner['id']} ({path.parent.name})"  # two partners of one id (e.g. two files) stay apart
        rankings.append((label, table))
        partners.append({"id": label, "name": partner.get("name"), "role": partner.get("role"),
                         "spec": partner.get("spec") or partner["id"],
                         "homo_ev": partner.get("homo_ev"), "lumo_ev": partner.get("lumo_ev"),
                         "gap_opt_ev": partner.get("gap_opt_ev"), "scale": partner.get("scale"),
                         "folder": path.parent.name,  # a link only to a report that was written (report=False)
                         "report": (f"../{path.parent.name}/report.html" if (path.parent / "report.html").is_file()
                                    else None),
                         "levels": {k: (meta.get("levels") or {}).get(k) for k in ("path", "sha256")},
                         "viable": int(_viable(table).sum()), "ranked": int(len(table)), **cell_notes(table)})
    matrix = partner_matrix(rankings)
    folder = Path(out_dir) / "rankings" / matrix_folder([p.parent for p in paths])
    write_csv(matrix, folder / "matrix.csv")
    meta = {"dascreen": __version__, "stage": "partner matrix", "partners": partners,
            "cell": "best PCE estimate [%] of the candidate's viable rows against the partner; empty = not viable, or "
                    "not paired when the candidate is listed in the partner's not_paired (same role as the partner); "
                    "a partner's alignment_uncertain lists the candidates whose P(aligned) is between 0.25 and 0.75",
            "best_partner": BEST_PARTNER_RULE,
            "device": device, "device_tests": tests, "rank": rank, "rows": int(len(matrix)),
            "stale": stale_columns(partners, [p.parent / "ranking.meta.json" for p in paths], Path(out_dir)),
            "outputs": {"matrix": "matrix.csv", "overview": "overview.html", "meta": "matrix.meta.json"}}
    write_json(meta, folder / "matrix.meta.json")
    write_overview(matrix, meta, folder / "overview.html")
    return folder, meta


def _newest(meta_paths) -> int:
    """Index of the most recently written ranking (its ``ranking.meta.json``)."""
    times = [Path(p).stat().st_mtime_ns if Path(p).is_file() else -1 for p in meta_paths]
    return max(range(len(times)), key=lambda i: (times[i], i))


def stale_columns(partners: list[dict], meta_paths, out_dir: Path) -> dict | None:
    """Which matrix columns were ranked from other levels than the newest ranking; None when none were.

    Parameters
    ----------
    partners : list of dict
        The ``partners`` entries of ``matrix.meta.json`` (``id``, ``spec``,
        ``levels``: ``path`` and ``sha256`` of the levels each ranking read).
    meta_paths : sequence of path-like
        The members' ``ranking.meta.json`` files (their times say which is newest).
    out_dir : pathlib.Path
        The output folder (for the command that refreshes the matrix).

    Returns
    -------
    dict or None
        ``partners`` (the out-of-date column labels), ``current`` (the newest
        ranking's label and levels), ``refresh`` (a command that re-ranks every
        partner together) and ``summary`` (one sentence).
    """
    import shlex

    if len(partners) < 2:
        return None
    newest = partners[_newest(meta_paths)]
    current = newest.get("levels") or {}
    old = [p for p in partners if (p.get("levels") or {}).get("sha256") != current.get("sha256")]
    if not old:
        return None
    levels = current.get("path") or "LEVELS"
    command = " ".join(["dascreen", "rank", "--levels", shlex.quote(str(levels))]
                       + [f"--partner {shlex.quote(str(p['spec']))}" for p in partners]
                       + ["--out", shlex.quote(str(out_dir))])
    same_file = all((p.get("levels") or {}).get("path") == levels for p in old)
    source = (f"an earlier version of {levels} than the {newest['id']} column (ranked last)" if same_file
              else f"other levels than the {newest['id']} column (ranked last, from {levels})")
    ids = ", ".join(p["id"] for p in old)
    summary = (f"the {ids} column{'s were' if len(old) > 1 else ' was'} ranked from {source}: marked stale in "
               f"overview.html and matrix.meta.json; bring every column up to date with: {command}")
    return {"partners": [p["id"] for p in old], "current": {"partner": newest["id"], "levels": current},
            "refresh": command, "summary": summary}


def refresh_after_run(out_dir, folder: str) -> list[Path]:
    """After ``dascreen run`` re-ranked ranking ``folder``: rebuild the matrices that joined it with other levels.

    The workflow removes a rule's outputs before it runs it again, so the ranking stage cannot see that it replaces
    a ranking of other levels (``dascreen rank`` can, and refreshes the matrices itself); a matrix built before the
    levels changed kept its old numbers unmarked (a new user's audit). Here every matrix joining ``folder`` whose
    record of that member's levels (SHA-256) differs from the new ranking's is rebuilt by :func:`refresh_matrices`
    (columns of other partners still ranked from the earlier levels are marked stale).
    """
    from screen.io import read_json

    try:
        now = (read_json(Path(out_dir) / "rankings" / folder / "ranking.meta.json").get("levels") or {}).get("sha256")
    except (OSError, ValueError, AttributeError):
        return []
    for matrix_dir in matrices_joining(out_dir, folder):
        try:
            partners = read_json(matrix_dir / "matrix.meta.json").get("partners") or []
        except (OSError, ValueError, AttributeError):
            continue
        if any(p.get("folder") == folder and (p.get("levels") or {}).get("sha256") != now for p in partners):
            return refresh_matrices(out_dir, folder)
    return []


def matrices_joining(out_dir, folder: str) -> list[Path]:
    """The partner-matrix folders under ``OUT/rankings/`` whose ``matrix.meta.json`` joins ranking ``folder``."""
    from screen.io import read_json

    found = []
    for meta_path in sorted((Path(out_dir) / "rankings").glob("matrix--*/matrix.meta.json")):
        try:
            partners = read_json(meta_path).get("partners") or []
        except (OSError, ValueError, AttributeError):
            continue
        if any(isinstance(p, dict) and p.get("folder") == folder for p in partners):
            found.append(meta_path.parent)
    return found


def refresh_matrices(out_dir, folder: str, skip=()) -> list[Path]:
    """Rebuild every partner matrix that joins ranking ``folder`` (re-ranked from changed levels).

    Each matrix is rebuilt from its members' current rankings with the device
    and rank settings it recorded, so every cell is again the number of the
    report it links to; columns whose ranking read other levels than the
    newest one are marked stale (:func:`stale_columns`).  A matrix whose
    member ranking is gone cannot be rebuilt: it is marked stale as it is.
    Every matrix touched gets one line on stderr.

    Parameters
    ----------
    out_dir : path-like
        The output folder (``OUT``).
    folder : str
        Name of the ranking folder that was replaced (``<partner slug>--<settings hash>``).
    skip : sequence of path-like
        Matrix folders just written by the caller (left as they are).

    Returns
    -------
    list of pathlib.Path
        The matrix folders rebuilt.
    """
    from screen.io import read_json

    rebuilt = []
    skipped = {Path(p).resolve() for p in skip}
    for matrix_dir in matrices_joining(out_dir, folder):
        if matrix_dir.resolve() in skipped:
            continue
        meta = read_json(matrix_dir / "matrix.meta.json")
        paths = [Path(out_dir) / "rankings" / p["folder"] / "ranking.csv" for p in meta["partners"]]
        gone = [p.parent.name for p in paths if not (p.is_file() and (p.parent / "ranking.meta.json").is_file())]
        try:
            if gone:
                raise FileNotFoundError(f"{', '.join(gone)} {'are' if len(gone) > 1 else 'is'} gone")
            _, now = _write_matrix(paths, out_dir, meta.get("device") or {}, meta.get("rank") or {})
        except (OSError, ValueError, KeyError) as exc:
            _mark_stale(matrix_dir, meta, f"the ranking {folder} was replaced, but the matrix could not be rebuilt "
                                          f"({exc}): its numbers are those of the earlier rankings")
            continue
        done = f"dascreen: partner matrix {matrix_dir} rebuilt with the new ranking {folder}"
        if now["stale"]:
            print(f"{done}, but {now['stale']['summary']}", file=sys.stderr)
        else:
            print(done + ("; every column is now ranked from the same levels" if meta.get("stale") else ""),
                  file=sys.stderr)
        rebuilt.append(matrix_dir)
    return rebuilt


def _mark_stale(matrix_dir: Path, meta: dict, why: str) -> None:
    """Record ``why`` as the matrix's ``stale`` entry, redraw its overview with the banner and say so."""
    from screen.io import write_json
    from screen.report.matrix_page import write_overview

    meta = {**meta, "stale": {"partners": [p["id"] for p in meta.get("partners", [])], "summary": why}}
    write_json(meta, matrix_dir / "matrix.meta.json")
    matrix = pd.read_csv(matrix_dir / "matrix.csv", dtype={"id": str, "smiles": str, "name": str},
                         keep_default_na=False, na_values=[""])
    write_overview(matrix, meta, matrix_dir / "overview.html")
    print(f"dascreen: partner matrix {matrix_dir}: {why}", file=sys.stderr)
