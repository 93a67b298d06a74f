"""Lanes: traced settings side by side in one compiled program, equal to the same
settings run one by one, paired, and stored with their values as coordinates."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest

import assimbench
from assimbench.config.checks import ConfigError
from assimbench.config.composition import compose_config
from assimbench.config.lanes import hull_values
from assimbench.config.plan import resolve
from assimbench.io.results import read_result
from assimbench.twin.cycling import make_chunk, make_start, replicate_keys

SHORT = ["cycles=80", "burn_in=20", "chunk_cycles=30", "model.size=12", "filter.members=8", "replicates=2"]


def _series_of_each_lane(lane_overrides, plain_overrides, name="rmse_analysis"):
    batch = assimbench.run(SHORT + lane_overrides)
    for lane, overrides in enumerate(plain_overrides):
        alone = assimbench.run(SHORT + overrides)
        yield batch.series[name][lane], alone.series[name], batch, alone, lane


def test_inflation_lanes_equal_the_same_settings_run_one_by_one():
    """Lanes are a vmap over settings; the numbers are those of separate runs (to rounding)."""
    values = [1.0, 1.05, 1.2]
    for lanes, alone, batch, single, lane in _series_of_each_lane(
        [f"lanes.filter.inflation=[{','.join(map(str, values))}]"], [[f"filter.inflation={v}"] for v in values]
    ):
        assert lanes.shape == alone.shape == (2, 80)
        np.testing.assert_allclose(lanes, alone, rtol=1e-9, atol=1e-12)
        assert batch.summary["rmse_analysis"][lane] == pytest.approx(single.summary["rmse_analysis"], rel=1e-9)
        np.testing.assert_allclose(batch.per_replicate["rmse_analysis"][lane], single.per_replicate["rmse_analysis"],
                                   rtol=1e-9)


def test_radius_lanes_use_the_largest_window_and_still_match_single_runs():
    """The hull's window (largest radius) only adds zero-weight observations to the smaller radii."""
    for lanes, alone, *_ in _series_of_each_lane(
        ["filter=letkf", "lanes.filter.radius=[1.5,3.0]"], [["filter=letkf", "filter.radius=1.5"], ["filter=letkf", "filter.radius=3.0"]]
    ):
        np.testing.assert_allclose(lanes, alone, rtol=1e-8, atol=1e-10)


def test_matched_lane_lists_are_read_side_by_side_and_equal_the_same_settings_run_one_by_one():
    """lane_combination=matched: lane i takes the i-th value of every list (not every combination)."""
    pairs = [(1.0, 1.5), (1.2, 3.0)]
    lanes = ["filter=letkf", "lane_combination=matched", "lanes.filter.inflation=[1.0,1.2]", "lanes.filter.radius=[1.5,3.0]"]
    singles = [["filter=letkf", f"filter.inflation={a}", f"filter.radius={r}"] for a, r in pairs]
    for lane_series, alone, batch, *_ in _series_of_each_lane(lanes, singles):
        assert batch.series["rmse_analysis"].shape[0] == 2
        np.testing.assert_allclose(batch.lanes["filter.inflation"], [1.0, 1.2])
        np.testing.assert_allclose(batch.lanes["filter.radius"], [1.5, 3.0])
        np.testing.assert_allclose(lane_series, alone, rtol=1e-8, atol=1e-10)


def test_matched_lane_lists_of_different_lengths_are_refused_in_one_line():
    with pytest.raises(ConfigError, match=r"lanes\.filter\.inflation 2, lanes\.filter\.radius 3.*lane_combination=matched"):
        compose_config(SHORT + ["filter=letkf", "lane_combination=matched", "lanes.filter.inflation=[1.0,1.2]",
                                "lanes.filter.radius=[1.5,3.0,4.0]"])


RUN = ["cycles=80", "burn_in=20", "chunk_cycles=30", "replicates=2"]


@pytest.mark.parametrize("lane_key, values, base", [
    ("filter.adaptive_std", [0.05, 0.3], ["model.size=12", "filter.members=8", "filter.adaptive=true"]),
    ("model.coupling", [0.5, 1.0], ["model=lorenz96_two_scale", "model.slow=6", "model.fast_per_slow=3",
                                    "filter.members=8"]),
    ("forecast_model.forcing", [7.0, 9.0], ["model.size=12", "filter.members=8", "forecast_model=lorenz96",
                                            "forecast_model.size=12"]),
    ("filter.static_scale", [0.05, 0.2], ["model.size=12", "filter=4dvar", "filter.window=2"]),
])
def test_newer_lane_keys_equal_the_same_settings_run_one_by_one(lane_key, values, base):
    """Each lane key added with a new model or filter: a lane batch is the same computation as the
    settings run one by one (to rounding). The second lane is checked: the static parts are built
    from the first, so it is the one a wrongly static value would break."""
    batch = assimbench.run(RUN + base + [f"lanes.{lane_key}=[{','.join(map(str, values))}]"])
    alone = assimbench.run(RUN + base + [f"{lane_key}={values[1]}"])
    np.testing.assert_allclose(batch.series["rmse_analysis"][1], alone.series["rmse_analysis"], rtol=1e-8, atol=1e-10)
    assert not np.allclose(batch.series["rmse_analysis"][0], batch.series["rmse_analysis"][1])


def test_two_lane_keys_cross_every_combination_with_the_last_key_fastest():
    cfg = compose_config(SHORT + ["lanes.filter.inflation=[1.0,1.1]", "lanes.filter.rtps=[0.0,0.3,0.6]"])
    plan = resolve(cfg)
    grid = plan.grid
    assert grid.keys == ("filter.inflation", "filter.rtps")
    np.testing.assert_array_equal(grid.values[:, 0], [1.0, 1.0, 1.0, 1.1, 1.1, 1.1])
    np.testing.assert_array_equal(grid.values[:, 1], [0.0, 0.3, 0.6, 0.0, 0.3, 0.6])
    np.testing.assert_array_equal(hull_values(grid, {"filter.rtps"}), [1.0, 0.6])
    # The RTPS piece is built from the hull's 0.6 (so it is on for every lane); each lane keeps its own strength.
    np.testing.assert_array_equal(plan.settings["filter"]["rtps"][::2], [0.0, 0.3, 0.6, 0.0, 0.3, 0.6])


def test_every_lane_of_a_replicate_sees_the_same_truth_and_observations(tmp_path):
    """Paired comparisons: lanes differ in the filter, never in the data."""
    path = str(tmp_path / "paired.h5")
    assimbench.run(SHORT + ["lanes.filter.inflation=[1.0,1.3]", "store.truth=true", "store.observations=true"],
                   output=path)
    stored = read_result(path)
    for name in ("truth", "observations"):
        data = stored.series[name]
        assert data.shape[:3] == (2, 2, 80)
        np.testing.assert_array_equal(data[0], data[1])
        assert not np.array_equal(data[0, 0], data[0, 1])  # replicates differ
    assert not np.array_equal(stored.series["rmse_analysis"][0], stored.series["rmse_analysis"][1])


def test_the_lane_file_names_its_lanes_for_xarray(tmp_path):
    xr = pytest.importorskip("xarray")
    path = tmp_path / "lanes.h5"
    assimbench.run(SHORT + ["lanes.filter.inflation=[1.02,1.1]"], output=str(path))
    with xr.open_dataset(path, engine="h5netcdf") as ds:
        assert ds["rmse_analysis"].dims == ("lane", "replicate", "cycle")
        np.testing.assert_array_equal(ds["cycle"].values, np.arange(1, ds["rmse_analysis"].shape[-1] + 1))
        np.testing.assert_array_equal(ds["filter.inflation"].values, [1.02, 1.1])
        assert "filter.inflation" in ds.coords
    stored = read_result(str(path))
    assert stored.summary["rmse_analysis"].shape == (2,)
    assert stored.per_replicate["rmse_analysis"].shape == (2, 2)
    assert stored.first_bad_cycle.shape == (2, 2)
    np.testing.assert_array_equal(stored.lanes["filter.inflation"], [1.02, 1.1])


def test_a_lane_batch_is_one_compiled_program_for_any_lane_values():
    cfg = compose_config(SHORT + ["lanes.filter.inflation=[1.0,1.1]"])
    plan = resolve(cfg)
    setup, settings = plan.setup, plan.settings
    keys = jnp.tile(replicate_keys(0, 2), (2, 1))
    carry = make_start(setup, True)(keys, settings)
    chunk = make_chunk(setup, 5, True)
    carry, _ = chunk(carry, keys, jnp.asarray(1, dtype=jnp.int64), settings)
    other = jax.tree.map(lambda v: v * jnp.array([1.0, 1.01, 1.02, 1.03]), settings)
    chunk(carry, keys, jnp.asarray(6, dtype=jnp.int64), other)
    assert chunk._cache_size() == 1


@pytest.mark.parametrize(
    "overrides, words",
    [
        (["lanes.filter.members=[10,20]"], ["lanes.filter.members", "shapes", "--multirun", "filter.members=10,20"]),
        (["lanes.model.size=[40,80]"], ["lanes.model.size", "--multirun"]),
        (["lanes.filter.inflaton=[1.1]"], ["did you mean lanes.filter.inflation"]),
        (["lanes.filter.radius=[2.0]"], ["lanes.filter.radius", "etkf has no setting radius", "inflation"]),
        (["lanes.filter.inflation=[1.0,0.9]"], ["lanes.filter.inflation=0.9", ">= 1"]),
        (["lanes.filter.inflation=[]"], ["lanes.filter.inflation=[]", "non-empty"]),
        (["filter=3dvar", "lanes.model.forcing=[8.0,9.0]"], ["lanes.model.forcing", "climatology", "--multirun"]),
    ],
)
def test_bad_lanes_are_refused_before_any_work(overrides, words):
    base = [o for o in SHORT if not o.startswith("filter.members")] if "filter=3dvar" in overrides else SHORT
    with pytest.raises(ConfigError) as err:
        compose_config(base + overrides)
    message = str(err.value)
    assert "\n" not in message
    for word in words:
        assert word in message, (word, message)
