"""Accessibility of the HTML reports and the partner-matrix page (an accessibility audit, WCAG 2.1 AA).

Static checks of the generated HTML, CSS, script and figures, and one headless-Chromium test (skipped without
Chromium, like ``test_report_browser.py``) that sorts a table from its header button, reads what is announced, and
lays the matrix page out 320 px wide.

Thresholds: contrast ratio 4.5:1 for normal text (W3C, Web Content Accessibility Guidelines 2.1, success criterion
1.4.3) and 3:1 for graphics and focus indicators (success criterion 1.4.11); content at 320 CSS px without scrolling
in two dimensions (success criterion 1.4.10).
"""

from __future__ import annotations

import html
import json
import re

import pandas as pd
import pytest

from screen.report.page import render_report, static_text
from test_report import synthetic_inputs
from test_report_print import _block, _contrast, _dye_inputs, _rules

CSS = static_text("report.css")
JS = static_text("report.js")
#: the style sheet's colours by custom property name ("--teal-9" → "#0b3b45")
VAR = dict(re.findall(r"(--[\w-]+):(#[0-9a-f]{6})", CSS))


def _var(value: str) -> str:
    """A colour of a declaration: ``var(--x)`` resolved, or the ``#rrggbb`` itself."""
    found = re.search(r"var\((--[\w-]+)\)|(#[0-9a-f]{6})", value)
    return VAR[found.group(1)] if found.group(1) else found.group(2)


@pytest.fixture(scope="module")
def page():
    ranking, levels, partner, meta = synthetic_inputs()
    ranking = ranking.assign(viable=[i != len(ranking) - 1 for i in range(len(ranking))])  # one not-viable pair
    return render_report(ranking, levels, partner, meta)


@pytest.fixture(scope="module")
def dye_page():
    from screen.dyecell.page import render_dyecell_report

    ranking, meta = _dye_inputs()
    table = pd.DataFrame({"id": ["D-b", "D-x"], "status": ["ok", "rejected"], "error": ["", "SMILES not readable"],
                          "smiles": ["OC(=O)c1ccccc1", "C1CC(" + "C" * 130]})
    return render_dyecell_report(ranking, table, meta)


def _matrix_page():
    from screen.report.matrix_page import render_overview

    m = pd.DataFrame({"id": ["D1", "D2"], "name": ["", ""], "smiles": ["c1ccsc1", "c1ccsc1"],
                      "best_partner": ["a", "a"], "best_pce_pct": [9.0, 2.0], "viable_partners": [1, 1],
                      "a": [9.0, 2.0], "b": [float("nan"), 3.0]})
    return render_overview(m, {"partners": [{"id": "a", "report": "../a--1/report.html"},
                                            {"id": "b", "alignment_uncertain": ["D2"]}]}, created="x")


def _tables(text: str) -> list[str]:
    return re.findall(r"<table\b.*?</table>", text, re.S)


# --------------------------------------------------------------------------- #
# 1: the keyboard reaches the columns right of the screen
# --------------------------------------------------------------------------- #
def test_table_wrappers_are_named_regions_the_keyboard_can_scroll(page, dye_page):
    for text, wide in ((page, {"shortlist-table", "full-table"}), (dye_page, {"shortlist-table", "full-table"}),
                       (_matrix_page(), set())):
        wraps = re.findall(r'<div class="tablewrap[^"]*"[^>]*><table[^>]*>', text)
        assert wraps
        for wrap in wraps:
            named = re.search(r'role="region" tabindex="0" aria-labelledby="([^"]+)"', wrap)
            assert named, wrap
            assert f'<caption class="vh" id="{named.group(1)}">' in text
        for ident in wide:
            assert re.search(rf'<div class="tablewrap wide" role="region" tabindex="0"[^>]*><table[^>]*id="{ident}"',
                             text), ident
    rules = _rules(CSS)
    assert "outline:3px solid var(--teal-9)" in rules[".tablewrap:focus-visible"]


# --------------------------------------------------------------------------- #
# 2, 6: row headers and table names
# --------------------------------------------------------------------------- #
def test_every_data_table_has_row_headers_and_a_caption(page, dye_page):
    for text in (page, dye_page, _matrix_page()):
        for table in _tables(text):
            if 'class="mini"' in table:   # the calibration card's small table has had a caption all along
                continue
            assert re.search(r'<caption class="vh" id="[^"]+">[^<]+</caption>', table), table[:120]
            rows = re.findall(r"<tbody>(.*?)</tbody>", table, re.S)[0].split("</tr>")
            rows = [r for r in rows if "<td" in r and 'class="empty"' not in r]
            assert rows and all('<th scope="row"' in r for r in rows), table[:120]
    assert "font-weight:inherit" in _rules(CSS)["tbody th"]
    # the shortlist's candidate cell is the row header, with the id the sorting script reads
    assert re.search(r'<th scope="row" class="cand" data-value="[^"]+"><span class="cid">', page)


# --------------------------------------------------------------------------- #
# 3, 4: sort buttons, what is announced, focus ring and arrow contrast
# --------------------------------------------------------------------------- #
def test_sort_headers_become_buttons_and_sorting_is_announced(page, dye_page):
    assert 'document.createElement("button")' in JS and 'button.type = "button"' in JS
    assert "th.tabIndex" not in JS                                   # one tab stop per header: the button
    assert 'setAttribute("aria-live", "polite")' in JS and '" sorted by "' in JS
    for text in (page, dye_page):
        assert "Click a column header to sort, or press Enter on it." in text
    rules = _rules(CSS)
    # the arrow is no part of the header's accessible name (alternative text "" of generated content)
    for sel in ("th.js-sort::after", "th[aria-sort=ascending].js-sort::after",
                "th[aria-sort=descending].js-sort::after"):
        assert re.search(r'content:"\\[0-9A-F]+" / ""', rules[sel]), sel


def test_focus_ring_and_sorted_arrow_reach_the_contrast_for_graphics():
    rules = _rules(CSS)
    ring = _var(rules["th.js-sort button:focus-visible"].split("outline:")[1])
    assert _contrast(ring, VAR["--teal-2"]) >= 3.0 and _contrast(ring, "#ffffff") >= 3.0   # WCAG 2.1 SC 1.4.11
    for sel in ("th[aria-sort=ascending].js-sort::after", "th[aria-sort=descending].js-sort::after"):
        arrow = _var(rules[sel].split("color:")[1])
        for bg in (VAR["--teal-1"], VAR["--teal-2"]):                 # header, hovered or focused header
            assert _contrast(arrow, bg) >= 3.0, (sel, arrow, bg)


# --------------------------------------------------------------------------- #
# 5: the figures' names and text alternatives
# --------------------------------------------------------------------------- #
def test_figures_are_named_and_described_by_their_captions(page, dye_page):
    for text, ident, svg in ((page, "figure-levels", "fig-levels"), (page, "figure-map", "fig-map"),
                             (dye_page, "figure-dyecell", "fig-dyecell")):
        figure = re.search(rf'<figure [^>]*id="{ident}"[^>]*>', text).group(0)
        assert f'aria-labelledby="{ident}-name"' in figure
        assert f'<strong id="{ident}-name">' in text and f'<figcaption id="{ident}-caption">' in text
        head = re.search(rf'<svg id="{svg}"[^>]*>', text).group(0)
        assert f'aria-describedby="{ident}-caption"' in head
    caption = re.search(r'<figcaption id="figure-map-caption">(.*?)</figcaption>', page, re.S).group(1)
    assert "The map peaks at" in caption and "% target is reached for optical gaps" in caption
    levels = re.search(r'<figcaption id="figure-levels-caption">(.*?)</figcaption>', page, re.S).group(1)
    assert "are in the shortlist table (section 2)" in levels
    dye = re.search(r'<figcaption id="figure-dyecell-caption">(.*?)</figcaption>', dye_page, re.S).group(1)
    assert "are in the shortlist table" in dye and "in their cards (section 1)" in dye


def test_map_sentence_names_the_peak_and_the_gaps_that_reach_the_target():
    import numpy as np

    from screen.report.figures import _map_summary

    gaps, offsets = np.linspace(1.0, 2.0, 11), np.linspace(0.0, 0.5, 6)
    pce = 15.0 - 20.0 * (gaps[:, None] - 1.5) ** 2 - 10.0 * (offsets[None, :] - 0.2) ** 2   # peak 15 % at 1.5, 0.2
    pce[:, 0] = np.nan                                                                       # ΔLUMO 0: not viable
    words = _map_summary(gaps, offsets, pce, 12.0, "donor")
    # 15 − 20 (g − 1.5)² − 10 (0.1)² ≥ 12 for |g − 1.5| ≤ 0.38: gaps 1.2–1.8 on the 0.1 eV grid
    assert words.startswith("The map peaks at 15.0 % PCE at a donor optical gap of 1.50 eV and \u0394LUMO 0.20 eV")
    assert "the 12 % target is reached for optical gaps from 1.20 to 1.80 eV" in words
    assert "does not reach the 20 % target" in _map_summary(gaps, offsets, pce, 20.0, "donor")


# --------------------------------------------------------------------------- #
# 7, 8, 9, 13: the matrix page
# --------------------------------------------------------------------------- #
def test_matrix_cells_say_not_viable_and_uncertain_in_words():
    from screen.report.matrix_page import _STYLE

    out = _matrix_page()
    assert '\u2014<span class="vh"> not viable</span>' in out
    assert '<sup class="unc" aria-hidden="true">?</sup><span class="vh">, alignment uncertain</span>' in out
    assert "clip-path:inset(50%)" in _rules(_STYLE)[".vh"]
    assert "a grey cell with \u2014 is a pair that is not viable" in out


def test_heat_cells_reach_the_text_contrast_over_the_whole_scale():
    from screen.report.matrix_page import _contrast as ratio
    from screen.report.matrix_page import heat_colour

    worst = min(ratio(*heat_colour(i / 1000, 0.0, 1.0)) for i in range(1001))
    assert worst >= 4.5                                       # WCAG 2.1 SC 1.4.3; was 4.15:1 near 73 % of the scale
    assert heat_colour(0.0, 0.0, 1.0) == ("#ffffcc", "#1b1b1b") and heat_colour(1.0, 0.0, 1.0) == ("#253494", "#ffffff")


def test_matrix_legend_wraps_and_keeps_its_swatches():
    from screen.report.matrix_page import _STYLE

    rules = _rules(_STYLE)
    assert "flex-wrap:wrap" in rules[".legend"] and "flex:none" in rules[".legend span.sw"]


def test_matrix_page_has_landmarks_and_says_where_its_links_go():
    out = _matrix_page()
    assert re.search(r"<header><h1>.*</h1></header>\s*<main>", out) and "</main>" in out
    assert out.index("</main>") < out.index("<footer>")
    assert 'aria-label="structure of D1"' in out
    assert '<a href="../a--1/report.html"><span class="vh">ranking report for </span>a</a>' in out


# --------------------------------------------------------------------------- #
# 10: concerns and information told apart in words
# --------------------------------------------------------------------------- #
def test_flags_are_led_by_concern_or_note(page):
    from screen.dyecell.page import _flags_html
    from screen.report.tables import _flags_html as report_flags

    assert re.search(r'<li class="flag info" data-code="[^"]+"><span class="flag-kind">Note:</span> ', page)
    both = report_flags("lumo_offset_low;role_assumed", {"device": {"min_delta_lumo_ev": 0.3}})
    assert '<li class="flag" data-code="lumo_offset_low"><span class="flag-kind">Concern:</span> LUMO offset' in both
    assert '<li class="flag info" data-code="role_assumed"><span class="flag-kind">Note:</span> ' in both
    dye = _flags_html("no_anchor;outside_calibration", {})
    assert '<li class="flag"><span class="flag-kind">Concern:</span> ' in dye
    assert '<li class="flag info"><span class="flag-kind">Note:</span> ' in dye


# --------------------------------------------------------------------------- #
# 11: figure colours (the simple ones)
# --------------------------------------------------------------------------- #
def test_partner_levels_dots_and_hatch_reach_the_contrast_for_graphics():
    import matplotlib
    from matplotlib.figure import Figure

    from screen.report import figures
    from screen.report.figures import _RC, _draw_levels, _map_candidates

    ax = Figure().add_subplot()
    _draw_levels(ax, pd.DataFrame({"rank": [1], "id": ["d"], "homo_ev": [-5.4], "lumo_ev": [-3.5],
                                   "delta_lumo_ev": [0.6]}), {"homo_ev": -5.65, "lumo_ev": -4.09}, 0.3, 0.3)
    colours = {matplotlib.colors.to_hex(line.get_color()) for line in ax.lines}
    assert figures._AMBER not in colours and figures._AMBER_DARK in colours
    assert all(_contrast(c, "#ffffff") >= 3.0 for c in colours)                     # WCAG 2.1 SC 1.4.11
    assert _contrast(figures._HATCH, "#eef0f2") >= 3.0 and _RC["hatch.color"] == figures._HATCH
    pts = pd.DataFrame({"x": [1.5, 2.0], "y": [0.3, 0.5], "rank": [1, 2], "id": ["a", "b"], "viable": [True, True]})
    ax = Figure().add_subplot()
    _map_candidates(ax, pts, pd.Series(True, index=pts.index), [0], (1.0, 3.0, -0.2, 1.2))
    dots = [ln for ln in ax.lines if ln.get_marker() == "o"]
    assert dots and dots[0].get_markeredgewidth() >= 1.0 and dots[0].get_markeredgecolor() == "white"


# --------------------------------------------------------------------------- #
# 12, 15: the sticky rule, the footer heading, text that was in tooltips only
# --------------------------------------------------------------------------- #
def test_no_sticky_header_that_cannot_stick():
    assert "position:sticky" not in _rules(CSS)["thead th"]


def test_footer_heading_is_a_section_of_its_own(page, dye_page):
    for text in (page, dye_page):
        assert '<h2 id="files-heading">Files beside this report</h2>' in text and "<h3>Files beside" not in text
    assert "text-transform:uppercase" in _rules(CSS)["footer h2"]      # the look of the former h3


def test_polymer_details_and_whole_smiles_are_text_not_only_tooltips(page):
    from screen.report.tables import _candidate_cell, _smiles_cells, _structure_cell

    cell = _candidate_cell("P1", "", "donor", None, "polymer", ("3", "poor", ""))
    assert re.search(r'polymer n\u22643 \u00b7 fit poor<span class="vh"> \u2014 polymer repeat unit: levels at the '
                     r"chain limit of its oligomers n = 1\u20133, chain fit poor</span>", cell)
    drawn = re.findall(r'<td class="struct"><svg.*?</td>', page, re.S)
    assert drawn and all('<span class="vh">SMILES ' in cell for cell in drawn)       # the whole SMILES, read there
    smi = "CCCCCCc1ccc(-c2ccc(-c3sc(-c4ccc(-c5ccc(CCCCCC)s5)s4)c4c3C(=O)N(C)C4=O)s2)s1"   # 74 characters
    assert f'<span class="vh">SMILES {html.escape(smi)}</span></td>' in _structure_cell("X", smi)
    # the shortened SMILES of the candidate cell stays out of the row header's name
    assert re.search(r'<code class="smi" title="[^"]*" aria-hidden="true">', page)
    given = _smiles_cells([smi])[0]                                               # "SMILES as given", shortened
    assert f'<span aria-hidden="true">{smi[:59]}\u2026</span><span class="vh">{smi}</span>' in given


# --------------------------------------------------------------------------- #
# in Chromium: the button sorts, the sort is announced, the matrix fits 320 px
# --------------------------------------------------------------------------- #
_PROBE = """<script>
(function () {
  var out = {};
  var th = document.querySelector("#shortlist-table th[data-key='pce_pct']");
  var button = th.querySelector("button");
  out.button = button ? [button.type, button.textContent.replace(/\\s+/g, " ").trim()] : null;
  out.th_tabindex = th.getAttribute("tabindex");
  out.glyph = getComputedStyle(th, "::after").content;
  if (button) { button.click(); }
  out.aria = th.getAttribute("aria-sort");
  var live = document.getElementById("sort-status");
  out.live = live ? [live.getAttribute("aria-live"), live.textContent] : null;
  var rank = document.querySelector("#shortlist-table th[data-key='rank']");
  rank.dispatchEvent(new KeyboardEvent("keydown", {key: "Enter", bubbles: true}));  // the th's own key handler
  out.after_rank = live ? live.textContent : null;
  var pre = document.createElement("pre");
  pre.id = "test-result";
  pre.textContent = JSON.stringify(out);
  document.body.appendChild(pre);
})();
</script>"""

_NARROW = """<script>
(function () {
  var sw = Array.prototype.map.call(document.querySelectorAll(".legend span.sw"), function (s) {
    return Math.round(s.getBoundingClientRect().width); });
  var pre = document.createElement("pre");
  pre.id = "test-result";
  pre.textContent = JSON.stringify({sw: sw, scroll: document.documentElement.scrollWidth,
                                    client: document.documentElement.clientWidth});
  document.body.appendChild(pre);
})();
</script>"""


def _probe(tmp_path, name: str, text: str, script: str, *extra: str) -> dict:
    import test_report_browser as tb

    path = tmp_path / f"{name}.html"
    path.write_text(text.replace("</body>", script + "\n</body>", 1), encoding="utf-8")
    res = tb._run(path.as_uri(), tmp_path, "--dump-dom", *extra)
    assert res.returncode == 0, res.stderr[-2000:]
    found = re.search(r'<pre id="test-result">(.*?)</pre>', res.stdout, re.S)
    assert found, res.stdout[-2000:]
    return json.loads(html.unescape(found.group(1)))


def test_in_chromium_the_header_button_sorts_and_says_so_and_the_matrix_fits_320_px(page, tmp_path):
    import test_report_browser as tb

    if tb.CHROMIUM is None:
        pytest.skip("chromium not installed; run tools/install-chromium.sh")
    out = _probe(tmp_path, "report", page, _PROBE, "--window-size=1400,900")
    assert out["button"] == ["button", "PCE [%]"] and out["th_tabindex"] is None
    assert "\u2195" not in out["button"][1]                       # the arrow is not in the button's name
    assert out["aria"] == "descending"
    assert out["live"] == ["polite", "Shortlisted candidates sorted by PCE, descending"]
    assert out["after_rank"] == "Shortlisted candidates sorted by Rank, ascending"
    narrow = _probe(tmp_path, "matrix", _matrix_page(), _NARROW, "--window-size=320,800", "--hide-scrollbars")
    assert narrow["sw"] and all(w == 28 for w in narrow["sw"]), narrow       # swatches keep their 28 px
    assert narrow["scroll"] <= narrow["client"], narrow                      # no sideways scrolling of the page


def test_names_in_the_not_ranked_and_not_viable_tables_are_isolated_too():
    # the id cells were isolated, the name cells beside them not: an unterminated U+202E in a rejected row's name
    # turned the rest of its row around
    ranking, levels, partner, meta = synthetic_inputs()
    ranking, levels = ranking.copy(), levels.copy()
    last = ranking.loc[len(ranking) - 1, "id"]
    ranking = ranking.assign(viable=[True] * (len(ranking) - 1) + [False])
    ranking.loc[len(ranking) - 1, "name"] = "nv\u202e"
    levels.loc[levels["id"] == last, "name"] = "nv\u202e"
    levels.loc[levels["status"] == "rejected", "name"] = "rej\u202e"
    page = render_report(ranking, levels, partner, meta)
    assert "<td><bdi>rej\u202e</bdi></td>" in page and "<td><bdi>nv\u202e</bdi></td>" in page
