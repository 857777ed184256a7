"""Benchmark: is the per-material σ right out of fold, with the bit or the count fingerprint, or a constant σ?

The σ of a calibrated level grows as a candidate looks less like the reference rows
(:mod:`screen.calibration.domain`): σ_d² = exp(α + β·(1 − s)), s the nearest-neighbour Tanimoto similarity
on a Morgan fingerprint, kept over a constant variance only when its leave-one-out (LOO) log predictive density
is better. The bit form cannot tell a longer homologue from a shorter one (hexacene vs pentacene: 1.0); the count
form can. This script scores three σ per model (``ip``, ``ea``, ``homo_film``, ``lumo_film``, ``gap_opt_film``):

* ``bit``: the variance model on bit-fingerprint similarity (:func:`~screen.calibration.domain.fit_domain` with
  :func:`~screen.calibration.domain.reference_similarity` ``kind="bit"``), kept or not by its own rule;
* ``count``: the same on the count fingerprint (what :func:`screen.calibrate.fit_all` ships);
* ``constant``: the linear model's ordinary prediction interval (a domain entry of kind ``constant``).

Out of fold: the reference structures are dealt into ``--folds`` folds as in the nested CV of
``calibration_accuracy.py`` (same seed, one structure held out of every set at once); inside each fold the whole
calibration (:func:`screen.calibrate.fit_all`: feature sets, film route, red shift) and the variance model with
its keep-vs-constant rule are fitted on the other folds, and the held-out rows are predicted by
:func:`screen.calibrate.apply_models` (σ with leverage, chain-limit and conformer terms, as a user gets it).

Usage (from the repository root)::

    .venv/bin/python benchmarks/sigma_out_of_fold.py [--models models/<protocol-id>] [--folds 10]

Uses the stored raw values of the model folder (``reference_raw.csv``, polymers at the chain limit) and the
reference sets; no quantum chemistry. Fold fits are kept in memory only. About a minute on one core (one
:func:`fit_all` per fold plus one on all rows). Prints

* per model and σ: out-of-fold mean negative log predictive density (NLPD, nats per row, lower is better),
  the share of errors within ±1σ and ±2σ (0.68 and 0.95 for a calibrated normal σ), Spearman ρ(σ, |error|),
  the mean σ and in how many folds the similarity term was kept;
* the paired per-row NLPD differences count − bit, bit − constant and count − constant with their standard errors;
* plain LOO on the full fit: the LOO NLPD of the constant, bit and count variance models (what the shipped choice
  rule sees), their α, β and the choice;
* the bit and count similarity of hexacene and heptacene to pentacene, C70 to C60 and 8T to 6T, and σ_d of
  each model (bit → count) for them against its reference rows, their own structure left out.

Ends with one ``key=value`` line.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.stats import spearmanr

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from calibration_accuracy import NESTED, model_folder, nested_targets, structure_folds  # noqa: E402

from screen.calibrate import apply_models, fit_all, read_reference  # noqa: E402
from screen.calibration.domain import (domain_variance, fit_domain, nearest_similarity,  # noqa: E402
                                      reference_similarity)
from screen.calibration.reference import canonical  # noqa: E402

#: σ variants scored: a fingerprint kind, or the plain prediction interval
VARIANTS = ("bit", "count", "constant")
#: predicted value and σ column of :func:`apply_models` per model
PREDICTED = {"ip": ("ip_ev", "ip_sigma_ev"), "ea": ("ea_ev", "ea_sigma_ev"), "homo_film": ("homo_ev", "homo_sigma_ev"),
             "lumo_film": ("lumo_ev", "lumo_sigma_ev"), "gap_opt_film": ("gap_opt_ev", "gap_opt_sigma_ev")}
#: paired per-row NLPD differences printed (a − b)
PAIRS = (("count", "bit"), ("bit", "constant"), ("count", "constant"))
PENTACENE = "c1ccc2cc3cc4cc5ccccc5cc4cc3cc2c1"
HEXACENE = "c1ccc2cc3cc4cc5cc6ccccc6cc5cc4cc3cc2c1"
HEPTACENE = "c1ccc2cc3cc4cc5cc6cc7ccccc7cc6cc5cc4cc3cc2c1"


def oligothiophene(n: int) -> str:
    """SMILES of the α-linked n-mer of thiophene (n ≥ 2), written as the reference 6T row."""
    return "c1csc(c1)" + "-c1ccc(s1)" * (n - 2) + "-c1cccs1"


def domain(record: dict, kind: str) -> dict:
    """The variance model of ``record`` on fingerprint ``kind``: ``constant`` → a constant entry; the record's own
    when it was fitted on that kind, otherwise :func:`fit_domain` on its LOO residuals (as ``fit_all`` does)."""
    if kind == "constant":
        return {"kind": "constant"}
    own = record.get("domain") or {}
    if own.get("similarity") == kind:
        return own
    smiles = [r["smiles"] for r in record["residuals"]]
    loo = np.array([r["loo_ev"] - r["measured_ev"] for r in record["residuals"]], float)
    return fit_domain(reference_similarity(smiles, kind), loo, fingerprint_kind=kind)


def nlpd(err, sigma) -> np.ndarray:
    """Per-row negative log predictive density of a normal N(0, σ²) at the error [nats]."""
    err, sigma = np.asarray(err, float), np.asarray(sigma, float)
    return 0.5 * np.log(2 * np.pi * sigma**2) + 0.5 * (err / sigma) ** 2


def out_of_fold(sets: dict, raw: pd.DataFrame, folds: int, seed: int = 0) -> tuple[pd.DataFrame, dict]:
    """Held-out rows with error and σ per variant, and per model and variant the folds that kept the term.

    Folds as :func:`calibration_accuracy.nested_cv` deals them (:func:`calibration_accuracy.structure_folds`:
    distinct canonical structures, seeded shuffle).
    """
    targets = nested_targets(sets, raw)
    fold_of, fold = structure_folds(targets, folds, seed)

    rows, kept = [], {(name, v): 0 for name in NESTED for v in VARIANTS}
    for k in range(folds):
        t0 = time.perf_counter()
        fitted = fit_all(sets, raw, exclude=lambda n, s, k=k: fold(s) == k)
        doms = {name: {v: domain(fitted[name], v) for v in VARIANTS} for name in NESTED}
        for v in VARIANTS:
            # every model's σ on this variant (a film level of kind 'shift' takes the gas model's σ)
            models = {n: {**rec, "domain": doms[n][v]} if n in doms else rec for n, rec in fitted.items()}
            for name, rows_ in targets.items():
                held = rows_[rows_["_can"].map(fold_of) == k]
                if not len(held):
                    continue
                kept[(name, v)] += doms[name][v]["kind"] == "similarity"
                pred = apply_models(held, models, "film")
                mean, sigma = (pred[c].to_numpy(float) for c in PREDICTED[name])
                err = mean - held["_y"].to_numpy(float)
                rows += [{"model": name, "variant": v, "fold": k, "row": i, "name": nm, "err": e, "sigma": s}
                         for i, (nm, e, s) in enumerate(zip(held["name"], err, sigma))]
        print(f"  fold {k + 1}/{folds} fitted and scored in {time.perf_counter() - t0:.0f} s", flush=True)
    return pd.DataFrame(rows), kept


def _params(d: dict) -> str:
    """α, β of a kept variance model; for one turned down, the constant σ_d it would give."""
    if d["kind"] == "similarity":
        return f"{d['alpha']:6.2f}, {d['beta']:5.2f}, kept"
    return f"no (σ_d {math.exp(d['alpha'] / 2):.3f} eV)"


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--models", default=None, help="model folder (default: the shipped default-protocol one)")
    parser.add_argument("--folds", type=int, default=10, help="folds by structure (at least 2)")
    args = parser.parse_args(argv)
    if args.folds < 2:
        parser.error("--folds must be at least 2")
    start = time.perf_counter()
    folder = model_folder(args.models)
    raw = pd.read_csv(folder / "reference_raw.csv", keep_default_na=False, na_values=[""])
    sets = read_reference(REPO / "models" / "reference")
    print(f"models: {folder}; {args.folds} folds by structure; σ variants: {', '.join(VARIANTS)}")
    oof, kept = out_of_fold(sets, raw, args.folds)
    oof["nlpd"] = nlpd(oof["err"], oof["sigma"])
    summary: dict[str, object] = {"folds": args.folds}

    print(f"\nOUT OF FOLD ({args.folds} folds by structure; fit_all, variance model and its choice inside each fold)")
    print(f"  {'model':13s} {'σ':9s} {'n':>4s} {'NLPD':>7s} {'in±1σ':>6s} {'in±2σ':>6s} {'ρ(σ,|e|)':>8s} "
          f"{'mean σ':>7s} {'kept':>6s}")
    for name in NESTED:
        for v in VARIANTS:
            d = oof[(oof["model"] == name) & (oof["variant"] == v)]
            z = np.abs(d["err"] / d["sigma"])
            rho = float(spearmanr(d["sigma"], d["err"].abs()).statistic)
            kept_txt = f"{kept[(name, v)]}/{args.folds}" if v != "constant" else ""
            print(f"  {name:13s} {v:9s} {len(d):4d} {d['nlpd'].mean():7.3f} {np.mean(z <= 1):6.2f} "
                  f"{np.mean(z <= 2):6.2f} {rho:8.2f} {d['sigma'].mean():7.3f} {kept_txt:>6s}")
            summary[f"{name}_nlpd_{v}"] = round(float(d["nlpd"].mean()), 3)
            summary[f"{name}_in2_{v}"] = round(float(np.mean(z <= 2)), 2)
    print("\npaired per-row out-of-fold NLPD differences [nats per row] ± standard error (negative: first is better)")
    wide = oof.pivot_table(index=["model", "fold", "row"], columns="variant", values="nlpd")
    for name in NESTED:
        w = wide.loc[name]
        cells = []
        for a, b in PAIRS:
            diff = (w[a] - w[b]).to_numpy(float)
            mean, se = float(diff.mean()), float(diff.std(ddof=1) / math.sqrt(len(diff)))
            cells.append(f"{a} − {b} {mean:+.3f} ± {se:.3f}")
            if (a, b) != ("count", "constant"):
                summary[f"{name}_d_{a}_{b}"] = round(mean, 3)
                summary[f"{name}_d_{a}_{b}_se"] = round(se, 3)
        print(f"  {name:13s} (n={len(w)})  " + "   ".join(cells))

    full = fit_all(sets, raw)
    doms = {name: {v: domain(full[name], v) for v in ("bit", "count")} for name in NESTED}
    print("\nPLAIN LOO on the full fit (variance model refitted without each row; σ_d alone, as fit_domain scores it)")
    print(f"  {'model':13s} {'n':>4s} {'constant':>8s} {'bit':>7s} {'count':>7s}   {'bit: α, β':24s} "
          f"{'count: α, β':24s}")
    for name in NESTED:
        b, c = doms[name]["bit"], doms[name]["count"]
        print(f"  {name:13s} {b['n']:4d} {b['loo_nlpd_constant']:8.3f} {b['loo_nlpd_similarity']:7.3f} "
              f"{c['loo_nlpd_similarity']:7.3f}   {_params(b):24s} {_params(c):24s}")
        summary[f"{name}_loo_kept_bit"] = int(b["kind"] == "similarity")
        summary[f"{name}_loo_kept_count"] = int(c["kind"] == "similarity")

    named = {str(n): s for n, s in zip(sets["ea"]["name"], sets["ea"]["smiles"])}
    cases = [("hexacene", HEXACENE, "pentacene", PENTACENE), ("heptacene", HEPTACENE, "pentacene", PENTACENE),
             ("C70", named.get("C70"), "C60", named.get("C60")), ("8T", oligothiophene(8), "6T", oligothiophene(6))]
    print("\nhomologues: similarity to the shorter one (bit, count), and σ_d [eV] of each model bit → count against "
          "its reference rows, the own structure left out (c: that variance model is not kept, a constant σ applies)")
    for label, query, ref_label, ref in cases:
        if not query or not ref:
            continue
        s_bit, s_count = (float(nearest_similarity([query], [ref], kind)[0]) for kind in ("bit", "count"))
        cells = []
        for name in NESTED:
            own = canonical(query)
            refs = [r["smiles"] for r in full[name]["residuals"] if canonical(r["smiles"]) != own]
            sig = {}
            for kind in ("bit", "count"):
                d = doms[name][kind]
                sigma_d = math.sqrt(float(domain_variance(d, nearest_similarity([query], refs, kind))[0]))
                sig[kind] = f"{sigma_d:.3f}{'' if d['kind'] == 'similarity' else 'c'}"
            cells.append(f"{name} {sig['bit']}→{sig['count']}")
        print(f"  {label:9s} vs {ref_label:9s} bit {s_bit:.2f} count {s_count:.2f} | " + "  ".join(cells))
        summary[f"s_count_{label}_{ref_label}"] = round(s_count, 2)
    summary["runtime_s"] = round(time.perf_counter() - start)
    print(" ".join(f"{k}={v}" for k, v in summary.items()))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
