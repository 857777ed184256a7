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
    """Ranking settings of the dye-cell mode (sampling, target, shortlist, sort key).

    Every field is held to the schema's ``dyecell`` section, as a config file and ``--set`` are
    (:func:`screen.schema.check_options`: 0 ≤ ``target_pce_pct`` ≤ 100, 10 ≤ ``n_samples`` ≤ 1e6, an integer
    ``seed``, NaN and infinity refused; an API audit: ``n_samples=3`` and ``target_pce_pct=-5`` were ranked).

    Raises
    ------
    ConfigError
        Naming the ``dyecell.`` field and the allowed values.

    Examples
    --------
    >>> RankOptions(n_samples=3)
    Traceback (most recent call last):
    ...
    screen.errors.ConfigError: RankOptions: field dyecell.n_samples: 3 is less than the minimum of 10
    """

    target_pce_pct: float = _D["target_pce_pct"]
    n_samples: int = _D["n_samples"]
    seed: int = _D["seed"]
    shortlist_size: int = _D["shortlist_size"]
    sort_by: str = _D["sort_by"]

    def __post_init__(self):
        from screen.schema import check_options

        check_options(self, "dyecell")  # target 6 → 6.0, as the schema's default is written

    @classmethod
    def from_mapping(cls, section: dict | None) -> RankOptions:
        """From a ``dyecell`` config section (the model's keys ignored: :class:`screen.dyecell.model.DyeCellModel`
        takes them; :func:`screen.dyecell.stage.run_dyecell` refuses a key the section does not have)."""
        names = {f.name for f in dataclasses.fields(cls)}
        return cls(**{k: v for k, v in (section or {}).items() if k in names})
