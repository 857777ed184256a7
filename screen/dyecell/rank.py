"""Dye-cell ranking: dye table → oxide + mediator → estimates, viability, Monte-Carlo spread → ranking.

Two steps with different costs:

1. :func:`dye_table` turns a run's ``levels.csv`` (raw xTB values) or a user's
   own dye file (measured potentials) into one row per dye with E(S⁺/S) [V vs
   NHE], E₀₋₀ [eV], their σ, the anchoring groups and the element check.  It
   parses every SMILES once (RDKit) and is cached by the stage.
2. :func:`rank_dyes` evaluates the cell for one oxide and one mediator —
   numpy only, no RDKit, no engine — so switching oxide or mediator re-ranks
   thousands of dyes in well under a second (``benchmarks/dyecell_rerank.py``).

A user dye file holds ``id`` and either ``e_ox_v_nhe`` or ``e_ox_v`` with
``e_ox_reference`` (NHE, SCE, Ag/AgCl, Fc) and ``solvent`` (required with Fc:
Fc⁺/Fc vs NHE depends on it), plus ``e00_ev``; optional ``smiles``, ``name``,
``e_ox_sigma_v``, ``e00_sigma_ev``, ``anchor`` and ``scale`` (which must be
``electrochemical`` when given).  Every row must have a unique id and plausible
values (:mod:`screen.dyecell.checks`); otherwise the file is refused, naming
the line, the column and the fix.  A potential converted from another
reference keeps its trace: ``e_ox_reference`` (the ``electrodes.csv`` id it was
converted from; ``nhe`` for a value given vs NHE, empty for a computed one) and
``e_ox_offset_v`` (the potential of that reference vs NHE that was added) go
into the dye table and the ranking, and :func:`conversion_summary` (with the
offsets' sources and ``from_memory``) into ``ranking.meta.json`` and the report.

The ``anchor`` column takes a closed vocabulary
(:func:`screen.dyecell.checks.anchor_column`): anchor names of
:mod:`screen.dyecell.anchors` (several joined with ``;``), ``none``, ``no``,
``false``, ``0`` or ``-`` for no anchoring group, or empty (not stated); any
other value is refused.  It counts only for a row without a readable SMILES:
where the SMILES can be read, the anchoring groups found in it win, and a
column that disagrees with them is named on stderr.  A row whose SMILES RDKit cannot read is not
ranked (status ``rejected``, the reason naming its line and id); the other dyes
are.

Metal-containing dyes are computed by the shared stages (GFN2-xTB covers the
elements up to Rn) but the dye calibration covers only the elements of its
reference dyes: a dye with a metal outside them is not ranked (status
``rejected`` with the reason); a non-metal outside them is ranked with the
``element_uncalibrated`` flag.
"""

from __future__ import annotations

import math
import sys

import numpy as np
import pandas as pd

from screen.dyecell.anchors import find_anchors
from screen.dyecell.calibrate import apply_models, elements_of
from screen.dyecell.checks import (
    E00_RANGE_EV,
    E_OX_RANGE_V_NHE,
    SIGMA_MAX,
    anchor_column,
    check_dye_file,
    merge_reference_alias,
    potential_problem,
    threshold_problem,
    unreadable_smiles,
)
from screen.dyecell.flags import INFO_FLAGS, join_flags, viability_uncertain
from screen.dyecell.library import Material
from screen.dyecell.model import DyeCellModel, evaluate, sample_pce
from screen.dyecell.options import RankOptions
from screen.dyecell.scales import ELECTROCHEMICAL, conversion_hint, electrodes, reference_entry, require_scale
from screen.errors import ConfigError, InputError, ScaleMismatchError
from screen.io import separator_problem, text_cells
from screen.levels_check import GAP_MAX_INPUT_EV, file_line
from screen.prepare.checks import NONMETALS
from screen.spectrum import gap_to_wavelength_nm
from screen.viability import MC_DECIMALS, WRITTEN_DECIMALS

__all__ = ["DYE_COLUMNS", "RANKING_COLUMNS", "EXTRA_COLUMNS", "NONMETALS", "NOT_A_DYE", "dye_table",
           "dyes_from_file", "rank_dyes", "conversion_summary", "value_sources"]

#: columns of the dye table (``OUT/dyecell/dyes.csv``)
DYE_COLUMNS = ["id", "smiles", "name", "status", "error", "e_ox_v_nhe", "e_ox_sigma_v", "e00_ev", "e00_sigma_ev",
               "scale", "anchors", "anchored", "anchor_known", "uncalibrated_elements", "outside_calibration",
               "source", "e_ox_reference", "e_ox_offset_v", "reference_similarity", "unlike_reference_dyes"]
#: columns of ``ranking.csv``, in order
RANKING_COLUMNS = ["rank", "id", "smiles", "e_ox_v_nhe", "e00_ev", "e_ox_excited_v_nhe", "oxide", "mediator",
                   "band_edge_v_nhe", "e_redox_v_nhe", "drive_inj_ev", "drive_reg_ev", "anchors", "viable",
                   "voc_v", "jsc_ma_cm2", "ff", "pce_pct", "pce_sigma_pct", "p_above_target", "p_viable",
                   "passes", "flags", "viability"]
#: columns after the contract ones
EXTRA_COLUMNS = ["name", "e_ox_sigma_v", "e00_sigma_ev", "edge_nm", "uncalibrated_elements", "e_ox_reference",
                 "e_ox_offset_v", "reference_similarity"]
#: reason of a polymer repeat unit in the dye-cell mode (status ``rejected``)
NOT_A_DYE = ("a polymer repeat unit is not a sensitiser dye; dye mode takes molecules (give the dye itself, "
             "without attachment points *)")
_ROUND = WRITTEN_DECIMALS
#: decimals of the Monte-Carlo figures (``pce_sigma_pct``, ``p_above_target``, ``p_viable``; with the default 2000
#: samples they scatter by about ±0.013 and ±0.02 points between seeds, a numerical reviewer, 50 seeds)
_MC_ROUND = MC_DECIMALS
#: ``source`` of a dye-table row calibrated from a run's raw xTB values (:func:`dye_table`): a molecule outside
#: the calibration may get values outside a typed file's plausible ranges, which the model then marks not viable;
#: every other row is held to the dye file's checks (:func:`_check_inputs`)
CALIBRATED_SOURCE = "calibrated from xTB (dye models)"


def _text_col(frame: pd.DataFrame, col: str) -> pd.Series:
    if col not in frame:
        return pd.Series([""] * len(frame), index=frame.index, dtype=object)
    return frame[col].pipe(text_cells)


def _num_col(frame: pd.DataFrame, col: str) -> np.ndarray:
    if col not in frame:
        return np.full(len(frame), np.nan)
    return pd.to_numeric(frame[col], errors="coerce").to_numpy(float)


def _structure_checks(smiles: pd.Series, covered: set[str]):
    """Anchors, anchored, element problems per SMILES: (anchors text, anchored, known, uncalibrated, metal)."""
    from rdkit import Chem

    anchors, anchored, known, uncal, metal = [], [], [], [], []
    for smi in smiles:
        found = find_anchors(smi) if smi else None
        anchors.append("; ".join(found or []))
        anchored.append(bool(found))
        known.append(found is not None)
        els = elements_of(smi) if smi else set()
        outside = sorted(els - covered) if covered else []
        uncal.append(" ".join(outside))
        metal.append([e for e in outside if Chem.GetPeriodicTable().GetAtomicNumber(e) not in NONMETALS])
    return anchors, anchored, known, uncal, metal


def dye_table(levels: pd.DataFrame, models: dict[str, dict]) -> pd.DataFrame:
    """One dye row per levels row: calibrated E(S⁺/S), E₀₋₀, σ, anchors and the element check.

    Parameters
    ----------
    levels : pandas.DataFrame
        A run's ``levels.csv`` (every input row; ``status``, ``smiles``, raw ``xtb_*``).
    models : dict
        Dye models (:func:`screen.dyecell.calibrate.load_models`).

    Returns
    -------
    pandas.DataFrame
        :data:`DYE_COLUMNS`.  Rows that were not computed keep their status
        and error; a polymer repeat unit (``representation = polymer``) and a
        computed dye with a metal outside the calibration become ``rejected``
        with the reason.
    """
    cal = apply_models(levels, models)
    covered = set(models["e_ox"].get("elements") or [])
    smiles = _text_col(levels, "smiles")
    anchors, anchored, known, uncal, metal = _structure_checks(smiles, covered)
    status = _text_col(levels, "status").where(lambda s: s.ne(""), "ok").to_numpy(object, copy=True)
    error = _text_col(levels, "error").to_numpy(object, copy=True)
    polymer = _text_col(levels, "representation").eq("polymer").to_numpy() | smiles.str.contains("*", regex=False)
    for i in np.flatnonzero(polymer & (status == "ok")):
        status[i], error[i] = "rejected", NOT_A_DYE
    for i, met in enumerate(metal):
        if met and status[i] == "ok":
            status[i] = "rejected"
            error[i] = (f"contains {', '.join(met)}: metal-containing dyes are outside the dye calibration "
                        f"(fitted on organic dyes of {', '.join(sorted(covered))}); not ranked")
    ok = status == "ok"
    out = pd.DataFrame({
        "id": _text_col(levels, "id"), "smiles": smiles, "name": _text_col(levels, "name"),
        "status": status, "error": error,
        "e_ox_v_nhe": np.where(ok, cal["e_ox_v_nhe"], np.nan), "e_ox_sigma_v": np.where(ok, cal["e_ox_sigma_v"], np.nan),
        "e00_ev": np.where(ok, cal["e00_ev"], np.nan), "e00_sigma_ev": np.where(ok, cal["e00_sigma_ev"], np.nan),
        "scale": np.where(ok, cal["scale"], ""), "anchors": anchors, "anchored": anchored, "anchor_known": known,
        "uncalibrated_elements": uncal, "outside_calibration": cal["outside_calibration"].to_numpy(bool) & ok,
        "source": CALIBRATED_SOURCE, "e_ox_reference": "", "e_ox_offset_v": np.nan,
        "reference_similarity": np.where(ok, cal["reference_similarity"], np.nan),
        "unlike_reference_dyes": cal["unlike_reference_dyes"].to_numpy(bool) & ok,
    })
    return out[DYE_COLUMNS]


def dyes_from_file(frame: pd.DataFrame, where: str = "dye file") -> pd.DataFrame:
    """A user's dye file (measured or otherwise known potentials) as a dye table.

    Raises
    ------
    ScaleMismatchError
        A ``scale`` column other than ``electrochemical``, or a levels file on
        the vacuum scale (``homo_ev`` …) without dye potentials.
    InputError
        Missing columns, no rows, or a row with an empty, repeated or impossible value
        (:func:`screen.dyecell.checks.check_dye_file`: file, line, column and the fix).

    Notes
    -----
    A SMILES that RDKit cannot read does not stop the file: that row becomes
    ``rejected`` with the reason (:func:`screen.dyecell.checks.unreadable_smiles`).

    Examples
    --------
    >>> t = dyes_from_file(pd.DataFrame({"id": ["a"], "e_ox_v": [0.40], "e_ox_reference": ["Fc"],
    ...                                  "solvent": ["acetonitrile"], "e00_ev": [2.0]}))
    >>> float(t.loc[0, "e_ox_v_nhe"]), t.loc[0, "scale"]
    (1.03, 'electrochemical')
    """
    if not isinstance(frame, pd.DataFrame):  # a path gave "AttributeError: 'str' object has no attribute 'columns'"
        raise TypeError(f"dyes_from_file takes the rows as a pandas DataFrame, not {type(frame).__name__}; read a "
                        "file with screen.dyecell.stage.read_input(path), which checks it as the command does")
    if "id" not in frame:
        problem = separator_problem(frame.columns)
        raise InputError(f"{where}: {problem}" if problem else f"{where}: needs an id column")
    frame = merge_reference_alias(frame, where)
    has_nhe, has_ref = "e_ox_v_nhe" in frame, "e_ox_v" in frame
    if "e00_ev" not in frame or not (has_nhe or has_ref):
        if "homo_ev" in frame:
            scales = sorted(set(_text_col(frame, "scale").str.strip()) - {""}) or ["(none given)"]
            raise ScaleMismatchError(
                f"{where} holds vacuum-scale levels (homo_ev, scale {', '.join(scales)}) without raw xTB values; "
                "the dye-cell mode needs E(S+/S) in V vs NHE and E00: give e_ox_v_nhe (or e_ox_v with "
                f"e_ox_reference) and e00_ev, or pass a dascreen run's levels.csv. {conversion_hint(scales)}")
        raise InputError(f"{where}: a dye file needs id, e_ox_v_nhe (or e_ox_v + e_ox_reference, also named reference) and e00_ev; "
                         f"found {list(frame.columns)}")
    if "scale" in frame:
        given = _text_col(frame, "scale").str.strip()
        require_scale(given[given.ne("")], f"{where} (column scale)")
    e_ox = check_dye_file(frame, where)
    ref_ids, offsets = _conversions(frame)
    stated = anchor_column(frame, where)
    smiles = _text_col(frame, "smiles")
    anchors, anchored, known, _, _ = _structure_checks(smiles, set())
    _apply_anchor_column(frame, stated, anchors, anchored, known, where)
    e_ox = np.round(e_ox, _ROUND)  # converted potentials: no binary noise (0.5609999999999999) in the outputs
    e00 = _num_col(frame, "e00_ev")
    ok = np.isfinite(e_ox) & np.isfinite(e00)
    error = np.where(ok, "", "E(S+/S) or E00 missing or not a number").astype(object)
    for i, why in unreadable_smiles(frame).items():
        ok[i], error[i] = False, why
    out = pd.DataFrame({
        "id": _text_col(frame, "id"), "smiles": smiles, "name": _text_col(frame, "name"),
        "status": np.where(ok, "ok", "rejected"), "error": error,
        "e_ox_v_nhe": e_ox, "e_ox_sigma_v": np.nan_to_num(_num_col(frame, "e_ox_sigma_v"), nan=0.0),
        "e00_ev": e00, "e00_sigma_ev": np.nan_to_num(_num_col(frame, "e00_sigma_ev"), nan=0.0),
        "scale": np.where(ok, ELECTROCHEMICAL, ""), "anchors": anchors, "anchored": anchored,
        "anchor_known": known, "uncalibrated_elements": "", "outside_calibration": False,
        "source": _text_col(frame, "source").str.strip().where(lambda s: s.ne(""), "user file"),
        "e_ox_reference": ref_ids, "e_ox_offset_v": offsets,
        # measured potentials: no computed structure was calibrated, so no similarity and no flag
        "reference_similarity": np.nan, "unlike_reference_dyes": False,
    })
    return out[DYE_COLUMNS]


def _conversions(frame: pd.DataFrame) -> tuple[list[str], np.ndarray]:
    """Per row of a checked dye file: the ``electrodes.csv`` id its E(S⁺/S) was converted from (``nhe`` when given
    as ``e_ox_v_nhe``, which wins where both are given) and the offset added [V]; ``""``/NaN without a value.

    A dye table fed back in keeps its trace (``e_ox_reference``, ``e_ox_offset_v``) where the reference, read with
    the row's solvent, has that offset in ``electrodes.csv``; otherwise the value counts as given vs NHE (a
    maintainer's review: ``Fc`` in DMF with 0.69 V was recorded as ``fc-mecn``, whose offset is 0.63 V)."""
    direct = _num_col(frame, "e_ox_v_nhe")
    raw = _num_col(frame, "e_ox_v")
    refs, solv = _text_col(frame, "e_ox_reference").str.strip(), _text_col(frame, "solvent").str.strip()
    kept = _num_col(frame, "e_ox_offset_v")  # a dye table fed back in keeps the trace of its conversions
    ids, offsets = [], np.full(len(frame), np.nan)
    for i in range(len(frame)):
        entry = (reference_entry(refs.iloc[i], solv.iloc[i] or None)
                 if np.isfinite(direct[i]) and np.isfinite(kept[i]) and refs.iloc[i] and not np.isfinite(raw[i])
                 else None)
        if entry is not None and abs(entry["offset_v"] - kept[i]) < 1e-6:
            ids.append(entry["reference"])
            offsets[i] = kept[i]
        elif np.isfinite(direct[i]):
            ids.append("nhe")
            offsets[i] = 0.0
        elif np.isfinite(raw[i]) and refs.iloc[i]:
            entry = reference_entry(refs.iloc[i], solv.iloc[i])  # checked by check_dye_file: it converts
            ids.append(entry["reference"])
            offsets[i] = entry["offset_v"]
        else:
            ids.append("")
    return ids, offsets


def conversion_summary(rows: pd.DataFrame) -> list[dict]:
    """The reference conversions behind the E(S⁺/S) of ``rows`` (a dye table or a ranking), one entry per
    ``electrodes.csv`` id other than ``nhe``: ``reference``, ``name``, ``solvent``, ``offset_v`` [V vs NHE],
    ``from_memory``, ``source`` and ``rows`` (how many rows were converted with it).

    Examples
    --------
    >>> t = dyes_from_file(pd.DataFrame({"id": ["a", "b"], "e_ox_v": [0.40, 0.40], "e_ox_reference": ["Fc", "SCE"],
    ...                                  "solvent": ["DMF", ""], "e00_ev": [2.0, 2.0]}))
    >>> [(c["reference"], c["offset_v"], c["from_memory"], c["rows"]) for c in conversion_summary(t)]
    [('fc-dmf', 0.69, True, 1), ('sce', 0.241, False, 1)]
    """
    if "e_ox_reference" not in rows:
        return []
    ids = _text_col(rows, "e_ox_reference").str.strip()
    counts = ids[ids.ne("") & ids.ne("nhe")].value_counts()
    table = electrodes()
    out = []
    for ident in sorted(counts.index):
        entry = reference_entry(ident)
        known = ident in table.index
        out.append({"reference": ident, "name": str(table.loc[ident, "name"]) if known else "",
                    "solvent": str(table.loc[ident, "solvent"]) if known else "", "offset_v": entry["offset_v"],
                    "from_memory": entry["from_memory"], "source": entry["source"], "rows": int(counts[ident])})
    return out


def value_sources(rows: pd.DataFrame) -> dict[str, int]:
    """How many rows of a dye table or ranking have each ``source`` text (where their E(S⁺/S) and E₀₋₀ come from).

    Examples
    --------
    >>> value_sources(pd.DataFrame({"source": ["user file", "CV in MeCN", "user file"]}))
    {'user file': 2, 'CV in MeCN': 1}
    """
    if "source" not in rows:
        return {}
    return {str(k): int(v) for k, v in _text_col(rows, "source").str.strip().value_counts().items()}


def _apply_anchor_column(frame: pd.DataFrame, stated: list, anchors: list, anchored: list, known: list,
                         where: str) -> None:
    """Use the ``anchor`` column where the SMILES cannot tell; say on stderr where it disagrees with the SMILES.

    ``stated``: per row the names of :func:`screen.dyecell.checks.anchor_column` (``[]`` = none, None = not
    stated).  A row whose SMILES RDKit reads keeps the groups found in it (the structure wins); the column
    fills in rows without a readable SMILES.  ``anchors``, ``anchored`` and ``known`` are updated in place.
    """
    ids = _text_col(frame, "id").tolist()
    clashes = []
    for i, names in enumerate(stated):
        if names is None:
            continue
        if not known[i]:  # no structure: the column is all there is
            anchors[i], anchored[i], known[i] = "; ".join(names), bool(names), True
            continue
        found = [a for a in anchors[i].split("; ") if a]
        if bool(names) != bool(found) or not set(names) <= set(found):
            said = "; ".join(names) if names else "no anchoring group"
            has = ("has " + "; ".join(found)) if found else "has no anchoring group"
            clashes.append(f"line {file_line(frame, i)} (id {ids[i]!r}): column anchor says {said}, but the SMILES {has}")
    if clashes:
        more = f"\n  ... and {len(clashes) - 5} more" if len(clashes) > 5 else ""
        print(f"dascreen dyecell: {where}: the anchor column disagrees with the SMILES in {len(clashes)} row(s); the "
              "anchoring groups found in the SMILES are used (the column counts only for rows without a readable "
              "SMILES; correct the SMILES or the column):\n  " + "\n  ".join(clashes[:5]) + more, file=sys.stderr)


def _bool_col(frame: pd.DataFrame, col: str, default: bool) -> np.ndarray:
    if col not in frame:
        return np.full(len(frame), default)
    return frame[col].map(lambda v: v if isinstance(v, (bool, np.bool_)) else str(v).strip().lower()
                          in ("true", "1", "yes")).to_numpy(bool)


def _flag_masks(d: pd.DataFrame, dev: dict, known: np.ndarray, mc: dict) -> dict[str, np.ndarray]:
    """One boolean mask per flag code: the model's, the Monte-Carlo spread's (``viability_uncertain`` from
    ``p_viable``; ``few_viable_samples``: a viable dye whose spread is not known), the anchor check's and the
    calibration's."""
    masks = {k: np.asarray(dev[k], bool) for k in ("input_missing", "no_anchor", "no_sunlight", "injection_low",
                                                    "regeneration_low", "voc_nonpositive", "p_type_estimate",
                                                    "detailed_balance_cap", "anchor_missing_allowed")}
    masks["viability_uncertain"] = viability_uncertain(mc["p_viable"])
    masks["few_viable_samples"] = (np.asarray(dev["viable"], bool) & np.isnan(np.asarray(mc["pce_sigma_pct"], float))
                                   & np.isfinite(np.asarray(mc["p_viable"], float)))
    masks["anchor_unknown"] = ~known
    masks["element_uncalibrated"] = _text_col(d, "uncalibrated_elements").str.strip().ne("").to_numpy()
    masks["outside_calibration"] = _bool_col(d, "outside_calibration", False)
    masks["unlike_reference_dyes"] = _bool_col(d, "unlike_reference_dyes", False)
    return masks


def _check_inputs(dyes: pd.DataFrame, ranked: np.ndarray, oxide: Material, mediator: Material,
                  model: DyeCellModel) -> None:
    """Hold what :func:`rank_dyes` is given from Python to the checks of the files it would come from (an API
    audit: ``e_ox_v_nhe`` = 1050, millivolts, gave "E(S⁺/S*) = +1047.90 V"; an oxide at −500 "498.95 eV").

    - the ranked rows that were not calibrated from a run (``source`` other than :data:`CALIBRATED_SOURCE`): the
      dye file's ranges (:func:`screen.dyecell.checks.check_dye_file`, which names the row and the fix; it runs
      only when a vectorised test of the same ranges finds a row outside them, so re-ranking stays numpy-fast),
      except an E₀₋₀ between the file's 4 eV and :data:`screen.levels_check.GAP_MAX_INPUT_EV` (above it: a
      wavelength in nm), which the model marks not viable as a transparent molecule;
    - the oxide and the mediator: their roles, an oxide type ``n``, ``p`` or '' (taken as ``n``), the
      potential range of an oxide or mediator file (:func:`screen.dyecell.checks.potential_problem`) and a
      mediator's own regeneration threshold (:func:`screen.dyecell.checks.threshold_problem`);
    - the model: a :class:`~screen.dyecell.model.DyeCellModel` (which holds its own fields to the schema's
      ``dyecell`` section: a ``voc_loss_v`` of 200, millivolts, is refused when it is made).

    Examples
    --------
    >>> from screen.dyecell.library import resolve_mediator
    >>> ox = Material("mine", "mine", "oxide", -500.0, "n", kind="file")
    >>> _check_inputs(pd.DataFrame(), np.zeros(0, bool), ox, resolve_mediator("co-bpy3"), DyeCellModel())
    Traceback (most recent call last):
    ...
    screen.errors.InputError: oxide 'mine', potential_v_nhe = -500.0: band edges of oxides and redox potentials of mediators lie roughly in -1.5...+2 V vs NHE; -500 looks like millivolts: write -0.5 V
    """
    for material, role in ((oxide, "oxide"), (mediator, "mediator")):
        if not isinstance(material, Material) or material.role != role:
            what = (f"a Material of role {material.role!r} ({material.id!r})" if isinstance(material, Material)
                    else type(material).__name__)
            raise InputError(f"rank_dyes: the {role} is {what}; pass screen.dyecell.library.resolve_{role}(...) "
                             f"(library ids: `dascreen dyecell --list`) or a Material with role {role!r}")
        try:
            value = float(material.potential_v_nhe)
        except (TypeError, ValueError):
            value = math.nan
        problem = (potential_problem(value, "potential_v_nhe") if math.isfinite(value)
                   else "not a finite number; give the potential in V vs NHE, e.g. -0.5")
        if problem:
            raise InputError(f"{role} {material.id!r}, potential_v_nhe = {material.potential_v_nhe!r}: {problem}")
    if oxide.type not in ("n", "p", ""):  # '' is n, as an oxide file without a type; the model read "P" as n
        raise InputError(f"oxide {oxide.id!r}: type = {oxide.type!r}; allowed: 'n' (electrons injected into the "
                         "conduction band, TiO2), 'p' (holes into the valence band, NiO) or '' (taken as n)")
    if not isinstance(model, DyeCellModel):
        raise ConfigError(f"rank_dyes: the model must be a screen.dyecell.model.DyeCellModel, not "
                          f"{type(model).__name__}")
    own = math.nan if mediator.min_drive_reg_ev is None else float(mediator.min_drive_reg_ev)
    problem = threshold_problem(own) if math.isfinite(own) else None
    if problem:
        raise InputError(f"mediator {mediator.id!r}, min_drive_reg_ev = {own:g}: {problem}")
    typed = ranked & _text_col(dyes, "source").str.strip().ne(CALIBRATED_SOURCE).to_numpy()
    if not typed.any():
        return
    e_ox, e00 = _num_col(dyes, "e_ox_v_nhe"), _num_col(dyes, "e00_ev")
    with np.errstate(invalid="ignore"):
        out = (e_ox < E_OX_RANGE_V_NHE[0]) | (e_ox > E_OX_RANGE_V_NHE[1]) | np.isinf(e_ox)
        # E00 above the file's 4 eV but below a wavelength in nm is kept: a transparent molecule the model marks
        # not viable ("absorbs no sunlight"), as a calibration gives for acetic acid (4.91 eV)
        out |= (e00 < E00_RANGE_EV[0]) | (e00 > GAP_MAX_INPUT_EV) | np.isinf(e00)
        for col in ("e_ox_sigma_v", "e00_sigma_ev"):
            sig = _num_col(dyes, col)
            out |= (sig < 0) | (sig > SIGMA_MAX) | np.isinf(sig)
    bad = typed & out
    if bad.any():
        columns = [c for c in ("id", "e_ox_v_nhe", "e00_ev", "e_ox_sigma_v", "e00_sigma_ev") if c in dyes]
        check_dye_file(dyes.loc[bad, columns], "dye table")


def rank_dyes(dyes: pd.DataFrame, oxide: Material, mediator: Material, model: DyeCellModel | None = None,
              options: RankOptions | None = None) -> pd.DataFrame:
    """Rank the ``ok`` dyes of a dye table for one oxide and one mediator (vectorised).

    Parameters
    ----------
    dyes : pandas.DataFrame
        :data:`DYE_COLUMNS` (from :func:`dye_table` or :func:`dyes_from_file`).
    oxide, mediator : Material
    model : DyeCellModel, optional
    options : RankOptions, optional

    Returns
    -------
    pandas.DataFrame
        :data:`RANKING_COLUMNS` + :data:`EXTRA_COLUMNS`, best first: passing
        (viable) dyes first, then ``options.sort_by`` descending, then
        ``p_above_target``, ``id`` and input order; ``attrs["not_ranked"]``
        counts the other rows by status.

    Raises
    ------
    ScaleMismatchError
        A ranked row is not on the electrochemical scale.
    InputError
        A ranked row not calibrated from a run with a value a dye file may not hold (E(S⁺/S) in mV, E₀₋₀ in nm,
        a σ below 0 …), an oxide or mediator of the wrong role, an implausible potential (mV, vacuum scale) or
        threshold, or an oxide type other than ``n``, ``p`` and '' (:func:`_check_inputs`).
    ConfigError
        A model value outside the schema's ``dyecell`` section.

    Examples
    --------
    >>> from screen.dyecell.library import resolve_mediator, resolve_oxide
    >>> t = dyes_from_file(pd.DataFrame({"id": ["a", "b"], "e_ox_v_nhe": [1.07, 0.5], "e00_ev": [1.96, 2.0],
    ...                                  "smiles": ["OC(=O)c1ccccc1", "c1ccccc1"]}))
    >>> r = rank_dyes(t, resolve_oxide("tio2-anatase"), resolve_mediator("co-bpy3"))
    >>> r["id"].tolist(), r["passes"].tolist(), r["flags"].tolist()
    (['a', 'b'], [True, False], ['', 'no_anchor;regeneration_low'])
    """
    model = model or DyeCellModel()
    options = options or RankOptions()
    st = _text_col(dyes, "status").str.strip().str.lower()
    ranked = st.eq("ok").to_numpy()
    _check_inputs(dyes, ranked, oxide, mediator, model)
    not_ranked = {str(k): int(v) for k, v in st[~ranked].value_counts().items()}
    d = dyes[ranked].reset_index(drop=True)
    require_scale(_text_col(d, "scale"), "dye table (column scale)")
    e_ox, e00 = _num_col(d, "e_ox_v_nhe"), _num_col(d, "e00_ev")
    s_ox = np.nan_to_num(_num_col(d, "e_ox_sigma_v"), nan=0.0)
    s_gap = np.nan_to_num(_num_col(d, "e00_sigma_ev"), nan=0.0)
    anchored = _bool_col(d, "anchored", True)
    known = _bool_col(d, "anchor_known", True)
    anchored = anchored | ~known  # an unknown anchor does not fail; it is flagged
    dev = evaluate(model, e_ox, e00, oxide, mediator, anchored)
    mc = sample_pce(model, e_ox, e00, oxide, mediator, e_ox_sigma_v=s_ox, e00_sigma_ev=s_gap, anchored=anchored,
                    n_samples=options.n_samples, seed=options.seed, target_pct=options.target_pce_pct)
    masks = _flag_masks(d, dev, known, mc)
    failing = np.zeros(len(d), bool)
    for code, m in masks.items():
        if code not in INFO_FLAGS:
            failing |= m
    viable = np.asarray(dev["viable"], bool)
    out = pd.DataFrame({
        "rank": 0, "id": _text_col(d, "id"), "smiles": _text_col(d, "smiles"), "e_ox_v_nhe": e_ox, "e00_ev": e00,
        "e_ox_excited_v_nhe": dev["e_ox_excited_v_nhe"], "oxide": oxide.id, "mediator": mediator.id,
        "band_edge_v_nhe": oxide.potential_v_nhe, "e_redox_v_nhe": mediator.potential_v_nhe,
        "drive_inj_ev": dev["drive_inj_ev"], "drive_reg_ev": dev["drive_reg_ev"], "anchors": _text_col(d, "anchors"),
        "viable": viable, "voc_v": dev["voc_v"], "jsc_ma_cm2": dev["jsc_ma_cm2"], "ff": dev["ff"],
        "pce_pct": dev["pce_pct"], "pce_sigma_pct": np.where(viable, mc["pce_sigma_pct"], np.nan),
        "p_above_target": np.where(viable, mc["p_above_target"], np.nan), "p_viable": mc["p_viable"], "passes": viable & ~failing,
        "flags": join_flags(masks), "viability": dev["viability"], "name": _text_col(d, "name"),
        "e_ox_sigma_v": s_ox, "e00_sigma_ev": s_gap, "edge_nm": np.asarray(gap_to_wavelength_nm(e00), float),
        "uncalibrated_elements": _text_col(d, "uncalibrated_elements"),
        "e_ox_reference": _text_col(d, "e_ox_reference"), "e_ox_offset_v": _num_col(d, "e_ox_offset_v"),
        "reference_similarity": _num_col(d, "reference_similarity"),
    })
    num = ["e_ox_v_nhe", "e00_ev", "e_ox_excited_v_nhe", "band_edge_v_nhe", "e_redox_v_nhe", "drive_inj_ev",
           "drive_reg_ev", "voc_v", "jsc_ma_cm2", "pce_pct", "e_ox_sigma_v", "e00_sigma_ev", "e_ox_offset_v"]
    mc = ["pce_sigma_pct", "p_above_target", "p_viable"]
    out[num] = out[num].round(_ROUND) + 0.0  # + 0.0: a driving force of −0.00004 eV is written 0.0, not −0.0
    out[mc] = out[mc].round(_MC_ROUND) + 0.0
    out["edge_nm"] = out["edge_nm"].round(1)
    keys = ["passes", options.sort_by] + (["p_above_target"] if options.sort_by != "p_above_target" else
                                          ["pce_pct"]) + ["id", "_order"]
    out["_order"] = np.arange(len(out))
    out = out.sort_values(keys, ascending=[False, False, False, True, True], na_position="last",
                          kind="stable").drop(columns="_order").reset_index(drop=True)
    out["rank"] = np.arange(1, len(out) + 1)
    out = out[RANKING_COLUMNS + EXTRA_COLUMNS]
    out.attrs["not_ranked"] = not_ranked
    return out
