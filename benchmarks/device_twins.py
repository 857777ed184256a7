"""Held-out device figures with structural twins held out together, with one pooled EQE and with the EQE per class.

Leaving one donor (acceptor) structure out lets a halogen or side-group twin of the held-out material stay in
training: PM6 is held out while PBDB-T and PM7 train the model. This script merges such twins into one group
(the maps below, by name: the same backbone or core with another halogen, side group or end-group substituent)
and prints the held-out figures for both groupings, once with the EQE split the nested fit chooses and once with one
pooled EQE, so that what the per-class EQE is worth is measured without twins helping.

Run: ``.venv/bin/python benchmarks/device_twins.py`` (about a minute).
"""

from __future__ import annotations

from screen import devicefit

#: donor name -> twin group (names not listed are their own group)
DONOR_TWINS = {"PBDB-T-2Cl (PM7)": "PBDB-T", "PM6 (PBDB-T-2F)": "PBDB-T", "PBDB-T-SF": "PBDB-T", "PBDB-T": "PBDB-T",
               "PBDTTT-E-T": "PBDTTT", "PBDTTT-C-T": "PBDTTT", "PTB7-Th": "PBDTTT",
               "J51": "J", "J61": "J", "J71": "J",
               "DCV5T-Me(3,3)": "DCVnT", "DCV6T-Bu": "DCVnT", "DCV4T-Bu": "DCVnT", "DCV5T": "DCVnT",
               "DTDCPB": "DTDC", "DTDCTB": "DTDC", "SQ (DIBSQ)": "SQ", "1-NPSQ": "SQ", "DPSQ": "SQ"}
#: acceptor name -> twin group
ACCEPTOR_TWINS = {"ITIC": "ITIC", "IT-M": "ITIC", "IT-4F": "ITIC", "m-ITIC": "ITIC", "ITIC-Th": "ITIC-Th",
                  "ITIC-Th1": "ITIC-Th", "IEICO": "IEICO", "IEICO-4F": "IEICO", "Y6 (BTP-4F)": "Y", "BTP-eC9": "Y",
                  "Y1": "Y", "C60": "fullerene", "C70": "fullerene", "PZ1": "polymerised Y", "PY-IT": "polymerised Y"}


def twin_groups(d):
    """The device table with columns ``donor_twin`` and ``acceptor_twin`` (group keys)."""
    d = d.copy()
    for side, key, twins in (("donor", "donor_group", DONOR_TWINS), ("acceptor", "group", ACCEPTOR_TWINS)):
        first = d.groupby(key)[side].first()
        d[f"{side}_twin"] = d[key].map(lambda g, f=first, t=twins: t.get(f[g], f[g]))
    return d


def main() -> int:
    d = twin_groups(devicefit.resolve_levels())
    devicefit.GROUPINGS.update(donor_twin="donor_twin", acceptor_twin="acceptor_twin")
    print("grouping             groups  EQE       Voc MAE [V]  Spearman Voc  Spearman PCE  Jsc MAE [mA/cm2]")
    for by in ("acceptor", "acceptor_twin", "donor", "donor_twin"):
        for eqe in ("pooled", None):
            m = devicefit.cross_validate(d, None, by, eqe_split=eqe).metrics
            f = m["fitted"]
            print(f"{by:<20} {m['n_groups']:>6}  {eqe or 'chosen':<8}  {f['voc_mae_v']:.3f}        "
                  f"{f['spearman_voc']:.2f}          {f['spearman_pce']:.2f}          {f['jsc_mae_ma_cm2']:.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
