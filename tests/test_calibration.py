"""Unit tests of the calibration internals that need no shipped model (screen.calibration)."""

import numpy as np
import pandas as pd

from screen.calibration.linear import feature_matrix, raw_weights
from screen.calibration.reference import family


def test_polymer_term_is_an_indicator_without_raw_columns():
    frame = pd.DataFrame({"representation": ["molecule", "polymer", "", " polymer"]})
    assert feature_matrix(frame, ["polymer"])[:, 0].tolist() == [0.0, 1.0, 0.0, 1.0]
    # a frame without the column (molecules only) gets 0, and the term adds no chain-limit spread
    assert feature_matrix(pd.DataFrame({"x": [1.0, 2.0]}), ["polymer"])[:, 0].tolist() == [0.0, 0.0]
    assert raw_weights(["xtb_ip_film_ev", "polymer"], np.array([0.7, 0.26])) == {"xtb_ip_film_ev": 0.7}


def test_fulleropyrrolidine_counts_as_a_fullerene():
    assert family("N-methylfulleropyrrolidine", "C", "molecule", "film") == "fullerenes"
    assert family("ICBA (indene-C60 bisadduct)", "C", "molecule", "film") == "fullerenes"


def test_a_film_file_without_optical_gaps_is_named(tmp_path, capsys):
    # a docs fact-check: a user's film file with name,smiles,homo_ev,lumo_ev,fc_reference_ev,source calibrated
    # without a word, its optical-gap model fitted on 3 film rows instead of 76
    import shutil
    from pathlib import Path

    from screen.calibration.reference import read_reference

    src = Path(__file__).resolve().parents[1] / "models" / "reference"
    ref = tmp_path / "ref"
    shutil.copytree(src, ref)
    film = pd.read_csv(ref / "levels_film.csv")
    film[["name", "smiles", "homo_ev", "lumo_ev", "fc_reference_ev", "source"]].to_csv(ref / "levels_film.csv",
                                                                                       index=False)
    read_reference(ref)
    assert "has no gap_opt_ev column" in capsys.readouterr().err
    read_reference(src)
    assert "gap_opt_ev" not in capsys.readouterr().err
