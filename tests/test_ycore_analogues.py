"""The Y6/BTP optical-gap class (``y_core``) counts the benzoselenadiazole and N-substituted benzotriazole analogues
of the benzothiadiazole ladder core (an acceptor chemist's audit, 2026-12-05: a benzoselenadiazole analogue of Y6 came out
0.17 eV wider in gap than Y6, without the class term).

Check value: the benzotriazole-core acceptor Y1 (film optical gap 1.44 eV, recalled, ``models/reference/devices.csv``
row ``pbdbt-y1-2019``; Yuan et al., Nat. Commun. 10 (2019) 570) — computed 1.45 eV with the term, 1.58 eV without
(a run of the default protocol, 2026-12-05; not recomputed here: it costs minutes).
"""

from __future__ import annotations

import pandas as pd
import pytest
from rdkit import Chem

from screen.devicelevels import DEVICES_PATH, FILM_PATH
from screen.endgroup import y_core_smiles

#: the pattern before 2026-12-05: sulphur only
_S_ONLY = Chem.MolFromSmarts("[#6;R2]1:[#6;R2]:[#6;R2]2:[#7]:[#16]:[#7]:[#6;R2]:2:[#6;R2]:[#6;R2]:1")


def _y6() -> str:
    film = pd.read_csv(FILM_PATH)
    return film.loc[film["name"].str.startswith("Y6"), "smiles"].iloc[0]


def test_y1_of_the_device_set_is_in_the_class():
    dev = pd.read_csv(DEVICES_PATH)
    y1 = dev.loc[dev["device_id"].eq("pbdbt-y1-2019"), "acceptor_smiles"].iloc[0]
    assert "nn(C)n" in y1 and y_core_smiles(y1)
    assert not Chem.MolFromSmiles(y1).HasSubstructMatch(_S_ONLY)


@pytest.mark.parametrize("swap, counted", [("c2nsnc2", True), ("c2n[se]nc2", True), ("c2nn(C)nc2", True),
                                           ("c2ncc(C)nc2", False)])  # quinoxaline: six-membered, not counted
def test_core_exchanges(swap, counted):
    y6 = _y6()
    assert "c2nsnc2" in y6
    analogue = y6.replace("c2nsnc2", swap)
    assert Chem.MolFromSmiles(analogue) is not None
    assert y_core_smiles(analogue) is counted


def test_a_free_benzotriazole_is_not_a_ladder_core():
    assert not y_core_smiles("N#CC(C#N)=C1C(=Cc2ccc(-c3ccc4nn(C)nc4c3)s2)C(=O)c2ccccc21")


def test_the_calibration_rows_of_the_class_are_unchanged():
    # no calibration reference row has a selenium or triazole ladder core: the fitted term does not move
    for path in (FILM_PATH, FILM_PATH.parent / "gap_optical.csv", FILM_PATH.parent / "gap_series.csv"):
        for smi in pd.read_csv(path)["smiles"].dropna():
            mol = Chem.MolFromSmiles(smi)
            if mol is not None and y_core_smiles(smi):
                assert mol.HasSubstructMatch(_S_ONLY), (path.name, smi)
