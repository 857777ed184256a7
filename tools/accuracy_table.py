"""Print (or write into README.md) the calibration accuracy table of the shipped models.

Usage: python tools/accuracy_table.py [--write README.md] [--models models]
Every fitted protocol folder under models/ becomes rows of the table.
"""

from __future__ import annotations

import argparse
import json
import re
from pathlib import Path

NAMES = {"ip": "IP (gas)", "ea": "EA (gas)", "gap_opt": "optical gap", "homo_film": "HOMO (film)",
         "lumo_film": "LUMO (film)", "gap_opt_film": "optical gap (film)"}


def table(models_root: Path) -> str:
    lines = ["| protocol | property | n | LOO MAE [eV] | LOO RMSE [eV] | max error [eV] | R² | model |",
             "|---|---|---|---|---|---|---|---|"]
    for folder in sorted(p for p in models_root.iterdir() if (p / "ip.json").is_file()):
        for key, label in NAMES.items():
            m = json.loads((folder / f"{key}.json").read_text())
            if m["kind"] == "linear":
                d = m["model"]
                terms = " ".join(f"{c:+.3f}·{f}" for c, f in zip(d["coef"], d["features"]))
                desc = f"{terms} {d['intercept']:+.3f}"
            else:
                base = {"ip": "IP", "ea": "EA", "gap_opt": "optical-gap"}.get(m["base"], m["base"])
                desc = f"gas {base} model, shift {m['shift_ev']:+.3f} eV"
            lines.append(f"| `{folder.name}` | {label} | {m['n']} | {m['loo_mae_ev']:.3f} | {m['loo_rmse_ev']:.3f} "
                         f"| {m['max_abs_error_ev']:.3f} | {m['r2']:.3f} | {desc} |")
    return "\n".join(lines)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--models", default="models")
    parser.add_argument("--write", default=None, help="file with accuracy-table markers to update")
    args = parser.parse_args()
    text = table(Path(args.models))
    if args.write:
        path = Path(args.write)
        body = path.read_text(encoding="utf-8")
        new = re.sub(r"(<!-- accuracy-table:start -->\n).*?(\n<!-- accuracy-table:end -->)",
                     lambda m: m.group(1) + text + m.group(2), body, flags=re.S)
        path.write_text(new, encoding="utf-8")
    print(text)


if __name__ == "__main__":
    main()
