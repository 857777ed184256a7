"""Conformer spread: how much a molecule's raw levels depend on which conformer was kept.

The structures stage keeps one conformer, the lowest of up to
``rank_max_conformers`` by GFN2-xTB energy (:func:`screen.structures.build_structure`).
Its ranking single points already hold the frontier orbital energies of every
ranked conformer; the structure record keeps them (:func:`ranking_of`, key
:data:`RANKING_KEY`), so the spread costs nothing extra and is computed whenever
the record becomes a table row (:func:`screen.structures.status_row`). A rigid
molecule gives nearly the same orbitals in every conformer; a molecule whose
conformers differ in how its conjugated units stack or twist (the end groups of an
A–DA'D–A acceptor, a donor–π–acceptor dye) does not, and its computed levels are
less certain for it.

The spread of a quantity x over the ranked conformers is the Boltzmann-weighted
root-mean-square deviation from the kept (lowest) conformer's value,

.. math:: s_x = \\Big[\\sum_i w_i (x_i - x_0)^2\\Big]^{1/2}, \\qquad
          w_i = e^{-(E_i - E_0)/k_B T} \\Big/ \\sum_j e^{-(E_j - E_0)/k_B T}.

T = :data:`SPREAD_TEMPERATURE_K` = 1500 K is an effective temperature, not the
film's: the energies are xTB single points on force-field geometries, whose
conformer ordering is uncertain by a few kcal/mol (k_B·1500 K = 3.0 kcal/mol).
It is fitted so that the spread predicts how much the kept conformer changes when
the molecule is embedded with another seed (``benchmarks/conformer_seeds.py``, 92
reference molecules: RMS change of the kept conformer's orbital gap 0.059 eV; the
mean predicted variance s₀² + s₁² equals the observed one at 1494 K, and at 298 K
it is 3.5 times too small). Two conformers of equal energy whose x differ by d
give s = d/√2.

The calibration (:func:`screen.calibrate.apply_models`) adds the spread to a
prediction's σ through the model's weight on each raw quantity. Only orbital
energies are measured per conformer (the ions are computed for the kept one only);
the ΔSCF IP and EA, gas and film, are given the spread of −ε_HOMO and −ε_LUMO
(:data:`RAW_SOURCES`), a proxy checked by ``benchmarks/conformer_spread.py``.
The HOMO→LUMO exchange and overlap terms get none. A molecule with one ranked
conformer (a rigid molecule, a fullerene, or one above the ranking size cap) has
no measured spread (NaN) and adds nothing — nor does a record stored before the
ranking was kept; a polymer takes the spread of its longest oligomer that has one
(:func:`screen.levels.chain_limits`).

References
----------
.. [1] P. Pracht, S. Grimme, "Calculation of absolute molecular entropies and heat
   capacities made simple", Chem. Sci. 12 (2021) 6551. :doi:`10.1039/d1sc00621e`
   (Boltzmann weighting of a GFN2-xTB conformer ensemble)

Examples
--------
>>> import numpy as np
>>> round(boltzmann_rms([0.0, 0.0], [1.0, 1.2]), 4)  # equal energies: d/√2
0.1414
>>> from screen.constants import KB_HARTREE_K
>>> up = KB_HARTREE_K * SPREAD_TEMPERATURE_K * np.log(3)  # weights 3/4 and 1/4: d/2
>>> round(boltzmann_rms([0.0, up], [1.0, 1.2]), 4)
0.1
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from screen.columns import CONFORMER_SPREAD_COLUMNS
from screen.constants import HARTREE_EV, KB_HARTREE_K

__all__ = ["SPREAD_TEMPERATURE_K", "SPREAD_COLUMNS", "SPREAD_COUNT_COLUMN", "RANKING_KEY", "RAW_SOURCES",
           "boltzmann_rms", "ranking_of", "spread_columns", "conformer_sigma"]

#: effective temperature of the Boltzmann weights [K], fitted on seed-to-seed changes of the kept conformer
#: (benchmarks/conformer_seeds.py; see the module docstring)
SPREAD_TEMPERATURE_K = 1500.0
#: spread columns [eV] of the structure and electronic tables and of levels.csv, by orbital quantity
SPREAD_COLUMNS = dict(zip(("homo", "lumo", "gap"), CONFORMER_SPREAD_COLUMNS[:3]))
#: ranked conformers with a converged single point behind the spread (1: a single conformer, nothing compared)
SPREAD_COUNT_COLUMN = CONFORMER_SPREAD_COLUMNS[3]
#: key of a structure record holding its ranking (:func:`ranking_of`), from which the spread is computed
RANKING_KEY = "conf_ranking"
#: raw calibration quantity → (measured orbital quantity whose spread it is given, sign): ΔSCF IP ≈ −ε_HOMO and
#: EA ≈ −ε_LUMO across conformers of one molecule (Koopmans-type proxy; benchmarks/conformer_spread.py measures it)
RAW_SOURCES = {"xtb_ip_ev": ("homo", -1.0), "xtb_ip_film_ev": ("homo", -1.0), "xtb_homo_ev": ("homo", 1.0),
               "xtb_ea_ev": ("lumo", -1.0), "xtb_ea_film_ev": ("lumo", -1.0), "xtb_lumo_ev": ("lumo", 1.0),
               "xtb_gap_ev": ("gap", 1.0)}


def boltzmann_rms(energies_eh, values, temperature_k: float = SPREAD_TEMPERATURE_K) -> float:
    """Boltzmann-weighted RMS deviation of ``values`` from the value of the lowest-energy conformer.

    Parameters
    ----------
    energies_eh : array_like, shape (m,)
        Total energies of the conformers [Eh].
    values : array_like, shape (m,)
        The quantity for each conformer (any unit; the result has the same).
    temperature_k : float
        Temperature of the weights [K].

    Returns
    -------
    float
        The spread; NaN for fewer than two conformers.
    """
    e = np.asarray(energies_eh, float)
    x = np.asarray(values, float)
    if e.size < 2:
        return math.nan
    i0 = int(np.argmin(e))
    w = np.exp(-(e - e[i0]) / (KB_HARTREE_K * temperature_k))
    return float(np.sqrt(np.sum(w * (x - x[i0]) ** 2) / np.sum(w)))


def ranking_of(singlepoints) -> list[list[float]]:
    """What a structure record keeps of its ranking single points: ``[energy [Eh], ε_HOMO [eV], ε_LUMO [eV]]`` each.

    Parameters
    ----------
    singlepoints : iterable of screen.engines.SinglePoint
        Converged closed-shell single points of the ranked conformers (one SCF accuracy for all).
    """
    return [[float(sp.energy_eh), *(float(e) * HARTREE_EV for e in sp.frontier_eh())] for sp in singlepoints]


def spread_columns(ranking, n_ranked: int = 1) -> dict:
    """Spread columns of one molecule from its ranking (:func:`ranking_of`).

    Parameters
    ----------
    ranking : sequence of [energy, ε_HOMO, ε_LUMO]
        Empty when nothing was ranked.
    n_ranked : int
        Conformers ranked (reported when the ranking is empty: a single conformer).

    Returns
    -------
    dict
        :data:`SPREAD_COLUMNS` [eV] (NaN with fewer than two conformers) and
        :data:`SPREAD_COUNT_COLUMN`.
    """
    r = np.asarray(ranking, float).reshape(-1, 3)
    values = {"homo": r[:, 1], "lumo": r[:, 2], "gap": r[:, 2] - r[:, 1]}
    return {**{col: boltzmann_rms(r[:, 0], values[q]) for q, col in SPREAD_COLUMNS.items()},
            SPREAD_COUNT_COLUMN: len(r) if len(r) else int(n_ranked or 1)}


def conformer_sigma(frame: pd.DataFrame, weights: dict[str, float]) -> np.ndarray:
    """σ [eV] that the conformer spread adds to a linear prediction.

    Parameters
    ----------
    frame : pandas.DataFrame
        Rows with :data:`SPREAD_COLUMNS` (missing or NaN = not measured: adds 0).
    weights : dict
        The model's weight on each raw quantity (:func:`screen.calibration.linear.raw_weights`).

    Returns
    -------
    numpy.ndarray
        Per row: the weights of raw quantities with one orbital source are summed with their signs
        (the same conformers move them together), then the sources are added in quadrature.

    Examples
    --------
    >>> import pandas as pd
    >>> f = pd.DataFrame({"conf_spread_homo_ev": [0.1, float("nan")]})
    >>> conformer_sigma(f, {"xtb_ip_ev": 0.5, "xtb_homo_ev": -0.3}).round(3).tolist()  # |−0.5 − 0.3| × 0.1
    [0.08, 0.0]
    """
    per_source: dict[str, float] = {}
    for raw, weight in weights.items():
        if raw in RAW_SOURCES:
            source, sign = RAW_SOURCES[raw]
            per_source[source] = per_source.get(source, 0.0) + sign * weight
    total = np.zeros(len(frame))
    for source, weight in per_source.items():
        col = SPREAD_COLUMNS[source]
        if col in frame:
            spread = pd.to_numeric(frame[col], errors="coerce").fillna(0.0).to_numpy(float)
            total += (weight * spread) ** 2
    return np.sqrt(total)
