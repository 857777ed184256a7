"""Calibration: raw xTB values → levels comparable with measurements.

Raw GFN2-xTB ΔSCF ionisation energies are several eV too large, electron
affinities likewise shifted, and orbital gaps are not optical gaps. Each property
is mapped by a linear model fitted on published measurements of reference
molecules computed with *exactly* the candidates' protocol (same conformer route,
engine, method; polymers as oligomers extrapolated to the chain limit):

* ``ip``/``ea``: gas-phase IP/EA ← vertical ΔSCF IP/EA (optionally + the orbital
  energy); the feature set is chosen by leave-one-out (LOO) MAE. The reference values are mostly adiabatic
  (``kind`` in ``ip_gas.csv``/``ea_gas.csv``), so the calibrated values are too; each molecule's relaxation
  energy (about 0.05–0.3 eV, from memory) is left in the scatter;
* ``gap_opt``/``gap_opt_film``: one joint optical-gap model for molecules and
  polymers, gas/solution and film (:mod:`screen.calibration.optical`): orbital gap
  plus a singlet–triplet descriptor (HOMO→LUMO exchange K), a film red shift δ and an
  absorption-maximum offset; features chosen by leave-one-family-out MAE;
* ``homo_film``/``lumo_film``: film levels (:mod:`screen.calibration.film`) from the
  ΔSCF IP/EA in a dielectric continuum (ε = 3.5; an equilibrium solvation model, whereas a vertical
  ionisation sees mainly the electronic response, ε∞ ≈ n² ≈ 3: the Born factor 1 − 1/ε is 0.71 instead of 0.67,
  about 0.1 eV of a 1.4 eV polarisation energy, which the linear calibration's slope absorbs) with one linear
  calibration on top, or the gas model plus a constant, whichever cross-validates better; the
  feature sets offered include a polymer indicator (a real polymer film ionises
  harder than its ideal, fully conjugated chain limit), kept only where it wins
  the cross-validation (today: the film HOMO).

Every model is validated by LOO and by a grouped hold-out that leaves out one
material family at a time (:mod:`screen.calibration.validation`); both are stored
in the model files and in ``statistics.csv``. σ of a prediction is the model's
prediction interval (it grows with the distance from the reference data), for
a polymer the spread of its chain-limit extrapolation, and the molecule's conformer
spread (:mod:`screen.conformer_spread`), both propagated through the model's
coefficients. Electrochemical values are brought to one ferrocene
convention (Fc at −4.8 eV) first. A reference row with a non-empty
``exclude_reason`` stays in its file but is not fitted.

Every model file records the fingerprint (protocol, engine version, polymer
settings, reference-data hash); :func:`load_models` refuses a model whose
fingerprint does not match the run's.

References
----------
.. [1] C. Bannwarth, S. Ehlert, S. Grimme, J. Chem. Theory Comput. 15 (2019)
   1652. :doi:`10.1021/acs.jctc.8b01176`
.. [2] V. Ásgeirsson, C. A. Bauer, S. Grimme, Chem. Sci. 8 (2017) 4879.
   :doi:`10.1039/c7sc00601b`
.. [3] N. Sato, K. Seki, H. Inokuchi, J. Chem. Soc., Faraday Trans. 2, 77 (1981) 1621.
   :doi:`10.1039/F29817701621`
.. [4] C. M. Cardona, W. Li, A. E. Kaifer, D. Stockdale, G. C. Bazan, Adv. Mater. 23
   (2011) 2367. :doi:`10.1002/adma.201004554`
.. [5] S. Grimme, J. Chem. Phys. 138 (2013) 244104. :doi:`10.1063/1.4811331`
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from screen.calibration.domain import domain_std, elements, fit_domain, nearest_similarity, reference_similarity
from screen.calibration.film import fit_film_level
from screen.calibration.linear import (MIN_GAIN_EV, CalibrationError, FilmShift, LinearLevelModel, feature_matrix,
                                       raw_weights)
from screen.calibration.optical import fit_gap
from screen.calibration.reference import (FC_REFERENCE_EV, family, joined, read_reference, reference_files,
                                          reference_hash, reference_inputs)
from screen.calibration.validation import select
from screen.config import Config, data_path
from screen.conformer_spread import conformer_sigma
from screen.errors import ConfigError
from screen.io import write_csv, write_json
from screen.knownbias import ct_polymer, known_bias
from screen.provenance import provenance
from screen.viability import WRITTEN_DECIMALS

__all__ = [
    "PROPERTIES",
    "FC_REFERENCE_EV",
    "MIN_GAIN_EV",
    "MODEL_NAMES",
    "CalibrationError",
    "CalibrationMismatchError",
    "LinearLevelModel",
    "FilmShift",
    "read_reference",
    "reference_inputs",
    "reference_files",
    "reference_hash",
    "fingerprint",
    "fingerprint_fields",
    "fingerprint_differences",
    "installed_fingerprint",
    "REFERENCE_RECORD",
    "fitted_reference",
    "reference_ways",
    "ReferenceWays",
    "fit_property",
    "fit_all",
    "raw_table",
    "save_models",
    "save_calibration",
    "load_models",
    "find_models",
    "apply_models",
    "stats_table",
]

#: reference set and candidate feature sets of the gas-phase IP and EA models (simplest first)
PROPERTIES: dict[str, dict] = {
    "ip": {"target": "ip_ev", "features": [["xtb_ip_ev"], ["xtb_ip_ev", "xtb_homo_ev"]]},
    "ea": {"target": "ea_ev", "features": [["xtb_ea_ev"], ["xtb_ea_ev", "xtb_lumo_ev"]]},
}


class CalibrationMismatchError(ConfigError, CalibrationError):
    """Models that belong to another protocol or reference set: a configuration problem (exit code 2).

    Refit with ``dascreen calibrate`` or point ``calibration.models`` at the matching folder.

    Examples
    --------
    >>> from screen.errors import exit_code
    >>> err = CalibrationMismatchError("x")
    >>> isinstance(err, CalibrationError), exit_code(err)
    (True, 2)
    """


def fingerprint(config, reference_dir: str | Path) -> dict:
    """What a model depends on: protocol, engine version (major.minor), polymer settings, reference data.

    Parameters
    ----------
    config : Config or mapping
        The run configuration (its protocol and polymer sections matter).
    reference_dir : path-like
        Folder of the reference sets; a relative path is found as the ``dascreen`` command finds it
        (:func:`screen.config.data_path`: under the working directory, else beside the package).

    Raises
    ------
    ConfigError
        ``reference_dir`` does not exist or is not a folder (its hash would be that of no data, and every
        calibration would look fitted on other reference data).
    """
    cfg = Config.of(config)
    reference = _reference_folder(reference_dir)
    prov = provenance(cfg)
    ver = prov["versions"].get(cfg.electronic.engine, "absent")
    return {"protocol_id": cfg.protocol_id, "protocol": cfg.protocol, "polymer": dict(cfg["polymer"]),
            "engine_version": ".".join(ver.split(".")[:2]), "reference_sha256": reference_hash(reference)}


#: the file beside a calibration's models that names the reference folder it was fitted on (written from now on;
#: not one of the model files, so no number or hash of a calibration depends on it; the shipped calibration, fitted
#: on the shipped reference data, has none)
REFERENCE_RECORD = "reference_folder.json"


def _shipped_reference() -> Path:
    from screen.config import PACKAGE_ROOT

    return PACKAGE_ROOT / "models" / "reference"


def installed_fingerprint(model_dir: str | Path) -> dict:
    """The fingerprint a calibration folder records (in its ``ip.json``; :func:`fingerprint`), ``{}`` when the file
    is missing, unreadable or records none.

    Examples
    --------
    >>> from screen.config import Config
    >>> installed_fingerprint(find_models(Config.of({})))["protocol_id"] == Config.of({}).protocol_id
    True
    >>> installed_fingerprint("no/such/folder")
    {}
    """
    from screen.io import read_json

    try:
        found = read_json(Path(model_dir) / "ip.json").get("fingerprint") or {}
    except (OSError, ValueError, AttributeError):
        return {}
    return found if isinstance(found, dict) else {}


def fitted_reference(model_dir: str | Path) -> dict:
    """The reference data a calibration folder was fitted on: their hash and, where known, their folder.

    The folder is the one recorded beside the models (:data:`REFERENCE_RECORD`), else the shipped reference folder
    when its data have the calibration's hash (older model files record only the hash).

    Returns
    -------
    dict
        ``sha256`` (of the fingerprint; None without a readable ``ip.json``), ``folder`` (Path or None) and
        ``current`` (True when that folder holds those very data today).

    Examples
    --------
    >>> from screen.config import Config
    >>> got = fitted_reference(find_models(Config.of({})))
    >>> got["folder"] == _shipped_reference(), got["current"]
    (True, True)
    """
    from screen.io import read_json

    model_dir = Path(model_dir)
    sha = installed_fingerprint(model_dir).get("reference_sha256")
    folder = None
    try:
        record = read_json(model_dir / REFERENCE_RECORD)
        if record.get("reference_sha256") == sha and record.get("reference_folder"):
            folder = Path(record["reference_folder"])
    except (OSError, ValueError, AttributeError):
        pass
    shipped = _shipped_reference()
    if folder is None and sha and shipped.is_dir() and reference_hash(shipped) == sha:
        folder = shipped
    current = bool(folder is not None and sha and folder.is_dir() and reference_hash(folder) == sha)
    return {"sha256": sha, "folder": folder, "current": current}


def _fitted_on_text(got: dict) -> str:
    """Where a calibration's reference data are, in words (:func:`fitted_reference`)."""
    if got["folder"] is not None and got["current"]:
        return f"the reference data in {got['folder']}"
    short = f"SHA-256 {str(got['sha256'])[:12]}\u2026"
    if got["folder"] is not None:
        return f"the reference data then in {got['folder']} ({short}; that folder holds other data now)"
    return f"reference data of {short} (older model files do not record their folder)"


def _reference_folder(reference_dir: str | Path) -> Path:
    """The reference folder as an absolute path (:func:`screen.config.data_path`), refused when it is no folder."""
    folder = data_path(reference_dir)
    if not folder.is_dir():
        what = "is a file, not a folder" if folder.exists() else "does not exist"
        raise ConfigError(f"calibration.reference: the reference folder {folder} {what}; give the folder of the "
                          f"reference CSV sets (the shipped one is {data_path('models/reference')}), or leave "
                          "calibration.reference out for the shipped one")
    return folder


# --------------------------------------------------------------------------- fitting

def fit_property(prop: str, ref: pd.DataFrame, computed: pd.DataFrame, exclude=None) -> dict:
    """Fit one gas-phase property (``ip`` or ``ea``); choose the feature set by LOO MAE.

    Parameters
    ----------
    prop : {"ip", "ea"}
    ref : pandas.DataFrame
        Reference rows (``name, smiles, value_ev, ...``).
    computed : pandas.DataFrame
        Computed levels of the reference molecules (``smiles, status, xtb_*``).
    exclude : callable, optional
        ``exclude(name, smiles) -> bool`` drops rows from the fit (hold-out tests).

    Returns
    -------
    dict
        Model parameters, LOO and leave-one-family-out statistics, residuals, alternatives.
    """
    data = joined(ref, computed)
    if exclude is not None:
        data = data[[not exclude(n, s) for n, s in zip(data["name"], data["smiles"])]]
    data = data.reset_index(drop=True)
    y = data["value_ev"].astype(float).to_numpy()
    families = [family(n, s, "molecule", prop) for n, s in zip(data["name"], data["smiles"])]
    best = select(data, y, PROPERTIES[prop]["features"], families)
    model = best["model"]
    fitted = model.predict(feature_matrix(data, model.features))
    residuals = [{"name": n, "smiles": s, "family": f, "measured_ev": float(m), "fitted_ev": float(ft),
                  "loo_ev": float(lo), "grouped_ev": float(g)}
                 for n, s, f, m, ft, lo, g in zip(data["name"], data["smiles"], families, y, fitted, best["loo"],
                                                  best["grouped"])]
    keys = ("n", "r2", "loo_mae_ev", "loo_rmse_ev", "max_abs_error_ev", "grouped_mae_ev", "by_family",
            "loo_by_representation", "alternatives")
    return {"property": prop, "target": PROPERTIES[prop]["target"], "scale": "gas", "kind": "linear",
            "model": model.to_dict(), **{k: best[k] for k in keys}, "residuals": residuals}


def fit_all(sets: dict[str, pd.DataFrame], computed: pd.DataFrame, exclude=None) -> dict[str, dict]:
    """Fit every model of :data:`MODEL_NAMES` on the reference sets and the computed raw values."""
    models = {prop: fit_property(prop, sets[prop], computed, exclude) for prop in PROPERTIES}
    models["gap_opt"], models["gap_opt_film"] = fit_gap(sets, computed, exclude)
    for level, gas in (("homo", "ip"), ("lumo", "ea")):
        models[f"{level}_film"] = fit_film_level(level, sets["film"], computed, models[gas], exclude, sets[gas])
    for record in models.values():
        if "model" in record and record.get("residuals"):
            record["domain"] = _domain(record["residuals"])
    return {name: models[name] for name in MODEL_NAMES}


def _domain(residuals: list[dict]) -> dict:
    """The applicability-domain variance model of one record (:func:`screen.calibration.domain.fit_domain`)."""
    smiles = [r["smiles"] for r in residuals]
    loo = np.array([r["loo_ev"] - r["measured_ev"] for r in residuals], float)
    return fit_domain(reference_similarity(smiles, "count"), loo, fingerprint_kind="count")


#: columns of ``reference_raw.csv``: what a refit needs without recomputation
RAW_TABLE_COLUMNS = ["id", "key", "name", "smiles", "status", "error", "representation", "xtb_ip_ev", "xtb_ea_ev",
                     "xtb_homo_ev", "xtb_lumo_ev", "xtb_gap_ev", "xtb_k_hl_ev", "xtb_j_hl_ev", "xtb_overlap_hl",
                     "xtb_ip_film_ev", "xtb_ea_film_ev", "xtb_lone_pair_shift_ev", "chain_n_max", "chain_fit",
                     "chain_fit_quality"]


def raw_table(computed: pd.DataFrame) -> pd.DataFrame:
    """The raw values of the reference batch (polymers at the chain limit) as stored beside the models."""
    cols = [c for c in RAW_TABLE_COLUMNS if c in computed.columns]
    cols += [c for c in computed.columns if c.startswith("chain_spread_")]
    return computed[cols]


def save_models(models: dict[str, dict], out_dir: str | Path, fp: dict) -> Path:
    """Write ``<out_dir>/<protocol-id>/<property>.json`` with the fingerprint."""
    target = Path(out_dir) / fp["protocol_id"]
    for prop, model in models.items():
        write_json({**model, "fingerprint": fp}, target / f"{prop}.json")
    return target


def save_calibration(models: dict[str, dict], computed: pd.DataFrame, oligomers: pd.DataFrame, out_dir: str | Path,
                     fp: dict, reference_dir: str | Path | None = None) -> tuple[Path, pd.DataFrame]:
    """The model files plus what a later refit or hold-out test needs, in ``<out_dir>/<protocol-id>/``.

    Besides the models (:func:`save_models`): ``statistics.csv``, ``reference_failures.csv``,
    ``reference_raw.csv`` (the raw values fitted on, polymers at the chain limit) and, when there
    are polymers, ``reference_oligomers.csv`` (their per-n values). ``reference_dir``: the reference folder ``fp``
    was computed on (:func:`fingerprint`), named beside the models (:data:`REFERENCE_RECORD`) unless it is the
    shipped one; without it no folder is recorded. Returns the folder and the statistics table.
    """
    target = save_models(models, out_dir, fp)
    _record_reference(target, fp, reference_dir)
    table = stats_table(models)
    write_csv(table, target / "statistics.csv")
    failed = computed[computed["status"] != "ok"]
    write_csv(failed.reindex(columns=["id", "smiles", "status", "error"]), target / "reference_failures.csv")
    write_csv(raw_table(computed), target / "reference_raw.csv")
    if len(oligomers):  # in polymer-key order, as a refit from these files writes them (same bytes either way)
        write_csv(oligomers.sort_values("polymer_key", kind="mergesort"), target / "reference_oligomers.csv")
    return target, table


def _record_reference(target: Path, fp: dict, reference_dir: str | Path | None) -> None:
    """Name the reference folder the models were fitted on beside them (:data:`REFERENCE_RECORD`), when the caller
    gives it and it is not the shipped one (which is found by its hash, and whose calibration must not carry the
    path of one machine); a record of other data is removed."""
    folder = None if reference_dir is None else _reference_folder(reference_dir)
    path = Path(target) / REFERENCE_RECORD
    if folder is None or folder.resolve() == _shipped_reference().resolve():
        path.unlink(missing_ok=True)
        return
    write_json({"reference_folder": str(folder), "reference_sha256": fp["reference_sha256"]}, path)


# --------------------------------------------------------------------------- using models

MODEL_NAMES = ("ip", "ea", "gap_opt", "homo_film", "lumo_film", "gap_opt_film")


#: the fingerprint keys a calibration must share with a run (:func:`load_models`)
FINGERPRINT_KEYS = ("protocol_id", "engine_version", "polymer", "reference_sha256")


def _compare(found: dict, expected: dict) -> list[str]:
    return [f"{k}: model has {found.get(k)!r}, run has {expected.get(k)!r}"
            for k in FINGERPRINT_KEYS if found.get(k) != expected.get(k)]


def load_models(model_dir: str | Path, config=None, reference_dir: str | Path | None = None,
                check: bool = True) -> dict[str, dict]:
    """Load the five model files of one folder and check their fingerprint.

    Parameters
    ----------
    model_dir : path-like
        ``models/<protocol-id>`` folder (:func:`find_models`).
    config : Config or mapping, optional
        Run configuration; with ``check`` the fingerprint must match it.
    reference_dir : path-like, optional
        Reference data whose hash must match (default: the config's ``calibration.reference``, found as the
        ``dascreen`` command finds it: :func:`screen.config.data_path`).

    Raises
    ------
    CalibrationError
        ``model_dir`` is None (the message says why :func:`find_models` found no folder), a missing file, or a
        fingerprint that belongs to another protocol (:class:`CalibrationMismatchError`; the message lists every
        difference).
    ConfigError
        The reference folder does not exist (:func:`fingerprint`).

    Examples
    --------
    >>> from screen.config import Config
    >>> cfg = Config.of({})
    >>> sorted(load_models(find_models(cfg), cfg)) == sorted(MODEL_NAMES)
    True
    """
    if model_dir is None:
        why = _no_models_reason(Config.of(config)) if config is not None else (
            "give the models/<protocol-id> folder, e.g. what find_models(config) returns")
        raise CalibrationError(f"load_models: no calibration folder given (model_dir is None); {why}")
    model_dir = Path(model_dir)
    models = {}
    for name in MODEL_NAMES:
        path = model_dir / f"{name}.json"
        if not path.is_file():
            raise CalibrationError(f"calibration model {path} is missing; run `dascreen calibrate`")
        models[name] = json.loads(path.read_text(encoding="utf-8"))
    if check and config is not None:
        cfg = Config.of(config)
        ref = reference_dir or cfg["calibration"]["reference"]
        expected = fingerprint(cfg, ref)
        for name, model in models.items():
            found = model.get("fingerprint", {})
            diffs = _compare(found, expected)
            if diffs:
                raise CalibrationMismatchError(f"calibration model {model_dir / (name + '.json')} does not belong to "
                                               f"this run's protocol ({'; '.join(diffs)}); "
                                               f"{_mismatch_fix(found, expected, model_dir, ref)}")
    return models


def _mismatch_fix(found: dict, expected: dict, model_dir: Path, reference) -> str:
    """What to do about a calibration of other settings: when only the reference data differ, the reference folder
    it was fitted on (:func:`reference_ways`), else a calibration of these settings (``dascreen calibrate``: every
    reference molecule is computed, hours) or the folder of a matching one."""
    if [k for k in FINGERPRINT_KEYS if found.get(k) != expected.get(k)] == ["reference_sha256"]:
        return "; or ".join(reference_ways(model_dir, reference).texts)
    return ("point calibration.models at a folder holding a calibration of these settings, or fit one with "
            "`dascreen calibrate` (it computes every reference molecule: hours)")


@dataclass(frozen=True)
class ReferenceWays:
    """What :func:`reference_ways` found: the ways in words, and whether the shipped calibration serves the run's
    reference data (way 2: then no calibration of one's own is worth fitting; callers branch on this flag, never on
    the words)."""

    texts: tuple[str, ...]
    shipped_serves: bool


def reference_ways(model_dir: str | Path, reference, install: str | None = None,
                   run_with: str = "") -> ReferenceWays:
    """The ways on when the calibration in ``model_dir`` was fitted on other reference data than ``reference`` (the
    run's ``calibration.reference``), first the one that keeps its numbers.

    1. the reference data it was fitted on (:func:`fitted_reference`): ``--set calibration.reference=<folder>``,
       or, for older model files that record only their hash, the folder of those data;
    2. when ``reference`` holds the data of the shipped calibration and ``model_dir`` is another calibration: the
       shipped calibration (leave ``calibration.models`` out); a refit of ``model_dir``'s raw values on these data
       would be that calibration again under another name;
    3. otherwise, when ``model_dir`` stores its raw values: a refit on ``reference`` in seconds, installed into
       ``install`` (default: a models folder of one's own), ``run_with`` appended.

    A lab that set ``calibration.models`` and forgot ``calibration.reference`` was offered a refit on the shipped
    reference data installed under a custom name: the shipped numbers under a custom name (a second lab's audit).

    Examples
    --------
    >>> from screen.config import Config
    >>> shipped = find_models(Config.of({}))
    >>> got = reference_ways(shipped, "models/reference")
    >>> got.texts[0].startswith("use the reference data it was fitted on, in "), got.shipped_serves
    (True, False)
    """
    import shlex

    model_dir = Path(model_dir)
    got = fitted_reference(model_dir)
    ref = data_path(reference)
    if got["folder"] is not None and got["current"]:
        ways = [f"use the reference data it was fitted on, in {got['folder']}: add "
                f"--set calibration.reference={shlex.quote(str(got['folder']))}"]
    else:
        ways = [f"use the reference data it was fitted on, {_fitted_on_text(got)}: set calibration.reference to "
                "their folder"]
    shipped = _shipped_reference()
    shipped_models = shipped.parent / model_dir.name
    shipped_serves = bool(ref.is_dir() and (shipped_models / "ip.json").is_file()
                          and model_dir.resolve() != shipped_models.resolve()
                          and fitted_reference(shipped_models)["sha256"] == reference_hash(ref))
    if shipped_serves:
        ways.append(f"keep the reference data in {ref}: leave calibration.models out, the shipped calibration "
                    f"({shipped_models}) was fitted on them (the calibration in {model_dir} refitted on them would "
                    "be that one again)")
    elif (model_dir / "reference_raw.csv").is_file():
        into = shlex.quote(install) if install else "<a models folder of your own>"
        ways.append(f"keep the reference data in {ref}: refit the calibration in {model_dir} on them from its stored "
                    f"raw values in seconds: dascreen calibrate --from-raw {shlex.quote(str(model_dir))} --reference "
                    f"{shlex.quote(str(ref))} --install {into}{run_with}")
    return ReferenceWays(tuple(ways), shipped_serves)


def fingerprint_fields(found: dict, expected: dict) -> list[tuple[str, object, object]]:
    """Every field in which a calibration's fingerprint ``found`` differs from ``expected`` (this run's or this
    fit's), as ``(field, here, there)``: here from ``expected``, there from ``found``.

    In this order: ``protocol_id``; every setting of the protocol and polymer sections (``section.key``; a setting a
    fingerprint lacks counts at the value that reproduces the route from before it existed, else at its default);
    ``engine_version``, only when both use the same engine (versions of two engines do not compare; the engine
    itself is a setting); ``reference_sha256``. The one comparison of :func:`fingerprint_differences` and
    :func:`screen.preflight.calibration_differences`.

    Examples
    --------
    >>> from screen.config import Config
    >>> base = fingerprint(Config.of({}), "models/reference")
    >>> fingerprint_fields({**base, "engine_version": "0.1", "reference_sha256": "x"}, base)[0][0]
    'engine_version'
    >>> other = {**base, "engine_version": "0.1", "protocol": {**base["protocol"],
    ...          "electronic": {**base["protocol"]["electronic"], "engine": "xtb"}}}
    >>> [f for f, _, _ in fingerprint_fields(other, base)]
    ['electronic.engine']
    """
    from screen.config import defaults, flat_settings
    from screen.options import EARLIER_ROUTE_VALUES

    def settings(fp: dict) -> dict:
        return {**flat_settings(fp.get("protocol") or {}), **flat_settings({"polymer": fp.get("polymer") or {}})}

    fallback = {**flat_settings(defaults()), **flat_settings({"structures": EARLIER_ROUTE_VALUES["structures"]})}
    out: list[tuple[str, object, object]] = []
    if found.get("protocol_id") != expected.get("protocol_id"):
        out.append(("protocol_id", expected.get("protocol_id"), found.get("protocol_id")))
    here, there = settings(expected), settings(found)
    for key in sorted(set(here) | set(there)):
        a, b = here.get(key, fallback.get(key)), there.get(key, fallback.get(key))
        if a != b:
            out.append((key, a, b))
    engine = "electronic.engine"
    same_engine = here.get(engine, fallback.get(engine)) == there.get(engine, fallback.get(engine))
    if same_engine and found.get("engine_version") != expected.get("engine_version"):
        out.append(("engine_version", expected.get("engine_version"), found.get("engine_version")))
    if found.get("reference_sha256") != expected.get("reference_sha256"):
        out.append(("reference_sha256", expected.get("reference_sha256"), found.get("reference_sha256")))
    return out


def fingerprint_differences(found: dict, expected: dict, found_name: str = "the installed calibration",
                            model_dir: str | Path | None = None, reference=None) -> list[str]:
    """Every way a calibration's fingerprint ``found`` differs from ``expected`` that changes its numbers, in words
    (:func:`fingerprint_fields`): the protocol id, the settings of the protocol and polymer sections, the engine
    version (of the same engine) and the reference data.

    Parameters
    ----------
    found, expected : dict
        Fingerprints (:func:`fingerprint`); ``expected`` is this run's or this fit's.
    found_name : str
        What ``found`` belongs to, in the texts.
    model_dir, reference : optional
        The folder of ``found`` and the reference folder of ``expected``, to name the data in words.

    Examples
    --------
    >>> from screen.config import Config
    >>> base = fingerprint(Config.of({}), "models/reference")
    >>> fingerprint_differences({**base, "polymer": {**base["polymer"], "fit_rms_tol_ev": 0.2}}, base)
    ['polymer.fit_rms_tol_ev: 0.05 here, 0.2 in the installed calibration']
    >>> fingerprint_differences(base, base)
    []
    """
    out = []
    for field, a, b in fingerprint_fields(found, expected):
        if field == "protocol_id":
            out.append(f"protocol {a} here, {b} in {found_name}")
        elif field == "engine_version":
            out.append(f"engine version {a} here, {b} in {found_name}")
        elif field == "reference_sha256":
            if model_dir is not None:
                theirs = _fitted_on_text(fitted_reference(model_dir))
            else:
                theirs = f"reference data of SHA-256 {str(b)[:12]}\u2026"
            ours = f" (here: those in {data_path(reference)})" if reference is not None else ""
            out.append(f"fitted on other reference data: {found_name} on {theirs}{ours}")
        else:
            out.append(f"{field}: {a} here, {b} in {found_name}")
    return out


def _no_models_reason(cfg: Config) -> str:
    """Why :func:`find_models` finds no calibration for ``cfg``, with the fix (one sentence)."""
    root = cfg.models_folder
    pid = cfg.protocol_id
    if not root.is_dir():
        what = "is a file, not a folder" if root.exists() else "does not exist"
        return (f"calibration.models {root} {what}; give the folder that holds the models/<protocol-id>/ folders "
                f"(the shipped one is {data_path('models')}), or leave calibration.models out for the shipped one")
    if not (root / pid).is_dir():
        held = sorted(p.name for p in root.iterdir() if (p / "ip.json").is_file())
        return (f"{root} holds no calibration of this protocol ({pid}; it holds {', '.join(held) or 'none'}); "
                "use the settings of a shipped calibration (`dascreen run --dry-run` names the differences) or "
                "fit one with `dascreen calibrate` (hours)")
    try:
        load_models(root / pid, cfg)
    except CalibrationError as exc:
        return str(exc)
    return f"{root / pid} matches these settings: pass it (find_models(config) returns it)"


def find_models(config) -> Path | None:
    """The shipped model folder matching ``config``, or ``None`` when a refit is needed.

    ``calibration.models`` and ``calibration.reference`` are found as the ``dascreen`` command finds them
    (:func:`screen.config.data_path`), so the shipped calibration is found from any working directory.
    ``load_models(None, config)`` says why none matches.

    Parameters
    ----------
    config : Config or mapping
        The run configuration (``calibration.models`` and the protocol).

    Raises
    ------
    ConfigError
        The reference folder does not exist (:func:`fingerprint`).

    Examples
    --------
    >>> from screen.config import Config
    >>> find_models(Config.of({})).name == Config.of({}).protocol_id
    True
    """
    cfg = Config.of(config)
    given = Path(cfg["calibration"]["models"])
    folder = (given if given.exists() else cfg.models_folder) / cfg.protocol_id  # as given where it is found there
    if not (folder / "ip.json").is_file():
        _reference_folder(cfg["calibration"]["reference"])  # a missing reference folder is said all the same
        return None
    try:
        load_models(folder, cfg)
    except CalibrationError:
        return None
    return folder


def _chain_sigma(frame: pd.DataFrame, features: list[str], coef) -> np.ndarray:
    """σ [eV] that a polymer's chain-limit spreads add to a linear prediction (0 for molecules)."""
    total = np.zeros(len(frame))
    for raw, weight in raw_weights(features, coef).items():
        col = f"chain_spread_{raw}"
        if col in frame:
            spread = pd.to_numeric(frame[col], errors="coerce").fillna(0.0).to_numpy(float)
            total += (weight * spread) ** 2
    return np.sqrt(total)


def _predict(frame: pd.DataFrame, record: dict, covered=None, **indicators) -> tuple[np.ndarray, np.ndarray]:
    """Mean and σ of a linear/joint model record: prediction interval ⊕ chain-limit spread ⊕ conformer spread
    (``covered``: the elements of the calibration's reference rows, :func:`covered_elements`)."""
    model = LinearLevelModel.from_dict(record["model"])
    data = frame.assign(**{k: float(v) for k, v in indicators.items()})
    mean, std = model.predict(feature_matrix(data, model.features), return_std=True)
    if "smiles" in frame:
        std = domain_std(record.get("domain"), model.sigma_, std, frame["smiles"],
                         [r["smiles"] for r in record["residuals"]], covered)
    own = np.hypot(_chain_sigma(frame, model.features, model.coef_),
                   conformer_sigma(frame, raw_weights(model.features, model.coef_)))
    return mean, np.hypot(std, own)


def _film_level(frame: pd.DataFrame, record: dict, gas: tuple[np.ndarray, np.ndarray], covered=None) -> tuple:
    if record["kind"] == "shift":  # gas model + constant: level = −gas + shift
        return -gas[0] + record["shift_ev"], np.hypot(gas[1], record["sigma_ev"])
    film = {"phase_film": 1} if "phase_film" in record["model"]["features"] else {}
    mean, std = _predict(frame, record, covered, **film)
    return record.get("sign", -1.0) * mean, std


#: an element is covered by a calibration when at least this many distinct reference structures contain it: one
#: row says little about a new element's effect on the levels (a heteroatom chemist's audit: selenium, in one
#: polymer's side groups only, counted as covered, and backbone-selenium analogues got a covered molecule's σ,
#: while that one row misses its own gap by 0.26 eV when left out)
COVERAGE_MIN_STRUCTURES = 2


def covered_elements(models: dict[str, dict]) -> frozenset:
    """Element symbols that at least :data:`COVERAGE_MIN_STRUCTURES` distinct reference structures of a
    calibration's models contain (hydrogen and attachment points left out).

    A candidate with any other element is unlike every reference material: its similarity counts as 0, for the
    σ of each level and for ``reference_similarity`` (:func:`screen.calibration.domain.nearest_similarity`).
    On the shipped calibrations: C, N, O, S, F, Cl, Si; bromine and selenium are in one structure each.
    """
    from collections import Counter

    structures = {r["smiles"] for m in models.values() if isinstance(m, dict)
                  for r in m.get("residuals", []) if isinstance(r, dict) and r.get("smiles")}
    counts = Counter(e for s in structures for e in elements(s))
    return frozenset(e for e, k in counts.items() if k >= COVERAGE_MIN_STRUCTURES)


#: the models whose reference rows ``reference_similarity`` is measured against, per scale of the levels
SCALE_MODELS = {"film": ("homo_film", "lumo_film", "gap_opt_film"), "gas": ("ip", "ea", "gap_opt")}


def apply_models(levels: pd.DataFrame, models: dict[str, dict], scale: str = "film") -> pd.DataFrame:
    """Add calibrated columns with σ to a levels table.

    Parameters
    ----------
    levels : pandas.DataFrame
        Table with raw ``xtb_*`` columns (rows without them stay empty); polymer rows
        hold chain-limit values and ``chain_spread_*`` columns.
    models : dict
        From :func:`load_models` or :func:`fit_all`.
    scale : {"film", "gas"}
        Scale of ``homo_ev``/``lumo_ev``/``gap_opt_ev``; ``ip_ev``/``ea_ev``/``gap_fund_ev`` are always gas.

    Returns
    -------
    pandas.DataFrame
        Copy with ``ip_ev, ea_ev, gap_fund_ev, homo_ev, lumo_ev, gap_opt_ev``,
        their σ columns and ``scale`` filled for computed rows, and
        ``reference_similarity``: the nearest-neighbour fingerprint similarity to
        any reference row of the models of ``scale`` (:data:`SCALE_MODELS`;
        :func:`screen.calibration.domain.nearest_similarity`).
    """
    if scale not in ("film", "gas"):
        raise ConfigError(f"levels.scale must be 'film' or 'gas', not {scale!r}")
    out = levels.copy()
    ok = out["status"].eq("ok") & pd.to_numeric(out["xtb_ip_ev"], errors="coerce").notna()
    sub = out[ok]
    covered = covered_elements(models)
    ip, ip_s = _predict(sub, models["ip"], covered)
    ea, ea_s = _predict(sub, models["ea"], covered)
    if scale == "film":
        homo, homo_s = _film_level(sub, models["homo_film"], (ip, ip_s), covered)
        lumo, lumo_s = _film_level(sub, models["lumo_film"], (ea, ea_s), covered)
        gap, gap_s = _gap(sub, models["gap_opt_film"], phase_film=1, covered=covered)
    else:
        homo, homo_s, lumo, lumo_s = -ip, ip_s, -ea, ea_s
        gap, gap_s = _gap(sub, models["gap_opt"], phase_film=0, covered=covered)
    values = {"ip_ev": ip, "ea_ev": ea, "gap_fund_ev": ip - ea, "homo_ev": homo, "lumo_ev": lumo,
              "gap_opt_ev": gap, "ip_sigma_ev": ip_s, "ea_sigma_ev": ea_s, "homo_sigma_ev": homo_s,
              "lumo_sigma_ev": lumo_s, "gap_opt_sigma_ev": gap_s}
    for col, arr in values.items():
        out[col] = np.nan
        out.loc[ok, col] = np.round(arr, WRITTEN_DECIMALS)
    out["scale"] = ""
    out.loc[ok, "scale"] = scale
    out["reference_similarity"] = np.nan
    if "smiles" in out:  # the rows of the models whose levels this table gives (film: the film models; a materials
        # check found a triarylamine 0.27 like the film set but 0.41 like a gas-phase IP row, and so unflagged)
        names = SCALE_MODELS[scale]
        refs = sorted({r["smiles"] for name, m in models.items() if name in names for r in m.get("residuals", [])})
        out.loc[ok, "reference_similarity"] = np.round(nearest_similarity(list(sub["smiles"]), refs,
                                                                          covered=covered), 3)
    out["known_bias"] = ""
    if "smiles" in out:  # a family whose levels are known to be off held out (screen.knownbias): flagged in ranking
        codes = [known_bias(s) for s in sub["smiles"].astype(str)]
        rep = sub["representation"] if "representation" in sub else pd.Series("", index=sub.index)
        gap = sub["xtb_gap_ev"] if "xtb_gap_ev" in sub else pd.Series(np.nan, index=sub.index)
        ovl = sub["xtb_overlap_hl"] if "xtb_overlap_hl" in sub else pd.Series(np.nan, index=sub.index)
        for i, (r, g, o) in enumerate(zip(rep, gap, ovl)):
            # a charge-transfer polymer (screen.knownbias.ct_polymer); an NDI polymer's own flag says it already
            if ct_polymer(r, g, o) and "ndi_polymer" not in codes[i]:
                codes[i] = "+".join(c for c in (codes[i], "ct_polymer") if c)
        out.loc[ok, "known_bias"] = codes
    return out


def _gap(frame: pd.DataFrame, record: dict, phase_film: int, covered=None) -> tuple[np.ndarray, np.ndarray]:
    if record["kind"] != "joint":
        return _predict(frame, record, covered)
    # onset / 0-0 energy in the requested phase: the [film] term, or δ when it was fixed
    if "phase_film" in record["model"]["features"]:
        return _predict(frame, record, covered, phase_film=phase_film, kind_maximum=0)
    mean, std = _predict(frame, record, covered, kind_maximum=0)
    return mean - phase_film * record["red_shift_ev"], std


def stats_table(models: dict[str, dict]) -> pd.DataFrame:
    """One row per model: n, terms, intercept/shift, R², LOO MAE/RMSE, max error, grouped MAE, σ, per representation."""
    rows = []
    for name in MODEL_NAMES:
        m = models[name]
        rep = m.get("loo_by_representation", {})
        row = {"model": name, "scale": m["scale"], "n": m["n"]}
        if m["kind"] == "shift":
            row.update(terms=f"{m['base']} gas model + constant", intercept_ev=round(m["shift_ev"], 3),
                       sigma_ev=round(m["sigma_ev"], 3))
        else:
            d = m["model"]
            row.update(terms=", ".join(f"{c:+.3f}·{f}" for c, f in zip(d["coef"], d["features"])),
                       intercept_ev=round(d["intercept"], 3), sigma_ev=round(d["residual_sigma_ev"], 3))
        row.update(r2=round(m["r2"], 3), loo_mae_ev=round(m["loo_mae_ev"], 3), loo_rmse_ev=round(m["loo_rmse_ev"], 3),
                   max_abs_error_ev=round(m["max_abs_error_ev"], 3),
                   grouped_mae_ev=round(m.get("grouped_mae_ev", float("nan")), 3),
                   n_polymer=rep.get("polymer", {}).get("n", 0),
                   loo_mae_molecule_ev=round(rep.get("molecule", {}).get("mae_ev", float("nan")), 3),
                   loo_mae_polymer_ev=round(rep.get("polymer", {}).get("mae_ev", float("nan")), 3))
        rows.append(row)
    return pd.DataFrame(rows)
