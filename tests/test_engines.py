"""Engine layer: both backends, SCF ladder, spin/charge bookkeeping."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import structure

from screen.constants import BOHR_ANGSTROM, HARTREE_EV
from screen.electronic import molecule_numbers_positions
from screen.engines import SCF_LADDER, EngineError, ScfError, make_engine


def _benzene():
    return molecule_numbers_positions(structure("c1ccccc1"))


def test_unit_constants_are_codata():
    # CODATA 2018: 1 Eh = 27.211386245988 eV, a0 = 0.529177210903 Å (scipy.constants; from memory)
    assert HARTREE_EV == pytest.approx(27.211386245988, rel=1e-9)
    assert BOHR_ANGSTROM == pytest.approx(0.529177210903, rel=1e-9)


def test_both_backends_agree_on_gfn2_energy():
    pytest.importorskip("xtb.interface", reason="xtb-python is an optional backend (Python <= 3.11)")
    z, pos = _benzene()
    e_tb = make_engine("tblite", "GFN2-xTB").singlepoint(z, pos).energy_eh
    e_xtb = make_engine("xtb", "GFN2-xTB").singlepoint(z, pos).energy_eh
    # same Hamiltonian, same geometry: agreement to the SCF convergence threshold
    assert e_tb == pytest.approx(e_xtb, abs=1e-6)
    c_tb = make_engine("tblite").singlepoint(z, pos, charge=1, uhf=1).energy_eh
    c_xtb = make_engine("xtb").singlepoint(z, pos, charge=1, uhf=1).energy_eh
    assert c_tb == pytest.approx(c_xtb, abs=1e-6)


@pytest.mark.parametrize("method", ["GFN2-xTB", "GFN1-xTB", "IPEA1-xTB"])
def test_tblite_methods_give_frontier_orbitals(method):
    z, pos = _benzene()
    sp = make_engine("tblite", method).singlepoint(z, pos)
    homo, lumo = sp.frontier_eh()
    assert sp.n_electrons == 30  # benzene valence electrons: 6×4 + 6×1
    assert homo < lumo < 0.5
    assert sp.rung == 0


def test_impossible_spin_state_is_refused():
    z, pos = _benzene()
    with pytest.raises(EngineError, match="impossible"):
        make_engine().singlepoint(z, pos, charge=1, uhf=0)


def test_scf_ladder_recovers_and_records_rung():
    z, pos = _benzene()
    eng = make_engine(max_iter=2)  # rung 0 cannot converge in 2 cycles
    sp = eng.singlepoint(z, pos)
    assert sp.rung >= 1
    ref = make_engine().singlepoint(z, pos)
    assert sp.energy_eh == pytest.approx(ref.energy_eh, abs=1e-6)  # rungs change the path, not the answer


def test_unconverged_energy_is_never_returned():
    z, pos = _benzene()
    eng = make_engine()
    with pytest.raises(ScfError, match="did not converge"):
        eng.singlepoint(z, pos, ladder=({"max_iter": 1}, {"max_iter": 2}))


def test_a_non_finite_result_is_never_returned(monkeypatch):
    # an engine audit injected a NaN film-anion energy and the row came back ok with a NaN EA
    z, pos = _benzene()
    eng = make_engine()
    real = type(eng)._run

    def nan_energy(self, *args, **kwargs):
        out = dict(real(self, *args, **kwargs))
        out["energy"] = float("nan")
        return out

    monkeypatch.setattr(type(eng), "_run", nan_energy)
    with pytest.raises(EngineError, match="non-finite"):
        eng.singlepoint(z, pos)


def test_unknown_engine_and_method_messages():
    with pytest.raises(EngineError, match="unknown engine 'orca'"):
        make_engine("orca")
    # each engine names itself (before, without xtb-python the tblite branch was held to the xtb message and failed)
    if _has_xtb():
        with pytest.raises(EngineError, match="not available with engine 'xtb'"):
            make_engine("xtb", "IPEA1-xTB")
    with pytest.raises(EngineError, match="not available with engine 'tblite'"):
        make_engine("tblite", "GFN0-xTB")


def _has_xtb() -> bool:
    try:
        import xtb.interface  # noqa: F401
    except ImportError:
        return False
    return True


def test_ladder_is_documented_and_energy_neutral():
    assert SCF_LADDER[0] == {}
    assert all("electronic_temperature_k" not in rung for rung in SCF_LADDER)
    assert np.all(np.diff([r.get("max_iter", 250) for r in SCF_LADDER]) > 0)


def test_tblite_orbitals_are_aos_by_mos_with_an_atom_map():
    z, pos = _benzene()
    sp = make_engine().singlepoint(z, pos, orbitals=True)
    c, s, ao_atom = sp.orbitals["coefficients"], sp.orbitals["overlap"], sp.orbitals["ao_atom"]
    # orthonormal MOs: CᵀSC = 1 holds only with AOs as rows
    assert np.allclose(c.T @ s @ c, np.eye(c.shape[1]), atol=1e-8)
    # GFN2-xTB minimal valence basis: C has s+p (4 AOs), H one s (Bannwarth et al. 2019, doi:10.1021/acs.jctc.8b01176)
    assert np.bincount(ao_atom).tolist() == [4 if zi == 6 else 1 for zi in z]


def test_restart_from_the_neutral_does_not_change_the_ion_energy():
    z, pos = _benzene()
    eng = make_engine()
    neutral = eng.singlepoint(z, pos)
    cold = eng.singlepoint(z, pos, charge=1, uhf=1)
    warm = eng.singlepoint(z, pos, charge=1, uhf=1, guess=neutral)
    assert warm.energy_eh == pytest.approx(cold.energy_eh, abs=1e-6)
    assert neutral.energy_eh == pytest.approx(eng.singlepoint(z, pos).energy_eh, abs=1e-9)  # guess left untouched


def test_continuum_lowers_the_ion_energy_more_than_the_neutral():
    z, pos = _benzene()
    eng = make_engine()
    gas = [eng.singlepoint(z, pos, charge=q, uhf=abs(q)).energy_eh for q in (0, 1)]
    film = [eng.singlepoint(z, pos, charge=q, uhf=abs(q), epsilon=3.5).energy_eh for q in (0, 1)]
    p_plus = ((gas[1] - gas[0]) - (film[1] - film[0])) * HARTREE_EV
    # Born estimate for a singly charged ion of radius ~3 Å in ε = 3.5: e²/(8πε0 a)(1 − 1/ε) ≈ 1.7 eV
    # (common practice: continuum polarisation energies of small aromatics are ~0.5–2 eV)
    assert 0.5 < p_plus < 2.0


def test_xtb_backend_offers_no_continuum():
    pytest.importorskip("xtb.interface", reason="xtb-python is an optional backend (Python <= 3.11)")
    z, pos = _benzene()
    eng = make_engine("xtb")
    assert eng.singlepoint(z, pos, orbitals=True).orbitals is None
    with pytest.raises(EngineError, match="no dielectric continuum"):
        eng.singlepoint(z, pos, epsilon=3.5)
