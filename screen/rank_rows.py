"""Reading the rows of a levels table for the ranking: which rows are ranked, numbers, text, heavy atoms.

Examples
--------
>>> import pandas as pd
>>> lv = pd.DataFrame({"id": ["a", "b"], "status": ["ok", "failed"], "homo_ev": ["-5.4", ""]})
>>> ranked_mask(lv).tolist(), numeric(lv, "homo_ev").tolist()[0], text(lv, "missing").tolist()
([True, False], -5.4, ['', ''])
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from screen.flags import codes_of
from screen.io import text_cells

__all__ = ["ranked_mask", "split_ranked", "numeric", "text", "heavy_atoms", "shortlist_mask"]


def shortlist_mask(ranking: pd.DataFrame) -> np.ndarray:
    """Rows that may enter the shortlist: they pass every check and do not repeat an earlier row's structure in the
    same role (flag ``same_structure``; before, two ids of one structure took two shortlist places).

    Examples
    --------
    >>> r = pd.DataFrame({"passes": [True, "True", False, True], "flags": ["", "same_structure", "", "role_assumed"]})
    >>> shortlist_mask(r).tolist()
    [True, False, False, True]
    """
    if "passes" not in ranking:
        return np.ones(len(ranking), dtype=bool)
    passes = ranking["passes"].map(lambda v: str(v).strip().lower() in ("true", "1", "yes")).to_numpy(bool)
    if "flags" not in ranking:
        return passes
    return passes & ~ranking["flags"].map(lambda cell: "same_structure" in codes_of(cell)).to_numpy(bool)


def ranked_mask(levels: pd.DataFrame) -> np.ndarray:
    """Rows that are ranked: status ok (files without a status column: every row)."""
    if "status" not in levels:
        return np.ones(len(levels), dtype=bool)
    return levels["status"].pipe(text_cells).str.strip().str.lower().eq("ok").to_numpy()


def split_ranked(levels_df: pd.DataFrame) -> tuple[pd.DataFrame, dict]:
    """The ranked rows (index reset) and the counts of the others by status."""
    ranked = ranked_mask(levels_df)
    not_ranked = {}
    if "status" in levels_df:
        st = levels_df.loc[~ranked, "status"].pipe(text_cells)
        not_ranked = {str(k): int(v) for k, v in st.value_counts().items()}
    return levels_df[ranked].reset_index(drop=True), not_ranked


def numeric(levels: pd.DataFrame, col: str) -> np.ndarray:
    if col not in levels:
        return np.full(len(levels), np.nan)
    return pd.to_numeric(levels[col], errors="coerce").to_numpy(dtype=float)


def text(levels: pd.DataFrame, col: str) -> np.ndarray:
    if col not in levels:
        return np.full(len(levels), "", dtype=object)
    return levels[col].pipe(text_cells).to_numpy(dtype=object)


def heavy_atoms(levels: pd.DataFrame) -> np.ndarray:
    """Heavy-atom counts: the ``heavy_atoms`` column, else counted from SMILES (NaN if unknown)."""
    heavy = numeric(levels, "heavy_atoms")
    todo = np.flatnonzero(np.isnan(heavy))
    if todo.size:
        smiles = text(levels, "smiles")
        from rdkit import Chem, rdBase

        with rdBase.BlockLogs():
            for i in todo:
                mol = Chem.MolFromSmiles(smiles[i]) if smiles[i] else None
                if mol is not None:
                    heavy[i] = mol.GetNumHeavyAtoms()
    return heavy
