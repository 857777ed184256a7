"""Benchmark: what the rigid-embedding rule changed in the reference set (``structures.rigid_embedding``).

Until this rule existed the structures stage embedded every molecule of cycle rank 20 or more once, from
random coordinates, with no conformer search and no xTB ranking (rule ``cycle_rank``): meant for fullerene
cages, it also caught the longest oligomers of most reference polymers and the 21-ring heptafluorene. The
rule ``fused_system`` (the default since) keeps that route for a fused ring system of 20 or more rings (the
fullerenes) and gives every other molecule the ordinary conformer search.

The script compares two calibrations of the same reference data, one per rule: the earlier one read from
git (``--old-rev``, the shipped ``models/tblite-gfn2-ff-cf90d5d7`` before the change) and the new one from a
folder (``--new``, default: the installed folder of the default protocol). It prints

* the raw GFN2-xTB values of every oligomer and molecule whose route changed (ΔSCF IP and EA, orbital gap,
  film-phase IP and EA [eV], new − old), and the largest change among all the other computed structures
  (they are computed exactly as before, so it should be zero up to SCF convergence);
* the polymers' chain-limit values and fit quality, old and new;
* the leave-one-out MAE of every model, old and new, over all rows, molecules and polymers; the paired change
  of each row's |LOO error| with a bootstrap interval (is the change more than noise?); how smoothly the
  oligomer series continue (the last oligomer against the 1/n continuation of the two before it: a route that
  switches within a series shows here); and the film-level errors of the polymers, old and new.

Usage::

    .venv/bin/python benchmarks/rigid_embedding.py [--old-rev 81b7579] [--new models/<protocol-id>]
"""

from __future__ import annotations

import argparse
import io
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from screen.cage import rigid_rules_agree  # noqa: E402
from screen.config import Config  # noqa: E402

OLD_PROTOCOL = "tblite-gfn2-ff-cf90d5d7"
RAW = ("xtb_ip_ev", "xtb_ea_ev", "xtb_gap_ev", "xtb_ip_film_ev", "xtb_ea_film_ev")
MODELS = ("ip", "ea", "gap_opt", "homo_film", "lumo_film", "gap_opt_film")


def _git_text(rev: str, path: str) -> str:
    return subprocess.run(["git", "-C", str(REPO), "show", f"{rev}:{path}"], check=True, capture_output=True,
                          text=True).stdout


def read_calibration(rev: str | None, folder: str) -> dict:
    """The raw table, oligomer table and model files of a calibration folder (from git when ``rev`` is given)."""
    def text(name: str) -> str:
        return _git_text(rev, f"{folder}/{name}") if rev else (Path(folder) / name).read_text(encoding="utf-8")

    return {"raw": pd.read_csv(io.StringIO(text("reference_raw.csv"))),
            "oligomers": pd.read_csv(io.StringIO(text("reference_oligomers.csv"))),
            "models": {m: json.loads(text(f"{m}.json")) for m in MODELS}}


def structure_values(cal: dict) -> pd.DataFrame:
    """Raw values per computed structure key: molecule rows and every oligomer of the series."""
    mol = cal["raw"][cal["raw"]["representation"].eq("molecule")][["key", "name", "smiles", *RAW]]
    olig = cal["oligomers"].dropna(subset=["n"])
    olig = olig[olig["quantity"].isin(RAW)].pivot_table(index=["key", "polymer_id", "n", "smiles"],
                                                       columns="quantity", values="value").reset_index()
    olig["name"] = olig["polymer_id"] + " n=" + olig["n"].astype(int).astype(str)
    return pd.concat([mol, olig[["key", "name", "smiles", *RAW]]]).drop_duplicates("key").set_index("key")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--old-rev", default="81b7579", help="git revision holding the earlier calibration")
    ap.add_argument("--new", default=str(REPO / "models" / Config.of({}).protocol_id),
                    help="folder of the calibration with the new rule")
    args = ap.parse_args(argv)
    old = read_calibration(args.old_rev, f"models/{OLD_PROTOCOL}")
    new = read_calibration(None, args.new)

    a, b = structure_values(old), structure_values(new)
    both = a.index.intersection(b.index)
    delta = (b.loc[both, list(RAW)] - a.loc[both, list(RAW)])
    changed = [k for k in both if not rigid_rules_agree(a.loc[k, "smiles"])]
    same = [k for k in both if k not in changed]
    print(f"computed structures: {len(both)} in both; route changed for {len(changed)}; "
          f"missing from the new calibration: {len(a.index.difference(b.index))}, "
          f"new: {len(b.index.difference(a.index))}")
    pd.set_option("display.width", 200)
    table = delta.loc[changed].assign(name=a.loc[changed, "name"]).set_index("name").sort_index()
    print("\nRaw values whose route changed, new − old [eV]:")
    print(table.round(3).to_string())
    print("\n|Δ| over them: mean " + ", ".join(f"{c} {table[c].abs().mean():.3f}" for c in RAW))
    print(f"largest |Δ| of any raw value over the {len(same)} other structures: "
          f"{np.nanmax(np.abs(delta.loc[same].to_numpy())):.2e} eV")

    print("\nChain limits of the polymers (film-phase IP and EA, orbital gap [eV]; fit quality), old → new:")
    ra, rb = old["raw"].set_index("id"), new["raw"].set_index("id")
    polymers = ra.index[ra["representation"].eq("polymer")]
    rows = []
    for pid in polymers:
        moved = {f"Δ{c[4:-3]}": rb.loc[pid, c] - ra.loc[pid, c]
                 for c in ("xtb_ip_film_ev", "xtb_ea_film_ev", "xtb_gap_ev")}
        rows.append({"polymer": ra.loc[pid, "name"][:28], **moved,
                     "n_max": f"{int(ra.loc[pid, 'chain_n_max'])}→{int(rb.loc[pid, 'chain_n_max'])}",
                     "quality": f"{ra.loc[pid, 'chain_fit_quality']}→{rb.loc[pid, 'chain_fit_quality']}"})
    print(pd.DataFrame(rows).round(3).to_string(index=False))

    print("\nLeave-one-out MAE [eV], old → new (all rows; molecules; polymers):")
    for m in MODELS:
        mo, mn = old["models"][m], new["models"][m]
        by_o, by_n = mo.get("loo_by_representation", {}), mn.get("loo_by_representation", {})
        parts = [f"{m:13s} {mo['loo_mae_ev']:.3f} → {mn['loo_mae_ev']:.3f}"]
        for rep in ("molecule", "polymer"):
            if rep in by_o:
                parts.append(f"{rep} {by_o[rep]['mae_ev']:.3f} → {by_n[rep]['mae_ev']:.3f}")
        print("  " + "; ".join(parts))

    print("\nPaired change of |LOO error| per reference row, new − old [eV] (mean, 95 % bootstrap interval, "
          "2000 resamples):")
    rng = np.random.default_rng(0)
    for m in MODELS:
        err = [{(r["name"], r.get("phase_film", 1), r["measured_ev"]): abs(r["loo_ev"] - r["measured_ev"])
                for r in cal["models"][m]["residuals"]} for cal in (old, new)]
        common = sorted(set(err[0]) & set(err[1]))
        d = np.array([err[1][k] - err[0][k] for k in common])
        boot = np.array([d[rng.integers(0, len(d), len(d))].mean() for _ in range(2000)])
        print(f"  {m:13s} {d.mean():+.4f} [{np.percentile(boot, 2.5):+.4f}, {np.percentile(boot, 97.5):+.4f}] "
              f"over {len(d)} rows")

    print("\nSeries smoothness: |last oligomer − linear-in-1/n continuation of the two before| [eV], mean (median):")
    for q in ("xtb_ip_film_ev", "xtb_ea_film_ev", "xtb_gap_ev"):
        parts = []
        for cal in (old, new):
            o = cal["oligomers"]
            o = o[o["quantity"].eq(q) & o["status"].eq("ok") & o["n"].notna() & np.isfinite(o["n"])]
            dev = []
            for _, g in o.groupby("polymer_id"):
                g = g.sort_values("n")
                if len(g) >= 3:
                    x, v = 1.0 / g["n"].to_numpy()[-3:], g["value"].to_numpy()[-3:]
                    dev.append(abs(v[2] - (v[1] + (v[1] - v[0]) * (x[2] - x[1]) / (x[1] - x[0]))))
            parts.append(f"{np.mean(dev):.3f} ({np.median(dev):.3f}, {len(dev)} polymers)")
        print(f"  {q:15s} old {parts[0]} → new {parts[1]}")

    print("\nFilm-level LOO errors of the polymers (predicted − measured [eV]), old → new:")
    rows = {}
    for m in ("homo_film", "lumo_film", "gap_opt_film"):
        for cal, tag in ((old, "old"), (new, "new")):
            for r in cal["models"][m]["residuals"]:
                if r.get("representation") == "polymer" and r.get("phase_film", 1) == 1:
                    rows.setdefault(r["name"][:28], {})[f"{m[:-5]} {tag}"] = r["loo_ev"] - r["measured_ev"]
    print(pd.DataFrame(rows).T.sort_index().round(2).to_string())
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
