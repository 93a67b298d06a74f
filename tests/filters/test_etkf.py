"""ETKF against the exact Kalman filter on linear Gaussian problems."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest
import scipy.linalg

from assimbench.filters.base import EnsembleState
from assimbench.filters.kalman.etkf import etkf_analysis, make_etkf
from assimbench.filters.kalman.inflation import inflate_anomalies
from assimbench.observations.operators import every_kth


def _kalman(mean, cov, H, R, y):
    """Textbook Kalman update (Kalman 1960; e.g. Evensen 2009, Data Assimilation, eq. 3.9-3.11)."""
    gain = cov @ H.T @ np.linalg.inv(H @ cov @ H.T + R)
    return mean + gain @ (y - H @ mean), (np.eye(len(mean)) - gain @ H) @ cov


def _sample_stats(members):
    mean = members.mean(axis=0)
    anomalies = members - mean
    return mean, anomalies.T @ anomalies / (members.shape[0] - 1)


@pytest.mark.parametrize("n_members, n, p", [(12, 5, 3), (6, 10, 4), (30, 8, 8)])
def test_one_analysis_equals_the_kalman_update_of_the_ensemble_statistics(n_members, n, p):
    """Mean and covariance after one ETKF analysis equal the Kalman update computed from the
    forecast ensemble's own mean and covariance (Hunt, Kostelich & Szunyogh 2007, sec. 2.3),
    also when the ensemble is rank-deficient (N <= n)."""
    rng = np.random.default_rng(n_members * 100 + n)
    members = rng.normal(size=(n_members, n)) @ rng.normal(size=(n, n)) + rng.normal(size=n)
    H = rng.normal(size=(p, n))
    error_var = rng.uniform(0.3, 2.0, size=p)
    y = rng.normal(size=p)
    analysis = np.asarray(etkf_analysis(jnp.asarray(members), jnp.asarray(members @ H.T), jnp.asarray(y), jnp.asarray(error_var)))
    mean_f, cov_f = _sample_stats(members)
    mean_k, cov_k = _kalman(mean_f, cov_f, H, np.diag(error_var), y)
    mean_a, cov_a = _sample_stats(analysis)
    np.testing.assert_allclose(mean_a, mean_k, rtol=0, atol=1e-10)
    np.testing.assert_allclose(cov_a, cov_k, rtol=0, atol=1e-10)


def test_symmetric_square_root_keeps_the_analysis_anomalies_centred():
    """The symmetric transform has the vector of ones as an eigenvector, so the analysis
    anomalies sum to zero (Wang, Bishop & Julier 2004, Mon. Wea. Rev. 132; Hunt et al. 2007)."""
    rng = np.random.default_rng(1)
    members = rng.normal(size=(15, 6))
    analysis = np.asarray(etkf_analysis(jnp.asarray(members), jnp.asarray(members[:, :4]), jnp.zeros(4), 1.0))
    mean_update = analysis.mean(axis=0)
    # The mean of the members equals xbar + X^T wbar: recompute it from the Kalman route.
    mean_f, cov_f = _sample_stats(members)
    H = np.eye(6)[:4]
    mean_k, _ = _kalman(mean_f, cov_f, H, np.eye(4), np.zeros(4))
    np.testing.assert_allclose(mean_update, mean_k, atol=1e-12)


def test_inflation_multiplies_the_anomalies():
    """Covariance grows by the square of filter.inflation; the mean is unchanged."""
    rng = np.random.default_rng(2)
    members = rng.normal(size=(9, 4))
    inflated = np.asarray(inflate_anomalies(jnp.asarray(members), 1.1))
    np.testing.assert_allclose(inflated.mean(0), members.mean(0), atol=1e-14)
    np.testing.assert_allclose(_sample_stats(inflated)[1], 1.21 * _sample_stats(members)[1], rtol=1e-12)


def test_the_filter_pair_applies_inflation_before_the_analysis():
    """make_etkf's analyse equals inflate-then-etkf_analysis with R = error_std^2 I."""
    rng = np.random.default_rng(4)
    members = jnp.asarray(rng.normal(size=(8, 6)))
    y = jnp.asarray(rng.normal(size=3))
    operator = every_kth(6, 2)
    filt = make_etkf(operator, members=8)
    settings = {"filter": {"inflation": jnp.asarray(1.2)}, "observation": {"error_std": jnp.asarray(0.7)}}
    state, _ = filt.analyse(jax.random.PRNGKey(0), EnsembleState(members), y, settings)
    prior = inflate_anomalies(members, 1.2)
    expected = etkf_analysis(prior, prior[:, ::2], y, 0.49)
    np.testing.assert_allclose(np.asarray(state.members), np.asarray(expected), rtol=0, atol=1e-13)


def test_cycled_on_a_linear_system_the_covariance_reaches_the_riccati_steady_state():
    """Cycled with an exact linear forecast and no model noise, a full-rank ETKF's forecast
    covariance follows the Kalman filter's Riccati recursion, so it converges to the solution of
    the discrete algebraic Riccati equation (scipy.linalg.solve_discrete_are)."""
    theta = 0.3
    M = np.array([[np.cos(theta), -np.sin(theta), 0.0], [np.sin(theta), np.cos(theta), 0.0], [0.0, 0.0, 1.0]])
    M = M * np.array([1.05, 1.05, 1.1])[:, None]  # growing modes, as in a chaotic model
    H = np.array([[1.0, 0.5, 0.0], [0.0, 0.2, 1.0]])
    R = np.diag([0.5, 0.8])
    steady = scipy.linalg.solve_discrete_are(M.T, H.T, np.zeros((3, 3)), R)

    rng = np.random.default_rng(5)
    members0 = jnp.asarray(rng.normal(size=(10, 3)) * 2.0)
    observations = jnp.asarray(rng.normal(size=(1000, 2)))
    Mj, Hj, r = jnp.asarray(M), jnp.asarray(H), jnp.asarray(np.diag(R))

    def cycle(members, y):
        forecast = members @ Mj.T
        return etkf_analysis(forecast, forecast @ Hj.T, y, r), forecast

    _, forecasts = jax.lax.scan(cycle, members0, observations)
    covariance = _sample_stats(np.asarray(forecasts[-1]))[1]
    np.testing.assert_allclose(covariance, steady, rtol=1e-8, atol=1e-10)
