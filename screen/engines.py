"""Tight-binding engines behind one small interface.

Two backends compute the same GFN-xTB Hamiltonians:

* :class:`TbliteEngine` (default) — the maintained ``tblite`` library
  (GFN2-xTB, GFN1-xTB, IPEA1-xTB; ALPB implicit solvation by solvent name, a
  non-empirical generalized-Born continuum of given ε [5]_, MO coefficients and
  the AO overlap, SCF restart from a previous result).
* :class:`XtbEngine` — the older ``xtb-python`` bindings (GFN2-xTB,
  GFN1-xTB), an optional extra whose wheels stop at Python 3.11.

Both follow the same protocol as ASE's calculators, kept deliberately small:
construct with the method and SCF settings, then call :meth:`Engine.singlepoint`
with atomic numbers, positions in bohr, total charge and the number of
unpaired electrons. Energies come back in Hartree.

SCF convergence failures are handled by a documented fallback ladder
(:data:`SCF_LADDER`): the same Hamiltonian and electronic temperature with
progressively gentler Broyden mixing and more iterations. Every rung gives the
same converged energy (to the SCF threshold); only the path differs, so the
rung that succeeded is recorded but never changes a number. An unconverged
energy is never returned: exhausting the ladder raises :class:`ScfError`.

References
----------
.. [1] C. Bannwarth, S. Ehlert, S. Grimme, "GFN2-xTB — An accurate and broadly
   parametrized self-consistent tight-binding quantum chemical method with
   multipole electrostatics and density-dependent dispersion contributions",
   J. Chem. Theory Comput. 15 (2019) 1652. :doi:`10.1021/acs.jctc.8b01176`
.. [2] S. Grimme, C. Bannwarth, P. Shushkov, "A robust and accurate
   tight-binding quantum chemical method for structures, vibrational
   frequencies, and noncovalent interactions of large molecular systems
   parametrized for all spd-block elements (Z = 1-86)",
   J. Chem. Theory Comput. 13 (2017) 1989. :doi:`10.1021/acs.jctc.7b00118`
.. [3] V. Ásgeirsson, C. A. Bauer, S. Grimme, "Quantum chemical calculation of
   electron ionization mass spectra for general organic and inorganic
   molecules", Chem. Sci. 8 (2017) 4879. :doi:`10.1039/c7sc00601b`
.. [4] S. Ehlert, M. Stahn, S. Spicher, S. Grimme, "Robust and efficient
   implicit solvation model for fast semiempirical methods" (ALPB),
   J. Chem. Theory Comput. 17 (2021) 4250. :doi:`10.1021/acs.jctc.1c00471`
.. [5] A. W. Lange, J. M. Herbert, "Improving generalized Born models by
   exploiting connections to polarizable continuum models. I. An improved
   effective Coulomb operator" (the P16 kernel used for a continuum of given ε),
   J. Chem. Theory Comput. 8 (2012) 1999. :doi:`10.1021/ct300111m`
"""

from __future__ import annotations

import os
import time
from abc import ABC, abstractmethod
from dataclasses import dataclass, field, fields, replace

import numpy as np

from screen.constants import KB_HARTREE_K
from screen.errors import CalculationError
from screen.provenance import package_version

# One OpenMP thread per process unless the user says otherwise: the pipeline parallelises over
# shards, and OpenMP threads competing for busy cores slow xTB down by 10-30x. Must be set before
# the native libraries load, hence at import time.
os.environ.setdefault("OMP_NUM_THREADS", "1")

__all__ = [
    "ENGINES",
    "SCF_LADDER",
    "EngineError",
    "ScfError",
    "ScfSettings",
    "SinglePoint",
    "Engine",
    "TbliteEngine",
    "XtbEngine",
    "make_engine",
    "check_scf_settings",
]


class EngineError(CalculationError):
    """The engine could not be set up or a calculation failed outright."""


class ScfError(EngineError):
    """The SCF did not converge on any rung of the fallback ladder."""


@dataclass(frozen=True)
class ScfSettings:
    """SCF controls for one single point.

    Parameters
    ----------
    accuracy : float
        Numerical accuracy factor (1.0 is the library default; smaller is tighter).
    max_iter : int
        Maximum number of SCF cycles.
    mixer_damping : float
        Broyden mixer damping (tblite default 0.4).
    electronic_temperature_k : float
        Fermi smearing temperature [K] (xTB default 300 K).
    """

    accuracy: float = 1.0
    max_iter: int = 250
    mixer_damping: float = 0.4
    electronic_temperature_k: float = 300.0


#: Fallback ladder for SCF convergence: same Hamiltonian and temperature,
#: gentler mixing and more cycles on each rung. Rung 0 is the default.
SCF_LADDER: tuple[dict, ...] = (
    {},
    {"mixer_damping": 0.2, "max_iter": 500},
    {"mixer_damping": 0.05, "max_iter": 1500},
)


@dataclass(frozen=True)
class SinglePoint:
    """Result of one converged single-point calculation.

    Attributes
    ----------
    energy_eh : float
        Total energy [Eh].
    orbital_energies_eh : numpy.ndarray
        Orbital (eigen)energies [Eh], ascending.
    occupations : numpy.ndarray
        Orbital occupation numbers (0…2 in a spin-restricted treatment).
    charge : int
        Total charge [e].
    uhf : int
        Number of unpaired electrons.
    wall_s : float
        Wall time of the successful attempt plus failed attempts [s].
    rung : int
        Index into :data:`SCF_LADDER` of the rung that converged.
    """

    energy_eh: float
    orbital_energies_eh: np.ndarray
    occupations: np.ndarray
    charge: int
    uhf: int
    wall_s: float
    rung: int = 0
    n_electrons: int = field(default=0)
    #: MO coefficients (AOs × MOs), AO overlap matrix, the atom and the angular momentum of each AO
    #: (``coefficients``, ``overlap``, ``ao_atom``, ``ao_l``), when asked for (``orbitals=True``) and offered
    #: by the backend; else None
    orbitals: dict | None = field(default=None, repr=False, compare=False)
    #: backend result object a later single point can start from (``guess=``); None if not offered
    handle: object = field(default=None, repr=False, compare=False)

    def frontier_eh(self) -> tuple[float, float]:
        """HOMO and LUMO orbital energies [Eh] of a closed-shell result.

        The HOMO is orbital ``n_electrons // 2 - 1`` of the ascending list; this
        is robust against fractional occupations from Fermi smearing.
        """
        n_occ = self.n_electrons // 2
        eps = self.orbital_energies_eh
        if n_occ < 1 or n_occ >= eps.size:
            raise EngineError(f"no frontier orbitals for {self.n_electrons} electrons in {eps.size} orbitals")
        return float(eps[n_occ - 1]), float(eps[n_occ])


class Engine(ABC):
    """A GFN-xTB engine: method, SCF settings and a single-point call.

    Parameters
    ----------
    method : str
        ``"GFN2-xTB"`` (default), ``"GFN1-xTB"`` or ``"IPEA1-xTB"``
        (availability depends on the backend: see :attr:`methods`).
    scf : ScfSettings, optional
        SCF controls for rung 0 of the ladder.
    solvent : str or None
        Implicit solvent name for ALPB, or ``None`` for the isolated molecule.
    """

    #: short backend name used in protocol fingerprints
    name: str = ""
    #: package distribution that provides the backend
    package: str = ""
    #: methods this backend offers
    methods: tuple[str, ...] = ()

    def __init__(self, method: str = "GFN2-xTB", scf: ScfSettings | None = None, solvent: str | None = None):
        if method not in self.methods:
            raise EngineError(
                f"method {method!r} is not available with engine {self.name!r}; choose one of {', '.join(self.methods)}"
            )
        self.method = method
        self.scf = scf or ScfSettings()
        self.solvent = solvent

    @property
    def version(self) -> str:
        """Version string of the backing library."""
        return package_version(self.package)

    def describe(self) -> dict:
        """Everything about the engine that changes numbers, for provenance."""
        return {
            "engine": self.name,
            "engine_version": self.version,
            "method": self.method,
            "solvent": self.solvent,
            "accuracy": self.scf.accuracy,
            "electronic_temperature_k": self.scf.electronic_temperature_k,
        }

    #: whether the backend offers a dielectric continuum of given ε (``epsilon=``)
    offers_continuum: bool = False
    #: whether the backend returns MO coefficients and the AO overlap (``orbitals=True``)
    offers_orbitals: bool = False

    @abstractmethod
    def _run(self, numbers: np.ndarray, positions_bohr: np.ndarray, charge: int, uhf: int,
             scf: ScfSettings, *, epsilon: float | None = None, guess: object = None,
             orbitals: bool = False) -> dict:
        """One attempt, or raise ScfError.

        Returns a dict with ``energy`` [Eh], ``eps`` (orbital energies [Eh]),
        ``occ`` (occupations) and optionally ``orbitals`` and ``handle`` (see
        :class:`SinglePoint`).
        """

    def singlepoint(self, numbers, positions_bohr, *, charge: int = 0, uhf: int = 0,
                    ladder: tuple[dict, ...] = SCF_LADDER, epsilon: float | None = None,
                    guess: SinglePoint | None = None, orbitals: bool = False) -> SinglePoint:
        """Converged single point, walking the SCF fallback ladder.

        Parameters
        ----------
        numbers : array_like of int, shape (n,)
            Atomic numbers.
        positions_bohr : array_like of float, shape (n, 3)
            Cartesian positions [bohr].
        charge : int
            Total charge [e].
        uhf : int
            Number of unpaired electrons (0 for closed shell, 1 for a doublet ion).
        ladder : tuple of dict
            Overrides of :attr:`scf` for each rung, tried in order.
        epsilon : float, optional
            Embed the molecule in a dielectric continuum of this relative permittivity
            (backends with :attr:`offers_continuum`; replaces any named solvent).
        guess : SinglePoint, optional
            A converged result (e.g. the neutral) whose wavefunction starts the SCF, where the
            backend allows it; the converged energy does not depend on the start.
        orbitals : bool
            Also return MO coefficients and the AO overlap (:attr:`SinglePoint.orbitals`).

        Returns
        -------
        SinglePoint

        Raises
        ------
        ScfError
            No rung converged.
        EngineError
            Invalid input (for example an electron count incompatible with ``uhf``), or a backend result with
            a non-finite energy, orbital energy or occupation.
        """
        numbers, positions = _checked_geometry(numbers, positions_bohr)
        n_electrons = int(numbers.sum()) - int(charge)  # all-electron count; parity is what matters
        if (n_electrons - uhf) % 2:
            raise EngineError(f"charge {charge} with {uhf} unpaired electrons is impossible for this molecule")
        if epsilon is not None and not self.offers_continuum:
            raise EngineError(f"engine {self.name!r} offers no dielectric continuum of given epsilon; use 'tblite'")
        start = time.perf_counter()
        errors = []
        handle = guess.handle if guess is not None else None
        for rung, override in enumerate(ladder):
            settings = replace(self.scf, **override)
            try:
                out = self._run(numbers, positions, int(charge), int(uhf), settings, epsilon=epsilon,
                                guess=handle, orbitals=orbitals)
            except ScfError as exc:
                errors.append(f"rung {rung}: {exc}")
                continue
            if not (np.isfinite(out["energy"]) and np.all(np.isfinite(out["eps"]))
                    and np.all(np.isfinite(out["occ"]))):  # never pass a NaN on as a number
                raise EngineError(f"{self.name} returned a non-finite energy or orbital energy (charge {charge}, "
                                  f"{uhf} unpaired electrons): the calculation is broken")
            valence_electrons = int(round(float(np.sum(out["occ"]))))
            return SinglePoint(
                energy_eh=float(out["energy"]), orbital_energies_eh=np.asarray(out["eps"], dtype=float),
                occupations=np.asarray(out["occ"], dtype=float), charge=int(charge), uhf=int(uhf),
                wall_s=time.perf_counter() - start, rung=rung, n_electrons=valence_electrons,
                orbitals=out.get("orbitals"), handle=out.get("handle"),
            )
        raise ScfError("SCF did not converge (" + "; ".join(errors) + ")")


def _checked_geometry(numbers, positions_bohr) -> tuple[np.ndarray, np.ndarray]:
    """Atomic numbers and positions as the backends take them, refused with the reason when they do not fit.

    Before, three atomic numbers with two positions ended in "charge 0 with 0 unpaired electrons is impossible",
    and positions of shape (2,) in "tblite setup failed: Expected tripels".

    Raises
    ------
    EngineError
        No atoms, atomic numbers that are not whole numbers from 1 to 118, positions that are not one row of x, y, z
        per atom, or positions that are not finite.
    """
    try:
        z = np.asarray(numbers)
        pos = np.asarray(positions_bohr, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise EngineError(f"atomic numbers and positions must be arrays of numbers ({exc})") from None
    if z.ndim != 1 or z.size == 0:
        raise EngineError(f"atomic numbers must be a list of one number per atom, not shape {z.shape}")
    if not (np.issubdtype(z.dtype, np.integer) or (np.issubdtype(z.dtype, np.floating) and np.all(z == np.round(z)))) \
            or z.min() < 1 or z.max() > 118:
        raise EngineError(f"atomic numbers must be whole numbers from 1 to 118, not {z.tolist()[:8]}")
    if pos.shape != (z.size, 3):
        raise EngineError(f"positions have shape {pos.shape} for {z.size} atomic numbers; give one row of x, y, z "
                          f"[bohr] per atom, shape ({z.size}, 3)")
    if not np.all(np.isfinite(pos)):
        raise EngineError("positions hold a value that is not finite (NaN or infinity)")
    return np.ascontiguousarray(z, dtype=np.int32), np.ascontiguousarray(pos)


class TbliteEngine(Engine):
    """GFN-xTB through ``tblite`` (default engine).

    Examples
    --------
    >>> import numpy as np
    >>> eng = TbliteEngine("GFN2-xTB")
    >>> h2 = eng.singlepoint([1, 1], np.array([[0, 0, 0], [0, 0, 1.4]]))
    >>> round(h2.energy_eh, 3)
    -0.982
    """

    name = "tblite"
    package = "tblite"
    methods = ("GFN2-xTB", "GFN1-xTB", "IPEA1-xTB")

    def __init__(self, method: str = "GFN2-xTB", scf: ScfSettings | None = None, solvent: str | None = None):
        super().__init__(method, scf, solvent)
        try:
            from tblite import interface as _tb  # noqa: F401
        except ImportError as exc:  # pragma: no cover - tblite is a hard dependency
            raise EngineError("the tblite engine needs the 'tblite' package (pip install tblite)") from exc

    offers_continuum = True
    offers_orbitals = True

    def _run(self, numbers, positions, charge, uhf, scf, *, epsilon=None, guess=None, orbitals=False):
        from tblite.exceptions import TBLiteRuntimeError, TBLiteValueError
        from tblite.interface import Calculator

        try:
            calc = Calculator(self.method, numbers, positions, charge=float(charge), uhf=int(uhf))
            calc.set("verbosity", 0)
            calc.set("accuracy", float(scf.accuracy))
            calc.set("max-iter", int(scf.max_iter))
            calc.set("mixer-damping", float(scf.mixer_damping))
            calc.set("temperature", float(scf.electronic_temperature_k) * KB_HARTREE_K)
            if orbitals:
                calc.set("save-integrals", 1)
            if epsilon is not None:  # non-empirical GB with the P16 kernel: ε only, no fitted terms
                calc.add("gbe-solvation", float(epsilon), "p16")
            elif self.solvent:
                calc.add("alpb-solvation", self.solvent)
        except (TBLiteValueError, TBLiteRuntimeError) as exc:
            raise EngineError(f"tblite setup failed: {exc}") from exc
        try:
            res = calc.singlepoint(guess, copy=True) if guess is not None else calc.singlepoint()
        except TBLiteRuntimeError as exc:
            if "converge" in str(exc).lower():
                raise ScfError(str(exc)) from exc
            raise EngineError(f"tblite failed: {exc}") from exc
        out = {"energy": res.get("energy"), "eps": res.get("orbital-energies"),
               "occ": res.get("orbital-occupations"), "handle": res}
        if orbitals:  # coefficients come as AOs × MOs (CᵀSC = 1 checked in tests/test_engines.py)
            shell = np.asarray(calc.get("orbital-map"))
            out["orbitals"] = {"coefficients": np.asarray(res.get("orbital-coefficients")),
                               "overlap": np.asarray(res.get("overlap-matrix")),
                               "ao_atom": np.asarray(calc.get("shell-map"))[shell],
                               "ao_l": np.asarray(calc.get("angular-momenta"))[shell]}
        return out

    def ase_calculator(self):
        """An ASE calculator for geometry optimisation with the same method and settings."""
        from tblite.ase import TBLite

        kwargs = dict(method=self.method, accuracy=self.scf.accuracy, max_iterations=self.scf.max_iter,
                      mixer_damping=self.scf.mixer_damping,
                      electronic_temperature=self.scf.electronic_temperature_k, verbosity=0)
        if self.solvent:
            kwargs["solvation"] = ("alpb", self.solvent)
        return TBLite(**kwargs)


class XtbEngine(Engine):
    """GFN-xTB through ``xtb-python`` (optional second backend, Python ≤ 3.11).

    Implicit solvation, a dielectric continuum, the AO overlap and SCF restarts
    are not offered through this backend, nor is the mixer damping of :data:`SCF_LADDER`
    (its rungs only raise the iteration limit here).
    """

    name = "xtb"
    package = "xtb"
    methods = ("GFN2-xTB", "GFN1-xTB")

    def __init__(self, method: str = "GFN2-xTB", scf: ScfSettings | None = None, solvent: str | None = None):
        super().__init__(method, scf, solvent)
        if solvent:
            raise EngineError("engine 'xtb' does not support implicit solvation here; use engine 'tblite'")
        try:
            from xtb import interface as _xi  # noqa: F401
        except ImportError as exc:
            raise EngineError(
                "engine 'xtb' needs the optional xtb-python package: pip install 'dascreen[xtb]' (Python <= 3.11)"
            ) from exc

    def _run(self, numbers, positions, charge, uhf, scf, *, epsilon=None, guess=None, orbitals=False):
        # xtb-python returns MO coefficients but neither the AO overlap nor the AO→atom map, so
        # ``orbitals`` stays None; ``guess`` is not used (every SCF starts from the superposition guess)
        from xtb.interface import Calculator, Param, XTBException
        from xtb.libxtb import VERBOSITY_MUTED

        param = {"GFN2-xTB": Param.GFN2xTB, "GFN1-xTB": Param.GFN1xTB}[self.method]
        try:
            calc = Calculator(param, numbers, positions, charge=float(charge), uhf=int(uhf))
            calc.set_verbosity(VERBOSITY_MUTED)
            calc.set_accuracy(float(scf.accuracy))
            calc.set_max_iterations(int(scf.max_iter))
            calc.set_electronic_temperature(float(scf.electronic_temperature_k))
            res = calc.singlepoint()
        except XTBException as exc:
            if "converge" in str(exc).lower() or "scf" in str(exc).lower():
                raise ScfError(str(exc)) from exc
            raise EngineError(f"xtb failed: {exc}") from exc
        return {"energy": res.get_energy(), "eps": res.get_orbital_eigenvalues(),
                "occ": res.get_orbital_occupations()}

    def ase_calculator(self):
        """An ASE calculator for geometry optimisation with the same method."""
        from xtb.ase.calculator import XTB

        return XTB(method=self.method, accuracy=self.scf.accuracy, max_iterations=self.scf.max_iter,
                   electronic_temperature=self.scf.electronic_temperature_k)


#: registry of backends by name
ENGINES: dict[str, type[Engine]] = {"tblite": TbliteEngine, "xtb": XtbEngine}


#: what each SCF setting of :func:`make_engine` must be: (test, the allowed values in words)
_SCF_CHECKS = {
    "accuracy": (lambda v: 0.0 < v < float("inf"), "a number above 0 (1 is the library default, smaller is tighter)"),
    "max_iter": (lambda v: float(v).is_integer() and v >= 1, "a whole number of SCF cycles of 1 or more"),
    "mixer_damping": (lambda v: 0.0 < v <= 1.0, "a number above 0 and at most 1"),
    "electronic_temperature_k": (lambda v: 0.0 <= v < float("inf"), "a temperature of 0 K or more [K]"),
}

#: the keywords a caller may expect of make_engine that are set elsewhere, and where
_THREADS = ("the OpenMP threads of the engine are set by the environment variable OMP_NUM_THREADS before the "
            "engine's library is loaded (`import screen.engines` sets it to 1 unless it is set already; see "
            "docs/python.md)")
_SET_ELSEWHERE = {
    "threads": _THREADS,
    "omp_threads": _THREADS,
    "n_threads": _THREADS,
    "epsilon": "a dielectric continuum is an argument of each single point: engine.singlepoint(..., epsilon=3.5)",
    "charge": "the charge is an argument of each single point: engine.singlepoint(..., charge=1, uhf=1)",
    "uhf": "unpaired electrons are an argument of each single point: engine.singlepoint(..., charge=1, uhf=1)",
}


def check_scf_settings(scf: dict) -> None:
    """Refuse SCF settings a single point cannot use, naming the setting, the value and what is allowed.

    Before, ``accuracy=-1`` ran until the fallback ladder said "SCF did not converge" (or did not return),
    ``electronic_temperature_k=-300`` and ``max_iter=0`` were taken, and an unknown keyword was a ``TypeError``.

    Raises
    ------
    EngineError
        An unknown keyword (with the known ones), a value that is not a number, or one outside its range.

    Examples
    --------
    >>> check_scf_settings({"accuracy": 0.1, "max_iter": 500})
    >>> try:
    ...     check_scf_settings({"accuracy": -1})
    ... except EngineError as exc:
    ...     print(exc)
    accuracy=-1 is not allowed; give a number above 0 (1 is the library default, smaller is tighter)
    """
    known = [f.name for f in fields(ScfSettings)]
    for key, value in scf.items():
        if key not in _SCF_CHECKS:
            why = _SET_ELSEWHERE.get(key)
            raise EngineError(f"make_engine has no setting {key!r}" + (f": {why}" if why else "") +
                              f"; its settings are name, method, solvent and {', '.join(known)}")
        test, allowed = _SCF_CHECKS[key]
        number = isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool)
        if not number or not np.isfinite(value) or not test(value):
            raise EngineError(f"{key}={value!r} is not allowed; give {allowed}")


def make_engine(name: str = "tblite", method: str = "GFN2-xTB", *, solvent: str | None = None,
                **scf) -> Engine:
    """Build an engine by backend name.

    Every argument is checked before the engine is built (:func:`check_scf_settings`). The engine has no
    thread setting: the OpenMP threads are set by ``OMP_NUM_THREADS``, which ``import screen.engines`` sets to 1
    unless it is set already (``docs/python.md``).

    Parameters
    ----------
    name : {"tblite", "xtb"}
        Backend.
    method : str
        Hamiltonian, e.g. ``"GFN2-xTB"``.
    solvent : str, optional
        ALPB solvent name (tblite only).
    **scf
        Fields of :class:`ScfSettings`: ``accuracy`` (> 0), ``max_iter`` (≥ 1), ``mixer_damping`` (0 … 1],
        ``electronic_temperature_k`` (≥ 0) [K].

    Raises
    ------
    EngineError
        Unknown backend, method or keyword, an SCF setting out of its range, a solvent that is not a name, or the
        backend's package is missing.

    Examples
    --------
    >>> make_engine(accuracy=0.5).scf.accuracy
    0.5
    >>> try:
    ...     make_engine(threads=4)
    ... except EngineError as exc:
    ...     print(str(exc).split(":")[0])
    make_engine has no setting 'threads'
    """
    if not isinstance(name, str) or name not in ENGINES:
        raise EngineError(f"unknown engine {name!r}; choose one of {', '.join(ENGINES)}")
    if not isinstance(method, str):
        raise EngineError(f"method {method!r} is not a method name; choose one of {', '.join(ENGINES[name].methods)}")
    if solvent is not None and (not isinstance(solvent, str) or not solvent.strip()):
        raise EngineError(f"solvent={solvent!r} is not a solvent name; give one such as 'chloroform', or None for "
                          "the isolated molecule")
    check_scf_settings(scf)
    return ENGINES[name](method, ScfSettings(**scf), solvent)
