"""Benchmark: the structure families of ``screen.knownbias``, held out, beside the rest of their class.

Three parts, all on a protocol's shipped raw values (no xTB is run):

1. **Held out.** Every film-set row (``models/reference/levels_film.csv``) of a family of
   :func:`screen.knownbias.known_bias`, and the rylene-imide molecules (perylene diimides: the nearest
   relatives outside every family), each predicted by the whole calibration refitted without it (as
   ``benchmarks/heldout_levels.py``), with the σ that calibration gives it: film HOMO, LUMO and optical gap,
   error (computed − reference) and error / σ. ``--polymers`` holds out every polymer row of the film set too
   (≈ 15 s each, ≈ 8 min in all); ``--names`` holds out the named rows only, ``--skip-held-out`` none.
2. **Class comparison** (seconds, no refit): the shipped calibration's leave-one-out residuals of every
   film-phase polymer row, per family and for the other polymers (the donors): n, mean signed error, MAE and
   the rows beyond −σ and +σ of the model; and the polymers whose tight-binding HOMO and LUMO sit on
   different units (orbital gap below 1 eV, HOMO–LUMO overlap below 0.05), a descriptor group, not a family.
3. **Cause of the gap error** (seconds): the optical-gap model's two molecular terms along each family
   polymer's oligomer series (orbital gap, fundamental gap IP − EA), and the gap model refitted (a) as shipped,
   (b) without the fundamental-gap term, (c) with that term taken at the longest computed oligomer instead of
   the chain limit: the leave-one-out gap error of the family rows and of the other polymers.

Recorded (default protocol ``tblite-gfn2-ff-eaf1c554``; ≈ 1.5 min, ``--polymers`` ≈ 8 min), held out [eV], error
(error / σ): N2200 HOMO −0.32 (−1.5σ), LUMO −0.28 (−1.0σ), gap −0.24 (−1.1σ); p(gNDI-T2) −0.18 (−0.7σ), −0.31
(−1.1σ), −0.25 (−1.1σ); DPP rows gap +0.36 to +0.53 (+1.5 to +2.2σ); PTCDI-C8 (a perylene diimide, no family)
−0.38, +0.03, +0.10; the bay-linked PDI dimer −0.34, −0.45, −0.25. The 26 other polymers of the film set, held
out (``--polymers``): gap −0.40 to +0.48, four of them at −1.0 to −1.8σ (PBnDT-FTAZ −0.39, PDTSQxF −0.40, PBDTFBT −0.39,
PffBT4T-2OD −0.27); LUMO −0.65 to +0.99. LOO over all 30 other polymer rows: gap mean signed −0.04, MAE 0.16; the
four polymers with orbital gap < 1 eV and overlap < 0.05 (both NDI rows, PffBT4T-2OD, PBDTFBT) gap −0.24 to
−0.39, mean −0.29. The fundamental-gap term falls 0.48 / 0.42 eV from n = 1 to the chain limit for the NDI rows,
0.19–1.00 (median 0.44) for the other polymers; refitted without it: NDI −0.07 / −0.08, other polymers +0.18
(film LOO MAE 0.159 → 0.190); with it at the longest oligomer: −0.22 / −0.24. xTB-geometry protocol
(``--raw models/tblite-gfn2-xtb-3ce6def9/reference_raw.csv``, whose gap model has no fundamental-gap term):
N2200 HOMO −0.49, LUMO −0.15, gap −0.04; p(gNDI-T2) −0.08, −0.15, −0.15.

Usage::

    .venv/bin/python benchmarks/known_bias.py [--raw models/<protocol-id>/reference_raw.csv] [--polymers]
                                              [--names NAME ...] [--skip-held-out]
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from rdkit import Chem  # noqa: E402

from screen.calibrate import apply_models, fit_all  # noqa: E402
from screen.calibration import optical  # noqa: E402
from screen.calibration.reference import canonical, read_reference  # noqa: E402
from screen.chem import smiles_has  # noqa: E402
from screen.devicevalidation import RAW_PATH, read_raw  # noqa: E402
from screen.knownbias import known_bias  # noqa: E402

#: a peri-fused six-membered imide on a naphthalene (1,8-naphthalimide): naphthalene and perylene diimides
RYLENE_IMIDE = Chem.MolFromSmarts("O=[#6]1[#7][#6](=O)c2cccc3cccc1c23")
KINDS = ("homo", "lumo", "gap_opt")
MODELS = {"homo": "homo_film", "lumo": "lumo_film", "gap_opt": "gap_opt_film"}
#: the descriptor group of part 2: HOMO and LUMO on different units of the chain [eV, –]
CT_ORBITAL_GAP_EV, CT_OVERLAP = 1.0, 0.05


def _group(smiles: str) -> str:
    code = known_bias(smiles)
    if code:
        return code
    return "rylene imide" if smiles_has(smiles, RYLENE_IMIDE) else ""


def held_out(names, film: pd.DataFrame, raw: pd.DataFrame, sets: dict) -> pd.DataFrame:
    """Film levels, σ and errors of each named row from a calibration refitted without its structure."""
    rows = []
    for name in names:
        can = canonical(film.loc[name, "smiles"])
        models = fit_all(sets, raw, exclude=lambda _n, s, can=can: canonical(s) == can)
        out = apply_models(raw[raw["_can"].eq(can)], models, "film").iloc[0]
        row = {"name": name, "group": _group(film.loc[name, "smiles"]) or "other polymer"}
        for k in KINDS:
            ref = pd.to_numeric(film.loc[name, f"{k}_ev"], errors="coerce")
            row[f"{k}_err"] = float(out[f"{k}_ev"]) - ref
            row[f"{k}_z"] = row[f"{k}_err"] / float(out[f"{k}_sigma_ev"])
        rows.append(row)
        print(f"  {name[:30]:30s} {row['group'][:13]:13s} " + "  ".join(
            f"{k.split('_')[0]} {row[f'{k}_err']:+.2f} ({row[f'{k}_z']:+.1f}σ)" for k in KINDS), flush=True)
    return pd.DataFrame(rows)


def loo_residuals(folder: Path, raw: pd.DataFrame) -> pd.DataFrame:
    """The shipped calibration's LOO error of every film-phase polymer row, with its raw descriptors."""
    errors: dict[tuple, dict] = {}
    for kind, model in MODELS.items():
        record = json.loads((folder / f"{model}.json").read_text(encoding="utf-8"))
        seen: dict[str, int] = {}
        for r in record["residuals"]:
            if r.get("phase_film", 1) == 1 and r.get("representation") == "polymer":
                key = (r["name"], seen.setdefault(r["name"], 0))  # a material measured twice stays two rows
                seen[r["name"]] += 1
                errors.setdefault(key, {"smiles": r["smiles"]})[kind] = r["loo_ev"] - r["measured_ev"]
    table = pd.DataFrame.from_dict(errors, orient="index")
    table.index = [name if i == 0 else f"{name} #{i + 1}" for name, i in table.index]
    table["group"] = [_group(s) or "other polymers" for s in table["smiles"]]
    by_can = raw.set_index("_can")
    cans = [canonical(s) for s in table["smiles"]]
    table["orbital_gap"] = [by_can.loc[c, "xtb_gap_ev"] if c in by_can.index else np.nan for c in cans]
    table["overlap"] = [by_can.loc[c, "xtb_overlap_hl"] if c in by_can.index else np.nan for c in cans]
    return table


def class_comparison(table: pd.DataFrame, sigma: dict[str, float]) -> None:
    ct = (table["orbital_gap"] < CT_ORBITAL_GAP_EV) & (table["overlap"].abs() < CT_OVERLAP)
    groups = [(g, table["group"] == g) for g in sorted(table["group"].unique())]
    groups.append((f"orbital gap < {CT_ORBITAL_GAP_EV:g}, overlap < {CT_OVERLAP:g}", ct))
    scale = ", ".join(f"{k.split('_')[0]} {v:.2f}" for k, v in sigma.items())
    print("LOO error of the film-phase polymer rows, shipped calibration [eV]: n, mean signed, MAE, "
          f"[rows below −σ / above +σ] (σ: {scale})")
    for label, mask in groups:
        sub = table[mask]
        parts = []
        for k in KINDS:
            v = sub[k].dropna() if k in sub else pd.Series(dtype=float)
            if v.empty:
                parts.append(f"{k.split('_')[0]:4s} —")
                continue
            parts.append(f"{k.split('_')[0]:4s} {len(v):2d} {v.mean():+.2f} {v.abs().mean():.2f} "
                         f"[{int((v < -sigma[k]).sum())}/{int((v > sigma[k]).sum())}]")
        print(f"  {label[:34]:34s} " + " | ".join(parts))
    print("  rows of the descriptor group: " + ", ".join(
        f"{n[:22]} gap {table.loc[n, 'gap_opt']:+.2f}" for n in table.index[ct]))


def oligomer_terms(folder: Path, raw: pd.DataFrame, family, comparison) -> None:
    """The gap model's orbital-gap and fundamental-gap terms along the oligomer series of each family polymer and
    of the ``comparison`` polymers, and the range of the fundamental-gap term's fall over every other polymer."""
    record = json.loads((folder / "gap_opt_film.json").read_text(encoding="utf-8"))
    coef = dict(zip(record["model"]["features"], record["model"]["coef"]))
    if "xtb_fund_ev" not in coef:
        print("(this protocol's optical-gap model has no fundamental-gap term: no oligomer series shown)")
        return
    oligo = pd.read_csv(folder / "reference_oligomers.csv")
    print(f"gap model terms along the oligomer series [eV] (orbital gap × {coef.get('xtb_gap_ev', 0):.3f}, "
          f"IP − EA × {coef.get('xtb_fund_ev', 0):.3f}; n = 1, 2, …, chain limit)")
    falls = {}
    for _, row in raw[raw["representation"].eq("polymer")].iterrows():
        s = oligo[oligo["polymer_key"].eq(row["key"])].pivot_table(index="quantity", columns="n", values="value")
        if {"xtb_ip_ev", "xtb_ea_ev"} <= set(s.index) and 1.0 in s.columns:
            fund = s.loc["xtb_ip_ev"] - s.loc["xtb_ea_ev"]
            falls[row["name"]] = coef.get("xtb_fund_ev", 0.0) * (fund.loc[1.0] - (row["xtb_ip_ev"] - row["xtb_ea_ev"]))
    others = [v for n, v in falls.items() if n not in family]
    if others:
        print(f"  fundamental-gap term, fall from n = 1 to the chain limit, the other {len(others)} polymers: "
              f"{min(others):.2f}–{max(others):.2f} (median {np.median(others):.2f})")
    for name in list(family) + list(comparison):
        row = raw[raw["name"].eq(name)]
        if row.empty:
            continue
        series = oligo[oligo["polymer_key"].eq(row["key"].iloc[0])].pivot_table(
            index="quantity", columns="n", values="value")
        gap = series.loc["xtb_gap_ev"]
        fund = series.loc["xtb_ip_ev"] - series.loc["xtb_ea_ev"]
        g_term = coef.get("xtb_gap_ev", 0.0) * gap
        f_term = coef.get("xtb_fund_ev", 0.0) * fund
        print(f"  {name[:30]:30s} orbital-gap term {' '.join(f'{v:.2f}' for v in g_term)}  |  fundamental-gap "
              f"term {' '.join(f'{v:.2f}' for v in f_term)}  (falls {f_term.iloc[0] - f_term.iloc[-1]:.2f})")


def _longest(raw: pd.DataFrame, folder: Path) -> pd.DataFrame:
    """``raw`` with each polymer's gas IP and EA taken at its longest computed oligomer, not the chain limit."""
    oligo = pd.read_csv(folder / "reference_oligomers.csv")
    oligo = oligo[np.isfinite(oligo["n"])]
    out = raw.copy()
    for i in out.index[out["representation"].eq("polymer")]:
        s = oligo[oligo["polymer_key"].eq(out.at[i, "key"])]
        last = s[s["n"].eq(s["n"].max())].set_index("quantity")["value"]
        for q in ("xtb_ip_ev", "xtb_ea_ev"):
            out.at[i, q] = float(last[q])
    return out


def gap_counterfactuals(sets: dict, raw: pd.DataFrame, folder: Path, family_names) -> None:
    variants = {"as shipped": (optical.FEATURE_SETS, raw),
                "without the fundamental-gap term": ([["xtb_gap_ev"]], raw),
                "that term at the longest oligomer": ([["xtb_gap_ev", "xtb_fund_ev"]], _longest(raw, folder))}
    shipped = optical.FEATURE_SETS
    record = json.loads((folder / "gap_opt_film.json").read_text(encoding="utf-8"))
    if "xtb_fund_ev" not in record["model"]["features"]:
        variants = {"as shipped": variants["as shipped"]}
        print("(this protocol's optical-gap model has no fundamental-gap term: refitted as shipped only)")
    print("optical-gap model refitted (LOO film gap error [eV]; other polymers: mean signed / MAE)")
    for label, (feature_sets, table) in variants.items():
        optical.FEATURE_SETS = feature_sets
        try:
            _, film = optical.fit_gap(sets, table)
        finally:
            optical.FEATURE_SETS = shipped
        res = [r for r in film["residuals"] if r.get("phase_film", 1) == 1]
        err = {r["name"]: r["loo_ev"] - r["measured_ev"] for r in res}
        others = np.array([r["loo_ev"] - r["measured_ev"] for r in res  # each row, a material measured twice too
                           if r.get("representation") == "polymer" and r["name"] not in family_names])
        print(f"  {label:34s} film LOO MAE {film['loo_mae_ev']:.3f}  " + "  ".join(
            f"{n[:12]} {err[n]:+.2f}" for n in family_names if n in err)
            + f"  | other polymers {others.mean():+.2f} / {np.abs(others).mean():.2f} ({len(others)})")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--raw", type=Path, default=RAW_PATH, help="reference_raw.csv of the protocol to check")
    parser.add_argument("--polymers", action="store_true", help="hold out every polymer row of the film set too")
    parser.add_argument("--names", nargs="+", help="hold out these film-set rows only")
    parser.add_argument("--skip-held-out", action="store_true", help="parts 2 and 3 only (seconds)")
    args = parser.parse_args(argv)
    folder = args.raw.parent
    raw = read_raw(args.raw)
    sets = read_reference(REPO / "models" / "reference")
    film = sets["film"].drop_duplicates("name").set_index("name")
    family = [n for n in film.index if known_bias(str(film.loc[n, "smiles"]))]
    names = args.names or family + [n for n in film.index if n not in family
                                    and smiles_has(str(film.loc[n, "smiles"]), RYLENE_IMIDE)]
    if args.polymers:
        names += [n for n in film.index if n not in names and "*" in str(film.loc[n, "smiles"])]
    missing = [n for n in names if n not in film.index]
    if missing:
        print(f"not in levels_film.csv: {', '.join(missing)}", file=sys.stderr)
        return 2
    print(f"protocol {folder.name}")
    if not args.skip_held_out:
        print("held out (calibration refitted without the row): error [eV] (error / σ of that calibration)")
        held_out(names, film, raw, sets)
    sigma = {k: json.loads((folder / f"{m}.json").read_text(encoding="utf-8"))["model"]["residual_sigma_ev"]
             for k, m in MODELS.items()}
    class_comparison(loo_residuals(folder, raw), sigma)
    polymers = [n for n in family if "*" in str(film.loc[n, "smiles"])]
    oligomer_terms(folder, raw, polymers, ["PM6 (PBDB-T-2F)", "PCDTBT"])
    gap_counterfactuals(sets, raw, folder, polymers)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
