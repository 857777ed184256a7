"""Where the fitted device model's class values (EQE, fill factor) are and are not used is said in words (a
referee's check of the per-class EQE, 2026-12-05): the report's efficiency map against a donor partner, and the
device card's offset scale Δ0 at the edge of the grid the fit tries.

Check values: none from outside; the offset-scale grid edge is the fit's own (``screen.devicefit``).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from screen.device import DeviceModel
from screen.devicefit import OFFSET_SCALE_GRID_EV
from screen.devicepars import OFFSET_SCALE_MIN_EV
from screen.report.figures import _map_note
from screen.report.header import _device_items

_PTS = pd.DataFrame({"same_role": [False], "viable": [True]})
_FINITE = pd.Series([True])


def test_a_map_against_a_donor_says_it_takes_the_pooled_values():
    note = _map_note(_PTS, _FINITE, DeviceModel(), {"id": "pm6", "role": "donor"}, "")
    assert "pooled EQE, fill factor and voltage loss" in note


def test_a_map_against_an_acceptor_or_with_set_values_does_not():
    assert "pooled EQE" not in _map_note(_PTS, _FINITE, DeviceModel(), {"id": "y6", "role": "acceptor"}, "")
    set_ = DeviceModel(eqe=0.7, ff=0.7)
    assert "pooled EQE" not in _map_note(_PTS, _FINITE, set_, {"id": "pm6", "role": "donor"}, "")


def test_the_offset_scale_at_the_grid_edge_is_called_a_step():
    assert OFFSET_SCALE_GRID_EV[0] == OFFSET_SCALE_MIN_EV
    dev = DeviceModel().as_dict()
    rows = dict(_device_items(dev))
    label = next(k for k in rows if k.startswith("EQE offset scale"))
    assert dev["offset_scale_ev"] == OFFSET_SCALE_MIN_EV and "in effect a step at zero offset" in rows[label]
    wider = dict(_device_items(dev | {"offset_scale_ev": 0.05}))
    assert "in effect a step" not in wider[label] and np.isclose(float(wider[label].split()[0]), 0.05)
