"""Stations anywhere on the grid: the interpolating operator against numpy's periodic interpolation,
stations on grid points against the stride network (bit for bit), the stations' noise, runs with
stations between grid points, and the one-line refusals of bad networks."""

import jax
import numpy as np
import pytest
from refusals import assert_refused

import assimbench
from assimbench.observations.operators import at_stations, every_kth

HALF_RING = "observation.stations=[" + ",".join(str(q) for q in range(0, 40, 2)) + "]"
BETWEEN = "observation.stations=[" + ",".join(f"{q + 0.5}" for q in range(0, 40, 2)) + "]"


def test_a_station_between_grid_points_reads_the_linear_interpolation_on_the_ring():
    """Against numpy.interp with period n (linear interpolation of a periodic sample), including a
    station between the last grid point and the first."""
    rng = np.random.default_rng(0)
    state = rng.standard_normal((3, 40))
    positions = np.array([0.0, 0.25, 7.5, 13.9, 39.0, 39.6])
    operator = at_stations(40, positions)
    expected = np.stack([np.interp(positions, np.arange(40.0), row, period=40) for row in state])
    np.testing.assert_allclose(np.asarray(operator(state)), expected, rtol=0, atol=1e-14)
    # On a grid point the reading is the variable itself, exactly.
    np.testing.assert_array_equal(np.asarray(operator(state))[:, [0, 4]], state[:, [0, 39]])


def test_stations_on_grid_points_observe_and_draw_noise_as_the_stride_network():
    state = np.random.default_rng(1).standard_normal(40)
    stations, stride = at_stations(40, np.arange(0, 40, 4)), every_kth(40, 4)
    np.testing.assert_array_equal(np.asarray(stations(state)), np.asarray(stride(state)))
    key = jax.random.PRNGKey(3)
    np.testing.assert_array_equal(np.asarray(stations.standard_noise(key, 40)), np.asarray(stride.standard_noise(key, 40)))


def test_stations_between_grid_points_get_their_own_noise():
    """A station between grid points is not given its grid point's draw: two stations in one
    cell get different draws, and the on-grid station keeps the stride network's."""
    key = jax.random.PRNGKey(4)
    noise = np.asarray(at_stations(40, [2.0, 2.25, 2.75]).standard_noise(key, 40))
    grid = np.asarray(every_kth(40, 1).standard_noise(key, 40))
    assert noise[0] == grid[2] and noise[1] != noise[2] and grid[2] not in noise[1:]


@pytest.mark.parametrize("filter_overrides", [["filter=etkf"], ["filter=letkf", "filter.members=10"]])
def test_a_station_list_on_every_second_grid_point_is_the_stride_network_bit_for_bit(filter_overrides):
    """Same truths, observations and analyses: the station list gathers what the stride network
    slices, draws the same noise, and the LETKF localizes by the same positions."""
    common = ["cycles=200", "burn_in=50", "output=null"] + filter_overrides
    listed = assimbench.run(common + [HALF_RING])
    strided = assimbench.run(common + ["observation=every_other_station"])
    for name in ("rmse_analysis", "rmse_forecast", "spread_analysis"):
        np.testing.assert_array_equal(listed.series[name], strided.series[name], err_msg=name)


@pytest.mark.parametrize("filter_overrides", [["filter=letkf", "filter.radius=6", "filter.inflation=1.05"],
                                              ["filter=3dvar", "filter.b_scale=0.05"]])
def test_stations_between_grid_points_are_assimilated(filter_overrides):
    """Twenty stations half-way between grid points: the LETKF (localized by the stations' real
    positions) and the 3D-Var (its Jacobian through the interpolation) stay far below climatology
    (3.6): measured 0.51 and 1.39 over 2 x 600 cycles (the 3D-Var does better than with the stations
    on every second grid point, 2.0 in the half-observed ring's card: each station now informs two
    grid points)."""
    result = assimbench.run(["cycles=600", "burn_in=100", "replicates=2", "output=null", BETWEEN] + filter_overrides)
    assert not result.diverged
    assert result.summary["rmse_analysis"] < (0.7 if "filter=letkf" in filter_overrides else 2.0)


@pytest.mark.parametrize("overrides, words", [
    (["observation.stations=[]"], ["observation.stations", "at least one grid position"]),
    (["observation.stations=[0,40]"], ["observation.stations", "below the observable state size 40", "40 is not"]),
    (["observation.stations=[-1,3]"], ["observation.stations", "-1 is not"]),
    (["observation.stations=[3,3]"], ["observation.stations", "each position once"]),
    (["observation.stations=[1,[2]]"], ["observation.stations", "a flat list of numbers"]),
    (["observation.stations=[0,2]", "observation.stride=2"], ["observation.stride", "replaces the stride"]),
    (["model=lorenz63", "observation.stations=[0.5]"], ["observation.stations", "lorenz63", "cannot lie between"]),
])
def test_bad_station_lists_are_one_line(overrides, words):
    assert_refused(overrides + ["output=null"], words)
