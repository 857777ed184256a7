"""Column lists of the files passed between stages (one home for each contract).

See ``docs/contracts.md`` for what each column means, its unit and its scale.
"""

from __future__ import annotations

__all__ = ["RAW_COLUMNS", "CALIBRATED_COLUMNS", "LEVELS_CONTRACT_COLUMNS", "LEVELS_MIN_COLUMNS",
           "SIGMA_COLUMNS", "RANKING_COLUMNS", "RANKING_EXTRA_COLUMNS"]

#: raw engine values of ``levels.csv`` (ΔSCF IP/EA and orbital energies of the neutral) [eV]
RAW_COLUMNS = ["xtb_ip_ev", "xtb_ea_ev", "xtb_homo_ev", "xtb_lumo_ev", "xtb_gap_ev"]
#: calibrated values of ``levels.csv`` [eV], with their σ and the scale of homo/lumo/gap_opt
CALIBRATED_COLUMNS = ["ip_ev", "ea_ev", "gap_fund_ev", "homo_ev", "lumo_ev", "gap_opt_ev",
                      "ip_sigma_ev", "ea_sigma_ev", "homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev", "scale"]
#: the first columns of ``levels.csv``, in order
LEVELS_CONTRACT_COLUMNS = ["id", "smiles", "status", "error"] + CALIBRATED_COLUMNS
#: what any levels file (a run's or a user's own) must have
LEVELS_MIN_COLUMNS = ["id", "homo_ev", "lumo_ev", "gap_opt_ev", "scale"]
#: optional uncertainty columns of a levels file [eV]
SIGMA_COLUMNS = ("homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev")
#: columns of ``ranking.csv``, in order
RANKING_COLUMNS = ["rank", "id", "smiles", "role", "homo_ev", "lumo_ev", "gap_opt_ev", "partner", "delta_lumo_ev",
                   "delta_homo_ev", "voc_v", "jsc_ma_cm2", "ff", "pce_pct", "pce_sigma_pct", "p_above_target",
                   "passes", "flags"]
#: columns after the contract ones in ``ranking.csv``: name, σ [eV], whether the pair is viable and why not
#: (plain words), the device model used, the acceptor class that chose its loss, the absorber gap [eV]
RANKING_EXTRA_COLUMNS = ["name", "homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev", "viable", "reason", "model",
                         "acceptor_class", "absorber_gap_ev"]
