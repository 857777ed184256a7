"""Device levels on one scale: the donor and acceptor levels of every published device on the film scale.

The model is applied at ranking time to levels on the film calibration's scale
(``models/reference/levels_film.csv``: film/CV values with ferrocene at
−4.8 eV below vacuum), so it is fitted on levels on that same scale.  The
device table quotes each paper's own levels in mixed conventions (the
vacuum-deposited fullerene cells use energy-diagram values, C60 LUMO −4.5 eV,
where the CV scale has −3.82 eV).  :func:`resolve_levels` therefore takes, for
every donor and acceptor separately:

1. ``film`` — the film-set row of the same material, matched by name (the
   name or one of its bracketed aliases, punctuation ignored), else
   ``film-structure`` — the film-set row with the same canonical SMILES
   (materials drawn identically after side-chain shortening, e.g. BTP-4Cl and
   BTP-eC9, get the levels the calibration would give that structure);
2. ``paper-cv`` (flagged) — otherwise the paper's CV values moved to the
   −4.8 eV ferrocene scale: a level written with ferrocene at ``fc`` eV is
   ``fc − E``, so on the −4.8 eV scale it is ``level + (−4.8 − fc)``
   (−5.1 → −4.8 eV: +0.3 eV); optical gaps are not shifted;
3. ``paper-shifted`` (flagged) — paper values with no ferrocene reference
   (energy-diagram, UPS or unreferenced CV values): moved by the median
   film − paper difference of the materials *of the same role* that appear
   both with such values in the device table and in the film set (at least
   :data:`MIN_SHARED_MATERIALS` distinct materials, else the row is dropped);
4. a donor LUMO that is still missing becomes HOMO + optical gap (the film
   set's own convention for several polymers; flagged);
5. a row whose six levels are still incomplete is dropped with its reason;
6. a row whose ``architecture`` is a planar bilayer (:data:`NOT_BLEND`) is
   dropped too: the model estimates bulk-heterojunction blends, and a
   bilayer's donor/acceptor interface, and with it its losses and current, is
   of another kind (an empty ``architecture`` means a bulk heterojunction).

:func:`level_table` returns every row with the resolved levels, their
sources and the reason of every dropped row (written to
``models/device/device_levels.csv`` by ``--write``).  Neither reference file
is edited.

References
----------
.. [1] C. M. Cardona, W. Li, A. E. Kaifer, D. Stockdale, G. C. Bazan, Adv. Mater. 23 (2011) 2367
   (ferrocene reference values in CV level estimates). :doi:`10.1002/adma.201004554`

Examples
--------
>>> d = read_devices()
>>> bool(d[LEVELS].notna().all().all()) and len(d) + len(d.attrs["dropped"]) == len(pd.read_csv(DEVICES_PATH))
True
"""

from __future__ import annotations

import re
from functools import lru_cache
from pathlib import Path

import numpy as np
import pandas as pd

from screen.chem import canonical_smiles
from screen.constants import FC_FILM_EV
from screen.errors import InputError
from screen.io import text_cells

__all__ = ["DEVICES_PATH", "FILM_PATH", "FC_SCALE_EV", "MIN_SHARED_MATERIALS", "LEVELS", "NOT_BLEND", "level_table",
           "resolve_levels", "read_devices"]

#: ``architecture`` values of devices that are not bulk-heterojunction blends (dropped with their reason)
NOT_BLEND = ("planar bilayer",)

_REPO = Path(__file__).resolve().parent.parent
DEVICES_PATH = _REPO / "models" / "reference" / "devices.csv"
#: the film/CV reference set that defines the calibration's level scale
FILM_PATH = _REPO / "models" / "reference" / "levels_film.csv"
#: ferrocene level of the film scale (:data:`screen.constants.FC_FILM_EV`) [eV]
FC_SCALE_EV = FC_FILM_EV
#: distinct shared materials needed to estimate the shift of values without a ferrocene reference
MIN_SHARED_MATERIALS = 3
#: the six level columns of a device row, in :data:`screen.device.PAIR_LEVELS` order [eV]
LEVELS = ["donor_homo_ev", "donor_lumo_ev", "donor_gap_opt_ev", "acceptor_homo_ev", "acceptor_lumo_ev",
          "acceptor_gap_opt_ev"]
_LEVELS = LEVELS
_NEEDED = ["device_id", "donor", "donor_smiles", "acceptor", "acceptor_smiles", "acceptor_class", "donor_homo_ev",
           "donor_lumo_ev", "donor_gap_opt_ev", "acceptor_homo_ev", "acceptor_lumo_ev", "acceptor_gap_opt_ev",
           "level_method", "fc_reference_ev", "voc_v", "jsc_ma_cm2", "ff", "pce_pct"]
_KINDS = ("homo", "lumo", "gap_opt")
_METRICS = ["voc_v", "jsc_ma_cm2", "ff", "pce_pct"]


def _name_keys(name) -> set[str]:
    """Match keys of a material name: the whole name, the part outside brackets and each bracketed alias,
    lower case without punctuation, at least 3 characters."""
    text = str(name).lower()
    parts = [text, re.sub(r"\(.*?\)", " ", text)] + re.findall(r"\((.*?)\)", text)
    keys = {re.sub(r"[^a-z0-9]", "", p) for p in parts}
    return {k for k in keys if len(k) >= 3}


@lru_cache(maxsize=4096)
def _canon(smiles) -> str:
    try:
        return canonical_smiles(str(smiles)) if isinstance(smiles, str) and smiles.strip() else ""
    except InputError:
        return ""


def _film_index(film: pd.DataFrame):
    film = film[film.get("exclude_reason", pd.Series(np.nan, index=film.index)).isna()] \
        if "exclude_reason" in film else film
    by_key: dict[str, set[int]] = {}
    by_smiles: dict[str, set[int]] = {}
    for i, row in film.iterrows():
        for key in _name_keys(row["name"]):
            by_key.setdefault(key, set()).add(i)
        can = _canon(row["smiles"])
        if can:
            by_smiles.setdefault(can, set()).add(i)
    return film, by_key, by_smiles


def _film_match(name, smiles, index) -> tuple[int | None, str]:
    """Index of the film-set row of a material and how it was matched ('film' by name, 'film-structure')."""
    film, by_key, by_smiles = index
    hits = set().union(*(by_key.get(k, set()) for k in _name_keys(name))) if _name_keys(name) else set()
    if len(hits) == 1:
        return next(iter(hits)), "film"
    hits = by_smiles.get(_canon(smiles), set())
    if len(hits) == 1:
        return next(iter(hits)), "film-structure"
    return None, ""


def _film_levels(film, i) -> np.ndarray:
    return np.array([pd.to_numeric(film.at[i, c], errors="coerce") for c in ("homo_ev", "lumo_ev", "gap_opt_ev")],
                    dtype=float)


def level_table(devices=DEVICES_PATH, film=FILM_PATH) -> pd.DataFrame:
    """Every device row with its six levels on the film (Fc −4.8 eV) scale and where each came from.

    Columns added to the device table: the six level columns replaced by the
    resolved values (the papers' values kept as ``paper_<column>``),
    ``donor_level_source`` / ``acceptor_level_source`` (``film:<name>``,
    ``film-structure:<name>``, ``paper-cv:+x.xx``, ``paper-shifted:…``; ``+lumo=homo+gap``
    when a donor LUMO was completed), ``levels_converted`` (True unless both
    came from the film set), ``drop_reason`` ('' for a usable row), and the
    group keys ``group`` (acceptor) and ``donor_group``.

    Raises
    ------
    InputError
        A needed column is missing (names the file and the columns).
    """
    frame = pd.read_csv(devices)
    missing = [c for c in _NEEDED if c not in frame]
    if missing:
        raise InputError(f"{devices}: device table lacks columns {missing}")
    for col in _LEVELS + _METRICS + ["fc_reference_ev"]:
        frame[col] = pd.to_numeric(frame[col], errors="coerce")
    index = _film_index(pd.read_csv(film))
    film_rows = index[0]
    frame["acceptor_class"] = frame["acceptor_class"].pipe(text_cells)
    out = frame.copy()
    for col in _LEVELS:
        out[f"paper_{col}"] = frame[col]
    sources = {role: [""] * len(frame) for role in ("donor", "acceptor")}
    resolved = {role: np.full((len(frame), 3), np.nan) for role in ("donor", "acceptor")}
    # pass 1: film-set matches
    matches = {}
    for role in ("donor", "acceptor"):
        for k, (name, smi) in enumerate(zip(frame[role], frame[f"{role}_smiles"])):
            i, how = _film_match(name, smi, index)
            matches[role, k] = (i, how)
            if i is not None:
                resolved[role][k] = _film_levels(film_rows, i)
                sources[role][k] = f"{how}:{film_rows.at[i, 'name']}"
    # shifts for values without a ferrocene reference, per role, from shared materials
    shifts, shift_notes = {}, {}
    for role in ("donor", "acceptor"):
        diffs = {}
        for k in range(len(frame)):
            i, _how = matches[role, k]
            if i is None or np.isfinite(frame.at[k, "fc_reference_ev"]):
                continue
            paper = frame.loc[k, [f"{role}_{x}_ev" for x in _KINDS]].to_numpy(float)
            diffs.setdefault(i, resolved[role][k] - paper)
        arr = np.array(list(diffs.values())) if diffs else np.empty((0, 3))
        ok = [int(np.isfinite(arr[:, j]).sum()) >= MIN_SHARED_MATERIALS for j in range(2)] if len(arr) else [False] * 2
        shifts[role] = np.array([np.nanmedian(arr[:, j]) if ok[j] else np.nan for j in range(2)] + [0.0])
        shift_notes[role] = {"materials": sorted(str(film_rows.at[i, "name"]) for i in diffs),
                             "median_shift_ev": {kind: (round(float(shifts[role][j]), 3) if ok[j] else None)
                                                 for j, kind in enumerate(_KINDS[:2])},
                             "spread_mad_ev": {kind: (round(float(np.nanmedian(np.abs(arr[:, j] - shifts[role][j]))), 3)
                                                      if ok[j] else None) for j, kind in enumerate(_KINDS[:2])}}
    # pass 2: paper values where there is no film row
    for role in ("donor", "acceptor"):
        for k in range(len(frame)):
            if sources[role][k]:
                continue
            paper = frame.loc[k, [f"{role}_{x}_ev" for x in _KINDS]].to_numpy(float)
            fc = frame.at[k, "fc_reference_ev"]
            if np.isfinite(fc):
                shift = FC_SCALE_EV - fc
                resolved[role][k] = paper + np.array([shift, shift, 0.0])
                sources[role][k] = f"paper-cv:{shift:+.2f}"
            else:
                resolved[role][k] = paper + shifts[role]
                s = shifts[role]
                sources[role][k] = (f"paper-shifted:homo{s[0]:+.2f},lumo{s[1]:+.2f}" if np.isfinite(s[:2]).all()
                                    else "paper-unreferenced")
    # a missing donor LUMO: HOMO + optical gap
    d = resolved["donor"]
    fill = np.isnan(d[:, 1]) & np.isfinite(d[:, 0]) & np.isfinite(d[:, 2])
    d[fill, 1] = d[fill, 0] + d[fill, 2]
    for k in np.flatnonzero(fill):
        sources["donor"][k] += "+lumo=homo+gap"
    for role in ("donor", "acceptor"):
        for j, kind in enumerate(_KINDS):
            out[f"{role}_{kind}_ev"] = resolved[role][:, j]
        out[f"{role}_level_source"] = sources[role]
    reasons = []
    for k in range(len(frame)):
        why = []
        for role in ("donor", "acceptor"):
            lack = [kind for j, kind in enumerate(_KINDS) if not np.isfinite(resolved[role][k, j])]
            if lack and sources[role][k] == "paper-unreferenced":
                why.append(f"{role} levels have no ferrocene reference and too few shared materials to convert")
            elif lack:
                why.append(f"{role} {'/'.join(lack)} not known (no film-set row, not given in the paper)")
        if _architecture(frame, k) in NOT_BLEND:
            why.append(f"{_architecture(frame, k)}, not a bulk-heterojunction blend (the model estimates blends)")
        reasons.append("; ".join(why))
    out["drop_reason"] = reasons
    out["levels_converted"] = ~(out["donor_level_source"].str.startswith("film")
                                & out["acceptor_level_source"].str.startswith("film")
                                & ~out["donor_level_source"].str.contains("+", regex=False))
    out["group"] = [_canon(s) or str(n) for s, n in zip(frame["acceptor_smiles"], frame["acceptor"])]
    out["donor_group"] = [_canon(s) or str(n) for s, n in zip(frame["donor_smiles"], frame["donor"])]
    out.attrs["shifts"] = shift_notes
    return out


def _architecture(frame: pd.DataFrame, k: int) -> str:
    """The row's ``architecture`` in lower case ('' when the column is absent or empty: a blend)."""
    if "architecture" not in frame:
        return ""
    value = frame.at[k, "architecture"]
    return str(value).strip().lower() if isinstance(value, str) else ""


def resolve_levels(devices=DEVICES_PATH, film=FILM_PATH) -> pd.DataFrame:
    """:func:`level_table` without the dropped rows (index reset)."""
    table = level_table(devices, film)
    kept = table[table["drop_reason"].eq("")].reset_index(drop=True)
    kept.attrs = table.attrs | {"dropped": table.loc[table["drop_reason"].ne(""), ["device_id", "drop_reason"]]
                                .to_dict("records")}
    return kept


def read_devices(path=DEVICES_PATH, film=FILM_PATH) -> pd.DataFrame:
    """Device rows whose six levels are on the film scale (see :func:`level_table`).

    Voc may be missing: such rows inform the EQE (Jsc), FF and PCE parts only.
    ``attrs['dropped']`` lists the rows left out and why.
    """
    return resolve_levels(path, film)
