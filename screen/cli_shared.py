"""Shared pieces of the command line: exit codes, the process's one Config, the run summary.

Every sub-command (``screen.cli`` and ``screen.dyecell.cli``) builds its configuration and prints its
summary through these functions, so the two command modules never import each other.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from screen.config import Config, data_path, merge
from screen.errors import ConfigError

__all__ = ["EXIT_OK", "EXIT_ERROR", "EXIT_STRICT", "data_path", "_load", "_print_summary", "_parse_set", "_at_least_one", "_percent", "not_regular_levels"]

EXIT_OK, EXIT_ERROR, EXIT_STRICT = 0, 1, 3


def _parse_set(items: list[str]) -> dict:
    """``section.key=value`` pairs (values parsed as YAML), each checked against the schema (none: ``{}``)."""
    if not items:
        return {}  # nothing to check: the schema file is not parsed (~50 ms of every command)
    from screen.preflight import check_sets

    return check_sets(items)


def _drop_none(extra: dict) -> dict:
    out = {}
    for key, value in extra.items():
        if isinstance(value, dict):
            value = _drop_none(value)
        if value is not None:
            out[key] = value
    return out


#: the command-line options that set a config field (named in a clash with ``--set``)
_OPTION_OF = {"rank.target_pce_pct": "--target-pce", "dyecell.target_pce_pct": "--target-pce", "rank.role": "--role",
              "rank.sort_by": "--sort-by", "dyecell.oxide": "--oxide", "dyecell.mediator": "--mediator",
              "partner": "--partner", "out": "--out", "strict": "--strict"}


def _refuse_clashes(sets: dict, given: dict, prefix: str = "") -> None:
    """Refuse a ``--set`` field that a command-line option of the same command sets to another value.

    Before, ``--target-pce 8 --set rank.target_pce_pct=12`` silently used 8.

    Examples
    --------
    >>> _refuse_clashes({"rank": {"target_pce_pct": 8}}, {"rank": {"target_pce_pct": 8.0}})
    >>> _refuse_clashes({"rank": {"target_pce_pct": 12}}, {"rank": {"target_pce_pct": 8.0}})
    Traceback (most recent call last):
    ...
    screen.errors.ConfigError: --target-pce 8.0 and --set rank.target_pce_pct=12 give rank.target_pce_pct two values; give one of them
    """
    for key, value in given.items():
        if key not in sets:
            continue
        path = f"{prefix}{key}"
        if isinstance(value, dict) and isinstance(sets[key], dict):
            _refuse_clashes(sets[key], value, path + ".")
        elif sets[key] != value:
            option = _OPTION_OF.get(path, f"the command's own option for {path}")
            raise ConfigError(f"{option} {value} and --set {path}={sets[key]} give {path} two values; give one "
                              "of them")


def _load(args, extra: dict) -> Config:
    """The process's one :class:`Config`: config file, then ``--set``, then ``extra`` (None values skipped).

    The data folders become absolute paths (the workflow runs in the output folder).
    """
    overrides = _parse_set(getattr(args, "set", []))
    given = _drop_none(extra)
    _refuse_clashes(overrides, given)
    merge(overrides, given)
    return Config.load(getattr(args, "config", None), overrides).with_paths(data_path)


def _print_summary(levels_csv: Path) -> dict:
    import pandas as pd

    from screen.levels import summarise

    levels = pd.read_csv(levels_csv, dtype=str, keep_default_na=False)
    counts = summarise(levels)
    print(f"dascreen: {counts['rows']} rows: {counts['ok']} ok, {counts['rejected']} rejected, "
          f"{counts['failed']} failed -> {levels_csv}")
    bad = levels[levels["status"] != "ok"]
    for _, row in bad.head(20).iterrows():
        ident = row["id"].replace("\n", "\\n")[:60]
        reason = row["error"]
        if len(reason) > 160:  # cut at a word, and say where the whole reason is
            reason = reason[:150].rsplit(" ", 1)[0] + " … (whole reason in levels.csv)"
        print(f"  {row['status']:8s} {ident}: {reason}")
    if len(bad) > 20:
        print(f"  ... and {len(bad) - 20} more (see levels.csv)")
    return counts


def _at_least_one(text: str) -> int:
    """argparse type of ``--cores`` and ``--top``: a whole number >= 1."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number; give 1 or more") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"{value} is not allowed; give 1 or more")
    return value


def _days(text: str) -> float:
    """argparse type of ``store prune --older-than``: a finite age of at least 0 days.

    Examples
    --------
    >>> _days("30")
    30.0
    """
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number; give an age in days, e.g. 30") from None
    if not 0.0 <= value < float("inf"):  # NaN fails too; a negative age would select every row
        raise argparse.ArgumentTypeError(f"{text} is not allowed; give an age of 0 days or more, e.g. 30")
    return value


def _percent(text: str) -> float:
    """argparse type of ``--target-pce``: a finite efficiency from 0 to 100 %."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number; give an efficiency in %, e.g. 10") from None
    if not 0.0 <= value <= 100.0:  # NaN fails too
        raise argparse.ArgumentTypeError(f"{text} is not allowed; give an efficiency from 0 to 100 (in %), e.g. 10")
    return value


def cut_cell(value, width: int) -> str:
    """``value`` as text of at most ``width`` characters; a cut one ends with "…".

    >>> cut_cell("same_computed_structure;class_voc_unranked", 40)
    'same_computed_structure;class_voc_unran…'
    >>> cut_cell("chain_fit_poor", 40)
    'chain_fit_poor'
    """
    text = str(value)
    return text if len(text) <= width else text[:width - 1] + "…"


def fixed_decimals(value, decimals: int) -> str:
    """A number with fixed decimals ("-" when missing; no "-0.00").

    >>> fixed_decimals(-3.0014, 2), fixed_decimals(1.0004, 3), fixed_decimals(13.0, 1), fixed_decimals(-0.001, 2)
    ('-3.00', '1.000', '13.0', '0.00')
    """
    try:
        number = float(value)
    except (TypeError, ValueError):
        return "-"
    if number != number:
        return "-"
    text = f"{number:.{decimals}f}"
    return text[1:] if text.startswith("-") and not text.strip("-0.") else text


def not_regular_levels(levels, option: str = "--levels FILE") -> str:
    """The refusal of a levels file that exists but is no regular file (a FIFO, ``<(cat f.csv)``, a device), said
    alike by ``rank`` and ``dyecell`` (``dyecell`` called a pipe missing, a maintainer's review).

    Examples
    --------
    >>> not_regular_levels("/dev/fd/63")  # doctest: +ELLIPSIS
    "levels file '/dev/fd/63' is not a regular file (a pipe or device): save it to a file first and give that ..."
    """
    return (f"levels file {str(levels)!r} is not a regular file (a pipe or device): save it to a file first and give "
            f"that with {option} (it is read more than once: its SHA-256 is recorded and checked)")
