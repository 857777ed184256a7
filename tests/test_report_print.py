"""Print, narrow-screen and accessibility rules of the HTML reports (an accessibility/print audit).

Static checks of the generated HTML, CSS, JavaScript and figures (fast, no browser), and one
headless-Chromium test (skipped without Chromium, like ``test_report_browser.py``) that lays the
report out at the width of an A4 page under the print rules, fires ``beforeprint``/``afterprint``
and sorts the dye report's table by mouse and keyboard.

Thresholds: WCAG 2.x contrast ratio 4.5:1 for normal text (W3C, Web Content Accessibility
Guidelines 2.1, success criterion 1.4.3); A4 is 210 mm wide (ISO 216), 96 CSS px per inch.
"""

from __future__ import annotations

import html
import json
import re

import pandas as pd
import pytest

from screen.report.page import render_report, static_text
from test_report import synthetic_inputs


# --------------------------------------------------------------------------- #
# helpers
# --------------------------------------------------------------------------- #
def _block(css: str, head: str) -> str:
    """The body of the first ``head{…}`` block (braces balanced), e.g. ``@media print``."""
    start = css.index(head)
    i = css.index("{", start) + 1
    depth = 1
    j = i
    while depth:
        depth += {"{": 1, "}": -1}.get(css[j], 0)
        j += 1
    return css[i:j - 1]


def _rules(css: str) -> dict[str, str]:
    """``{selector: declarations}`` of the flat rules of a block (nested @-blocks skipped), one key per selector."""
    out: dict[str, str] = {}
    css = re.sub(r"@[^{]*\{(?:[^{}]*\{[^{}]*\})*[^{}]*\}", "", css)  # nested @page / @media blocks
    for sel, body in re.findall(r"([^{}]+)\{([^{}]*)\}", css):
        for s in sel.split(","):
            out[s.strip()] = out.get(s.strip(), "") + ";" + body
    return out


def _lum(colour: str) -> float:
    """WCAG 2 relative luminance of #rrggbb (or #rgb)."""
    c = colour.lstrip("#")
    c = "".join(ch * 2 for ch in c) if len(c) == 3 else c

    def lin(v):
        return v / 12.92 if v <= 0.04045 else ((v + 0.055) / 1.055) ** 2.4

    r, g, b = (lin(int(c[i:i + 2], 16) / 255) for i in (0, 2, 4))
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def _contrast(a: str, b: str) -> float:
    hi, lo = sorted((_lum(a), _lum(b)), reverse=True)
    return (hi + 0.05) / (lo + 0.05)


CSS = static_text("report.css")
PRINT = _rules(_block(CSS, "@media print"))


@pytest.fixture(scope="module")
def page():
    ranking, levels, partner, meta = synthetic_inputs()
    return render_report(ranking, levels, partner, meta)


def _dye_inputs():
    ranking = pd.DataFrame({
        "rank": [1, 2, 3], "id": ["D-b", "D-a", "D-c"], "name": ["", "", ""],
        "smiles": ["OC(=O)c1ccccc1", "OC(=O)c1ccc(-c2cccs2)cc1", "c1ccccc1"],
        "e_ox_v_nhe": [1.10, 1.05, 1.20], "e00_ev": [2.10, 2.00, 2.30], "e_ox_excited_v_nhe": [-1.0, -0.95, -1.1],
        "drive_inj_ev": [0.5, 0.45, 0.6], "drive_reg_ev": [0.54, 0.49, 0.64], "voc_v": [0.86, 0.86, 0.86],
        "jsc_ma_cm2": [8.0, 9.5, 5.0], "pce_pct": [4.8, 5.7, float("nan")], "pce_sigma_pct": [1.0, 1.1, float("nan")],
        "p_viable": [0.95, 0.97, 0.0], "p_above_target": [0.01, 0.05, 0.0], "viable": [True, True, False],
        "passes": [True, True, False], "viability": ["viable", "viable", "not viable: no anchoring group"],
        "anchors": ["carboxylic acid", "carboxylic acid", ""], "flags": ["", "", "no_anchor"]})
    meta = {"created": "today", "oxide": {"id": "tio2-anatase", "type": "n", "potential_v_nhe": -0.5},
            "mediator": {"id": "co-bpy3", "potential_v_nhe": 0.56},
            "model": {"min_drive_inj_ev": 0.2}, "regeneration_threshold_ev": 0.1,
            "rank": {"target_pce_pct": 8.0, "shortlist_size": 10}}
    return ranking, meta


# --------------------------------------------------------------------------- #
# 1–3, 10, 11: print rules of report.css
# --------------------------------------------------------------------------- #
def test_print_rules_fit_tables_on_a4_and_keep_rows_whole():
    assert "size:A4" in _block(CSS, "@media print").replace(" ", "")
    assert "9pt" in PRINT["table"]
    assert "min-width:0" in PRINT["ul.flags"] and "max-width:none" in PRINT["ul.flags"]
    assert "max-width:none" in PRINT["td.notes-compact"]
    assert "display:none" in PRINT[".cand code.smi"]          # the SMILES is in ranking.csv and shortlist.sdf
    assert "width:76px" in PRINT["svg.mol"]                      # smaller drawings
    for sel in ("tr", "figure", ".card"):
        assert "break-inside:avoid" in PRINT[sel], sel
    # the wide tables print on landscape pages of their own (A4 portrait keeps the shortlist's columns too)
    assert "page:wide" in PRINT[".tablewrap.wide"] and "page:wide" in PRINT["#all-ranked"]
    assert re.search(r"@page wide\{size:A4 landscape", _block(CSS, "@media print"))


def test_shortlist_and_full_table_are_printed_on_wide_pages(page):
    assert ('<div class="tablewrap wide" role="region" tabindex="0" aria-labelledby="shortlist-table-caption">'
            '<table class="sortable shortlist"') in page
    assert '<details id="all-ranked">' in page


def test_print_cards_header_and_sort_glyphs():
    assert "display:block" in PRINT[".cards"]
    assert "12em 1fr" in PRINT["dl"]
    assert "color:#000" in PRINT["header.top *"]
    # the sorted column's glyph (th[aria-sort=…].js-sort::after) is more specific than th.js-sort::after
    assert "content:none" in PRINT["th[aria-sort].js-sort::after"] and "content:none" in PRINT["th.js-sort::after"]
    assert "break-after:avoid" in PRINT["h2"] and "break-after:avoid" in PRINT["h3"]


def test_script_opens_collapsed_tables_for_printing_and_restores_them():
    js = static_text("report.js")
    assert 'addEventListener("beforeprint"' in js and 'addEventListener("afterprint"' in js
    assert "d.open = true" in js and "d.open = false" in js


# --------------------------------------------------------------------------- #
# 7, 9, 12, 14: narrow screens, contrast, focus
# --------------------------------------------------------------------------- #
def test_narrow_screens_scroll_figures_and_stack_cards():
    narrow = _rules(_block(CSS, "@media screen and (max-width:700px)"))
    assert "overflow-x:auto" in narrow["figure"] and "min-width:600px" in narrow["figure svg.figure-svg"]
    assert "grid-template-columns:1fr" in narrow["dl"]
    assert "minmax(min(320px,100%),1fr)" in _rules(CSS)[".cards"]


def test_greys_reach_the_wcag_contrast_for_text():
    slate5 = re.search(r"--slate-5:(#[0-9a-f]{6})", CSS).group(1)
    for bg in ("#ffffff", "#fafbfb", "#fcf4e6"):   # table cell, even row, hovered row
        assert _contrast(slate5, bg) >= 4.5, (slate5, bg)


def test_sortable_headers_show_keyboard_focus():
    rules = _rules(CSS)
    assert "outline:3px solid" in rules["th.js-sort button:focus-visible"]


def test_headings_have_a_space_after_their_number(page):
    assert '<span class="num">2</span> Shortlist' in page and '<span class="num">2</span>Shortlist' not in page


# --------------------------------------------------------------------------- #
# 3, 6, 8, 12: the partner-matrix page
# --------------------------------------------------------------------------- #
def test_matrix_page_prints_colours_keeps_rows_and_fits_phones():
    from screen.report.matrix_page import _STYLE, render_overview

    m = pd.DataFrame({"id": ["D1", "D2"], "name": ["", ""], "smiles": ["c1ccsc1", "c1ccsc1"],
                      "best_partner": ["a", "a"], "best_pce_pct": [9.0, 2.0], "viable_partners": [1, 1],
                      "a": [9.0, 2.0], "b": [float("nan"), float("nan")]})
    out = render_overview(m, {"partners": [{"id": "a"}, {"id": "b"}]}, created="x")
    style = _rules(_STYLE)
    assert "break-inside:avoid" in style["tr"]
    assert "print-color-adjust:exact" in style["td"] and "print-color-adjust:exact" in style[".legend span.sw"]
    assert '<meta name="viewport" content="width=device-width, initial-scale=1">' in out
    assert ('<div class="tablewrap" role="region" tabindex="0" aria-labelledby="matrix-caption"><table>' in out
            and "overflow-x:auto" in style["div.tablewrap"])
    assert all(re.search('scope="(col|row)"', th) for th in re.findall(r"<th(?:\s[^>]*)?>", out))
    na = re.search(r"td\.na\{background:(#[0-9a-f]+);color:(#[0-9a-f]+)\}", _STYLE)
    assert _contrast(na.group(2), na.group(1)) >= 4.5


def test_heat_cells_take_the_text_colour_of_higher_contrast():
    from screen.report.matrix_page import heat_colour

    for i in range(101):
        bg, fg = heat_colour(i / 100, 0.0, 1.0)
        other = "#1b1b1b" if fg == "#ffffff" else "#ffffff"
        assert _contrast(fg, bg) >= _contrast(other, bg), (i, bg, fg)
    # 0.6875 of the scale (#318dbb): white 3.7:1, dark text 4.6:1 (the old rule took white)
    assert heat_colour(0.6875, 0.0, 1.0) == ("#318dbb", "#1b1b1b")


# --------------------------------------------------------------------------- #
# 4, 13: figures that do not rely on colour alone
# --------------------------------------------------------------------------- #
def _dashed(ls) -> bool:
    return ls not in ("-", "solid", None) and ls != (0, None)


def test_dye_arrows_below_threshold_are_dashed_and_marked():
    import matplotlib

    from screen.dyecell.figure import BELOW_MARK, dyecell_figure
    from screen.report.figures import _RC

    ranking, meta = _dye_inputs()
    rows = ranking.head(2).assign(drive_reg_ev=[0.54, 0.05])  # D-a's regeneration below its 0.1 eV threshold
    with matplotlib.rc_context(_RC):
        fig = dyecell_figure(rows, meta)
    ax = fig.axes[0]
    labels = [t.get_text() for t in ax.texts if t.get_text()]
    assert f"0.05 {BELOW_MARK}" in labels and "0.54" in labels and f"0.54 {BELOW_MARK}" not in labels
    styles = [a.arrow_patch.get_linestyle() for a in ax.texts if getattr(a, "arrow_patch", None) is not None]
    assert sum(_dashed(s) for s in styles) == 1 and len(styles) == 4
    legend = {t.get_text() for t in ax.get_legend().get_texts()}
    assert f"below threshold (dashed, {BELOW_MARK})" in legend


def test_offset_arrows_below_threshold_are_dashed_and_marked():
    from matplotlib.figure import Figure

    from screen.report.figures import BELOW_MARK, _draw_levels

    rows = pd.DataFrame({"rank": [1, 2], "id": ["d1", "d2"], "homo_ev": [-5.40, -5.70], "lumo_ev": [-3.50, -3.60],
                         "delta_lumo_ev": [0.59, 0.49], "delta_homo_ev": [0.25, -0.05]})
    ax = Figure().add_subplot()
    _draw_levels(ax, rows, {"id": "acc", "homo_ev": -5.65, "lumo_ev": -4.09}, 0.0, 0.3, thr_homo=0.0)
    labels = [t.get_text() for t in ax.texts if t.get_text()]
    assert f"\u22120.05 {BELOW_MARK}" in labels and "0.25" in labels
    styles = [a.arrow_patch.get_linestyle() for a in ax.texts if getattr(a, "arrow_patch", None) is not None]
    assert sum(_dashed(s) for s in styles) == 1


def test_map_labels_are_outlined_and_crosses_white_edged():
    import matplotlib
    import numpy as np
    from matplotlib.figure import Figure

    from screen.report.figures import _RC, _map_candidates, _map_contours

    gaps, offsets = np.linspace(1.0, 3.0, 30), np.linspace(-0.2, 1.2, 30)
    pce = np.outer(np.linspace(2, 14, 30), np.ones(30))
    pts = pd.DataFrame({"x": [1.5, 2.0, 2.5], "y": [0.3, 0.5, -0.1], "rank": [1, 2, 3], "id": ["a", "b", "c"],
                        "viable": [True, True, False]})
    with matplotlib.rc_context(_RC):
        ax = Figure().add_subplot()
        _map_contours(ax, gaps, offsets, pce, 10.0)
        labels = [t for t in ax.texts if t.get_text()]
        _map_candidates(ax, pts, pd.Series(True, index=pts.index), [0], (1.0, 3.0, -0.2, 1.2))
    assert labels and all(t.get_path_effects() for t in labels)          # white outline on every contour label
    assert any(t.get_text() == "target 10 %" for t in labels)
    target = [c for c in ax.collections if len(c.get_path_effects() or []) >= 2]  # the double target line
    assert target
    cross = [ln for ln in ax.lines if ln.get_marker() == "x"]
    assert cross and cross[0].get_markersize() >= 6 and cross[0].get_path_effects()


# --------------------------------------------------------------------------- #
# 5, 15: the dye report's sorting, and information that was in tooltips only
# --------------------------------------------------------------------------- #
def test_dye_tables_use_the_sortable_markup():
    from screen.dyecell.page import render_dyecell_report

    ranking, meta = _dye_inputs()
    out = render_dyecell_report(ranking, pd.DataFrame(), meta)
    assert not re.search(r"<th[^>]*js-sort", out) and "data-type=" not in out   # markup report.js never armed
    for ident in ("shortlist-table", "full-table"):
        table = re.search(rf'<table id="{ident}" class="sortable [^"]*">(.*?)</table>', out, re.S).group(1)
        heads = re.findall(r"<th(?:\s[^>]*)?>", table)
        assert heads and all(re.search('scope="(col|row)"', h) for h in heads)
        assert sum("data-sort=" in h for h in heads) >= 12
    assert "Click a column header to sort" in out
    assert 'aria-label="structure of D-b"' in out
    # P(viable)'s definition was the header's tooltip only
    assert "within their \u03c3 that inject and regenerate" in out
    assert 'title="fraction of samples' not in out


def test_capped_products_are_visible():
    from screen.report.tables import capped_note

    r = pd.DataFrame({"id": ["X1", "X2"], "flags": ["pce_capped", ""], "voc_v": [1.5, 0.8],
                      "jsc_ma_cm2": [30.0, 10.0], "ff": [0.8, 0.7]})
    note = capped_note(r, {"device": {"incident_power_w_m2": 1000.0}})
    assert "X1 36.0 %" in note and "X2" not in note   # 1.5 V × 30 mA cm⁻² × 0.8 = 36 mW cm⁻² of 100


def test_polymer_badge_tooltip_is_printed():
    assert "attr(title)" in PRINT["span.role[title]::after"]


# --------------------------------------------------------------------------- #
# one browser test: A4 layout under the print rules, beforeprint/afterprint, the dye table's sorting
# --------------------------------------------------------------------------- #
_PROBE = """<script>
(function () {
  var out = {};
  var d = document.getElementById("all-ranked");
  out.closed_before = !d.open;
  window.dispatchEvent(new Event("beforeprint"));
  out.open_in_print = d.open;
  window.dispatchEvent(new Event("afterprint"));
  out.closed_after = !d.open;
  out.tables = Array.prototype.map.call(document.querySelectorAll(".tablewrap > table"), function (t) {
    return [t.id, Math.round(t.getBoundingClientRect().width), t.parentNode.clientWidth];
  });
  function order(id) {
    return Array.prototype.map.call(document.querySelectorAll("#" + id + " tbody tr"),
                                    function (tr) { return tr.getAttribute("data-id"); });
  }
  var th = document.querySelector("#shortlist-table th[data-key='pce_pct']");
  if (th) {
    out.armed = th.classList.contains("js-sort") && th.querySelector("button[type=button]") !== null;
    th.click();
    out.by_pce = order("shortlist-table");
    var rank = document.querySelector("#shortlist-table th[data-key='rank']");
    rank.dispatchEvent(new KeyboardEvent("keydown", {key: "Enter", bubbles: true}));
    out.by_rank_key = order("shortlist-table");
  }
  var pre = document.createElement("pre");
  pre.id = "test-result";
  pre.textContent = JSON.stringify(out);
  document.body.appendChild(pre);
})();
</script>"""


def test_a4_print_layout_and_dye_sorting_in_chromium(tmp_path):
    import test_report_browser as tb

    if tb.CHROMIUM is None:
        pytest.skip("chromium not installed; run tools/install-chromium.sh")
    from screen.dyecell.page import render_dyecell_report

    ranking, levels, partner, meta = synthetic_inputs()
    dye, dye_meta = _dye_inputs()
    pages = {"report": render_report(ranking, levels, partner, meta),
             "dye": render_dyecell_report(dye, pd.DataFrame(), dye_meta)}
    results = {}
    for name, text in pages.items():
        # the print rules applied on screen, at the width of A4 portrait between 10 mm margins (190 mm = 718 px)
        text = text.replace("@media print{", "@media all{", 1).replace("</body>", _PROBE + "\n</body>", 1)
        probe = tmp_path / f"{name}.html"
        probe.write_text(text, encoding="utf-8")
        res = tb._run(probe.as_uri(), tmp_path, "--dump-dom", "--window-size=718,1200", "--hide-scrollbars")
        assert res.returncode == 0, res.stderr[-2000:]
        found = re.search(r'<pre id="test-result">(.*?)</pre>', res.stdout, re.S)
        assert found, res.stdout[-2000:]
        results[name] = json.loads(html.unescape(found.group(1)))
    for name, out in results.items():
        assert out["closed_before"] and out["open_in_print"] and out["closed_after"], (name, out)
        short = [t for t in out["tables"] if t[0] == "shortlist-table"]
        assert short and short[0][1] <= short[0][2] + 1, (name, out["tables"])   # every column on the page
    dye_out = results["dye"]
    assert dye_out["armed"] is True
    assert dye_out["by_pce"] == ["D-a", "D-b"]          # the viable dyes, larger PCE first (rank order: D-b, D-a)
    assert dye_out["by_rank_key"] == ["D-b", "D-a"]     # Enter on the rank header restores rank order
