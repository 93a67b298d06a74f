"""The fixed-lag ensemble smoother: against the Rauch-Tung-Striebel smoother on a linear problem, the
same transform for lagged states in every filter that carries it, its gain on the demo ring, and its
config checks."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest

import assimbench
from assimbench.config.catalogue import catalogue
from assimbench.config.checks import ConfigError
from assimbench.config.composition import compose_config
from assimbench.config.plan import resolve
from assimbench.filters.kalman.etkf import make_etkf
from assimbench.filters.smoother import with_fixed_lag
from assimbench.integrators import make_model_flow
from assimbench.models.base import Model
from assimbench.observations.operators import every_kth

SIZE, MEMBERS, LAG, ERROR_STD = 4, 10, 3, 0.8


def _rts_on_prefix(mean0, cov0, transition, h, r, observations):
    """Kalman filter (Kalman 1960) forward, then the Rauch, Tung & Striebel (1965, AIAA J. 3, 1445)
    backward recursion over the prefix y_1 .. y_k, written here from the textbook (e.g. Sarkka 2013,
    Bayesian Filtering and Smoothing, Theorem 8.2; no model error):

        G_t = P_a(t) M^T P_f(t+1)^-1,  x_s(t) = x_a(t) + G_t (x_s(t+1) - x_f(t+1)),
        P_s(t) = P_a(t) + G_t (P_s(t+1) - P_f(t+1)) G_t^T.

    Returns means (k + 1, n) and covariances (k + 1, n, n) of x_0 .. x_k given y_1 .. y_k."""
    means_a, covs_a, means_f, covs_f = [mean0], [cov0], [None], [None]
    for y in observations:
        mf, pf = transition @ means_a[-1], transition @ covs_a[-1] @ transition.T
        gain = pf @ h.T @ np.linalg.inv(h @ pf @ h.T + r)
        means_f.append(mf)
        covs_f.append(pf)
        means_a.append(mf + gain @ (y - h @ mf))
        covs_a.append((np.eye(len(mf)) - gain @ h) @ pf)
    means_s, covs_s = [means_a[-1]], [covs_a[-1]]
    for t in range(len(observations) - 1, -1, -1):
        g = covs_a[t] @ transition.T @ np.linalg.inv(covs_f[t + 1])
        means_s.insert(0, means_a[t] + g @ (means_s[0] - means_f[t + 1]))
        covs_s.insert(0, covs_a[t] + g @ (covs_s[0] - covs_f[t + 1]) @ g.T)
    return np.array(means_s), np.array(covs_s)


def test_on_a_linear_problem_the_smoothed_ensembles_are_the_rts_smoother_of_every_prefix():
    """Linear model and observations, no model error, N > n: a square-root filter reproduces the
    Kalman filter started from its ensemble's sample mean and covariance, and the ensemble smoother
    (Evensen & van Leeuwen 2000, Mon. Wea. Rev. 128) then reproduces the RTS smoother: at cycle k
    the lag-l ensemble's mean and covariance are those of x_(k-l) given y_1 .. y_k (exact identities)."""
    rng = np.random.default_rng(4)
    matrix = 0.5 * rng.standard_normal((SIZE, SIZE)) - 0.3 * np.eye(SIZE)
    model = Model(name="linear", size=SIZE, dt=0.1, tendency=lambda x, params: x @ jnp.asarray(matrix).T,
                  params={}, spinup_time=0.0, first_guess=lambda key, params: jnp.zeros(SIZE), ring=False)
    flow = make_model_flow(model, 1, ensemble=True)
    transition = np.asarray(flow(jnp.eye(SIZE), {})).T  # the flow is linear: its columns are M e_j
    operator = every_kth(SIZE, 2)
    h = np.eye(SIZE)[operator.indices]
    smoother = with_fixed_lag(make_etkf(operator, MEMBERS), LAG)
    settings = {"filter": {"inflation": 1.0}, "observation": {"error_std": ERROR_STD}}
    ensemble = rng.standard_normal((MEMBERS, SIZE)) @ rng.standard_normal((SIZE, SIZE))
    state = smoother.init(jax.random.PRNGKey(0), jnp.asarray(ensemble), settings)
    observations = []
    for k in range(1, 9):
        observations.append(rng.standard_normal(operator.size))
        state = state._replace(members=flow(state.members, {}))
        state, _ = smoother.analyse(jax.random.PRNGKey(k), state, jnp.asarray(observations[-1]), settings)
        means, covs = _rts_on_prefix(ensemble.mean(0), np.cov(ensemble.T), transition, h,
                                     ERROR_STD**2 * np.eye(operator.size), observations)
        np.testing.assert_allclose(np.asarray(state.members).mean(0), means[k], atol=1e-9)
        for lag in range(1, min(LAG, k) + 1):
            smoothed = np.asarray(state.lagged[lag - 1])
            np.testing.assert_allclose(smoothed.mean(0), means[k - lag], atol=1e-9, err_msg=f"cycle {k}, lag {lag}")
            np.testing.assert_allclose(np.cov(smoothed.T), covs[k - lag], atol=1e-9, err_msg=f"cycle {k}, lag {lag}")


SMOOTHABLE = sorted(name for name, spec in catalogue().filters.items()
                    if spec.smoothable(compose_config([f"filter={name}"], validate=False).filter))
# The filters that carry the generic smoother (the IEnKS smooths over its own window: tests/filters/test_ienks.py).
CARRYING = [name for name in SMOOTHABLE if name != "ienks"]


def test_the_catalogue_offers_the_smoother_beside_every_ensemble_kalman_filter():
    assert {"etkf", "letkf", "enkf", "enkfn", "denkf", "ensrf", "ienks"} <= set(SMOOTHABLE)
    assert not {"3dvar", "4dvar", "sir", "free", "climatology"} & set(SMOOTHABLE)


# Adaptive inflation held at 1 (its bounds) so that the members are not inflated either.
ADAPTIVE_AT_ONE = ["filter.adaptive=true", "filter.adaptive_max=1.0"]


@pytest.mark.parametrize("name, extra", [(name, []) for name in CARRYING]
                         + [("etkf", ADAPTIVE_AT_ONE), ("letkf", ADAPTIVE_AT_ONE)])
def test_a_lagged_copy_of_the_prior_takes_the_priors_analysis(name, extra):
    """The lagged columns take the members' own weights (local ones at each grid point): a lagged
    state equal to the prior is analysed exactly as the prior is (no inflation, which acts on the
    current forecast only)."""
    plan = resolve(compose_config(["model.size=12", f"filter={name}", "filter.members=8", "filter.inflation=1.0",
                                   *extra, "smoother.lag=2", "cycles=5", "burn_in=0", "output=null"]))
    filt = plan.setup.filter
    rng = np.random.default_rng(0)
    prior = jnp.asarray(8.0 + rng.standard_normal((8, 12)))
    state = filt.init(jax.random.PRNGKey(0), prior, plan.settings)
    state = state._replace(inner=state.inner._replace(members=prior), lagged=jnp.stack([prior, prior]))
    y = jnp.asarray(rng.standard_normal(plan.setup.operator.size) + 8.0)
    analysed, _ = filt.analyse(jax.random.PRNGKey(1), state, y, plan.settings)
    for lag in range(2):
        np.testing.assert_allclose(np.asarray(analysed.lagged[lag]), np.asarray(analysed.members), atol=1e-12)
    assert not np.allclose(np.asarray(analysed.members), np.asarray(prior))  # the analysis did something


@pytest.mark.parametrize("name, extra", [("etkf", ["filter.adaptive=true"]),
                                         ("letkf", ["filter.members=10", "filter.radius=4"])])
def test_on_the_demo_ring_the_smoothed_error_falls_with_lag_below_the_filters(name, extra):
    """Lorenz-96 n = 40 observed every 0.05: each later observation improves the earlier estimate, so
    the smoothed RMSE decreases with lag and sits below the analysis RMSE (Evensen & van Leeuwen 2000,
    the expected behaviour of a smoother; common practice), in every inflation lane."""
    result = assimbench.run([f"filter={name}", *extra, "smoother.lag=4", "cycles=700", "burn_in=200",
                             "lanes.filter.inflation=[1.03,1.06]", "diagnostics=[]", "output=null"])
    for lane in range(2):
        errors = [result.summary["rmse_analysis"][lane]] + [result.summary[f"rmse_smoothed_lag{lag}"][lane]
                                                            for lag in range(1, 5)]
        assert all(later < earlier for earlier, later in zip(errors, errors[1:])), errors
    assert result.series["rmse_smoothed"].shape == (2, 1, 700, 4)


@pytest.mark.parametrize("overrides, message", [
    (["smoother.lag=-1"], "smoother.lag=-1 is not allowed: an integer >= 0 (cycles; 0 = off)"),
    (["filter=3dvar", "smoother.lag=2"], "smoother.lag=2 is not allowed: 0 with filter 3dvar as configured; a "
                                         "fixed-lag smoother goes beside"),
    (["filter=ienks", "filter.window=2", "filter.shift=2", "smoother.lag=1"],
     "smoother.lag=1 is not allowed: 0 with filter ienks as configured;"),
])
def test_a_smoother_where_none_can_go_is_one_line(overrides, message):
    with pytest.raises(ConfigError) as caught:
        resolve(compose_config(overrides))
    assert str(caught.value).startswith(message) and "\n" not in str(caught.value)
