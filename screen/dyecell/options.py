"""Options of the dye-cell mode: the ``dyecell`` config section.

The defaults come from the schema (``screen/workflow/schemas/config.schema.yaml``,
section ``dyecell``, with the source or "common practice" of each value) through
:func:`screen.schema.section_defaults`, the one source of option defaults.

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

__all__ = ["option_defaults", "RankOptions"]

def option_defaults() -> dict:
    """Defaults of the ``dyecell`` config section, from the schema (the one source of option defaults).

    Examples
    --------
    >>> d = option_defaults()
    >>> d["oxide"], d["min_drive_inj_ev"]
    ('tio2-anatase', 0.2)
    """
    from screen.schema import section_defaults

    return section_defaults("dyecell")


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
