"""A B←N coordination (boron difluoride chelates, B←N-bridged units of some polymer acceptors) written as a
dative bond is refused by RDKit's valence rule; the refusal says how to write it instead (a user's structure
could not be entered at all before). The charge-separated form is the same Lewis structure with cancelling
formal charges (common practice in SMILES: [n+]…[B-])."""

from __future__ import annotations

import pandas as pd

from screen.prepare import PrepareOptions, validate


def _row(smiles: str):
    return validate(pd.DataFrame({"id": ["x"], "smiles_input": [smiles]}), PrepareOptions()).iloc[0]


def test_a_dative_n_to_b_bond_is_refused_with_the_way_to_write_it():
    row = _row("c1ccc2c(c1)-c1ccccn1->B2(F)F")
    assert (row.status, row.reason) == ("rejected", "valence")
    assert row.error.endswith("; write the N→B coordination as a charge-separated pair, e.g. [n+]…[B-](F)F for "
                              "n->B(F)F: formal charges that cancel are fine")


def test_the_charge_separated_form_is_accepted():
    row = _row("F[B-]1(F)[n+]2ccccc2-c2ccccc21")
    assert row.status == "ok", row.error


def test_a_four_bonded_nitrogen_on_boron_gets_the_hint_too():
    # an amine-borane written neutral: RDKit names the nitrogen, not the boron (a reviewer's case)
    row = _row("CN(C)(C)B(F)(F)F")
    assert row.reason == "valence" and row.error.startswith("atom 1 (N)") and "[n+]…[B-](F)F" in row.error


def test_another_valence_error_gets_no_boron_hint():
    row = _row("CC(C)(C)(C)C")  # a five-bonded carbon
    assert row.reason == "valence" and "N→B" not in row.error


def test_a_neutral_four_coordinate_boron_gets_the_same_hint():
    # a BODIPY core written with a neutral N-B(F)F (a heteroatom chemist's audit)
    row = _row("FB1(F)N2C=CC=C2C(c2ccccc2)=C2C=CC=N12")
    assert row.reason == "valence" and "[n+]…[B-](F)F" in row.error


def test_an_element_outside_the_allowed_list_names_the_setting():
    row = _row("c1cc[te]c1-c1ccc[te]1")  # 2,2'-bitellurophene
    assert row.reason == "unsupported_element"
    assert row.error.endswith("(setting prepare.allowed_elements; an element outside the calibration's reference "
                              "materials gets extrapolated levels, flagged far_from_reference with the widest σ)")


def test_an_element_in_one_reference_structure_is_not_covered():
    # selenium is in one reference polymer's side groups only, bromine in one gas-phase row (models/reference):
    # a biselenophene is as unlike the reference as a boron compound (similarity 0)
    import json
    from pathlib import Path

    from screen.calibrate import covered_elements
    from screen.calibration.domain import nearest_similarity

    folder = Path(__file__).resolve().parents[1] / "models" / "tblite-gfn2-ff-eaf1c554"
    models = {n: json.loads((folder / f"{n}.json").read_text()) for n in ("homo_film", "lumo_film", "gap_opt_film")}
    refs = [r["smiles"] for r in models["homo_film"]["residuals"]]
    sim = nearest_similarity(["c1cc[se]c1-c1ccc[se]1", "c1ccsc1-c1cccs1"], refs, covered=covered_elements(models))
    assert sim[0] == 0.0 and sim[1] > 0.0
