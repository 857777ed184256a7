"""The dye-cell ranking folder is complete or visibly not: the earlier ranking's files are removed before the new
ranking is written, ``ranking.meta.json`` is written last and records what became of the report (as
``dascreen rank``, :func:`screen.rank_io.run_rank`).  A dye file of measured potentials; no engine.

No physical check values: the potentials of the dye file below are an input, not a checked number.
"""

from __future__ import annotations

import json

from screen.cli import main


def _dye_file(tmp_path):
    f = tmp_path / "dyes.csv"
    f.write_text("id,e_ox_v_nhe,e00_ev\nY1,1.05,2.1\n", encoding="utf-8")
    return f


def _folder(out):
    (meta,) = (out / "dyecell").glob("*/ranking.meta.json")
    return meta.parent


def _args(levels, out):
    return ["dyecell", "--levels", str(levels), "--out", str(out), "--set", "dyecell.n_samples=100"]


def test_ordinary_dye_ranking_records_the_report_written(tmp_path):
    out = tmp_path / "o"
    assert main(_args(_dye_file(tmp_path), out)) == 0
    folder = _folder(out)
    meta = json.loads((folder / "ranking.meta.json").read_text(encoding="utf-8"))
    assert meta["report"] == "written"
    assert {"ranking.csv", "ranking.safe.csv", "report.html", "shortlist.sdf"} <= {p.name for p in folder.iterdir()}


def test_failed_dye_report_leaves_no_old_report_and_the_meta_says_failed(tmp_path, monkeypatch, capsys):
    import screen.dyecell.page as page

    levels, out = _dye_file(tmp_path), tmp_path / "o"
    assert main(_args(levels, out)) == 0
    folder = _folder(out)
    assert (folder / "report.html").is_file()
    capsys.readouterr()

    def broken(*args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(page, "write_dyecell_report", broken)
    code = main(_args(levels, out))
    err = capsys.readouterr().err
    assert code != 0
    assert not (folder / "report.html").exists()  # the earlier ranking's report is not left beside the new one
    assert not (folder / "ranking.safe.csv").exists()
    assert (folder / "ranking.csv").is_file()
    meta = json.loads((folder / "ranking.meta.json").read_text(encoding="utf-8"))
    assert meta["report"].startswith("failed: OSError")
    assert "No space left on device" in meta["report"]
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    assert "report failed" in lines[0] and "No space left on device" in lines[0]
    assert "Traceback" not in err


def test_dye_ranking_without_report_records_off(tmp_path):
    from screen.dyecell.stage import run_dyecell

    path = run_dyecell(_dye_file(tmp_path), tmp_path / "o", settings={"n_samples": 100}, report=False)
    meta = json.loads((path.parent / "ranking.meta.json").read_text(encoding="utf-8"))
    assert meta["report"] == "off"
    assert not (path.parent / "report.html").exists()
