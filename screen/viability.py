"""Is a donor/acceptor pair a working solar cell at all?  Classification before any efficiency.

Every pair is classified first: a staggered (type-II) alignment whose offsets
allow charge separation is *estimated*; anything else is *not viable* and gets
no efficiency (empty, never 0), with the reason in plain words (the flag texts
of :mod:`screen.flags`).  Sign convention (both > 0 for type II):

.. math::

    \\Delta_{LUMO} = E_{LUMO}^{D} - E_{LUMO}^{A}, \\qquad
    \\Delta_{HOMO} = E_{HOMO}^{D} - E_{HOMO}^{A}

Also here: the role a candidate without one takes against a partner
(:func:`role_from_levels`) and the acceptor class a SMILES belongs to
(:func:`acceptor_class_of`), which selects the fitted energy loss.

References
----------
.. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789. :doi:`10.1002/adma.200501717`
.. [2] J.-L. Brédas, J. E. Norton, J. Cornil, V. Coropceanu, "Molecular understanding of
   organic solar cells: the challenges", Acc. Chem. Res. 42 (2009) 1691.
   :doi:`10.1021/ar900099h`

Examples
--------
>>> import numpy as np
>>> m = classify(np.array([0.4, -0.2, 0.1]), np.array([0.6, 0.5, 0.5]), np.array([1.5, 1.5, 1.5]),
...              np.array([0.8, 0.8, 0.8]), np.zeros(3, bool), min_lumo=0.3, min_homo=0.3)
>>> m["viable"].tolist(), m["lumo_inverted"].tolist(), m["lumo_offset_low"].tolist()
([True, False, False], [False, True, False], [False, False, True])
"""

from __future__ import annotations

from functools import lru_cache
from typing import NamedTuple

import numpy as np

__all__ = ["classify", "VIABILITY_MASKS", "role_from_levels", "acceptor_class_of", "GAP_MAX_EV",
           "JSC_MIN_MA_CM2", "OFFSET_TOL_EV", "WRITTEN_DECIMALS", "MC_DECIMALS", "offset_clears", "gap_valid", "jsc_written", "CurrentTerms",
           "dark_current"]

#: Decimals of the energies, offsets and potentials a ranking writes (both modes; ``screen.rank``,
#: ``screen.dyecell.rank``).
WRITTEN_DECIMALS = 4
#: Offsets and driving forces within this of a threshold count as meeting it: half of the last written decimal, so
#: the verdict agrees with the value as written (ties aside) — ΔLUMO 0.29996 eV, written 0.3, meets 0.3 eV, and
#: 0.00004 eV, written 0.0, is no type-II offset (with 1e-9 eV a numerical reviewer found rows written 0.30 "below
#: 0.30 eV"); −4.0 − (−4.3) = 0.2999999999999998 meets 0.3 eV too. [eV]
OFFSET_TOL_EV = 0.5 * 10.0 ** -WRITTEN_DECIMALS
#: Decimals of the Monte-Carlo figures a ranking writes (P(PCE > target), ``p_viable``, the PCE ±): with the default
#: 2000 samples they scatter by up to ±0.011 (probability) and 0.01–0.05 points (±) between seeds (a numerical
#: reviewer, 60 seeds; they were written to 4 decimals, 100 times finer than they are known).
MC_DECIMALS = 2
#: A Jsc below this is written as 0 with the rankings' :data:`WRITTEN_DECIMALS` decimals (the dye-cell mode's
#: ``no_sunlight`` limit too, :data:`screen.dyecell.model.JSC_MIN_MA_CM2`): 5e-5. [mA cm⁻²]
JSC_MIN_MA_CM2 = 0.5 * 10.0 ** -WRITTEN_DECIMALS
#: Absorber gap, in hundredths of an eV, from which on the AM1.5G photons above it give less than
#: :data:`JSC_MIN_MA_CM2` even at EQE = 1 (ASTM G173-03: 4.1e-5 mA cm⁻² at 4.13 eV, 6.6e-5 at 4.12 eV, the crossing
#: near 4.126 eV; the table ends at hc/280 nm = 4.428 eV); checked against the spectrum in the tests.  Not a rule of
#: its own: the rule is the model's own Jsc (:func:`dark_current`, an EQE ≤ 1 and yields ≤ 1 give no more than the
#: photons at EQE = 1, which fall with the gap), and :func:`gap_valid` uses this bound as a cheap pre-filter that can
#: never refuse a pair the Jsc rule would keep. [eV]
GAP_MAX_EV = 4.13
#: masks returned by :func:`classify`, in flag-registry order
VIABILITY_MASKS = ("input_missing", "absorber_gap_invalid", "lumo_inverted", "homo_inverted", "lumo_offset_low",
                   "homo_offset_low", "voc_nonpositive")


def offset_clears(delta, minimum: float) -> np.ndarray:
    """Whether an offset allows charge transfer: type II (Δ > :data:`OFFSET_TOL_EV`) and at
    least ``minimum`` less that tolerance, half of the last decimal a ranking writes (−3.7 − (−4.0) is
    0.29999999999999982 and meets 0.3 eV; 0.29996, written 0.3, too); NaN → False.

    The one offset rule: :func:`classify` (its inverted and below-threshold masks), the sampler
    (:func:`screen.devicekernel.pce_samples`) and ``p_aligned`` (:mod:`screen.rank`).

    Examples
    --------
    >>> offset_clears(np.array([-4.0 + 4.3, 0.29996, 0.29994, 0.0, np.nan]), 0.3).tolist()
    [True, True, False, False, False]
    >>> offset_clears(np.array([0.0, 4e-5, 6e-5]), 0.0).tolist()  # written 0.0, 0.0, 0.0001
    [False, False, True]
    """
    delta = np.asarray(delta, dtype=float)
    with np.errstate(invalid="ignore"):
        return (delta > OFFSET_TOL_EV) & (delta >= minimum - OFFSET_TOL_EV)


def gap_valid(gap) -> np.ndarray:
    """Whether an absorber gap can give a written current at all: 0 < gap < :data:`GAP_MAX_EV` (the pre-filter of
    :func:`classify`, flag ``absorber_gap_invalid``, and of the sampler; the verdict on a gap below it is the
    model's Jsc, :func:`dark_current`); NaN → False.

    Examples
    --------
    >>> gap_valid(np.array([-0.1, 0.0, 0.08, 1.5, 4.12, 4.13, 4.5, np.nan])).tolist()
    [False, False, True, True, True, False, False, False]
    """
    gap = np.asarray(gap, dtype=float)
    with np.errstate(invalid="ignore"):
        return (gap > 0) & (gap < GAP_MAX_EV)


def jsc_written(jsc) -> np.ndarray:
    """Whether a short-circuit current [mA cm⁻²] is at least :data:`JSC_MIN_MA_CM2`, what a ranking writes above 0
    (the one current rule of :func:`classify` and of the sampler, :func:`screen.devicekernel.pce_samples`); NaN →
    False.

    Examples
    --------
    >>> jsc_written(np.array([4.99e-5, 5e-5, 12.0, np.nan])).tolist()
    [False, True, True, False]
    """
    with np.errstate(invalid="ignore"):
        return np.asarray(jsc, dtype=float) >= JSC_MIN_MA_CM2


class CurrentTerms(NamedTuple):
    """A model's short-circuit current of pairs and the same current with charge-generation yields set to 1
    (:func:`screen.devicekernel.pair_terms`), all at the model's EQE. [mA cm⁻²]

    ``jsc``: the model's Jsc; ``photons``: every yield 1 (the photons above the absorber gap); ``lumo_full``: the
    yield of the LUMO offset (donor excitons) 1, the other as it is; ``homo_full``: the yield of the HOMO offset
    (acceptor excitons) 1, the other as it is.
    """

    jsc: np.ndarray
    photons: np.ndarray
    lumo_full: np.ndarray
    homo_full: np.ndarray


def dark_current(current: CurrentTerms) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Which factor leaves a pair a Jsc below :data:`JSC_MIN_MA_CM2`: ``(gap, lumo, homo)`` masks.

    A pair whose model Jsc (at the model's EQE and charge-generation yields) is not written above 0 is not viable.
    ``gap``: even with every yield 1 the photons above the absorber gap give too little (flag
    ``absorber_gap_invalid``); otherwise the yields make it vanish, and an offset is named (``lumo_offset_low``,
    ``homo_offset_low``) when its yield set to 1 would give a written current — or when neither alone would (then
    both are).  A yield that does not enter the current (the donor-only model's ΔHOMO) is never named.

    Examples
    --------
    >>> t = CurrentTerms(jsc=np.array([12.0, 1e-6, 1e-6, 1e-6]), photons=np.array([15.0, 2e-5, 15.0, 15.0]),
    ...                  lumo_full=np.array([15.0, 2e-5, 15.0, 1e-6]), homo_full=np.array([15.0, 2e-5, 1e-6, 1e-6]))
    >>> [m.tolist() for m in dark_current(t)]
    [[False, True, False, False], [False, False, True, True], [False, False, False, True]]
    """
    dark = ~jsc_written(current.jsc)
    gap = dark & ~jsc_written(current.photons)
    yields = dark & ~gap
    lumo_rescues, homo_rescues = jsc_written(current.lumo_full), jsc_written(current.homo_full)
    return gap, yields & (lumo_rescues | ~homo_rescues), yields & (homo_rescues | ~lumo_rescues)


def classify(delta_lumo, delta_homo, absorber_gap, voc_raw, missing, *, min_lumo: float, min_homo: float,
             check_homo_offset: bool = True, current: CurrentTerms | None = None) -> dict:
    """Viability masks of donor/acceptor pairs.

    Parameters
    ----------
    delta_lumo, delta_homo : numpy.ndarray
        ΔLUMO and ΔHOMO; NaN ΔHOMO (acceptor HOMO unknown, donor-only model)
        is not checked. [eV]
    absorber_gap : numpy.ndarray
        Optical gap that sets the current. [eV]
    voc_raw : numpy.ndarray
        Open-circuit voltage of the model before any cap. [V]
    missing : numpy.ndarray of bool
        A level the model needs is missing.
    min_lumo, min_homo : float
        Smallest offsets that allow charge separation. [eV]
    check_homo_offset : bool
        Check ΔHOMO against ``min_homo`` (type II is always required).
    current : CurrentTerms or None
        The model's Jsc and its factors (:func:`screen.devicekernel.pair_terms`); None: no current rule (only
        for callers that classify offsets alone).

    Returns
    -------
    dict of numpy.ndarray of bool
        One mask per name of :data:`VIABILITY_MASKS` and ``viable`` (none of
        them).  A NaN never raises a mask other than ``input_missing``.

    Notes
    -----
    Type II needs ΔLUMO > 0 and ΔHOMO > 0 (otherwise one carrier has nowhere to
    go: *inverted alignment*); a positive offset below its threshold is
    *offset below threshold*; a model Voc ≤ 0 is *no positive Voc*; an absorber
    gap not positive or from :data:`GAP_MAX_EV` on is *absorber gap invalid*.
    With ``current``, a pair whose model Jsc is below :data:`JSC_MIN_MA_CM2`
    (written as 0) is not viable, with the flag of the factor that makes it
    vanish (:func:`dark_current`): the gap (*absorber gap invalid*) or a
    type-II offset so small that its charge-generation yield leaves no current
    (*offset below threshold*).
    """
    with np.errstate(invalid="ignore"):
        lumo_inv = delta_lumo <= OFFSET_TOL_EV  # not type II (offset_clears: its first condition)
        homo_inv = delta_homo <= OFFSET_TOL_EV
        # type II, below its threshold (a missing offset is input_missing, not low)
        lumo_low = np.isfinite(delta_lumo) & ~lumo_inv & ~offset_clears(delta_lumo, min_lumo)
        homo_low = (np.isfinite(delta_homo) & ~homo_inv & ~offset_clears(delta_homo, min_homo)) if check_homo_offset \
            else np.zeros(np.shape(homo_inv), dtype=bool)
        gap_bad = np.isfinite(absorber_gap) & ~gap_valid(absorber_gap)
        voc_bad = voc_raw <= 0
        if current is not None:  # the model's own Jsc (a missing level is input_missing alone)
            dark_gap, dark_lumo, dark_homo = dark_current(current)
            known = ~np.asarray(missing, dtype=bool) & np.isfinite(absorber_gap)
            gap_bad = gap_bad | (dark_gap & known)
            lumo_low = lumo_low | (dark_lumo & known & np.isfinite(delta_lumo) & ~lumo_inv)
            homo_low = homo_low | (dark_homo & known & np.isfinite(delta_homo) & ~homo_inv)
    masks = {"input_missing": missing, "absorber_gap_invalid": gap_bad, "lumo_inverted": lumo_inv,
             "homo_inverted": homo_inv, "lumo_offset_low": lumo_low, "homo_offset_low": homo_low,
             "voc_nonpositive": voc_bad}
    shape = np.broadcast_shapes(*(np.shape(m) for m in masks.values()))
    masks = {k: np.broadcast_to(np.asarray(v, dtype=bool), shape) for k, v in masks.items()}
    bad = np.zeros(shape, dtype=bool)
    for m in masks.values():
        bad = bad | m
    masks["viable"] = ~bad
    return masks


def role_from_levels(homo, lumo, partner_homo: float, partner_lumo: float) -> tuple[np.ndarray, np.ndarray]:
    """Which roles a material's levels support against a partner (type-II alignment).

    Parameters
    ----------
    homo, lumo : array_like
        The material's levels, vacuum scale. [eV]
    partner_homo, partner_lumo : float
        The partner's levels. [eV]

    Returns
    -------
    (numpy.ndarray of bool, numpy.ndarray of bool)
        ``as_donor`` (both of its levels above the partner's) and
        ``as_acceptor`` (both below).  Both False: no role gives type II.

    Examples
    --------
    >>> d, a = role_from_levels([-5.3, -6.2, -5.3], [-3.5, -4.4, -4.5], -5.7, -4.0)
    >>> d.tolist(), a.tolist()
    ([True, False, False], [False, True, False])
    """
    homo, lumo = np.asarray(homo, dtype=float), np.asarray(lumo, dtype=float)
    with np.errstate(invalid="ignore"):
        as_donor = (homo - partner_homo > OFFSET_TOL_EV) & (lumo - partner_lumo > OFFSET_TOL_EV)
        as_acceptor = (partner_homo - homo > OFFSET_TOL_EV) & (partner_lumo - lumo > OFFSET_TOL_EV)
    return as_donor, as_acceptor


#: the end group of the fused-ring acceptors: a dicyanomethylene on a five-membered ketone ring fused to an aromatic
#: ring (the indanone "IC" of ITIC and Y6, halogenated ones, and its thiophene analogue in ITCC)
IC_TYPE_END_SMARTS = "N#CC(C#N)=C1C(=[#6])C(=O)[a]:[a]1"


@lru_cache(maxsize=1)
def _ic_type_end():
    from rdkit import Chem

    return Chem.MolFromSmarts(IC_TYPE_END_SMARTS)


def acceptor_class_of(smiles) -> str:
    """Acceptor class of a structure, by the rule the device set's classes were labelled with.

    The classes of ``models/reference/devices.csv`` (``devices.md``) select the fitted energy
    loss and fill factor, so a candidate is classed by the same definition:

    * ``'polymer'``: a repeat unit (``*`` atoms);
    * ``'fullerene'``: at least 60 carbons and 30 rings (a closed carbon cage, bare or with adducts);
    * ``'nfa-fused'``: an A–D–A / A–DA′D–A acceptor of the ITIC / Y-series type — dicyanomethylene-indanone-type
      end groups (:data:`IC_TYPE_END_SMARTS`) on a fused ring system of at least five rings;
    * ``'nfa-other'``: any other small molecule (rylene diimides, IDTBR-type rhodanine acceptors, IC-ended
      acceptors with a non-fused core, ...);
    * ``''``: no structure (the pooled loss).

    Parameters
    ----------
    smiles : str
        SMILES; a repeat unit with ``[*]`` attachment points is a polymer.

    Returns
    -------
    str
        The class, as above.

    Examples
    --------
    >>> acceptor_class_of("[*]c1ccc([*])s1"), acceptor_class_of("c1ccccc1"), acceptor_class_of("")
    ('polymer', 'nfa-other', '')
    """
    text = "" if smiles is None else str(smiles).strip()
    if not text or text.lower() == "nan":
        return ""
    if "*" in text:
        return "polymer"
    from rdkit import Chem, rdBase

    with rdBase.BlockLogs():
        mol = Chem.MolFromSmiles(text)
    if mol is None:
        return ""
    carbons = sum(1 for a in mol.GetAtoms() if a.GetAtomicNum() == 6)
    ring = mol.GetRingInfo()
    if carbons >= 60 and ring.NumRings() >= 30:
        return "fullerene"
    fused_core = _largest_fused_system(ring) >= 5
    return "nfa-fused" if fused_core and mol.HasSubstructMatch(_ic_type_end()) else "nfa-other"


def _largest_fused_system(ring) -> int:
    """Rings in the largest system of rings that share a bond."""
    bonds = [set(r) for r in ring.BondRings()]
    seen, best = set(), 0
    for start in range(len(bonds)):
        if start in seen:
            continue
        stack, size = [start], 0
        seen.add(start)
        while stack:
            i = stack.pop()
            size += 1
            for j in range(len(bonds)):
                if j not in seen and bonds[i] & bonds[j]:
                    seen.add(j)
                    stack.append(j)
        best = max(best, size)
    return best
