"""Dye-cell physics: driving forces, viability, Jsc, Voc, FF, PCE and its Monte-Carlo spread.

For an n-type cell (dye on a mesoporous n-type oxide such as anatase TiO₂)
with all potentials in V vs NHE [1]_, [2]_:

.. math::

    E(S^+/S^*) = E(S^+/S) - E_{0-0}/e

    \\Delta_{inj} = e\\,[E_{CB} - E(S^+/S^*)] \\qquad \\Delta_{reg} = e\\,[E(S^+/S) - E_{redox}]

    V_{oc} = E_{redox} - E_{CB} - V_{loss}

    J_{sc} = \\eta\\, q \\int_{E \\ge E_{0-0}} \\Phi_{AM1.5G}(E)\\, dE

    \\mathrm{PCE} = V_{oc} J_{sc}\\, \\mathrm{FF} / P_{in}

Both driving forces are positive when the step is downhill (ΔG = −Δ).  The
electron quasi-Fermi level of the oxide under illumination is taken at the
conduction-band edge; ``voc_loss_v`` is how far below it sits at open circuit
(and any other voltage loss).  η (``photon_to_current``) is the absorbed-
photon-to-current efficiency times the light harvesting above E₀₋₀: the
sharp-edge absorption is an optimistic idealisation for dyes with narrow bands.

A p-type cell (dye on NiO) runs the other way: the excited dye takes an
electron from the valence band (hole injection) and the reduced dye gives it to
the mediator.  The dye's reduction potential is not calibrated; it is
estimated as :math:`E(S/S^-) \\approx E(S^+/S) - E_{0-0}/e`, so
:math:`E(S^*/S^-) \\approx E(S^+/S)`, :math:`\\Delta_{inj} = e[E(S^+/S) - E_{VB}]`,
:math:`\\Delta_{reg} = e[E_{redox} - E(S/S^-)]` and
:math:`V_{oc} = E_{VB} - E_{redox} - V_{loss,p}` (flag ``p_type_estimate``).

The p-type loss ``voc_loss_p_v`` (default 0.05 V) is separate from the n-type
``voc_loss_v`` (0.20 V): the NiO valence band (+0.50 V) lies only 0.15 V below
iodide/triiodide (+0.35 V), so the n-type loss would leave no photovoltage for
the standard p-type cell, which measures V_oc ≈ 0.08–0.12 V with organic
push-pull dyes (e.g. P1; from memory, [5]_); 0.15 − 0.05 = 0.10 V.

Viability (no impossible number): a dye is *viable* when both driving forces
reach their thresholds, it absorbs sunlight, the photovoltage is positive, the
inputs are present and (with ``require_anchor``) it has an anchoring group.  A
dye that is not viable gets no Voc, Jsc or PCE, and a reason in plain words.  A
viable dye's Voc never exceeds the detailed-balance Voc of its E₀₋₀ and its PCE
never the detailed-balance limit (:func:`screen.spectrum.sq_limit`); a capped
value is flagged.

Absorbing sunlight: the AM1.5G table ends at 280 nm, so a dye whose E₀₋₀ lies
at or above hc/280 nm = 4.43 eV (:func:`sunlight_edge_ev`) absorbs none of it
and Jsc = 0; a dye just below the edge gets a Jsc that ``ranking.csv`` would
write as 0 (below :data:`JSC_MIN_MA_CM2`).  Both are not viable (flag
``no_sunlight``, reason "absorbs no sunlight (E₀₋₀ … eV is above …)"): a
transparent molecule such as acetic acid is no dye.  "No photovoltage"
(``voc_nonpositive``) is judged on the Voc after the detailed-balance cap of
E₀₋₀, not on E_redox − E_CB − loss alone.

Thresholds: 0.2 eV for injection and regeneration are rules of thumb of the
field (common practice, e.g. discussed in [1]_); the iodide/triiodide couple
needs ~0.5 eV because the dye is regenerated through the I₂•⁻/I⁻ couple [3]_ —
the mediator table carries such couple-specific thresholds (``min_drive_reg_ev``).
Those are stated for the n-type step, the regeneration of the *oxidised* dye
(``mediators.csv`` notes: I₂•⁻/I⁻ for iodide, the small reorganisation energy of
Cu(I) for the copper couples); the p-type step, the reduced dye giving its
electron to the mediator (triiodide reduction on NiO), is another reaction, so
on a p-type oxide the general :data:`DEFAULT_REG_THRESHOLD_EV` applies unless
``dyecell.min_drive_reg_ev`` is set (:meth:`DyeCellModel.reg_threshold_ev`).

References
----------
.. [1] A. Hagfeldt, G. Boschloo, L. Sun, L. Kloo, H. Pettersson,
   "Dye-sensitized solar cells", Chem. Rev. 110 (2010) 6595–6663.
   :doi:`10.1021/cr900356p`
.. [2] M. Grätzel, "Photoelectrochemical cells", Nature 414 (2001) 338–344.
   :doi:`10.1038/35104607`
.. [3] G. Boschloo, A. Hagfeldt, "Characteristics of the iodide/triiodide
   redox mediator in dye-sensitized solar cells", Acc. Chem. Res. 42 (2009)
   1819–1826. :doi:`10.1021/ar900138m` (from memory)
.. [4] W. Shockley, H. J. Queisser, J. Appl. Phys. 32 (1961) 510.
   :doi:`10.1063/1.1736034`
.. [5] P. Qin, H. Zhu, T. Edvinsson, G. Boschloo, A. Hagfeldt, L. Sun, "Design
   of an organic chromophore for p-type dye-sensitized solar cells",
   J. Am. Chem. Soc. 130 (2008) 8570. :doi:`10.1021/ja8001474` (from memory:
   P1 on NiO with iodide/triiodide, V_oc ≈ 0.08–0.10 V); E. A. Gibson et al.
   and F. Odobel et al., p-type DSSC reviews (from memory).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from screen.dyecell.checks import threshold_problem
from screen.dyecell.flags import join_flags
from screen.dyecell.library import Material
from screen.dyecell.options import option_defaults
from screen.errors import ConfigError
from screen.schema import check_section
from screen.sampling import sq_fast, voc_fast
from screen.spectrum import (
    gap_to_wavelength_nm,
    incident_power_w_m2,
    jsc_ma_cm2,
    reference_spectrum,
    sq_limit,
)
from screen.viability import JSC_MIN_MA_CM2, OFFSET_TOL_EV

__all__ = ["DyeCellModel", "evaluate", "sample_pce", "TOL_EV", "JSC_MIN_MA_CM2", "sunlight_edge_ev",
           "p_type_threshold_note", "DEFAULT_REG_THRESHOLD_EV"]

#: driving forces within this of a threshold meet it: half of the last decimal a ranking writes, as the offsets of
#: the bulk-heterojunction mode (:data:`screen.viability.OFFSET_TOL_EV`) [eV]
TOL_EV = OFFSET_TOL_EV
_D = option_defaults()
# JSC_MIN_MA_CM2 (screen.viability, one value for both modes): a Jsc below it is written as 0 in ``ranking.csv``
# (4 decimals): such a dye absorbs no sunlight, and is not viable (flag ``no_sunlight``) [mA cm⁻²]
#: regeneration threshold of a mediator without its own, unless ``dyecell.min_drive_reg_ev`` is set [eV]
#: (common practice for one-electron couples: Hagfeldt et al., Chem. Rev. 110 (2010) 6595)
DEFAULT_REG_THRESHOLD_EV = 0.2


def sunlight_edge_ev() -> float:
    """Photon energy of the shortest wavelength of the AM1.5G table, hc/280 nm: no sunlight above it. [eV]

    Examples
    --------
    >>> round(sunlight_edge_ev(), 3)
    4.428
    """
    return float(gap_to_wavelength_nm(1.0)) / float(reference_spectrum().wavelength_nm[0])


# Jsc(η = 1) and the detailed-balance limit on one uniform photon-energy grid (sampler only)
_GRID_MIN_EV, _GRID_MAX_EV, _GRID_STEP_EV = 0.30, 4.50, 1e-3
#: samples per block of the sampler (cache-sized work arrays)
_BLOCK_ELEMENTS = 2**17


@dataclass(frozen=True)
class DyeCellModel:
    """Parameters of the dye-cell model (the ``dyecell`` config section).

    Parameters
    ----------
    photon_to_current : float, default 0.65
        Photon-to-current efficiency above E₀₋₀ (light harvesting × injection ×
        collection). [dimensionless]
    ff : float, default 0.70
        Fill factor. [dimensionless]
    voc_loss_v : float, default 0.20
        n-type oxides: distance of the oxide's electron quasi-Fermi level at
        open circuit below its conduction-band edge, plus other voltage losses. [V]
    voc_loss_p_v : float, default 0.05
        p-type oxides: the same loss for the hole quasi-Fermi level and the
        valence-band edge (from memory: NiO/iodide cells reach ~0.1 V of the
        ideal 0.15 V). [V]
    min_drive_inj_ev : float, default 0.20
        Smallest injection driving force, 0–2 eV (the bounds of a mediator
        file's threshold, :data:`screen.dyecell.checks.THRESHOLD_RANGE_EV`). [eV]
    min_drive_reg_ev : float or None, default None
        Smallest regeneration driving force for every mediator and oxide (0–2 eV); None:
        the mediator's own threshold when it has one and the oxide is n-type (the
        step it is stated for), else :data:`DEFAULT_REG_THRESHOLD_EV`. [eV]
    require_anchor : bool, default True
        A dye without an anchoring group is not viable. False: it stays viable
        and keeps the information flag ``anchor_missing_allowed``.

    Examples
    --------
    >>> m = DyeCellModel()
    >>> m.ff, m.min_drive_inj_ev
    (0.7, 0.2)
    >>> DyeCellModel(ff=1.5)
    Traceback (most recent call last):
    ...
    screen.errors.ConfigError: DyeCellModel: field dyecell.ff: 1.5 is greater than the maximum of 1
    >>> DyeCellModel(min_drive_reg_ev=5)
    Traceback (most recent call last):
    ...
    screen.errors.ConfigError: dyecell.min_drive_reg_ev = 5.0 is not allowed: 5 eV is above 2 eV: no dye could meet it; give it in eV, e.g. 0.2
    """

    photon_to_current: float = _D["photon_to_current"]
    ff: float = _D["ff"]
    voc_loss_v: float = _D["voc_loss_v"]
    min_drive_inj_ev: float = _D["min_drive_inj_ev"]
    min_drive_reg_ev: float | None = _D["min_drive_reg_ev"]
    require_anchor: bool = _D["require_anchor"]
    voc_loss_p_v: float = _D["voc_loss_p_v"]

    def __post_init__(self):
        for name in ("min_drive_inj_ev", "min_drive_reg_ev"):  # the bounds of a mediator file's threshold
            val = getattr(self, name)
            if isinstance(val, (int, float, np.floating, np.integer)) and not isinstance(val, bool) \
                    and math.isfinite(float(val)):
                problem = threshold_problem(float(val))
                if problem:
                    raise ConfigError(f"dyecell.{name} = {float(val)!r} is not allowed: {problem}")
        # the rest as a config file and --set are held to it (types, finite numbers, bounds with their units): a
        # Python caller's voc_loss_v=200, millivolts, was accepted here and refused only by a ranking
        fields = {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}
        for name, value in check_section("dyecell", fields, "DyeCellModel").items():
            object.__setattr__(self, name, float(value) if isinstance(value, int) and name != "require_anchor"
                               else value)

    @classmethod
    def from_mapping(cls, section: dict | None) -> DyeCellModel:
        """The model from a ``dyecell`` config section (other keys ignored)."""
        names = {f.name for f in dataclasses.fields(cls)}
        return cls(**{k: v for k, v in (section or {}).items() if k in names})

    def as_dict(self) -> dict:
        """Parameters, spectrum and incident power, for sidecars."""
        d = dataclasses.asdict(self)
        d["spectrum"] = reference_spectrum().name
        d["incident_power_w_m2"] = incident_power_w_m2()
        return d

    def pce_factor_pct(self) -> float:
        """``PCE [%] = Voc [V] · Jsc [mA cm⁻²] · factor`` (includes FF and P_in)."""
        return self.ff * 10.0 / incident_power_w_m2() * 100.0

    def voc_loss_name(self, oxide: Material) -> str:
        """The option that holds the Voc loss for this oxide's type (``voc_loss_p_v`` or ``voc_loss_v``)."""
        return "voc_loss_p_v" if oxide.type == "p" else "voc_loss_v"

    def voc_loss_for(self, oxide: Material) -> float:
        """Voc loss for this oxide: :attr:`voc_loss_p_v` for a p-type oxide, else :attr:`voc_loss_v`. [V]

        Examples
        --------
        >>> from screen.dyecell.library import resolve_oxide
        >>> m = DyeCellModel()
        >>> m.voc_loss_for(resolve_oxide("tio2-anatase")), m.voc_loss_for(resolve_oxide("nio"))
        (0.2, 0.05)
        """
        return float(getattr(self, self.voc_loss_name(oxide)))

    def reg_threshold_ev(self, mediator: Material, oxide: Material | None = None) -> float:
        """Regeneration threshold [eV]: :attr:`min_drive_reg_ev` when set (it applies to every mediator and oxide),
        else the mediator's own when it has one and the oxide is n-type (the step those thresholds were stated
        for: regeneration of the oxidised dye), else :data:`DEFAULT_REG_THRESHOLD_EV`.

        Examples
        --------
        >>> from screen.dyecell.library import resolve_mediator, resolve_oxide
        >>> iodide, nio = resolve_mediator("iodide-triiodide"), resolve_oxide("nio")
        >>> DyeCellModel().reg_threshold_ev(iodide), DyeCellModel(min_drive_reg_ev=0.7).reg_threshold_ev(iodide)
        (0.5, 0.7)
        >>> DyeCellModel().reg_threshold_ev(iodide, nio)
        0.2
        """
        return self.reg_threshold_source(mediator, oxide)[0]

    def reg_threshold_source(self, mediator: Material, oxide: Material | None = None) -> tuple[float, str]:
        """The regeneration threshold [eV] and where it comes from: ``set`` (``dyecell.min_drive_reg_ev``),
        ``mediator`` (the mediator's own, n-type), ``default`` (the mediator has none) or ``default_p_type`` (the
        mediator's own is for the n-type step; a p-type oxide takes the default).

        Examples
        --------
        >>> from screen.dyecell.library import resolve_mediator, resolve_oxide
        >>> DyeCellModel().reg_threshold_source(resolve_mediator("iodide-triiodide"), resolve_oxide("nio"))
        (0.2, 'default_p_type')
        """
        if self.min_drive_reg_ev is not None:
            return float(self.min_drive_reg_ev), "set"
        own = mediator.min_drive_reg_ev
        if own is None or not math.isfinite(own):
            return DEFAULT_REG_THRESHOLD_EV, "default"
        if oxide is not None and oxide.type == "p":
            return DEFAULT_REG_THRESHOLD_EV, "default_p_type"
        return float(own), "mediator"


def p_type_threshold_note(mediator: Material) -> str:
    """Why a p-type ranking does not use the mediator's own regeneration threshold (plain words).

    Examples
    --------
    >>> from screen.dyecell.library import resolve_mediator
    >>> p_type_threshold_note(resolve_mediator("iodide-triiodide"))[:62]
    "the general 0.20 eV: iodide-triiodide's own 0.50 eV is stated "
    """
    return (f"the general {DEFAULT_REG_THRESHOLD_EV:.2f} eV: {mediator.id}'s own {mediator.min_drive_reg_ev:.2f} eV "
            "is stated for regenerating an oxidised dye on an n-type oxide, not for the p-type step (the reduced "
            "dye reducing the mediator); set dyecell.min_drive_reg_ev to use another value")


def _energetics(e_ox, e00, oxide: Material, mediator: Material):
    """E(S⁺/S*), injection and regeneration driving forces and the raw Voc for the oxide's type."""
    e_exc = e_ox - e00
    if oxide.type == "p":
        drive_inj = e_ox - oxide.potential_v_nhe            # E(S*/S-) ≈ E(S+/S) above the valence band
        drive_reg = mediator.potential_v_nhe - e_exc        # mediator oxidises S-; E(S/S-) ≈ E(S+/S*)
        voc_raw = oxide.potential_v_nhe - mediator.potential_v_nhe
    else:
        drive_inj = oxide.potential_v_nhe - e_exc
        drive_reg = e_ox - mediator.potential_v_nhe
        voc_raw = mediator.potential_v_nhe - oxide.potential_v_nhe
    return e_exc, drive_inj, drive_reg, voc_raw


def _fmt(x: float, digits: int = 2) -> str:
    return f"{x:+.{digits}f}".replace("-", "\u2212")


def _thr_txt(thr: float) -> str:
    """A threshold with 2 decimals, or as many (up to 4) as it has."""
    for d in (2, 3, 4):
        if abs(round(thr, d) - thr) < 1e-12:
            return f"{thr:.{d}f}"
    return f"{thr:.4f}"


def _digits(value: float, thr: float) -> int:
    """Decimals (2–4) that show ``value`` below ``thr`` (0.198 against 0.20 rather than 0.20 against 0.20)."""
    for d in (2, 3, 4):
        if round(value, d) < float(_thr_txt(thr)):
            return d
    return 4


def _no_light_words(e00: float) -> str:
    """Why a dye of this E₀₋₀ absorbs no sunlight (flag ``no_sunlight``).

    Examples
    --------
    >>> _no_light_words(4.91)
    'absorbs no sunlight (E₀₋₀ 4.91 eV is above 4.43 eV = hc/280 nm, where the AM1.5G spectrum ends), so there is no photocurrent'
    """
    edge = sunlight_edge_ev()
    lam = float(reference_spectrum().wavelength_nm[0])
    if e00 >= edge:
        return (f"absorbs no sunlight (E\u2080\u208b\u2080 {e00:.2f} eV is above {edge:.2f} eV = hc/{lam:.0f} nm, where "
                "the AM1.5G spectrum ends), so there is no photocurrent")
    return (f"absorbs no sunlight (E\u2080\u208b\u2080 {e00:.2f} eV is above all but a trace of the AM1.5G spectrum, "
            f"which ends at {edge:.2f} eV = hc/{lam:.0f} nm: Jsc < 0.0001 mA cm\u207b\u00b2), so there is no "
            "photocurrent")


def _zero(d: float, digits: int) -> bool:
    """A driving force that is written as zero with ``digits`` decimals (the dye level sits on the other one)."""
    return round(float(d), digits) == 0.0


def _reason(i, e_ox, e00, e_exc, d_inj, d_reg, masks, oxide, mediator, thr_inj, thr_reg, voc_raw, loss,
            loss_name, voc_cap=math.nan, thr_source: str = "") -> str:
    """Plain-words reason why dye ``i`` is not viable (every failing check, ';'-joined).

    Potentials are given in V vs NHE, driving forces in eV; a driving force is
    written with the decimals that show it below its threshold.  "Above" and
    "below" are those of the energy diagram: more negative potentials (higher
    electron energies) are above.  ``voc_cap``: the detailed-balance Voc of the
    dye's E₀₋₀ [V].  An oxide file without a ``type`` adds "type n assumed"
    wherever the band edge is named.  A driving force written as 0 reads "at the
    same potential as"; ``thr_source`` ``default_p_type`` adds why the mediator's
    own regeneration threshold is not used (:func:`p_type_threshold_note`).
    """
    words = []
    p_type = oxide.type == "p"
    edge = "valence-band edge" if p_type else "conduction-band edge"
    assumed = "; type n assumed" if getattr(oxide, "type_assumed", False) else ""
    if masks["input_missing"][i]:
        if np.isfinite(e_ox[i]) and np.isfinite(e00[i]):  # present, but not a positive excitation energy
            return (f"not viable: E\u2080\u208b\u2080 = {_fmt(e00[i])} eV is not a positive excitation energy")
        return "not viable: E(S\u207a/S) or E\u2080\u208b\u2080 is missing"
    if masks["no_anchor"][i]:
        words.append("no anchoring group, so the dye cannot bind to the oxide")
    if masks["no_sunlight"][i]:
        words.append(_no_light_words(float(e00[i])))

    def ox_txt(d=2):
        return f"the {edge} of {oxide.id} ({_fmt(oxide.potential_v_nhe, d)} V{assumed})"

    def med_txt(d=2):
        return f"the mediator {mediator.id} ({_fmt(mediator.potential_v_nhe, d)} V)"

    if masks["injection_low"][i]:
        d = _digits(d_inj[i], thr_inj)
        need = (f"driving force {d_inj[i]:.{d}f} eV; {'hole ' if p_type else ''}injection needs "
                f"\u2265 {_thr_txt(thr_inj)} eV")
        if p_type:
            where = ("lies at the same potential as" if _zero(d_inj[i], d) else
                     "lies above (more negative than)" if d_inj[i] < 0 else "is only slightly more positive than")
            words.append(f"excited state E(S*/S\u207b) \u2248 E(S\u207a/S) = {_fmt(e_ox[i], d)} V vs NHE {where} "
                         f"{ox_txt(d)}, so hole injection is not assured ({need})")
        elif _zero(d_inj[i], d):
            words.append(f"excited state E(S\u207a/S*) = {_fmt(e_exc[i], d)} V vs NHE lies at the same potential as "
                         f"{ox_txt(d)}, so injection has no driving force ({need})")
        elif d_inj[i] < 0:
            words.append(f"excited state E(S\u207a/S*) = {_fmt(e_exc[i], d)} V vs NHE lies {abs(d_inj[i]):.{d}f} eV "
                         f"below (more positive than) {ox_txt(d)}, so it cannot inject ({need})")
        else:
            words.append(f"excited state E(S\u207a/S*) = {_fmt(e_exc[i], d)} V vs NHE is only slightly more "
                         f"negative than {ox_txt(d)} ({need})")
    if masks["regeneration_low"][i]:
        d = _digits(d_reg[i], thr_reg)
        note = f"; {p_type_threshold_note(mediator)}" if thr_source == "default_p_type" else ""
        need = f"driving force {d_reg[i]:.{d}f} eV; regeneration needs \u2265 {_thr_txt(thr_reg)} eV{note}"
        if p_type:
            where = ("lies at the same potential as" if _zero(d_reg[i], d) else
                     "lies below (more positive than)" if d_reg[i] < 0 else "is only slightly more negative than")
            words.append(f"reduced dye E(S/S\u207b) \u2248 E(S\u207a/S) \u2212 E\u2080\u208b\u2080/e = "
                         f"{_fmt(e_exc[i], d)} V vs NHE {where} {med_txt(d)}, so the reduced dye cannot be "
                         f"regenerated reliably ({need})")
        elif _zero(d_reg[i], d):
            words.append(f"ground state E(S\u207a/S) = {_fmt(e_ox[i], d)} V vs NHE lies at the same potential as "
                         f"{med_txt(d)}, so regeneration has no driving force ({need})")
        elif d_reg[i] < 0:
            words.append(f"ground state E(S\u207a/S) = {_fmt(e_ox[i], d)} V vs NHE lies above (more negative "
                         f"than) {med_txt(d)}, so the oxidised dye cannot be regenerated ({need})")
        else:
            words.append(f"ground state E(S\u207a/S) = {_fmt(e_ox[i], d)} V vs NHE is only slightly more "
                         f"positive than {med_txt(d)} ({need})")
    if masks["voc_nonpositive"][i]:
        ideal = (f"E_VB \u2212 E_redox = {_fmt(oxide.potential_v_nhe)} \u2212 ({_fmt(mediator.potential_v_nhe)})"
                 if p_type else
                 f"E_redox \u2212 E_CB = {_fmt(mediator.potential_v_nhe)} \u2212 ({_fmt(oxide.potential_v_nhe)})")
        ideal = f"{ideal} = {_fmt(voc_raw)} V"
        if voc_raw <= 0:
            side = "more negative" if p_type else "more positive"
            words.append(f"{med_txt()} is not {side} than {ox_txt()}: the ideal photovoltage {ideal} is not "
                         "positive, so the cell has no photovoltage")
        elif voc_raw - loss <= 0:
            words.append(f"the ideal photovoltage {ideal} is used up by the assumed Voc loss of {loss:.2f} V "
                         f"({loss_name}{assumed}), so Voc = {_fmt(voc_raw - loss)} V and the cell has no "
                         "photovoltage")
        else:  # only the detailed-balance cap of E₀₋₀ leaves no photovoltage
            words.append(f"the detailed-balance Voc of E\u2080\u208b\u2080 = {_fmt(e00[i])} eV is "
                         f"{_fmt(voc_cap, 3)} V, so the capped Voc is not positive and the cell has no photovoltage")
    return "not viable: " + "; ".join(words)


def evaluate(model: DyeCellModel, e_ox_v_nhe, e00_ev, oxide: Material, mediator: Material, anchored=None) -> dict:
    """Dye-cell estimates for many dyes against one oxide and one mediator (vectorised).

    Parameters
    ----------
    model : DyeCellModel
    e_ox_v_nhe : array_like
        Ground-state oxidation potential E(S⁺/S). [V vs NHE]
    e00_ev : array_like
        Zero-zero excitation energy. [eV]
    oxide, mediator : Material
        From :mod:`screen.dyecell.library`.
    anchored : array_like of bool, optional
        True where the dye has an anchoring group (default: all True).

    Returns
    -------
    dict of numpy.ndarray
        ``e_ox_excited_v_nhe`` [V vs NHE], ``drive_inj_ev``, ``drive_reg_ev``
        [eV], ``voc_v`` [V], ``jsc_ma_cm2`` [mA cm⁻²], ``ff``, ``pce_pct`` [%]
        (NaN when not viable), ``viable`` (bool), ``viability`` (text), one
        boolean mask per flag code and ``flags`` (``;``-joined).  A dye that
        absorbs no sunlight (E₀₋₀ ≥ :func:`sunlight_edge_ev`, or Jsc below
        :data:`JSC_MIN_MA_CM2`) is not viable (``no_sunlight``).

    Examples
    --------
    >>> from screen.dyecell.library import resolve_mediator, resolve_oxide
    >>> out = evaluate(DyeCellModel(), [1.07, 0.40], [1.96, 1.96], resolve_oxide("tio2-anatase"),
    ...                resolve_mediator("co-bpy3"))
    >>> out["drive_inj_ev"].round(2).tolist(), out["drive_reg_ev"].round(2).tolist()
    ([0.39, 1.06], [0.51, -0.16])
    >>> out["viable"].tolist(), out["flags"].tolist()
    ([True, False], ['', 'regeneration_low'])
    >>> bool(np.isnan(out["pce_pct"][1]))
    True
    >>> clear = evaluate(DyeCellModel(), 2.5, 4.91, resolve_oxide("tio2-anatase"), resolve_mediator("co-bpy3"))
    >>> clear["viable"].tolist(), clear["flags"].tolist()
    ([False], ['no_sunlight'])
    """
    e_ox = np.atleast_1d(np.asarray(e_ox_v_nhe, dtype=float))
    e00 = np.atleast_1d(np.asarray(e00_ev, dtype=float))
    e_ox, e00 = np.broadcast_arrays(e_ox, e00)
    n = e_ox.size
    anchored = np.ones(n, dtype=bool) if anchored is None else np.broadcast_to(np.asarray(anchored, bool), (n,))
    e_exc, d_inj, d_reg, voc_raw = _energetics(e_ox, e00, oxide, mediator)
    thr_inj, (thr_reg, thr_src) = model.min_drive_inj_ev, model.reg_threshold_source(mediator, oxide)
    loss = model.voc_loss_for(oxide)
    missing = ~(np.isfinite(e_ox) & np.isfinite(e00) & (e00 > 0))
    g_all = np.where(missing, np.nan, e00)
    limit_all = sq_limit(g_all)
    jsc_all = np.asarray(jsc_ma_cm2(g_all, model.photon_to_current), dtype=float)
    voc_cap = np.asarray(limit_all["voc_v"], dtype=float)
    with np.errstate(invalid="ignore"):
        dark = ~missing & ~(jsc_all >= JSC_MIN_MA_CM2)          # absorbs no sunlight: Jsc 0 (as written)
        voc_capped = np.minimum(np.full(n, voc_raw - loss), voc_cap)
        masks = {
            "input_missing": missing,
            "no_anchor": ~anchored if model.require_anchor else np.zeros(n, bool),
            "no_sunlight": dark,
            "anchor_missing_allowed": np.zeros(n, bool) if model.require_anchor else ~anchored,
            "injection_low": ~missing & (d_inj < thr_inj - TOL_EV),
            "regeneration_low": ~missing & (d_reg < thr_reg - TOL_EV),
            # judged on the capped Voc; a dye without light has its own reason (its capped Voc is 0 too)
            "voc_nonpositive": np.full(n, voc_raw - loss <= 0.0) | (~missing & ~dark & ~(voc_capped > 0.0)),
        }
    viable = ~(masks["input_missing"] | masks["no_anchor"] | masks["no_sunlight"] | masks["injection_low"]
               | masks["regeneration_low"] | masks["voc_nonpositive"])
    voc = np.where(viable, voc_capped, np.nan)
    jsc = np.where(viable, jsc_all, np.nan)
    limit = {k: np.where(viable, np.asarray(v, dtype=float), np.nan) for k, v in limit_all.items()}
    pce = voc * jsc * model.pce_factor_pct()
    with np.errstate(invalid="ignore"):
        capped = viable & ((voc_raw - loss > limit["voc_v"]) | (pce > limit["pce_pct"]))
    pce = np.minimum(pce, limit["pce_pct"])
    if not viable.all():
        voc = np.where(viable, voc, np.nan)
    masks["p_type_estimate"] = np.full(n, oxide.type == "p")
    masks["detailed_balance_cap"] = capped
    viability = np.full(n, "viable", dtype=object)
    for i in np.flatnonzero(~viable):
        viability[i] = _reason(i, e_ox, e00, e_exc, d_inj, d_reg, masks, oxide, mediator, thr_inj, thr_reg,
                               voc_raw, loss, model.voc_loss_name(oxide), float(voc_cap[i]), thr_src)
    return {
        "e_ox_excited_v_nhe": e_exc, "drive_inj_ev": d_inj, "drive_reg_ev": d_reg,
        "voc_v": voc, "jsc_ma_cm2": np.where(viable, jsc, np.nan), "ff": np.where(viable, model.ff, np.nan),
        "pce_pct": np.where(viable, pce, np.nan), "viable": viable, "viability": viability, **masks,
        "flags": join_flags(masks),
    }


# --------------------------------------------------------------------------- Monte-Carlo spread

@lru_cache(maxsize=1)
def _tables():
    """Jsc(η = 1) [mA cm⁻²], the detailed-balance PCE [%] and Voc [V] on a uniform E₀₋₀ grid (values, steps)."""
    n = int(round((_GRID_MAX_EV - _GRID_MIN_EV) / _GRID_STEP_EV)) + 1
    grid = _GRID_MIN_EV + _GRID_STEP_EV * np.arange(n)
    limit = sq_limit(grid)
    jsc = np.asarray(jsc_ma_cm2(grid, 1.0), dtype=float)
    sq, sq_voc = np.asarray(limit["pce_pct"], dtype=float), np.asarray(limit["voc_v"], dtype=float)
    for arr in (jsc, sq, sq_voc):
        arr.setflags(write=False)
    return jsc, np.diff(jsc), sq, np.diff(sq), sq_voc, np.diff(sq_voc)


def _block_samples(model: DyeCellModel, eo: np.ndarray, eg: np.ndarray, oxide: Material, mediator: Material,
                   dead: np.ndarray):
    """PCE samples [%] and the viable-sample mask of one block (rows: dyes, columns: samples).

    ``eo`` and ``eg`` hold the sampled E(S⁺/S) [V vs NHE] and E₀₋₀ [eV]; ``dead``
    marks dyes whose every sample is 0 (missing input or no anchor).  Jsc and the
    detailed-balance cap come from one uniform E₀₋₀ table (shared index); below
    its 0.30 eV the caps are those of the donor/acceptor sampler, exact below its
    tables' 0.25 eV (:func:`screen.sampling.voc_fast`, :func:`screen.sampling.sq_fast`),
    so a narrow sampled E₀₋₀ never gets the limits of 0.30 eV.  A
    sample is viable as in :func:`evaluate`: both thresholds met, sunlight
    absorbed (Jsc ≥ :data:`JSC_MIN_MA_CM2`) and a positive capped Voc.
    """
    jsc_t, jsc_d, sq_t, sq_d, voc_t, voc_d = _tables()
    thr_inj, thr_reg = model.min_drive_inj_ev - TOL_EV, model.reg_threshold_ev(mediator, oxide) - TOL_EV
    e_edge, e_med = oxide.potential_v_nhe, mediator.potential_v_nhe
    if oxide.type == "p":
        ok = (eo - e_edge >= thr_inj) & (e_med - (eo - eg) >= thr_reg)
        voc = e_edge - e_med - model.voc_loss_for(oxide)
    else:
        ok = (e_edge - (eo - eg) >= thr_inj) & (eo - e_med >= thr_reg)
        voc = e_med - e_edge - model.voc_loss_for(oxide)
    ok &= ~dead[:, None] & (voc > 0) & (eg > 0)
    x = (eg - _GRID_MIN_EV) * (1.0 / _GRID_STEP_EV)
    np.clip(x, 0.0, jsc_t.size - 1 - 1e-9, out=x)
    idx = x.astype(np.intp)
    x -= idx
    voc_lim, sq_lim = voc_t[idx] + x * voc_d[idx], sq_t[idx] + x * sq_d[idx]
    below = (eg > 0) & (eg < _GRID_MIN_EV)  # the limits fall to 0 with E₀₋₀ there: never the grid's first value
    if below.any():
        voc_lim[below], sq_lim[below] = voc_fast(eg[below]), sq_fast(eg[below])
    voc_s = np.minimum(voc_lim, max(voc, 0.0))  # Voc at most the detailed-balance Voc of E₀₋₀
    # Jsc: the grid's first value is exact below it (every photon of the spectrum, which starts at 0.31 eV)
    jsc_s = (jsc_t[idx] + x * jsc_d[idx]) * model.photon_to_current
    ok &= (jsc_s >= JSC_MIN_MA_CM2) & (eg < _GRID_MAX_EV) & (voc_s > 0)  # absorbs sunlight, capped Voc > 0
    pce = jsc_s * model.pce_factor_pct()
    pce *= voc_s
    np.minimum(pce, sq_lim, out=pce)
    pce *= ok
    return pce, ok


def sample_pce(model: DyeCellModel, e_ox_v_nhe, e00_ev, oxide: Material, mediator: Material, *,
               e_ox_sigma_v=0.0, e00_sigma_ev=0.0, anchored=None, n_samples: int = 2000, seed: int = 20240601,
               target_pct: float = 8.0) -> dict:
    """Monte-Carlo spread of the efficiency from the dyes' E(S⁺/S) and E₀₋₀ uncertainties.

    Every sample re-checks viability (injection and regeneration thresholds,
    absorbed sunlight, positive capped Voc) with the sampled levels, so a dye
    close to a threshold gets a lower probability of working (``p_viable``) and
    of beating the target.  ``pce_sigma_pct`` is the spread of the samples that
    stay viable — the spread of the estimate if the dye works — while the mean
    and ``p_above_target`` count a sample that is not viable as PCE = 0 (the
    same rule as the donor/acceptor ranking, :func:`screen.sampling.sample_pce`);
    each sample is capped at the detailed-balance limit of its E₀₋₀.  One table of standard normal deviates (fixed seed) is shared by
    every dye (common random numbers): a dye's result does not depend on the
    others, their order or the block size — as in :func:`screen.sampling.sample_pce`.  A dye without
    uncertainty (both σ = 0) gets the point estimate of :func:`evaluate` itself (mean, ``p_viable`` 0 or 1,
    σ 0 when viable), not its tabulated value.

    Parameters
    ----------
    model : DyeCellModel
    e_ox_v_nhe, e00_ev : array_like
        Mean values. [V vs NHE], [eV]
    oxide, mediator : Material
    e_ox_sigma_v, e00_sigma_ev : array_like
        One-σ uncertainties (NaN read as 0). [V], [eV]
    anchored : array_like of bool, optional
        Dyes without an anchor (with ``require_anchor``) have every sample 0.
    n_samples : int
        Samples per dye (≥ 2).
    seed : int
        Seed of :func:`numpy.random.default_rng`.
    target_pct : float
        Efficiency threshold of ``p_above_target``. [%]

    Returns
    -------
    dict of numpy.ndarray
        ``pce_mean_pct`` (over all samples, a sample that is not viable
        counting 0) [%], ``pce_sigma_pct`` (standard deviation, ddof = 1, of
        the viable samples only; NaN when fewer than two are viable: the
        spread is not known, and 0 would read as a certain estimate) [%],
        ``p_above_target`` (fraction of all samples above the target) and
        ``p_viable`` (fraction of samples that are viable); NaN where an input
        is missing.  The oxide and mediator potentials are taken as exact.

    Examples
    --------
    >>> from screen.dyecell.library import resolve_mediator, resolve_oxide
    >>> ox, med = resolve_oxide("tio2-anatase"), resolve_mediator("co-bpy3")
    >>> out = sample_pce(DyeCellModel(), [1.07, 0.78], [1.96, 1.96], ox, med, e_ox_sigma_v=0.1,
    ...                  e00_sigma_ev=0.1, target_pct=5.0)
    >>> out["p_viable"].round(2).tolist()
    [0.9, 0.6]
    >>> bool(out["p_above_target"][0] > out["p_above_target"][1])
    True
    >>> bool(out["pce_sigma_pct"][1] < 2 * out["pce_sigma_pct"][0])   # failed samples do not widen the spread
    True
    """
    n_samples = int(n_samples)
    if n_samples < 2:
        raise ValueError(f"sample_pce: n_samples = {n_samples}; need at least 2")
    e_ox = np.atleast_1d(np.asarray(e_ox_v_nhe, dtype=float)).ravel()
    e00 = np.atleast_1d(np.asarray(e00_ev, dtype=float)).ravel()
    e_ox, e00 = np.broadcast_arrays(e_ox, e00)
    n = e_ox.size
    s_ox = np.broadcast_to(np.nan_to_num(np.asarray(e_ox_sigma_v, dtype=float), nan=0.0), (n,))
    s_gap = np.broadcast_to(np.nan_to_num(np.asarray(e00_sigma_ev, dtype=float), nan=0.0), (n,))
    if np.any(s_ox < 0) or np.any(s_gap < 0) or not (np.all(np.isfinite(s_ox)) and np.all(np.isfinite(s_gap))):
        raise ValueError("sample_pce: σ must be finite and >= 0")
    anchored = np.ones(n, bool) if anchored is None else np.broadcast_to(np.asarray(anchored, bool), (n,))
    missing = ~(np.isfinite(e_ox) & np.isfinite(e00) & (e00 > 0))  # as evaluate: no E₀₋₀ > 0, no estimate
    z = np.random.default_rng(seed).standard_normal((2, n_samples))
    dead = missing | (~anchored if model.require_anchor else np.zeros(n, bool))
    out_mean, out_sigma = np.full(n, np.nan), np.full(n, np.nan)
    out_p, out_v = np.full(n, np.nan), np.full(n, np.nan)
    rows = max(1, _BLOCK_ELEMENTS // n_samples)
    fixed = ~missing & (s_ox == 0) & (s_gap == 0)
    todo = np.flatnonzero(~missing & ~fixed)  # a dye's samples depend on its own row only (common random numbers)
    for start in range(0, todo.size, rows):
        sel = todo[start:start + rows]
        eo = e_ox[sel, None] + s_ox[sel, None] * z[0]
        eg = e00[sel, None] + s_gap[sel, None] * z[1]
        pce, ok = _block_samples(model, eo, eg, oxide, mediator, dead[sel])
        count = np.count_nonzero(ok, axis=1)
        out_v[sel] = count / n_samples
        out_p[sel] = np.count_nonzero(pce > target_pct, axis=1) / n_samples
        out_mean[sel] = pce.mean(axis=1)
        centre = pce.sum(axis=1) / np.maximum(count, 1)                 # mean of the viable samples
        pce -= centre[:, None]
        pce *= ok
        s2 = np.einsum("ij,ij->i", pce, pce)
        out_sigma[sel] = np.where(count >= 2, np.sqrt(s2 / np.maximum(count - 1, 1)), np.nan)
    if fixed.any():  # no uncertainty: every sample is the point estimate, exact (the tables differ by ~1e-4 %)
        point = evaluate(model, e_ox[fixed], e00[fixed], oxide, mediator, anchored[fixed])
        works = np.asarray(point["viable"], bool)
        pce = np.where(works, point["pce_pct"], 0.0)
        out_mean[fixed], out_sigma[fixed] = pce, np.where(works, 0.0, np.nan)
        out_p[fixed], out_v[fixed] = (pce > target_pct).astype(float), works.astype(float)
    for arr in (out_mean, out_sigma, out_p, out_v):
        arr[missing] = np.nan
    return {"pce_mean_pct": out_mean, "pce_sigma_pct": out_sigma, "p_above_target": out_p, "p_viable": out_v}
