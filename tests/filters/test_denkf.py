"""The deterministic EnKF against the Kalman filter, its own gain form, and a twin run."""

import jax.numpy as jnp
import numpy as np
import scipy.linalg

import assimbench
from assimbench.filters.kalman.denkf import denkf_analysis

N, N_STATE, STRIDE, R = 25, 8, 2, 0.3


def _problem(seed=4):
    rng = np.random.default_rng(seed)
    ensemble = rng.normal(size=(N, N_STATE)) @ np.linalg.cholesky(np.eye(N_STATE) + 0.4).T + 1.0
    h = np.eye(N_STATE)[::STRIDE]
    return ensemble, h, rng.normal(size=h.shape[0])


def _gain(ensemble, h):
    """K = P H^T (H P H^T + R)^-1 from the sample covariance, by scipy.linalg.solve (Kalman 1960)."""
    cov = np.cov(ensemble, rowvar=False)
    innovation_cov = h @ cov @ h.T + R * np.eye(h.shape[0])
    return scipy.linalg.solve(innovation_cov, h @ cov, assume_a="pos").T, cov


def test_the_ensemble_space_form_equals_the_half_gain_update():
    """Sakov & Oke (2008, Tellus A 60, Sec. 2; equation numbers from memory): xbar_a = xbar + K (y - H xbar),
    A_a = A - K H A / 2, computed directly with the gain, equals the package's ensemble-space transform."""
    ensemble, h, y = _problem()
    gain, _ = _gain(ensemble, h)
    mean = ensemble.mean(axis=0)
    anomalies = ensemble - mean
    expected = mean + gain @ (y - h @ mean) + anomalies - 0.5 * anomalies @ h.T @ gain.T
    got = np.asarray(denkf_analysis(jnp.asarray(ensemble), jnp.asarray(ensemble @ h.T), jnp.asarray(y), R))
    np.testing.assert_allclose(got, expected, rtol=1e-10, atol=1e-10)


def test_the_mean_is_the_kalman_filters_and_the_covariance_exceeds_it_by_a_quarter_term():
    """P_a = (I - K H) P + K H P H^T K^T / 4: the Kalman filter's analysis covariance plus the implicit
    inflation of the half gain (algebra from the update above; Sakov & Oke 2008)."""
    ensemble, h, y = _problem(seed=5)
    gain, cov = _gain(ensemble, h)
    got = np.asarray(denkf_analysis(jnp.asarray(ensemble), jnp.asarray(ensemble @ h.T), jnp.asarray(y), R))
    mean = ensemble.mean(axis=0)
    np.testing.assert_allclose(got.mean(axis=0), mean + gain @ (y - h @ mean), rtol=1e-10, atol=1e-10)
    kalman = (np.eye(N_STATE) - gain @ h) @ cov
    np.testing.assert_allclose(np.cov(got, rowvar=False), kalman + gain @ h @ cov @ h.T @ gain.T / 4,
                               rtol=1e-9, atol=1e-10)


def test_the_denkf_tracks_the_demo_ring_like_the_etkf():
    """On the demo ring (Lorenz-96, n = 40, every station, unit error, 20 members) the DEnKF stays well
    below the observation error, as Sakov & Oke (2008) report for Lorenz-96 (from memory)."""
    common = ["cycles=1200", "burn_in=200", "replicates=2", "output=null"]
    denkf = assimbench.run(common + ["filter=denkf", "filter.inflation=1.01"])
    etkf = assimbench.run(common + ["filter.inflation=1.03"])
    assert not denkf.diverged
    assert denkf.summary["rmse_analysis"] < 0.3
    assert abs(denkf.summary["rmse_analysis"] - etkf.summary["rmse_analysis"]) < 0.05
