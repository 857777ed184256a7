"""Which calibration produced the numbers, and what the report and the console say about it.

A custom-calibration audit found the report quoting the shipped calibration's held-out device figures for levels
computed with a group's own calibration (same protocol id), naming only the models folder, and a broken
calibration ending the console line at "6 problems (first 5 shown):;". A security audit found ids and names that
reorder the text around them (U+202E), a level diagram whose label text was rewritten like an SVG attribute, and
SD-file data lines as long as the id (a 5000-character id; V2000 readers take 200).
"""

from __future__ import annotations

import json
import re
import shutil

import pandas as pd
import pytest

from screen.cli import main
from screen.devicepars import FITTED_PATH, device_tests
from screen.provenance import calibration_record

#: the shipped calibrations (``screen.devicepars.SHIPPED_MODELS``), one folder per protocol id
SHIPPED_MODELS = FITTED_PATH.parent.parent

#: σ from a calibration fitted on reference levels written in meV, as the audit's run_mv gave them [eV]
#: (1000 × a film-HOMO σ of 0.653 eV; the values only need to be ≥ 10 eV, which no calibration gives)
BROKEN_SIGMA_EV = 652.901


def _shipped_protocol() -> str:
    """A shipped protocol with held-out device figures on its computed levels."""
    for folder in sorted(SHIPPED_MODELS.iterdir()):
        if (folder / "ip.json").is_file() and device_tests("fitted", folder.name)["computed_levels"]:
            return folder.name
    pytest.skip("no shipped protocol with device figures on computed levels")


def _levels(tmp_path, calibration: dict, name: str = "levels.csv", sigma: float = 0.1, computed: bool = False):
    """A two-donor levels file with a sidecar naming ``calibration`` (a run's own rows when ``computed``)."""
    folder = tmp_path / name.removesuffix(".csv")
    folder.mkdir()
    path = folder / name
    rows = pd.DataFrame({"id": ["D1", "D2"], "name": ["one", "two"], "role": "donor",
                         "smiles": ["c1ccc(-c2cccs2)s1", "c1ccc2c(c1)sc1ccccc12"],
                         "homo_ev": [-5.45, -5.3], "lumo_ev": [-3.05, -3.0], "gap_opt_ev": [2.2, 2.1],
                         "homo_sigma_ev": [sigma, 0.1], "lumo_sigma_ev": 0.1, "gap_opt_sigma_ev": 0.1,
                         "scale": "film", "status": "ok"})
    if computed:
        rows["xtb_ip_ev"] = [7.1, 7.0]
    rows.to_csv(path, index=False)
    meta = {"protocol_id": calibration["protocol_id"], "models": calibration["folder"],
            "calibration_models": calibration}
    (folder / f"{name}.meta.json").write_text(json.dumps(meta), encoding="utf-8")
    return path


def _custom(tmp_path, protocol: str) -> dict:
    """A custom calibration of the shipped protocol id: the shipped files with one model file changed."""
    folder = tmp_path / "models-lab" / protocol
    shutil.copytree(SHIPPED_MODELS / protocol, folder)
    ip = folder / "ip.json"
    ip.write_text(ip.read_text(encoding="utf-8") + "\n", encoding="utf-8")
    return calibration_record(folder)


def _rank(capsys, levels, out):
    rc = main(["rank", "--levels", str(levels), "--partner", "y6", "--out", str(out)])
    err = capsys.readouterr().err
    assert rc == 0, err
    folder = next((out / "rankings").iterdir())
    return (folder / "report.html").read_text(encoding="utf-8"), json.loads(
        (folder / "ranking.meta.json").read_text(encoding="utf-8"))


def _card(page: str, card: str) -> str:
    return re.search(rf'<section class="card" id="card-{card}">.*?</section>', page, re.S).group(0)


def test_device_figures_on_computed_levels_are_shown_only_for_the_calibration_they_were_measured_with(
        tmp_path, capsys):
    protocol = _shipped_protocol()
    shipped = calibration_record(SHIPPED_MODELS / protocol)
    figures = device_tests("fitted", protocol)["computed_levels"]
    mae = f"V<sub>oc</sub> MAE {figures['voc_mae_v']:.3f} V".replace("-", "\u2212")
    said = f"levels computed with <code>{protocol}</code> (each material left out of the calibration)"

    page, meta = _rank(capsys, _levels(tmp_path, shipped), tmp_path / "shipped")
    device = _card(page, "device")
    assert said in device and mae in device
    measured_with = meta["device_tests"]["computed_levels"].get("measured_with")

    custom = _custom(tmp_path, protocol)
    page, meta = _rank(capsys, _levels(tmp_path, custom, "lab.csv"), tmp_path / "lab")
    device = _card(page, "device")
    assert said not in device and mae not in device, device
    assert ("levels computed with this ranking's calibration: not tested on published devices (the device figures "
            f"for levels computed with <code>{protocol}</code> were measured with the shipped calibration of that "
            "protocol, not with this one)") in device
    # the caution is judged on the measured levels, whose figures do not depend on the calibration
    assert "On computed levels the estimated PCE" not in page
    # ranking.meta.json names the calibration the figures were measured with
    assert measured_with["models_sha256"] == shipped["models_sha256"]
    assert meta["device_tests"]["shipped_calibration"]["models_sha256"] == shipped["models_sha256"]


def test_the_report_says_which_calibration_produced_the_numbers(tmp_path, capsys):
    protocol = _shipped_protocol()
    shipped = calibration_record(SHIPPED_MODELS / protocol)
    page, _ = _rank(capsys, _levels(tmp_path, shipped), tmp_path / "shipped")
    card = _card(page, "protocol")
    assert (f"<dd>shipped with dascreen for <code>{protocol}</code> (models sha256 {shipped['models_sha256'][:12]}"
            f"\u2026, reference data sha256 {shipped['reference_sha256'][:12]}\u2026)</dd>") in card, card

    custom = _custom(tmp_path, protocol)
    page, _ = _rank(capsys, _levels(tmp_path, custom, "lab.csv"), tmp_path / "lab")
    card = _card(page, "protocol")
    assert (f"<dd>custom: <code>{custom['folder']}</code>, not the calibration shipped for <code>{protocol}</code> "
            f"(models sha256 {custom['models_sha256'][:12]}\u2026, reference data sha256 "
            f"{custom['reference_sha256'][:12]}\u2026)</dd>") in card, card
    assert custom["models_sha256"] != shipped["models_sha256"]


def test_a_sigma_from_a_broken_calibration_names_the_calibration_not_a_unit_fix(tmp_path, capsys):
    protocol = _shipped_protocol()
    custom = _custom(tmp_path, protocol)
    levels = _levels(tmp_path, custom, "mv.csv", sigma=BROKEN_SIGMA_EV, computed=True)
    rc = main(["rank", "--levels", str(levels), "--partner", "y6", "--out", str(tmp_path / "mv")])
    err = capsys.readouterr().err
    assert rc == 2, err
    assert (f"column homo_sigma_ev = {BROKEN_SIGMA_EV:g}: a σ of {BROKEN_SIGMA_EV:g} eV is no calibration's (a run's "
            f"own σ stays below 10 eV): the calibration in {custom['folder']} gave an implausible value; refit it "
            "(`dascreen calibrate`, reference levels in eV) or run with the shipped calibration") in err, err
    assert "write 0.653 eV" not in err


def test_the_console_line_of_a_stopped_workflow_carries_the_first_listed_problem():
    from screen.launch import failure_cause

    # the engine's log of the audit's run_mv (shortened): the rank job's own message lists its problems below it
    first = ("line 2 (id 'KF-D01'), column homo_sigma_ev = 652.901: a σ of 652.901 eV is no calibration's (a run's "
             "own σ stays below 10 eV): the calibration in /lab/models-mv/p-1 gave an implausible value")
    log = ("Error in rule rank:\n    jobid: 3\n================\n"
           "dascreen: error: /r/levels.csv: 6 problems (first 5 shown):\n"
           f"  {first}\n  line 2 (id 'KF-D01'), column lumo_sigma_ev = 64.8313: …\n================\n")
    assert failure_cause(log) == f"/r/levels.csv: 6 problems, the first: {first}"


HOSTILE = 'K id="Z" d="1.234567" href="#q"'


def test_the_level_diagram_keeps_the_text_of_its_labels():
    from screen.report.figures import level_diagram_svg

    rows = pd.DataFrame({"rank": [1], "id": [HOSTILE], "homo_ev": [-5.4], "lumo_ev": [-3.9], "delta_lumo_ev": [0.4]})
    svg = level_diagram_svg(rows, {"id": "ref", "homo_ev": -6.0, "lumo_ev": -4.3}, {})
    assert "fig-levels-Z" not in svg and "#fig-levels-q" not in svg
    assert 'K id="Z" d="1\u2026' in svg  # the id shortened to 14 characters, as drawn
    # the attributes are still rewritten: prefixed ids, rounded geometry
    assert 'id="fig-levels-' in svg and not re.search(r'\sd="[^"]*\d\.\d{3}', svg)


#: U+202E (RIGHT-TO-LEFT OVERRIDE) as a page may carry it: the character, or a decimal or hexadecimal reference
RLO = "(?:\u202e|&#8238;|&#x0*202e;)"


def _where(page: str, at: int) -> str:
    """Where the text at ``page[at]`` is: "hidden" (inside a tag, an attribute value; or a figure label, its own text
    element), "isolated" (inside an element the page isolates), else the start of the element it is in."""
    before = page[:at]
    if before.rfind("<") > before.rfind(">"):  # inside a tag: an attribute value, never laid out
        return "hidden"
    if "<svg" in before and before.rfind("<svg") > before.rfind("</svg>"):  # a figure label: its own text
        return "hidden"
    tag = before[before.rfind("<"):]
    if tag.startswith(("<bdi>", '<span class="cid">', '<span class="cname">', '<td class="cid">')):
        return "isolated"
    if tag.startswith("<strong>"):  # isolated by the style sheet in the summary and the page head
        if before[before.rfind("<p "):].startswith(('<p class="summary">', '<p class="sub">')):
            return "isolated"
    return tag[:80]


def _check_isolated(page: str, prefixes=("D1", "one")) -> None:
    """Every appearance of an id or name ``prefix + U+202E`` in the page's text (the character as it is or as a
    character reference) is inside an isolating element, each is laid out at least once (the check is not vacuous),
    and the override appears nowhere else."""
    for prefix in prefixes:
        laid_out = 0
        for match in re.finditer(re.escape(prefix) + RLO, page, re.I):
            where = _where(page, match.start())
            if where != "hidden":
                assert where == "isolated", (where, page[match.start() - 120:match.end()])
                laid_out += 1
        assert laid_out >= 1, f"{prefix!r} + U+202E is laid out nowhere in the page"
    every = [m.start() for m in re.finditer(RLO, page, re.I)]
    ours = [m.start(1) for m in re.finditer(f"(?:{'|'.join(map(re.escape, prefixes))})({RLO})", page, re.I)]
    assert every == ours, [page[i - 40:i + 10] for i in sorted(set(every) - set(ours))]


def test_ids_and_names_are_isolated_from_the_text_around_them(tmp_path, capsys):
    protocol = _shipped_protocol()
    levels = _levels(tmp_path, calibration_record(SHIPPED_MODELS / protocol))
    table = pd.read_csv(levels)
    table["id"] = ["D1\u202e", "D2"]
    table["name"] = ["one\u202e", "two"]
    table.to_csv(levels, index=False)
    page, _ = _rank(capsys, levels, tmp_path / "out")
    assert ".cid,.cname,p.summary strong,p.sub strong{unicode-bidi:isolate}" in page
    _check_isolated(page)


def test_sd_data_lines_are_cut_at_200_characters_but_not_the_smiles():
    # a 5000-character id became a 5000-character SD data line (V2000 readers accept 200); the SMILES stays whole
    # because `dascreen run shortlist.sdf` reads a polymer back from it
    from rdkit import Chem

    from screen.rank_io import _set_sd_props

    mol = Chem.MolFromSmiles("c1ccsc1")
    long_smiles = "C" * 250
    _set_sd_props(mol, {"id": "K" * 5000, "name": "n\r=1+1", "smiles": long_smiles}, "film", "mkey", "computed", None)
    assert len(mol.GetProp("id")) == 200 and mol.GetProp("id").endswith("...")
    assert mol.GetProp("_Name") == "K" * 77 + "..." and mol.GetProp("name") == "n =1+1"
    assert mol.GetProp("smiles") == long_smiles
