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
