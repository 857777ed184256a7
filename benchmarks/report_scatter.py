"""Benchmark: how far apart do published film levels of one material lie — the floor under the film LOO MAE.

The film HOMO/LUMO models are scored against one published value per material
(``models/reference/levels_film.csv``). Papers that measure the same material disagree:
different CV set-ups, onset or half-wave, ferrocene levels, or a LUMO taken as HOMO +
optical gap. Earlier reading passes recorded such per-paper values in the ``notes`` of
the rows, each as ``HOMO/LUMO[/gap] (DOI)`` (most from the compiled OPV2D data set, which
lists a material's levels per device paper). This script collects them, adds the row's
own value, and estimates the error one report carries:

    E|e| = mean over pairs |x_i − x_j| / √2

(two independent reports with normal errors of σ differ on average by 2σ/√π, one report
misses the truth by σ·√(2/π)). A model that predicted every material exactly would still
show about this MAE against single reports; the gap between it and the model's LOO MAE
is what the model itself loses. The optical gaps are not scored: the compiled per-paper
"Eg" is often the LUMO − HOMO difference (an electrochemical gap), not a film onset. It prints the per-material spreads, the floor per level
(mean over materials and pooled over all pairs), and the shipped models' LOO errors on the
same materials. No computation: seconds.

Usage::

    .venv/bin/python benchmarks/report_scatter.py
"""

from __future__ import annotations

import argparse
import itertools
import json
import math
import re
import sys
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from screen.config import Config  # noqa: E402

FILM = REPO / "models" / "reference" / "levels_film.csv"
#: ``-5.36/-3.54/1.82 (10.1002/aenm.201602000)``: a per-paper report written in a row's notes
REPORT = re.compile(r"(-\d\.\d+) ?/ ?(-\d\.\d+)(?: ?/ ?(\d\.\d+))? \((10\.\d{4,}/[^\s,;)]+)\)")


def reports(film: pd.DataFrame) -> pd.DataFrame:
    """One row per (material, report): the row's own value first, then each per-paper report in its notes.

    A report whose DOI repeats within a material is kept once (the notes of successive passes
    sometimes quote the same paper twice).
    """
    out = []
    for _, row in film.iterrows():
        found = REPORT.findall(str(row.get("notes", "")))
        if not found:
            continue
        seen = {str(row.get("doi", "")).strip().lower()}
        out.append({"name": row["name"], "homo_ev": float(row["homo_ev"]), "lumo_ev": float(row["lumo_ev"]),
                    "doi": row.get("doi", ""), "own": True})
        for homo, lumo, gap, doi in found:
            key = doi.lower().removesuffix(".s001")
            if key in seen:
                continue
            seen.add(key)
            out.append({"name": row["name"], "homo_ev": float(homo), "lumo_ev": float(lumo),
                        "doi": doi, "own": False})
    return pd.DataFrame(out)


def floor(values) -> tuple[float, int]:
    """(mean |x_i − x_j| / √2 over the pairs, number of pairs) of one material's reports."""
    v = [x for x in values if np.isfinite(x)]
    pairs = [abs(a - b) for a, b in itertools.combinations(v, 2)]
    return (float(np.mean(pairs)) / math.sqrt(2.0), len(pairs)) if pairs else (math.nan, 0)


def model_loo(protocol_dir: Path, level: str) -> dict[str, float]:
    """|LOO residual| [eV] per reference name of the shipped film model of ``level``."""
    path = protocol_dir / f"{level}_film.json"
    if not path.exists():
        return {}
    record = json.loads(path.read_text())
    return {r["name"]: abs(r["loo_ev"] - r["measured_ev"]) for r in record.get("residuals", [])}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--film", type=Path, default=FILM)
    args = parser.parse_args(argv)
    rep = reports(pd.read_csv(args.film, dtype={"doi": str}, keep_default_na=False, na_values=[""]))
    if rep.empty:
        print("no per-paper reports found in the notes")
        return 1
    protocol = REPO / "models" / Config().protocol_id
    loo = {lvl: model_loo(protocol, lvl) for lvl in ("homo", "lumo")}
    print(f"per-paper reports in {args.film.relative_to(REPO)} notes: {len(rep)} reports of "
          f"{rep['name'].nunique()} materials (the row's own value included)\n")
    print(f"{'material':28s} {'n':>2s}  {'HOMO range':>13s} {'floor':>6s}  {'LUMO range':>13s} {'floor':>6s}  "
          f"{'|LOO| HOMO':>10s} {'|LOO| LUMO':>10s}")
    per = {"homo": [], "lumo": []}
    pooled = {"homo": [], "lumo": []}
    for name, grp in rep.groupby("name", sort=False):
        cells = []
        for lvl in ("homo", "lumo"):
            vals = grp[f"{lvl}_ev"].to_numpy(float)
            f, n = floor(vals)
            if n:
                per[lvl].append(f)
                pooled[lvl] += [abs(a - b) / math.sqrt(2.0) for a, b in itertools.combinations(vals[np.isfinite(vals)], 2)]
            cells.append((np.nanmin(vals), np.nanmax(vals), f))
        lo = [loo[lvl].get(name, math.nan) for lvl in ("homo", "lumo")]
        print(f"{name[:28]:28s} {len(grp):2d}  {cells[0][0]:6.2f}…{cells[0][1]:6.2f} {cells[0][2]:6.3f}  "
              f"{cells[1][0]:6.2f}…{cells[1][1]:6.2f} {cells[1][2]:6.3f}  {lo[0]:10.3f} {lo[1]:10.3f}")
    print()
    summary = {}
    for lvl in ("homo", "lumo"):
        if not per[lvl]:
            continue
        names = rep["name"].unique()
        on_same = [loo[lvl][n] for n in names if n in loo[lvl]]
        model = (f"; shipped model's |LOO| on the {len(on_same)} of them it is fitted on {np.mean(on_same):.3f} eV"
                 if on_same else "")
        print(f"{lvl:4s}: floor (one report's error) mean over {len(per[lvl])} materials {np.mean(per[lvl]):.3f} eV, "
              f"median {np.median(per[lvl]):.3f} eV, pooled over {len(pooled[lvl])} pairs "
              f"{np.mean(pooled[lvl]):.3f} eV{model}")
        summary[lvl] = np.mean(per[lvl])
    print("\n" + " ".join(f"floor_{k}_ev={v:.3f}" for k, v in summary.items()) + f" materials={rep['name'].nunique()}"
          f" reports={len(rep)} protocol={protocol.name}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
