"""The error hierarchy of dascreen.

Every error dascreen raises on purpose derives from :class:`DascreenError`, so a
caller (the CLI above all) chooses what to do by class, never by parsing text:

====================  =========================================  =========
class                 meaning                                    CLI exit
====================  =========================================  =========
``ConfigError``       a bad option, config file or schema value  2
``FolderInUse``       another run holds the run folder's lock    2
``InputError``        a bad input file, levels file or partner   2
``ScaleMismatchError`` levels on different energy scales         2
``CalculationError``  a quantum-chemistry or fitting step failed 1
====================  =========================================  =========

The subclasses keep :class:`ValueError` / :class:`RuntimeError` as a second base
so that code written against the built-in classes keeps working.

Examples
--------
>>> issubclass(ConfigError, InputError), issubclass(ConfigError, DascreenError)
(False, True)
>>> exit_code(ConfigError("x")), exit_code(CalculationError("y"))
(2, 1)
"""

from __future__ import annotations

__all__ = ["DascreenError", "ConfigError", "FolderInUse", "InputError", "ScaleMismatchError", "CalculationError",
           "exit_code", "EXIT_USAGE", "EXIT_FAILURE"]

#: exit code of a refused file or option (nothing was computed)
EXIT_USAGE = 2
#: exit code of a run that failed while computing
EXIT_FAILURE = 1


class DascreenError(Exception):
    """Root of every error dascreen raises on purpose."""

    exit_code = EXIT_FAILURE


class ConfigError(DascreenError, ValueError):
    """A configuration problem: names the file (or ``--set``), the field and what is allowed."""

    exit_code = EXIT_USAGE


class FolderInUse(ConfigError):
    """Another ``dascreen`` run holds the run folder's lock: not a configuration problem, but refused like one
    (exit code 2, nothing computed); the command line says ``dascreen: folder in use: ...``."""

    console_kind = "folder in use"

    @classmethod
    def of(cls, out) -> FolderInUse:
        """The refusal for run folder ``out``."""
        return cls(f"another run (dascreen or snakemake) is using {out}; wait for it to finish (`dascreen status --out {out}`) "
                   "or choose another --out")


class InputError(DascreenError, ValueError):
    """A bad input: candidates file, levels file or partner (names the file, row and column)."""

    exit_code = EXIT_USAGE


class ScaleMismatchError(InputError):
    """Levels and partner are on different energy scales (see ``docs/contracts.md``, energy scales)."""


class CalculationError(DascreenError, RuntimeError):
    """A calculation (engine, structure, calibration fit) could not give a trustworthy number."""

    exit_code = EXIT_FAILURE


def exit_code(error: BaseException) -> int:
    """Exit code the CLI uses for ``error`` (1 for anything that is not a :class:`DascreenError`)."""
    return getattr(error, "exit_code", EXIT_FAILURE) if isinstance(error, DascreenError) else EXIT_FAILURE
