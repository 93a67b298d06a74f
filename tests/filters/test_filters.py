"""The filter family against closed forms, against each other, and against the Kalman filter."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest

from assimbench.filters.base import EnsembleState
from assimbench.filters.kalman.enkf import enkf_analysis, make_enkf
from assimbench.filters.kalman.ensrf import ensrf_analysis
from assimbench.filters.kalman.etkf import etkf_analysis
from assimbench.filters.kalman.inflation import (
    add_centred_noise,
    relax_to_prior_perturbations,
    relax_to_prior_spread,
)
from assimbench.filters.kalman.letkf import letkf_analysis, local_windows
from assimbench.filters.particle.sir import effective_sample_size, make_sir, systematic_resample
from assimbench.filters.variational.threedvar import gauss_newton_3dvar, threedvar_cost
from assimbench.localization import gaspari_cohn
from assimbench.observations.operators import every_kth
from assimbench.twin.diagnostics import ensemble_mean_and_spread


def _stats(members):
    mean = members.mean(axis=0)
    anomalies = members - mean
    return mean, anomalies.T @ anomalies / (members.shape[0] - 1)


def _kalman(mean, cov, H, R, y):
    """Textbook Kalman update (Kalman 1960; e.g. Evensen 2009, Data Assimilation, eq. 3.9-3.11)."""
    gain = cov @ H.T @ np.linalg.inv(H @ cov @ H.T + R)
    return mean + gain @ (y - H @ mean), (np.eye(len(mean)) - gain @ H) @ cov


# Gaspari & Cohn (1999, QJRMS 125, eq. 4.10): exact values from the polynomial by hand.
@pytest.mark.parametrize("r, value", [(0.0, 1.0), (0.5, 263 / 384), (1.0, 5 / 24), (1.5, 19 / 1152), (2.0, 0.0), (2.7, 0.0)])
def test_gaspari_cohn_values(r, value):
    assert float(gaspari_cohn(jnp.asarray(r))) == pytest.approx(value, abs=1e-15)


def test_gaspari_cohn_is_continuous_and_smooth_at_the_joins():
    """The two branches meet at r = 1 and r = 2 in value and slope (Gaspari & Cohn 1999, sec. 4)."""
    eps = 1e-7
    for joint in (1.0, 2.0):
        left, right = gaspari_cohn(jnp.asarray(joint - eps)), gaspari_cohn(jnp.asarray(joint + eps))
        assert float(left) == pytest.approx(float(right), abs=1e-6)
        slope = jax.grad(gaspari_cohn)
        assert float(slope(jnp.asarray(joint - 1e-9))) == pytest.approx(float(slope(jnp.asarray(joint + 1e-9))), abs=1e-6)
    assert float(gaspari_cohn(jnp.asarray(-0.5))) == pytest.approx(263 / 384)


def _ring_problem(n=12, members=8, stride=2, seed=0):
    rng = np.random.default_rng(seed)
    ensemble = jnp.asarray(rng.normal(size=(members, n)) + np.sin(np.arange(n)))
    operator = every_kth(n, stride)
    y = jnp.asarray(rng.normal(size=operator.size))
    return ensemble, operator, y


def test_letkf_with_a_radius_far_beyond_the_domain_equals_the_etkf():
    """Every local weight is 1 to rounding, so each local analysis is the global one
    (Hunt, Kostelich & Szunyogh 2007, sec. 2.3)."""
    ensemble, operator, y = _ring_problem()
    index, distance, mask = local_windows(12, operator.positions, 1e9)
    weight = jnp.where(mask, gaspari_cohn(distance / 1e9), 0.0)
    local = letkf_analysis(ensemble, operator(ensemble), y, 0.6, index, weight)
    global_ = etkf_analysis(ensemble, operator(ensemble), y, 0.6)
    np.testing.assert_allclose(np.asarray(local), np.asarray(global_), rtol=0, atol=1e-10)


def test_letkf_ignores_observations_beyond_twice_the_radius():
    """Changing an observation 2c or more away leaves a grid point's analysis unchanged."""
    ensemble, operator, y = _ring_problem(n=20, stride=1)
    index, distance, mask = local_windows(20, operator.positions, 2.0)
    weight = jnp.where(mask, gaspari_cohn(distance / 2.0), 0.0)
    base = letkf_analysis(ensemble, operator(ensemble), y, 1.0, index, weight)
    moved = letkf_analysis(ensemble, operator(ensemble), y.at[10].add(5.0), 1.0, index, weight)
    changed = np.flatnonzero(np.abs(np.asarray(moved - base)).max(axis=0) > 1e-12)
    np.testing.assert_array_equal(changed, np.arange(7, 14))  # |g - 10| < 4 = 2c


def test_serial_ensrf_without_localization_equals_the_etkf_posterior():
    """For a linear h and diagonal R, assimilating observations one at a time gives the batch
    posterior mean and covariance (Whitaker & Hamill 2002, sec. 2; exact in exact arithmetic)."""
    ensemble, operator, y = _ring_problem(members=10)
    taper = jnp.ones((operator.size, 12 + operator.size))
    serial = np.asarray(ensrf_analysis(ensemble, operator(ensemble), y, 0.8, taper))
    batch = np.asarray(etkf_analysis(ensemble, operator(ensemble), y, 0.8))
    for a, b in zip(_stats(serial), _stats(batch)):
        np.testing.assert_allclose(a, b, rtol=0, atol=1e-10)


@pytest.mark.parametrize("centre", [True, False])
def test_perturbed_observation_enkf_with_a_large_ensemble_is_the_kalman_filter(centre):
    """Burgers, van Leeuwen & Evensen (1998): with perturbed observations the analysis
    covariance is (I - KH) P in expectation. N = 20,000: the sample error of a covariance entry is
    about sqrt(2 / N) = 1% of the variance, so a 5% tolerance (fixed key) is a 5-sigma band."""
    rng = np.random.default_rng(7)
    n, p, members = 3, 2, 20000
    cov_sqrt = rng.normal(size=(n, n))
    mean = np.array([1.0, -2.0, 0.5])
    ensemble = mean + rng.normal(size=(members, n)) @ cov_sqrt.T
    H = np.array([[1.0, 0.0, 0.0], [0.0, 0.5, 0.5]])
    error_std = 0.7
    y = np.array([0.3, -0.4])
    perturbations = np.array(jax.random.normal(jax.random.PRNGKey(3), (members, p)))
    if centre:
        perturbations -= perturbations.mean(axis=0)
    analysis = np.asarray(
        enkf_analysis(jnp.asarray(ensemble), jnp.asarray(ensemble @ H.T), jnp.asarray(y + error_std * perturbations), error_std**2)
    )
    mean_f, cov_f = _stats(ensemble)
    mean_k, cov_k = _kalman(mean_f, cov_f, H, error_std**2 * np.eye(p), y)
    mean_a, cov_a = _stats(analysis)
    scale = np.sqrt(np.outer(np.diag(cov_k), np.diag(cov_k)))
    assert np.all(np.abs(cov_a - cov_k) < 0.05 * scale)
    mean_tolerance = (1e-10 if centre else 5 * np.sqrt(np.diag(cov_k) / members))
    assert np.all(np.abs(mean_a - mean_k) < mean_tolerance + 1e-10)


def test_enkf_filter_pair_draws_its_own_perturbations_from_the_key():
    ensemble, operator, y = _ring_problem()
    filt = make_enkf(operator, members=8, centre_perturbations=True)
    settings = {"filter": {"inflation": 1.0}, "observation": {"error_std": jnp.asarray(0.5)}}
    a, _ = filt.analyse(jax.random.PRNGKey(0), EnsembleState(ensemble), y, settings)
    b, _ = filt.analyse(jax.random.PRNGKey(0), EnsembleState(ensemble), y, settings)
    c, _ = filt.analyse(jax.random.PRNGKey(1), EnsembleState(ensemble), y, settings)
    np.testing.assert_array_equal(np.asarray(a.members), np.asarray(b.members))
    assert not np.allclose(np.asarray(a.members), np.asarray(c.members))
    # Centred perturbations: the analysis mean is the deterministic Kalman mean of the ensemble.
    np.testing.assert_allclose(np.asarray(a.members.mean(0)), np.asarray(c.members.mean(0)), atol=1e-12)


def test_3dvar_with_the_true_forecast_covariance_is_the_blue():
    """With B = the true forecast covariance, one 3D-Var analysis is the Kalman (BLUE) mean
    (Lorenc 1986, QJRMS 112, sec. 3)."""
    rng = np.random.default_rng(11)
    n = 6
    root = rng.normal(size=(n, n))
    B = root @ root.T + 0.5 * np.eye(n)
    operator = every_kth(n, 2)
    H = np.eye(n)[::2]
    background = rng.normal(size=n)
    y = rng.normal(size=3)
    path = gauss_newton_3dvar(jnp.asarray(background), jnp.asarray(y), jnp.asarray(B), 0.3, operator, 1)
    blue, _ = _kalman(background, B, H, 0.3 * np.eye(3), y)
    np.testing.assert_allclose(np.asarray(path[-1]), blue, rtol=0, atol=1e-12)


def test_gauss_newton_lowers_the_3dvar_cost_at_every_iteration():
    """For h(x) = x^2 (selected variables) each Gauss-Newton step lowers J (a property of
    Gauss-Newton near a minimum with small residuals; Nocedal & Wright 2006, sec. 10.3)."""
    rng = np.random.default_rng(12)
    n = 8
    root = rng.normal(size=(n, n)) * 0.3
    B = root @ root.T + 0.2 * np.eye(n)
    operator = every_kth(n, 1, "square")
    truth = 2.0 + rng.normal(size=n) * 0.3
    background = truth + rng.normal(size=n) * 0.4
    y = truth**2 + 0.1 * rng.normal(size=n)
    path = gauss_newton_3dvar(jnp.asarray(background), jnp.asarray(y), jnp.asarray(B), 0.01, operator, 5)
    costs = [float(threedvar_cost(x, jnp.asarray(background), jnp.asarray(y), jnp.asarray(B), 0.01, operator)) for x in path]
    assert all(b < a for a, b in zip(costs, costs[1:])), costs
    assert costs[-1] < 0.05 * costs[0]


def test_sir_weighted_mean_converges_to_the_kalman_mean_as_particles_grow():
    """Importance weights by the Gaussian likelihood turn prior draws into posterior draws
    (Gordon, Salmond & Smith 1993); the weighted-mean error falls roughly like N^-1/2."""
    n, p = 2, 1
    prior_mean, prior_cov = np.array([1.0, 0.0]), np.array([[1.0, 0.6], [0.6, 2.0]])
    H, error_std, y = np.array([[1.0, 0.0]]), 0.8, np.array([1.7])
    kalman_mean, _ = _kalman(prior_mean, prior_cov, H, error_std**2 * np.eye(p), y)
    operator = every_kth(n, 2)
    errors = []
    for members in (100, 1000, 10000, 100000):
        particles = prior_mean + np.asarray(jax.random.normal(jax.random.PRNGKey(members), (members, n))) @ np.linalg.cholesky(prior_cov).T
        filt = make_sir(operator, members)
        state = filt.init(None, jnp.asarray(particles), None)
        settings = {"observation": {"error_std": jnp.asarray(error_std)}, "filter": {"jitter": 0.0, "ess_threshold": 1e-9}}
        posterior, info = filt.analyse(jax.random.PRNGKey(0), state, jnp.asarray(y), settings)
        mean, _ = ensemble_mean_and_spread(posterior)
        errors.append(np.linalg.norm(np.asarray(mean) - kalman_mean))
    assert errors[-1] < 0.02
    assert errors[-1] < errors[0] / 5


def test_systematic_resampling_copies_each_particle_floor_or_ceil_of_n_w_times():
    """Kitagawa (1996): particle i appears floor(N w_i) or ceil(N w_i) times."""
    rng = np.random.default_rng(13)
    n = 50
    for trial in range(20):
        weights = rng.dirichlet(np.ones(n) * 0.3)
        counts = np.bincount(np.asarray(systematic_resample(jax.random.PRNGKey(trial), jnp.asarray(weights))), minlength=n)
        assert counts.sum() == n
        assert np.all(counts >= np.floor(n * weights) - 1e-9) and np.all(counts <= np.ceil(n * weights) + 1e-9)


def test_systematic_resampling_equals_the_binary_search_on_the_weight_cdf():
    """The scatter-and-cumsum form gives the indices numpy.searchsorted gives for the points
    (k + u) / N on the cumulative weights (Kitagawa 1996, the definition)."""
    rng = np.random.default_rng(17)
    for trial, n in enumerate((7, 100, 1000)):
        weights = rng.dirichlet(np.ones(n) * 0.2)
        key = jax.random.PRNGKey(100 + trial)
        u = float(jax.random.uniform(key))
        cdf = np.cumsum(weights)
        cdf[-1] = 1.0
        expected = np.minimum(np.searchsorted(cdf, (np.arange(n) + u) / n, side="right"), n - 1)
        np.testing.assert_array_equal(np.asarray(systematic_resample(key, jnp.asarray(weights))), expected)


def test_systematic_resampling_of_equal_weights_keeps_every_particle_once():
    for trial in range(10):
        chosen = np.asarray(systematic_resample(jax.random.PRNGKey(trial), jnp.full(64, 1 / 64)))
        np.testing.assert_array_equal(chosen, np.arange(64))


def test_effective_sample_size_bounds():
    """1 / sum(w^2) is N for equal weights and 1 for a single particle (common practice)."""
    assert float(effective_sample_size(jnp.full(10, -np.log(10)))) == pytest.approx(10)
    assert float(effective_sample_size(jnp.log(jnp.array([1.0, 1e-300, 1e-300])))) == pytest.approx(1.0)


def test_sir_resamples_below_the_threshold_and_jitters_the_copies():
    operator = every_kth(3, 1)
    filt = make_sir(operator, 200)
    particles = jnp.asarray(np.random.default_rng(0).normal(size=(200, 3)) * 3)
    state = filt.init(None, particles, None)
    settings = {"observation": {"error_std": jnp.asarray(0.3)}, "filter": {"jitter": 0.05, "ess_threshold": 0.5}}
    posterior, info = filt.analyse(jax.random.PRNGKey(2), state, jnp.zeros(3), settings)
    assert bool(info["resampled"]) and float(info["ess"]) < 100
    np.testing.assert_allclose(np.exp(np.asarray(posterior.log_weights)), 1 / 200)
    assert len(np.unique(np.asarray(posterior.members)[:, 0])) == 200  # jittered copies differ


def test_rtpp_and_rtps_at_their_end_points():
    """RTPP (Zhang, Snyder & Sun 2004) with alpha = 1 restores the prior anomalies; RTPS
    (Whitaker & Hamill 2012, eq. 3) with alpha = 1 restores the prior spread of every variable;
    alpha = 0 changes nothing; both keep the posterior mean."""
    rng = np.random.default_rng(14)
    prior = jnp.asarray(rng.normal(size=(10, 5)) * 2)
    posterior = jnp.asarray(rng.normal(size=(10, 5)) * 0.5 + 1.0)
    mean = np.asarray(posterior.mean(0))
    full = np.asarray(relax_to_prior_perturbations(prior, posterior, 1.0))
    np.testing.assert_allclose(full - full.mean(0), np.asarray(prior - prior.mean(0)), atol=1e-13)
    np.testing.assert_allclose(full.mean(0), mean, atol=1e-13)
    spread = np.asarray(relax_to_prior_spread(prior, posterior, 1.0))
    np.testing.assert_allclose(spread.std(0, ddof=1), np.asarray(prior).std(0, ddof=1), rtol=1e-12)
    np.testing.assert_allclose(spread.mean(0), mean, atol=1e-13)
    for relax in (relax_to_prior_perturbations, relax_to_prior_spread):
        np.testing.assert_allclose(np.asarray(relax(prior, posterior, 0.0)), np.asarray(posterior), atol=1e-13)


def test_additive_noise_keeps_the_mean_and_adds_its_variance():
    """Centred N(0, q^2) perturbations: mean unchanged exactly; with 4,000 members the added
    variance is q^2 within 4 sample standard errors (fixed key)."""
    members = jnp.zeros((4000, 3))
    noisy = np.asarray(add_centred_noise(jax.random.PRNGKey(5), members, 0.3))
    np.testing.assert_allclose(noisy.mean(0), 0.0, atol=1e-14)
    np.testing.assert_allclose(noisy.var(0, ddof=1), 0.09, rtol=4 * np.sqrt(2 / 4000))


def test_enkf_ensemble_space_and_observation_space_forms_agree():
    """The push-through identity X^T Y (Y^T Y + (N-1) R)^-1 = X^T A^-1 Y R^-1 (exact)."""
    rng = np.random.default_rng(15)
    members = jnp.asarray(rng.normal(size=(6, 5)))
    H = rng.normal(size=(8, 5))
    perturbed = jnp.asarray(rng.normal(size=(6, 8)))
    error_var = jnp.asarray(rng.uniform(0.5, 1.5, size=8))
    small_n = enkf_analysis(members, members @ H.T, perturbed, error_var)  # N = 6 <= p = 8: ensemble space
    wide = jnp.concatenate([members, members + 0.1 * jnp.asarray(rng.normal(size=(6, 5)))])
    obs = wide @ H.T
    pert = jnp.concatenate([perturbed, perturbed])
    ens_space = enkf_analysis(wide, obs, pert, error_var)  # N = 12 > p = 8: observation space
    # Reference: the textbook gain with the ensemble covariance.
    for ens, o, pt, got in ((members, members @ H.T, perturbed, small_n), (wide, obs, pert, ens_space)):
        X = np.asarray(ens - ens.mean(0))
        Y = np.asarray(o - o.mean(0))
        gain = X.T @ Y @ np.linalg.inv(Y.T @ Y + (len(X) - 1) * np.diag(np.asarray(error_var)))
        expected = np.asarray(ens) + (np.asarray(pt) - np.asarray(o)) @ gain.T
        np.testing.assert_allclose(np.asarray(got), expected, rtol=0, atol=1e-11)
