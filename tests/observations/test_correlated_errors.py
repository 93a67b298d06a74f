"""Correlated observation errors (observation.correlation_length, observation.correlation_shape) and
the filter's own view of R (assumed.*): the truth's draws, every filter's use of the full R, and the
one-line refusals."""

import h5py
import jax
import jax.numpy as jnp
import numpy as np
import pytest
from refusals import assert_refused

import assimbench
from assimbench.config.checks import ConfigError
from assimbench.config.composition import compose_config
from assimbench.config.plan import resolve
from assimbench.filters.kalman.letkf import letkf_analysis, local_error_blocks, local_windows
from assimbench.localization import gaspari_cohn

BASE = ["model.size=8", "observation.stride=2", "observation.error_std=0.5", "output=null"]
FACTORS = [1.0, 2.0, 0.5, 1.5]
H = np.eye(8)[::2]


def textbook_r(positions, size, std, length, shape, factors=None):
    """R_ij = s_i s_j rho(d_ij / L), d the ring distance, rho exp(-d) or exp(-d^2/2) (common practice)."""
    positions = np.asarray(positions, dtype=float)
    d = np.abs(positions[:, None] - positions[None, :]) % size
    d = np.minimum(d, size - d)
    rho = np.exp(-d / length) if shape == "exponential" else np.exp(-0.5 * (d / length) ** 2)
    s = std * (np.ones(len(positions)) if factors is None else np.asarray(factors))
    return s[:, None] * rho * s[None, :]


R_EXP = textbook_r([0, 2, 4, 6], 8, 0.5, 1.5, "exponential", FACTORS)
CORRELATED = ["observation.correlation_length=1.5", "observation.error_factors=[1,2,0.5,1.5]"]


def _one_analysis(overrides, members=30, seed=3):
    """(plan, ensemble (members, 8), y (4,), analysed state) of one analysis of a Gaussian ensemble."""
    plan = resolve(compose_config(BASE + overrides))
    rng = np.random.default_rng(seed)
    ensemble = rng.normal(size=(members, 8)) @ np.linalg.cholesky(np.eye(8) + 0.5).T + 2.0
    y = rng.normal(size=plan.setup.operator.size)
    filt, key = plan.setup.filter, jax.random.PRNGKey(0)
    state = filt.init(key, jnp.asarray(ensemble), plan.settings)
    analysed, _ = filt.analyse(key, state, jnp.asarray(y), plan.settings)
    return plan, ensemble, y, analysed


def _blue(background, b_cov, y, r):
    """x_b + B H^T (H B H^T + R)^-1 (y - H x_b) (textbook identity)."""
    return background + b_cov @ H.T @ np.linalg.solve(H @ b_cov @ H.T + r, y - H @ background)


def test_the_network_builds_r_from_the_textbook_formula():
    plan = resolve(compose_config(BASE + CORRELATED))
    operator = plan.setup.operator
    np.testing.assert_allclose(np.asarray(operator.error_covariance(plan.settings)), R_EXP, rtol=1e-14, atol=0)
    gaussian = resolve(compose_config(BASE + ["observation.correlation_length=1.0",
                                              "observation.correlation_shape=gaussian"]))
    np.testing.assert_allclose(np.asarray(gaussian.setup.operator.error_covariance(gaussian.settings)),
                               textbook_r([0, 2, 4, 6], 8, 0.5, 1.0, "gaussian"), rtol=1e-14, atol=0)


def test_the_truths_observation_errors_have_the_covariance_r(tmp_path):
    """Stored observations minus the truth at the stations, 3,000 cycles: the sample covariance is R
    (exponential, L = 2, every other station of a 12-ring: neighbours correlate exp(-1) = 0.37). Each
    entry's standard error is about 0.02 here, so a band of 0.08."""
    path = tmp_path / "run.h5"
    assimbench.run(["model.size=12", "observation.stride=2", "observation.error_std=0.8", "cycles=3000",
                    "burn_in=0", "store.truth=true", "store.observations=true", "diagnostics=[]",
                    "observation.correlation_length=2"], output=str(path))
    with h5py.File(path) as f:
        errors = f["observations"][0] - f["truth"][0][:, ::2]
    expected = textbook_r(np.arange(0, 12, 2), 12, 0.8, 2.0, "exponential")
    np.testing.assert_allclose(np.cov(errors, rowvar=False) / 0.64, expected / 0.64, rtol=0, atol=0.08)


def test_the_3dvar_with_a_correlated_r_is_the_best_linear_unbiased_estimate():
    """Lorenc (1986, Q. J. R. Meteorol. Soc. 112): x_a = x_b + B H^T (H B H^T + R)^-1 (y - H x_b), full R."""
    from assimbench.models.climatology import climatology

    plan, ensemble, y, analysed = _one_analysis(CORRELATED + ["filter=3dvar", "filter.b_scale=0.2"])
    b_cov = 0.2 * np.asarray(climatology(plan.setup.model)[1])
    np.testing.assert_allclose(np.asarray(analysed.members)[0], _blue(ensemble.mean(axis=0), b_cov, y, R_EXP),
                               rtol=0, atol=1e-10)


@pytest.mark.parametrize("name", ["denkf", "3denvar"])
def test_the_mean_updates_with_a_correlated_r_are_the_kalman_mean(name):
    """The DEnKF's mean (Sakov & Oke 2008, Tellus 60A, eq. 5; from memory) and the 3DEnVar's at
    ensemble weight 1 without localization are the Kalman mean with the full R."""
    extra = ["filter.ensemble_weight=1.0", "filter.radius=null"] if name == "3denvar" else []
    _, ensemble, y, analysed = _one_analysis(CORRELATED + [f"filter={name}", "filter.members=30",
                                                           "filter.inflation=1.0"] + extra)
    expected = _blue(ensemble.mean(axis=0), np.cov(ensemble, rowvar=False), y, R_EXP)
    np.testing.assert_allclose(np.asarray(analysed.members).mean(axis=0), expected, rtol=0, atol=1e-9)


def test_the_particle_filter_weighs_by_the_gaussian_likelihood_with_the_full_r():
    """With no resampling the log weights are the normalised log-likelihoods of y under N(H x_k, R),
    against scipy.stats.multivariate_normal with the full R."""
    from scipy import stats
    from scipy.special import logsumexp

    _, ensemble, y, analysed = _one_analysis(CORRELATED + ["filter=sir", "filter.members=50",
                                                           "filter.ess_threshold=1e-9"], members=50)
    loglik = np.array([stats.multivariate_normal(H @ x, R_EXP).logpdf(y) for x in ensemble])
    np.testing.assert_allclose(np.asarray(analysed.log_weights), loglik - logsumexp(loglik), rtol=0, atol=1e-10)


def test_the_perturbed_observation_enkf_draws_perturbations_correlated_as_r():
    """20,000 members and no inflation: the EnKF's analysis covariance of the observed variables is the
    Kalman filter's with the full R (Burgers, van Leeuwen & Evensen 1998, Mon. Wea. Rev. 126: the
    perturbations must have covariance R) within sampling error (about 2% here; band 6%), and clearly
    not the one with R's diagonal only (which is more than 20% off on some entry)."""
    _, ensemble, y, analysed = _one_analysis(CORRELATED + ["filter=enkf", "filter.members=20000",
                                                           "filter.inflation=1.0"], members=20000)
    prior = np.cov(ensemble, rowvar=False)

    def kalman_cov(r):
        gain = prior @ H.T @ np.linalg.inv(H @ prior @ H.T + r)
        return H @ (np.eye(8) - gain @ H) @ prior @ H.T

    got = H @ np.cov(np.asarray(analysed.members), rowvar=False) @ H.T
    scale = np.sqrt(np.outer(np.diag(got), np.diag(got)))
    np.testing.assert_allclose(got / scale, kalman_cov(R_EXP) / scale, rtol=0, atol=0.06)
    assert np.max(np.abs(kalman_cov(np.diag(np.diag(R_EXP))) - kalman_cov(R_EXP)) / scale) > 0.2


def test_the_local_analysis_of_a_correlated_r_tapers_its_blocks_symmetrically():
    """LETKF with a correlated R on a 12-ring, every station, radius 2: at every grid point
    A_g = (N - 1) I + Y_g D^1/2 R_g^-1 D^1/2 Y_g^T and wbar_g = A_g^-1 Y_g D^1/2 R_g^-1 D^1/2 d_g,
    written here with numpy per grid point; with a diagonal R it is Hunt et al.'s (2007, Physica D 230,
    sec. 2.3) division of the variances by the weights."""
    rng = np.random.default_rng(5)
    members, size = 10, 12
    ensemble = rng.normal(size=(members, size))
    y = rng.normal(size=size)
    positions = np.arange(size, dtype=float)
    r = textbook_r(positions, size, 0.7, 1.5, "exponential")
    index, distance, mask = local_windows(size, positions, 2.0)
    weight = np.where(mask, np.asarray(gaspari_cohn(jnp.asarray(distance / 2.0))), 0.0)
    got = np.asarray(letkf_analysis(jnp.asarray(ensemble), jnp.asarray(ensemble), jnp.asarray(y), 1.0, index,
                                    jnp.asarray(weight), "eigh", local_error_blocks(jnp.asarray(r), index, mask)))
    mean, anomalies = ensemble.mean(axis=0), ensemble - ensemble.mean(axis=0)
    for g in range(size):
        seen = index[g][mask[g]]
        root_d = np.diag(np.sqrt(weight[g][mask[g]]))
        precision_r = root_d @ np.linalg.inv(r[np.ix_(seen, seen)]) @ root_d
        local_y = anomalies[:, seen]
        a = (members - 1) * np.eye(members) + local_y @ precision_r @ local_y.T
        wbar = np.linalg.solve(a, local_y @ precision_r @ (y[seen] - mean[seen]))
        evals, evecs = np.linalg.eigh(a)
        transform = np.sqrt(members - 1) * evecs @ np.diag(evals**-0.5) @ evecs.T
        expected = mean[g] + anomalies[:, g] @ wbar + transform @ anomalies[:, g]
        np.testing.assert_allclose(got[:, g], expected, rtol=0, atol=1e-10, err_msg=f"grid point {g}")
    diagonal = np.diag(np.diag(r))
    through_blocks = letkf_analysis(jnp.asarray(ensemble), jnp.asarray(ensemble), jnp.asarray(y), 1.0, index,
                                    jnp.asarray(weight), "eigh",
                                    local_error_blocks(jnp.asarray(diagonal), index, mask))
    as_variances = letkf_analysis(jnp.asarray(ensemble), jnp.asarray(ensemble), jnp.asarray(y), 0.49, index,
                                  jnp.asarray(weight), "eigh")
    np.testing.assert_allclose(np.asarray(through_blocks), np.asarray(as_variances), rtol=0, atol=1e-12)


@pytest.mark.parametrize("name", ["etkf", "letkf", "3dvar", "enkf", "4dvar", "ienks"])
def test_a_filter_assuming_other_errors_analyses_as_if_they_were_the_truths(name):
    """assumed.* is the filter's R alone: a filter assuming independent errors of std 0.7 on a network
    whose true errors are correlated with std 0.5 analyses a y as a filter on a network whose true
    errors are independent with std 0.7."""
    chosen = [f"filter={name}"] + ([] if name.endswith("var") else ["filter.members=30"])
    assumed, _, _, analysed = _one_analysis(CORRELATED + chosen + ["assumed.correlation_length=0",
                                                                   "assumed.error_std=0.7"])
    plain, _, _, reference = _one_analysis(["observation.error_std=0.7", "observation.error_factors=[1,2,0.5,1.5]"]
                                           + chosen)
    assert assumed.setup.filter_operator is not None and not assumed.setup.filter_operator.correlated
    np.testing.assert_allclose(np.asarray(analysed.members), np.asarray(reference.members), rtol=0, atol=1e-12)


def test_a_filter_assuming_the_correlated_errors_of_a_truth_with_independent_ones_uses_them():
    """The reverse: independent true errors, a filter assuming correlated ones analyses as the filter of a
    network whose true errors are correlated."""
    _, _, _, analysed = _one_analysis(["observation.error_factors=[1,2,0.5,1.5]", "filter=etkf",
                                       "assumed.correlation_length=1.5"])
    _, _, _, reference = _one_analysis(CORRELATED + ["filter=etkf"])
    np.testing.assert_allclose(np.asarray(analysed.members), np.asarray(reference.members), rtol=0, atol=1e-12)


def test_a_lane_of_correlation_length_zero_is_the_run_with_independent_errors():
    """lanes.observation.correlation_length=[0,2]: lane 0 (a correlated program at L = 0) follows the
    independent run to round-off over 40 cycles."""
    common = ["model.size=12", "observation.stride=2", "cycles=40", "burn_in=5", "output=null", "filter=etkf"]
    laned = assimbench.run(common + ["lanes.observation.correlation_length=[0,2]"])
    plain = assimbench.run(common)
    lanes, plain = laned.series["rmse_analysis"], plain.series["rmse_analysis"]  # (lane, replicate, cycle)
    np.testing.assert_allclose(lanes[0, 0], plain[0], rtol=1e-8)
    assert np.max(np.abs(lanes[1, 0] - plain[0])) > 1e-3


@pytest.mark.parametrize("overrides, words", [
    (["observation.correlation_length=-1"], ["observation.correlation_length=-1", ">= 0"]),
    (["observation.correlation_length=1", "observation.correlation_shape=linear"],
     ["observation.correlation_shape", "exponential, gaussian"]),
    (["model.size=40", "observation.stride=1", "observation.correlation_length=6",
      "observation.correlation_shape=gaussian"], ["observation.correlation_length=6", "positive definite"]),
    (["model=lorenz63", "observation.correlation_length=1"],
     ["observation.correlation_length", "no distance between variables"]),
    (["assumed.error_std=0"], ["assumed.error_std=0", "> 0"]),
    (["assumed.correlation_length=-0.5"], ["assumed.correlation_length=-0.5", ">= 0"]),
    (["assumed.error_factors=[1,2]"], ["assumed.error_factors", "one factor per station"]),
    (["assumed.noise=1"], ["assumed.noise", "not a key"]),
])
def test_bad_correlated_networks_are_one_line(overrides, words):
    assert_refused(overrides if "model=lorenz63" in overrides else BASE + overrides, words)


def test_lanes_sweep_the_filters_assumed_errors_as_single_runs_do():
    """lanes.assumed.error_std x lanes.assumed.correlation_length: each lane follows the single run with
    those assumed values to round-off (a batched program sums in another order), on one truth whose
    errors are correlated; a bad lane value is one line."""
    common = ["model.size=12", "observation.stride=2", "observation.correlation_length=2", "cycles=40", "burn_in=5",
              "output=null", "filter=etkf"]
    laned = assimbench.run(common + ["lanes.assumed.error_std=[0.7,1.4]", "lanes.assumed.correlation_length=[0,2]"])
    rmse = laned.series["rmse_analysis"]  # (lane, replicate, cycle), the last list fastest
    for lane, (std, length) in enumerate([(0.7, 0), (0.7, 2), (1.4, 0), (1.4, 2)]):
        single = assimbench.run(common + [f"assumed.error_std={std}", f"assumed.correlation_length={length}"])
        np.testing.assert_allclose(rmse[lane, 0], single.series["rmse_analysis"][0], rtol=1e-8, err_msg=str(lane))
    with pytest.raises(ConfigError) as caught:
        resolve(compose_config(common + ["lanes.assumed.error_std=[1,0]"]))
    assert "lanes.assumed.error_std=0" in str(caught.value) and "\n" not in str(caught.value)
