"""Unit conversions used at the package boundary.

All values come from :mod:`scipy.constants` (CODATA); nothing is typed in by hand.
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
