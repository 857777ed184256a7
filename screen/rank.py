"""Ranking stage: partner offsets → Scharber device estimates → filters → ranking.

Each candidate row of a levels table is paired with one partner material: a
donor candidate with an acceptor partner and vice versa.  The pair's
frontier-level offsets, open-circuit voltage, short-circuit current and
efficiency come from :meth:`screen.device.DeviceModel.evaluate`; the spread of
the efficiency caused by the level uncertainties (σ columns of the levels and
of the partner) from :func:`screen.device.sample_pce`.  Everything is
vectorised over the candidates.

Sign convention (both > 0 for a working type-II heterojunction):

.. math::

    \\Delta_{LUMO} = E_{LUMO}^{D} - E_{LUMO}^{A}, \\qquad
    \\Delta_{HOMO} = E_{HOMO}^{D} - E_{HOMO}^{A}

Energies are on the vacuum scale [eV]; levels and partner must be on the same
scale (``film`` or ``gas``, design notes §2) or the ranking stops.

Flags (``;``-joined in the ``flags`` column).  All of them make a row fail
except the informational ``role_assumed`` and ``heavy_atoms_unknown``:

========================  ==========================================================
``same_role_as_partner``  the candidate has the partner's role (no donor/acceptor pair;
                          device numbers are left empty)
``role_invalid``          the ``role`` column holds something other than donor/acceptor
``is_partner``            the row is the partner itself (``id:`` partners)
``input_missing``         a level the model or a filter needs is missing
``lumo_offset_low``       ΔLUMO below ``device.min_delta_lumo_ev``
``homo_offset_low``       ΔHOMO below ``device.min_delta_homo_ev`` (``absorber: both``)
``voc_nonpositive``       Voc ≤ 0 (PCE is 0)
``gap_out_of_window``     candidate optical gap outside [``rank.gap_min_ev``, ``rank.gap_max_ev``]
``too_many_heavy_atoms``  more heavy atoms than ``rank.max_heavy_atoms``
``heavy_atoms_unknown``   the heavy-atom filter is on but the count is unknown (no SMILES)
``role_assumed``          no role given and no default: the partner's complement was used
========================  ==========================================================

References
----------
.. [1] M. C. Scharber, D. Mühlbacher, M. Koppe, P. Denk, C. Waldauf,
   A. J. Heeger, C. J. Brabec, Adv. Mater. 18 (2006) 789.
   :doi:`10.1002/adma.200501717`
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from screen.device import DeviceModel, sample_pce
from screen.partners import ROLES, Partner, PartnerError, complement

__all__ = [
    "RANKING_COLUMNS",
    "EXTRA_COLUMNS",
    "FLAG_ORDER",
    "INFO_FLAGS",
    "RankOptions",
    "ScaleMismatchError",
    "check_scales",
    "partner_role",
    "rank_candidates",
    "device_model",
]

#: columns of ranking.csv, in order (design notes §3)
RANKING_COLUMNS = ["rank", "id", "smiles", "role", "homo_ev", "lumo_ev", "gap_opt_ev", "partner", "delta_lumo_ev",
                   "delta_homo_ev", "voc_v", "jsc_ma_cm2", "ff", "pce_pct", "pce_sigma_pct", "p_above_target",
                   "passes", "flags"]
#: columns after the contract ones
EXTRA_COLUMNS = ["name", "homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev"]
#: order of the codes in the ``flags`` string
FLAG_ORDER = ("same_role_as_partner", "role_invalid", "is_partner", "input_missing", "lumo_offset_low",
              "homo_offset_low", "voc_nonpositive", "gap_out_of_window", "too_many_heavy_atoms",
              "heavy_atoms_unknown", "role_assumed")
#: flags that do not make a row fail
INFO_FLAGS = frozenset({"role_assumed", "heavy_atoms_unknown"})

_SIGMA_COLUMNS = ("homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev")
_ROUND = 4


class ScaleMismatchError(ValueError):
    """Levels and partner are on different energy scales (design notes §2)."""


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
        Monte-Carlo samples per candidate for σ propagation.
    seed : int
        Seed of the sampler (same input → same numbers).
    gap_min_ev, gap_max_ev : float
        Window for the candidate's optical gap. [eV]
    max_heavy_atoms : int or None
        Largest heavy-atom count that passes (None: no limit).
    partner_sigma : bool
        Include the partner's σ in the sampling (True) or treat the partner's
        levels as exact (False).
    """

    role: str | None = None
    sort_by: str = "pce_pct"
    target_pce_pct: float = 10.0
    shortlist_size: int = 10
    n_samples: int = 2000
    seed: int = 20240601
    gap_min_ev: float = 1.0
    gap_max_ev: float = 3.0
    max_heavy_atoms: int | None = None
    partner_sigma: bool = True

    def __post_init__(self):
        if self.role not in ROLES + (None,):
            raise ValueError(f"rank.role must be 'donor', 'acceptor' or null, not {self.role!r}")
        if self.sort_by not in ("pce_pct", "p_above_target"):
            raise ValueError(f"rank.sort_by must be 'pce_pct' or 'p_above_target', not {self.sort_by!r}")
        if self.n_samples < 2:
            raise ValueError(f"rank.n_samples must be at least 2, not {self.n_samples}")
        if self.gap_min_ev > self.gap_max_ev:
            raise ValueError(f"rank.gap_min_ev ({self.gap_min_ev}) is above rank.gap_max_ev ({self.gap_max_ev})")

    @classmethod
    def from_mapping(cls, mapping: dict | None) -> RankOptions:
        """Build from the ``rank`` config section, rejecting unknown keys.

        Examples
        --------
        >>> RankOptions.from_mapping({"sort_by": "p_above_target"}).sort_by
        'p_above_target'
        """
        mapping = dict(mapping or {})
        known = set(asdict(cls()))
        unknown = set(mapping) - known
        if unknown:
            raise ValueError(f"unknown rank option(s) {sorted(unknown)}; allowed: {sorted(known)}")
        return cls(**mapping)


def device_model(config: dict | None) -> DeviceModel:
    """The device model of a configuration's ``device`` section.

    Parameters
    ----------
    config : dict or None
        Run configuration (defaults fill what is missing).

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
    from screen.config import resolve

    return DeviceModel(**resolve(config)["device"])


# --------------------------------------------------------------------------- helpers

def _ranked_mask(levels: pd.DataFrame) -> np.ndarray:
    """Rows that are ranked: status ok (files without a status column: every row)."""
    if "status" not in levels:
        return np.ones(len(levels), dtype=bool)
    return levels["status"].fillna("").astype(str).str.strip().str.lower().eq("ok").to_numpy()


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
    screen.rank.ScaleMismatchError: levels are on the 'gas' scale but partner 'c60' is on the 'film' scale; rerun levels with levels.scale=film or give a partner on the gas scale
    """
    if "scale" not in levels:
        raise ScaleMismatchError("the levels have no 'scale' column; every level must name its scale (film or gas)")
    scales = levels["scale"].fillna("").astype(str).str.strip().str.lower()
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
        The role cannot be inferred (no default role, candidates of both roles
        or none).
    """
    if partner.role in ROLES:
        return partner.role, False
    if options.role is not None:
        return complement(options.role), True
    if "role" in levels:
        given = set(levels["role"].fillna("").astype(str).str.strip().str.lower()) & set(ROLES)
        if len(given) == 1:
            return complement(given.pop()), True
    raise PartnerError(f"partner {partner.id!r} has no role and the candidates do not imply one; set the "
                       "candidates' role with --role donor|acceptor (config rank.role) or give the partner a "
                       "role column")


def _numeric(levels: pd.DataFrame, col: str) -> np.ndarray:
    if col not in levels:
        return np.full(len(levels), np.nan)
    return pd.to_numeric(levels[col], errors="coerce").to_numpy(dtype=float)


def _text(levels: pd.DataFrame, col: str) -> np.ndarray:
    if col not in levels:
        return np.full(len(levels), "", dtype=object)
    return levels[col].fillna("").astype(str).to_numpy(dtype=object)


def _heavy_atoms(levels: pd.DataFrame) -> np.ndarray:
    """Heavy-atom counts: the ``heavy_atoms`` column, else counted from SMILES (NaN if unknown)."""
    heavy = _numeric(levels, "heavy_atoms")
    todo = np.flatnonzero(np.isnan(heavy))
    if todo.size:
        smiles = _text(levels, "smiles")
        from rdkit import Chem, rdBase

        with rdBase.BlockLogs():
            for i in todo:
                mol = Chem.MolFromSmiles(smiles[i]) if smiles[i] else None
                if mol is not None:
                    heavy[i] = mol.GetNumHeavyAtoms()
    return heavy


def _join(masks: dict[str, np.ndarray], n: int) -> np.ndarray:
    out = np.full(n, "", dtype=object)
    any_flag = np.zeros(n, dtype=bool)
    for m in masks.values():
        any_flag |= m
    names = [k for k in FLAG_ORDER if k in masks]
    for i in np.flatnonzero(any_flag):
        out[i] = ";".join(k for k in names if masks[k][i])
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
        Device model (default: Scharber parameters).
    options : RankOptions, optional
        Filters, sort key, sampling settings (default :class:`RankOptions`).

    Returns
    -------
    pandas.DataFrame
        :data:`RANKING_COLUMNS` then :data:`EXTRA_COLUMNS`, best first:
        passing rows first, then ``options.sort_by`` descending (NaN last;
        with ``p_above_target`` ties are broken by ``pce_pct``), then ``id``;
        ``rank`` is 1..n.  Energies [eV], ``voc_v`` [V], ``jsc_ma_cm2``
        [mA cm⁻²], ``pce_pct`` and ``pce_sigma_pct`` [%], ``p_above_target``
        the sampled probability that PCE > ``options.target_pce_pct``.
        ``attrs`` holds ``partner_role``, ``partner_role_assumed`` and
        ``not_ranked`` (counts by status).

    Raises
    ------
    ScaleMismatchError
        A ranked row is on another scale than the partner.
    PartnerError
        The partner's role is unknown and cannot be inferred.
    ValueError
        A σ column holds a negative or infinite value.

    Notes
    -----
    With ``model.absorber == 'donor'`` (the published model) the donor's gap
    sets Jsc, so acceptor candidates ranked against a donor partner all get
    the partner's Jsc; use ``absorber: both`` for absorbing acceptors.  The
    reported ``pce_pct`` is the deterministic value at the mean levels;
    ``pce_sigma_pct`` and ``p_above_target`` come from independent normal
    errors on the candidate's and (with ``options.partner_sigma``) the
    partner's levels, sampled with common random numbers (see
    :func:`screen.device.sample_pce`).

    References
    ----------
    .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789.
       :doi:`10.1002/adma.200501717`

    Examples
    --------
    >>> from screen.partners import resolve_partner
    >>> lv = pd.DataFrame({"id": ["d1"], "homo_ev": [-5.4], "lumo_ev": [-3.9], "gap_opt_ev": [1.5],
    ...                    "scale": ["film"], "role": ["donor"]})
    >>> r = rank_candidates(lv, resolve_partner("scharber-reference-acceptor"))
    >>> float(r.loc[0, "voc_v"]), round(float(r.loc[0, "pce_pct"]), 1), bool(r.loc[0, "passes"])
    (0.8, 9.8, True)
    """
    model = DeviceModel() if model is None else model
    options = RankOptions() if options is None else options
    ranked = _ranked_mask(levels_df)
    not_ranked = {}
    if "status" in levels_df:
        st = levels_df.loc[~ranked, "status"].fillna("").astype(str)
        not_ranked = {str(k): int(v) for k, v in st.value_counts().items()}
    lv = levels_df[ranked].reset_index(drop=True)
    n = len(lv)
    p_role, p_role_assumed = partner_role(lv, partner, options)
    attrs = {"partner_role": p_role, "partner_role_assumed": p_role_assumed, "not_ranked": not_ranked}
    if n == 0:
        out = _empty_ranking()
        out.attrs.update(attrs)
        return out
    check_scales(lv, partner)

    ids = _text(lv, "id")
    homo, lumo, gap = (_numeric(lv, c) for c in ("homo_ev", "lumo_ev", "gap_opt_ev"))
    sig = {c: _numeric(lv, c) for c in _SIGMA_COLUMNS}
    for c, s in sig.items():
        bad = np.isfinite(s) & (s < 0) | np.isinf(s)
        if bad.any():
            raise ValueError(f"levels column {c} has negative or infinite values (e.g. row id "
                             f"{ids[np.flatnonzero(bad)[0]]!r}); σ must be finite and >= 0, empty = 0")
        sig[c] = np.where(np.isnan(s), 0.0, s)

    # roles
    raw_role = np.char.lower(np.char.strip(_text(lv, "role").astype(str)))
    empty = raw_role == ""
    valid = np.isin(raw_role, ROLES)
    role_invalid = ~empty & ~valid
    default = options.role if options.role is not None else complement(p_role)
    role_assumed = (empty | role_invalid) & (options.role is None)
    role = np.where(valid, raw_role, default).astype(object)
    same_role = role == p_role
    is_donor = role == "donor"

    # pair arrays: the candidate on its side, the partner on the other
    def pair(cand, part):
        return np.where(is_donor, cand, part), np.where(is_donor, part, cand)

    d_homo, a_homo = pair(homo, partner.homo_ev)
    d_lumo, a_lumo = pair(lumo, partner.lumo_ev)
    d_gap, a_gap = pair(gap, partner.gap_opt_ev)
    k = 1.0 if options.partner_sigma else 0.0
    s_d_homo, s_a_homo = pair(sig["homo_sigma_ev"], k * partner.homo_sigma_ev)
    s_d_lumo, s_a_lumo = pair(sig["lumo_sigma_ev"], k * partner.lumo_sigma_ev)
    s_d_gap, s_a_gap = pair(sig["gap_opt_sigma_ev"], k * partner.gap_opt_sigma_ev)

    dev = model.evaluate(d_homo, d_lumo, d_gap, a_homo, a_lumo, a_gap)
    pair_ok = ~same_role
    mc = {"pce_sigma_pct": np.full(n, np.nan), "p_above_target": np.full(n, np.nan)}
    idx = np.flatnonzero(pair_ok)
    if idx.size:
        s = sample_pce(model, d_homo[idx], d_lumo[idx], d_gap[idx], a_homo[idx], a_lumo[idx], a_gap[idx],
                       donor_homo_sigma_ev=s_d_homo[idx], donor_lumo_sigma_ev=s_d_lumo[idx],
                       donor_gap_sigma_ev=s_d_gap[idx], acceptor_homo_sigma_ev=s_a_homo[idx],
                       acceptor_lumo_sigma_ev=s_a_lumo[idx], acceptor_gap_sigma_ev=s_a_gap[idx],
                       n_samples=options.n_samples, seed=options.seed, target_pct=options.target_pce_pct)
        mc["pce_sigma_pct"][idx] = s["pce_sigma_pct"]
        mc["p_above_target"][idx] = s["p_above_target"]

    def numbers(key):
        return np.where(pair_ok, np.asarray(dev[key], dtype=float), np.nan)

    # filters
    cand_missing = np.isnan(homo) | np.isnan(lumo) | np.isnan(gap)
    with np.errstate(invalid="ignore"):
        gap_out = (gap < options.gap_min_ev) | (gap > options.gap_max_ev)
    heavy = np.full(n, np.nan)
    heavy_out = np.zeros(n, dtype=bool)
    heavy_unknown = np.zeros(n, dtype=bool)
    if options.max_heavy_atoms is not None:
        heavy = _heavy_atoms(lv)
        heavy_unknown = np.isnan(heavy)
        with np.errstate(invalid="ignore"):
            heavy_out = heavy > options.max_heavy_atoms
    is_partner = np.zeros(n, dtype=bool)
    if partner.kind == "id":
        is_partner = ids == partner.id
    masks = {
        "same_role_as_partner": same_role,
        "role_invalid": role_invalid,
        "is_partner": is_partner,
        "input_missing": (np.asarray(dev["input_missing"], bool) & pair_ok) | cand_missing,
        "lumo_offset_low": np.asarray(dev["lumo_offset_low"], bool) & pair_ok,
        "homo_offset_low": np.asarray(dev["homo_offset_low"], bool) & pair_ok,
        "voc_nonpositive": np.asarray(dev["voc_nonpositive"], bool) & pair_ok,
        "gap_out_of_window": gap_out,
        "too_many_heavy_atoms": heavy_out,
        "heavy_atoms_unknown": heavy_unknown,
        "role_assumed": role_assumed,
    }
    failing = np.zeros(n, dtype=bool)
    for name, m in masks.items():
        if name not in INFO_FLAGS:
            failing |= m

    out = pd.DataFrame({
        "rank": np.zeros(n, dtype=int),
        "id": ids,
        "smiles": _text(lv, "smiles"),
        "role": role,
        "homo_ev": homo,
        "lumo_ev": lumo,
        "gap_opt_ev": gap,
        "partner": partner.id,
        "delta_lumo_ev": numbers("delta_lumo_ev"),
        "delta_homo_ev": numbers("delta_homo_ev"),
        "voc_v": numbers("voc_v"),
        "jsc_ma_cm2": numbers("jsc_ma_cm2"),
        "ff": numbers("ff"),
        "pce_pct": numbers("pce_pct"),
        "pce_sigma_pct": mc["pce_sigma_pct"],
        "p_above_target": mc["p_above_target"],
        "passes": ~failing,
        "flags": _join(masks, n),
        "name": _text(lv, "name"),
        "homo_sigma_ev": sig["homo_sigma_ev"],
        "lumo_sigma_ev": sig["lumo_sigma_ev"],
        "gap_opt_sigma_ev": sig["gap_opt_sigma_ev"],
    })
    for col in ("homo_ev", "lumo_ev", "gap_opt_ev", "delta_lumo_ev", "delta_homo_ev", "voc_v", "jsc_ma_cm2",
                "ff", "pce_pct", "pce_sigma_pct", "p_above_target", *_SIGMA_COLUMNS):
        out[col] = out[col].round(_ROUND)
    keys = ["passes", options.sort_by] + (["pce_pct"] if options.sort_by != "pce_pct" else []) + ["id", "_order"]
    out["_order"] = np.arange(n)
    out = out.sort_values(keys, ascending=[False, False] + [False] * (len(keys) - 4) + [True, True],
                          na_position="last", kind="stable").drop(columns="_order").reset_index(drop=True)
    out["rank"] = np.arange(1, n + 1)
    out.attrs.update(attrs)
    return out
