"""Calibration of the dye-cell levels: E(S⁺/S) vs NHE and E₀₋₀ from raw xTB values.

Two linear models are fitted on the dye reference set
(``models/reference/dyes.csv``: measured ground-state oxidation potentials of
organic sensitisers, converted to V vs NHE, and their E₀₋₀), computed with
*exactly* the candidates' protocol:

* ``e_ox``: E(S⁺/S) [V vs NHE] ← ΔSCF IP, the ΔSCF IP in a dielectric
  continuum (``xtb_ip_film_ev``, when the levels carry it) or IP + HOMO energy.  Fitting
  directly on potentials vs NHE absorbs in the intercept the absolute NHE
  potential (4.44 V, Trasatti [1]_), the solvation of the cation and the
  reference-electrode conventions of the sources; the fitted intercept is
  recorded.  The potentials are solution values (DMF, CH₂Cl₂, MeCN) as the
  sources report them; a dye adsorbed on TiO₂ is typically within ~0.1 V.
* ``e00``: E₀₋₀ [eV] ← orbital gap, ΔSCF fundamental gap, or both; when the
  levels carry the HOMO→LUMO exchange integral ``xtb_k_hl_ev``
  (:mod:`screen.excitation`) also the single-configuration singlet estimate
  gap + 2K and gap with K as two features.  E₀₋₀ is a *solution-phase* optical gap (mostly
  the intersection of normalised absorption and emission, some absorption
  onsets; ``e00_method`` in the reference file).  Film effects (aggregation,
  deprotonation on the oxide) are not modelled: their spread is part of the
  model's σ.

Feature sets are configurable (:data:`TARGETS`).  The set is chosen by
leave-one-out (LOO) MAE — a second feature must lower it by more than
:data:`MIN_GAIN` — and the figure reported as the model's accuracy is a
*nested* LOO: for each held-out dye the feature set is chosen again on the
other dyes only, so the test fold never tunes the model.  The LOO MAE of the
constant model (predict the training mean) is recorded beside it: the
reference potentials span only ~0.5 V, so the constant model is the bar to beat.

Each model file records the protocol id, the engine version, the reference
file's SHA-256, the elements of the fitted dyes and the range of the targets;
:func:`load_models` refuses a model of another protocol.

References
----------
.. [1] S. Trasatti, Pure Appl. Chem. 58 (1986) 955. :doi:`10.1351/pac198658070955`
.. [2] A. Hagfeldt, G. Boschloo, L. Sun, L. Kloo, H. Pettersson,
   Chem. Rev. 110 (2010) 6595. :doi:`10.1021/cr900356p`
.. [3] C. Bannwarth, S. Ehlert, S. Grimme, J. Chem. Theory Comput. 15 (2019)
   1652. :doi:`10.1021/acs.jctc.8b01176`
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

from screen.calibrate import LinearLevelModel
from screen.calibration.domain import domain_std, fingerprint, fit_domain, nearest_similarity, reference_similarity
from screen.errors import CalculationError, ConfigError, InputError
from screen.flags import FAR_FROM_REFERENCE_SIMILARITY
from screen.io import read_json, write_json
from screen.provenance import library_versions, sha256_file
from screen.viability import WRITTEN_DECIMALS

__all__ = ["REFERENCE_FILE", "MODELS_DIR", "TARGETS", "DERIVED", "MIN_GAIN", "needed_columns", "reference_file",
           "reference_table", "reference_input", "fitted_on", "REFERENCE_RECORD",
           "join_computed", "feature_matrix", "fit_target", "fit_models", "save_models", "load_models",
           "model_folder", "apply_models", "elements_of", "SIMILARITY_DECIMALS", "dye_reference_similarity"]

_ROOT = Path(__file__).resolve().parent.parent.parent
#: the dye reference set
REFERENCE_FILE = _ROOT / "models" / "reference" / "dyes.csv"
#: fitted dye models, one folder per protocol id
MODELS_DIR = _ROOT / "models" / "dyecell"
#: a second feature must lower the LOO MAE by more than this [V or eV]
MIN_GAIN = 0.01
#: the two models: target column, unit and candidate feature sets (simplest first)
TARGETS: dict[str, dict] = {
    "e_ox": {"target": "e_ox_v_nhe", "unit": "V", "column": "e_ox_v_nhe", "sigma": "e_ox_sigma_v",
             "features": [["xtb_ip_ev"], ["xtb_ip_film_ev"], ["xtb_ip_ev", "xtb_homo_ev"]]},
    "e00": {"target": "e00_ev", "unit": "eV", "column": "e00_ev", "sigma": "e00_sigma_ev",
            "features": [["xtb_gap_ev"], ["xtb_fund_ev"], ["xtb_s1_ev"], ["xtb_gap_ev", "xtb_fund_ev"],
                         ["xtb_gap_ev", "xtb_k_hl_ev"]]},
}
#: derived features: name → (columns it needs, function of the frame)
DERIVED = {
    "xtb_fund_ev": (["xtb_ip_ev", "xtb_ea_ev"], lambda f: _num(f, "xtb_ip_ev") - _num(f, "xtb_ea_ev")),
    # single-configuration singlet estimate Δε + 2K (Grimme, J. Chem. Phys. 138 (2013) 244104)
    "xtb_s1_ev": (["xtb_gap_ev", "xtb_k_hl_ev"], lambda f: _num(f, "xtb_gap_ev") + 2.0 * _num(f, "xtb_k_hl_ev")),
}
#: decimals of the ``reference_similarity`` column of the dye table (:func:`dye_reference_similarity`)
SIMILARITY_DECIMALS = 2
_RAW = ["xtb_ip_ev", "xtb_ea_ev", "xtb_homo_ev", "xtb_lumo_ev", "xtb_gap_ev"]
_OPTIONAL_RAW = ["xtb_k_hl_ev", "xtb_j_hl_ev", "xtb_ip_film_ev", "xtb_ea_film_ev"]


def _num(frame: pd.DataFrame, col: str) -> np.ndarray:
    return pd.to_numeric(frame[col], errors="coerce").to_numpy(float)


def needed_columns(features: list[str]) -> list[str]:
    """Levels columns a feature list needs (derived features expanded).

    Examples
    --------
    >>> needed_columns(["xtb_fund_ev", "xtb_homo_ev"])
    ['xtb_ip_ev', 'xtb_ea_ev', 'xtb_homo_ev']
    """
    out: list[str] = []
    for f in features:
        for c in (DERIVED[f][0] if f in DERIVED else [f]):
            if c not in out:
                out.append(c)
    return out


# --------------------------------------------------------------------------- reference data

def _canonical(smiles: str) -> str:
    from rdkit import Chem, rdBase

    with rdBase.BlockLogs():
        mol = Chem.MolFromSmiles(str(smiles))
    return Chem.MolToSmiles(mol) if mol is not None else ""


def elements_of(smiles: str) -> set[str]:
    """Element symbols of a SMILES (hydrogen included); empty if it does not parse.

    Examples
    --------
    >>> sorted(elements_of("OC(=O)c1ccsc1"))
    ['C', 'H', 'O', 'S']
    """
    from rdkit import Chem, rdBase

    with rdBase.BlockLogs():
        mol = Chem.MolFromSmiles(str(smiles))
    if mol is None:
        return set()
    out = {a.GetSymbol() for a in mol.GetAtoms()}
    if any(a.GetTotalNumHs() for a in mol.GetAtoms()):
        out.add("H")
    return out


def reference_file(reference: str | Path | None = None) -> Path:
    """The dye reference file of ``reference``: a file as given, ``<folder>/dyes.csv`` of a reference folder (as
    ``calibration.reference`` names it, :mod:`screen.calibration.reference`), :data:`REFERENCE_FILE` for None.

    Examples
    --------
    >>> reference_file(REFERENCE_FILE.parent) == reference_file() == REFERENCE_FILE
    True
    """
    if reference is None:
        return REFERENCE_FILE
    path = Path(reference).expanduser()
    return path / "dyes.csv" if path.is_dir() else path


def _check_reference_rows(check: pd.DataFrame, where: str) -> np.ndarray:
    """E(S+/S) of the fitted reference rows, held to :func:`screen.dyecell.checks.check_dye_file` with each dye named
    by its column ``name`` and a row that gives only one of its two targets checked for that one (the other model is
    fitted without it, :func:`fit_target`); the index is the file's row, for its line in the messages."""
    from screen.dyecell.checks import check_dye_file

    if not len(check):
        return np.zeros(0)
    return check_dye_file(check, where, label="name", one_target=True)


def reference_table(path: str | Path | None = None) -> pd.DataFrame:
    """The fitted rows of the dye reference set (``exclude_reason`` empty), with numeric targets.

    ``path``: the file or its reference folder (:func:`reference_file`). Every fitted row is held to the checks of
    a user's dye file (:func:`screen.dyecell.checks.check_dye_file`, the name as its id): a potential vs another
    electrode (``e_ox_v`` with ``e_ox_reference`` or ``reference``, and ``solvent`` for ferrocene) is converted to
    ``e_ox_v_nhe`` with the table the dye files use (:data:`screen.dyecell.scales.ELECTRODES_FILE`), both given
    must agree, and a value in millivolts, on the vacuum scale or a wavelength for E0-0 is refused. A row that gives
    only one target (no potential, or no E0-0) is fitted for that one alone, as before.

    Raises
    ------
    ConfigError
        The file is missing or lacks a needed column.
    InputError
        A fitted row with an impossible or inconsistent value: the file, line, name, column and the fix.

    Examples
    --------
    >>> import tempfile
    >>> f = Path(tempfile.mkdtemp()) / "dyes.csv"
    >>> head = "name,smiles,e_ox_v,e_ox_reference,e_ox_v_nhe,e00_ev\\n"
    >>> _ = f.write_text(head + "A,OC(=O)c1ccccc1,0.98,ag-agcl-sat,,2.8\\n")
    >>> reference_table(f)["e_ox_v_nhe"].round(3).tolist()  # 0.98 V + 0.197 V (screen/data/electrodes.csv)
    [1.177]
    >>> _ = f.write_text("name,smiles,e_ox_v_nhe,e00_ev\\nA,OC(=O)c1ccccc1,1180,2.8\\n")
    >>> reference_table(f)  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    screen.errors.InputError: dye reference file ...dyes.csv: line 2 (name 'A'), column e_ox_v_nhe = 1180: ... 1180 looks like millivolts: write 1.18 V
    """
    from screen.dyecell.checks import check_field_counts, merge_reference_alias

    path = reference_file(path)
    if not path.is_file():
        raise ConfigError(f"dye reference file {path} is missing")
    what = "dye reference file"
    check_field_counts(path, what)
    frame = pd.read_csv(path, dtype=str, keep_default_na=False)
    frame.columns = [str(c).strip() for c in frame.columns]
    missing = [c for c in ("name", "smiles", "e00_ev") if c not in frame.columns]
    if not ({"e_ox_v_nhe", "e_ox_v"} & set(frame.columns)):
        missing.append("e_ox_v_nhe (or e_ox_v with e_ox_reference)")
    if missing:
        raise ConfigError(f"{path}: missing column(s) {missing}; found {list(frame.columns)}")
    where = f"{what} {path}"
    frame = merge_reference_alias(frame, where)
    if "exclude_reason" not in frame:
        frame["exclude_reason"] = ""
    fitted = frame[frame["exclude_reason"].str.strip().eq("") & frame["smiles"].str.strip().ne("")].copy()
    for col in ("e_ox_v_nhe", "e_ox_v"):
        if col not in fitted:
            fitted[col] = ""
    check = fitted.drop(columns=[c for c in ("id",) if c in fitted])
    if "solvent" in check and "e_ox_reference" in check:  # the file's solvent column describes the measurement;
        # only a ferrocene reference reads it (checks.check_dye_file): elsewhere it would only fill the messages
        ferrocene = check["e_ox_reference"].str.strip().str.lower().str.startswith(("fc", "ferroc"))
        check.loc[~ferrocene, "solvent"] = ""
    fitted["e_ox_v_nhe"] = _check_reference_rows(check, where)  # NaN for a row that gives only E00
    fitted["e00_ev"] = pd.to_numeric(fitted["e00_ev"], errors="coerce")
    return fitted.reset_index(drop=True)


def reference_input(path: str | Path | None = None) -> pd.DataFrame:
    """Candidate list (``id, smiles, name``) of the fitted reference dyes, for a ``dascreen run``.

    ``path``: the dye reference file or its reference folder (:func:`reference_table`).

    Examples
    --------
    >>> ref = reference_input()
    >>> list(ref.columns), bool(len(ref) >= 30)
    (['id', 'smiles', 'name'], True)
    """
    ref = reference_table(path)
    return pd.DataFrame({"id": [f"dyeref-{i:03d}" for i in range(len(ref))], "smiles": ref["smiles"],
                         "name": ref["name"]})


def join_computed(ref: pd.DataFrame, computed: pd.DataFrame) -> pd.DataFrame:
    """Reference rows with the computed raw columns, joined by canonical SMILES (ok rows only)."""
    comp = computed.copy()
    if "status" in comp:
        comp = comp[comp["status"].astype(str).eq("ok")]
    comp["_can"] = [_canonical(s) for s in comp["smiles"]]
    cols = [c for c in _RAW + _OPTIONAL_RAW + ["n_atoms"] if c in comp]
    comp = comp.drop_duplicates("_can").set_index("_can")[cols]
    out = ref.copy()
    out["_can"] = [_canonical(s) for s in out["smiles"]]
    joined = out.join(comp, on="_can", how="inner")
    return joined.dropna(subset=[c for c in _RAW if c in joined]).reset_index(drop=True)


def feature_matrix(frame: pd.DataFrame, names: list[str]) -> np.ndarray:
    """Feature columns [eV]; derived ones (:data:`DERIVED`: ``xtb_fund_ev`` = IP − EA, ``xtb_s1_ev`` = gap + 2K)
    are computed."""
    cols = [DERIVED[name][1](frame) if name in DERIVED else _num(frame, name) for name in names]
    return np.column_stack(cols) if cols else np.zeros((len(frame), 0))


def _available(frame: pd.DataFrame, feats: list[str]) -> bool:
    cols = needed_columns(feats)
    return all(c in frame for c in cols) and bool(np.all(np.isfinite(feature_matrix(frame, feats))))


# --------------------------------------------------------------------------- fitting

def _loo(X: np.ndarray, y: np.ndarray, feats: list[str] | None = None) -> np.ndarray:
    """Leave-one-out predictions of ordinary least squares (with intercept), exact and in closed form.

    ``ŷ₋ᵢ = yᵢ − rᵢ / (1 − hᵢᵢ)`` with rᵢ the full-fit residual and hᵢᵢ the
    leverage (diagonal of the hat matrix).

    Examples
    --------
    >>> X = np.array([[0.0], [1.0], [2.0], [4.0]]); y = np.array([0.1, 0.9, 2.2, 3.9])
    >>> brute = [np.polyval(np.polyfit(np.delete(X[:, 0], i), np.delete(y, i), 1), X[i, 0]) for i in range(4)]
    >>> bool(np.allclose(_loo(X, y), brute))
    True
    """
    Xt = np.column_stack([np.ones(len(y)), X])
    inv = np.linalg.pinv(Xt.T @ Xt)
    beta = inv @ Xt.T @ y
    resid = y - Xt @ beta
    lev = np.einsum("ij,jk,ik->i", Xt, inv, Xt)
    return y - resid / (1.0 - lev)


def _select(frame: pd.DataFrame, y: np.ndarray, sets: list[list[str]], min_gain: float):
    """The feature set with the lowest LOO MAE (a longer set must gain > ``min_gain``) and every trial."""
    best, tried = None, []
    for feats in sets:
        X = feature_matrix(frame, feats)
        loo = _loo(X, y, feats)
        mae = float(np.mean(np.abs(loo - y)))
        tried.append({"features": feats, "loo_mae": mae})
        if best is None or mae < best[1] - min_gain:
            best = (feats, mae, loo)
    return best, tried


def fit_target(name: str, data: pd.DataFrame, feature_sets: list[list[str]] | None = None,
               min_gain: float = MIN_GAIN) -> dict:
    """Fit one dye model with feature selection and nested-LOO statistics.

    Parameters
    ----------
    name : {"e_ox", "e00"}
    data : pandas.DataFrame
        Reference rows joined with their computed raw columns (:func:`join_computed`).
    feature_sets : list of list of str, optional
        Candidate feature sets (default ``TARGETS[name]["features"]``); sets
        whose columns are absent are skipped.
    min_gain : float
        A later set must lower the LOO MAE by more than this.

    Returns
    -------
    dict
        ``model`` (:class:`screen.calibrate.LinearLevelModel` as a dict),
        ``n``, ``loo_mae`` (nested LOO, the honest figure), ``loo_rmse``,
        ``loo_max_abs_error``, ``selection_loo_mae`` (LOO of the chosen set,
        optimistic by the selection), ``baseline_loo_mae`` (constant model),
        ``r2``, the ``alternatives`` tried, ``target_range`` and per-dye
        ``residuals`` (measured, fitted, nested-LOO prediction).
    """
    spec = TARGETS[name]
    sets = [f for f in (feature_sets or spec["features"]) if _available(data, f)]
    if not sets:
        raise ConfigError(f"dye model {name}: none of the feature sets {feature_sets or spec['features']} is "
                          f"available in the computed reference levels")
    data = data.dropna(subset=[spec["target"]]).reset_index(drop=True)
    y = data[spec["target"]].to_numpy(float)
    n = len(y)
    if n < 5:
        raise CalculationError(f"dye model {name}: only {n} reference dyes with computed values; need at least 5")
    (feats, sel_mae, _), tried = _select(data, y, sets, min_gain)
    model = LinearLevelModel(feats).fit(feature_matrix(data, feats), y)
    fitted = model.predict(feature_matrix(data, feats))

    nested = np.empty(n)
    chosen = []
    for i in range(n):
        keep = np.arange(n) != i
        train = data[keep].reset_index(drop=True)
        (f_i, _, _), _ = _select(train, y[keep], sets, min_gain)
        chosen.append(f_i)
        m_i = LinearLevelModel(f_i).fit(feature_matrix(train, f_i), y[keep])
        nested[i] = m_i.predict(feature_matrix(data.iloc[[i]], f_i))[0]
    err = nested - y
    baseline = (y.sum() - y) / (n - 1)
    ss_tot = float(np.sum((y - y.mean()) ** 2))
    counts = pd.Series([" + ".join(c) for c in chosen]).value_counts()
    return {
        "property": name, "target": spec["target"], "unit": spec["unit"], "scale": "electrochemical"
        if name == "e_ox" else "optical (solution)", "kind": "linear", "model": model.to_dict(), "n": n,
        "loo_mae": float(np.mean(np.abs(err))), "loo_rmse": float(np.sqrt(np.mean(err**2))),
        "loo_max_abs_error": float(np.max(np.abs(err))), "selection_loo_mae": sel_mae,
        "baseline_loo_mae": float(np.mean(np.abs(baseline - y))),
        "r2": 1.0 - float(np.sum((y - fitted) ** 2)) / ss_tot if ss_tot > 0 else math.nan,
        "nested_selection": {k: int(v) for k, v in counts.items()},
        "alternatives": tried, "target_range": [float(y.min()), float(y.max())],
        "residuals": [{"name": nm, "smiles": s, "measured": float(m), "fitted": float(f), "loo": float(lo)}
                      for nm, s, m, f, lo in zip(data["name"], data["smiles"], y, fitted, nested)],
        "domain": fit_domain(reference_similarity(data["smiles"]), nested - y),
    }


def fit_models(computed: pd.DataFrame, reference: str | Path | None = None, *, protocol_id: str = "",
               engine_version: str = "", feature_sets: dict | None = None) -> dict[str, dict]:
    """Fit ``e_ox`` and ``e00`` on the reference dyes computed in ``computed`` (a levels table).

    Parameters
    ----------
    computed : pandas.DataFrame
        ``levels.csv`` of a run of :func:`reference_input` (``smiles, status, xtb_*``).
    reference : path-like, optional
        The dye reference file, or the reference folder that holds it as ``dyes.csv`` (default
        :data:`REFERENCE_FILE`; :func:`reference_file`).
    protocol_id, engine_version : str
        Recorded in the fingerprint (from the levels sidecar).
    feature_sets : dict, optional
        ``{"e_ox": [[...], ...], "e00": [[...], ...]}`` to override :data:`TARGETS`.

    Returns
    -------
    dict
        ``{"e_ox": {...}, "e00": {...}}``, each with a ``fingerprint``.
    """
    ref_path = reference_file(reference)
    data = join_computed(reference_table(ref_path), computed)
    elements = sorted(set().union(*(elements_of(s) for s in data["smiles"]))) if len(data) else []
    # the data by their hash only: a model file carries no path of one machine (the file is named beside the models,
    # REFERENCE_RECORD, by save_models)
    fp = {"protocol_id": protocol_id, "engine_version": engine_version, "reference": ref_path.name,
          "reference_sha256": sha256_file(ref_path), "versions": library_versions()}
    out = {}
    for name in TARGETS:
        model = fit_target(name, data, (feature_sets or {}).get(name))
        model["elements"] = elements
        model["fingerprint"] = fp
        out[name] = model
    return out


#: the file beside a folder's dye models that names the dye reference file they were fitted on (:func:`save_models`;
#: not a model file, so no model carries one machine's path; models fitted on the shipped file have none)
REFERENCE_RECORD = "reference_file.json"


def _recorded_file(folder: Path, sha) -> str | None:
    """The dye reference file named beside the models of ``folder`` (:data:`REFERENCE_RECORD`) for data of ``sha``;
    else the ``reference_file`` of their fingerprint (model files written before the record existed)."""
    try:
        record = read_json(folder / REFERENCE_RECORD)
        if record.get("reference_sha256") == sha and record.get("reference_file"):
            return str(record["reference_file"])
    except (OSError, ValueError, AttributeError):
        pass
    try:
        return (read_json(folder / "e_ox.json").get("fingerprint") or {}).get("reference_file") or None
    except (OSError, ValueError, AttributeError):
        return None


def fitted_on(folder: str | Path) -> str | None:
    """The dye reference file the dye models of ``folder`` were fitted on, in words (None without a readable
    ``e_ox.json``): the file named beside them (:data:`REFERENCE_RECORD`) while it holds those data, the shipped
    :data:`REFERENCE_FILE` when they are its data, else the SHA-256 of the data.

    Examples
    --------
    >>> fitted_on(model_folder("tblite-gfn2-ff-eaf1c554")) == str(REFERENCE_FILE)
    True
    """
    try:
        fp = read_json(Path(folder) / "e_ox.json").get("fingerprint") or {}
    except (OSError, ValueError, AttributeError):
        return None
    sha = fp.get("reference_sha256")
    recorded = _recorded_file(Path(folder), sha)
    for candidate in (recorded, REFERENCE_FILE):
        if candidate and Path(candidate).is_file() and sha256_file(candidate) == sha:
            return str(candidate)
    if recorded:
        return f"{recorded} as it was then (SHA-256 {str(sha)[:12]}\u2026; it holds other data now)"
    return f"a dye reference file of SHA-256 {str(sha)[:12]}\u2026"


def model_folder(protocol_id: str, root: str | Path | None = None) -> Path:
    """``models/dyecell/<protocol-id>`` (the folder of one protocol's dye models)."""
    return Path(root or MODELS_DIR) / protocol_id


def save_models(models: dict[str, dict], root: str | Path | None = None,
                reference: str | Path | None = None) -> Path:
    """Write ``<root>/<protocol-id>/e_ox.json`` and ``e00.json``; return the folder.

    ``reference``: the dye reference file (or its folder, :func:`reference_file`) the models were fitted on, named
    beside them (:data:`REFERENCE_RECORD`) when it holds their data and is not the shipped :data:`REFERENCE_FILE`
    (found by its hash); a record of other data is removed.
    """
    fp = models["e_ox"]["fingerprint"]
    pid = fp["protocol_id"] or "unknown-protocol"
    folder = model_folder(pid, root)
    for name, model in models.items():
        write_json(model, folder / f"{name}.json")
    record = folder / REFERENCE_RECORD
    path = None if reference is None else reference_file(reference)
    if path is None or not path.is_file() or path.resolve() == REFERENCE_FILE.resolve() \
            or sha256_file(path) != fp.get("reference_sha256"):
        record.unlink(missing_ok=True)
    else:
        write_json({"reference_file": str(path.resolve()), "reference_sha256": fp["reference_sha256"]}, record)
    return folder


def load_models(protocol_id: str | None, root: str | Path | None = None, *, folder: str | Path | None = None,
                reference: str | Path | None = None) -> dict[str, dict]:
    """Load the dye models of a protocol and check that they belong to it.

    Parameters
    ----------
    protocol_id : str or None
        Protocol of the levels to be converted (None: no check; only with ``folder``).
    root : path-like, optional
        Models root (default :data:`MODELS_DIR`).
    folder : path-like, optional
        An explicit model folder.
    reference : path-like, optional
        Reference file whose hash the models must carry (default: no check).

    Raises
    ------
    ConfigError
        Missing files, or a model of another protocol (or reference data), with
        how to refit.
    """
    folder = Path(folder) if folder is not None else model_folder(protocol_id or "", root)
    out = {}
    for name in TARGETS:
        path = folder / f"{name}.json"
        if not path.is_file():
            raise ConfigError(f"dye model {path} is missing: `dascreen dyecell --refit` computes the dye reference "
                              "set with this protocol and installs the models")
        out[name] = read_json(path)
        fp = out[name].get("fingerprint", {})
        if protocol_id and fp.get("protocol_id") != protocol_id:
            raise ConfigError(f"dye model {path} was fitted for protocol {fp.get('protocol_id')!r}, but the levels "
                              f"were computed with {protocol_id!r}; refit with `dascreen dyecell --refit` (computes the dye "
                              "reference set with this protocol)")
        if reference is not None and fp.get("reference_sha256") != sha256_file(reference):
            raise ConfigError(f"dye model {path} was fitted on other reference data than {reference}; fit dye models "
                              "on it into a folder of your own (`dascreen dyecell --refit --models DIR` with the same "
                              "calibration.reference) and rank with --models DIR, or leave calibration.reference "
                              "at the shipped data")
    return out


# --------------------------------------------------------------------------- using the models

def apply_models(levels: pd.DataFrame, models: dict[str, dict]) -> pd.DataFrame:
    """E(S⁺/S), E₀₋₀ and their σ for every computed row of a levels table.

    Parameters
    ----------
    levels : pandas.DataFrame
        A run's ``levels.csv`` (``status`` and raw ``xtb_*`` columns).
    models : dict
        From :func:`load_models` or :func:`fit_models`.

    Returns
    -------
    pandas.DataFrame
        Same rows: ``e_ox_v_nhe`` [V vs NHE], ``e_ox_sigma_v`` [V], ``e00_ev``
        [eV], ``e00_sigma_ev`` [eV] (NaN where not computed), ``outside_calibration``
        (bool: more than 0.1 V/eV outside the fitted range), ``scale``
        (``electrochemical`` on computed rows), ``reference_similarity`` [0–1] and
        ``unlike_reference_dyes`` (bool; :func:`dye_reference_similarity`).

    Raises
    ------
    ConfigError
        A feature the models need is not in the levels (e.g. ``xtb_k_hl_ev``
        from a newer protocol).
    """
    out = pd.DataFrame(index=levels.index)
    ok = (levels["status"].astype(str).eq("ok") if "status" in levels else pd.Series(True, index=levels.index))
    outside = np.zeros(len(levels), dtype=bool)
    for name, spec in TARGETS.items():
        m = models[name]
        model = LinearLevelModel.from_dict(m["model"])
        missing = [c for c in needed_columns(model.features) if c not in levels]
        if missing:
            raise ConfigError(f"the dye model {name} needs levels column(s) {missing}; the levels file lacks them "
                              "(computed with another protocol or not a run's levels.csv)")
        X = feature_matrix(levels, model.features)
        good = ok.to_numpy() & np.all(np.isfinite(X), axis=1)
        mean = np.full(len(levels), np.nan)
        std = np.full(len(levels), np.nan)
        if good.any():
            mu, sd = model.predict(X[good], return_std=True)
            if "smiles" in levels:  # wider for dyes unlike the reference dyes (screen.calibration.domain)
                sd = domain_std(m.get("domain"), model.sigma_, sd, levels["smiles"].to_numpy()[good],
                                [r["smiles"] for r in m["residuals"]])
            mean[good], std[good] = mu, sd
        lo, hi = m.get("target_range", [-np.inf, np.inf])
        with np.errstate(invalid="ignore"):
            outside |= (mean < lo - 0.1) | (mean > hi + 0.1)
        out[spec["column"]] = np.round(mean, WRITTEN_DECIMALS)
        out[spec["sigma"]] = np.round(std, WRITTEN_DECIMALS)
    out["outside_calibration"] = outside
    out["scale"] = np.where(np.isfinite(out["e_ox_v_nhe"]) & np.isfinite(out["e00_ev"]), "electrochemical", "")
    smiles = levels["smiles"] if "smiles" in levels else pd.Series("", index=levels.index)
    computed = ok.to_numpy() & np.isfinite(out["e_ox_v_nhe"].to_numpy(float))
    out["reference_similarity"], out["unlike_reference_dyes"] = dye_reference_similarity(
        smiles, [r["smiles"] for r in models["e_ox"].get("residuals", []) if r.get("smiles")], computed)
    return out


def dye_reference_similarity(smiles, reference_smiles, computed=None) -> tuple[np.ndarray, np.ndarray]:
    """Nearest-neighbour similarity of each dye to the calibration dyes, and whether it is below the threshold.

    The similarity is :func:`screen.calibration.domain.nearest_similarity` on bits (2048-bit Morgan r = 2, alkyl
    groups cut to methyl), the one behind the bulk-heterojunction column ``reference_similarity``; an element that
    no calibration dye contains gives 0, as in the σ of the ``e_ox`` model. A dye is unlike the calibration dyes
    below :data:`screen.flags.FAR_FROM_REFERENCE_SIMILARITY` (0.30, judged on the written value): its E(S⁺/S) and
    E₀₋₀ are extrapolations whose σ may understate the error (an audit found a BODIPY dye predicted 1.37 V vs NHE
    against about 1.75 V measured, from memory; the E₀₋₀ model's σ does not grow with dissimilarity at all).

    Parameters
    ----------
    smiles : sequence of str
        The dyes' structures (empty or unreadable: not judged).
    reference_smiles : sequence of str
        The dyes the ``e_ox`` model was fitted on (the ``smiles`` of its ``residuals``).
    computed : array_like of bool, optional
        Rows to judge (default: all); the others get NaN and False.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        ``reference_similarity`` [0–1, :data:`SIMILARITY_DECIMALS` decimals; NaN where not judged] and
        ``unlike_reference_dyes`` (bool).

    Examples
    --------
    >>> sim, far = dye_reference_similarity(["OC(=O)c1ccccc1", "c1ccc2ccccc2c1", "OC(=O)c1ccc(B(O)O)cc1", "", "C1CC"],
    ...                                     ["OC(=O)c1ccccc1", "OC(=O)c1ccc(O)cc1"])
    >>> sim.tolist(), far.tolist()
    ([1.0, 0.29, 0.0, nan, nan], [False, True, True, False, False])
    """
    cells = ["" if not isinstance(s, str) else s.strip() for s in smiles]
    judge = np.ones(len(cells), bool) if computed is None else np.asarray(computed, bool).copy()
    judge &= np.array([bool(s) and fingerprint(s) is not None for s in cells], dtype=bool)
    sim = np.full(len(cells), np.nan)
    refs = [s for s in reference_smiles if isinstance(s, str) and s.strip()]
    if judge.any() and refs:
        sim[judge] = np.round(nearest_similarity([cells[i] for i in np.flatnonzero(judge)], refs),
                              SIMILARITY_DECIMALS) + 0.0
    with np.errstate(invalid="ignore"):
        far = sim < FAR_FROM_REFERENCE_SIMILARITY
    return sim, far


def refit(levels_path: str | Path, reference: str | Path | None = None, root: str | Path | None = None,
          feature_sets: dict | None = None) -> Path:
    """Fit the dye models on a computed reference set and install them under ``root/<protocol-id>/``.

    Parameters
    ----------
    levels_path : path-like
        ``levels.csv`` of a ``dascreen run`` of :func:`reference_input` (its
        sidecar names the protocol).
    reference, root, feature_sets
        See :func:`fit_models` (``reference``: the dye reference file or its reference folder, as
        ``calibration.reference`` names it; its rows are checked and converted by :func:`reference_table`) and
        :func:`save_models`.

    Returns
    -------
    pathlib.Path
        The model folder.
    """
    levels_path = Path(levels_path)
    side = Path(f"{levels_path}.meta.json")
    meta = read_json(side) if side.is_file() else {}
    pid = meta.get("protocol_id") or ""
    if not pid:
        raise ConfigError(f"{levels_path}: no protocol id in {side.name}; refit from a dascreen run's levels.csv")
    engine = ((meta.get("protocol") or {}).get("electronic") or {}).get("engine", "tblite")
    version = (meta.get("versions") or {}).get(engine) or library_versions().get(engine, "absent")
    computed = pd.read_csv(levels_path, keep_default_na=False, na_values=[""])
    models = fit_models(computed, reference, protocol_id=pid, engine_version=".".join(str(version).split(".")[:2]),
                        feature_sets=feature_sets)
    return save_models(models, root, reference=reference_file(reference))
