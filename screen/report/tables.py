"""The report's HTML tables: the shortlist with drawings, every ranked row, and the rows not ranked or not viable.

Every user text (ids, names, SMILES, pass-through columns, error messages) is
HTML-escaped here; numbers carry a ``data-value`` for the sorting script.
"""

from __future__ import annotations

import math

import pandas as pd

from screen.flags import FLAGS, INFO_FLAGS, codes_of, describe
from screen.report.drawings import molecule_svg
from screen.report.format import (data_value, esc, fmt, get, has_text, num, pm_html, shorten, text, texts,
                                  truthies)

__all__ = ["with_level_details", "select_shortlist", "shortlist_table", "full_table", "not_ranked_table",
           "target_label"]

_KNOWN_RANKING = {
    "rank", "id", "name", "smiles", "role", "homo_ev", "lumo_ev", "gap_opt_ev", "partner",
    "delta_lumo_ev", "delta_homo_ev", "voc_v", "jsc_ma_cm2", "ff", "pce_pct", "pce_sigma_pct",
    "p_above_target", "passes", "flags", "homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev",
    "shortlist", "absorber_gap_ev", "scale", "key", "viable", "reason", "model", "acceptor_class",
}
#: Pass-through columns shown in the full table at most.
_MAX_EXTRA_COLUMNS = 8

_LEVEL_HEADERS = [
    ('HOMO <span class="unit">[eV]</span>', "num", "descending", "homo_ev"),
    ('LUMO <span class="unit">[eV]</span>', "num", "descending", "lumo_ev"),
    ('Optical gap <span class="unit">[eV]</span>', "num", "", "gap_opt_ev"),
    ('\u0394LUMO <span class="unit">[eV]</span>', "num", "descending", "delta_lumo_ev"),
    ('\u0394HOMO <span class="unit">[eV]</span>', "num", "descending", "delta_homo_ev"),
    ('V<sub>oc</sub> <span class="unit">[V]</span>', "num", "descending", "voc_v"),
    ('J<sub>sc</sub> <span class="unit">[mA&#8239;cm<sup>\u22122</sup>]</span>', "num", "descending",
     "jsc_ma_cm2"),
    ('PCE <span class="unit">[%]</span>', "num", "descending", "pce_pct"),
]


# --------------------------------------------------------------------------- #
# Rows
# --------------------------------------------------------------------------- #
def with_level_details(ranking: pd.DataFrame, levels: pd.DataFrame) -> pd.DataFrame:
    """Ranking with ``name`` and σ columns filled from ``levels`` where missing."""
    out = ranking.reset_index(drop=True).copy()
    if levels is None or not len(levels) or "id" not in levels or "id" not in out:
        return out
    ok = levels
    if "status" in levels:
        ok = levels[texts(levels["status"]).str.strip().str.lower().eq("ok")]
    ok = ok.drop_duplicates("id", keep="first")
    ok = ok.set_index(texts(ok["id"]))
    ids = texts(out["id"])
    for col in ("name", "homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev"):
        if col not in ok:
            continue
        filled = ids.map(ok[col])
        if col in out:
            have = has_text(out[col])
            out[col] = out[col].where(have, filled)
        else:
            out[col] = filled
    return out


def select_shortlist(ranking: pd.DataFrame, meta: dict) -> tuple[pd.DataFrame, str]:
    """Rows of the shortlist and a sentence saying how they were chosen.

    A boolean ``shortlist`` column decides when present; otherwise the first
    ``shortlist_size`` rows (default 10) that pass every check.  When none
    pass, the best rows are shown with a note saying so.

    Examples
    --------
    >>> import pandas as pd
    >>> rows, how = select_shortlist(pd.DataFrame({"passes": [True, False, True]}), {})
    >>> list(rows.index), how
    ([0, 2], 'all 2 candidates that pass every check')
    """
    size = num(get(meta, "rank", "shortlist_size"))
    size = 10 if math.isnan(size) or size < 0 else int(size)
    if "shortlist" in ranking:
        mask = truthies(ranking["shortlist"])
        return ranking[mask], "rows marked for the shortlist by the ranking"
    if "passes" in ranking:
        passes = truthies(ranking["passes"])
        if passes.any():
            return ranking[passes].head(size), (f"the best {size} candidates that pass every check"
                                                if passes.sum() >= size else
                                                f"all {int(passes.sum())} candidates that pass every check")
        return ranking.head(size), (f"no candidate passes every check; the best {min(size, len(ranking))} "
                                    "rows are shown so the discussion can start somewhere")
    return ranking.head(size), f"the best {size} rows of the ranking"


# --------------------------------------------------------------------------- #
# Cells
# --------------------------------------------------------------------------- #
def _flag_codes(value) -> list[str]:
    """Flag codes of one ``flags`` cell (``;``-joined), empty entries dropped."""
    return codes_of(text(value))


def _flags_html(value, meta: dict) -> str:
    """Bulleted plain-language flags, or a quiet "no concerns" note."""
    codes = _flag_codes(value)
    if not codes:
        return '<span class="ok-note">no concerns flagged</span>'

    def cls(code):
        return "flag info" if code in INFO_FLAGS else "flag" if code in FLAGS else "flag unknown"

    items = "".join(f'<li class="{cls(c)}" data-code="{esc(c)}">{esc(describe(c, meta))}</li>'
                    for c in codes)
    return f'<ul class="flags">{items}</ul>'


def _role_badge(role) -> str:
    """Small coloured label for donor / acceptor (escaped text otherwise)."""
    r = text(role).strip()
    if not r:
        return ""
    cls = {"donor": "role-donor", "acceptor": "role-acceptor"}.get(r.lower(), "role-other")
    return f'<span class="role {cls}">{esc(r)}</span>'


def target_label(meta: dict) -> str:
    """``"P(PCE > 10 %)"`` with the recorded target (HTML)."""
    t = num(get(meta, "rank", "target_pce_pct"))
    return (f'P(PCE &gt; <span class="nb">{t:g} %</span>)' if not math.isnan(t)
            else "P(PCE &gt; target)")


def _prob(value) -> str:
    """Probability as a percentage (``"43 %"``)."""
    x = num(value)
    if math.isnan(x):
        return "\u2014"
    pct = 100.0 * x
    if 0 < pct < 1:
        return "&lt;1 %"
    if 99 < pct < 100:
        return "&gt;99 %"
    return f"{pct:.0f} %"


def _num_cell(value, shown: str, extra_class: str = "") -> str:
    """``<td data-value=…>shown</td>`` (``shown`` is already HTML; right-aligned by the CSS)."""
    cls = f' class="{extra_class}"' if extra_class else ""
    return f'<td{cls} data-value="{data_value(value)}">{shown}</td>'


def _rank_cell(row) -> str:
    """The rank, bold and centred."""
    rank = num(row.get("rank"))
    return _num_cell(rank, "" if math.isnan(rank) else f"{int(rank)}", "rank")


def _header(cells) -> str:
    """``<thead>`` from ``(label_html, sort_type, first_direction, key)`` tuples."""
    out = []
    for label, kind, first, key in cells:
        attrs = f' data-key="{key}"' if key else ""
        if kind == "num":
            attrs += ' class="num-h"'
        if kind:
            attrs += f' data-sort="{kind}"'
            if first:
                attrs += f' data-first="{first}"'
        if key == "rank":
            attrs += ' aria-sort="ascending"'
        out.append(f'<th scope="col"{attrs}>{label}</th>')
    return "<thead><tr>" + "".join(out) + "</tr></thead>"


def _candidate_cell(row, with_smiles: bool) -> str:
    """Id (bold), name and role badge; optionally the SMILES, shortened."""
    ident, name = text(row.get("id")), text(row.get("name"))
    parts = [f'<span class="cid">{esc(ident)}</span>']
    if name and name != ident:
        parts.append(f'<span class="cname">{esc(name)}</span>')
    badge = _role_badge(row.get("role"))
    if badge:
        parts.append(badge)
    if with_smiles:
        smi = text(row.get("smiles"))
        if smi:
            parts.append(f'<code class="smi" title="{esc(smi)}">{esc(shorten(smi, 48))}</code>')
    return f'<td class="cand" data-value="{esc(ident)}">' + "".join(parts) + "</td>"


def _level_cells(row) -> list[str]:
    """HOMO, LUMO, optical gap (each ± σ), ΔLUMO, ΔHOMO, Voc, Jsc cells."""
    return [
        _num_cell(row.get("homo_ev"), pm_html(row.get("homo_ev"), row.get("homo_sigma_ev"))),
        _num_cell(row.get("lumo_ev"), pm_html(row.get("lumo_ev"), row.get("lumo_sigma_ev"))),
        _num_cell(row.get("gap_opt_ev"), pm_html(row.get("gap_opt_ev"), row.get("gap_opt_sigma_ev"))),
        _num_cell(row.get("delta_lumo_ev"), fmt(row.get("delta_lumo_ev"))),
        _num_cell(row.get("delta_homo_ev"), fmt(row.get("delta_homo_ev"))),
        _num_cell(row.get("voc_v"), fmt(row.get("voc_v"))),
        _num_cell(row.get("jsc_ma_cm2"), fmt(row.get("jsc_ma_cm2"), 1)),
    ]


def _pce_cell(row) -> str:
    """PCE ± σ, emphasised."""
    value = fmt(row.get("pce_pct"), 1)
    rest = pm_html(row.get("pce_pct"), row.get("pce_sigma_pct"), 1)[len(value):]
    return _num_cell(row.get("pce_pct"), f"<strong>{value}</strong>{rest}", "pce")


def _passes_cell(value) -> str:
    """Check mark for rows that pass every check."""
    t = text(value).strip().lower()
    if t in ("true", "1", "yes"):
        return '<td class="pass" data-value="1">yes</td>'
    if t in ("false", "0", "no"):
        return '<td class="fail" data-value="0">no</td>'
    return f'<td data-value="">{esc(value)}</td>'


# --------------------------------------------------------------------------- #
# Tables
# --------------------------------------------------------------------------- #
def shortlist_table(rows: pd.DataFrame, meta: dict) -> str:
    """The shortlist table with structure drawings."""
    head = _header([("Rank", "num", "", "rank"), ("Structure", "", "", ""),
                    ("Candidate", "text", "", "id")] + _LEVEL_HEADERS
                   + [(target_label(meta), "num", "descending", "p_above_target"),
                      ("Notes", "", "", "flags")])
    body = []
    for _, row in rows.iterrows():
        ident = text(row.get("id"))
        svg = molecule_svg(text(row.get("smiles")), f"structure of {ident}")
        drawing = svg if svg is not None else '<span class="nostruct">no structure available</span>'
        body.append(
            f'<tr data-id="{esc(ident)}">'
            + _rank_cell(row)
            + f'<td class="struct">{drawing}</td>'
            + _candidate_cell(row, with_smiles=True)
            + "".join(_level_cells(row))
            + _pce_cell(row)
            + _num_cell(row.get("p_above_target"), _prob(row.get("p_above_target")))
            + f'<td class="notes">{_flags_html(row.get("flags"), meta)}</td>'
            + "</tr>"
        )
    if not body:
        body.append('<tr><td colspan="13" class="empty">no candidates to show</td></tr>')
    return (f'<table class="sortable shortlist" id="shortlist-table">{head}<tbody>'
            + "\n".join(body) + "</tbody></table>")


def full_table(ranking: pd.DataFrame, meta: dict) -> str:
    """Every ranked row, no drawings; pass-through columns at the end."""
    extra = [c for c in ranking.columns if c not in _KNOWN_RANKING][:_MAX_EXTRA_COLUMNS]
    head = _header([("Rank", "num", "", "rank"), ("Candidate", "text", "", "id")] + _LEVEL_HEADERS
                   + [(target_label(meta), "num", "descending", "p_above_target"),
                      ("Passes", "num", "descending", "passes"), ("Notes", "", "", "flags")]
                   + [(esc(c), "text", "", "") for c in extra])
    body = []
    notes_of: dict[str, str] = {}  # a few distinct flag sets among thousands of rows
    for row in ranking.to_dict("records"):  # plain dicts: fast .get on 10 000 rows
        ident = text(row.get("id"))
        flags = text(row.get("flags"))
        notes = notes_of.get(flags)
        if notes is None:
            notes = notes_of[flags] = "; ".join(esc(describe(c, meta)) for c in _flag_codes(flags)) or "\u2014"
        extras = "".join(f'<td class="extra">{esc(shorten(text(row.get(c)), 120))}</td>' for c in extra)
        body.append(
            f'<tr data-id="{esc(ident)}">'
            + _rank_cell(row)
            + _candidate_cell(row, with_smiles=False)
            + "".join(_level_cells(row))
            + _pce_cell(row)
            + _num_cell(row.get("p_above_target"), _prob(row.get("p_above_target")))
            + _passes_cell(row.get("passes"))
            + f'<td class="notes-compact">{notes}</td>'
            + extras
            + "</tr>"
        )
    if not body:
        body.append('<tr><td colspan="14" class="empty">the ranking is empty</td></tr>')
    return (f'<table class="sortable full" id="full-table">{head}<tbody>'
            + "\n".join(body) + "</tbody></table>")


def _unranked_reason(row) -> tuple[str, str]:
    """Status (lower case, ``ok`` when blank) and the reason a levels row is not ranked."""
    st = text(row.get("status")).strip().lower() or "ok"
    err = text(row.get("error")).strip()
    reason = text(row.get("reason")).strip()
    if st == "ok":
        why = "computed, but absent from the ranking (removed by the ranking settings)"
    elif err and reason and reason not in err:
        why = f"{reason}: {err}"
    else:
        why = err or reason or "no reason recorded"
    return st, why


def _not_viable_rows(ranking: pd.DataFrame) -> pd.DataFrame:
    """Ranked rows whose pair is not viable (column ``viable`` false), with their reason."""
    if ranking is None or "viable" not in ranking or not len(ranking):
        return ranking.iloc[0:0] if ranking is not None else pd.DataFrame()
    bad = ~truthies(ranking["viable"])
    return ranking[bad]


def not_ranked_table(levels: pd.DataFrame, ranking: pd.DataFrame) -> tuple[str, int]:
    """Input rows that are not in the ranking, and ranked pairs that are not viable, with their reasons.

    Returns the table and the number of rows listed.

    Examples
    --------
    >>> import pandas as pd
    >>> lv = pd.DataFrame({"id": ["a", "b"], "status": ["ok", "ok"]})
    >>> rk = pd.DataFrame({"id": ["a", "b"], "viable": [True, False], "reason": ["", "inverted alignment"]})
    >>> html, n = not_ranked_table(lv, rk)
    >>> n, "not viable" in html, "inverted alignment" in html
    (1, True, True)
    """
    bad = _not_viable_rows(ranking)
    if (levels is None or not len(levels)) and not len(bad):
        return '<p class="quiet">No levels table was given, so unranked rows cannot be listed.</p>', 0
    body = []
    if levels is not None and len(levels):
        body += _unranked_rows(levels, ranking)
    for row in bad[[c for c in ("id", "name", "reason", "flags", "smiles") if c in bad]].to_dict("records"):
        why = text(row.get("reason")).strip() or "; ".join(describe(c) for c in _flag_codes(row.get("flags"))) \
            or "no reason recorded"
        smi = text(row.get("smiles"))
        body.append(
            f'<tr data-id="{esc(row.get("id"))}"><td class="cid">{esc(row.get("id"))}</td>'
            f'<td>{esc(text(row.get("name")))}</td><td><span class="status st-other">not viable</span></td>'
            f'<td class="reason">{esc(why)}</td>'
            f'<td><code class="smi" title="{esc(smi)}">{esc(shorten(smi, 60))}</code></td></tr>')
    if not body:
        return '<p class="quiet">Every input row was ranked.</p>', 0
    table = ('<table class="unranked" id="not-ranked-table"><thead><tr><th scope="col">Id</th>'
             '<th scope="col">Name</th><th scope="col">Status</th><th scope="col">Reason</th>'
             '<th scope="col">SMILES as given</th></tr></thead><tbody>' + "\n".join(body)
             + "</tbody></table>")
    return table, len(body)


def _unranked_rows(levels: pd.DataFrame, ranking: pd.DataFrame) -> list[str]:
    """Table rows of the input rows that are not in the ranking."""
    ranked_ids = set(texts(ranking["id"])) if ranking is not None and "id" in ranking else set()
    status = (texts(levels["status"]).str.strip().str.lower() if "status" in levels
              else pd.Series("ok", index=levels.index))
    ids = texts(levels["id"]) if "id" in levels else pd.Series("", index=levels.index)
    missing_ok = status.eq("ok") & ~ids.isin(ranked_ids)
    rows = levels[status.ne("ok") | missing_ok]
    body = []
    for _, row in rows.iterrows():
        st, why = _unranked_reason(row)
        cls = {"rejected": "st-rejected", "failed": "st-failed"}.get(st, "st-other")
        smi = text(row.get("smiles"))
        name = text(row.get("name"))
        body.append(
            f'<tr data-id="{esc(row.get("id"))}"><td class="cid">{esc(row.get("id"))}</td>'
            f'<td>{esc(name)}</td><td><span class="status {cls}">{esc(st)}</span></td>'
            f'<td class="reason">{esc(why)}</td>'
            f'<td><code class="smi" title="{esc(smi)}">{esc(shorten(smi, 60))}</code></td></tr>'
        )
    return body
