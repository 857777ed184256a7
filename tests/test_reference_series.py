"""Checks for models/reference/gap_series.csv (optical gaps of conjugated size series).

Like test_reference_data.py these tests do not judge whether a literature value is right;
they check that the file parses, that each series is ordered by chain length, that values
are physical, that polymer rows are repeat units with two attachment points, and that the
oligothiophene and acene gaps fall with chain length within comparable measurements.
"""

from __future__ import annotations

import csv
import math
from collections import defaultdict
from pathlib import Path

from rdkit import Chem, RDLogger

RDLogger.DisableLog("rdApp.*")

SERIES = Path(__file__).resolve().parents[1] / "models" / "reference" / "gap_series.csv"
COLUMNS = ["series", "n", "name", "smiles", "representation", "value_ev", "kind", "phase", "solvent", "method",
           "source", "doi", "from_memory", "notes"]
ALLOWED_ELEMENTS = {"H", "B", "C", "N", "O", "F", "Si", "P", "S", "Cl", "Se", "Br", "I"}


def load() -> list[dict[str, str]]:
    with open(SERIES, newline="", encoding="utf-8") as handle:
        reader = csv.DictReader(handle)
        assert list(reader.fieldnames or []) == COLUMNS
        return list(reader)


def chain_length(text: str) -> float:
    return math.inf if text == "inf" else float(int(text))


def test_series_file_parses_and_rows_are_sane() -> None:
    rows = load()
    assert rows, "gap_series.csv is empty"
    for row in rows:
        where = f"{row['series']}:{row['n']}:{row['name']}"
        n = chain_length(row["n"])
        assert n >= 1, where
        value = float(row["value_ev"])
        assert 1.0 <= value <= 7.0, f"{where}: {value} eV outside [1, 7]"
        assert row["kind"] in {"onset", "maximum", "0-0"}, where
        assert row["phase"] in {"solution", "film", "gas"}, where
        assert row["from_memory"] in {"true", "false"}, where
        assert row["source"].strip() and row["method"].strip(), where
        mol = Chem.MolFromSmiles(row["smiles"])
        assert mol is not None, f"{where}: invalid SMILES"
        stars = [atom for atom in mol.GetAtoms() if atom.GetAtomicNum() == 0]
        if math.isinf(n):
            assert len(stars) == 2, f"{where}: polymer row needs exactly two [*]"
            for star in stars:
                bonds = star.GetBonds()
                assert len(bonds) == 1 and bonds[0].GetBondType() == Chem.BondType.SINGLE, where
                assert star.GetNeighbors()[0].GetAtomicNum() > 1, where
        else:
            assert not stars, f"{where}: oligomer rows are whole molecules"
            assert Chem.GetFormalCharge(mol) == 0, where
            assert len(Chem.GetMolFrags(mol)) == 1, where
        elements = {atom.GetSymbol() for atom in Chem.AddHs(mol).GetAtoms() if atom.GetAtomicNum() > 0}
        assert elements <= ALLOWED_ELEMENTS, where


def test_each_series_is_ordered_by_n() -> None:
    by_series: dict[str, list[float]] = defaultdict(list)
    for row in load():
        by_series[row["series"]].append(chain_length(row["n"]))
    for series, lengths in by_series.items():
        assert lengths == sorted(lengths), f"{series}: rows not ordered by n {lengths}"


def test_oligothiophene_and_acene_gaps_fall_with_n() -> None:
    groups: dict[tuple[str, str, str, str], list[tuple[float, float]]] = defaultdict(list)
    for row in load():
        if row["series"] in {"oligothiophene", "acene"}:
            key = (row["series"], row["kind"], row["phase"], row["solvent"])
            groups[key].append((chain_length(row["n"]), float(row["value_ev"])))
    assert any(key[0] == "oligothiophene" and len(v) >= 6 for key, v in groups.items())
    assert any(key[0] == "acene" and len(v) >= 5 for key, v in groups.items())
    for key, points in groups.items():
        values = [value for _, value in sorted(points)]
        assert all(b < a for a, b in zip(values, values[1:])), f"{key}: not decreasing {values}"
