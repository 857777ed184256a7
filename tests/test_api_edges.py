"""Edges of the Python API an API-documentation audit found (2026-12-05): what a caller reads in a message or a
docstring is what the code does."""

from __future__ import annotations

import math

import pandas as pd
import pytest

from screen.partners import resolve_partner
from screen.rank import rank_candidates
from screen.spectrum import sq_limit


def test_a_repeated_id_in_a_frame_with_a_repeated_index_names_two_different_lines():
    row = pd.DataFrame({"id": ["D1"], "homo_ev": [-5.3], "lumo_ev": [-3.5], "gap_opt_ev": [1.7], "scale": ["film"],
                        "role": ["donor"]})
    with pytest.raises(ValueError, match="line 3, column id = 'D1': the same id as line 2;"):
        rank_candidates(pd.concat([row, row]), resolve_partner("y6"))


def test_the_detailed_balance_limit_needs_a_temperature_above_zero():
    with pytest.raises(ValueError, match="temperature_k = 0.0; give the cell temperature in kelvin, above 0"):
        sq_limit(1.34, 0.0)
    # above the spectrum's last photon (hc/280 nm = 4.43 eV): no current, no Voc, no efficiency, FF undefined
    out = sq_limit([4.5])
    assert out["jsc_ma_cm2"][0] == out["voc_v"][0] == out["pce_pct"][0] == 0.0 and math.isnan(out["ff"][0])


def test_the_sort_order_the_docstring_gives_is_the_rankings():
    # two rows that are not viable: the one whose alignment holds more often ranks first (p_aligned), then id
    rows = pd.DataFrame({"id": ["a1", "z1"], "homo_ev": [-6.2, -5.68], "lumo_ev": [-4.5, -4.0], "gap_opt_ev": [1.7, 1.6],
                         "homo_sigma_ev": [0.1, 0.1], "lumo_sigma_ev": [0.1, 0.1], "gap_opt_sigma_ev": [0.1, 0.1],
                         "scale": ["film", "film"], "role": ["donor", "donor"]})
    r = rank_candidates(rows, resolve_partner("y6"))
    assert not r["viable"].any() and r["id"].tolist() == ["z1", "a1"]
    assert "p_aligned`` descending" in " ".join(rank_candidates.__doc__.split())
