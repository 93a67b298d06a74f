"""The iterative ensemble Kalman smoother against the ETKF and the Kalman filter on linear problems, its
window bookkeeping, its diagnostics, and its gain over the ETKF where error growth is strongly nonlinear."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest

import assimbench
from assimbench.config.checks import ConfigError
from assimbench.config.composition import compose_config
from assimbench.config.plan import resolve
from assimbench.filters.base import EnsembleState
from assimbench.filters.kalman.etkf import make_etkf
from assimbench.filters.kalman.ienks import make_ienks
from assimbench.filters.smoother import with_fixed_lag
from assimbench.integrators import make_model_flow
from assimbench.models.base import Model
from assimbench.observations.operators import every_kth

SIZE, MEMBERS, ERROR_STD = 6, 8, 0.7


def _linear_model(seed=0):
    """dx/dt = A x with A a random matrix of moderate growth; RK4 keeps the flow linear."""
    rng = np.random.default_rng(seed)
    matrix = jnp.asarray(0.4 * rng.standard_normal((SIZE, SIZE)) - 0.2 * np.eye(SIZE))
    return Model(name="linear", size=SIZE, dt=0.05, tendency=lambda x, params: x @ matrix.T, params={},
                 spinup_time=0.0, first_guess=lambda key, params: jnp.zeros(SIZE), ring=False)


def _settings(inflation=1.0, tolerance=1e-6, bundle_scale=1e-4):
    return {"filter": {"inflation": inflation, "additive_std": 0.0, "rtpp": 0.0, "rtps": 0.0,
                       "tolerance": tolerance, "bundle_scale": bundle_scale},
            "observation": {"error_std": ERROR_STD}, "forecast_model": {}}


def _cycle_both(smoother, etkf, flow, settings, cycles, seed=1):
    """Cycle the smoother and the ETKF from one initial ensemble on one set of observations; return
    per cycle (smoother members, ETKF members, smoother info)."""
    rng = np.random.default_rng(seed)
    ensemble = jnp.asarray(rng.standard_normal((MEMBERS, SIZE)))
    operator = every_kth(SIZE, 2)
    key = jax.random.PRNGKey(0)
    state_s = smoother.init(key, ensemble, settings)
    state_e = etkf.init(key, ensemble, settings)
    out = []
    for _ in range(cycles):
        y = jnp.asarray(rng.standard_normal(operator.size))
        state_s = state_s._replace(members=flow(state_s.members, {}))
        state_e = EnsembleState(members=flow(state_e.members, {}))
        state_s, info = smoother.analyse(key, state_s, y, settings)
        state_e, _ = etkf.analyse(key, state_e, y, settings)
        out.append((np.asarray(state_s.members), np.asarray(state_e.members), info))
    return out


@pytest.mark.parametrize("window, variant, inflation", [(1, "transform", 1.0), (1, "transform", 1.15),
                                                        (1, "bundle", 1.0), (3, "transform", 1.15),
                                                        (4, "bundle", 1.0)])
def test_on_a_linear_problem_every_analysis_is_the_etkfs(window, variant, inflation):
    """Linear model and operator: the Gauss-Newton search lands on the minimum in its first step, and
    the analysis at the current time is the ETKF's, member for member (Sakov, Oliver & Bertino
    2012, Mon. Wea. Rev. 140, sec. 3: the IEnKF reduces to the EnKF for a linear system; Bocquet &
    Sakov 2014, QJRMS 140, the IEnKS with single data assimilation likewise; citations from memory).
    With a longer window the prior sits window - 1 intervals further back and is inflated there,
    which for a linear model is the same as inflating the forecast."""
    model = _linear_model()
    operator = every_kth(SIZE, 2)
    flow = make_model_flow(model, 1, ensemble=True)
    smoother = make_ienks(model, operator, MEMBERS, window, 1, 10, variant, 1)
    etkf = make_etkf(operator, MEMBERS)
    settings = _settings(inflation)
    # The bundle's finite differences are exact for a linear model up to round-off / epsilon.
    tolerance = 1e-9 if variant == "bundle" else 1e-11
    for k, (ours, theirs, info) in enumerate(_cycle_both(smoother, etkf, flow, settings, 12)):
        np.testing.assert_allclose(ours, theirs, rtol=0, atol=tolerance, err_msg=f"cycle {k + 1}")
        # The first step solves the problem; the second finds nothing left to do.
        assert int(info["iterations"]) == 2


def test_a_shift_of_two_assimilates_two_observations_at_once_as_the_etkf_does_in_turn():
    """Window 3, shift 2: every second cycle one analysis assimilates two observations. For a linear
    model the posterior mean and covariance equal those of two sequential ETKF analyses (the
    Kalman filter's batch and sequential forms agree: a textbook identity), though the members may
    differ by a rotation; in between, the smoother only forecasts."""
    model = _linear_model(3)
    operator = every_kth(SIZE, 2)
    flow = make_model_flow(model, 1, ensemble=True)
    smoother = make_ienks(model, operator, MEMBERS, 3, 2, 10, "transform", 1)
    etkf = make_etkf(operator, MEMBERS)
    for k, (ours, theirs, info) in enumerate(_cycle_both(smoother, etkf, flow, _settings(), 10), start=1):
        if k % 2:
            assert int(info["iterations"]) == 0 and float(info["model_integrations"]) == MEMBERS
            continue
        np.testing.assert_allclose(ours.mean(0), theirs.mean(0), rtol=0, atol=1e-10, err_msg=f"cycle {k}")
        np.testing.assert_allclose(np.cov(ours.T), np.cov(theirs.T), rtol=0, atol=1e-10, err_msg=f"cycle {k}")
        assert float(info["model_integrations"]) == (int(info["iterations"]) + 1) * 3 * MEMBERS + MEMBERS


def test_its_smoothed_ensembles_are_the_ensemble_smoothers_on_a_linear_problem():
    """Window 3, lag 3: the analysed window trajectory is the smoothed estimate of the window's times;
    on a linear problem its members equal the fixed-lag ETKF smoother's, lag by lag (both are the
    ensemble Kalman smoother: Evensen & van Leeuwen 2000; Bocquet & Sakov 2014, from memory). Without
    inflation: the IEnKS inflates its window's start, earlier states included, where the fixed-lag
    smoother inflates only the current forecast."""
    model = _linear_model(5)
    operator = every_kth(SIZE, 2)
    flow = make_model_flow(model, 1, ensemble=True)
    smoother = make_ienks(model, operator, MEMBERS, 3, 1, 10, "transform", 1, lag=3)
    reference = with_fixed_lag(make_etkf(operator, MEMBERS), 3)
    rng = np.random.default_rng(2)
    key = jax.random.PRNGKey(0)
    settings = _settings(1.0)
    ensemble = jnp.asarray(rng.standard_normal((MEMBERS, SIZE)))
    ours, theirs = smoother.init(key, ensemble, settings), reference.init(key, ensemble, settings)
    for k in range(1, 9):
        y = jnp.asarray(rng.standard_normal(operator.size))
        ours, _ = smoother.analyse(key, ours._replace(members=flow(ours.members, {})), y, settings)
        theirs, _ = reference.analyse(key, theirs._replace(members=flow(theirs.members, {})), y, settings)
        for lag in range(1, min(k, 3) + 1):
            np.testing.assert_allclose(np.asarray(ours.lagged[lag - 1]), np.asarray(theirs.lagged[lag - 1]),
                                       rtol=0, atol=1e-10, err_msg=f"cycle {k}, lag {lag}")


def test_iterations_stop_at_the_cap():
    model = _linear_model()
    operator = every_kth(SIZE, 2)
    flow = make_model_flow(model, 1, ensemble=True)
    smoother = make_ienks(model, operator, MEMBERS, 2, 1, 1, "transform", 1)
    for _, _, info in _cycle_both(smoother, make_etkf(operator, MEMBERS), flow, _settings(), 3):
        assert int(info["iterations"]) == 1


def test_the_run_reports_iterations_and_cost_and_compiles_once_for_every_tolerance():
    overrides = ["model=lorenz63", "filter=ienks", "filter.members=3", "observation.interval=0.25",
                 "cycles=60", "burn_in=10", "lanes.filter.tolerance=[1e-2,1e-4]", "output=null"]
    result = assimbench.run(overrides)
    iterations = result.series["iterations"]  # (lane, replicate, cycle)
    assert iterations.shape == (2, 1, 60) and np.all(iterations >= 1) and np.all(iterations <= 10)
    # A tighter tolerance never takes fewer steps on the same data.
    assert np.all(iterations[1] >= iterations[0])
    np.testing.assert_array_equal(result.series["model_integrations"], (iterations + 1) * 1 * 3 + 3)


@pytest.mark.parametrize("override, message", [
    ("filter.shift=3", "filter.shift=3 is not allowed: an integer from 1 to the window (2)"),
    ("filter.variant=newton", "filter.variant='newton' is not allowed: transform or bundle"),
    ("filter.tolerance=0", "filter.tolerance=0.0 is not allowed: a finite number > 0"),
    ("filter.max_iterations=0", "filter.max_iterations=0 is not allowed: an integer >= 1"),
    ("smoother.lag=3", "smoother.lag=3 is not allowed: at most 2 with filter ienks (its window)"),
])
def test_bad_window_settings_are_one_line(override, message):
    with pytest.raises(ConfigError) as caught:
        resolve(compose_config(["filter=ienks", "filter.window=2", override]))
    assert str(caught.value) == message
