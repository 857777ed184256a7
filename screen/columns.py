"""Column lists of the files passed between stages (one home for each contract).

See ``docs/contracts.md`` for what each column means, its unit and its scale.
"""

from __future__ import annotations

__all__ = ["RAW_COLUMNS", "EXTRA_RAW_COLUMNS", "CONFORMER_SPREAD_COLUMNS", "ELECTRONIC_COLUMNS", "CALIBRATED_COLUMNS",
           "LEVELS_CONTRACT_COLUMNS", "LEVELS_MIN_COLUMNS", "SIGMA_COLUMNS", "RANKING_COLUMNS", "RANKING_EXTRA_COLUMNS",
           "TIE_SEPARATOR"]

#: separator of the partner ids in the partner matrix's ``best_partner`` on an exact tie (as the codes in a
#: ranking's ``flags``; :mod:`screen.matrix`, read back by :mod:`screen.report.matrix_page`)
TIE_SEPARATOR = ";"

#: raw engine values of ``levels.csv`` (ΔSCF IP/EA and orbital energies of the neutral) [eV]
RAW_COLUMNS = ["xtb_ip_ev", "xtb_ea_ev", "xtb_homo_ev", "xtb_lumo_ev", "xtb_gap_ev"]
#: raw values besides :data:`RAW_COLUMNS`: HOMO→LUMO exchange K and Coulomb J [eV] and
#: the HOMO/LUMO overlap [0-1] of the neutral (:func:`screen.excitation.frontier_integrals`), and the
#: ΔSCF IP and EA in a dielectric continuum of ε = ``electronic.film_epsilon`` [eV]
EXTRA_RAW_COLUMNS = ["xtb_k_hl_ev", "xtb_j_hl_ev", "xtb_overlap_hl", "xtb_ip_film_ev", "xtb_ea_film_ev"]

#: conformer spread of the neutral's frontier orbital energies over the ranked conformers [eV] and the number of
#: conformers behind it (:mod:`screen.conformer_spread`; NaN/1 = a single conformer, nothing to compare)
CONFORMER_SPREAD_COLUMNS = ["conf_spread_homo_ev", "conf_spread_lumo_ev", "conf_spread_gap_ev", "conf_spread_n"]

#: columns of the per-shard electronic table (``work/<batch>/electronic/shard-NNN.csv``)
ELECTRONIC_COLUMNS = (["key", "status", "error"] + RAW_COLUMNS + EXTRA_RAW_COLUMNS
                      + ["xtb_energy_eh", "xtb_cation_eh", "xtb_anion_eh", "xtb_energy_film_eh",
                         "xtb_cation_film_eh", "xtb_anion_film_eh", "xtb_lone_pair_shift_ev", "scf_rungs", "n_atoms", "sp_wall_s",
                         "electronic_note", "smiles_computed", "truncated_chains", "truncated_groups",
                         "n_conformers", *CONFORMER_SPREAD_COLUMNS, "forcefield", "geometry", "planar_variant",
                         "structure_wall_s"])
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
#: (plain words), the device model used, the acceptor class that chose its loss, the absorber gap [eV], the
#: candidate's representation (``molecule`` or ``polymer``: a repeat unit computed at the chain limit) and the
#: probability that both offsets clear their thresholds given the levels' σ (``p_aligned``), what a polymer's
#: levels rest on, and the energy scale of the row's levels (``film`` or ``gas``)
RANKING_EXTRA_COLUMNS = ["name", "homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev", "viable", "reason", "model",
                         "acceptor_class", "absorber_gap_ev", "representation", "p_aligned", "chain_n_max",
                         "chain_fit_quality", "truncated_groups", "scale"]
