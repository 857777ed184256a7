"""Options of the dye-cell mode: the ``dyecell`` config section.

The defaults come from the schema (``screen/workflow/schemas/config.schema.yaml``,
section ``dyecell``) through :func:`screen.schema.section_defaults`, the one
source of option defaults.  :data:`FALLBACK` holds the same values for a schema
without the section (and documents where each comes from).

Examples
--------
>>> o = RankOptions.from_mapping({"target_pce_pct": 6})
>>> o.target_pce_pct, o.sort_by
(6.0, 'pce_pct')
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

from screen.errors import ConfigError

__all__ = ["FALLBACK", "option_defaults", "RankOptions"]

#: defaults of the ``dyecell`` section (mirrors the schema; used only when the schema lacks the section)
FALLBACK = {
    "oxide": "tio2-anatase",
    "mediator": "co-bpy3",
    "photon_to_current": 0.65,   # common practice: the Scharber EQE, applied to absorbed-photon-to-current
    "ff": 0.70,                  # common practice for dye cells
    "voc_loss_v": 0.20,          # common practice: quasi-Fermi level below the band edge at open circuit
    "min_drive_inj_ev": 0.20,    # common practice (Hagfeldt et al., Chem. Rev. 110 (2010) 6595)
    "min_drive_reg_ev": 0.20,    # common practice for one-electron outer-sphere mediators
    "require_anchor": True,
    "target_pce_pct": 8.0,
    "n_samples": 2000,
    "seed": 20240601,
    "shortlist_size": 10,
    "sort_by": "pce_pct",
}


def option_defaults() -> dict:
    """Defaults of the ``dyecell`` section: the schema's when it has the section, else :data:`FALLBACK`."""
    from screen.schema import section_defaults

    try:
        found = section_defaults("dyecell")
    except KeyError:
        found = {}
    return {**FALLBACK, **found}


_D = option_defaults()


@dataclass(frozen=True)
class RankOptions:
    """Ranking settings of the dye-cell mode (sampling, target, shortlist, sort key)."""

    target_pce_pct: float = _D["target_pce_pct"]
    n_samples: int = _D["n_samples"]
    seed: int = _D["seed"]
    shortlist_size: int = _D["shortlist_size"]
    sort_by: str = _D["sort_by"]

    def __post_init__(self):
        object.__setattr__(self, "target_pce_pct", float(self.target_pce_pct))
        if self.sort_by not in ("pce_pct", "p_above_target"):
            raise ConfigError(f"dyecell.sort_by = {self.sort_by!r}; allowed: pce_pct, p_above_target")
        if int(self.n_samples) < 2:
            raise ConfigError(f"dyecell.n_samples = {self.n_samples!r}; allowed: an integer >= 2")
        if int(self.shortlist_size) < 1:
            raise ConfigError(f"dyecell.shortlist_size = {self.shortlist_size!r}; allowed: an integer >= 1")

    @classmethod
    def from_mapping(cls, section: dict | None) -> RankOptions:
        """From a ``dyecell`` config section (other keys ignored)."""
        names = {f.name for f in dataclasses.fields(cls)}
        return cls(**{k: v for k, v in (section or {}).items() if k in names})
