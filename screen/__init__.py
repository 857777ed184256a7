"""dascreen: screening of organic-photovoltaic donor and acceptor candidates.

The package is organised as one module per pipeline stage (see ``DEVELOPERS.md``):
:mod:`screen.prepare`, :mod:`screen.structures`, :mod:`screen.electronic`,
:mod:`screen.calibrate`, :mod:`screen.levels`, :mod:`screen.rank`, plus the
engine layer :mod:`screen.engines` and the device model :mod:`screen.device`.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("dascreen")
except PackageNotFoundError:  # running from a source tree without installation
    __version__ = "0.0.0+unknown"

__all__ = ["__version__"]
