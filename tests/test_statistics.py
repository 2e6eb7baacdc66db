"""The statistics the steady-point table reports, against 40 CFR 1065.602."""

import numpy as np
import pytest

from pipeline.checks.steady import steady_points_table


def test_steady_point_mean_and_std_follow_1065_602():
    # 40 CFR 1065.602 worked examples (REFERENCES 1.13, [V-ex]): values 10.60, 11.91, 11.09
    # -> mean 11.20, standard deviation (N - 1 form) 0.6619.
    t = np.arange(5.0)
    x = np.array([np.nan, 10.60, 11.91, 11.09, np.nan])
    table = steady_points_table(t, np.array([[1, 3]]), {"x": x}, np.isfinite(x))
    assert table["samples"].iloc[0] == 3
    assert table["x_mean"].iloc[0] == pytest.approx(11.20, abs=5e-3)
    assert table["x_std"].iloc[0] == pytest.approx(0.6619, abs=5e-5)
