"""Unit conversions used at the package boundary, and the one convention of the film scale.

The conversions come from :mod:`scipy.constants` (CODATA); nothing is typed in by hand. The one value typed in,
:data:`FC_FILM_EV`, is a convention of the field, not a constant of nature.
"""

from scipy import constants as _c

#: Hartree energy in electronvolts [eV / Eh].
HARTREE_EV: float = _c.physical_constants["Hartree energy in eV"][0]
#: Bohr radius in ångström [Å / a0].
BOHR_ANGSTROM: float = _c.physical_constants["Bohr radius"][0] * 1e10
#: Boltzmann constant in Hartree per kelvin [Eh / K].
KB_HARTREE_K: float = _c.physical_constants["Boltzmann constant in eV/K"][0] / HARTREE_EV
#: Hartree per bohr in eV per ångström, for gradients [eV Å⁻¹ / (Eh a0⁻¹)].
HARTREE_BOHR_EV_ANGSTROM: float = HARTREE_EV / BOHR_ANGSTROM
#: Vacuum-scale energy of the ferrocene/ferrocenium couple on dascreen's ``film`` scale: CV potentials vs Fc+/Fc
#: become levels as E = -(E_vs_Fc + 4.8) eV (the convention of Pommerehne et al., Adv. Mater. 7 (1995) 551, from
#: memory; docs/contracts.md section 6). One home for the calibration, the device levels and the dye cell [eV].
FC_FILM_EV: float = -4.8
