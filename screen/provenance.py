"""Provenance for sidecar files: the protocol, its id and the library versions.

Every output of dascreen has a sidecar (``*.meta.json``) built from
:func:`provenance`, so a number can always be traced to the protocol and the
library versions that produced it (``docs/contracts.md``, reproducibility).
"""

from __future__ import annotations

import hashlib
import platform
from functools import lru_cache
from pathlib import Path

__all__ = ["provenance", "package_version", "library_versions", "sha256_file"]

#: libraries whose versions are recorded
LIBRARIES = ("tblite", "xtb", "rdkit", "numpy", "pandas", "scikit-learn", "ase", "pvlib")


@lru_cache(maxsize=None)
def package_version(name: str) -> str:
    """Installed version of a distribution, or ``"absent"``.

    Examples
    --------
    >>> package_version("surely-not-installed-package-xyz")
    'absent'
    """
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version(name)
    except PackageNotFoundError:
        return "absent"


def library_versions() -> dict[str, str]:
    """Python and the scientific libraries' versions."""
    return {"python": platform.python_version(), **{p: package_version(p) for p in LIBRARIES}}


def provenance(config) -> dict:
    """Protocol, protocol id and library versions for sidecar files.

    Parameters
    ----------
    config : screen.config.Config
        The run configuration (its ``protocol`` and ``protocol_id``; this
        module imports nothing above the ground floor).
    """
    from screen import __version__

    return {
        "dascreen": __version__,
        "protocol_id": config.protocol_id,
        "protocol": config.protocol,
        "versions": library_versions(),
    }


def sha256_file(path: str | Path, chunk: int = 1 << 20) -> str:
    """Hex SHA-256 of a file's bytes.

    Examples
    --------
    >>> import tempfile, os
    >>> with tempfile.NamedTemporaryFile(delete=False) as fh:
    ...     _ = fh.write(b"abc")
    >>> sha256_file(fh.name)[:16]
    'ba7816bf8f01cfea'
    >>> os.unlink(fh.name)
    """
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(chunk), b""):
            digest.update(block)
    return digest.hexdigest()
