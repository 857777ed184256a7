"""Benchmark: does σ tell well-covered candidates from exotic ones, and is it calibrated?

For every shipped calibration model (``models/<protocol-id>/*.json``) this prints,
from the leave-one-out residuals stored in the model file, by bins of each reference
row's nearest-neighbour similarity to the rows of other structures
(:func:`screen.calibration.domain.reference_similarity`):

* n, the RMS LOO error [eV], the σ the model now gives there (applicability-domain
  variance, :mod:`screen.calibration.domain`) and the σ before (the ordinary
  prediction interval, about the residual σ everywhere);
* the share of LOO residuals within ±1 σ (68 % for a calibrated normal σ);

and the LOO mean negative log predictive density of the constant and the
similarity-dependent variance (the choice rule). No computation: seconds.

Usage::

    .venv/bin/python benchmarks/sigma_domain.py
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from screen.calibrate import MODEL_NAMES, load_models  # noqa: E402
from screen.calibration.domain import domain_variance, reference_similarity  # noqa: E402
from screen.config import Config  # noqa: E402

BINS = [0.0, 0.3, 0.45, 0.6, 0.8, 1.01]


def main(argv=None) -> int:
    argparse.ArgumentParser(description=__doc__.splitlines()[0]).parse_args(argv)
    cfg = Config.of({})
    models = load_models(REPO / "models" / cfg.protocol_id, cfg)
    print(f"protocol {cfg.protocol_id}; similarity = nearest-neighbour Tanimoto (Morgan r=2, alkyl as methyl; the"
          " fingerprint each model's σ was fitted on, counts since 2026-12-05)")
    for name in MODEL_NAMES:
        m = models[name]
        if "domain" not in m:
            continue
        res = pd.DataFrame(m["residuals"])
        err = (res["loo_ev"] - res["measured_ev"]).to_numpy(float)
        dom = m["domain"]
        sim = reference_similarity(res["smiles"], dom.get("similarity", "bit"))
        sigma_new = np.sqrt(domain_variance(dom, sim)) if dom["kind"] == "similarity" else np.full(
            len(sim), m["model"]["residual_sigma_ev"])
        sigma_old = np.full(len(sim), m["model"]["residual_sigma_ev"])
        print(f"\n{name}: {dom['kind']} (LOO NLPD constant {dom['loo_nlpd_constant']:.3f}, "
              f"similarity {dom['loo_nlpd_similarity']:.3f} nats; alpha {dom['alpha']:.2f}, beta {dom['beta']:.2f})")
        print(f"  {'similarity':>12s} {'n':>4s} {'RMS LOO':>8s} {'σ now':>7s} {'σ before':>8s} "
              f"{'within ±1σ now':>15s} {'before':>7s}")
        cut = pd.cut(sim, BINS, right=False)
        for interval in cut.categories:
            idx = np.asarray(cut == interval)
            if not idx.any():
                continue
            e, sn, so = err[idx], sigma_new[idx], sigma_old[idx]
            print(f"  {str(interval):>12s} {idx.sum():4d} {np.sqrt(np.mean(e**2)):8.3f} {np.mean(sn):7.3f} "
                  f"{np.mean(so):8.3f} {np.mean(np.abs(e) <= sn):15.2f} {np.mean(np.abs(e) <= so):7.2f}")
        print(f"  {'all':>12s} {len(err):4d} {np.sqrt(np.mean(err**2)):8.3f} {np.mean(sigma_new):7.3f} "
              f"{np.mean(sigma_old):8.3f} {np.mean(np.abs(err) <= sigma_new):15.2f} "
              f"{np.mean(np.abs(err) <= sigma_old):7.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
