"""The report in a real browser: headless Chromium, no extra Python packages.

Runs in the default suite when Debian's ``chromium`` is installed and skips
otherwise (``tools/install-chromium.sh`` installs it).  Three page loads:

1. the report as written, with ``--screenshot`` → ``tests/artifacts/report.png``
   (git-ignored) and ``--dump-dom``, checking that the page's own script ran and
   logged no error;
2. a *copy* of the report with a test script appended that clicks column
   headers and writes the resulting row order, the JavaScript errors seen and
   the resources fetched into ``<pre id="test-result">``, read back from the
   dumped DOM;
3. a copy of the report without its script: the tables are still there, in
   rank order.

The network is cut off for the browser (``--host-resolver-rules``), and the
page must not have requested any resource at all.
"""

from __future__ import annotations

import html
import json
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from screen.report import write_report
from test_report import synthetic_inputs

ARTIFACTS = Path(__file__).parent / "artifacts"


def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser"):
        path = shutil.which(name)
        if path:
            return path
    return "/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None


CHROMIUM = _chromium()
pytestmark = pytest.mark.skipif(CHROMIUM is None, reason="chromium not installed; run tools/install-chromium.sh")

# Collects errors from the very start of the page (inserted first in <head>).
_EARLY = """<script>
window.__testErrors = [];
window.addEventListener("error", function (e) { window.__testErrors.push(String(e.message)); });
(function () {
  var orig = console.error;
  console.error = function () { window.__testErrors.push(Array.prototype.join.call(arguments, " "));
                                return orig.apply(console, arguments); };
})();
</script>"""

# Clicks headers and records what happened (inserted just before </body>).
_PROBE = """<script>
(function () {
  function order(tableId) {
    return Array.prototype.map.call(document.querySelectorAll("#" + tableId + " tbody tr"),
                                    function (tr) { return tr.getAttribute("data-id"); });
  }
  function header(tableId, key) {
    return document.querySelector("#" + tableId + " thead th[data-key='" + key + "']");
  }
  var out = {initial: order("shortlist-table")};
  var pce = header("shortlist-table", "pce_pct");
  out.sortable = pce.classList.contains("js-sort");
  pce.click();
  out.pce_first = order("shortlist-table");
  out.pce_first_aria = pce.getAttribute("aria-sort");
  pce.click();
  out.pce_second = order("shortlist-table");
  out.pce_second_aria = pce.getAttribute("aria-sort");
  header("shortlist-table", "id").click();
  out.by_id = order("shortlist-table");
  var full = header("full-table", "delta_lumo_ev");
  full.click();
  out.full_by_delta = order("full-table");
  var keyEvent = new KeyboardEvent("keydown", {key: "Enter", bubbles: true});
  header("full-table", "rank").dispatchEvent(keyEvent);
  out.full_rank_key = order("full-table");
  out.mol_drawings = document.querySelectorAll("svg.mol").length;
  out.figures = Array.prototype.map.call(document.querySelectorAll("svg.figure-svg"), function (s) {
    var r = s.getBoundingClientRect();
    return [s.id, Math.round(r.width), Math.round(r.height)];
  });
  out.resources = performance.getEntriesByType("resource").map(function (e) { return e.name; });
  out.errors = window.__testErrors;
  var pre = document.createElement("pre");
  pre.id = "test-result";
  pre.textContent = JSON.stringify(out);
  document.body.appendChild(pre);
})();
</script>"""


def _run(url: str, tmp_path: Path, *extra: str) -> subprocess.CompletedProcess:
    profile = tmp_path / f"profile-{len(list(tmp_path.glob('profile-*')))}"
    cmd = [
        CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync",
        "--disable-extensions", "--disable-default-apps", "--mute-audio",
        "--host-resolver-rules=MAP * ~NOTFOUND", f"--user-data-dir={profile}",
        "--enable-logging=stderr", "--v=0", *extra, url,
    ]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=180, cwd=tmp_path)


def _page_errors(stderr: str) -> list[str]:
    """Console/JavaScript errors Chromium logged for the page."""
    lines = [ln for ln in stderr.splitlines() if "CONSOLE" in ln or "Uncaught" in ln]
    return [ln for ln in lines if "Uncaught" in ln or "rror" in ln]


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    ranking, levels, partner, meta = synthetic_inputs()
    meta["rank"]["shortlist_size"] = 10
    out = tmp_path_factory.mktemp("browser")
    path = write_report(ranking, levels, partner, meta, out)
    return path, ranking, meta


def test_screenshot_and_clean_console(report, tmp_path):
    path, _ranking, _meta = report
    ARTIFACTS.mkdir(exist_ok=True)
    shot = ARTIFACTS / "report.png"
    if shot.exists():
        shot.unlink()
    res = _run(path.as_uri(), tmp_path, f"--screenshot={shot}", "--window-size=1400,2000",
               "--hide-scrollbars")
    assert res.returncode == 0, res.stderr[-2000:]
    assert shot.is_file() and shot.stat().st_size > 20_000
    assert shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not _page_errors(res.stderr), _page_errors(res.stderr)

    res = _run(path.as_uri(), tmp_path, "--dump-dom")
    assert res.returncode == 0, res.stderr[-2000:]
    dom = res.stdout
    assert 'id="shortlist-table"' in dom
    assert 'class="num-h js-sort"' in dom and '<button type="button"' in dom  # the page's own script armed the headers
    assert not _page_errors(res.stderr), _page_errors(res.stderr)
    assert "alert(1)" in dom and "<script>alert(1)" not in dom


def test_sorting_by_clicking_headers(report, tmp_path):
    path, ranking, _meta = report
    page = path.read_text(encoding="utf-8")
    page = page.replace("<head>", "<head>\n" + _EARLY, 1).replace("</body>", _PROBE + "\n</body>", 1)
    probe = tmp_path / "report-probe.html"
    probe.write_text(page, encoding="utf-8")
    res = _run(probe.as_uri(), tmp_path, "--dump-dom")
    assert res.returncode == 0, res.stderr[-2000:]
    found = re.search(r'<pre id="test-result">(.*?)</pre>', res.stdout, re.S)
    assert found, res.stdout[-3000:]
    out = json.loads(html.unescape(found.group(1)))

    assert out["errors"] == [] and not _page_errors(res.stderr), (out["errors"], _page_errors(res.stderr))
    assert out["resources"] == [], "the page fetched resources"
    short = ranking[ranking["passes"]].head(10)
    assert out["initial"] == short["id"].tolist()
    assert out["sortable"] is True
    by_pce = short.sort_values("pce_pct", ascending=False, kind="stable")["id"].tolist()
    assert out["pce_first"] == by_pce and out["pce_first_aria"] == "descending"
    assert out["pce_second"] == by_pce[::-1] and out["pce_second_aria"] == "ascending"
    assert sorted(out["by_id"]) == sorted(short["id"]) and out["by_id"] != out["initial"]
    delta = ranking.sort_values("delta_lumo_ev", ascending=False, kind="stable")["id"].tolist()
    assert out["full_by_delta"] == delta
    # sorting by ΔLUMO cleared the rank header's state, so Enter on it restores rank order (keyboard use)
    assert out["full_rank_key"] == ranking["id"].tolist()
    assert out["mol_drawings"] == len(short)
    figs = {f[0]: f[1:] for f in out["figures"]}
    assert set(figs) == {"fig-levels", "fig-map"}
    assert all(w > 300 and h > 200 for w, h in figs.values()), figs


def test_usable_without_javascript(report, tmp_path):
    # --dump-dom needs script execution itself, so the page's script is removed from a copy instead
    path, ranking, _meta = report
    page = path.read_text(encoding="utf-8")
    bare = re.sub(r"<script>.*?</script>", "", page, flags=re.S)
    assert "<script" not in bare
    copy = tmp_path / "report-nojs.html"
    copy.write_text(bare, encoding="utf-8")
    res = _run(copy.as_uri(), tmp_path, "--dump-dom")
    assert res.returncode == 0, res.stderr[-2000:]
    dom = res.stdout
    assert 'class="num-h js-sort"' not in dom and "<button" not in dom
    start = dom.index('id="full-table"')
    rows = re.findall(r'<tr data-id="([^"]*)"', dom[start:dom.index("</table>", start)])
    assert [html.unescape(r) for r in rows] == ranking["id"].tolist()
