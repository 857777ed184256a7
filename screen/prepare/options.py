"""Settings of the prepare stage (:class:`PrepareOptions`).

The defaults come from the ``prepare`` section of the configuration schema
(:func:`screen.schema.section_defaults`), the single source of every option's default.

Examples
--------
>>> opts = PrepareOptions()
>>> opts.min_shards == section_defaults("prepare")["min_shards"]
True
>>> PrepareOptions(shard_size=0)
Traceback (most recent call last):
...
screen.errors.ConfigError: PrepareOptions.shard_size must be an integer >= 1, got 0
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, fields
from typing import Any

from rdkit import Chem

from screen.schema import section_defaults
from screen.errors import ConfigError

__all__ = ["PrepareOptions", "KNOWN_ELEMENTS"]

_PERIODIC_TABLE = Chem.GetPeriodicTable()
#: Element symbols RDKit knows (atomic numbers 1-118).
KNOWN_ELEMENTS: frozenset[str] = frozenset(
    _PERIODIC_TABLE.GetElementSymbol(z) for z in range(1, 119)
)

_DEFAULTS: dict[str, Any] = section_defaults("prepare")


@dataclass(frozen=True)
class PrepareOptions:
    """Settings of the prepare stage; the fields are the keys of the ``prepare`` config section.

    Parameters
    ----------
    max_heavy_atoms : int
        Largest accepted number of heavy (non-hydrogen) atoms; larger molecules are rejected
        with reason ``too_many_atoms``.
    allowed_elements : tuple of str
        Element symbols accepted (case as in the periodic table, e.g. ``"Cl"``).  ``"H"`` may
        be left out only for molecules without hydrogens.
    allow_charged : bool
        Accept molecules with a net charge (otherwise reason ``charged``).
    allow_open_shell : bool
        Accept radicals and odd-electron species (otherwise reason ``open_shell``).
    shard_size : int
        Largest number of unique structures per shard.
    min_shards : int
        Make at least this many shards when there are at least this many unique structures
        (useful to spread a small batch over several workers).
    keep_isotopes : bool
        Keep isotope labels in the canonical SMILES (and so in the key).  By default they are
        removed and a note ``isotopes_removed`` is added.
    allow_charge_separation : bool
        Accept net-neutral structures with a charge on a saturated carbon (otherwise reason
        ``charge_separated_sp3``; see :mod:`screen.prepare.charges`).

    Raises
    ------
    screen.errors.ConfigError
        If a numeric setting is out of range, an element symbol is unknown or no element is
        allowed; the message names the field and the allowed values.  (``ConfigError`` is a ``ValueError``.)
    """

    max_heavy_atoms: int = _DEFAULTS["max_heavy_atoms"]
    allowed_elements: tuple[str, ...] = tuple(_DEFAULTS["allowed_elements"])
    allow_charged: bool = _DEFAULTS["allow_charged"]
    allow_open_shell: bool = _DEFAULTS["allow_open_shell"]
    shard_size: int = _DEFAULTS["shard_size"]
    min_shards: int = _DEFAULTS["min_shards"]
    keep_isotopes: bool = _DEFAULTS["keep_isotopes"]
    allow_charge_separation: bool = _DEFAULTS.get("allow_charge_separation", False)

    def __post_init__(self) -> None:
        if isinstance(self.allowed_elements, str):
            raise ConfigError(
                "PrepareOptions.allowed_elements must be a sequence of element symbols, "
                f"not the string {self.allowed_elements!r}"
            )
        object.__setattr__(self, "allowed_elements", tuple(self.allowed_elements))
        if not self.allowed_elements:
            raise ConfigError(
                "PrepareOptions.allowed_elements is empty: every candidate would be rejected; list the "
                "element symbols a candidate may contain, e.g. ['H', 'C', 'N', 'O', 'S']"
            )
        unknown = [s for s in self.allowed_elements if s not in KNOWN_ELEMENTS]
        if unknown:
            raise ConfigError(
                f"PrepareOptions.allowed_elements: unknown element symbol(s) {unknown}; "
                "use periodic-table symbols such as 'C', 'Cl', 'Se'"
            )
        for field, low in (("max_heavy_atoms", 1), ("shard_size", 1), ("min_shards", 1)):
            value = getattr(self, field)
            if isinstance(value, bool) or not isinstance(value, int) or value < low:
                raise ConfigError(
                    f"PrepareOptions.{field} must be an integer >= {low}, got {value!r}"
                )

    @classmethod
    def from_mapping(cls, mapping: Mapping[str, Any]) -> PrepareOptions:
        """Build the options from a ``prepare`` config section (unknown keys are ignored).

        Parameters
        ----------
        mapping : Mapping
            E.g. ``resolve(config)["prepare"]``; missing keys take their defaults.

        Returns
        -------
        PrepareOptions

        Examples
        --------
        >>> PrepareOptions.from_mapping({"shard_size": 5, "allowed_elements": ["C", "H"]})
        ... # doctest: +ELLIPSIS
        PrepareOptions(max_heavy_atoms=200, allowed_elements=('C', 'H'), ..., shard_size=5, ...)
        """
        names = {f.name for f in fields(cls)}
        return cls(**{k: v for k, v in mapping.items() if k in names})
