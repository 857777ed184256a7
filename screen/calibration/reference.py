"""Reference sets: reading, the structures to compute, hashing, joining with computed values, families.

Files of ``models/reference/`` used here (all energies in eV on the vacuum scale):

``ip_gas.csv``, ``ea_gas.csv``
    gas-phase IP and EA (``value_ev``);
``gap_optical.csv``
    lowest allowed singlet excitation, gas or solution (``value_ev``, ``kind``, ``phase``);
``gap_series.csv``
    optical gaps of size series (oligothiophenes, oligo(phenylene vinylene)s,
    oligofluorenes, acenes; polymers as ``[*]`` repeat units; ``kind``, ``phase``);
``levels_film.csv``
    film / electrochemical HOMO, LUMO and optical gap (``fc_reference_ev``);
    ``derived_level`` (optional column: ``homo``, ``lumo`` or empty) names a level
    that was not measured but computed from the other one and the optical gap
    ("LUMO = HOMO + Eg(opt)"); :func:`measured_film` blanks it for the level fits;
``dyes.csv``
    E0-0 of organic dyes in solution (``e00_ev``; the file belongs to the dye-cell
    mode, only its ``name, smiles, e00_ev, exclude_reason`` columns are used here and
    only they enter the reference hash).

A row with a non-empty ``exclude_reason`` stays in its file but is not fitted.

Examples
--------
>>> film = pd.DataFrame({"homo_ev": [-5.3, -5.4], "lumo_ev": [-3.5, -3.6], "derived_level": ["lumo", ""]})
>>> measured_film(film)["lumo_ev"].tolist(), measured_film(film)["homo_ev"].tolist()
([nan, -3.6], [-5.3, -5.4])
>>> family("PM6", "[*]c1cc2c(C)c3cc([*])sc3c(C)c2s1", "polymer", "film")
'polymers: BDT copolymers'
>>> family("ITIC", "C", "molecule", "film"), family("anthracene", "c1ccc2cc3ccccc3cc2c1", "molecule", "gap")
('non-fullerene acceptors', 'acenes')
"""

from __future__ import annotations

import hashlib
import re
import sys
from pathlib import Path

import numpy as np
import pandas as pd
from rdkit import Chem

from screen.calibration.refcheck import DERIVED_LEVELS, check_reference_set
from screen.chem import canonical
from screen.constants import FC_FILM_EV
from screen.io import read_csv_checked

__all__ = ["FILES", "REQUIRED_SETS", "FC_REFERENCE_EV", "read_reference", "reference_inputs", "reference_files", "reference_hash",
           "canonical", "joined", "normalised_film", "measured_film", "DERIVED_LEVELS", "family", "ACENES"]

#: reference file of each set
FILES = {"ip": "ip_gas.csv", "ea": "ea_gas.csv", "gap_opt": "gap_optical.csv", "film": "levels_film.csv",
         "series": "gap_series.csv", "dyes": "dyes.csv"}
_NEEDED = {"ip": ["name", "smiles", "value_ev", "source"], "ea": ["name", "smiles", "value_ev", "source"],
           "gap_opt": ["name", "smiles", "value_ev", "source"],
           "film": ["name", "smiles", "homo_ev", "lumo_ev", "source"],
           "series": ["series", "n", "name", "smiles", "value_ev", "kind", "phase"],
           "dyes": ["name", "smiles", "e00_ev"]}
#: sets without which no model can be fitted (the others are optional)
REQUIRED_SETS = ("ip", "ea", "gap_opt", "film")
#: ferrocene/ferrocenium level assumed when normalising electrochemical data (:data:`screen.constants.FC_FILM_EV`) [eV]
FC_REFERENCE_EV = FC_FILM_EV
#: the dye columns this calibration uses (and hashes)
_DYE_COLUMNS = ["name", "smiles", "e00_ev", "exclude_reason"]

#: benzene … pentacene (canonical SMILES)
ACENES = {"c1ccccc1", "c1ccc2ccccc2c1", "c1ccc2cc3ccccc3cc2c1", "c1ccc2cc3cc4ccccc4cc3cc2c1",
          "c1ccc2cc3cc4cc5ccccc5cc4cc3cc2c1"}
_FULLERENE = re.compile(r"C60|C70|fuller[eo]|ICBA|ICMA|IC70", re.I)
_NFA = re.compile(r"ITIC|^IT-|Y6|IDTBR|IDIC|IEICO|L8-BO|BTP|FBR|IO-4Cl|PTCDI|PDI")
_BDT = Chem.MolFromSmarts("c1cc2cc3ccsc3cc2s1")
_THIOPHENE_ONLY = re.compile(r"thiophene", re.I)
_PV = re.compile(r"stilbene|styryl|^OPV|phenylene vinylene", re.I)
_FLUORENE = re.compile(r"fluorene(?!.*anth)", re.I)


def read_reference(reference_dir: str | Path) -> dict[str, pd.DataFrame]:
    """Read the reference sets (keys of :data:`FILES`; optional sets absent → empty frames).

    Raises
    ------
    InputError
        A required file is missing, a file lacks the needed columns, or a row holds a value,
        structure, repeat or empty source that cannot be fitted (a film row's ``derived_level``
        other than ``homo``, ``lumo`` or empty among them; see
        :func:`screen.calibration.refcheck.check_reference_set`): one message naming the file,
        the line, the column, the value and the fix.
    """
    reference_dir = Path(reference_dir)
    sets = {}
    for name, file in FILES.items():
        path = reference_dir / file
        if name not in REQUIRED_SETS and not path.is_file():
            sets[name] = pd.DataFrame(columns=_NEEDED[name] + ["exclude_reason"])
            continue
        frame = read_csv_checked(path, _NEEDED[name], what="reference file", dtype=str, keep_default_na=False)
        if "exclude_reason" not in frame.columns:
            frame["exclude_reason"] = ""
        if name == "film":
            _fill_derived(frame)
        check_reference_set(name, frame, path)  # every value, structure, repeat and source, before any work
        frame = frame[frame["smiles"].str.strip().ne("")].copy()
        if name == "film":
            if "gap_opt_ev" not in frame.columns:  # a fact-check: calibrated silently with 3 film gaps instead of 76
                print(f"dascreen: reference file {path} has no gap_opt_ev column (film absorption onsets): the film "
                      "optical-gap model is fitted without these rows and the film LUMO model may fall back to the "
                      "gas EA plus a constant; add the onsets to use them", file=sys.stderr)
        sets[name] = frame
    return sets


def _fill_derived(film: pd.DataFrame) -> None:
    """Add an empty ``derived_level`` column when absent (every level measured); strip the cells (other values
    are refused by :func:`screen.calibration.refcheck.check_reference_set`)."""
    if "derived_level" not in film.columns:
        film["derived_level"] = ""
    film["derived_level"] = film["derived_level"].str.strip()


def reference_inputs(sets: dict[str, pd.DataFrame]) -> pd.DataFrame:
    """One candidate row per distinct reference structure (``id, smiles, name``).

    Ids are ``ref-NNN`` in order of first appearance (ip, ea, gap_opt, film, series,
    dyes). Polymer repeat units are passed as written; prepare expands them into oligomers.
    """
    seen: dict[str, dict] = {}
    for name in FILES:
        frame = sets.get(name)
        if frame is None:
            continue
        for label, smi in zip(frame["name"], frame["smiles"]):
            can = canonical(smi)
            if can and can not in seen:
                seen[can] = {"id": f"ref-{len(seen):03d}", "smiles": smi, "name": label}
    return pd.DataFrame(list(seen.values()), columns=["id", "smiles", "name"])


def reference_files(reference_dir: str | Path) -> list[str]:
    """Paths of the reference CSV files of a reference folder (existing or not)."""
    return [str(Path(reference_dir) / f) for f in FILES.values()]


def reference_hash(reference_dir: str | Path) -> str:
    """SHA-256 over the reference files (order-fixed; of ``dyes.csv`` only the columns used here)."""
    h = hashlib.sha256()
    for name in reference_files(reference_dir):
        path = Path(name)
        h.update(path.name.encode())
        if not path.is_file():
            continue
        if path.name == FILES["dyes"]:
            frame = pd.read_csv(path, dtype=str, keep_default_na=False)
            h.update(frame.reindex(columns=_DYE_COLUMNS, fill_value="").to_csv(index=False).encode())
        else:
            h.update(path.read_bytes())
    return h.hexdigest()


def normalised_film(film: pd.DataFrame) -> pd.DataFrame:
    """Film rows with HOMO/LUMO brought to one ferrocene convention (:data:`FC_REFERENCE_EV`).

    A value reported with Fc at −5.1 eV is shifted by +0.3 eV (Cardona et al. 2011,
    :doi:`10.1002/adma.201004554`).
    """
    film = film.copy()
    fc = pd.to_numeric(film.get("fc_reference_ev", pd.Series("", index=film.index)), errors="coerce")
    shift = (FC_REFERENCE_EV - fc).fillna(0.0)
    for col in ("homo_ev", "lumo_ev"):
        film[col] = pd.to_numeric(film[col], errors="coerce") + shift
    film["gap_opt_ev"] = pd.to_numeric(film.get("gap_opt_ev"), errors="coerce")
    return film


def measured_film(film: pd.DataFrame) -> pd.DataFrame:
    """Film rows with every derived level blanked (NaN): only measured levels are targets of a level model.

    A level computed from the other one and the optical gap (``derived_level``: "LUMO = HOMO + Eg(opt)",
    "HOMO = LUMO - Eg(opt)") is an optical level, not the oxidation/reduction (transport) level the film
    models predict: the transport gap exceeds the optical gap by the exciton binding energy (J.-L. Brédas,
    Mater. Horiz. 1 (2014) 17, :doi:`10.1039/c3mh00098b`); in this set PBDB-T's CV reduction onset lies
    0.6 eV above its HOMO + Eg(opt). The row keeps its other level and its optical gap.
    """
    film = film.copy()
    kind = film["derived_level"] if "derived_level" in film else pd.Series("", index=film.index)
    for level in DERIVED_LEVELS:
        film[f"{level}_ev"] = pd.to_numeric(film[f"{level}_ev"], errors="coerce").mask(kind.eq(level).to_numpy())
    return film


def joined(ref: pd.DataFrame, computed: pd.DataFrame, drop_excluded: bool = True) -> pd.DataFrame:
    """Reference rows with the computed ``xtb_*``/``chain_*`` columns of their structure (by canonical SMILES).

    Rows whose structure failed or lacks an ``xtb_ip_ev`` value are dropped, as are rows lacking a
    raw value that at least 90 % of the rows have (so every candidate feature set sees the same rows).
    """
    if drop_excluded:
        ref = ref[ref["exclude_reason"].str.strip().eq("")]
    comp = computed[computed["status"].eq("ok")].copy()
    comp["_can"] = [canonical(s) for s in comp["smiles"]]
    comp = comp.drop_duplicates("_can").set_index("_can")
    cols = [c for c in comp.columns if c.startswith(("xtb_", "chain_")) or c == "representation"]
    ref = ref.copy()
    ref["_can"] = [canonical(s) for s in ref["smiles"]]
    ref = ref.drop(columns=[c for c in cols if c in ref.columns])
    out = ref.join(comp[cols], on="_can", how="inner")
    out = out[np.isfinite(pd.to_numeric(out["xtb_ip_ev"], errors="coerce"))]
    for col in [c for c in out.columns if c.startswith("xtb_")]:
        values = np.isfinite(pd.to_numeric(out[col], errors="coerce"))
        if values.mean() >= 0.9:  # a descriptor missing for a few rows: drop them (all sets compare alike)
            out = out[values]
    return out


def family(name: str, smiles: str, representation: str, source: str) -> str:
    """Material family of a reference row, for grouped hold-out validation.

    Rules, first match wins: polymer repeat units → ``polymers: BDT copolymers`` (a
    benzo[1,2-b:4,5-b']dithiophene unit) or ``polymers: other``; names of fullerenes
    (C60, C70 and their adducts) → ``fullerenes``; names of the non-fullerene
    acceptors of the film set (ITIC, Y-series, IDTBR, PDI …) → ``non-fullerene
    acceptors``; the dye set → ``dyes``; benzene … pentacene → ``acenes``;
    oligothiophenes, phenylene vinylenes (stilbene, distyrylbenzene, OPVs) and
    fluorenes by name; other film-set molecules →
    ``small-molecule donors``; the rest → ``other small molecules``.
    """
    mol = Chem.MolFromSmiles(smiles) if smiles else None
    if representation == "polymer" or "*" in (smiles or ""):
        return "polymers: BDT copolymers" if mol is not None and mol.HasSubstructMatch(_BDT) else "polymers: other"
    if _FULLERENE.search(name):
        return "fullerenes"
    if _NFA.search(name):
        return "non-fullerene acceptors"
    if source == "dyes":
        return "dyes"
    if canonical(smiles) in ACENES:
        return "acenes"
    if _THIOPHENE_ONLY.search(name):
        return "oligothiophenes"
    if _PV.search(name):
        return "phenylene vinylenes"
    if _FLUORENE.search(name):
        return "fluorenes"
    return "small-molecule donors" if source == "film" else "other small molecules"
