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


def test_another_valence_error_gets_no_boron_hint():
    row = _row("CC(C)(C)(C)C")  # a five-bonded carbon
    assert row.reason == "valence" and "N→B" not in row.error
