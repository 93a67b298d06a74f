"""The NumPy twins of the speed suite compute what the package computes: on the package's own
start and observation noise, their analysis RMSE series agree to rounding over a short run, so
the speed comparison (benchmarks/speed_suite.py) is of the same computation."""

import os
import sys

import numpy as np
import pytest

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

from benchmarks import speed_suite  # noqa: E402

CASES = [
    ("L63 ETKF N=10", speed_suite.L63 + ["filter.members=10", "filter.inflation=1.04"]),
    ("L96 ETKF N=20", ["model.size=20", "filter.members=20", "filter.inflation=1.03"]),
    ("L96 LETKF N=10", ["model.size=24", "filter=letkf", "filter.members=10", "filter.radius=3",
                        "filter.inflation=1.02"]),
    ("L96 3D-Var", ["model.size=20", "filter=3dvar", "filter.b_scale=0.05"]),
]


@pytest.mark.parametrize("name, overrides", CASES, ids=[c[0] for c in CASES])
def test_the_numpy_twin_agrees_with_the_package_to_rounding(name, overrides):
    series = speed_suite.package_series(overrides, 15)
    twin = speed_suite.numpy_run(speed_suite.package_start(overrides), series["noise"])
    assert twin.shape == series["rmse"].shape == (15,)
    # Chaos amplifies rounding by about exp(1.7 t) on L96 (exp(0.9 t) on L63): over 15 cycles
    # (t = 0.75 on L96, 3.75 on L63) a 1e-15 difference grows to well below 1e-10.
    np.testing.assert_allclose(twin, series["rmse"], rtol=1e-10, atol=1e-12)
    assert np.all(series["rmse"] > 0)
