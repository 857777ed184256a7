"""The report's one-sentence summary says what its numbers are (an adversarial referee's audit)."""

from __future__ import annotations

import pandas as pd

from screen.report.page import _summary_sentence


def _row(**kw):
    base = {"id": "A", "pce_pct": 9.0, "pce_sigma_pct": 1.0, "p_above_target": 0.2, "p_aligned": 1.0,
            "passes": True, "flags": "", "scale": "film"}
    return {**base, **kw}


def test_p_aligned_is_not_called_viable():
    # P(aligned) covers the two offsets only; a pair with aligned offsets can still have Voc <= 0 in a sample
    text = _summary_sentence(pd.DataFrame([_row()]), "acc", 1)
    assert "viable in" not in text and "both offsets aligned in 100 % of samples" in text


def test_no_viable_pair_gets_no_best_estimate():
    rows = pd.DataFrame([_row(id="nv1", pce_pct=float("nan"), pce_sigma_pct=float("nan"), p_aligned=0.01,
                              passes=False),
                         _row(id="nv2", pce_pct=float("nan"), pce_sigma_pct=float("nan"), p_aligned=0.03,
                              passes=False)])
    text = _summary_sentence(rows, "acc", 0)
    assert "Best estimate" not in text and "% PCE" not in text and "\u2014" not in text
    assert "No pair is viable" in text and "<strong>nv2</strong>, both offsets aligned in 3 %" in text


def test_a_gas_scale_best_estimate_says_so():
    text = _summary_sentence(pd.DataFrame([_row(scale="gas", passes=False)]), "acc", 0)
    assert "from gas-scale (isolated-molecule) levels" in text
    assert "gas-scale" not in _summary_sentence(pd.DataFrame([_row()]), "acc", 1)
