"""The cycled twin experiment: compiled once, independent of batching and chunking,
paired data across filters, and the published accuracy on Lorenz-96."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest

import assimbench
from assimbench.config.composition import compose_config
from assimbench.config.plan import resolve
from assimbench.twin.cycling import make_chunk, make_start, make_truth_chunk, replicate_keys

SHORT = ["cycles=60", "burn_in=10", "filter.members=8", "model.size=12"]


def _setup(overrides=()):
    cfg = compose_config(SHORT + list(overrides))
    plan = resolve(cfg)
    setup, settings = plan.setup, plan.settings
    return cfg, setup, settings


def test_the_chunk_compiles_once_for_every_chunk_and_every_setting():
    """A second call with another first cycle and other swept floats reuses the compiled program."""
    _, setup, settings = _setup()
    keys = replicate_keys(0, 2)
    carry = make_start(setup)(keys, settings)
    chunk = make_chunk(setup, 10)
    carry, _ = chunk(carry, keys, jnp.asarray(1), settings)
    other = jax.tree.map(lambda v: v * 1.01, settings)
    carry, _ = chunk(carry, keys, jnp.asarray(11), other)
    assert chunk._cache_size() == 1


def test_jit_and_no_jit_agree():
    """Same start, a few cycles: compiled and eager evaluation agree to rounding. (Over a long
    horizon they must not: chaos amplifies rounding differences, about exp(1.7 t) on L96.)"""
    _, setup, settings = _setup()
    keys = replicate_keys(3, 1)
    chunk = make_chunk(setup, 4)
    carry = make_start(setup)(keys, settings)
    _, jitted = chunk(carry, keys, jnp.asarray(1), settings)
    with jax.disable_jit():
        _, plain = chunk(carry, keys, jnp.asarray(1), settings)
    for name in jitted:
        np.testing.assert_allclose(np.asarray(jitted[name]), np.asarray(plain[name]), rtol=1e-9, atol=1e-12)


def test_a_batch_of_replicates_equals_each_replicate_run_alone():
    """vmap over replicates gives the numbers of a loop over replicates."""
    _, setup, settings = _setup()
    keys = replicate_keys(5, 3)
    chunk, start = make_chunk(setup, 20), make_start(setup)
    _, batched = chunk(start(keys, settings), keys, jnp.asarray(1), settings)
    for r in range(3):
        one = keys[r : r + 1]
        _, alone = chunk(start(one, settings), one, jnp.asarray(1), settings)
        np.testing.assert_allclose(np.asarray(batched["rmse_analysis"][r]), np.asarray(alone["rmse_analysis"][0]), rtol=1e-12)


def test_results_do_not_depend_on_the_chunk_length():
    """Keys depend on the absolute cycle only, so 7-cycle chunks give the numbers of one chunk."""
    cfg = compose_config(SHORT + ["replicates=2"])
    whole = assimbench.run_experiment(cfg)
    cfg.chunk_cycles = 7
    pieces = assimbench.run_experiment(cfg)
    for name in whole.series:
        np.testing.assert_allclose(pieces.series[name], whole.series[name], rtol=1e-13, atol=0)


def test_truth_and_observations_depend_on_the_seed_alone():
    """Two filters of different ensemble size on the same seed see the same truth and data."""
    truths = []
    for members in (5, 9):
        _, setup, settings = _setup([f"filter.members={members}"])
        keys = replicate_keys(11, 2)
        carry = make_start(setup)(keys, settings)
        truth_chunk = make_truth_chunk(setup.model, setup.operator, setup.steps_per_cycle, 15)
        out = jax.vmap(truth_chunk, in_axes=(0, None, 0, None, None))(carry.truth, None, keys, 1, settings)
        truths.append([np.asarray(a) for a in out if a is not None])
    for a, b in zip(*truths):
        np.testing.assert_array_equal(a, b)
    other_seed = replicate_keys(12, 2)
    assert not np.array_equal(np.asarray(other_seed), np.asarray(replicate_keys(11, 2)))


def test_nested_networks_share_the_observations_of_their_common_stations():
    """Every second station of the full network sees exactly the data of the half network."""
    series = {}
    for stride in (1, 2):
        _, setup, settings = _setup([f"observation.stride={stride}"])
        keys = replicate_keys(4, 1)
        carry = make_start(setup)(keys, settings)
        truth_chunk = jax.jit(make_truth_chunk(setup.model, setup.operator, setup.steps_per_cycle, 5))
        series[stride] = np.asarray(truth_chunk(carry.truth[0], None, keys[0], 1, settings)[3])
    np.testing.assert_array_equal(series[1][:, ::2], series[2])


def test_observation_errors_have_the_configured_statistics():
    """y - h(truth) over many cycles has mean 0 and standard deviation error_std (z-test, fixed key)."""
    _, setup, settings = _setup(["observation.error_std=0.5", "observation.stride=3"])
    keys = replicate_keys(2, 1)
    carry = make_start(setup)(keys, settings)
    truth_chunk = jax.jit(make_truth_chunk(setup.model, setup.operator, setup.steps_per_cycle, 2000))
    _, _, truths, ys = truth_chunk(carry.truth[0], None, keys[0], 1, settings)
    errors = np.asarray(ys) - np.asarray(truths)[:, ::3]
    assert errors.shape == (2000, 4)
    assert abs(errors.mean()) < 4 * 0.5 / np.sqrt(errors.size)
    assert errors.std() == pytest.approx(0.5, rel=0.03)


def test_lorenz96_etkf_twenty_members_reaches_the_published_accuracy(long_run):
    """L96 n=40, F=8, all observed every 0.05, R = I, 20-member ETKF with tuned inflation:
    time-mean analysis RMSE about 0.18-0.19 (the literature on this benchmark, e.g. Sakov & Oke
    2008 and Bocquet 2011; from memory). A short run is accepted up to 0.22; below 0.15 would
    mean the twin is easier than the published set-up."""
    cycles = 20000 if long_run else 1500
    result = assimbench.run(
        [f"cycles={cycles}", "burn_in=300", "replicates=2", "filter.members=20", "filter.inflation=1.05"]
    )
    assert not result.diverged
    assert 0.15 < result.summary["rmse_analysis"] < 0.22
    # A calibrated filter's spread is of the size of its error (common practice).
    ratio = result.summary["spread_analysis"] / result.summary["rmse_analysis"]
    assert 0.8 < ratio < 1.6


def test_lorenz63_etkf_beats_the_observations():
    """Lorenz-63, all observed every 0.25 with R = 2 I, 10-member ETKF: the analysis error is about
    0.6 (literature on this benchmark, from memory), well below the observation error sqrt(2)."""
    result = assimbench.run(
        [
            "model=lorenz63",
            "observation.interval=0.25",
            "observation.error_std=1.4142135623730951",
            "filter.members=10",
            "filter.inflation=1.04",
            "cycles=1500",
            "burn_in=200",
            "replicates=2",
        ]
    )
    assert not result.diverged
    assert 0.3 < result.summary["rmse_analysis"] < 0.9


def test_an_ensemble_without_enough_members_or_inflation_loses_the_truth():
    """Direction check: 5 members and no inflation on L96 n=40 cannot span the 13 unstable
    directions (Bocquet & Carrassi 2017; from memory), so its error sits far above 0.19."""
    result = assimbench.run(["cycles=600", "burn_in=200", "filter.members=5", "filter.inflation=1.0"])
    assert result.summary["rmse_analysis"] > 1.0
