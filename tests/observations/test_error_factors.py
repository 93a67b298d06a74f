"""Unequal observation errors (observation.error_factors): R = error_std^2 diag(factors^2) in the
observations and in every filter of the catalogue, and the one-line refusals."""

import h5py
import numpy as np
import pytest
from refusals import assert_refused

import assimbench
from assimbench.config.catalogue import catalogue
from assimbench.config.composition import compose_config
from assimbench.config.plan import resolve

SMALL = ["model.size=12", "observation.stride=2", "cycles=20", "burn_in=5", "output=null"]
ONES = "observation.error_factors=[1,1,1,1,1,1]"


@pytest.mark.parametrize("name", sorted(catalogue().filters))
def test_factors_of_one_change_nothing_in_any_filter(name):
    """Every filter of the catalogue reads R through the network: with every factor 1 it analyses as
    with the scalar error (the vector path is the scalar's up to the order of a sum: adaptive
    inflation adds the stations' variances instead of multiplying one by their count)."""
    common = SMALL + [f"filter={name}"]
    plain, ones = assimbench.run(common), assimbench.run(common + [ONES])
    for metric in ("rmse_analysis", "rmse_forecast"):
        np.testing.assert_allclose(ones.series[metric], plain.series[metric], rtol=0, atol=1e-9, err_msg=metric)


def test_each_station_is_observed_with_its_own_error(tmp_path):
    """The stored observations minus the truth at the stations: their standard deviation at each
    station is error_std x its factor (2,000 cycles: the estimate's relative standard error is about
    1.6%, so a 10% band)."""
    factors = [0.5, 1.0, 2.0, 1.0, 3.0, 0.25]
    path = tmp_path / "run.h5"
    assimbench.run(["model.size=12", "observation.stride=2", "observation.error_std=0.8", "cycles=2000",
                    "burn_in=0", "store.truth=true", "store.observations=true", "diagnostics=[]",
                    "observation.error_factors=[" + ",".join(map(str, factors)) + "]"], output=str(path))
    with h5py.File(path) as f:
        truth, observations = f["truth"][0], f["observations"][0]
    residual_std = np.std(observations - truth[:, ::2], axis=0)
    np.testing.assert_allclose(residual_std, 0.8 * np.asarray(factors), rtol=0.10)


@pytest.mark.parametrize("overrides, words", [
    (["observation.error_factors=[1,2]"], ["observation.error_factors", "one factor per station: 6 here, got 2"]),
    (["observation.error_factors=[1,2,0,1,1,1]"], ["observation.error_factors", "finite factors > 0"]),
    (["observation.error_factors=[1,[2],1,1,1,1]"], ["observation.error_factors", "a flat list of numbers"]),
    (["observation.stride=1", "observation.stations=[0,5.5]", "observation.error_factors=[1,-1]"],
     ["observation.error_factors", "> 0"]),
])
def test_bad_factors_are_one_line(overrides, words):
    assert_refused(["model.size=12", "observation.stride=2", "output=null"] + overrides, words)


def _one_analysis(overrides, members=30, seed=3):
    """The built filter's analysis of a Gaussian ensemble on 8 variables observed at every other one
    (error 0.5, factors 1, 2, 0.5, 1.5): (plan, ensemble, y, analysed state)."""
    import jax

    plan = resolve(compose_config(["model.size=8", "observation.stride=2", "observation.error_std=0.5",
                                   "observation.error_factors=[1,2,0.5,1.5]", "output=null"] + overrides))
    rng = np.random.default_rng(seed)
    ensemble = rng.normal(size=(members, 8)) @ np.linalg.cholesky(np.eye(8) + 0.5).T + 2.0
    y = rng.normal(size=plan.setup.operator.size)
    filt, key = plan.setup.filter, jax.random.PRNGKey(0)
    state = filt.init(key, jax.numpy.asarray(ensemble), plan.settings)
    analysed, _ = filt.analyse(key, state, jax.numpy.asarray(y), plan.settings)
    return plan, ensemble, y, analysed


R = 0.25 * np.diag([1.0, 4.0, 0.25, 2.25])
H = np.eye(8)[::2]


def test_unequal_errors_in_the_3dvar_are_the_best_linear_unbiased_estimate():
    """x_a = x_b + B H^T (H B H^T + R)^-1 (y - H x_b) with R = diag(sigma_i^2) (Lorenc 1986, Q. J. R.
    Meteorol. Soc. 112; textbook identity), B the 3D-Var's scaled climatological covariance."""
    from assimbench.models.climatology import climatology

    plan, ensemble, y, analysed = _one_analysis(["filter=3dvar", "filter.b_scale=0.2"])
    b_cov = 0.2 * np.asarray(climatology(plan.setup.model)[1])
    background = ensemble.mean(axis=0)
    expected = background + b_cov @ H.T @ np.linalg.solve(H @ b_cov @ H.T + R, y - H @ background)
    np.testing.assert_allclose(np.asarray(analysed.members)[0], expected, rtol=0, atol=1e-10)


def test_unequal_errors_in_the_denkf_give_the_kalman_mean():
    """The DEnKF updates the mean with the full Kalman gain (Sakov & Oke 2008, Tellus 60A, eq. 5;
    from memory): the Kalman mean from the ensemble's sample covariance and R = diag(sigma_i^2)."""
    _, ensemble, y, analysed = _one_analysis(["filter=denkf", "filter.members=30", "filter.inflation=1.0"])
    cov, background = np.cov(ensemble, rowvar=False), ensemble.mean(axis=0)
    expected = background + cov @ H.T @ np.linalg.solve(H @ cov @ H.T + R, y - H @ background)
    np.testing.assert_allclose(np.asarray(analysed.members).mean(axis=0), expected, rtol=0, atol=1e-10)


def test_unequal_errors_in_the_particle_filter_weigh_by_the_gaussian_likelihood():
    """With no resampling, the log weights are the normalised log-likelihoods of y under
    N(H x_k, R), against scipy.stats.multivariate_normal."""
    from scipy import stats
    from scipy.special import logsumexp

    _, ensemble, y, analysed = _one_analysis(["filter=sir", "filter.members=50", "filter.ess_threshold=1e-9"],
                                             members=50)
    loglik = np.array([stats.multivariate_normal(H @ x, R).logpdf(y) for x in ensemble])
    np.testing.assert_allclose(np.asarray(analysed.log_weights), loglik - logsumexp(loglik), rtol=0, atol=1e-10)


def test_the_printed_observation_error_is_the_stations_root_mean_square():
    """The reference a run prints beside its RMSE, also for lane 0 of an error_std sweep."""
    from assimbench.commands.run import observation_error

    config = {"observation": {"error_std": 0.5, "error_factors": [1.0, 2.0, 0.5, 1.5]}}
    assert observation_error(config) == (0.5 * np.sqrt((1 + 4 + 0.25 + 2.25) / 4), " (RMS over the stations)")
    assert observation_error(config, 2.0)[0] == 4 * observation_error(config)[0]
    assert observation_error({"observation": {"error_std": 0.5}}) == (0.5, "")


def test_the_reports_failing_level_is_the_stations_root_mean_square():
    """The report reads a state RMSE against the same observation error the run prints."""
    from assimbench.report.pooling import FailingLevel

    config = {"observation.error_std": 0.5, "observation.error_factors": (1.0, 2.0, 0.5, 1.5)}
    level, words = FailingLevel(ratio=1.0).level(config)
    assert level == pytest.approx(0.5 * np.sqrt((1 + 4 + 0.25 + 2.25) / 4), rel=1e-14)
    assert FailingLevel(ratio=1.0).level({"observation.error_std": 0.5})[0] == 0.5
