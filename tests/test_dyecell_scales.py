"""Dye-cell mode after a dye-cell user's audit: scale hints, provenance of converted potentials, solvent clashes,
p-type thresholds and wording, plausibility notices and input cosmetics (fast, no engine).

Numeric check values name their source; recalled values are marked ``# from memory``,
rules of thumb ``# common practice``.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import pandas as pd
import pytest

from screen.dyecell import scales
from screen.dyecell.flags import describe
from screen.dyecell.library import Material, resolve_mediator, resolve_oxide
from screen.dyecell.model import DEFAULT_REG_THRESHOLD_EV, DyeCellModel, evaluate
from screen.dyecell.rank import dyes_from_file
from screen.dyecell.stage import read_input, run_dyecell
from screen.errors import InputError, ScaleMismatchError

ANCHORED = "OC(=O)c1ccccc1"  # benzoic acid: a carboxylic-acid anchor


def _oxide(edge, typ="n", ident="test-oxide"):
    return Material(id=ident, name=ident, role="oxide", potential_v_nhe=edge, type=typ, slug=ident)


def _mediator(e, thr=math.nan, ident="test-mediator"):
    return Material(id=ident, name=ident, role="mediator", potential_v_nhe=e, min_drive_reg_ev=thr, slug=ident)


def _write(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


# --------------------------------------------------------------------------- 1. the conversion hint per scale

def test_film_hint_uses_the_film_scale_ferrocene_level_not_the_absolute_nhe_potential():
    # dascreen's film scale puts Fc at -4.8 eV (docs/contracts.md section 6; Pommerehne et al. 1995, from memory);
    # Fc+/Fc = +0.63 V vs NHE in acetonitrile (screen/data/electrodes.csv, DSSC convention read in
    # Int. J. Photoenergy 2009, 471828): a film HOMO of -5.30 eV is +0.50 V vs Fc = 1.13 V vs NHE
    from screen.calibration.reference import FC_REFERENCE_EV

    assert scales.FILM_FC_EV == FC_REFERENCE_EV == -4.8
    hint = scales.conversion_hint("film")
    assert "E vs NHE [V] = -E_film [eV] - 4.8 + E(Fc+/Fc vs NHE in the solvent)" in hint
    assert "a film HOMO of -5.30 eV is +0.50 V vs Fc+/Fc = 1.13 V vs NHE in acetonitrile" in hint
    assert "0.86 V" not in hint and "- 4.44" not in hint
    with pytest.raises(ScaleMismatchError) as err:
        dyes_from_file(pd.DataFrame({"id": ["d"], "e_ox_v_nhe": [1.0], "e00_ev": [2.0], "scale": ["film"]}), "d.csv")
    assert "1.13 V vs NHE" in str(err.value) and "0.86 V" not in str(err.value)


def test_gas_hint_gives_no_conversion_and_points_to_the_dye_models():
    # a gas-phase IP lacks the solvation of the oxidised dye: -IP - 4.44 is no potential in solution
    hint = scales.conversion_hint("gas")
    assert "no honest conversion" in hint and "solvation" in hint
    assert "dascreen dyecell CANDIDATES" in hint and "0.86 V" not in hint
    levels = pd.DataFrame({"id": ["d"], "homo_ev": [-6.3], "lumo_ev": [-1.5], "gap_opt_ev": [2.4], "scale": ["gas"]})
    with pytest.raises(ScaleMismatchError) as err:
        dyes_from_file(levels, "gas.csv")
    assert "dascreen dyecell CANDIDATES" in str(err.value) and "- 4.44 (" not in str(err.value)


def test_plain_vacuum_hint_keeps_trasatti_with_its_caveat():
    # Trasatti 1986 (IUPAC): E_abs(NHE) = 4.44 V, so -5.30 eV on the absolute scale is 0.86 V vs NHE
    hint = scales.conversion_hint("vacuum")
    assert "E vs NHE [V] = -E_vacuum [eV] - 4.44" in hint and "0.86 V" in hint
    assert "only for an energy on the absolute electrochemical scale" in hint
    with pytest.raises(ScaleMismatchError, match="only for an energy on the absolute"):
        scales.require_scale(["vacuum"], "levels.csv")


def test_report_axis_says_it_differs_from_the_film_scale(tmp_path):
    # vacuum axis -e(E + 4.44 V): Fc in MeCN (+0.63 V) at -5.07 eV; the film scale puts it at -4.8 eV: 0.27 eV
    f = _write(tmp_path / "d.csv", f"id,e_ox_v_nhe,e00_ev,smiles\nd1,1.10,2.0,{ANCHORED}\n")
    path = run_dyecell(f, tmp_path / "o", oxide="tio2-anatase", mediator="co-bpy3", settings={"n_samples": 50})
    page = (path.parent / "report.html").read_text(encoding="utf-8")
    caption = page[page.index("<figcaption"):page.index("</figcaption>")]
    assert "0.27 eV" in caption and "\u22124.8 eV" in caption and "\u22125.07 eV" in caption


# --------------------------------------------------------------------------- 2. provenance of converted potentials

def test_converted_potentials_keep_their_reference_offset_and_recall_flag(tmp_path):
    # electrodes.csv: fc-dcm +0.70 V (Connelly and Geiger 1996, from memory), sce +0.241 V (Bard and Faulkner, read)
    f = _write(tmp_path / "d.csv", "id,e_ox_v,reference,solvent,e00_ev,smiles\n"
                                   f"a,0.40,Fc,dichloromethane,2.0,{ANCHORED}\n"
                                   f"b,0.79,SCE,,2.0,{ANCHORED}\n")
    table = dyes_from_file(pd.read_csv(f, keep_default_na=False), str(f))
    assert table["e_ox_reference"].tolist() == ["fc-dcm", "sce"]
    assert table["e_ox_offset_v"].tolist() == pytest.approx([0.70, 0.241])
    path = run_dyecell(f, tmp_path / "o", oxide="tio2-anatase", mediator="co-bpy3", settings={"n_samples": 50})
    r = pd.read_csv(path, keep_default_na=False).set_index("id")
    assert r.loc["a", "e_ox_reference"] == "fc-dcm" and r.loc["a", "e_ox_offset_v"] == pytest.approx(0.70)
    meta = json.loads((path.parent / "ranking.meta.json").read_text())
    conv = {c["reference"]: c for c in meta["e_ox_conversions"]}
    assert conv["fc-dcm"]["from_memory"] is True and conv["fc-dcm"]["offset_v"] == pytest.approx(0.70)
    assert conv["sce"]["from_memory"] is False and conv["sce"]["rows"] == 1
    page = (path.parent / "report.html").read_text(encoding="utf-8")
    assert 'id="e-ox-conversions"' in page and "recalled" in page and "+0.70 V" in page


def test_report_words_the_source_by_what_the_file_says(tmp_path):
    f = _write(tmp_path / "d.csv", f"id,e_ox_v_nhe,e00_ev,smiles,source\nd1,1.10,2.0,{ANCHORED},calibrated from xTB\n")
    path = run_dyecell(f, tmp_path / "o", oxide="tio2-anatase", mediator="co-bpy3", settings={"n_samples": 50})
    page = (path.parent / "report.html").read_text(encoding="utf-8")
    assert "measured values of the input file" not in page and "measured potentials from the input file" not in page
    assert "calibrated from xTB" in page[:page.index('<h2 id="shortlist"')]
    plain = _write(tmp_path / "p.csv", f"id,e_ox_v_nhe,e00_ev,smiles\nd1,1.10,2.0,{ANCHORED}\n")
    path = run_dyecell(plain, tmp_path / "o2", oxide="tio2-anatase", mediator="co-bpy3", settings={"n_samples": 50})
    page = (path.parent / "report.html").read_text(encoding="utf-8")
    assert "measured values of the input file" not in page and "no source column" in page


# --------------------------------------------------------------------------- 3. a reference id that names another solvent

def test_reference_id_and_solvent_that_disagree_are_refused(tmp_path):
    med = _write(tmp_path / "m.csv", "id,e_redox_v,reference,solvent\nm,-0.07,fc-mecn,dichloromethane\n")
    with pytest.raises(InputError, match=r"reference = 'fc-mecn' \(Fc\+/Fc in acetonitrile\) and solvent = "
                                         r"'dichloromethane' disagree"):
        resolve_mediator(str(med))
    ox = _write(tmp_path / "o.csv", "id,band_edge_v,reference,solvent,type\nx,-1.13,fc-dcm,acetonitrile,n\n")
    with pytest.raises(InputError, match="disagree"):
        resolve_oxide(str(ox))
    frame = pd.DataFrame({"id": ["d1"], "e_ox_v": [0.40], "e_ox_reference": ["fc-dcm"], "solvent": ["MeCN"],
                          "e00_ev": [2.0]})
    with pytest.raises(InputError, match=r"line 2 \(id 'd1'\).*disagree"):
        dyes_from_file(frame, "d.csv")
    # the same solvent in both, or an id without a solvent column, is fine: +0.70 V in CH2Cl2 (electrodes.csv)
    assert dyes_from_file(frame.assign(solvent=["CH2Cl2"]))["e_ox_v_nhe"][0] == pytest.approx(1.10)
    assert scales.reference_vs_nhe_v("fc-dcm") == pytest.approx(0.70)


# --------------------------------------------------------------------------- 4. a mediator's own threshold is n-type

def test_mediator_own_threshold_applies_to_the_n_type_step_only():
    # iodide/triiodide's 0.5 eV is for regenerating the oxidised dye via I2-/I- (mediators.csv notes; Boschloo and
    # Hagfeldt 2009, from memory); the p-type step (reduced dye -> triiodide) takes the general 0.2 eV (common practice)
    iodide = resolve_mediator("iodide-triiodide")
    nio, tio2 = resolve_oxide("nio"), resolve_oxide("tio2-anatase")
    m = DyeCellModel()
    assert m.reg_threshold_ev(iodide, tio2) == 0.5
    assert m.reg_threshold_ev(iodide, nio) == DEFAULT_REG_THRESHOLD_EV == 0.2
    assert DyeCellModel(min_drive_reg_ev=0.7).reg_threshold_ev(iodide, nio) == 0.7
    # NiO (+0.50 V) with iodide (+0.35 V): E(S/S-) = 1.05 - 1.00 = +0.05 V, drive_reg = 0.35 - 0.05 = 0.30 eV
    out = evaluate(m, [1.05], [1.00], nio, iodide)
    assert out["drive_reg_ev"][0] == pytest.approx(0.30)
    assert out["viable"][0]                                   # 0.30 eV >= 0.2 eV (was refused against 0.5 eV)
    bad = evaluate(m, [1.30], [1.00], nio, iodide)            # E(S/S-) = +0.30 V: drive_reg 0.05 eV < 0.2 eV
    assert not bad["viable"][0]
    assert "iodide-triiodide's own 0.50 eV" in bad["viability"][0] and "n-type" in bad["viability"][0]


def test_p_type_report_does_not_call_the_default_the_mediators_own(tmp_path):
    f = _write(tmp_path / "d.csv", f"id,e_ox_v_nhe,e00_ev,smiles\nd1,1.05,1.00,{ANCHORED}\n")
    path = run_dyecell(f, tmp_path / "o", oxide="nio", mediator="iodide-triiodide", settings={"n_samples": 50})
    meta = json.loads((path.parent / "ranking.meta.json").read_text())
    assert meta["regeneration_threshold_ev"] == 0.2
    page = (path.parent / "report.html").read_text(encoding="utf-8")
    card = page[page.index('id="card-model"'):page.index("</section>", page.index('id="card-model"'))]
    assert "this mediator\u2019s own)" not in card and "(set;" not in card
    assert "n-type" in card and "0.50 eV" in card


# --------------------------------------------------------------------------- 5. p-type meaning of e_ox_excited_v_nhe

def test_p_type_meaning_of_the_excited_column_is_stated(tmp_path):
    f = _write(tmp_path / "d.csv", f"id,e_ox_v_nhe,e00_ev,smiles\nd1,1.20,2.0,{ANCHORED}\n")
    path = run_dyecell(f, tmp_path / "o", oxide="nio", mediator="iodide-triiodide", settings={"n_samples": 50})
    meta = json.loads((path.parent / "ranking.meta.json").read_text())
    assert "e_ox_excited_v_nhe holds E(S/S-)" in meta["sign_convention"]
    page = (path.parent / "report.html").read_text(encoding="utf-8")
    files = page[page.index('<footer id="files">'):]
    assert "e_ox_excited_v_nhe" in files and "E(S/S\u207b)" in files
    # electrochemical gap > E00 (exciton binding): the true E(S/S-) is more negative than E(S+/S) - E00, so the
    # estimate overstates hole injection (E(S*/S-) lower) and understates regeneration (E_redox - E(S/S-) larger)
    text = describe("p_type_estimate")
    assert "overstates the hole-injection" in text and "understates the regeneration" in text


# --------------------------------------------------------------------------- 6. plausibility notices

def test_values_outside_the_library_range_get_a_sign_slip_notice(tmp_path, capsys):
    from screen.dyecell.library import plausibility_notice

    # library (screen/data/mediators.csv): +0.35 (iodide/triiodide) ... +0.97 V ([Cu(dmby)2]); n-type edges
    # -0.5 ... 0.0 V
    # (semiconductors.csv); 0.3 V margin (common practice)
    slip = _write(tmp_path / "m.csv", "id,e_redox_v_nhe\nslip,-0.35\n")
    text = plausibility_notice(resolve_mediator(str(slip)))
    assert "+0.35...+0.97 V" in text and "mediators.csv" in text and "sign slip" in text
    assert "iodide-triiodide" in text
    assert plausibility_notice(resolve_mediator("cu-dmby2")) == ""
    assert plausibility_notice(resolve_oxide("sno2")) == ""
    for edge in ("0.5", "1.76"):
        ox = _write(tmp_path / f"o{edge}.csv", f"id,band_edge_v_nhe,type\nx,{edge},n\n")
        assert "n-type" in plausibility_notice(resolve_oxide(str(ox)))
    assert "type = p" in plausibility_notice(resolve_oxide(str(tmp_path / "o0.5.csv")))
    f = _write(tmp_path / "d.csv", f"id,e_ox_v_nhe,e00_ev,smiles\nd1,1.20,2.0,{ANCHORED}\n")
    path = run_dyecell(f, tmp_path / "o", oxide="nio", mediator=str(slip), settings={"n_samples": 50})
    assert "sign" in capsys.readouterr().err
    meta = json.loads((path.parent / "ranking.meta.json").read_text())
    assert meta["notices"] and "sign" in meta["notices"][0]
    page = (path.parent / "report.html").read_text(encoding="utf-8")
    assert 'id="caution-values"' in page


# --------------------------------------------------------------------------- 7. input cosmetics

def test_list_prints_the_reference_electrodes(capsys):
    from screen.dyecell.cli import _print_libraries

    _print_libraries()
    out = capsys.readouterr().out
    assert "fc-dcm" in out and "electrodes.csv" in out and "dichloromethane" in out


def test_one_row_files_name_the_columns_read(tmp_path):
    ox = _write(tmp_path / "o.csv", "id,Band_Edge_V_NHE,Type\nupper,-0.5,N\n")
    with pytest.raises(InputError, match=r"found none.*'Band_Edge_V_NHE'.*band_edge_v_nhe"):
        resolve_oxide(str(ox))
    med = _write(tmp_path / "m.csv", "id,E_redox [V vs NHE]\nunits2,0.56\n")
    with pytest.raises(InputError, match=r"found none.*'E_redox \[V vs NHE\]'"):
        resolve_mediator(str(med))


def test_dye_file_header_blanks_are_stripped(tmp_path):
    f = _write(tmp_path / "d.csv", "id, e_ox_v_nhe, e00_ev\nd1, 1.03, 2.0\n")
    _, frame, _ = read_input(f)
    assert list(frame.columns) == ["id", "e_ox_v_nhe", "e00_ev"]
    assert dyes_from_file(frame)["e_ox_v_nhe"][0] == pytest.approx(1.03)
    # ids that look like numbers stay the text given (a maintainer's review: '007' and '1e3' became 7.0 and 1000.0)
    f = _write(tmp_path / "n.csv", "name, id, e_ox_v_nhe, e00_ev\nbond, 007, 1.03, 2.0\nkilo, 1e3, 1.05, 2.1\n")
    _, frame, _ = read_input(f)
    assert frame["id"].tolist() == ["007", "1e3"] and frame["name"].tolist() == ["bond", "kilo"]


def test_decimal_comma_is_named(tmp_path):
    med = _write(tmp_path / "m.csv", 'id,e_redox_v_nhe\ncomma,"0,56"\n')
    with pytest.raises(InputError, match=r"decimal comma.*0\.56"):
        resolve_mediator(str(med))
    with pytest.raises(InputError, match=r"decimal comma.*1\.03"):
        dyes_from_file(pd.DataFrame({"id": ["d1"], "e_ox_v_nhe": ["1,03"], "e00_ev": ["2.0"]}), "d.csv")


def test_zero_driving_force_is_worded_as_zero():
    # TiO2-like edge -0.50 V: E(S+/S*) = 1.50 - 2.00 = -0.50 V, drive_inj = 0; mediator at E(S+/S): drive_reg = 0
    out = evaluate(DyeCellModel(), [1.50], [2.00], _oxide(-0.50), _mediator(1.50))
    why = out["viability"][0]
    assert out["drive_inj_ev"][0] == 0.0 and out["drive_reg_ev"][0] == 0.0
    assert "only slightly" not in why and why.count("at the same potential as") == 2
    p = evaluate(DyeCellModel(), [0.50], [1.00], _oxide(0.50, "p"), _mediator(-0.50))
    assert "only slightly" not in p["viability"][0] and p["viability"][0].count("at the same potential as") == 2


def test_a_fed_back_conversion_trace_is_read_with_its_solvent():
    # a maintainer's review: a row given vs NHE with its trace Fc in DMF (+0.69 V vs NHE, electrodes.csv, from memory)
    # was recorded as fc-mecn (+0.63 V, acetonitrile); a trace that matches no electrode counts as given vs NHE
    from screen.dyecell.rank import _conversions

    frame = pd.DataFrame({"id": ["dmf", "none", "mecn"], "e_ox_v_nhe": [1.09, 1.09, 1.03],
                          "e_ox_reference": ["Fc", "Fc", "fc-mecn"], "solvent": ["DMF", "", "acetonitrile"],
                          "e_ox_offset_v": [0.69, 0.69, 0.63], "e00_ev": [2.0, 2.0, 2.0]})
    ids, offsets = _conversions(frame)
    assert ids == ["fc-dmf", "nhe", "fc-mecn"] and offsets.tolist() == [0.69, 0.0, 0.63]
