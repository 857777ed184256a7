"""Consistency checks for the calibration reference sets and the partner library.

These tests do not judge whether a literature value is *right* (each row names its
source and says whether it was recalled, ``from_memory=true``); they check that the
files parse, that every structure is a valid, neutral, closed-shell single molecule
made of supported elements, that values sit in physical ranges, and that the sets are
large enough and contain the acene series used to anchor the calibration.
"""

from __future__ import annotations

import csv
import re
import shutil
import subprocess
from pathlib import Path

import pytest
from rdkit import Chem, RDLogger

RDLogger.DisableLog("rdApp.*")

ROOT = Path(__file__).resolve().parents[1]
REF = ROOT / "models" / "reference"
IP = REF / "ip_gas.csv"
EA = REF / "ea_gas.csv"
GAP = REF / "gap_optical.csv"
FILM = REF / "levels_film.csv"
PARTNERS = ROOT / "screen" / "data" / "partners.csv"
README = REF / "README.md"

GAS_COLUMNS = ["name", "smiles", "value_ev", "kind", "phase", "method", "source", "doi", "from_memory", "notes",
               "exclude_reason"]
FILM_COLUMNS = ["name", "smiles", "representation", "homo_ev", "lumo_ev", "gap_opt_ev", "method", "derived_level",
                "fc_reference_ev", "source", "doi", "from_memory", "notes", "exclude_reason"]
PARTNER_COLUMNS = ["id", "name", "role", "homo_ev", "lumo_ev", "gap_opt_ev", "scale", "homo_sigma_ev",
                   "lumo_sigma_ev", "gap_opt_sigma_ev", "fc_reference_ev", "smiles", "source", "doi",
                   "from_memory", "notes"]

ALLOWED_ELEMENTS = {"H", "B", "C", "N", "O", "F", "Si", "P", "S", "Cl", "Se", "Br", "I"}

ACENES = {
    "benzene": "c1ccccc1",
    "naphthalene": "c1ccc2ccccc2c1",
    "anthracene": "c1ccc2cc3ccccc3cc2c1",
    "tetracene": "c1ccc2cc3cc4ccccc4cc3cc2c1",
    "pentacene": "c1ccc2cc3cc4cc5ccccc5cc4cc3cc2c1",
}

# Family names that must never appear in any tracked file of the repository. Built from pieces so
# that this test file does not contain them literally.
FORBIDDEN = ["p3" + "ht", "pc" + "bm", "pc61" + "bm", "phthalo" + "cyanin", "n7" + "19", "ruthen" + "ium"]


def read_rows(path: Path) -> tuple[list[str], list[dict[str, str]]]:
    with open(path, newline="", encoding="utf-8") as handle:
        reader = csv.DictReader(handle)
        rows = list(reader)
        return list(reader.fieldnames or []), rows


def canonical(smiles: str) -> str:
    mol = Chem.MolFromSmiles(smiles)
    assert mol is not None, f"RDKit cannot parse {smiles!r}"
    return Chem.MolToSmiles(mol)


def check_structure(smiles: str, where: str, allow_repeat_unit: bool = False) -> None:
    mol = Chem.MolFromSmiles(smiles)
    assert mol is not None, f"{where}: invalid SMILES {smiles!r}"
    assert len(Chem.GetMolFrags(mol)) == 1, f"{where}: more than one fragment"
    assert Chem.GetFormalCharge(mol) == 0, f"{where}: net charge is not zero"
    radicals = sum(atom.GetNumRadicalElectrons() for atom in mol.GetAtoms())
    assert radicals == 0, f"{where}: open-shell structure ({radicals} radical electrons)"
    stars = [atom for atom in mol.GetAtoms() if atom.GetAtomicNum() == 0]
    if stars:
        # Polymer repeat unit: exactly two [*] attachment points, each on one single bond to a heavy atom.
        assert allow_repeat_unit, f"{where}: attachment points ([*]) are only allowed in film/partner rows"
        assert len(stars) == 2, f"{where}: a repeat unit needs exactly two [*] attachment points, found {len(stars)}"
        for star in stars:
            bonds = star.GetBonds()
            assert len(bonds) == 1 and bonds[0].GetBondType() == Chem.BondType.SINGLE, \
                f"{where}: each [*] must sit on exactly one single bond"
            assert bonds[0].GetOtherAtom(star).GetAtomicNum() > 1, f"{where}: [*] must bond to a heavy atom"
    elements = {atom.GetSymbol() for atom in Chem.AddHs(mol).GetAtoms() if atom.GetAtomicNum() != 0}
    assert elements <= ALLOWED_ELEMENTS, f"{where}: unsupported elements {elements - ALLOWED_ELEMENTS}"


def as_float(text: str, where: str) -> float:
    try:
        return float(text)
    except ValueError as exc:  # pragma: no cover - reported through the assertion
        raise AssertionError(f"{where}: {text!r} is not a number") from exc


GAS_SETS = {
    # file: (allowed kinds, allowed phases, value range [eV], minimum rows); the ranges are plausibility windows for
    # organic molecules (common practice), not published values; the minimum rows are the project's own floors
    IP: ({"vertical", "adiabatic"}, {"gas"}, (5.0, 11.0), 35),
    EA: ({"vertical", "adiabatic"}, {"gas"}, (-2.0, 3.5), 22),
    GAP: ({"onset", "maximum", "0-0"}, {"gas", "solution", "film"}, (1.0, 6.0), 22),
}


@pytest.mark.parametrize("path", list(GAS_SETS), ids=lambda p: p.name)
def test_gas_reference_file(path: Path) -> None:
    kinds, phases, (low, high), minimum = GAS_SETS[path]
    columns, rows = read_rows(path)
    assert columns == GAS_COLUMNS
    assert len(rows) >= minimum, f"{path.name}: {len(rows)} rows < {minimum}"
    seen: dict[str, str] = {}
    for row in rows:
        where = f"{path.name}:{row['name']}"
        assert row["name"].strip(), f"{where}: empty name"
        check_structure(row["smiles"], where)
        key = canonical(row["smiles"])
        assert key not in seen, f"{where}: duplicate SMILES (also {seen[key]})"
        seen[key] = row["name"]
        value = as_float(row["value_ev"], where)
        assert low <= value <= high, f"{where}: {value} eV outside [{low}, {high}]"
        assert row["kind"] in kinds, f"{where}: kind {row['kind']!r}"
        assert row["phase"] in phases, f"{where}: phase {row['phase']!r}"
        assert row["method"].strip(), f"{where}: empty method"
        assert row["source"].strip(), f"{where}: empty source"
        assert row["from_memory"] in {"true", "false"}, f"{where}: from_memory {row['from_memory']!r}"


@pytest.mark.parametrize("path", [IP, EA, GAP], ids=lambda p: p.name)
def test_acene_series_present(path: Path) -> None:
    _, rows = read_rows(path)
    present = {canonical(row["smiles"]) for row in rows}
    missing = [name for name, smi in ACENES.items() if canonical(smi) not in present]
    assert not missing, f"{path.name}: acenes missing {missing}"


def test_acene_trends_are_monotonic() -> None:
    # Physical sanity: IP and optical gap fall, EA rises along benzene -> pentacene.
    for path, sign in ((IP, -1), (EA, +1), (GAP, -1)):
        _, rows = read_rows(path)
        by_key = {canonical(row["smiles"]): float(row["value_ev"]) for row in rows}
        series = [by_key[canonical(smi)] for smi in ACENES.values()]
        steps = [sign * (b - a) for a, b in zip(series, series[1:])]
        assert all(step > 0 for step in steps), f"{path.name}: acene series not monotonic {series}"


def check_levels(homo: float, lumo: float, where: str) -> None:
    # plausibility windows of film (CV-scale, Fc = -4.8 to -5.1 eV) frontier levels of OPV materials, common practice
    assert -7.0 <= homo <= -4.5, f"{where}: HOMO {homo} outside [-7, -4.5]"
    assert -4.5 <= lumo <= -2.5, f"{where}: LUMO {lumo} outside [-4.5, -2.5]"
    assert lumo > homo, f"{where}: LUMO {lumo} not above HOMO {homo}"


# how the method text names a level computed from the other one and the optical gap
DERIVED_TEXT = {"lumo": re.compile(r"LUMO = HOMO \+ Eg|EA = IP - Eg"), "homo": re.compile(r"HOMO = LUMO - Eg")}


def check_derived_level(row: dict[str, str], where: str) -> None:
    """``derived_level`` agrees with the method text and the numbers (derived = other level ± optical gap)."""
    level = row["derived_level"]
    assert level in {"", "homo", "lumo"}, f"{where}: derived_level {level!r}"
    for name, text in DERIVED_TEXT.items():
        assert bool(text.search(row["method"])) == (level == name), \
            f"{where}: derived_level {level!r} but method {row['method']!r}"
    if level:
        homo, lumo, gap = (float(row[c]) for c in ("homo_ev", "lumo_ev", "gap_opt_ev"))
        # one rounding step of the source (levels and gap rounded separately to 0.01 eV)
        assert abs(lumo - homo - gap) <= 0.011, f"{where}: derived {level} is not the other level ± the optical gap"


def test_levels_film() -> None:
    columns, rows = read_rows(FILM)
    assert columns == FILM_COLUMNS
    assert len(rows) >= 15
    seen: dict[str, str] = {}
    for row in rows:
        where = f"{FILM.name}:{row['name']}"
        check_structure(row["smiles"], where, allow_repeat_unit=True)
        key = canonical(row["smiles"])
        assert key not in seen, f"{where}: duplicate SMILES (also {seen[key]})"
        seen[key] = row["name"]
        assert row["representation"].strip(), f"{where}: empty representation"
        check_levels(as_float(row["homo_ev"], where), as_float(row["lumo_ev"], where), where)
        gap = as_float(row["gap_opt_ev"], where)
        assert 1.0 <= gap <= 6.0, f"{where}: optical gap {gap}"
        assert row["method"].strip(), f"{where}: empty method"
        check_derived_level(row, where)
        if row["fc_reference_ev"].strip():
            fc = as_float(row["fc_reference_ev"], where)
            assert -5.2 <= fc <= -4.6, f"{where}: ferrocene level {fc}"
        assert row["source"].strip(), f"{where}: empty source"
        assert row["from_memory"] in {"true", "false"}, f"{where}: from_memory {row['from_memory']!r}"


def test_partner_library() -> None:
    columns, rows = read_rows(PARTNERS)
    assert columns == PARTNER_COLUMNS
    ids = [row["id"] for row in rows]
    assert len(ids) == len(set(ids)), "duplicate partner ids"
    assert "scharber-reference-acceptor" in ids
    film_smiles = {canonical(row["smiles"]) for row in read_rows(FILM)[1]}
    for row in rows:
        where = f"{PARTNERS.name}:{row['id']}"
        assert re.fullmatch(r"[a-z0-9]+(-[a-z0-9]+)*", row["id"]), f"{where}: id must be lowercase, hyphenated"
        assert row["role"] in {"acceptor", "donor"}, f"{where}: role {row['role']!r}"
        assert row["scale"] == "film", f"{where}: scale {row['scale']!r}"
        check_levels(as_float(row["homo_ev"], where), as_float(row["lumo_ev"], where), where)
        gap = as_float(row["gap_opt_ev"], where)
        assert 1.0 <= gap <= 6.0, f"{where}: optical gap {gap}"
        for column in ("homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev"):
            sigma = as_float(row[column], where)
            assert 0.0 < sigma <= 1.0, f"{where}: {column} {sigma}"
        if row["fc_reference_ev"].strip():
            assert -5.2 <= as_float(row["fc_reference_ev"], where) <= -4.6
        if row["smiles"].strip():
            check_structure(row["smiles"], where, allow_repeat_unit=True)
            assert canonical(row["smiles"]) in film_smiles, f"{where}: SMILES not the levels_film.csv representation"
        assert row["source"].strip(), f"{where}: empty source"
        assert row["from_memory"] in {"true", "false"}, f"{where}: from_memory {row['from_memory']!r}"
    roles = {row["role"] for row in rows}
    assert roles == {"acceptor", "donor"}


def tracked_texts() -> dict[Path, str]:
    """Every file git tracks in this repository (``git ls-files``: not .venv, not untracked files) that is
    UTF-8 text, with its text; binary files (a NUL byte) and files that do not decode as UTF-8 are left out."""
    listing = subprocess.run(["git", "ls-files", "-z"], cwd=ROOT, capture_output=True, check=True).stdout
    out = {}
    for name in filter(None, listing.decode("utf-8").split("\0")):
        path = ROOT / name
        if not path.is_file():  # deleted in the working tree, not yet in git
            continue
        data = path.read_bytes()
        if b"\0" in data:
            continue
        try:
            out[path] = data.decode("utf-8")
        except UnicodeDecodeError:
            continue
    return out


def test_no_forbidden_family_names() -> None:
    # every tracked file: reference and device data, screen/data/, candidates/, docs, code, tests, benchmarks
    if not (ROOT / ".git").exists() or shutil.which("git") is None:
        pytest.skip("not a git checkout: the tracked files cannot be listed")
    texts = tracked_texts()
    assert {IP, EA, GAP, FILM, PARTNERS, README, REF / "devices.csv", REF / "dyes.csv"} <= set(texts)
    hits = {}
    for path, text in texts.items():
        found = [word for word in FORBIDDEN if word in text.lower()]
        if found:
            hits[str(path.relative_to(ROOT))] = len(found)
    assert not hits, f"these files mention a material family that must not appear (hits per file): {hits}"
