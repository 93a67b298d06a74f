"""Every filter inside the cycle: compiled once for all values of its swept floats, finite,
and the reference runs behave as their definitions say."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest

import assimbench
from assimbench.config.catalogue import catalogue
from assimbench.config.composition import compose_config
from assimbench.config.plan import resolve
from assimbench.twin.cycling import make_chunk, make_start, replicate_keys

SMALL = ["cycles=40", "burn_in=10", "model.size=12", "replicates=2"]
MEMBERS = {"etkf": 8, "enkf": 8, "letkf": 8, "ensrf": 8, "sir": 200, "free": 8}
ALL_FILTERS = sorted(catalogue().filters)  # every filter of the catalogue, plugins included


def _overrides(name, extra=()):
    members = [f"filter.members={MEMBERS[name]}"] if name in MEMBERS else []
    return SMALL + [f"filter={name}"] + members + list(extra)


@pytest.mark.parametrize("name", ALL_FILTERS)
def test_every_swept_float_is_traced_so_the_chunk_compiles_once(name):
    """Changing every float of the settings pytree (inflation, radius, b_scale, jitter,
    error_std, forcing, ...) reuses the compiled chunk."""
    cfg = compose_config(_overrides(name))
    plan = resolve(cfg)
    setup, settings = plan.setup, plan.settings
    keys = replicate_keys(0, 2)
    carry = make_start(setup)(keys, settings)
    chunk = make_chunk(setup, 5)
    carry, first = chunk(carry, keys, jnp.asarray(1), settings)
    changed = jax.tree.map(lambda v: v * 0.9 if v < 1 else v * 1.05, settings)
    _, second = chunk(carry, keys, jnp.asarray(6), changed)
    assert chunk._cache_size() == 1
    for series in (first, second):
        assert all(np.all(np.isfinite(np.asarray(v))) for v in series.values())


@pytest.mark.parametrize("name", sorted(n for n, spec in catalogue().filters.items()
                                         if {"additive_std", "rtpp", "rtps"} <= set(spec.traced)))
def test_every_inflation_piece_composes_with_every_ensemble_filter(name):
    result = assimbench.run(_overrides(name, ["filter.additive_std=0.05", "filter.rtpp=0.2", "filter.rtps=0.3", "filter.inflation=1.02"]))
    assert not result.diverged and result.summary["rmse_analysis"] < 1.5


def test_the_free_run_never_analyses():
    result = assimbench.run(_overrides("free"))
    np.testing.assert_array_equal(result.series["rmse_forecast"], result.series["rmse_analysis"])
    np.testing.assert_array_equal(result.series["spread_forecast"], result.series["spread_analysis"])


def test_the_climatology_reference_is_the_same_estimate_every_cycle():
    """Its RMSE is the distance of the truth to the climate mean; it claims no spread."""
    result = assimbench.run(["cycles=2000", "burn_in=100", "filter=climatology"])
    np.testing.assert_array_equal(result.series["rmse_forecast"], result.series["rmse_analysis"])
    assert np.all(result.series["spread_analysis"] == 0)
    # Lorenz-96 F=8 climatological standard deviation about 3.6 (common practice, from memory).
    assert result.summary["rmse_analysis"] == pytest.approx(3.6, abs=0.25)


def test_3dvar_beats_the_observations_and_reports_no_spread():
    """L96 all observed with error 1: a climatological-B 3D-Var analysis is better than the
    observations alone (error 1) but worse than a tuned 20-member ETKF (common practice)."""
    result = assimbench.run(["cycles=1500", "burn_in=300", "filter=3dvar", "filter.b_scale=0.05"])
    etkf = assimbench.run(["cycles=1500", "burn_in=300", "filter=etkf"])
    assert np.all(result.series["spread_analysis"] == 0)
    assert etkf.summary["rmse_analysis"] < result.summary["rmse_analysis"] < 1.0


@pytest.mark.parametrize("name, transform", [("3dvar", "square"), ("etkf", "absolute"), ("ensrf", "square"), ("sir", "absolute")])
def test_nonlinear_observation_transforms_run_through_every_kind_of_filter(name, transform):
    result = assimbench.run(_overrides(name, [f"observation.transform={transform}"]))
    assert all(np.isfinite(v) for v in result.summary.values())


def test_sir_on_lorenz63_tracks_the_truth():
    result = assimbench.run(
        ["model=lorenz63", "observation.interval=0.25", "observation.error_std=1.4142135623730951",
         "filter=sir", "filter.members=500", "filter.jitter=0.1", "cycles=400", "burn_in=100"]
    )
    assert result.summary["rmse_analysis"] < 1.0
