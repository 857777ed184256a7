"""The partner matrix links a partner's ranking report only when that report was written (a reviewer of the
session's diff: a ranking made with run_rank(report=False) got a link to a page that does not exist)."""

from __future__ import annotations

import json

from screen.matrix import run_matrix
from screen.rank_io import run_rank

LEVELS = ("id,role,homo_ev,lumo_ev,gap_opt_ev,scale\n"
          "D1,donor,-5.30,-3.50,1.70,film\nD2,donor,-5.45,-3.60,1.75,film\n")


def test_a_ranking_without_a_report_gets_no_link(tmp_path):
    levels = tmp_path / "lv.csv"
    levels.write_text(LEVELS, encoding="utf-8")
    out = tmp_path / "out"
    with_report = run_rank(levels, "y6", out)
    without = run_rank(levels, "c60", out, report=False)
    assert (with_report.parent / "report.html").is_file() and not (without.parent / "report.html").exists()
    folder = run_matrix([with_report, without], out)
    partners = {p["id"]: p for p in json.loads((folder / "matrix.meta.json").read_text())["partners"]}
    assert partners["y6"]["report"] == f"../{with_report.parent.name}/report.html"
    assert partners["c60"]["report"] is None
    page = (folder / "overview.html").read_text(encoding="utf-8")
    assert f"../{with_report.parent.name}/report.html" in page and f"../{without.parent.name}/report.html" not in page
