"""Conformer spread of the frontier orbitals (screen.conformer_spread) and where it is recorded.

Check values: the Boltzmann weights are exact formula cases (two conformers of equal energy, and two whose
energies differ by k_B·T·ln 3 so that the weights are 3/4 and 1/4); the molecules are generated here.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from screen.columns import CONFORMER_SPREAD_COLUMNS, ELECTRONIC_COLUMNS
from screen.conformer_spread import (RANKING_KEY, SPREAD_TEMPERATURE_K, boltzmann_rms, conformer_sigma, ranking_of,
                                     spread_columns)
from screen.constants import HARTREE_EV, KB_HARTREE_K
from screen.engines import SinglePoint
from screen.levels import chain_limits
from screen.structures import STATUS_COLUMNS, build_structure, status_row

KT = KB_HARTREE_K * SPREAD_TEMPERATURE_K  # [Eh]


def test_boltzmann_rms_exact_cases():
    assert boltzmann_rms([0.0, 0.0], [1.0, 1.3]) == pytest.approx(0.3 / math.sqrt(2))
    assert boltzmann_rms([KT * math.log(3), 0.0], [1.3, 1.0]) == pytest.approx(0.3 / 2)  # kept = the lower one
    assert boltzmann_rms([0.0, 20 * KT], [1.0, 2.0]) == pytest.approx(math.exp(-10), rel=1e-3)  # √w, w ≈ e^-20
    assert math.isnan(boltzmann_rms([0.0], [1.0])) and math.isnan(boltzmann_rms([], []))


def _sp(energy, homo_ev, lumo_ev):
    eps = np.array([-0.8, homo_ev / HARTREE_EV, lumo_ev / HARTREE_EV, 0.3])
    return SinglePoint(energy_eh=energy, orbital_energies_eh=eps, occupations=np.array([2.0, 2.0, 0, 0]),
                       charge=0, uhf=0, wall_s=0.0, n_electrons=4)


def test_spread_columns_from_the_ranking_single_points():
    ranking = ranking_of([_sp(-10.0, -5.0, -3.0), _sp(-10.0, -5.2, -3.0)])
    assert ranking == [[-10.0, pytest.approx(-5.0), pytest.approx(-3.0)], [-10.0, pytest.approx(-5.2),
                                                                            pytest.approx(-3.0)]]
    homo, lumo, gap, n = (spread_columns(ranking)[c] for c in CONFORMER_SPREAD_COLUMNS)
    assert homo == pytest.approx(0.2 / math.sqrt(2)) and lumo == pytest.approx(0.0, abs=1e-12)
    assert gap == pytest.approx(0.2 / math.sqrt(2)) and n == 2
    single = spread_columns([], n_ranked=1)
    assert math.isnan(single[CONFORMER_SPREAD_COLUMNS[0]]) and single["conf_spread_n"] == 1


def test_status_row_computes_the_spread_from_the_stored_ranking_only():
    rec = {"key": "m1", "status": "ok", "n_ranked": 2, RANKING_KEY: [[-10.0, -5.0, -3.0], [-10.0, -5.2, -3.0]]}
    assert status_row(rec)["conf_spread_homo_ev"] == pytest.approx(0.2 / math.sqrt(2))
    # a record stored before the ranking was kept has no spread (not a stale one)
    old = {"key": "m1", "status": "ok", "conf_spread_homo_ev": 0.5}
    assert status_row(old)["conf_spread_homo_ev"] == ""


def test_conformer_sigma_sums_same_source_weights_with_their_signs():
    frame = pd.DataFrame({"conf_spread_homo_ev": [0.1], "conf_spread_lumo_ev": [0.2]})
    # IP ≈ −ε_HOMO: weights +0.9 on IP and +0.2 on ε_HOMO partly cancel (|−0.9 + 0.2| = 0.7); EA on its own
    sigma = conformer_sigma(frame, {"xtb_ip_ev": 0.9, "xtb_homo_ev": 0.2, "xtb_ea_ev": 0.5, "xtb_k_hl_ev": 3.0})
    assert sigma[0] == pytest.approx(math.hypot(0.7 * 0.1, 0.5 * 0.2))


def test_spread_columns_travel_from_structures_to_the_electronic_table():
    assert set(CONFORMER_SPREAD_COLUMNS) <= set(STATUS_COLUMNS) and set(CONFORMER_SPREAD_COLUMNS) <= set(
        ELECTRONIC_COLUMNS)


def test_a_flexible_molecule_has_a_spread_and_a_rigid_one_has_none():
    _, info = build_structure("c1csc(-c2ccc(-c3cccs3)s2)c1")  # terthiophene: ring flips are ranked
    floppy = status_row({"status": "ok", **info})
    assert floppy["conf_spread_n"] >= 2
    # benchmarks/conformer_spread.py: at most a few hundredths of an eV for oligothiophenes on force-field conformers
    assert 0.0 <= floppy["conf_spread_homo_ev"] < 0.05 and np.isfinite(floppy["conf_spread_gap_ev"])
    _, info = build_structure("c1ccc2cc3ccccc3cc2c1")  # anthracene: one conformer, nothing to compare
    rigid = status_row({"status": "ok", **info})
    assert rigid["conf_spread_n"] == 1 and math.isnan(rigid["conf_spread_homo_ev"])


def test_a_polymer_takes_the_spread_of_its_longest_oligomer_that_has_one():
    olig = pd.DataFrame({"polymer_key": ["mp"] * 4, "polymer_id": ["p"] * 4, "n": [1, 2, 3, 4],
                         "key": ["m1", "m2", "m3", "m4"], "smiles": list("abcd"), "per_unit": 2})
    elec = pd.DataFrame({"key": ["m1", "m2", "m3", "m4"], "status": "ok", "error": "",
                         "xtb_gap_ev": [4.0, 3.2, 2.9, 2.75],
                         "conf_spread_homo_ev": [0.01, 0.02, 0.03, np.nan], "conf_spread_lumo_ev": [0.0, 0.0, 0.04, np.nan],
                         "conf_spread_gap_ev": [0.0, 0.0, 0.05, np.nan], "conf_spread_n": [6, 6, 3, 1]})
    limits, _ = chain_limits(elec, olig)
    row = limits.loc["mp"]
    assert (row["conf_spread_homo_ev"], row["conf_spread_lumo_ev"], row["conf_spread_n"]) == (0.03, 0.04, 3)
