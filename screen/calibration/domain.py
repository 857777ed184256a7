"""Applicability domain: a σ that grows as a candidate looks less like the reference materials.

A linear model's prediction interval widens only with the leverage of the
candidate's few raw features, which is small for nearly every molecule: the ±
values came out almost the same for every row. The reference sets show where
errors really come from: their leave-one-out errors grow as a material has less
in common with the rest of the set (nearest-neighbour similarity below 0.3: RMS
LOO error of the film LUMO 0.48 eV, above 0.6: 0.20 eV; EA 0.47 vs 0.16 eV) —
the pattern Sheridan et al. [1]_ found for QSAR models, where similarity to the
training set is a good discriminator of prediction accuracy.

So each model gets a variance that depends on the nearest-neighbour similarity s
of a candidate to the model's reference rows,

.. math:: \\sigma_d^2(s) = \\exp[\\alpha + \\beta\\,(1 - s)], \\qquad \\beta \\ge 0,

fitted by maximum likelihood to the LOO residuals (each reference row's s taken
against the rows with another structure), and kept only when it predicts the
held-out residuals better than a constant variance does (leave-one-out mean
negative log predictive density, lower by at least :data:`MIN_NLPD_GAIN`); the
σ of a prediction is then ``sqrt(σ_d(s)² + σ_res²·h)`` with h the candidate's
leverage (:func:`screen.calibrate.apply_models`). Otherwise the model keeps its
ordinary prediction interval.

Similarity: Tanimoto on Morgan fingerprints (radius 2, [2]_) of the structure with
every alkyl group cut to a methyl, so side chains (cut to methyl in the reference
rows, written in full by users) do not count; a polymer repeat unit is fingerprinted
with its attachment points as hydrogens. The σ models use the *count* form (how often
each atom environment occurs; Tanimoto on counts): the 2048-bit form only records
whether an environment occurs, so it cannot tell a longer homologue from a shorter
one (hexacene and heptacene against pentacene, C70 against C60, 8T against 6T: all
1.0), and a candidate beyond the longest reference homologue got the smallest σ. With
counts hexacene and heptacene sit at 0.85 and 0.73 to pentacene, C70 at 0.86 to C60,
8T at 0.75 to 6T. A statistician's check, out of fold (10 folds by structure, the
whole calibration and the σ model fitted inside each), found the count form's log
predictive density better for the film optical gap (by 0.08 ± 0.03 nats per row) and
level with the bit form for the other models (``benchmarks/sigma_out_of_fold.py``).
A polymer query is compared on bits (a repeat unit written twice would otherwise
count double and lose similarity to itself). The levels column ``reference_similarity``
and the ``far_from_reference`` flag stay on bits (their 0.30 threshold was set on them).

References
----------
.. [1] R. P. Sheridan, B. P. Feuston, V. N. Maiorov, S. K. Kearsley, "Similarity to
   molecules in the training set is a good discriminator for prediction accuracy
   in QSAR", J. Chem. Inf. Comput. Sci. 44 (2004) 1912. :doi:`10.1021/ci049782w`
.. [2] D. Rogers, M. Hahn, "Extended-connectivity fingerprints", J. Chem. Inf.
   Model. 50 (2010) 742. :doi:`10.1021/ci100050t`

Examples
--------
>>> round(float(nearest_similarity(["c1ccc2ccccc2c1"], ["c1ccc2cc3ccccc3cc2c1", "c1ccsc1"])[0]), 2)
0.64
>>> float(nearest_similarity(["CCCCCCc1ccsc1", "CCC(CC)COc1ccsc1"], ["Cc1ccsc1", "COc1ccsc1"])[1])
1.0
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

__all__ = ["MIN_NLPD_GAIN", "FINGERPRINTS", "fingerprint", "elements", "nearest_similarity", "reference_similarity",
           "fit_domain", "domain_variance", "domain_std"]

#: least LOO improvement of the mean negative log predictive density [nats per residual] for the similarity term
MIN_NLPD_GAIN = 0.01
#: the fingerprints by kind, as recorded in a model's ``domain`` entry
FINGERPRINTS = {"bit": "morgan r=2, 2048 bits, alkyl groups cut to methyl",
                "count": "morgan r=2, counts (Tanimoto on counts; a polymer query on bits), alkyl groups cut to methyl"}


@lru_cache(maxsize=100_000)
def _prepared(smiles: str):
    """``(molecule, is_polymer)`` ready to fingerprint (attachment points as H, alkyl groups as methyl), or None."""
    from rdkit import Chem, RDLogger

    RDLogger.DisableLog("rdApp.*")
    mol = Chem.MolFromSmiles(str(smiles))
    if mol is None:
        return None
    polymer = any(a.GetAtomicNum() == 0 for a in mol.GetAtoms())
    if polymer:
        rw = Chem.RWMol(mol)
        for atom in rw.GetAtoms():
            if atom.GetAtomicNum() == 0:
                atom.SetAtomicNum(1)
                atom.SetIsotope(0)
                atom.SetAtomMapNum(0)
        try:
            mol = Chem.RemoveHs(rw.GetMol())
        except Exception:  # noqa: BLE001 - an attachment point RDKit cannot make a hydrogen: fingerprint as written
            pass
    return _alkyl_to_methyl(mol), polymer


@lru_cache(maxsize=100_000)
def fingerprint(smiles: str, kind: str = "bit"):
    """Morgan fingerprint of ``smiles`` (attachment points as H, alkyl groups as methyl); None if unparsable.

    ``kind`` is ``bit`` (2048 bits) or ``count`` (sparse counts of each environment).

    Every attachment point counts as a hydrogen however it is written: ``[*]``, ``[*:1]`` (the reference
    files) or a bare ``*`` (the canonical SMILES of levels.csv; a polymer audit found a candidate identical to
    a reference polymer at similarity 0.61, its dummy atoms fingerprinted as atoms, and its σ widened by it).

    Examples
    --------
    >>> fingerprint("*c1ccc(*)s1") == fingerprint("[*]c1ccc([*])s1") == fingerprint("[*:1]c1ccc([*:2])s1")
    True
    """
    prepared = _prepared(str(smiles))
    if prepared is None:
        return None
    mol = prepared[0]
    return _generator().GetSparseCountFingerprint(mol) if kind == "count" else _generator().GetFingerprint(mol)


@lru_cache(maxsize=100_000)
def elements(smiles: str) -> frozenset:
    """Element symbols of a SMILES, hydrogen and attachment points left out (empty if unparsable).

    Examples
    --------
    >>> sorted(elements("[*]c1ccc(B(O)O)s1"))
    ['B', 'C', 'O', 'S']
    """
    prepared = _prepared(str(smiles))
    if prepared is None:
        return frozenset()
    return frozenset(a.GetSymbol() for a in prepared[0].GetAtoms() if a.GetAtomicNum() > 1)


def _is_polymer(smiles: str) -> bool:
    prepared = _prepared(str(smiles))
    return bool(prepared and prepared[1])


def _alkyl_to_methyl(mol):
    """Every acyclic sp³-carbon group cut to a methyl on the atom it hangs from (a molecule of it stays)."""
    from rdkit import Chem

    def alkyl(atom):
        return (atom.GetSymbol() == "C" and not atom.IsInRing() and atom.GetFormalCharge() == 0
                and atom.GetHybridization() == Chem.HybridizationType.SP3)

    drop = [a.GetIdx() for a in mol.GetAtoms()
            if alkyl(a) and a.GetDegree() > 0 and all(alkyl(n) for n in a.GetNeighbors())]
    if not drop or len(drop) == mol.GetNumAtoms():
        return mol
    rw = Chem.RWMol(mol)
    for idx in sorted(drop, reverse=True):
        rw.RemoveAtom(idx)
    out = rw.GetMol()
    for atom in out.GetAtoms():
        atom.SetNoImplicit(False)
    try:
        Chem.SanitizeMol(out)
    except Exception:  # noqa: BLE001 - an odd valence after the cut: fingerprint the molecule as written
        return mol
    return out


@lru_cache(maxsize=1)
def _generator():
    from rdkit.Chem import rdFingerprintGenerator

    return rdFingerprintGenerator.GetMorganGenerator(radius=2, fpSize=2048)


def _canonical(smiles: str) -> str:
    """Canonical SMILES (:func:`screen.chem.canonical_form`), or the text itself when it does not parse."""
    from rdkit import Chem

    from screen.chem import canonical_form

    mol = Chem.MolFromSmiles(str(smiles))
    return canonical_form(mol)[0] if mol is not None else str(smiles)


def _query_kind(smiles: str, kind: str) -> str:
    """The fingerprint a query is compared with: a polymer repeat unit on bits."""
    return "bit" if kind == "count" and _is_polymer(smiles) else kind


def nearest_similarity(query, reference, kind: str = "bit", covered=None) -> np.ndarray:
    """Largest Tanimoto similarity of each query SMILES to the reference SMILES (0 if unparsable).

    A query that contains an element outside ``covered`` gets 0: the fingerprint of its phenyl rings can make a
    triphenylborane or an iodobenzene look 0.3–0.4 like the reference rows, but the calibration has never seen
    boron or iodine, so nothing of it is covered (a structure audit found such rows with the σ of a well-covered
    molecule and no flag).

    Parameters
    ----------
    query, reference : sequence of str
        SMILES (polymer repeat units allowed).
    kind : {'bit', 'count'}
        The fingerprint (:data:`FINGERPRINTS`); with ``count`` a polymer query is compared on bits.
    covered : set of str, optional
        Element symbols the calibration has seen (:func:`elements`); default: those of ``reference``. A
        calibration passes the elements of all its reference sets, so that one model's set without sulfur (the
        gas-phase EAs) does not make every thiophene look unlike it.

    Returns
    -------
    numpy.ndarray
        One value in [0, 1] per query.

    Examples
    --------
    >>> acenes = ["c1ccc2cc3cc4cc5ccccc5cc4cc3cc2c1"]  # pentacene
    >>> hexacene = "c1ccc2cc3cc4cc5cc6ccccc6cc5cc4cc3cc2c1"
    >>> float(nearest_similarity([hexacene], acenes)[0])
    1.0
    >>> round(float(nearest_similarity([hexacene], acenes, "count")[0]), 2)
    0.85
    >>> nearest_similarity(["c1ccc(cc1)B(c1ccccc1)c1ccccc1", "Cc1ccccc1"], ["c1ccccc1"]).round(2).tolist()
    [0.0, 0.27]
    """
    from rdkit import DataStructs

    refs = {k: [fp for fp in (fingerprint(s, k) for s in reference) if fp is not None] for k in {"bit", kind}}
    out = np.zeros(len(query))
    if not refs["bit"]:
        return out
    if covered is None:
        covered = frozenset().union(*(elements(s) for s in reference))
    for i, s in enumerate(query):
        k = _query_kind(s, kind) if isinstance(s, str) and s else kind
        fp = fingerprint(s, k) if isinstance(s, str) and s else None
        if fp is not None and elements(s) <= covered:
            out[i] = max(DataStructs.BulkTanimotoSimilarity(fp, refs[k]))
    return out


def reference_similarity(smiles, kind: str = "bit") -> np.ndarray:
    """Each reference row's nearest-neighbour similarity to the rows with another structure (LOO-style).

    ``kind`` is the fingerprint, ``bit`` or ``count`` (:data:`FINGERPRINTS`; with ``count`` a polymer row is
    compared on bits, as in :func:`nearest_similarity`); one value in [0, 1] per row.
    """
    from rdkit import DataStructs

    smiles = list(smiles)
    canon = [_canonical(s) for s in smiles]
    fps = {k: [fingerprint(s, k) for s in smiles] for k in {"bit", kind}}
    out = np.zeros(len(smiles))
    for i, s in enumerate(smiles):
        k = _query_kind(s, kind)
        fp = fps[k][i]
        if fp is None:
            continue
        others = [g for j, g in enumerate(fps[k]) if g is not None and canon[j] != canon[i]]
        if others:
            out[i] = max(DataStructs.BulkTanimotoSimilarity(fp, others))
    return out


def _nll(params, d, r2):
    """Mean Gaussian negative log-likelihood of residuals² ``r2`` with variance exp(α + β·d) [nats, no 2π term]."""
    log_var = params[0] + params[1] * d
    return 0.5 * float(np.mean(log_var + r2 * np.exp(-log_var)))


def _fit(d: np.ndarray, r2: np.ndarray) -> tuple[float, float]:
    from scipy.optimize import minimize

    start = (math.log(max(float(np.mean(r2)), 1e-8)), 0.0)
    res = minimize(_nll, start, args=(d, r2), method="L-BFGS-B", bounds=[(None, None), (0.0, 50.0)])
    return float(res.x[0]), float(res.x[1])


def _nlpd(log_var: float, r2: float) -> float:
    return 0.5 * (math.log(2 * math.pi) + log_var + r2 * math.exp(-log_var))


def fit_domain(similarity, residual_ev, fingerprint_kind: str = "bit") -> dict:
    """Choose and fit the variance model of LOO residuals against nearest-neighbour similarity.

    Parameters
    ----------
    similarity : array_like
        Each reference row's nearest-neighbour similarity (:func:`reference_similarity`).
    residual_ev : array_like
        Its LOO residual (predicted − measured) [eV].
    fingerprint_kind : {'bit', 'count'}
        The fingerprint ``similarity`` was measured with (recorded, and used by :func:`domain_std`).

    Returns
    -------
    dict
        ``kind`` (``similarity`` or ``constant``), ``alpha``, ``beta`` (ln eV² and ln eV² per unit of
        1 − s), the LOO mean NLPD of both variance models [nats], the share of residuals within ±1 σ,
        ``n`` and the fingerprint.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> s = rng.uniform(0.2, 1.0, 200)
    >>> fit_domain(s, rng.normal(0.0, 0.1 + 0.5 * (1 - s)))["kind"]
    'similarity'
    >>> fit_domain(s, rng.normal(0.0, 0.2, 200))["kind"]
    'constant'
    """
    s = np.asarray(similarity, float)
    r = np.asarray(residual_ev, float)
    keep = np.isfinite(s) & np.isfinite(r)
    s, r = s[keep], r[keep]
    d, r2 = 1.0 - s, r**2
    n = len(r)
    loo_const, loo_sim = [], []
    for i in range(n):
        mask = np.arange(n) != i
        loo_const.append(_nlpd(math.log(max(float(np.mean(r2[mask])), 1e-12)), r2[i]))
        a, b = _fit(d[mask], r2[mask])
        loo_sim.append(_nlpd(a + b * d[i], r2[i]))
    alpha, beta = _fit(d, r2)
    const_nlpd, sim_nlpd = float(np.mean(loo_const)), float(np.mean(loo_sim))
    kind = "similarity" if beta > 0 and const_nlpd - sim_nlpd >= MIN_NLPD_GAIN else "constant"
    if kind == "constant":
        alpha, beta = math.log(float(np.mean(r2))), 0.0
    sigma = np.sqrt(np.exp(alpha + beta * d))
    return {"kind": kind, "alpha": alpha, "beta": beta, "loo_nlpd_constant": const_nlpd,
            "loo_nlpd_similarity": sim_nlpd, "within_one_sigma": float(np.mean(np.abs(r) <= sigma)),
            "n": int(n), "similarity": fingerprint_kind,
            "fingerprint": FINGERPRINTS[fingerprint_kind]}


def domain_variance(domain: dict, similarity) -> np.ndarray:
    """σ_d² [eV²] at the given nearest-neighbour similarities."""
    s = np.asarray(similarity, float)
    return np.exp(domain["alpha"] + domain["beta"] * (1.0 - s))


def domain_std(domain: dict | None, residual_sigma: float, std: np.ndarray, query_smiles,
               reference_smiles, covered=None) -> np.ndarray:
    """A linear model's σ with the applicability-domain variance in place of its constant residual variance.

    Parameters
    ----------
    domain : dict or None
        The model's ``domain`` entry (:func:`fit_domain`); without one, or of kind
        ``constant``, ``std`` is returned unchanged.
    residual_sigma : float
        The model's residual σ [eV or V].
    std : numpy.ndarray
        Its prediction-interval σ, ``residual_sigma·sqrt(1 + h)`` with h the leverage.
    query_smiles, reference_smiles : sequence of str
        The predicted rows' structures and the model's reference rows.
    covered : set of str, optional
        Element symbols the calibration has seen (:func:`nearest_similarity`).

    Returns
    -------
    numpy.ndarray
        ``sqrt(σ_d(s)² + residual_sigma²·h)`` with s the nearest-neighbour similarity.
    """
    if not domain or domain.get("kind") != "similarity":
        return std
    leverage = (np.asarray(std, float) / residual_sigma) ** 2 - 1.0
    similarity = nearest_similarity(list(query_smiles), list(reference_smiles), domain.get("similarity", "bit"),
                                    covered)
    return np.sqrt(domain_variance(domain, similarity) + residual_sigma**2 * leverage)
