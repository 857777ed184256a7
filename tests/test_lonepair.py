"""Nitrogen lone-pair HOMOs (screen.lonepair): detection, the π-hole rule of the electronic stage, and the
calibrated IPs of the aza-naphthalenes against their measured gas-phase values (external check: the NIST
Chemistry WebBook ionisation energies of ``models/reference/ip_gas.csv``, each row with its source)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import structure

from screen.electronic import molecule_numbers_positions, vertical_levels
from screen.engines import make_engine
from screen.lonepair import two_coordinate_nitrogen

REPO = Path(__file__).resolve().parent.parent
AZA = {"quinoline": "c1ccc2ncccc2c1", "isoquinoline": "c1ccc2cnccc2c1", "quinoxaline": "c1ccc2nccnc2c1",
       "cinnoline": "c1ccc2nnccc2c1"}
PROTOCOLS = sorted(p.name for p in (REPO / "models").iterdir() if (p / "ip.json").is_file())


def _levels(smiles: str, rule: str) -> dict:
    z, pos = molecule_numbers_positions(structure(smiles))
    return vertical_levels(z, pos, make_engine("tblite", "GFN2-xTB"), film_epsilon=3.5, lone_pair_homo=rule)


@pytest.mark.parametrize("smiles, expected", [("c1ccncc1", 1), ("c1cc[nH]c1", 0), ("c1ccc2nsnc2c1", 2),
                                              ("N#Cc1ccccc1", 0), ("c1ccc(N=Nc2ccccc2)cc1", 2)])
def test_two_coordinate_nitrogen_counts_pyridine_imine_and_azo_but_not_pyrrole_or_nitrile(smiles, expected):
    z, pos = molecule_numbers_positions(structure(smiles))
    assert int(two_coordinate_nitrogen(z, pos).sum()) == expected


def test_quinoxaline_lone_pair_homo_is_replaced_by_the_pi_orbital():
    pi, aufbau = _levels(AZA["quinoxaline"], "pi"), _levels(AZA["quinoxaline"], "aufbau")
    shift = pi["xtb_lone_pair_shift_ev"]
    # a window around this project's own GFN2-xTB finding (lone-pair combination 1.21 eV above the highest π
    # orbital, screen/lonepair.py), not a published value
    assert 0.8 < shift < 1.6
    assert pi["xtb_homo_ev"] == pytest.approx(aufbau["xtb_homo_ev"] - shift)
    assert pi["xtb_ip_ev"] == pytest.approx(aufbau["xtb_ip_ev"] + shift)
    assert pi["xtb_ip_film_ev"] == pytest.approx(aufbau["xtb_ip_film_ev"] + shift)
    assert pi["xtb_gap_ev"] == pytest.approx(aufbau["xtb_gap_ev"] + shift)
    assert pi["xtb_ea_ev"] == aufbau["xtb_ea_ev"] and pi["xtb_lumo_ev"] == aufbau["xtb_lumo_ev"]
    # n→π* has almost no exchange (lone pair and π* barely overlap), π→π* a large one (common practice)
    assert aufbau["xtb_k_hl_ev"] < 0.05 < 0.3 < pi["xtb_k_hl_ev"]
    assert "lone_pair_homo" in pi["electronic_note"] and np.isnan(aufbau["xtb_lone_pair_shift_ev"])


@pytest.mark.parametrize("smiles", ["c1ccc2ccccc2c1", "c1ccc2nsnc2c1",
                                    "c1csc(-c2ccc(-c3cccs3)c3nsnc23)c1"])  # benzothiadiazole and a D-A-D unit
def test_pi_homo_molecules_are_untouched(smiles):
    pi, aufbau = _levels(smiles, "pi"), _levels(smiles, "aufbau")
    assert pi["xtb_lone_pair_shift_ev"] == 0.0
    for key in ("xtb_ip_ev", "xtb_homo_ev", "xtb_gap_ev", "xtb_k_hl_ev"):
        assert pi[key] == aufbau[key]


@pytest.mark.parametrize("protocol", PROTOCOLS)
def test_calibrated_ips_of_the_aza_naphthalenes_match_their_measured_values(protocol):
    # leave-one-out predictions of the shipped IP model; measured values in ip_gas.csv (NIST WebBook and
    # photoelectron papers, sources per row). Before the π-hole rule they were 0.38-1.21 eV low.
    res = pd.DataFrame(json.loads((REPO / "models" / protocol / "ip.json").read_text())["residuals"])
    aza = res[res["name"].isin(AZA)]
    assert len(aza) == len(AZA)
    err = aza["loo_ev"] - aza["measured_ev"]
    assert err.abs().max() < 0.35, dict(zip(aza["name"], err.round(2)))
