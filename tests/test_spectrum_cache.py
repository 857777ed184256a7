"""The cached AM1.5G table (screen.spectrum): pvlib's numbers bit for bit, pvlib not imported on a hit,
fallback to pvlib when the file is missing or unusable; and the modules a fresh `dascreen rank` imports."""

from __future__ import annotations

import json
import os
import subprocess
import sys

import numpy as np
import pytest

from screen import spectrum
from screen.spectrum import reference_spectrum, spectrum_cache_path

_FIELDS = ("wavelength_nm", "irradiance_w_m2_nm", "photon_flux_m2_s_nm", "cumulative_photon_flux_m2_s")


@pytest.fixture()
def cache(tmp_path, monkeypatch):
    """A cache folder of the test's own; the process's spectrum is loaded afresh before and after."""
    monkeypatch.setenv("DASCREEN_CACHE", str(tmp_path / "cache"))
    reference_spectrum.cache_clear()
    yield tmp_path / "cache"
    reference_spectrum.cache_clear()


def _block_pvlib(monkeypatch):
    """Make any import of pvlib fail (a None entry in sys.modules stops the import)."""
    for name in ("pvlib", "pvlib.spectrum"):
        monkeypatch.setitem(sys.modules, name, None)


def _same(a, b) -> bool:
    return all(getattr(a, f).tobytes() == getattr(b, f).tobytes() for f in _FIELDS) and \
        a.incident_power_w_m2 == b.incident_power_w_m2


def test_cache_hit_gives_the_pvlib_numbers_without_importing_pvlib(cache, monkeypatch):
    lam, irr = spectrum._table_from_pvlib()
    first = reference_spectrum()  # miss: read by pvlib, then written
    path = spectrum_cache_path()
    assert path.parent == cache / "spectrum" and path.is_file()
    assert first.wavelength_nm.tobytes() == lam.tobytes() and first.irradiance_w_m2_nm.tobytes() == irr.tobytes()
    reference_spectrum.cache_clear()
    _block_pvlib(monkeypatch)
    second = reference_spectrum()  # hit: pvlib cannot be imported here
    assert second is not first and _same(first, second)
    assert not any(getattr(second, f).flags.writeable for f in _FIELDS)
    # ASTM G173-03 quotes 1000.4 W m-2 for the hemispherical 37° tilt spectrum (as in test_device.py)
    assert round(second.incident_power_w_m2, 1) == 1000.4


#: (2, n) float64 tables of the right layout whose numbers are no spectrum: one point, a grid that does not
#: increase, a missing value
_BAD_TABLES = [np.array([[300.0], [1.0]]), np.array([[300.0, 300.0, 310.0], [1.0, 1.0, 1.0]]),
               np.array([[300.0, 310.0, 320.0], [1.0, np.nan, 1.0]])]


@pytest.mark.parametrize("content", [b"", b"not a numpy file", None, *_BAD_TABLES])
def test_unusable_cache_file_falls_back_to_pvlib_and_is_rewritten(cache, content):
    path = spectrum_cache_path()
    path.parent.mkdir(parents=True)
    if content is None or isinstance(content, np.ndarray):  # a valid file of the wrong shape, or no spectrum
        with open(path, "wb") as fh:
            np.save(fh, np.zeros((3, 4)) if content is None else content)
    else:
        path.write_bytes(content)
    spec = reference_spectrum()
    reference_spectrum.cache_clear()
    lam, irr = spectrum._cached_table(path)  # rewritten with pvlib's table
    assert lam.tobytes() == spec.wavelength_nm.tobytes() and irr.tobytes() == spec.irradiance_w_m2_nm.tobytes()
    assert irr.tobytes() == spectrum._table_from_pvlib()[1].tobytes()


def test_empty_dascreen_cache_turns_the_cache_off(cache, monkeypatch):
    monkeypatch.setenv("DASCREEN_CACHE", "")
    assert spectrum_cache_path() is None
    assert round(reference_spectrum().incident_power_w_m2, 1) == 1000.4
    assert not cache.exists()


def test_a_cache_that_cannot_be_written_is_left_out(cache, monkeypatch):
    blocker = cache.parent / "a-file"
    blocker.write_text("not a folder")
    monkeypatch.setenv("DASCREEN_CACHE", str(blocker))
    assert round(reference_spectrum().incident_power_w_m2, 1) == 1000.4


def test_cache_file_is_one_per_pvlib_version(cache):
    assert spectrum_cache_path("0.13.1") == spectrum_cache_path("0.13.1")
    assert spectrum_cache_path("0.13.1") != spectrum_cache_path("0.14.0")
    assert spectrum_cache_path("absent") is None


def test_a_rerank_imports_neither_pvlib_nor_the_calibration(tmp_path):
    """Start-up cost of `dascreen rank` (a module list, not a timing): with the spectrum cached, a library
    partner and no --set, the process imports no pvlib, no calibration modules and no --set checking."""
    levels = tmp_path / "lv.csv"
    levels.write_text("id,smiles,homo_ev,lumo_ev,gap_opt_ev,scale,role\n"
                      "KF-D01,c1ccc(-c2cccs2)s1,-5.55,-3.60,1.95,film,donor\n", encoding="utf-8")
    code = ("import sys, json; from screen.cli import main; "
            f"rc = main(['rank', '--levels', {str(levels)!r}, '--out', {str(tmp_path / 'out')!r}, "
            "'--partner', 'c60']); print(json.dumps([rc, sorted(sys.modules)]))")
    env = dict(os.environ, DASCREEN_CACHE=str(tmp_path / "cache"))
    for _ in range(2):  # the first run fills the cache
        run = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True)
    rc, modules = json.loads(run.stdout.strip().splitlines()[-1])
    assert rc == 0 and (tmp_path / "out" / "rankings").is_dir()
    assert [m for m in modules if m.split(".")[0] == "pvlib" or m.startswith("screen.calibrat")] == []
    assert "matplotlib.figure" in modules  # the report's figures are drawn (the test can fail the other way)
