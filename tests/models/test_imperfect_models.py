"""Imperfect forecast models: wrong parameters, a reduced model with a fitted closure, model error
in the truth. Direction checks with stated margins, exact closure identities, and the plumbing."""

import numpy as np
import pytest

import assimbench
from assimbench.models.climatology import attractor_samples
from assimbench.models.closure import FIT_SAMPLES, fit_closure
from assimbench.models.lorenz96 import make_lorenz96, make_lorenz96_two_scale

COMMON = ["replicates=2", "cycles=1500", "burn_in=300", "filter.inflation=1.05"]


@pytest.fixture(scope="module")
def perfect():
    return assimbench.run(COMMON)


def _gap_recovered(perfect, imperfect, treated):
    """Fraction of the RMSE gap (imperfect - perfect) that the treatment closes, per replicate."""
    return (imperfect - treated) / (imperfect - perfect)


def test_a_wrong_forcing_hurts_and_additive_inflation_recovers_part_of_the_gap(perfect):
    """Common practice (e.g. Whitaker & Hamill 2012, MWR 140): a forecast model with a wrong
    forcing (F = 7 for a truth with F = 8) raises the analysis RMSE well above the perfect-model
    run, and additive inflation, a stand-in for the missing model error, recovers part of the gap.
    Measured: 0.21 perfect, 1.18 with F = 7, 0.63 with additive_std = 0.2 (2 replicates, 1,500 cycles).
    Margins: at least twice the perfect RMSE; at least a quarter of the gap recovered, replicate by replicate."""
    wrong = assimbench.run(COMMON + ["forecast_model=lorenz96", "forecast_model.forcing=7.0",
                                     "lanes.filter.additive_std=[0.0,0.2]"])
    base = perfect.per_replicate["rmse_analysis"]
    untreated, treated = wrong.per_replicate["rmse_analysis"]
    assert np.all(untreated > 2.0 * base)
    assert np.all(_gap_recovered(base, untreated, treated) > 0.25)


def test_model_error_in_the_truth_hurts_and_matched_additive_noise_recovers_part(perfect):
    """x_k = M(x_{k-1}) + q eta_k with q = 0.1 unknown to the filter: RMSE rises (measured 1.24 vs
    0.21); additive inflation of the same size (the Kalman filter's Q; common practice) recovers
    part of it (measured 0.54). Same margins as above."""
    noisy = assimbench.run(COMMON + ["truth_noise_std=0.1", "lanes.filter.additive_std=[0.0,0.1]"])
    base = perfect.per_replicate["rmse_analysis"]
    untreated, treated = noisy.per_replicate["rmse_analysis"]
    assert np.all(untreated > 2.0 * base)
    assert np.all(_gap_recovered(base, untreated, treated) > 0.25)


def test_the_default_forecast_model_is_the_truth_and_naming_it_changes_nothing(perfect):
    """forecast_model=same (the default) and the same model named explicitly are one computation."""
    named = assimbench.run(COMMON + ["forecast_model=lorenz96"])
    np.testing.assert_array_equal(named.series["rmse_analysis"], perfect.series["rmse_analysis"])


def test_a_closure_for_a_wrong_constant_forcing_is_exactly_that_constant():
    """Exact least squares: for a single-scale truth with F = 8 and a reduced model with F = 7 the
    tendency error is the constant 1 at every sample, so the fitted g is 1 + 0 X + 0 X^2."""
    coefficients = fit_closure(make_lorenz96(40, forcing=8.0), forcing=7.0, degree=2)
    np.testing.assert_allclose(coefficients, [1.0, 0.0, 0.0], atol=1e-9)


def test_the_two_scale_closure_is_the_least_squares_polynomial():
    """The fit equals NumPy's general least-squares polynomial fit (numpy.polynomial.polynomial.polyfit)
    of the coupling term -(h c / b) sum_j Y_{j,k} on X_k, and it explains most of the coupling's
    variance (Wilks 2005, QJRMS 131, Fig. 2: a smooth curve through the cloud; from memory)."""
    truth = make_lorenz96_two_scale(slow=8, fast_per_slow=8, forcing=18.0, dt=0.005)
    coefficients = fit_closure(truth, forcing=18.0, degree=3)
    states = attractor_samples(truth, FIT_SAMPLES)
    slow, fast = states[:, :8], states[:, 8:].reshape(-1, 8, 8)
    coupling = -(1.0 * 10.0 / 10.0) * fast.sum(axis=-1)
    reference = np.polynomial.polynomial.polyfit(slow.ravel(), coupling.ravel(), 3)
    np.testing.assert_allclose(coefficients, reference, rtol=1e-8, atol=1e-10)
    fitted = np.polynomial.polynomial.polyval(slow, coefficients)
    assert 1.0 - np.var(coupling - fitted) / np.var(coupling) > 0.5


def test_on_a_two_scale_truth_the_closure_beats_the_bare_reduced_model():
    """Observed on the slow variables only, the truth's fast scales are model error for a
    single-scale forecast model; the fitted closure removes most of it (measured RMSE 0.25 with the
    closure, 3.4 without, 0.22 perfect two-scale, 600 cycles). Margin: less than half."""
    common = ["model=lorenz96_two_scale", "cycles=400", "burn_in=100", "filter.inflation=1.05"]
    closure = assimbench.run(common + ["forecast_model=lorenz96_closure"])
    bare = assimbench.run(common + ["forecast_model=lorenz96", "forecast_model.size=36",
                                    "forecast_model.forcing=10", "forecast_model.dt=0.005"])
    assert closure.summary["rmse_analysis"] < 0.5 * bare.summary["rmse_analysis"]
    assert not closure.diverged


def test_a_two_scale_truth_is_scored_and_stored_on_its_slow_variables(tmp_path):
    import h5py

    path = tmp_path / "two_scale.h5"
    result = assimbench.run(["model=lorenz96_two_scale", "model.slow=8", "model.fast_per_slow=4", "cycles=40",
                             "burn_in=10", "filter.members=10", "store.truth=true", "store.analysis_mean=true",
                             "store.observations=true", "observation.stride=2"], output=str(path))
    assert not result.diverged
    with h5py.File(path) as f:
        assert f["truth"].shape == (1, 40, 8) and f["analysis_mean"].shape == (1, 40, 8)
        assert f["observations"].shape == (1, 40, 4) and list(f["station"][:]) == [0, 2, 4, 6]
        mean_error = np.sqrt(np.mean((f["analysis_mean"][0] - f["truth"][0]) ** 2, axis=1))
        np.testing.assert_allclose(mean_error, f["rmse_analysis"][0], rtol=1e-12)


def test_letkf_tracks_kuramoto_sivashinsky_far_below_the_observation_error():
    """Direction check on the PDE benchmark: every second point observed every time unit with error
    0.1; a 10-member LETKF (radius 8 grid points) ends well below the observation error and far
    below the free ensemble (measured 0.016 with all points observed)."""
    common = ["model=kuramoto_sivashinsky", "observation.interval=1.0", "observation.error_std=0.1",
              "observation.stride=2", "cycles=400", "burn_in=100"]
    letkf = assimbench.run(common + ["filter=letkf", "filter.members=10", "filter.radius=8",
                                     "filter.inflation=1.05"])
    free = assimbench.run(common + ["filter=free", "filter.members=10"])
    assert letkf.summary["rmse_analysis"] < 0.5 * 0.1
    assert letkf.summary["rmse_analysis"] < 0.1 * free.summary["rmse_analysis"]


def test_every_demo_paired_study_composes_and_validates():
    """The demo studies (experiments/model_error/, iterative/, hybrid/) stay runnable as the config
    schema evolves."""
    import glob
    import importlib.util
    import os

    from assimbench.config.composition import compose_config

    root = os.path.join(os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__)))), "experiments")
    spec = importlib.util.spec_from_file_location("paired_study", os.path.join(root, "paired_study.py"))
    script = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(script)
    paths = sorted(path for folder in script.FOLDERS for path in glob.glob(os.path.join(folder, "*.yaml")))
    assert len(paths) >= 3
    for path in paths:
        study = script.load_study(path)
        for overrides in study["arms"].values():
            compose_config(list(study["common"]) + list(overrides))
    mean, half = script.paired_interval(np.array([1.0, 2.0, 3.0]))
    assert mean == 2.0 and half == pytest.approx(4.302652729911275 / np.sqrt(3))  # t_{0.975, 2} (scipy.stats.t)


def test_the_climatology_programs_compile_once_for_every_parameter_setting_and_users_share_one_draw():
    """One compiled pair of programs per model's static parts serves every forcing (lanes, closures,
    thresholds); the divergence rule's block is the first block of the same trajectory B uses."""
    from assimbench.models import climatology

    first, second = make_lorenz96(12, forcing=8.0), make_lorenz96(12, forcing=9.0)
    a, b = climatology.attractor_samples(first), climatology.attractor_samples(second)
    assert a.shape == b.shape == (climatology.SAMPLES, 12) and not np.array_equal(a, b)
    start, block = climatology._programs(first)
    assert climatology._programs(second) == (start, block)
    assert start._cache_size() == 1 and block._cache_size() == 1
    np.testing.assert_array_equal(climatology.attractor_samples(first, climatology.BLOCK), a[: climatology.BLOCK])


def test_the_model_caches_keep_only_their_most_recent_entries():
    from assimbench.models.climatology import BoundedCache

    cache, made = BoundedCache(2), []
    for key in ("a", "b", "a", "c", "b"):
        cache.get(key, lambda key=key: made.append(key) or key.upper())
    assert made == ["a", "b", "c", "b"]  # "a" was used again before "c" came, so "b" was the one dropped
