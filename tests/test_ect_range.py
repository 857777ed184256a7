"""The fitted device model says where its Voc is an extrapolation: a pair whose charge-transfer energy E_CT lies
outside the E_CT range of the published devices it was fitted on (a device physicist's audit, 2026-12-05: below
1.01 eV the loss stays at the lowest fitted device's and Voc falls one to one with E_CT, without a word).

Check values: the E_CT range of ``models/device/fitted.json`` (``ect_min_ev``/``ect_max_ev``: the published devices of
``models/reference/devices.csv`` on the film scale, a regression value of the shipped fit); the film-set levels of
PM6 (−5.49 / −3.64 / 1.80 eV, OPV2D data set, see ``models/reference/levels_film.csv``).
"""

from __future__ import annotations

import numpy as np
import pytest

from screen.device import DeviceModel
from screen.devicepars import load_fitted
from screen.flags import FLAGS, describe, is_info

PM6 = (-5.49, -3.64, 1.80)


def test_the_shipped_range_is_the_fitted_devices():
    p = load_fitted()
    assert 0.9 < p.ect_min_ev < 1.1 < 1.6 < p.ect_max_ev < 1.9


@pytest.mark.parametrize("donor, acceptor, outside", [
    (PM6, (-5.65, -4.09, 1.36), False),                # Y6, film set (OPV2D, Joule 3 (2019) 1140): E_CT 1.36 eV
    (PM6, (-5.60, -4.60, 0.95), True),                 # E_CT 0.89 eV (LUMO_A − HOMO_D), below every device
    ((-5.90, -3.00, 2.60), (-6.40, -3.90, 2.20), True)])  # a wide-gap pair: E_CT 2.00 eV, above every device
def test_a_pair_outside_the_fitted_range_is_told(donor, acceptor, outside):
    m = DeviceModel()
    out = m.evaluate(*donor, *acceptor, acceptor_class="nfa-other")
    assert bool(out["viable"]) and bool(out["ect_outside_fit"]) is outside
    assert ("ect_outside_fit" in str(out["flags"])) is outside


def test_the_published_rule_is_not_fitted_so_never_told():
    out = DeviceModel(model="scharber").evaluate(*PM6, -5.45, -4.30, 0.95)
    assert not bool(out["ect_outside_fit"])


def test_an_info_flag_that_quotes_the_range():
    assert is_info("ect_outside_fit") and "{ect_range}" in FLAGS["ect_outside_fit"].text
    text = describe("ect_outside_fit", {"device": DeviceModel().as_dict()})
    p = load_fitted()
    assert f"({p.ect_min_ev:.2f}\u2013{p.ect_max_ev:.2f} eV)" in text and "extrapolation" in text
    assert "{" not in describe("ect_outside_fit", {})


def test_a_not_viable_pair_is_not_told():
    # inverted alignment: no Voc to call an extrapolation
    out = DeviceModel().evaluate(*PM6, -5.20, -3.40, 1.0)
    assert not bool(out["viable"]) and not bool(out["ect_outside_fit"])


def test_the_edge_is_judged_as_written():
    p = load_fitted()
    m = DeviceModel()
    at_edge = np.array([p.ect_min_ev, p.ect_min_ev - 0.01])
    assert m.ect_outside_fit(at_edge, np.array([2.0, 2.0])).tolist() == [False, True]
