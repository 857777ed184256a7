"""Print (or write into README.md) the calibration accuracy tables of the shipped models.

Usage: python tools/accuracy_table.py [--write README.md] [--models models]

Every fitted protocol folder under models/ gives two tables: per model, the leave-one-out (LOO) error for
all rows, small molecules and polymers (at the chain limit) separately, and the leave-one-family-out error;
then the family hold-out errors of each model. Targets are those of issue 12 (benchmarks/calibration_accuracy.py).
"""

from __future__ import annotations

import argparse
import json
import math
import re
from pathlib import Path

NAMES = {"ip": "IP (gas)", "ea": "EA (gas)", "gap_opt": "optical gap (gas/solution)", "homo_film": "HOMO (film)",
         "lumo_film": "LUMO (film)", "gap_opt_film": "optical gap (film)"}
#: LOO MAE targets [eV] (issue 12)
TARGETS = {"ip": 0.12, "ea": 0.15, "homo_film": 0.12, "lumo_film": 0.15, "gap_opt_film": 0.12}


def _f(value, digits=3) -> str:
    return "–" if value is None or (isinstance(value, float) and math.isnan(value)) else f"{value:.{digits}f}"


def _describe(m: dict) -> str:
    if m["kind"] == "shift":
        return f"{m['base'].upper()} gas model {m['shift_ev']:+.3f} eV"
    d = m["model"]
    text = " ".join(f"{c:+.3f}·{f}" for c, f in zip(d["coef"], d["features"])) + f" {d['intercept']:+.3f}"
    if m["kind"] == "joint" and "phase_film" not in d["features"]:
        text += (f" −{m['red_shift_ev']:.2f}·[film] (red shift fixed in the common-practice range; "
                 f"free fit {m['red_shift_free_ev']:.2f} eV)")
    return text.replace("phase_film", "[film]").replace("kind_maximum", "[max]")


def _rep(m: dict, kind: str) -> str:
    r = m.get("loo_by_representation", {}).get(kind)
    return f"{_f(r['mae_ev'])} ({r['n']})" if r else "–"


def tables(models_root: Path) -> str:
    main = ["| protocol | property | n | LOO MAE [eV] | molecules: LOO MAE (n) | polymers: LOO MAE (n) "
            "| family hold-out MAE [eV] | LOO RMSE | R² | target | model |",
            "|---|---|---|---|---|---|---|---|---|---|---|"]
    fam = ["| protocol | property | family held out: MAE [eV] (n) |", "|---|---|---|"]
    for folder in sorted(p for p in models_root.iterdir() if (p / "ip.json").is_file()):
        for key, label in NAMES.items():
            m = json.loads((folder / f"{key}.json").read_text(encoding="utf-8"))
            main.append(f"| `{folder.name}` | {label} | {m['n']} | {_f(m['loo_mae_ev'])} | {_rep(m, 'molecule')} "
                        f"| {_rep(m, 'polymer')} | {_f(m.get('grouped_mae_ev'))} | {_f(m['loo_rmse_ev'])} "
                        f"| {_f(m['r2'], 2)} | {_f(TARGETS.get(key), 2) if key in TARGETS else '–'} "
                        f"| {_describe(m)} |")
            groups = m.get("by_family", {})
            if groups:
                cells = "; ".join(f"{k} {_f(v['mae_ev'], 2)} ({v['n']})" for k, v in sorted(groups.items()))
                fam.append(f"| `{folder.name}` | {label} | {cells} |")
    return "\n".join(main) + "\n\n" + "\n".join(fam)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--models", default="models")
    parser.add_argument("--write", default=None, help="file with accuracy-table markers to update")
    args = parser.parse_args()
    text = tables(Path(args.models))
    if args.write:
        path = Path(args.write)
        body = path.read_text(encoding="utf-8")
        new = re.sub(r"(<!-- accuracy-table:start -->\n).*?(\n<!-- accuracy-table:end -->)",
                     lambda m: m.group(1) + text + m.group(2), body, flags=re.S)
        path.write_text(new, encoding="utf-8")
    print(text)


if __name__ == "__main__":
    main()
