"""Ranking stage: partner offsets → viability → device estimates → filters → ranking.

Each candidate row of a levels table is paired with one partner material: a
donor candidate with an acceptor partner and vice versa; a candidate without a
role takes the role its levels support against the partner
(:func:`screen.viability.role_from_levels`).  Every pair is classified before
any efficiency is computed (:mod:`screen.viability`): a pair that is not viable
(no type-II alignment, an offset below threshold, no positive Voc, a gap
outside the window, the partner's own role, a sensitiser dye …) gets no
efficiency (empty, never 0), says why in plain words (flags of severity
``not_viable``, column ``reason``) and is sorted below every viable row.  The
viable pairs get Voc, Jsc and efficiency from
:meth:`screen.device.DeviceModel.evaluate` and the spread from the level
uncertainties (each row's own σ columns and the partner's) from
:func:`screen.sampling.sample_pce`.  Everything is vectorised over the
candidates.

Sign convention (both > 0 for a working type-II heterojunction):

.. math::

    \\Delta_{LUMO} = E_{LUMO}^{D} - E_{LUMO}^{A}, \\qquad
    \\Delta_{HOMO} = E_{HOMO}^{D} - E_{HOMO}^{A}

Energies are on the vacuum scale [eV]; levels and partner must be on the same
scale (``film`` or ``gas``) or the ranking stops; impossible levels (positive
HOMO, swapped HOMO/LUMO, a gap in nm …) stop it too
(:mod:`screen.levels_check`).

:func:`rank_candidates` runs these steps, one function each: the ranked rows
and their arrays (:func:`_candidates`), the partner's role and the candidates'
roles (:func:`partner_role`, :func:`_roles`), the donor/acceptor pair arrays and
acceptor classes (:func:`_pair`), the device numbers
(:meth:`screen.device.DeviceModel.evaluate`), the flags (:func:`_flag_masks`,
codes and severities from :mod:`screen.flags`), the σ spread of the viable rows
(:func:`_spread`), the table (:func:`_ranking_frame`) and the order
(:func:`_sort_ranking`).  The flags and their severities are listed in
:mod:`screen.flags`.

References
----------
.. [1] M. C. Scharber, D. Mühlbacher, M. Koppe, P. Denk, C. Waldauf,
   A. J. Heeger, C. J. Brabec, Adv. Mater. 18 (2006) 789.
   :doi:`10.1002/adma.200501717`
.. [2] D. Veldman et al., Adv. Funct. Mater. 19 (2009) 1939. :doi:`10.1002/adfm.200801834`
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from screen.columns import RANKING_COLUMNS, RANKING_EXTRA_COLUMNS, SIGMA_COLUMNS
from screen.device import DeviceModel
from screen.devicepars import acceptor_class_key, voc_unranked_classes
from screen.errors import ConfigError, ScaleMismatchError
from screen.flags import (
    DEVICE_FLAGS,
    FAR_FROM_REFERENCE_SIMILARITY,
    FLAG_ORDER,
    INFO_FLAGS,
    NOT_VIABLE_FLAGS,
    join_flags,
    reason_of,
    window_bound,
)
from screen.io import count_text, text_cells
from screen.levels_check import check_levels, check_partner, inconsistent_rows
from screen.partners import ROLES, Partner, PartnerError, complement
from screen.rank_rows import heavy_atoms as _heavy_atoms
from screen.rank_rows import numeric as _numeric
from screen.rank_rows import ranked_mask as _ranked_mask
from screen.rank_rows import split_ranked as _split_ranked
from screen.rank_rows import text as _text
from screen.sampling import sample_pce
from screen.schema import check_options, resolve, section_defaults
from screen.viability import (MC_DECIMALS, OFFSET_TOL_EV, WRITTEN_DECIMALS, acceptor_class_of, offset_clears,
                              role_from_levels)

__all__ = [
    "p_aligned", "ALIGNMENT_UNCERTAIN", "partner_acceptor_class",
    "RANKING_COLUMNS",
    "EXTRA_COLUMNS",
    "FLAG_ORDER",
    "INFO_FLAGS",
    "RankOptions",
    "ScaleMismatchError",
    "check_scales",
    "check_input_levels",
    "partner_role",
    "rank_candidates",
    "device_model",
]

#: columns after the contract ones (:data:`screen.columns.RANKING_EXTRA_COLUMNS`, kept under its old name)
EXTRA_COLUMNS = RANKING_EXTRA_COLUMNS
#: schema defaults of the ``rank`` config section (the one source of :class:`RankOptions`' defaults)
_DEFAULTS = section_defaults("rank")
#: decimals of the numbers written to the ranking
_ROUND = WRITTEN_DECIMALS
#: columns rounded to :data:`_ROUND` decimals
_ROUNDED = ("homo_ev", "lumo_ev", "gap_opt_ev", "delta_lumo_ev", "delta_homo_ev", "voc_v", "jsc_ma_cm2", "ff",
            "pce_pct", "p_aligned", *SIGMA_COLUMNS)
#: decimals of the Monte-Carlo figures (:data:`screen.viability.MC_DECIMALS`)
_MC_ROUND = MC_DECIMALS
_MC_ROUNDED = ("pce_sigma_pct", "p_above_target")
#: device numbers copied from :meth:`DeviceModel.evaluate` (empty where there is no pair)
_DEVICE_NUMBERS = ("delta_lumo_ev", "delta_homo_ev", "voc_v", "jsc_ma_cm2", "ff", "pce_pct")


@dataclass(frozen=True)
class RankOptions:
    """Settings of the ranking (config section ``rank``).

    Parameters
    ----------
    role : {'donor', 'acceptor', None}
        Role of rows whose ``role`` column is empty (None: the complement of
        the partner's role, flagged ``role_assumed``).
    sort_by : {'pce_pct', 'p_above_target'}
        Ranking key (descending) after ``passes``.
    target_pce_pct : float
        Efficiency threshold of ``p_above_target``. [%]
    shortlist_size : int
        Passing rows written to ``shortlist.sdf``.
    n_samples : int
        Monte-Carlo samples per candidate for σ propagation (10 to :data:`screen.sampling.MAX_N_SAMPLES`, the
        schema's bounds).
    seed : int
        Seed of the sampler (same input → same numbers).
    gap_min_ev, gap_max_ev : float
        Window for the candidate's optical gap. [eV]
    max_heavy_atoms : int or None
        Largest heavy-atom count that passes (None: no limit).
    partner_sigma : bool
        Include the partner's σ in the sampling (True) or treat the partner's
        levels as exact (False).

    Raises
    ------
    ConfigError
        A value of another type, outside the allowed set or range, NaN or infinite (names the ``rank.`` field;
        the schema's ``rank`` section, :func:`screen.schema.check_options`), or ``gap_min_ev`` above
        ``gap_max_ev``.

    Notes
    -----
    The defaults are the schema defaults of the ``rank`` section
    (:func:`screen.schema.section_defaults`), so the command line, the config
    file and Python use the same numbers.

    Examples
    --------
    >>> RankOptions().n_samples, RankOptions(role="donor").role
    (2000, 'donor')
    """

    role: str | None = _DEFAULTS["role"]
    sort_by: str = _DEFAULTS["sort_by"]
    target_pce_pct: float = _DEFAULTS["target_pce_pct"]
    shortlist_size: int = _DEFAULTS["shortlist_size"]
    n_samples: int = _DEFAULTS["n_samples"]
    seed: int = _DEFAULTS["seed"]
    gap_min_ev: float = _DEFAULTS["gap_min_ev"]
    gap_max_ev: float = _DEFAULTS["gap_max_ev"]
    max_heavy_atoms: int | None = _DEFAULTS["max_heavy_atoms"]
    partner_sigma: bool = _DEFAULTS["partner_sigma"]

    def __post_init__(self):
        # the schema's ``rank`` section, as a config file and --set: role, sort_by, 0 <= target_pce_pct <= 100,
        # 10 <= n_samples <= MAX_N_SAMPLES (one candidate's samples are held in memory at once), an integer seed,
        # a boolean partner_sigma, NaN and infinity refused (an API audit: target nan gave P(PCE > target) = 0
        # for every row, n_samples=3 a P of 1.0 or 0.667, partner_sigma="no" counted as True)
        check_options(self, "rank")
        if self.gap_min_ev > self.gap_max_ev:
            raise ConfigError(f"rank.gap_min_ev ({self.gap_min_ev}) is above rank.gap_max_ev ({self.gap_max_ev})")

    @classmethod
    def from_mapping(cls, mapping: dict | None) -> RankOptions:
        """Build from the ``rank`` config section, rejecting unknown keys.

        Raises
        ------
        ConfigError
            An unknown key or a value out of range.

        Examples
        --------
        >>> RankOptions.from_mapping({"sort_by": "p_above_target"}).sort_by
        'p_above_target'
        >>> RankOptions.from_mapping({"target_pce_pct": -5})
        Traceback (most recent call last):
        ...
        screen.errors.ConfigError: RankOptions: field rank.target_pce_pct: -5 is less than the minimum of 0 (rank.target_pce_pct is in %)
        """
        mapping = dict(mapping or {})
        known = set(asdict(cls()))
        unknown = set(mapping) - known
        if unknown:
            raise ConfigError(f"unknown rank option(s) {sorted(unknown)}; allowed: {sorted(known)}")
        return cls(**mapping)


def device_model(config: Mapping | None) -> DeviceModel:
    """The device model of a configuration's ``device`` section.

    Parameters
    ----------
    config : mapping or None
        Run configuration, a plain dict or a :class:`screen.config.Config`
        (defaults fill what is missing).

    Returns
    -------
    DeviceModel
        With ``eqe``, ``ff``, ``loss_v`` [V], ``min_delta_lumo_ev``,
        ``min_delta_homo_ev`` [eV] and ``absorber`` from the configuration.

    References
    ----------
    .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789.
       :doi:`10.1002/adma.200501717`

    Examples
    --------
    >>> device_model({"device": {"eqe": 0.7}}).eqe
    0.7
    """
    return DeviceModel(**resolve(dict(config or {}))["device"])


# --------------------------------------------------------------------------- checks

def check_scales(levels: pd.DataFrame, partner: Partner) -> None:
    """Refuse to combine levels and a partner on different energy scales.

    Parameters
    ----------
    levels : pandas.DataFrame
        Rows to be ranked (with a ``scale`` column).
    partner : Partner

    Raises
    ------
    ScaleMismatchError
        Naming the scales of the levels and of the partner.

    Examples
    --------
    >>> from screen.partners import resolve_partner
    >>> check_scales(pd.DataFrame({"scale": ["gas"]}), resolve_partner("c60"))
    Traceback (most recent call last):
    ...
    screen.errors.ScaleMismatchError: levels are on the 'gas' scale but partner 'c60' is on the 'film' scale; rerun levels with levels.scale=film or give a partner on the gas scale
    """
    if "scale" not in levels:
        raise ScaleMismatchError("the levels have no 'scale' column; every level must name its scale (film or gas)")
    scales = levels["scale"].pipe(text_cells).str.strip().str.lower()
    bad = scales[scales.ne(partner.scale)]
    if bad.empty:
        return
    counts = bad.value_counts()
    if len(counts) == 1 and len(bad) == len(scales):
        found = f"levels are on the {counts.index[0]!r} scale"
    else:
        found = "levels rows are on the " + ", ".join(f"{s!r} scale ({n} rows)" for s, n in counts.items())
        found += f" ({len(scales) - len(bad)} rows on {partner.scale!r})"
    if "" in counts.index:
        found += " ('' = no scale given: every row of a levels file must say film or gas)"
    other = "gas" if partner.scale == "film" else "film"
    raise ScaleMismatchError(
        f"{found} but partner {partner.id!r} is on the {partner.scale!r} scale; rerun levels with "
        f"levels.scale={partner.scale} or give a partner on the {other} scale")


def partner_role(levels: pd.DataFrame, partner: Partner, options: RankOptions) -> tuple[str, bool]:
    """Role of the partner and whether it was inferred.

    A partner without a role (a file or levels row without ``role``, a
    ``smiles:`` partner) takes the complement of ``options.role``, else of the
    one role that the candidates' ``role`` column names.

    Returns
    -------
    (str, bool)
        ``'donor'`` or ``'acceptor'``, and True if inferred.

    Raises
    ------
    PartnerError
        A role other than donor, acceptor or empty (case and spaces ignored), or a role that cannot be inferred
        (no default role, candidates of both roles or none).
    """
    role = str(partner.role or "").strip().lower()
    if role in ROLES:
        return role, False
    if role:  # a hand-built Partner(role="dye") was paired as an acceptor (an API audit); a file's role is checked
        raise PartnerError(f"partner {partner.id!r} has role {partner.role!r}; a partner is a donor or an acceptor "
                           "(a sensitiser dye is screened with `dascreen dyecell`): give role='donor', 'acceptor' "
                           "or '' (the ranking then takes the complement of the candidates' role)")
    if options.role is not None:
        return complement(options.role), True
    if "role" in levels:
        given = set(levels["role"].pipe(text_cells).str.strip().str.lower()) & set(ROLES)
        if len(given) == 1:
            return complement(given.pop()), True
    if partner.kind == "smiles":
        raise PartnerError(f"partner {partner.id!r} is computed from its SMILES and has no role of its own, and the "
                           "candidates do not imply one (no role column, or both roles in it); set the candidates' "
                           "role (dascreen's --role donor|acceptor, rank.role in a configuration; the partner takes the "
                           "other role) or "
                           "fill the role column of the levels file. A smiles: partner cannot carry a role of its "
                           "own; for a fixed role, copy its computed levels (OUT/work/partner-<key>/levels.csv, made "
                           "by a ranking with --role) to a one-row partner file with a role column")
    raise PartnerError(f"partner {partner.id!r} has no role and the candidates do not imply one; set the "
                       "candidates' role (dascreen's --role donor|acceptor, rank.role in a configuration) or give the "
                       "partner a role column")


# --------------------------------------------------------------------------- reading the levels

@dataclass(frozen=True)
class _Candidates:
    """The ranked rows as arrays: ids, levels [eV] and σ [eV] (empty σ → 0)."""

    ids: np.ndarray
    homo: np.ndarray
    lumo: np.ndarray
    gap: np.ndarray
    sigma: dict


def partner_acceptor_class(partner: Partner) -> str:
    """A partner's acceptor class: the one its file gives, else the one its SMILES shows
    (:func:`screen.viability.acceptor_class_of`); '' when neither tells it."""
    return partner.acceptor_class or acceptor_class_of(partner.smiles)


def _acceptor_classes(lv: pd.DataFrame, needed: np.ndarray) -> np.ndarray:
    """The ``acceptor_class`` column where given (:func:`screen.devicepars.acceptor_class_key`: ``Fullerene`` and
    ``nfa_other`` are ``fullerene`` and ``nfa-other``; another value was refused by :func:`check_input_levels`),
    else the class of the SMILES ('' if unknown); only for the ``needed`` rows (acceptor candidates), each
    distinct SMILES classified once.

    Examples
    --------
    >>> _acceptor_classes(pd.DataFrame({"acceptor_class": ["Fullerene", "nfa_other", ""]}), np.ones(3, bool)).tolist()
    ['fullerene', 'nfa-other', '']
    """
    given = _text(lv, "acceptor_class")
    smiles = _text(lv, "smiles")
    out = np.full(len(lv), "", dtype=object)
    seen: dict = {}
    for i in np.flatnonzero(needed):
        cls = acceptor_class_key(given[i])
        if not cls:
            if smiles[i] not in seen:
                seen[smiles[i]] = acceptor_class_of(smiles[i])
            cls = seen[smiles[i]]
        out[i] = cls
    return out


def _candidates(lv: pd.DataFrame) -> _Candidates:
    """Read ids, levels and σ (empty → 0); the levels are already checked."""
    ids = _text(lv, "id")
    homo, lumo, gap = (_numeric(lv, c) for c in ("homo_ev", "lumo_ev", "gap_opt_ev"))
    sig = {c: np.nan_to_num(_numeric(lv, c), nan=0.0) for c in SIGMA_COLUMNS}
    return _Candidates(ids, homo, lumo, gap, sig)


# --------------------------------------------------------------------------- steps of rank_candidates

@dataclass(frozen=True)
class _Roles:
    """Role of every row and the role flags."""

    role: np.ndarray              # 'donor' / 'acceptor' / 'dye' (object array)
    is_donor: np.ndarray
    same_role: np.ndarray         # same role as the partner: no pair
    dye: np.ndarray               # a sensitiser dye (a run's own levels): no pair, ranked by `dascreen dyecell`
    role_invalid: np.ndarray      # the role column holds something else
    role_assumed: np.ndarray      # invalid role and no default: the partner's complement
    role_from_levels: np.ndarray  # no role: its levels support the partner's complement
    role_unsupported: np.ndarray  # no role: its levels support only the partner's own role
    no_type_ii_role: np.ndarray   # no role: neither role gives type II

    @property
    def paired(self) -> np.ndarray:
        """Rows paired with the partner (neither the partner's own role nor a dye)."""
        return ~(self.same_role | self.dye)


def _roles(lv: pd.DataFrame, cand: _Candidates, partner: Partner, p_role: str, options: RankOptions) -> _Roles:
    """Roles from the ``role`` column (case and spaces ignored), else ``options.role``; a row with neither is
    evaluated as the partner's complement and told whether its levels support that role.  A dye (a run's own
    levels.csv may hold one; a user's file with one is refused before) keeps its role and gets no pair."""
    raw_role = np.char.lower(np.char.strip(_text(lv, "role").astype(str)))
    empty = raw_role == ""
    valid = np.isin(raw_role, ROLES)
    dye = raw_role == "dye"
    role_invalid = ~empty & ~valid & ~dye
    default = options.role if options.role is not None else complement(p_role)
    no_role = (empty | role_invalid) & (options.role is None)
    role = np.where(valid | dye, raw_role, default).astype(object)
    as_donor, as_acceptor = role_from_levels(cand.homo, cand.lumo, partner.homo_ev, partner.lumo_ev)
    fits, other = (as_donor, as_acceptor) if default == "donor" else (as_acceptor, as_donor)
    # without both levels the levels say nothing about the role: assumed, and the row is input_missing
    known = ~(np.isnan(cand.homo) | np.isnan(cand.lumo))
    unsupported = no_role & known & ~fits & other
    return _Roles(role, role == "donor", role == p_role, dye, role_invalid,
                  (role_invalid | (empty & ~known)) & no_role, empty & no_role & known & fits, unsupported,
                  no_role & known & ~fits & ~other)


@dataclass(frozen=True)
class _Pair:
    """Donor and acceptor arrays of every pair, in :data:`screen.device.PAIR_LEVELS` order [eV]."""

    levels: tuple
    sigmas: tuple
    acceptor_class: np.ndarray


def _pair(cand: _Candidates, is_donor: np.ndarray, partner: Partner, partner_sigma: bool,
          cand_class: np.ndarray) -> _Pair:
    """Put the candidate on its side of the pair and the partner on the other (σ of the partner × 0 if not
    sampled)."""
    def split(cand_value, partner_value):
        return np.where(is_donor, cand_value, partner_value), np.where(is_donor, partner_value, cand_value)

    d_homo, a_homo = split(cand.homo, partner.homo_ev)
    d_lumo, a_lumo = split(cand.lumo, partner.lumo_ev)
    d_gap, a_gap = split(cand.gap, partner.gap_opt_ev)
    k = 1.0 if partner_sigma else 0.0
    s_d_homo, s_a_homo = split(cand.sigma["homo_sigma_ev"], k * partner.homo_sigma_ev)
    s_d_lumo, s_a_lumo = split(cand.sigma["lumo_sigma_ev"], k * partner.lumo_sigma_ev)
    s_d_gap, s_a_gap = split(cand.sigma["gap_opt_sigma_ev"], k * partner.gap_opt_sigma_ev)
    p_class = partner_acceptor_class(partner) if partner.role != "donor" else ""
    acc_class = np.where(is_donor, p_class, cand_class).astype(object)
    return _Pair((d_homo, d_lumo, d_gap, a_homo, a_lumo, a_gap),
                 (s_d_homo, s_d_lumo, s_d_gap, s_a_homo, s_a_lumo, s_a_gap), acc_class)


#: the sampler's outputs the ranking keeps: the two columns and the steep-edge verdict
_SPREAD_KEYS = ("pce_sigma_pct", "p_above_target", "estimate_on_edge")


def _spread(model: DeviceModel, pair: _Pair, pair_ok: np.ndarray, options: RankOptions) -> dict:
    """``pce_sigma_pct`` [%], ``p_above_target`` and ``estimate_on_edge`` (:func:`screen.sampling.sample_pce`) of
    the viable rows (NaN elsewhere); each row's own σ."""
    n = pair_ok.size
    mc = {key: np.full(n, np.nan) for key in _SPREAD_KEYS}
    idx = np.flatnonzero(pair_ok)
    if idx.size:
        levels = [arr[idx] for arr in pair.levels]
        s_d_homo, s_d_lumo, s_d_gap, s_a_homo, s_a_lumo, s_a_gap = (s[idx] for s in pair.sigmas)
        s = sample_pce(model, *levels,
                       donor_homo_sigma_ev=s_d_homo, donor_lumo_sigma_ev=s_d_lumo,
                       donor_gap_sigma_ev=s_d_gap, acceptor_homo_sigma_ev=s_a_homo,
                       acceptor_lumo_sigma_ev=s_a_lumo, acceptor_gap_sigma_ev=s_a_gap,
                       n_samples=options.n_samples, seed=options.seed, target_pct=options.target_pce_pct,
                       acceptor_class=pair.acceptor_class[idx])
        for key in _SPREAD_KEYS:
            mc[key][idx] = s[key]
    return mc


def _spread_masks(spread: dict, sampled: np.ndarray) -> dict[str, np.ndarray]:
    """The flags of the Monte-Carlo spread of the ``sampled`` rows (viable, paired):

    - ``few_viable_samples``: fewer than two samples stay viable, so ``pce_sigma_pct`` is not known (left
      empty; a row without σ has a true 0);
    - ``estimate_on_edge``: the point estimate (at the estimated levels, unchanged) lies outside the 5–95 %
      range of the viable samples' efficiencies by more than a quarter of their σ and 0.05 percentage points
      (:func:`screen.sampling.sample_pce`): it sits on a steep edge of the model, and the ± and P(PCE > target)
      describe samples that mostly land elsewhere (the review's case: ΔHOMO 0.003 eV on the fitted yield
      1 − exp(−Δ/0.01 eV) gave "6.3 ± 1.8 %" beside P(PCE > 10 %) = 49 %, the viable samples' mean 12.3 %).

    Examples
    --------
    >>> m = _spread_masks({"pce_sigma_pct": np.array([1.8, 1.4, np.nan]),
    ...                    "estimate_on_edge": np.array([1.0, 0.0, 0.0])}, np.ones(3, bool))
    >>> m["estimate_on_edge"].tolist(), m["few_viable_samples"].tolist()
    ([True, False, False], [False, False, True])
    """
    return {"estimate_on_edge": sampled & (np.asarray(spread["estimate_on_edge"], dtype=float) == 1.0),
            "few_viable_samples": sampled & np.isnan(spread["pce_sigma_pct"])}


#: ``p_aligned`` strictly between these: the verdict on the alignment has a one-in-four chance or more of being the
#: other way, flag ``alignment_uncertain`` (a band of ±1σ, 0.16–0.84, flagged most pairs against a non-fullerene
#: acceptor at today's level σ of 0.2–0.3 eV, and the flag told nothing apart)
ALIGNMENT_UNCERTAIN = (0.25, 0.75)


def p_aligned(pair_levels, pair_sigmas, min_lumo: float, min_homo: float, check_homo: bool) -> np.ndarray:
    """Probability that both offsets clear their thresholds, for normal, independent level errors.

    ΔLUMO = LUMO_D − LUMO_A must exceed ``min_lumo`` and ΔHOMO = HOMO_D − HOMO_A must exceed ``min_homo`` when
    the model checks it, else 0 (type II is always required); each offset's σ is the root sum of squares of its
    two levels' σ. With σ = 0 the probability is 1 or 0, by the rule of the classification and the sampler
    (:func:`screen.viability.offset_clears`: an offset within half of the last written decimal below its threshold
    meets it). NaN where
    a level is missing.

    Parameters
    ----------
    pair_levels, pair_sigmas : tuple of array_like
        Donor HOMO, LUMO, gap, acceptor HOMO, LUMO, gap and their σ [eV] (:data:`screen.device.PAIR_LEVELS`).
    min_lumo, min_homo : float
        Offset thresholds [eV].
    check_homo : bool
        Whether ΔHOMO is held to ``min_homo``.

    Examples
    --------
    >>> lv = ([-5.3], [-3.5], [1.8], [-5.6], [-4.0], [1.4])
    >>> p_aligned(lv, ([0.0] * 6), 0.0, 0.0, True).tolist()
    [1.0]
    >>> s = ([0.2], [0.2], [0.1], [0.2], [0.2], [0.1])  # ΔHOMO 0.3, ΔLUMO 0.5 eV, each σ 0.28 eV: 0.855 × 0.961
    >>> round(float(p_aligned(lv, s, 0.0, 0.0, True)[0]), 2)
    0.82
    >>> lv = ([-5.45], [-3.7], [1.5], [-5.9], [-4.0], [1.6])  # ΔLUMO 0.29999999999999982 eV meets 0.3 eV
    >>> p_aligned(lv, ([0.0] * 6), 0.3, 0.3, True).tolist()
    [1.0]
    """
    from scipy.special import ndtr

    d_homo, d_lumo, _, a_homo, a_lumo, _ = (np.asarray(v, dtype=float) for v in pair_levels)
    s_d_homo, s_d_lumo, _, s_a_homo, s_a_lumo, _ = (np.nan_to_num(np.asarray(v, dtype=float)) for v in pair_sigmas)

    def prob(delta, threshold, sigma):
        # σ = 0: the verdict of the classification itself (offset_clears: type II, the threshold less OFFSET_TOL_EV)
        with np.errstate(divide="ignore", invalid="ignore"):
            z = np.where(sigma > 0, (delta - threshold) / np.where(sigma > 0, sigma, 1.0),
                         np.where(offset_clears(delta, threshold), np.inf, -np.inf))
        return np.where(np.isnan(delta), np.nan, ndtr(z))

    p_lumo = prob(d_lumo - a_lumo, min_lumo, np.hypot(s_d_lumo, s_a_lumo))
    p_homo = prob(d_homo - a_homo, min_homo if check_homo else 0.0, np.hypot(s_d_homo, s_a_homo))
    return p_lumo * p_homo


def _flag_masks(lv: pd.DataFrame, cand: _Candidates, roles: _Roles, dev: dict, partner: Partner,
                options: RankOptions, follows_class: bool, unranked=frozenset()) -> dict[str, np.ndarray]:
    """One boolean mask per flag code (:data:`screen.flags.FLAG_ORDER`): device flags of the rows with a
    pair, the gap window, the heavy-atom limit and the role flags (``dev`` with ``p_aligned`` and
    ``acceptor_class``); ``unranked``: acceptor classes without held-out Voc ranking skill.

    The gap window is judged on the gap as written (``gap_opt_ev``, :data:`_ROUND` decimals) against its limits
    as the reason quotes them (:func:`screen.flags.window_bound`, the same decimals), within
    :data:`screen.viability.OFFSET_TOL_EV`: a gap of 0.99999 eV, written 1.0, lies inside 1.00–3.00 eV, and a row
    never reads "outside the window" beside a gap written inside it."""
    n = cand.ids.size
    pair_ok = roles.paired
    cand_missing = np.isnan(cand.homo) | np.isnan(cand.lumo) | np.isnan(cand.gap)
    written = np.round(cand.gap, _ROUND)  # as _ranking_frame writes it
    lo, hi = window_bound(options.gap_min_ev), window_bound(options.gap_max_ev)
    with np.errstate(invalid="ignore"):
        gap_out = (written < lo - OFFSET_TOL_EV) | (written > hi + OFFSET_TOL_EV)
    heavy_out = np.zeros(n, dtype=bool)
    heavy_unknown = np.zeros(n, dtype=bool)
    if options.max_heavy_atoms is not None:
        heavy = _heavy_atoms(lv)
        heavy_unknown = np.isnan(heavy)
        with np.errstate(invalid="ignore"):
            heavy_out = heavy > options.max_heavy_atoms
    is_partner = np.zeros(n, dtype=bool)
    if partner.kind == "id":
        is_partner = cand.ids == partner.id
    elif partner.kind == "smiles" and partner.smiles:  # the same structure as the computed partner (canonical SMILES)
        is_partner = _text(lv, "smiles") == partner.smiles
    aligned = dev["p_aligned"]
    same = _same_structure(lv, cand, roles)
    families = _known_bias(lv)  # once: without the column it matches every row's SMILES
    device = {code: np.asarray(dev[code], bool) & pair_ok for code in DEVICE_FLAGS}
    device["input_missing"] = device["input_missing"] | cand_missing
    return {
        "role_dye": roles.dye,
        "same_role_as_partner": roles.same_role & ~roles.role_unsupported,
        "role_unsupported": roles.role_unsupported,
        "no_type_ii_role": roles.no_type_ii_role,
        "role_invalid": roles.role_invalid,
        "is_partner": is_partner,
        "levels_inconsistent": inconsistent_rows(lv) & _computed_rows(lv),  # a user's row was refused before
        **device,
        "gap_out_of_window": gap_out,
        "too_many_heavy_atoms": heavy_out,
        "gas_scale_levels": pair_ok & (_scale(lv) == "gas"),
        "heavy_atoms_unknown": heavy_unknown,
        "alignment_uncertain": pair_ok & (aligned > ALIGNMENT_UNCERTAIN[0]) & (aligned < ALIGNMENT_UNCERTAIN[1]),
        "acceptor_class_unknown": (pair_ok & np.asarray(dev["viable"], bool) & follows_class
                                   & (np.asarray(dev["acceptor_class"], dtype=object).astype(str) == "")),
        "class_voc_unranked": (pair_ok & np.asarray(dev["viable"], bool)
                               & np.isin(np.asarray(dev["acceptor_class"], dtype=object).astype(str), list(unranked))),
        "same_structure": same,
        "same_computed_structure": _same_computed(lv, roles) & ~same,
        "far_from_reference": _far_from_reference(lv),
        "known_family_bias": _has_family(families, "dpp"),
        "known_family_bias_ndi": _has_family(families, "ndi_polymer"),
        "known_family_bias_ct": _has_family(families, "ct_polymer"),
        "chain_fit_poor": _text(lv, "chain_fit_quality") == "poor",
        "lone_pair_homo": _lone_pair_homo(lv),
        "role_from_levels": roles.role_from_levels,
        "role_assumed": roles.role_assumed,
    }


def _same_structure(levels: pd.DataFrame, cand: _Candidates, roles: _Roles) -> np.ndarray:
    """Rows whose ``duplicate_of`` (a run's levels.csv) names a ranked row of the same role: the same pair again.

    Examples
    --------
    >>> lv = pd.DataFrame({"duplicate_of": ["", "a", "a"]})
    >>> c = _Candidates(np.array(["a", "b", "c"]), *(np.zeros(3),) * 3, {})
    >>> r = _Roles(np.array(["donor", "donor", "acceptor"], dtype=object), *(np.zeros(3, bool),) * 8)
    >>> _same_structure(lv, c, r).tolist()
    [False, True, False]
    """
    dup = _text(levels, "duplicate_of")
    role_of = dict(zip(cand.ids, roles.role))
    return np.array([bool(d) and role_of.get(d) == r for d, r in zip(dup, roles.role)], dtype=bool)


def _same_computed(levels: pd.DataFrame, roles: _Roles) -> np.ndarray:
    """Rows of the same role whose ``smiles_computed`` (a run's levels: after side chains were cut) equals
    another row's while their input SMILES differ (a meeting-day audit: N-methyl and N-hexyl rylene imides got
    identical numbers and were both shortlisted, with no word).

    Examples
    --------
    >>> lv = pd.DataFrame({"smiles": ["CCCCCCc1ccsc1", "CCCCCCCCc1ccsc1", "Cc1ccsc1"],
    ...                    "smiles_computed": ["Cc1ccsc1", "Cc1ccsc1", "Cc1ccsc1"]})
    >>> r = _Roles(np.array(["donor", "donor", "acceptor"], dtype=object), *(np.zeros(3, bool),) * 8)
    >>> _same_computed(lv, r).tolist()
    [True, True, False]
    """
    computed, given = _text(levels, "smiles_computed"), _text(levels, "smiles")
    out = np.zeros(len(levels), dtype=bool)
    if not computed.any():
        return out
    groups: dict = {}
    for i, (c, r) in enumerate(zip(computed, roles.role)):
        if c:
            groups.setdefault((c, r), []).append(i)
    for rows in groups.values():
        if len({given[i] for i in rows}) > 1:
            out[rows] = True
    return out


#: not-viable reasons of the alignment that get the chance it holds within the levels' σ appended
_ALIGNMENT_CODES = ("lumo_inverted", "homo_inverted", "lumo_offset_low", "homo_offset_low")


def _add_alignment_odds(reasons: list, flags, p_aligned) -> None:
    """Append to a misalignment reason how likely the alignment holds within the levels' σ, when that is 5 % or
    more: the verdict is on the estimated levels, and a pair 0.08 eV on the wrong side of a 0.2 eV σ is a near miss
    (a materials check: PM6 with an IT-DM acceptor was told "holes cannot move" at P(aligned) 0.22).

    Examples
    --------
    >>> r = ["inverted alignment", "inverted alignment", ""]
    >>> _add_alignment_odds(r, np.array(["homo_inverted", "homo_inverted", ""]), np.array([0.22, 0.01, np.nan]))
    >>> print(r[0]); print(r[1])
    inverted alignment (within the levels' σ the alignment holds in 22 % of cases)
    inverted alignment
    """
    p = np.asarray(p_aligned, dtype=float)
    for i, cell in enumerate(flags):
        if reasons[i] and np.isfinite(p[i]) and p[i] >= 0.05 and any(c in str(cell).split(";") for c in
                                                                    _ALIGNMENT_CODES):
            reasons[i] += f" (within the levels' σ the alignment holds in {p[i]:.0%} of cases)".replace("%", " %", 1)


def _far_from_reference(levels: pd.DataFrame) -> np.ndarray:
    """Rows whose ``reference_similarity`` (a run's own levels) is below :data:`FAR_FROM_REFERENCE_SIMILARITY`."""
    sim = _numeric(levels, "reference_similarity")
    with np.errstate(invalid="ignore"):
        return sim < FAR_FROM_REFERENCE_SIMILARITY


def _representation(levels: pd.DataFrame) -> np.ndarray:
    """``molecule`` or ``polymer`` per row: the levels file's column, else from the SMILES (attachment points make a
    repeat unit), '' without either.

    Examples
    --------
    >>> _representation(pd.DataFrame({"smiles": ["[*]c1ccc([*])s1", "c1ccsc1", ""]})).tolist()
    ['polymer', 'molecule', '']
    """
    given = _text(levels, "representation")
    smiles = _text(levels, "smiles")
    guess = np.where(np.char.find(smiles.astype(str), "*") >= 0, "polymer", np.where(smiles != "", "molecule", ""))
    return np.where(given != "", given, guess).astype(object)


def _lone_pair_homo(levels: pd.DataFrame) -> np.ndarray:
    """Rows whose tight-binding HOMO was a nitrogen lone pair (``xtb_lone_pair_shift_ev`` > 0, screen.lonepair)."""
    shift = _numeric(levels, "xtb_lone_pair_shift_ev")
    with np.errstate(invalid="ignore"):
        return shift > 0


def _scale(levels: pd.DataFrame) -> np.ndarray:
    """Each row's energy scale (``film`` or ``gas``, lower case; :func:`check_scales` has made them one).

    Examples
    --------
    >>> _scale(pd.DataFrame({"scale": [" Film", "gas"]})).tolist()
    ['film', 'gas']
    """
    return np.array([s.strip().lower() for s in _text(levels, "scale")], dtype=object)


def _has_family(codes: np.ndarray, family: str) -> np.ndarray:
    """Rows whose ``known_bias`` codes (``+``-joined, :data:`screen.knownbias.FAMILIES`) include ``family``; each
    family has its own flag, so a row's note names only its own family (a new user's audit: the DPP donors were told
    what an NDI acceptor's bias does).

    Examples
    --------
    >>> _has_family(np.array(["dpp", "dpp+ndi_polymer", "", "ndi_polymer"], dtype=object), "dpp").tolist()
    [True, True, False, False]
    """
    return np.array([family in str(c).split("+") for c in codes], dtype=bool)


def _known_bias(levels: pd.DataFrame) -> np.ndarray:
    """The ``known_bias`` column; for a run's own levels.csv written before that column existed, the family
    code from each row's SMILES (:func:`screen.knownbias.known_bias`). A levels file not computed by dascreen
    (measured values) has no computed bias to warn about.

    Examples
    --------
    >>> lv = pd.DataFrame({"xtb_ip_ev": [6.0, 6.0], "smiles": ["CN1C(=O)C2=C(c3cccs3)N(C)C(=O)C2=C1c1cccs1",
    ...                                                          "c1ccsc1"]})
    >>> _known_bias(lv).tolist()
    ['dpp', '']
    >>> _known_bias(lv.drop(columns="xtb_ip_ev")).tolist()
    ['', '']
    """
    computed = _computed_rows(levels)
    if "known_bias" in levels.columns or not computed.any():
        return _text(levels, "known_bias")
    from screen.knownbias import known_bias

    return np.array([known_bias(s) if s and c else "" for s, c in zip(_text(levels, "smiles"), computed)],
                    dtype=object)


def _count_text(levels: pd.DataFrame, col: str) -> np.ndarray:
    """A count column as text without a decimal point (:func:`screen.io.count_text`), empty where missing.

    Examples
    --------
    >>> _count_text(pd.DataFrame({"n": [4.0, None, 3]}), "n").tolist()
    ['4', '', '3']
    """
    return np.array([count_text(v) for v in _numeric(levels, col)], dtype=object)


def _computed_rows(levels: pd.DataFrame) -> np.ndarray:
    """Rows of a run's own levels: a raw ``xtb_ip_ev`` value (an empty column, or a user's row beside them, is not).

    Examples
    --------
    >>> _computed_rows(pd.DataFrame({"xtb_ip_ev": [7.1, None, "x"]})).tolist(), _computed_rows(pd.DataFrame(
    ...     {"id": ["a"]})).tolist()
    ([True, False, False], [False])
    """
    with np.errstate(invalid="ignore"):
        return np.isfinite(_numeric(levels, "xtb_ip_ev"))


def check_input_levels(levels: pd.DataFrame) -> None:
    """Refuse a levels table whose ranked rows would give numbers that cannot be right (exit code 2).

    Every ranked row, whatever the file came from, is held to the checks that protect the numbers (a unique id,
    finite levels, film or gas, a known acceptor class, a σ ≥ 0 and not in meV); a user's row also to
    HOMO < LUMO < 0, a positive gap, 0 ≤ σ ≤ 1 eV and a known role; a run's own row (:func:`_computed_rows`)
    turns those into the not-viable flag ``levels_inconsistent`` instead (a molecule outside what the calibration
    covers: the run's own output is never refused for it), and may be a dye or have a σ above 1 eV
    (:func:`screen.levels_check.check_levels`).

    Raises
    ------
    InputError
        Naming the file (``levels.attrs["source"]``), line, id, column, value and the fix.
    """
    ranked = _ranked_mask(levels)
    check_levels(levels[ranked], str(levels.attrs.get("source", "levels table")), _computed_rows(levels)[ranked])


def _check_arguments(levels_df, partner, model: DeviceModel) -> None:
    """Refuse what a Python caller can pass and the command line cannot (an API audit): a levels table that is no
    DataFrame or lacks a column a levels file must have (without ``id`` every row was ranked as id '', without
    ``gap_opt_ev`` every row came out ``input_missing``), a partner that is no :class:`Partner` (a name: resolve
    it first) and a model that is no :class:`~screen.device.DeviceModel` (which holds its own fields to the
    schema's ``device`` section: ``loss_v=300``, millivolts, is refused when it is made).

    Examples
    --------
    >>> _check_arguments(pd.DataFrame({"id": ["a"], "homo_ev": [-5.4], "lumo_ev": [-3.6], "scale": ["film"]}),
    ...                  None, DeviceModel())
    Traceback (most recent call last):
    ...
    screen.errors.InputError: levels table: a levels table needs columns ['id', 'homo_ev', 'lumo_ev', 'gap_opt_ev', 'scale']; missing ['gap_opt_ev']; found ['id', 'homo_ev', 'lumo_ev', 'scale']
    """
    from screen.columns import LEVELS_MIN_COLUMNS
    from screen.errors import InputError

    source = "levels table"
    if not isinstance(levels_df, pd.DataFrame):
        raise InputError(f"{source}: expected a pandas DataFrame (e.g. screen.levels.read_levels(path)), not "
                         f"{type(levels_df).__name__}")
    source = str(levels_df.attrs.get("source", source))
    # without a scale column check_scales says so in its own words (ScaleMismatchError)
    missing = [c for c in LEVELS_MIN_COLUMNS if c not in levels_df.columns and c != "scale"]
    if missing:
        raise InputError(f"{source}: a levels table needs columns {LEVELS_MIN_COLUMNS}; missing {missing}; found "
                         f"{[str(c) for c in levels_df.columns]}")
    if not isinstance(partner, Partner):
        raise PartnerError(f"partner must be a screen.partners.Partner, not {type(partner).__name__} "
                           f"{partner!r:.60}; resolve a name, file or smiles: spec first, e.g. "
                           "screen.partners.resolve_partner('y6')")
    if not isinstance(model, DeviceModel):
        raise ConfigError(f"model must be a screen.device.DeviceModel, not {type(model).__name__}")


def _viable(masks: dict[str, np.ndarray]) -> np.ndarray:
    """True where no flag of severity ``not_viable`` is raised."""
    bad = np.zeros(next(iter(masks.values())).shape, dtype=bool)
    for name, m in masks.items():
        if name in NOT_VIABLE_FLAGS:
            bad |= m
    return ~bad


def _passes(masks: dict[str, np.ndarray]) -> np.ndarray:
    """True where no failing (non-informational) flag is raised."""
    failing = np.zeros(next(iter(masks.values())).shape, dtype=bool)
    for name, m in masks.items():
        if name not in INFO_FLAGS:
            failing |= m
    return ~failing


def _ranking_frame(lv: pd.DataFrame, cand: _Candidates, roles: _Roles, partner: Partner, dev: dict,
                   spread: dict, masks: dict, model: DeviceModel, options: RankOptions) -> pd.DataFrame:
    """The unsorted ranking: contract columns then extras, numbers rounded to :data:`_ROUND` decimals (the
    Monte-Carlo figures to :data:`_MC_ROUND`).

    Offsets are kept for every row with a pair; Voc, Jsc, FF and PCE only for viable rows (empty otherwise)."""
    n = cand.ids.size
    pair_ok = roles.paired
    viable = _viable(masks)
    device = {key: np.where(pair_ok & (viable | key.startswith("delta")), np.asarray(dev[key], dtype=float),
                            np.nan) for key in _DEVICE_NUMBERS}
    flags = join_flags(masks)
    settings = {"device": {k: model.value(k) for k in ("min_delta_lumo_ev", "min_delta_homo_ev")},
                "rank": {"gap_min_ev": options.gap_min_ev, "gap_max_ev": options.gap_max_ev}}
    reason = {f: reason_of(f, settings) for f in set(flags)}  # thousands of rows share a few flag sets
    reasons = [reason[f] for f in flags]
    for i in np.flatnonzero(masks["input_missing"] & (np.isnan(cand.homo) | np.isnan(cand.lumo) | np.isnan(cand.gap))):
        empty = [name for name, arr in (("HOMO (homo_ev)", cand.homo), ("LUMO (lumo_ev)", cand.lumo),
                                        ("optical gap (gap_opt_ev)", cand.gap)) if np.isnan(arr[i])]
        reasons[i] = f"the {' and '.join(empty)} of this row {'is' if len(empty) == 1 else 'are'} empty; {reasons[i]}"
    _add_alignment_odds(reasons, flags, dev["p_aligned"])
    out = pd.DataFrame({
        "rank": np.zeros(n, dtype=int),
        "id": cand.ids,
        "smiles": _text(lv, "smiles"),
        "role": roles.role,
        "homo_ev": cand.homo,
        "lumo_ev": cand.lumo,
        "gap_opt_ev": cand.gap,
        "partner": partner.id,
        **device,
        "pce_sigma_pct": spread["pce_sigma_pct"],
        "p_above_target": spread["p_above_target"],
        "passes": _passes(masks),
        "flags": flags,
        "name": _text(lv, "name"),
        **{c: cand.sigma[c] for c in SIGMA_COLUMNS},
        "viable": viable,
        "reason": reasons,
        "model": np.where(pair_ok, model.model, ""),
        "acceptor_class": np.where(pair_ok, pd.Series(dev["acceptor_class"]).astype(str), ""),
        "absorber_gap_ev": np.where(pair_ok, np.asarray(dev["absorber_gap_ev"], dtype=float), np.nan),
        "representation": _representation(lv),
        "p_aligned": dev["p_aligned"],
        # what a polymer's levels rest on (a polymer audit: the ranking did not say that PM6 rested on two
        # oligomers, nor that side chains were cut); empty for molecules of files without these columns
        "chain_n_max": _count_text(lv, "chain_n_max"),
        "chain_fit_quality": _text(lv, "chain_fit_quality"),
        "truncated_groups": _text(lv, "truncated_groups"),
        "scale": _scale(lv),
    })
    for cols, decimals in ((_ROUNDED, _ROUND), (_MC_ROUNDED, _MC_ROUND)):
        for col in cols:
            out[col] = out[col].round(decimals) + 0.0  # + 0.0: an offset of −0.00004 eV is written 0.0, not −0.0
    return out


def _sort_ranking(out: pd.DataFrame, sort_by: str) -> pd.DataFrame:
    """Passing rows first, then viable before not viable, then ``sort_by`` descending (NaN last; ``pce_pct``
    breaks ties of ``p_above_target``), then ``p_aligned`` descending (it orders the not-viable rows, which have
    no estimate: a near miss before a clear misalignment, and it breaks exact ties of viable rows), then a row
    that repeats an earlier row's structure after it (``same_structure``), then ``id``, then input order;
    ``rank`` = 1..n."""
    keys = (["passes", "viable", sort_by] + (["pce_pct"] if sort_by != "pce_pct" else [])
            + ["p_aligned", "_dup", "id", "_order"])
    out["_order"] = np.arange(len(out))
    out["_dup"] = out["flags"].astype(str).str.contains("same_structure", regex=False) if "flags" in out else False
    out = out.sort_values(keys, ascending=[False] * (len(keys) - 3) + [True, True, True],
                          na_position="last", kind="stable").drop(columns=["_order", "_dup"]).reset_index(drop=True)
    out["rank"] = np.arange(1, len(out) + 1)
    return out


def _empty_ranking() -> pd.DataFrame:
    return pd.DataFrame({c: pd.Series(dtype=object) for c in RANKING_COLUMNS + EXTRA_COLUMNS})


# --------------------------------------------------------------------------- ranking

def rank_candidates(levels_df: pd.DataFrame, partner: Partner, model: DeviceModel | None = None,
                    options: RankOptions | None = None) -> pd.DataFrame:
    """Pair every ranked candidate with the partner, estimate the device, filter and sort.

    Parameters
    ----------
    levels_df : pandas.DataFrame
        A levels table: at least ``id, homo_ev, lumo_ev, gap_opt_ev, scale``;
        optional ``status`` (only ``ok`` rows are ranked), ``smiles``,
        ``name``, ``role``, ``heavy_atoms`` and σ columns
        (``homo_sigma_ev, lumo_sigma_ev, gap_opt_sigma_ev``; absent or empty
        → 0). [eV]
    partner : Partner
        The partner material; its scale must equal every ranked row's scale.
    model : DeviceModel, optional
        Device model (default ``DeviceModel()``: the fitted energy-loss model with its shipped parameters,
        ``models/device/fitted.json``, and ``absorber='both'``; pass ``DeviceModel(model="scharber",
        absorber="donor")`` for the published Scharber rule). Its config fields are held to the schema's
        ``device`` section (a ``loss_v`` of 300 is millivolts).
    options : RankOptions, optional
        Filters, sort key, sampling settings (default :class:`RankOptions`).

    Returns
    -------
    pandas.DataFrame
        :data:`RANKING_COLUMNS` then :data:`EXTRA_COLUMNS`, best first:
        in the order of :func:`_sort_ranking`: passing rows first, then viable ones, then ``options.sort_by``
        descending (NaN last; with ``p_above_target`` ties are broken by ``pce_pct``), then ``p_aligned``
        descending, then a repeat of an earlier row's structure after it, then ``id``, then input order;
        ``rank`` is 1..n.  Energies [eV], ``voc_v`` [V], ``jsc_ma_cm2``
        [mA cm⁻²], ``pce_pct`` and ``pce_sigma_pct`` [%], ``p_above_target``
        the sampled probability that PCE > ``options.target_pce_pct``.
        ``attrs`` holds ``partner_role``, ``partner_role_assumed`` and
        ``not_ranked`` (counts by status).

    Raises
    ------
    ScaleMismatchError
        A ranked row is on another scale than the partner, or the table has no ``scale`` column.
    PartnerError
        ``partner`` is not a :class:`Partner`, its role is none of donor, acceptor or empty, or it is unknown
        and cannot be inferred.
    ConfigError
        ``model`` holds a value the schema's ``device`` section does not allow.
    InputError
        ``levels_df`` is not a DataFrame or lacks one of ``id, homo_ev, lumo_ev, gap_opt_ev`` (as a levels file).
    InputError
        A ranked row the ranking cannot use (:func:`check_input_levels`: a repeated id, a σ below 0, infinite or
        in meV, an unknown acceptor class, and in a user's rows impossible levels; a :class:`ValueError`).

    Notes
    -----
    With the default ``absorber: both`` the smaller optical gap of the pair
    sets Jsc and both offsets are checked; with ``absorber: donor`` (the
    published model) the donor's gap sets Jsc.  The reported ``pce_pct`` is
    the deterministic value at the mean levels (empty for pairs that are not
    viable);
    ``pce_sigma_pct`` and ``p_above_target`` come from independent normal
    errors on the candidate's and (with ``options.partner_sigma``) the
    partner's levels, sampled with common random numbers (see
    :func:`screen.sampling.sample_pce`).

    References
    ----------
    .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789.
       :doi:`10.1002/adma.200501717`

    Examples
    --------
    >>> from screen.partners import resolve_partner
    >>> lv = pd.DataFrame({"id": ["d1"], "homo_ev": [-5.4], "lumo_ev": [-3.9], "gap_opt_ev": [1.5],
    ...                    "scale": ["film"], "role": ["donor"]})
    >>> published = DeviceModel(model="scharber", absorber="donor")
    >>> r = rank_candidates(lv, resolve_partner("scharber-reference-acceptor"), published)
    >>> float(r.loc[0, "voc_v"]), round(float(r.loc[0, "pce_pct"]), 1), bool(r.loc[0, "passes"])
    (0.8, 9.8, True)

    Against a donor partner, a candidate without a role whose levels lie above
    the partner's (a donor itself) is not viable: no efficiency, the reason in
    words, ranked last:

    >>> lv = pd.DataFrame({"id": ["a1", "a2"], "homo_ev": [-5.7, -5.0], "lumo_ev": [-4.0, -3.2],
    ...                    "gap_opt_ev": [1.5, 1.6], "scale": ["film"] * 2})
    >>> r = rank_candidates(lv, resolve_partner("pm6"))
    >>> r["id"].tolist(), r["viable"].tolist(), bool(np.isnan(r.loc[1, "pce_pct"]))
    (['a1', 'a2'], [True, False], True)
    >>> r.loc[1, "flags"]
    'role_unsupported;lumo_inverted;homo_inverted'
    """
    model = DeviceModel() if model is None else model
    options = RankOptions() if options is None else options
    _check_arguments(levels_df, partner, model)
    lv, not_ranked = _split_ranked(levels_df)
    check_input_levels(levels_df)  # impossible levels, ids, σ, classes: refused before any work (exit 2)
    p_role, p_role_assumed = partner_role(lv, partner, options)
    attrs = {"partner_role": p_role, "partner_role_assumed": p_role_assumed, "not_ranked": not_ranked}
    if len(lv) == 0:
        out = _empty_ranking()
        out.attrs.update(attrs)
        return out
    check_scales(lv, partner)
    check_partner(partner)

    cand = _candidates(lv)
    roles = _roles(lv, cand, partner, p_role, options)
    pair = _pair(cand, roles.is_donor, partner, options.partner_sigma,
                 _acceptor_classes(lv, ~roles.is_donor & roles.paired))
    dev = model.evaluate(*pair.levels, acceptor_class=pair.acceptor_class)
    dev["acceptor_class"] = pair.acceptor_class
    dev["p_aligned"] = np.where(roles.paired, p_aligned(pair.levels, pair.sigmas, model.value("min_delta_lumo_ev"),
                                                         model.value("min_delta_homo_ev"), model.check_homo_offset),
                                np.nan)
    unranked = voc_unranked_classes() if model.model == "fitted" else frozenset()
    masks = _flag_masks(lv, cand, roles, dev, partner, options, model.follows_class, unranked)
    sampled = roles.paired & _viable(masks)
    spread = _spread(model, pair, sampled, options)
    masks.update(_spread_masks(spread, sampled))  # info flags: viability and passes unchanged
    out = _sort_ranking(_ranking_frame(lv, cand, roles, partner, dev, spread, masks, model, options),
                        options.sort_by)
    out.attrs.update(attrs)
    return out
