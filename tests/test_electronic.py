"""Raw ΔSCF levels: signs, spin states, and the acene trend against measurements."""

from __future__ import annotations

import numpy as np
import pytest

from conftest import ACENES, raw_levels

# Gas-phase ionisation energies [eV]: benzene 9.24 (ZEKE, Chewter et al., J. Chem. Phys. 86 (1987) 4737),
# naphthalene 8.14 (NIST Chemistry WebBook, SRD 69), anthracene 7.44 and pentacene 6.61 (NIST WebBook
# photoelectron values, from memory), tetracene 6.93 (ZEKE, Zhang, Pei, Kong, doi:10.1063/1.2837467).
MEASURED_IP_EV = {"benzene": 9.24, "naphthalene": 8.14, "anthracene": 7.44, "tetracene": 6.93, "pentacene": 6.61}


@pytest.fixture(scope="module")
def acene_levels():
    return {name: raw_levels(smi) for name, smi in ACENES.items()}


def test_raw_ip_falls_monotonically_along_the_acenes(acene_levels):
    ip = np.array([acene_levels[n]["xtb_ip_ev"] for n in ACENES])
    measured = np.array([MEASURED_IP_EV[n] for n in ACENES])
    assert np.all(np.diff(measured) < 0)
    assert np.all(np.diff(ip) < 0), ip


def test_raw_orbital_gap_falls_monotonically_along_the_acenes(acene_levels):
    gap = np.array([acene_levels[n]["xtb_gap_ev"] for n in ACENES])
    assert np.all(np.diff(gap) < 0), gap


def test_raw_ea_rises_along_the_acenes(acene_levels):
    # measured EAs rise benzene (−1.1, ETS) → pentacene (1.39); NIST WebBook, from memory
    ea = np.array([acene_levels[n]["xtb_ea_ev"] for n in ACENES])
    assert np.all(np.diff(ea) > 0), ea


def test_raw_ip_tracks_measured_ip_linearly(acene_levels):
    # raw GFN2-xTB ΔSCF IPs are shifted by ~4.5–5 eV (the known systematic error the
    # calibration removes) but correlate almost perfectly with experiment along a series
    ip = np.array([acene_levels[n]["xtb_ip_ev"] for n in ACENES])
    measured = np.array([MEASURED_IP_EV[n] for n in ACENES])
    assert np.corrcoef(ip, measured)[0, 1] > 0.99
    assert 3.5 < np.mean(ip - measured) < 6.0


def test_sign_conventions(acene_levels):
    for lv in acene_levels.values():
        assert lv["xtb_ip_ev"] > 0
        assert lv["xtb_homo_ev"] < lv["xtb_lumo_ev"]
        # ΔSCF fundamental gap exceeds the orbital gap (relaxation and Coulomb terms)
        assert lv["xtb_ip_ev"] - lv["xtb_ea_ev"] > lv["xtb_gap_ev"]
        assert lv["scf_rungs"] == "0/0/0"


def test_ions_are_doublets_at_the_neutral_geometry():
    # E(cation) − E(neutral) must equal the reported IP: same geometry, uhf = 1 for the ion
    from conftest import structure
    from screen.constants import HARTREE_EV
    from screen.electronic import molecule_numbers_positions
    from screen.engines import make_engine

    z, pos = molecule_numbers_positions(structure(ACENES["naphthalene"]))
    eng = make_engine()
    e0 = eng.singlepoint(z, pos).energy_eh
    ec = eng.singlepoint(z, pos, charge=1, uhf=1).energy_eh
    assert raw_levels(ACENES["naphthalene"])["xtb_ip_ev"] == pytest.approx((ec - e0) * HARTREE_EV, abs=1e-6)
    with pytest.raises(Exception, match="impossible"):
        eng.singlepoint(z, pos, charge=1, uhf=2)
