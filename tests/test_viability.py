"""Tests of screen.viability (classification of pairs, role from levels, acceptor classes) and
screen.devicepars (fitted parameters)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from screen.devicepars import FittedParameters
from screen.errors import ConfigError
from screen.partners import resolve_partner
from screen.viability import acceptor_class_of, classify, role_from_levels


def _classify(dl, dh, gap=1.5, voc=0.8, **kw):
    n = np.size(dl)
    return classify(np.asarray(dl, float), np.asarray(dh, float), np.full(n, gap), np.full(n, voc),
                    np.zeros(n, bool), **{"min_lumo": 0.3, "min_homo": 0.3, **kw})


def test_type_ii_with_offsets_at_threshold_is_viable():
    # -4.0 - (-4.3) = 0.2999999999999998 in binary floating point: counts as 0.3 (threshold met)
    m = _classify([-4.0 - (-4.3), 0.5], [0.3, 0.6])
    assert m["viable"].tolist() == [True, True]


def test_each_reason_alone():
    m = _classify([0.0, -0.3, 0.2, 0.5, 0.5, 0.5], [0.5, 0.5, 0.5, -0.1, 0.1, np.nan])
    assert m["lumo_inverted"].tolist() == [True, True, False, False, False, False]
    assert m["lumo_offset_low"].tolist() == [False, False, True, False, False, False]
    assert m["homo_inverted"].tolist() == [False, False, False, True, False, False]
    assert m["homo_offset_low"].tolist() == [False, False, False, False, True, False]
    # an unknown acceptor HOMO (donor-only model) is not checked
    assert m["viable"].tolist() == [False] * 5 + [True]
    # without the HOMO threshold (donor absorbs) type II is still required
    m = _classify([0.5, 0.5], [0.1, -0.1], check_homo_offset=False)
    assert m["viable"].tolist() == [True, False]


def test_voc_and_gap_reasons():
    assert _classify([0.5], [0.5], voc=0.0)["voc_nonpositive"].tolist() == [True]
    # hc / 280 nm = 4.43 eV: the ASTM G173-03 table has no photons above it
    assert _classify([0.5], [0.5], gap=4.5)["absorber_gap_invalid"].tolist() == [True]
    assert _classify([0.5], [0.5], gap=-1.0)["absorber_gap_invalid"].tolist() == [True]
    nan = _classify([np.nan], [np.nan], gap=np.nan, voc=np.nan)
    assert not any(nan[k][0] for k in nan if k != "viable")  # NaN raises nothing by itself


def test_role_from_levels_against_real_partners():
    y6, pm6 = resolve_partner("y6"), resolve_partner("pm6")
    # a donor like PM6 supports the donor role against Y6, an acceptor like Y6 the acceptor role against PM6
    d, a = role_from_levels(pm6.homo_ev, pm6.lumo_ev, y6.homo_ev, y6.lumo_ev)
    assert bool(d) and not bool(a)
    d, a = role_from_levels(y6.homo_ev, y6.lumo_ev, pm6.homo_ev, pm6.lumo_ev)
    assert bool(a) and not bool(d)
    # straddling (type I) levels support neither role
    d, a = role_from_levels(-5.3, -4.3, y6.homo_ev, y6.lumo_ev)
    assert not bool(d) and not bool(a)


@pytest.mark.parametrize("pid, cls", [("c60", "fullerene"), ("c70", "fullerene"), ("icba", "fullerene"),
                                      ("y6", "nfa-fused"), ("itic", "nfa-fused"), ("idtbr", "nfa-other"),
                                      ("n2200", "polymer")])
def test_acceptor_class_of_library_acceptors(pid, cls):
    assert acceptor_class_of(resolve_partner(pid).smiles) == cls


def _device_acceptors():
    """(name, SMILES, class) of every acceptor of the published-device set, as its rows label it."""
    import csv

    path = Path(__file__).resolve().parent.parent / "models" / "reference" / "devices.csv"
    with path.open(newline="", encoding="utf-8") as handle:
        rows = {(r["acceptor"], r["acceptor_smiles"], r["acceptor_class"]) for r in csv.DictReader(handle)}
    return sorted(rows)


@pytest.mark.parametrize("name, smiles, cls", _device_acceptors(), ids=lambda v: v if len(v) < 30 else "")
def test_acceptor_class_of_reproduces_the_device_set_labels(name, smiles, cls):
    # the fitted loss and fill factor are per class of models/reference/devices.csv (labels defined in devices.md:
    # nfa-fused = ITIC/IDIC/Y-series type, nfa-other = PDI, IDTBR, non-fused); a candidate must be classed by the
    # same rule, or it gets another class's loss (before: PDIs and IDTBRs came out nfa-fused, bCIC unclassed)
    assert acceptor_class_of(smiles) == cls, name


def test_fitted_parameters_fallbacks_and_validation():
    p = FittedParameters(loss_ev={"pooled": 0.3, "fullerene": 0.1, "non-fullerene": 0.5}, eqe_max=0.6,
                         offset_scale_ev=0.03, ff=0.65)
    assert p.loss_for(["fullerene", "nfa-other", "", None]).tolist() == [0.1, 0.5, 0.3, 0.3]
    with pytest.raises(ConfigError, match="pooled"):
        FittedParameters(loss_ev={"fullerene": 0.1}, eqe_max=0.6, offset_scale_ev=0.03, ff=0.65)
    with pytest.raises(ConfigError, match="eqe_max"):
        FittedParameters(loss_ev={"pooled": 0.1}, eqe_max=1.6, offset_scale_ev=0.03, ff=0.65)
