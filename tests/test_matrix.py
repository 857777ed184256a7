"""The partner matrix: one ranking per partner, a candidates × partners table of the best viable PCE estimate,
and the overview page with the heatmap."""

from __future__ import annotations

import json
import math
import re

import pandas as pd
import pytest

from screen.cli import main
from screen.matrix import MATRIX_LEAD, matrix_folder, partner_matrix
from screen.report.matrix_page import heat_colour, render_overview

#: invented levels on the film scale (not measurements); KF-D03's LUMO lies below every acceptor's
LEVELS = ("id,name,smiles,homo_ev,lumo_ev,gap_opt_ev,scale,role\n"
          "KF-D01,Kestrel one,Cc1ccc(s1)-c1ccc(-c2ccc(C)s2)c2nsnc12,-5.40,-3.90,1.50,film,donor\n"
          "KF-D02,Kestrel two,c1ccc(-c2cccs2)s1,-5.55,-3.60,1.95,film,donor\n"
          "KF-D03,Kestrel three,c1ccsc1,-5.20,-4.45,0.75,film,donor\n")


def _ranking(rows):
    return pd.DataFrame(rows, columns=["id", "smiles", "pce_pct", "passes", "viable"])


def test_cells_hold_the_best_viable_estimate_and_nothing_when_not_viable():
    a = _ranking([["D1", "C", 9.0, True, True], ["D1", "C", 11.0, True, True],  # duplicate rows: the best
                  ["D2", "CC", 12.0, False, True],  # fails a filter: not in the cell
                  ["D3", "CCC", 5.0, True, False]])  # not viable
    b = _ranking([["D2", "CC", 7.5, True, True], ["D1", "C", float("nan"), True, True],
                  ["D3", "CCC", 2.0, True, True]])
    m = partner_matrix([("acc-a", a), ("acc-b", b)])
    assert list(m.columns) == MATRIX_LEAD + ["acc-a", "acc-b"]
    cells = m.set_index("id")
    assert cells.loc["D1", "acc-a"] == 11.0 and math.isnan(cells.loc["D1", "acc-b"])
    assert math.isnan(cells.loc["D2", "acc-a"]) and cells.loc["D2", "acc-b"] == 7.5
    assert math.isnan(cells.loc["D3", "acc-a"]) and cells.loc["D3", "acc-b"] == 2.0
    assert m["id"].tolist() == ["D1", "D2", "D3"]  # best estimate first
    assert cells.loc["D1", "best_partner"] == "acc-a" and cells.loc["D2", "best_partner"] == "acc-b"
    assert cells["viable_partners"].tolist() == [1, 1, 1]


def test_a_candidate_viable_with_no_partner_is_last_and_empty():
    a = _ranking([["D1", "C", float("nan"), False, False], ["D2", "CC", 3.0, True, True]])
    m = partner_matrix([("p", a)])
    assert m["id"].tolist() == ["D2", "D1"]
    assert m.loc[1, "best_partner"] == "" and math.isnan(m.loc[1, "best_pce_pct"])


def test_matrix_folder_depends_on_the_rankings_joined():
    assert matrix_folder(["y6--aaaa", "c60--aaaa"]) != matrix_folder(["y6--bbbb", "c60--aaaa"])
    assert re.fullmatch(r"matrix--[0-9a-f]{8}", matrix_folder(["y6--aaaa"]))


def test_heat_colours_are_ordered_and_text_stays_readable():
    low, mid, high = (heat_colour(v, 0, 10) for v in (0, 5, 10))
    assert len({low, mid, high}) == 3
    assert low[1] == "#1b1b1b" and high[1] == "#ffffff"  # dark text on light cells, light on dark


def test_overview_page_marks_not_viable_cells_and_links_reports():
    m = pd.DataFrame({"id": ["D<1>"], "name": [""], "smiles": ["c1ccsc1"], "best_partner": ["a"],
                      "best_pce_pct": [9.0], "viable_partners": [1], "a": [9.0], "b": [float("nan")]})
    page = render_overview(m, {"partners": [{"id": "a", "report": "../a--1/report.html"}, {"id": "b"}]},
                           created="2024-01-01")
    assert 'href="../a--1/report.html"' in page
    assert page.count('title="not viable"') == 1 and "D&lt;1&gt;" in page
    assert "<svg" in page and "http" not in page.replace("http://www.w3.org", "")  # self-contained
    assert 'class="caution"' not in page  # no device figures given: nothing to caution about
    # held-out figures on computed levels whose PCE did not rank published devices: the "best partner" by PCE is
    # cautioned on the page (figures as in models/device/computed_validation.json)
    comp = {"voc_mae_v": 0.055, "spearman_voc": 0.50, "spearman_pce": -0.17, "n": 45, "n_pce": 49,
            "protocol_id": "p"}
    page = render_overview(m, {"partners": [{"id": "a"}, {"id": "b"}],
                               "device_tests": {"film_levels": None, "computed_levels": comp}}, created="2024-01-01")
    assert 'class="caution"' in page and "\u22120.17" in page


def test_rank_with_several_partners_writes_rankings_matrix_and_overview(tmp_path, capsys):
    levels = tmp_path / "lv.csv"
    levels.write_text(LEVELS, encoding="utf-8")
    out = tmp_path / "out"
    rc = main(["rank", "--levels", str(levels), "--out", str(out), "--partner", "y6,c60", "--partner", "it-4f"])
    printed = capsys.readouterr().out
    assert rc == 0
    folders = sorted(p.name for p in (out / "rankings").iterdir())
    assert [f.split("--")[0] for f in folders] == ["c60", "it-4f", "matrix", "y6"]
    (matrix_dir,) = (out / "rankings").glob("matrix--*")
    assert str(matrix_dir / "matrix.csv") in printed
    matrix = pd.read_csv(matrix_dir / "matrix.csv")
    assert list(matrix.columns) == MATRIX_LEAD + ["y6", "c60", "it-4f"]
    # every cell is the estimate of that partner's own ranking
    for partner in ("y6", "c60", "it-4f"):
        (folder,) = (out / "rankings").glob(f"{partner}--*")
        ranking = pd.read_csv(folder / "ranking.csv").set_index("id")
        for _, row in matrix.iterrows():
            r = ranking.loc[row["id"]]
            if bool(r["passes"]) and bool(r.get("viable", True)):
                assert row[partner] == pytest.approx(r["pce_pct"])
            else:
                assert math.isnan(row[partner])
    assert math.isnan(matrix.set_index("id").loc["KF-D03", "y6"])  # LUMO below the acceptor's: not viable
    meta = json.loads((matrix_dir / "matrix.meta.json").read_text())
    assert [p["id"] for p in meta["partners"]] == ["y6", "c60", "it-4f"]
    # the user's own levels (no protocol): only the film-scale figures of the device model apply
    assert meta["device_tests"]["computed_levels"] is None and meta["device_tests"]["film_levels"]["n"] > 0
    page = (matrix_dir / "overview.html").read_text()
    assert all(f'href="../{p["folder"]}/report.html"' in page for p in meta["partners"])


def _matrix_cells(out, partner):
    """The matrix cells of one partner by id, and that partner's own viable estimates."""
    (matrix_dir,) = (out / "rankings").glob("matrix--*")
    cells = pd.read_csv(matrix_dir / "matrix.csv").set_index("id")[partner]
    (folder,) = (out / "rankings").glob(f"{partner}--*")
    ranking = pd.read_csv(folder / "ranking.csv").set_index("id")
    own = ranking["pce_pct"].where(ranking["passes"].astype(bool) & ranking["viable"].astype(bool))
    return matrix_dir, cells, own.reindex(cells.index)


def test_re_ranking_one_partner_of_changed_levels_rebuilds_the_matrix_and_marks_the_rest_stale(tmp_path, capsys):
    levels = tmp_path / "lv.csv"
    levels.write_text(LEVELS, encoding="utf-8")
    out = tmp_path / "out"
    assert main(["rank", "--levels", str(levels), "--out", str(out), "--partner", "y6,c60"]) == 0
    _, before, _ = _matrix_cells(out, "y6")
    levels.write_text(LEVELS.replace("-5.40,-3.90", "-5.80,-3.90"), encoding="utf-8")  # KF-D01: HOMO below y6's
    capsys.readouterr()
    assert main(["rank", "--levels", str(levels), "--out", str(out), "--partner", "y6"]) == 0
    err = capsys.readouterr().err
    matrix_dir, cells, own = _matrix_cells(out, "y6")
    assert not math.isnan(before["KF-D01"]) and math.isnan(cells["KF-D01"])  # the new ranking, not the old one
    pd.testing.assert_series_equal(cells, own, check_names=False)
    assert f"{levels.resolve()} changed since it was ranked" in err  # docs/contracts.md §5: said on stderr
    assert f"partner matrix {matrix_dir} rebuilt" in err and "the c60 column was ranked from an earlier version of" in err
    meta = json.loads((matrix_dir / "matrix.meta.json").read_text())
    assert meta["stale"]["partners"] == ["c60"] and meta["stale"]["current"]["partner"] == "y6"
    assert "--partner y6 --partner c60" in meta["stale"]["refresh"]
    page = (matrix_dir / "overview.html").read_text()
    assert 'id="stale"' in page and page.count("stale: earlier levels") == 1
    # ranking every partner again from the same levels brings the whole matrix up to date
    assert main(["rank", "--levels", str(levels), "--out", str(out), "--partner", "y6,c60"]) == 0
    err = capsys.readouterr().err  # the matrix of this very set is written once, after both partners: no stale line
    assert "changed since it was ranked" in err and "stale" not in err
    meta = json.loads((matrix_dir / "matrix.meta.json").read_text())
    assert meta["stale"] is None and 'id="stale"' not in (matrix_dir / "overview.html").read_text()


def _y6_c60_matrix(tmp_path):
    """Levels file, output folder and matrix folder of a y6 + c60 ranking of :data:`LEVELS`."""
    levels = tmp_path / "lv.csv"
    levels.write_text(LEVELS, encoding="utf-8")
    out = tmp_path / "out"
    assert main(["rank", "--levels", str(levels), "--out", str(out), "--partner", "y6,c60"]) == 0
    (matrix_dir,) = (out / "rankings").glob("matrix--*")
    return levels, out, matrix_dir


def test_re_ranking_the_same_levels_leaves_the_matrix_alone(tmp_path, capsys):
    levels, out, matrix_dir = _y6_c60_matrix(tmp_path)
    written = (matrix_dir / "matrix.meta.json").stat().st_mtime_ns
    capsys.readouterr()
    assert main(["rank", "--levels", str(levels), "--out", str(out), "--partner", "c60"]) == 0
    err = capsys.readouterr().err
    assert "replacing" not in err and "partner matrix" not in err
    assert (matrix_dir / "matrix.meta.json").stat().st_mtime_ns == written


def test_a_matrix_whose_other_ranking_is_gone_is_marked_stale_not_rebuilt(tmp_path, capsys):
    import shutil

    levels, out, matrix_dir = _y6_c60_matrix(tmp_path)
    before = (matrix_dir / "matrix.csv").read_bytes()
    (c60,) = (out / "rankings").glob("c60--*")
    shutil.rmtree(c60)
    levels.write_text(LEVELS.replace("-5.40,-3.90", "-5.80,-3.90"), encoding="utf-8")
    capsys.readouterr()
    assert main(["rank", "--levels", str(levels), "--out", str(out), "--partner", "y6"]) == 0
    err = capsys.readouterr().err
    assert f"{c60.name} is gone" in err and "could not be rebuilt" in err
    assert (matrix_dir / "matrix.csv").read_bytes() == before  # nothing to rebuild it from: kept, and said so
    meta = json.loads((matrix_dir / "matrix.meta.json").read_text())
    assert meta["stale"]["partners"] == ["y6", "c60"] and 'id="stale"' in (matrix_dir / "overview.html").read_text()


def test_a_run_that_re_ranks_its_partner_from_changed_levels_refreshes_the_matrix(tmp_path, capsys):
    # `dascreen run` re-ranks its partner inside the workflow, which removes the old ranking folder first, so the
    # ranking cannot see what it replaces; before, a matrix joining it kept the old numbers unmarked (audit)
    import shutil

    from screen.matrix import refresh_after_run

    levels, out, matrix_dir = _y6_c60_matrix(tmp_path)
    (y6,) = [p for p in (out / "rankings").iterdir() if p.name.startswith("y6--")]
    assert refresh_after_run(out, y6.name) == []  # same levels: nothing to do
    levels.write_text(LEVELS.replace("-5.40,-3.90", "-5.80,-3.90"), encoding="utf-8")
    shutil.rmtree(y6)  # what the workflow does before it runs the ranking rule again
    assert main(["rank", "--levels", str(levels), "--out", str(out), "--partner", "y6"]) == 0
    assert json.loads((matrix_dir / "matrix.meta.json").read_text())["stale"] is None  # unseen by the ranking
    capsys.readouterr()
    assert refresh_after_run(out, y6.name) == [matrix_dir]
    _, cells, own = _matrix_cells(out, "y6")
    pd.testing.assert_series_equal(cells, own, check_names=False)
    assert json.loads((matrix_dir / "matrix.meta.json").read_text())["stale"]["partners"] == ["c60"]
    assert f"partner matrix {matrix_dir} rebuilt" in capsys.readouterr().err


# --------------------------------------------------------------------------- meeting-17 audit
def test_same_role_cells_have_their_own_style_and_heads_count_only_candidates_that_pair(tmp_path, capsys):
    # the meeting-17 audit: same-role cells were a grey "—" titled "not viable", and "17/32 viable" counted the
    # candidates of the partner's own role
    levels = tmp_path / "lv.csv"
    levels.write_text(LEVELS + "KF-A01,Kestrel acceptor,c1ccc(-c2ccccn2)s1,-5.90,-3.95,1.80,film,acceptor\n",
                      encoding="utf-8")
    out = tmp_path / "out"
    assert main(["rank", "--levels", str(levels), "--out", str(out), "--partner", "y6,c60"]) == 0
    capsys.readouterr()
    (matrix_dir,) = (out / "rankings").glob("matrix--*")
    matrix = pd.read_csv(matrix_dir / "matrix.csv").set_index("id")
    assert math.isnan(matrix.loc["KF-A01", "y6"])  # the cell stays empty in matrix.csv ...
    meta = json.loads((matrix_dir / "matrix.meta.json").read_text())
    y6 = meta["partners"][0]
    assert y6["not_paired"] == ["KF-A01"] and y6["paired"] == 3 and y6["ranked"] == 4  # ... and is listed here
    assert "not paired" in meta["cell"]
    page = (matrix_dir / "overview.html").read_text()
    assert f"<small>{y6['viable']}/3 viable</small>" in page and "/4 viable" not in page
    row = next(line for line in page.split("<tr>") if "KF-A01" in line)
    assert row.count('class="np" title="not paired (same role)') == 2 and 'title="not viable"' not in row
    assert "not paired (same role)" in page.split("<table>")[0]  # in the legend


def test_alignment_uncertain_cells_carry_a_marker_and_a_tooltip():
    from screen.matrix import cell_notes
    from screen.report.matrix_page import UNCERTAIN_TITLE

    ranking = pd.DataFrame({"id": ["D1", "D2", "A1"], "smiles": ["C", "CC", "CCC"], "pce_pct": [9.0, 8.0, None],
                            "passes": [True, True, False], "viable": [True, True, False],
                            "flags": ["alignment_uncertain;chain_fit_poor", "", "same_role_as_partner"]})
    notes = cell_notes(ranking)
    assert notes == {"paired": 2, "not_paired": ["A1"], "alignment_uncertain": ["D1"]}
    m = partner_matrix([("y6", ranking)])
    page = render_overview(m, {"partners": [{"id": "y6", "viable": 2, "ranked": 3, **notes}]}, created="2024-01-01")
    d1 = next(line for line in page.split("<tr>") if "D1</th>" in line)
    assert 'class="unc"' in d1 and f'title="{UNCERTAIN_TITLE}"' in d1
    assert '<sup class="unc" aria-hidden="true">?</sup>' in d1
    d2 = next(line for line in page.split("<tr>") if "D2</th>" in line)
    assert "unc" not in d2
    assert "P(aligned) between 0.25 and 0.75" in UNCERTAIN_TITLE and "2/2 viable" in page
