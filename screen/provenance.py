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

__all__ = ["provenance", "package_version", "code_revision",
           "library_versions", "sha256_file", "change_notice", "CALIBRATION_FILES",
           "calibration_record"]

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


@lru_cache(maxsize=1)
def code_revision() -> str:
    """The git commit of dascreen's own source tree (``+changes`` when it has uncommitted edits), or ``""``.

    The package version stays the same over many commits that change numbers (a reproducibility audit), so
    the sidecars record the commit as well. Empty when the code does not sit in a git checkout (an installed
    wheel) or git is not available.

    Examples
    --------
    >>> rev = code_revision()
    >>> rev == "" or len(rev.split("+")[0]) == 40
    True
    """
    import subprocess

    root = Path(__file__).resolve().parent.parent
    if not (root / ".git").exists():
        return ""
    try:
        git = ["git", "--no-optional-locks", "-C", str(root)]  # never takes the index lock of the user's git
        head = subprocess.run([*git, "rev-parse", "HEAD"], capture_output=True, text=True, timeout=10,
                              check=True).stdout.strip()
        changed = subprocess.run([*git, "status", "--porcelain", "--", "screen"], capture_output=True, text=True,
                                 timeout=10, check=True).stdout.strip()
    except (OSError, subprocess.SubprocessError):
        return ""
    return f"{head}+changes" if changed else head


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
        "code_revision": code_revision(),
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


#: the model files of a calibration folder, in the order :func:`calibration_record` hashes them (the models of
#: :data:`screen.calibrate.MODEL_NAMES`, named here: this module imports nothing above the ground floor)
CALIBRATION_FILES = ("ip.json", "ea.json", "gap_opt.json", "homo_film.json", "lumo_film.json", "gap_opt_film.json")


def calibration_record(folder: str | Path) -> dict:
    """Which calibration a levels file was scored with, for its sidecar (``calibration_models``).

    Two runs scored with different calibrations had identical ``levels.csv.meta.json`` files (only the models'
    path; an overnight operator's report). The record tells them apart:

    ``folder``
        the calibration folder (resolved);
    ``protocol_id``, ``engine_version``, ``reference_sha256``
        from the models' fingerprint: the protocol, engine version and reference data the models were fitted on;
    ``models_sha256``
        SHA-256 of the model files :data:`CALIBRATION_FILES` read one after the other in that order
        (``cat ip.json ea.json gap_opt.json homo_film.json lumo_film.json gap_opt_film.json | sha256sum`` in the
        folder); ``null`` when one of them is missing;
    ``statistics_sha256``
        SHA-256 of ``statistics.csv`` (``null`` without one).

    Parameters
    ----------
    folder : path-like
        A ``models/<protocol-id>`` folder.

    Examples
    --------
    >>> import json, tempfile
    >>> folder = Path(tempfile.mkdtemp())
    >>> fp = {"fingerprint": {"protocol_id": "p-1", "reference_sha256": "ab"}}
    >>> for name in CALIBRATION_FILES:
    ...     _ = (folder / name).write_text(json.dumps(fp))
    >>> record = calibration_record(folder)
    >>> record["protocol_id"], record["reference_sha256"], len(record["models_sha256"]), record["statistics_sha256"]
    ('p-1', 'ab', 64, None)
    >>> (folder / "ip.json").unlink()
    >>> calibration_record(folder)["models_sha256"] is None
    True
    """
    import json

    folder = Path(folder).resolve()
    digest = hashlib.sha256()
    complete = True
    for name in CALIBRATION_FILES:
        try:
            digest.update((folder / name).read_bytes())
        except OSError:
            complete = False
    try:
        fp = json.loads((folder / "ip.json").read_text(encoding="utf-8")).get("fingerprint") or {}
    except (OSError, ValueError, AttributeError):
        fp = {}
    fp = fp if isinstance(fp, dict) else {}
    stats = folder / "statistics.csv"
    return {"folder": str(folder), "protocol_id": fp.get("protocol_id"), "engine_version": fp.get("engine_version"),
            "reference_sha256": fp.get("reference_sha256"), "models_sha256": digest.hexdigest() if complete else None,
            "statistics_sha256": sha256_file(stats) if stats.is_file() else None}


def change_notice(old_path, old_sha, path: str, sha: str, unknown: str = "a file not recorded") -> tuple[str, bool]:
    """How the input of an earlier result differs from the one about to replace it.

    Parameters
    ----------
    old_path, old_sha : str or None
        Resolved path and SHA-256 of the earlier input, as recorded.
    path, sha : str
        Resolved path and SHA-256 of the input now.
    unknown : str
        Words for an earlier input whose path was not recorded.

    Returns
    -------
    tuple of (str, bool)
        The notice ("" when path and content are the same) and whether the content differs.

    Examples
    --------
    >>> change_notice("/r/L.csv", "ab" * 32, "/r/L.csv", "ab" * 32)
    ('', False)
    >>> change_notice("/r/L.csv", "ab" * 32, "/r/L.csv", "cd" * 32)
    ('/r/L.csv changed since it was ranked (sha256 abababab… → cdcdcdcd…)', True)
    >>> change_notice("/r/old.csv", "ab" * 32, "/r/L.csv", "ab" * 32)
    ('it ranked /r/old.csv (same content)', False)
    """
    if old_sha == sha:
        return ("" if old_path == path else f"it ranked {old_path} (same content)"), False
    if old_path == path:
        was = f"sha256 {old_sha[:8]}\u2026 \u2192 {sha[:8]}\u2026" if old_sha else f"now sha256 {sha[:8]}\u2026"
        return f"{path} changed since it was ranked ({was})", True
    return f"it ranked {old_path or unknown}, whose content differs from {path}", True
