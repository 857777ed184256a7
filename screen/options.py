"""Typed options of the compute stages, with defaults taken from the schema.

Each dataclass mirrors one section of
``screen/workflow/schemas/config.schema.yaml``; its field defaults are read
from :func:`screen.schema.section_defaults`, so the schema stays the single
source of every default (``tests/test_config.py`` checks that they agree), and
its values are held to the same section (:func:`screen.schema.check_options`:
types, allowed values, bounds, NaN and infinity), so Python is refused what a
config file and ``--set`` are refused.
:class:`screen.config.Config` hands them out as ``cfg.structures``,
``cfg.electronic`` and ``cfg.execution``.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

from screen.errors import ConfigError
from screen.schema import check_options, section_defaults

__all__ = ["StructureOptions", "ElectronicOptions", "ExecutionOptions", "EARLIER_ROUTE_VALUES", "IDLE_WHEN",
           "options_from_mapping", "route_structures"]

#: the rules of ``structures.rigid_embedding`` (:func:`screen.cage.rigid_embedding`)
RIGID_RULES = ("fused_system", "cycle_rank")

_S = section_defaults("structures")
_E = section_defaults("electronic")
_X = section_defaults("execution")


def options_from_mapping(cls, mapping, section: str):
    """Build the options dataclass ``cls`` from a config mapping, rejecting unknown keys.

    Parameters
    ----------
    cls : type
        An options dataclass.
    mapping : mapping or None
        The config section (missing keys take the defaults).
    section : str
        Section name, for the error message.

    Raises
    ------
    ConfigError
        A key that is not a field of ``cls`` (the message lists the allowed ones).

    Examples
    --------
    >>> options_from_mapping(ExecutionOptions, {"isolate": False}, "execution").isolate
    False
    >>> options_from_mapping(ExecutionOptions, {"isolated": False}, "execution")
    Traceback (most recent call last):
    ...
    screen.errors.ConfigError: unknown execution option(s) ['isolated']; allowed: ['isolate', 'molecule_timeout_s']
    """
    mapping = dict(mapping or {})
    known = sorted(f.name for f in fields(cls))
    unknown = set(mapping) - set(known)
    if unknown:
        raise ConfigError(f"unknown {section} option(s) {sorted(unknown)}; allowed: {known}")
    return cls(**mapping)


#: option fields added after the results store existed, per stage, and the values at which they leave the
#: route exactly as before they existed; at these values they are left out of the store's stage protocol
#: ids, so adding them did not make earlier results look foreign (their defaults have since changed: see
#: the schema)
EARLIER_ROUTE_VALUES = {"structures": {"size_caps_min_atoms": 0, "rank_warm_start": False, "rank_scf_accuracy": None,
                                       "cage_geometry": "ff", "planar_variants": False,
                                       "rigid_embedding": "cycle_rank"},
                        "electronic": {}}
#: the options among them added since the protocol id (:attr:`screen.config.Config.protocol`) too leaves out the
#: earlier value (so a protocol that sets it keeps its id: the shipped xTB-geometry calibration), and that a
#: molecule both of whose values route alike is stored under (:func:`screen.structures.idle_options`); the older
#: ones stay in the protocol id as they always were, so no installed calibration changes its id
EARLIER_PROTOCOL_VALUES = {"structures": {"rigid_embedding": "cycle_rank"}}

#: structures options that are idle on some routes: option → test of the ``structures`` section that is true when the
#: option has no effect there; :func:`route_structures` leaves it out of the protocol then, so that adding an opt-in
#: step (off by default) or one a route skips does not change the protocol and store ids of the shipped routes
def _no_planar_variants(structures: dict) -> bool:
    return structures.get("geometry") == "xtb" or not structures.get("planar_variants")


IDLE_WHEN = {"planar_variants": _no_planar_variants, "planar_tolerances_deg": _no_planar_variants}


def route_structures(structures: dict) -> dict:
    """The ``structures`` options without those that have no effect on this route (:data:`IDLE_WHEN`).

    Examples
    --------
    >>> route_structures({"geometry": "xtb", "planar_variants": True, "seed": 1})
    {'geometry': 'xtb', 'seed': 1}
    >>> route_structures({"geometry": "ff", "planar_variants": False})
    {'geometry': 'ff'}
    >>> route_structures({"geometry": "ff", "planar_variants": True})
    {'geometry': 'ff', 'planar_variants': True}
    """
    return {k: v for k, v in structures.items() if not (k in IDLE_WHEN and IDLE_WHEN[k](structures))}


@dataclass(frozen=True)
class StructureOptions:
    """Settings of the structures stage (all of them change the numbers).

    Parameters
    ----------
    seed : int
        Random seed for ETKDG.
    conformers_base, conformers_per_rotor, conformers_max : int
        Conformer count = min(max, base + per_rotor × rotatable bonds).
    prune_rms_a : float
        RMSD threshold [Å] below which ETKDG drops a conformer as a duplicate.
    forcefield : {"mmff", "uff"}
        Preferred force field; MMFF falls back to UFF when parameters are missing.
    ff_max_iters : int
        Force-field optimisation iterations.
    geometry : {"ff", "xtb"}
        ``ff``: keep the force-field geometry of the xTB-lowest conformer;
        ``xtb``: optimise it further with the engine.
    cage_geometry : {"xtb", "ff"}
        Route of a closed carbon cage (:func:`screen.cage.closed_cage`): ``xtb`` optimises it with
        the engine whatever ``geometry`` says (MMFF94 gives a fullerene no bond alternation);
        ``ff``: as every other molecule (the route before the option existed).
    rigid_embedding : {"fused_system", "cycle_rank"}
        Which molecules are embedded once from random coordinates instead of by a conformer
        search (:func:`screen.cage.rigid_embedding`): ``fused_system``, a fused ring system of
        20 or more rings; ``cycle_rank``, any molecule of 20 or more rings (the rule before the
        option existed, which also caught long oligomers).
    xtb_fmax_ev_a : float
        Force convergence for the xTB optimisation [eV Å⁻¹].
    xtb_max_steps : int
        Optimiser step limit.
    truncate_side_chains : bool
        Shorten pendant saturated alkyl groups of ``truncate_min_carbons`` or more carbons to
        their first branch point, every branch cut to methyl
        (:func:`screen.structures.truncate_side_chains`); shorter groups stay as written.
    truncate_min_carbons : int
        Smallest group (carbon count) that is shortened.
    ranking_method : str
        xTB method for ranking conformers (GFN2-xTB).
    rank_max_conformers : int
        At most this many conformers, the lowest by force-field energy, get an xTB single point.
    ff_window_kcal_mol : float
        ... and only those within this force-field energy window of the lowest [kcal/mol]; the
        others are dropped before any xTB call.
    conformer_atom_budget : int
        Size cap of the conformer count: at most ``conformer_atom_budget / n_atoms`` conformers
        (at least two) are embedded (:func:`screen.structures.conformer_count`).
    rank_atom_budget : int
        Size cap of the xTB ranking: at most ``rank_atom_budget / n_atoms`` conformers (at least
        one; one means no ranking single point) (:func:`screen.structures.ranked_count`).
    size_caps_min_atoms : int
        The two size caps act only on molecules of at least this many atoms (hydrogens
        included); smaller molecules embed and rank as many conformers as without caps. Default
        150 (polymer oligomers); 0 applies them to every molecule (the route before the default
        changed).
    rank_warm_start : bool
        Start each conformer's ranking SCF from the previous conformer's converged result (same
        atoms, another geometry); the converged energies do not depend on it (≤ 1e-6 Eh).
        Default true; false: every ranking SCF from scratch.
    rank_scf_accuracy : float or None
        Rank with a looser SCF (this tblite accuracy factor, at most 30) first; every conformer
        within :data:`screen.structures.RECHECK_WINDOW_EH` of the lowest loose energy is then
        converged at the engine's own accuracy from its loose result, and the lowest of those wins,
        so the choice is the one of a tight ranking. Default 10; None: tight only.
    planar_variants : bool
        Force-field route only: besides the conformer chosen by xTB energy, rank copies of it whose
        conjugated single bonds are held near planar by a restrained MMFF94 optimisation
        (:func:`screen.structures.planar_variants`); MMFF94 twists aryl–vinyl and heteroaryl–aryl
        bonds by 30–70° where GFN2-xTB optimisations keep most of them within 1–20°. Default false
        (opt-in: recomputed on the reference set it lowers every film LOO error but not the device
        errors, ``benchmarks/planar_variants.py``). No effect with ``geometry="xtb"`` (the xTB
        optimisation sets the torsions itself).
    planar_tolerances_deg : tuple of float
        Half-widths of the flat-bottom torsion restraints of the planar variants [degrees]; one copy
        per width and bond set (default 5° and 25°: GFN2-xTB prefers the end groups of fused-ring
        acceptors 15–35° out of plane, most other bonds within 5°).

    ``size_caps_min_atoms``, ``rank_warm_start`` and ``rank_scf_accuracy`` save xTB time without changing the
    chosen conformer (``benchmarks/pruning_levels.py``:
    the no-pruning choice on all 58 flexible reference molecules measured); 0, False and None give the
    route shipped before they became the defaults.

    Examples
    --------
    >>> StructureOptions().geometry, StructureOptions(geometry="xtb").geometry
    ('ff', 'xtb')
    """

    seed: int = _S["seed"]
    conformers_base: int = _S["conformers_base"]
    conformers_per_rotor: int = _S["conformers_per_rotor"]
    conformers_max: int = _S["conformers_max"]
    prune_rms_a: float = _S["prune_rms_a"]
    forcefield: str = _S["forcefield"]
    ff_max_iters: int = _S["ff_max_iters"]
    geometry: str = _S["geometry"]
    cage_geometry: str = _S["cage_geometry"]
    rigid_embedding: str = _S["rigid_embedding"]
    xtb_fmax_ev_a: float = _S["xtb_fmax_ev_a"]
    xtb_max_steps: int = _S["xtb_max_steps"]
    truncate_side_chains: bool = _S["truncate_side_chains"]
    truncate_min_carbons: int = _S["truncate_min_carbons"]
    ranking_method: str = _S["ranking_method"]
    rank_max_conformers: int = _S["rank_max_conformers"]
    ff_window_kcal_mol: float = _S["ff_window_kcal_mol"]
    conformer_atom_budget: int = _S["conformer_atom_budget"]
    rank_atom_budget: int = _S["rank_atom_budget"]
    size_caps_min_atoms: int = _S["size_caps_min_atoms"]
    rank_warm_start: bool = _S["rank_warm_start"]
    rank_scf_accuracy: float | None = _S["rank_scf_accuracy"]
    planar_variants: bool = _S["planar_variants"]
    planar_tolerances_deg: tuple[float, ...] = tuple(_S["planar_tolerances_deg"])

    def __post_init__(self):
        # the schema's section: geometry, cage_geometry, rigid_embedding (RIGID_RULES), forcefield, the widths of
        # planar_tolerances_deg in (0, 45] degrees, rank_scf_accuracy in [1, 30] or null, every count and bound
        check_options(self, "structures")
        object.__setattr__(self, "planar_tolerances_deg", tuple(float(t) for t in self.planar_tolerances_deg))

    @classmethod
    def from_mapping(cls, mapping: dict | None) -> StructureOptions:
        """Build from the ``structures`` config section, rejecting unknown keys."""
        return options_from_mapping(cls, mapping, "structures")


@dataclass(frozen=True)
class ElectronicOptions:
    """Settings of the electronic stage.

    Parameters
    ----------
    engine : {"tblite", "xtb"}
        Backend. ``"xtb"`` (xtb-python) offers neither a dielectric continuum nor the orbital
        overlap, so it needs ``film_epsilon=None``, ``lone_pair_homo="aufbau"`` and no ``solvent``
        (refused otherwise, :class:`screen.errors.ConfigError`).
    method : {"GFN2-xTB", "GFN1-xTB", "IPEA1-xTB"}
        Hamiltonian.
    solvent : str or None
        ALPB solvent for all three states (``None``: isolated molecule).
    accuracy : float
        SCF accuracy factor (default 10: energies converged to ≈ 1e-5 Eh, ΔSCF levels within
        0.001 eV of accuracy 1, about a fifth less SCF work).
    max_iter : int
        SCF iteration limit on the first rung of the fallback ladder.
    electronic_temperature_k : float
        Fermi smearing temperature [K].
    threads : int
        OpenMP threads per job (set by the stage runner before the engine loads).
    film_epsilon : float or None
        Relative permittivity of the dielectric continuum for the film-phase ΔSCF IP/EA
        (non-empirical generalized Born, tblite only); 3.5 is common practice for organic
        semiconductors. ``None`` switches the film single points off (columns NaN).
    lone_pair_homo : {"pi", "aufbau"}
        What to do when the neutral's HOMO is a nitrogen σ lone pair (:mod:`screen.lonepair`):
        ``"pi"`` takes the levels for the highest π-type orbital, ``"aufbau"`` keeps the HOMO.

    Examples
    --------
    >>> ElectronicOptions().method
    'GFN2-xTB'
    """

    engine: str = _E["engine"]
    method: str = _E["method"]
    solvent: str | None = _E["solvent"]
    accuracy: float = _E["accuracy"]
    max_iter: int = _E["max_iter"]
    electronic_temperature_k: float = _E["electronic_temperature_k"]
    threads: int = _E["threads"]
    film_epsilon: float | None = _E["film_epsilon"]
    lone_pair_homo: str = _E["lone_pair_homo"]

    def __post_init__(self):
        check_options(self, "electronic")  # engine, method, accuracy > 0, threads >= 1, film_epsilon > 1 ...
        if self.engine != "xtb":
            return
        # xtb-python offers no dielectric continuum, no implicit solvent here and no AO overlap (so no lone-pair
        # test): with the defaults every film IP/EA came back NaN on rows marked ok and pyridine's IP was 1.3 eV
        # off (an engine audit); refuse the combination before any work instead
        missing = []
        if self.film_epsilon is not None:
            missing.append("electronic.film_epsilon=null (no dielectric continuum on this engine; the film "
                           "models lose their main feature)")
        if self.lone_pair_homo != "aufbau":
            missing.append("electronic.lone_pair_homo=aufbau (no orbital overlap on this engine, so nitrogen lone "
                           "pairs cannot be told from π orbitals)")
        if self.solvent:
            missing.append("electronic.solvent=null (no implicit solvation on this engine)")
        if missing:
            raise ConfigError("electronic.engine=xtb (xtb-python) cannot do what these settings ask; set "
                              + "; ".join(missing) + " -- or keep the default engine tblite, which does all of it")

    def make_engine(self):
        """The engine these options describe (:func:`screen.engines.make_engine`).

        The engine module is imported here, not at the top, so that reading a
        configuration never loads numpy before a job has set its thread count.
        """
        from screen.engines import make_engine

        return make_engine(self.engine, self.method, solvent=self.solvent, accuracy=self.accuracy,
                           max_iter=self.max_iter, electronic_temperature_k=self.electronic_temperature_k)

    @classmethod
    def from_mapping(cls, mapping: dict | None) -> ElectronicOptions:
        """Build from the ``electronic`` config section, rejecting unknown keys."""
        return options_from_mapping(cls, mapping, "electronic")


@dataclass(frozen=True)
class ExecutionOptions:
    """How molecules are run (changes no number).

    Parameters
    ----------
    isolate : bool
        Each molecule in a child process, so a native crash costs one molecule.
    molecule_timeout_s : float or None
        Per-molecule time limit per stage [s] (isolated runs only).

    Examples
    --------
    >>> ExecutionOptions().isolate
    True
    """

    isolate: bool = _X["isolate"]
    molecule_timeout_s: float | None = _X["molecule_timeout_s"]

    def __post_init__(self):
        check_options(self, "execution")
