"""Benchmark: the device models against published devices, held out (targets of the device-model issue).

Levels: every device's donor and acceptor levels are put on the film
calibration's scale first (:func:`screen.devicefit.level_table`: the film-set
row of the same material, else the paper's values converted to ferrocene
−4.8 eV and flagged; rows that cannot be put on the scale are dropped with
their reason, listed below).

Runs :func:`screen.devicefit.cross_validate` twice — leave one acceptor
structure out, and leave one donor structure out (the fitted model, including
its loss variant, is refitted without the held-out devices; Scharber's rule has
nothing to fit) — and prints for each, side by side: held-out Voc MAE and mean
signed error [V], Spearman rank correlation of Voc and of PCE (every device with
a PCE, also those without a Voc), how many working devices each model calls not
viable, Scharber's rule on the papers' own levels for context, two naive
references (training mean Voc; training mean Voc of the acceptor class), the
same by acceptor class, and the targets (Voc MAE ≤ 0.10 V, Spearman(Voc) ≥ 0.7,
Spearman(PCE) ≥ 0.4) with met / not met and, for the rank correlations, their
95 % acceptor-group bootstrap interval (:func:`screen.devicefit.group_bootstrap_rho`;
"met by the point estimate only" when the interval reaches below the target).
Beside each, the same nested CV offering only the constant-loss variants (what
the E_CT-dependent loss option adds, chosen the same nested way).

Then what limits Spearman(Voc) (:func:`screen.devicevalidation.rank_limits`:
spread of measured Voc within a blend, E_CT alone per class, held-out figures on
film-set levels against converted levels), and the device model on COMPUTED
levels (:func:`screen.devicevalidation.computed_validation`): every device whose
donor and acceptor are calibration reference structures with stored raw
GFN2-xTB values, levels from the calibration refitted without that structure,
device model from the fold that holds the device's acceptor (donor) out, beside
Scharber's rule on the same levels, the same models on the published levels and
the training-mean Voc.  The computed-level part refits the calibration once per
material (a few minutes); ``--skip-computed`` leaves it out.

``--write`` stores the computed-level figures of the protocol (the folder name of
``--raw``) in ``models/device/computed_validation.json``, where the report reads
them for its device card ("Tested on published devices"); rerun it for every
shipped protocol after a change of the calibration, the device set or the device
model (``tests/test_devicefit.py`` checks the hashes).

Usage::

    .venv/bin/python benchmarks/device_validation.py [--devices models/reference/devices.csv] [--write]
    .venv/bin/python benchmarks/device_validation.py --raw models/tblite-gfn2-xtb-3ce6def9/reference_raw.csv --write
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from screen.devicefit import (CONSTANT_VARIANTS, DEVICES_PATH, FILM_PATH, GROUPINGS, cross_validate,  # noqa: E402
                              interval_text, level_table, read_devices, table)
from screen.devicevalidation import (RAW_PATH, computed_validation, coverage, levels_for, rank_limits,  # noqa: E402
                                     read_raw)
from screen.devicepars import FITTED_PATH, VALIDATION_PATH  # noqa: E402
from screen.io import write_json  # noqa: E402
from screen.provenance import sha256_file  # noqa: E402

TARGETS = {"voc_mae_v": ("<=", 0.10), "spearman_voc": (">=", 0.7), "spearman_pce": (">=", 0.4)}


def _f(x, spec=".3f") -> str:
    return "n/a" if x is None or not math.isfinite(x) else format(x, spec)


def _targets(m: dict, by: str) -> None:
    verdicts = []
    for key, (op, target) in TARGETS.items():
        val = m["fitted"][key]
        met = val <= target if op == "<=" else val >= target
        verdict = "met" if met else "NOT met"
        ci = m["fitted"].get(f"{key}_ci95")
        if ci and met and ci[0] < target:  # the point estimate clears it; its acceptor-group interval does not
            verdict = f"met by the point estimate only: 95 % interval {ci[0]:.2f}-{ci[1]:.2f}"
        elif ci:
            verdict += f", 95 % interval {ci[0]:.2f}-{ci[1]:.2f}"
        verdicts.append(f"{key}={val:.3f} (target {op} {target}: {verdict})")
    print(f"fitted model, {by} held out: " + "; ".join(verdicts))
    beat = m["fitted"]["voc_mae_v"] < m["mean_voc_baseline"]["voc_mae_v"]
    print(f"fitted Voc MAE {'below' if beat else 'NOT below'} the training-mean baseline "
          f"({m['fitted']['voc_mae_v']:.3f} vs {m['mean_voc_baseline']['voc_mae_v']:.3f} V)")


def held_out(d, by: str):
    """Print one grouping's held-out table, targets and the constant-loss-only comparison; return the CV."""
    cv = cross_validate(d, None, by)
    m = cv.metrics
    print(f"\nheld out: {m['grouping']} ({m['n_groups']} groups; loss variant chosen per training fold: "
          f"{m['variants_per_fold']})")
    print(table(m))
    _targets(m, by)
    const = cross_validate(d, None, by, CONSTANT_VARIANTS).metrics
    print(f"nested CV with constant-loss variants only: Voc MAE {const['fitted']['voc_mae_v']:.3f} V, "
          f"Spearman Voc {const['fitted']['spearman_voc']:.2f}, Spearman PCE {const['fitted']['spearman_pce']:.2f} "
          f"(chosen {const['variants_per_fold']})")
    print(" ".join(f"{by}_{model}_{k}={m[model][k]:.4f}" for model in ("fitted", "scharber")
                   for k in ("voc_mae_v", "spearman_voc", "spearman_pce"))
          + f" {by}_constant_only_voc_mae_v={const['fitted']['voc_mae_v']:.4f}"
          f" {by}_constant_only_spearman_voc={const['fitted']['spearman_voc']:.4f}")
    return cv


def limits(d, cv) -> None:
    """Print what limits Spearman(Voc) (acceptor-held-out predictions)."""
    lim = rank_limits(d, cv.fitted)
    b = lim["blends"]
    print(f"\nwhat limits Spearman(Voc) ({b['n']} devices with Voc, {b['blends']} blends):")
    print(f"  measured Voc spread: SD {b['voc_sd_v']:.3f} V over all devices; within the {b['repeated_blends']} "
          f"repeated blends ({b['devices_in_repeated']} devices) rms {_f(b['within_blend_rms_v'])} V; ceiling "
          f"Spearman (blend-mean Voc) {_f(b['ceiling_spearman'], '.2f')}")
    cls = ", ".join(f"{c} {_f(v['spearman'], '.2f')} (n={v['n']})" for c, v in lim["e_ct_spearman"]["by_class"].items())
    print(f"  Spearman(E_CT, Voc) on published levels: pooled {_f(lim['e_ct_spearman']['pooled'], '.2f')}; {cls}")
    for name, label in (("film_set", "levels all from the film set"), ("converted", "converted/completed levels")):
        s = lim["by_level_source"][name]
        print(f"  held out, {label}: n={s['n']} Spearman Voc {_f(s['spearman_voc'], '.2f')}, "
              f"Voc MAE {_f(s['voc_mae_v'])} V")
    print(f"limit_ceiling_spearman={b['ceiling_spearman']:.4f} limit_within_blend_rms_v={b['within_blend_rms_v']:.4f} "
          f"limit_e_ct_spearman={lim['e_ct_spearman']['pooled']:.4f} "
          + " ".join(f"limit_{n}_spearman_voc={s['spearman_voc']:.4f}" for n, s in lim["by_level_source"].items()))


def computed(d, devices, film, raw_path) -> dict:
    """Print the device model on computed (calibrated GFN2-xTB) levels, both groupings; return the figures."""
    raw = read_raw(raw_path)
    every = level_table(devices, film)
    cov = coverage(every, raw)
    print(f"\ncomputed levels ({Path(raw_path).parent.name}/{Path(raw_path).name}; calibration refitted without "
          f"each material): {int(cov.sum())} of {len(every)} device rows have donor and acceptor computed")
    levels = levels_for(d, raw)
    folder = Path(raw_path).parent
    record = {"written_by": "benchmarks/device_validation.py --write", "devices_sha256": sha256_file(devices),
              "levels_film_sha256": sha256_file(film),
              "calibration_statistics_sha256": sha256_file(folder / "statistics.csv"),
              "raw_sha256": sha256_file(raw_path), "fitted_sha256": sha256_file(FITTED_PATH)}
    for by in GROUPINGS:
        r = computed_validation(d, levels, raw, by)
        record[by] = {k: r[k] for k in ("grouping", "coverage", "fitted", "scharber", "fitted_published_levels",
                                        "mean_voc_baseline", "level_errors", "published_one_at_a_time")}
        c = r["coverage"]
        print(f"held out ({r['grouping']}; loss variants {r['variants_per_fold']}): {c['computed']} usable devices "
              f"computed, {c['with_voc']} with Voc, {c['with_pce']} with PCE")
        rows = [("model", "levels", "n", "Voc MAE [V]", "signed [V]", "Spearman Voc", "Spearman PCE")]
        for key, label, lv in (("fitted", "fitted", "computed"), ("scharber", "scharber", "computed"),
                               ("fitted_published_levels", "fitted", "published")):
            m = r[key]
            rows.append((label, lv, str(m["n"]), _f(m["voc_mae_v"]), _f(m["voc_bias_v"], "+.3f"),
                         _f(m["spearman_voc"], ".2f") + interval_text(m.get("spearman_voc_ci95")),
                         f"{_f(m['spearman_pce'], '.2f')}{interval_text(m.get('spearman_pce_ci95'))} (n={m['n_pce']})"))
        base = r["mean_voc_baseline"]
        rows.append(("training mean Voc", "-", str(r["fitted"]["n"]), _f(base["voc_mae_v"]),
                     _f(base["voc_bias_v"], "+.3f"), "-", "-"))
        widths = [max(len(x[i]) for x in rows) for i in range(len(rows[0]))]
        print("\n".join("  ".join(x.ljust(w) for x, w in zip(row, widths)) for row in rows))
        err = r["level_errors"]
        print("  computed - published levels (mean signed / MAE, eV): " + "; ".join(
            f"{k.replace('_ev', '')} {v['bias_ev']:+.2f}/{v['mae_ev']:.2f}" for k, v in err.items()))
        print("  what the computed levels cost: the fitted model with one level (or one material's three) put back "
              "to its published value:")
        for name, m in r["published_one_at_a_time"].items():
            print(f"    {name:22s} Voc MAE {_f(m['voc_mae_v'])} V  Spearman Voc {_f(m['spearman_voc'], '+.2f')}  "
                  f"Spearman PCE {_f(m['spearman_pce'], '+.2f')}")
        print(f"computed_{by}_n={r['fitted']['n']} computed_{by}_coverable_rows={int(cov.sum())} "
              + " ".join(f"computed_{by}_{model}_{k}={r[model][k]:.4f}"
                         for model in ("fitted", "scharber", "fitted_published_levels")
                         for k in ("voc_mae_v", "voc_bias_v", "spearman_voc", "spearman_pce"))
              + f" computed_{by}_mean_voc_baseline_mae_v={base['voc_mae_v']:.4f}")
    return record


def write_record(record: dict, protocol: str, path=VALIDATION_PATH) -> None:
    """Put one protocol's computed-level figures into ``models/device/computed_validation.json`` (the report's)."""
    data = json.loads(Path(path).read_text(encoding="utf-8")) if Path(path).is_file() else {}
    data[protocol] = record
    write_json(dict(sorted(data.items())), path)
    print(f"computed-level figures of {protocol} -> {path}")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--devices", default=str(DEVICES_PATH))
    parser.add_argument("--film", default=str(FILM_PATH))
    parser.add_argument("--raw", default=str(RAW_PATH), help="reference_raw.csv of the calibration to validate on")
    parser.add_argument("--skip-computed", action="store_true", help="leave out the computed-level validation")
    parser.add_argument("--write", action="store_true",
                        help="store the computed-level figures for the report (models/device/computed_validation.json, "
                             "keyed by the protocol id, the name of the --raw file's folder)")
    args = parser.parse_args(argv)
    d = read_devices(args.devices, args.film)
    converted = int(d["levels_converted"].sum())
    print(f"devices: {args.devices}: {len(d)} rows with all six levels on the film scale "
          f"({int(d['voc_v'].notna().sum())} with Voc; {converted} with converted or completed levels, "
          f"{len(d) - converted} entirely from {Path(args.film).name})")
    for row in d.attrs["dropped"]:
        print(f"  dropped {row['device_id']}: {row['drop_reason']}")
    cvs = {by: held_out(d, by) for by in GROUPINGS}
    limits(d, cvs["acceptor"])
    if args.write and args.skip_computed:
        parser.error("--write needs the computed-level validation (drop --skip-computed)")
    if not args.skip_computed:
        record = computed(d, args.devices, args.film, args.raw)
        if args.write:
            write_record(record, Path(args.raw).parent.name)
    return 0


if __name__ == "__main__":
    sys.exit(main())
