"""A lab's own reference rows are checked when the reference sets are read (``screen.calibration.refcheck``).

The findings of an audit: a second lab adding rows to a copy of ``models/reference/`` and refitting with
``dascreen calibrate --from-raw ... --reference MYREF`` got a calibration written (exit 0) from levels in
millivolts, a positive HOMO, a ferrocene level of +4.8 eV or "Ag/AgCl", an optical gap in nm, "n/a" or a decimal
comma (silently dropped), LUMO below HOMO, an unparsable SMILES (silently dropped), one material twice (counted
twice in the level fits) and a row without a source. Each must now be refused before any work, in one message
naming the file, the line, the column, the value and the fix; every shipped row must still pass unchanged.

The lab's row is a benzothiadiazole-bithiophene small molecule with film levels typical of an OPV donor (HOMO
-5.35 eV, LUMO -3.40 eV, optical gap 1.95 eV; common practice, not a published measurement) on the usual
ferrocene convention (-4.8 eV, Pommerehne et al., Adv. Mater. 7 (1995) 551, from memory).
"""

from __future__ import annotations

import csv
import shutil
from pathlib import Path

import pandas as pd
import pytest

from screen.calibration.reference import FILES, read_reference
from screen.cli import main
from screen.config import Config
from screen.errors import InputError

SMILES = "Cc1ccc(s1)-c1ccc(-c2ccc(C)s2)c2nsnc12"
# name,smiles,representation,homo_ev,lumo_ev,gap_opt_ev,method,derived_level,fc_reference_ev,source,doi,
# from_memory,notes,exclude_reason
GOOD_ROW = f"KF,{SMILES},molecule,-5.35,-3.40,1.95,CV,,-4.8,lab notebook 2024,,false,,"


@pytest.fixture
def ref(repo_dir, tmp_path) -> Path:
    """A copy of the shipped reference folder (a lab's starting point)."""
    target = tmp_path / "myref"
    shutil.copytree(repo_dir / "models" / "reference", target)
    return target


def _add(ref: Path, row: str, file: str = "levels_film.csv") -> int:
    """Append ``row`` to ``file`` of ``ref``; its line as a spreadsheet shows it (header = line 1)."""
    path = ref / file
    with open(path, newline="", encoding="utf-8") as handle:
        records = sum(1 for _ in csv.reader(handle))  # the header and one record per data row
    text = path.read_text(encoding="utf-8")
    path.write_text(text + ("" if text.endswith("\n") else "\n") + row + "\n", encoding="utf-8")
    return records + 1


def _refused(ref: Path) -> str:
    with pytest.raises(InputError) as err:
        read_reference(ref)
    return str(err.value)


def _film(homo="-5.35", lumo="-3.40", gap="1.95", fc="-4.8", source="lab notebook 2024", smiles=SMILES,
          name="KF", exclude="") -> str:
    return f"{name},{smiles},molecule,{homo},{lumo},{gap},CV,,{fc},{source},,false,,{exclude}"


def test_every_shipped_row_passes_and_is_kept(repo_dir):
    sets = read_reference(repo_dir / "models" / "reference")
    for name, file in FILES.items():
        shipped = pd.read_csv(repo_dir / "models" / "reference" / file, dtype=str, keep_default_na=False)
        assert len(sets[name]) == int(shipped["smiles"].str.strip().ne("").sum()), name


def test_a_plausible_lab_row_is_accepted(ref):
    _add(ref, GOOD_ROW)
    film = read_reference(ref)["film"]
    assert film["name"].iloc[-1] == "KF" and film["homo_ev"].iloc[-1] == "-5.35"


def test_a_row_on_the_other_ferrocene_convention_is_accepted(ref):
    # Fc at -5.1 eV (Cardona et al., Adv. Mater. 23 (2011) 2367): levels 0.3 eV deeper, the same material
    _add(ref, _film(homo="-5.65", lumo="-3.70", fc="-5.1"))
    assert read_reference(ref)["film"]["fc_reference_ev"].iloc[-1] == "-5.1"


def test_levels_in_millielectronvolts_are_refused_with_the_fix(ref):
    line = _add(ref, _film(homo="-5350", lumo="-3400"))
    msg = _refused(ref)
    assert "levels_film.csv" in msg and msg.count(f"line {line} (name 'KF')") == 2, msg
    assert "column homo_ev = -5350" in msg and "write -5.35 eV" in msg, msg
    assert "column lumo_ev = -3400" in msg and "write -3.4 eV" in msg, msg


def test_a_positive_homo_is_refused_as_an_ionisation_energy(ref):
    line = _add(ref, _film(homo="5.35"))
    msg = _refused(ref)
    assert f"line {line} (name 'KF'), column homo_ev = 5.35" in msg and "write it as -5.35" in msg, msg


def test_a_homo_written_as_a_potential_vs_ferrocene_gets_the_conversion(ref):
    # an oxidation onset of 0.55 V vs Fc+/Fc and a reduction onset of -1.40 V are -5.35 and -3.40 eV with Fc at -4.8
    _add(ref, _film(homo="0.55", lumo="-1.40"))
    msg = _refused(ref)
    assert "column homo_ev = 0.55" in msg and "= -5.35 eV" in msg, msg
    assert "column lumo_ev = -1.4" in msg and "= -3.40 eV" in msg, msg


@pytest.mark.parametrize("fc, expected", [
    ("4.8", "column fc_reference_ev = 4.8: the ferrocene level on the vacuum scale is negative; write -4.8"),
    ("Ag/AgCl", "column fc_reference_ev = 'Ag/AgCl': not a number"),
    ("-4800", "-4800 looks like millielectronvolts: write -4.8 eV"),
    ("-4,8", "a decimal comma? write -4.8"),
    ("0.4", "looks like a potential in V"),
])
def test_a_ferrocene_level_that_is_not_one_is_refused(ref, fc, expected):
    line = _add(ref, _film(fc=f'"{fc}"' if "," in fc else fc))
    msg = _refused(ref)
    assert f"line {line} (name 'KF')" in msg and expected in msg, msg


def test_an_optical_gap_in_nm_is_refused_with_the_conversion(ref):
    line = _add(ref, _film(gap="636"))  # 636 nm = 1239.84/636 = 1.95 eV
    msg = _refused(ref)
    assert f"line {line} (name 'KF'), column gap_opt_ev = 636" in msg and "1.95 eV" in msg, msg


@pytest.mark.parametrize("cell, expected", [
    ("n/a", "column homo_ev = 'n/a': not a number; write the value in eV"),
    ('"-5,35"', "column homo_ev = '-5,35': not a number; a decimal comma? write -5.35"),
    ("\u22125.35", "a typographic minus sign"),
    ("inf", "not a finite number"),
])
def test_a_level_that_is_not_a_number_is_refused_not_dropped(ref, cell, expected):
    line = _add(ref, _film(homo=cell))
    msg = _refused(ref)
    assert f"line {line} (name 'KF')" in msg and expected in msg, msg


def test_an_empty_level_of_a_film_row_stays_allowed(ref):
    _add(ref, _film(lumo=""))  # only the HOMO measured: fitted in the HOMO model only
    assert read_reference(ref)["film"]["lumo_ev"].iloc[-1] == ""


def test_lumo_below_homo_is_refused(ref):
    line = _add(ref, _film(homo="-3.40", lumo="-5.35"))
    msg = _refused(ref)
    assert f"line {line} (name 'KF'), column homo_ev = -3.4" in msg and "look swapped" in msg, msg


def test_an_optical_gap_above_the_transport_gap_is_refused(ref):
    # 2.6 eV against LUMO - HOMO = 1.95 eV: more than the levels checks' 0.3 eV tolerance (GAP_EXCESS_TOL_EV)
    _add(ref, _film(gap="2.6"))
    assert "exceeds LUMO - HOMO" in _refused(ref)


def test_an_unparsable_smiles_is_refused_with_the_reason(ref):
    line = _add(ref, _film(smiles=SMILES[:-1]))  # ring 2 left open
    msg = _refused(ref)
    assert f"line {line} (name 'KF'), column smiles" in msg and "SMILES syntax error: unclosed ring" in msg, msg


def test_a_repeat_unit_with_one_attachment_point_is_refused(ref):
    line = _add(ref, _film(smiles="[*]c1ccc(-c2cccs2)s1", name="P1"))
    msg = _refused(ref)
    assert f"line {line} (name 'P1'), column smiles" in msg and "one attachment point" in msg, msg


def test_a_material_given_twice_is_refused_with_both_lines(ref):
    shipped = pd.read_csv(ref / "levels_film.csv", dtype=str, keep_default_na=False)
    first = shipped.iloc[1]
    line = _add(ref, _film(smiles=first["smiles"], name="again"))
    msg = _refused(ref)
    assert f"lines 3 ({first['name']!r}) and {line} ('again'), column smiles: the same structure" in msg, msg


def test_a_repeat_with_an_exclude_reason_is_accepted(ref):
    shipped = pd.read_csv(ref / "levels_film.csv", dtype=str, keep_default_na=False)
    _add(ref, _film(smiles=shipped["smiles"].iloc[1], name="again", exclude="second paper kept for the record"))
    assert read_reference(ref)["film"]["name"].iloc[-1] == "again"


def test_an_empty_source_is_refused(ref):
    line = _add(ref, _film(source=""))
    msg = _refused(ref)
    assert f"line {line} (name 'KF'), column source is empty" in msg, msg


def test_several_problems_in_one_message_before_any_later_file(ref):
    _add(ref, _film(homo="n/a", source=""))
    _add(ref, _film(name="KF2", smiles="Cc1ccc(C)s1", gap="636"))
    msg = _refused(ref)
    assert msg.startswith(f"reference file {ref / 'levels_film.csv'}: 3 problems:"), msg


def test_gas_phase_sets_are_checked_too(ref):
    # 1-methylnaphthalene-like IP of about 7.8 eV (from memory) written as a HOMO
    line = _add(ref, "X1,Cc1ccc2ccccc2c1C,-7.8,adiabatic,gas,PES,lab,,false,,", "ip_gas.csv")
    msg = _refused(ref)
    assert f"ip_gas.csv: line {line} (name 'X1'), column value_ev = -7.8" in msg and "write 7.8" in msg, msg


def test_an_optical_row_in_nm_and_a_kind_that_the_model_misreads_are_refused(ref):
    line = _add(ref, "X1,Cc1ccc2ccccc2c1C,320,Maximum,gas,abs,lab,,false,,", "gap_optical.csv")
    msg = _refused(ref)
    assert f"line {line} (name 'X1'), column value_ev = 320" in msg and "1239.84/320 = 3.87 eV" in msg, msg
    assert "column kind = 'Maximum'" in msg and "write 'maximum' (lower case)" in msg, msg


def test_a_gas_value_is_required(ref):
    line = _add(ref, "X1,Cc1ccc2ccccc2c1C,,adiabatic,gas,ETS,lab,,false,,", "ea_gas.csv")
    assert f"line {line} (name 'X1'), column value_ev is empty" in _refused(ref)


def test_series_rows_of_one_molecule_differ_by_kind_phase_or_solvent(ref):
    # quaterthiophene's absorption maximum in a second solvent (as distyrylbenzene's two solvents in the shipped
    # file): allowed; the same kind, phase and solvent again: refused
    row = ("oligothiophene,4,alpha-quaterthiophene,c1csc(-c2ccc(-c3ccc(-c4cccs4)s3)s2)c1,x,3.10,maximum,solution,{},"
           "abs,lab,,false,")
    before = len(read_reference(ref)["series"])
    _add(ref, row.format("THF"), "gap_series.csv")
    assert len(read_reference(ref)["series"]) == before + 1
    line = _add(ref, row.format("THF"), "gap_series.csv")
    assert f"and {line} ('alpha-quaterthiophene'), column smiles: the same structure with the same kind, phase and " \
           "solvent" in _refused(ref)


def test_a_dye_e00_in_nm_is_refused(ref):
    line = _add(ref, "X1,OC(=O)C(C#N)=Cc1ccc(N(C)C)cc1,1.2,NHE,1.2,430,,,,,lab,,false,,", "dyes.csv")
    msg = _refused(ref)
    assert f"dyes.csv: line {line} (name 'X1'), column e00_ev = 430" in msg and "1239.84/430" in msg, msg


def test_calibrate_from_raw_refuses_the_file_before_any_work(repo_dir, ref, tmp_path, capsys, monkeypatch):
    def started(*args, **kwargs):
        raise AssertionError("raw values were read; the reference file should have been refused first")

    monkeypatch.setattr("screen.refit.read_raw_source", started)
    line = _add(ref, _film(homo="-5350", lumo="-3400"))
    rc = main(["calibrate", "--from-raw", str(repo_dir / "models" / Config.of({}).protocol_id), "--reference",
               str(ref), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert rc == 2 and f"line {line} (name 'KF'), column homo_ev = -5350" in err and "Traceback" not in err, err
    assert not (tmp_path / "out" / "models").exists()


def test_a_row_with_values_but_no_structure_is_refused_and_a_note_line_is_skipped(ref):
    before = len(read_reference(ref)["ip"])
    _add(ref, "# rows below added by the lab", "ip_gas.csv")  # a note: no structure, no value (skipped as before)
    assert len(read_reference(ref)["ip"]) == before
    line = _add(ref, _film(smiles=""))
    msg = _refused(ref)
    assert f"line {line} (name 'KF'), column smiles is empty beside a value in homo_ev, lumo_ev, gap_opt_ev" in msg, msg


def test_a_reference_structure_a_run_would_reject_is_named_with_its_reason(repo_dir, ref, tmp_path, capsys):
    # a charged molecule passed the file check (which judges structure only) and then got "1 reference
    # structure(s) have no raw values ... compute them with `dascreen run ...`", a run that rejects it
    _add(ref, _film(smiles="C[n+]1ccccc1"))
    rc = main(["calibrate", "--from-raw", str(repo_dir / "models" / Config.of({}).protocol_id), "--reference",
               str(ref), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert rc == 2 and "1 reference structure(s) cannot be computed with these settings: KF (C[n+]1ccccc1): net " \
                       "charge +1" in err and "compute them with" not in err, err
