"""The iterative ensemble Kalman smoother against the ETKF and the Kalman filter on linear problems, its
window bookkeeping, its diagnostics, and its gain over the ETKF where error growth is strongly nonlinear."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from linear_problem import jitted, linear_model, side_by_side

import assimbench
from assimbench.config.checks import ConfigError
from assimbench.config.composition import compose_config
from assimbench.config.plan import resolve
from assimbench.filters.kalman.enkfn import make_enkfn
from assimbench.filters.kalman.etkf import make_etkf
from assimbench.filters.kalman.ienks import make_ienks
from assimbench.filters.smoother import with_fixed_lag
from assimbench.integrators import make_model_flow
from assimbench.observations.operators import every_kth

SIZE, MEMBERS, ERROR_STD = 6, 8, 0.7


def _linear_model(seed=0):
    return linear_model(SIZE, seed)


_jitted = jitted


def _ienks(*args, **kwargs):
    return _jitted(make_ienks(*args, **kwargs))


def _etkf(operator, smoother_lag=0):
    etkf = make_etkf(operator, MEMBERS)
    return _jitted(with_fixed_lag(etkf, smoother_lag) if smoother_lag else etkf)


def _settings(inflation=1.0, tolerance=1e-6, bundle_scale=1e-4):
    return {"filter": {"inflation": inflation, "additive_std": 0.0, "rtpp": 0.0, "rtps": 0.0,
                       "tolerance": tolerance, "bundle_scale": bundle_scale},
            "observation": {"error_std": ERROR_STD}, "forecast_model": {}}


def _side_by_side(first, second, flow, settings, cycles, seed=1):
    return side_by_side(first, second, flow, settings, cycles, MEMBERS, SIZE, seed)


def _cycle_both(smoother, etkf, flow, settings, cycles, seed=1):
    """Cycle the smoother and the ETKF from one initial ensemble on one set of observations; return
    per cycle (smoother members, ETKF members, smoother info)."""
    return [(np.asarray(ours.members), np.asarray(theirs.members), info)
            for _, ours, info, theirs, _ in _side_by_side(smoother, etkf, flow, settings, cycles, seed)]


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
    flow = jax.jit(make_model_flow(model, 1, ensemble=True))
    smoother = _ienks(model, operator, MEMBERS, window, 1, 10, variant, 1)
    etkf = _etkf(operator)
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
    flow = jax.jit(make_model_flow(model, 1, ensemble=True))
    smoother = _ienks(model, operator, MEMBERS, 3, 2, 10, "transform", 1)
    etkf = _etkf(operator)
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
    flow = jax.jit(make_model_flow(model, 1, ensemble=True))
    smoother = _ienks(model, operator, MEMBERS, 3, 1, 10, "transform", 1, lag=3)
    reference = _etkf(operator, 3)
    for k, ours, _, theirs, _ in _side_by_side(smoother, reference, flow, _settings(1.0), 8, seed=2):
        for lag in range(1, min(k, 3) + 1):
            np.testing.assert_allclose(np.asarray(ours.lagged[lag - 1]), np.asarray(theirs.lagged[lag - 1]),
                                       rtol=0, atol=1e-10, err_msg=f"cycle {k}, lag {lag}")


def _assert_same_gaussian(ours, theirs, atol, where):
    np.testing.assert_allclose(ours.mean(0), theirs.mean(0), rtol=0, atol=atol, err_msg=where)
    np.testing.assert_allclose(np.cov(ours.T), np.cov(theirs.T), rtol=0, atol=atol, err_msg=where)


@pytest.mark.parametrize("window, shift", [(3, 1), (4, 2)])
def test_multiple_data_assimilation_with_its_balancing_search_is_the_kalman_filter_on_a_linear_problem(window,
                                                                                                        shift):
    """Multiple data assimilation splits every observation's weight over the window / shift analyses
    that see it (R scaled by window / shift), and the balancing search completes the weights. On a
    linear-Gaussian problem the tempered likelihoods multiply to the full one, so the current
    ensemble has the Kalman filter's mean and covariance, which the ETKF reproduces with more
    members than variables (Bocquet & Sakov 2014, QJRMS 140, sec. 3, from memory; the ETKF's
    exactness: Bishop, Etherton & Majumdar 2001, Mon. Wea. Rev. 129, common practice). The window's
    start differs from single data assimilation's: it carries the observations only in part."""
    model = _linear_model(7)
    operator = every_kth(SIZE, 2)
    flow = jax.jit(make_model_flow(model, 1, ensemble=True))
    split = _ienks(model, operator, MEMBERS, window, shift, 10, "transform", 1, assimilation="multiple")
    once = _ienks(model, operator, MEMBERS, window, shift, 10, "transform", 1)
    etkf = _etkf(operator)
    rng = np.random.default_rng(4)
    key = jax.random.PRNGKey(0)
    settings = _settings()
    ensemble = jnp.asarray(rng.standard_normal((MEMBERS, SIZE)))
    states = [f.init(key, ensemble, settings) for f in (split, once, etkf)]
    starts_differ = False
    for k in range(1, 13):
        y = jnp.asarray(rng.standard_normal(operator.size))
        states = [state._replace(members=flow(state.members, {})) for state in states]
        (split_state, info), (once_state, _), (etkf_state, _) = [
            f.analyse(key, state, y, settings) for f, state in zip((split, once, etkf), states)]
        states = [split_state, once_state, etkf_state]
        if k % shift:
            continue
        _assert_same_gaussian(np.asarray(split_state.members), np.asarray(etkf_state.members), 1e-9, f"cycle {k}")
        # Two searches, each solved in its first step: 2 + 2 steps and four window integrations.
        assert int(info["iterations"]) == 4
        assert float(info["model_integrations"]) == (4 + 2) * window * MEMBERS + MEMBERS
        starts_differ |= not np.allclose(np.asarray(split_state.start), np.asarray(once_state.start), atol=1e-6)
    assert starts_differ


def test_its_smoothed_ensembles_with_multiple_data_assimilation_are_the_smoothers_on_a_linear_problem():
    """Window 3, shift 1, lag 3: the balancing search's trajectory is the smoothed estimate; on a
    linear-Gaussian problem its mean and covariance at every lag are the fixed-lag ETKF smoother's
    (the Rauch-Tung-Striebel smoother's, tests/filters/test_smoother.py)."""
    model = _linear_model(8)
    operator = every_kth(SIZE, 2)
    flow = jax.jit(make_model_flow(model, 1, ensemble=True))
    smoother = _ienks(model, operator, MEMBERS, 3, 1, 10, "transform", 1, lag=3, assimilation="multiple")
    reference = _etkf(operator, 3)
    for k, ours, _, theirs, _ in _side_by_side(smoother, reference, flow, _settings(), 8, seed=6):
        for lag in range(1, min(k, 3) + 1):
            _assert_same_gaussian(np.asarray(ours.lagged[lag - 1]), np.asarray(theirs.lagged[lag - 1]), 1e-9,
                                  f"cycle {k}, lag {lag}")


@pytest.mark.parametrize("variant", ["transform", "bundle"])
def test_the_finite_size_prior_over_one_interval_converges_to_the_enkfn_on_a_linear_problem(variant):
    """prior=finite_size, window 1, linear: the Gauss-Newton steps converge to the minimum of the
    EnKF-N's cost (its prior is not quadratic, so this takes a few steps), and the analysis is the
    EnKF-N's member for member, its implied inflation too (Bocquet & Sakov 2012, Nonlin. Processes
    Geophys. 19, the IEnKF-N reduces to the EnKF-N for a linear system; from memory)."""
    model = _linear_model(9)
    operator = every_kth(SIZE, 2)
    flow = jax.jit(make_model_flow(model, 1, ensemble=True))
    smoother = _ienks(model, operator, MEMBERS, 1, 1, 50, variant, 1, prior="finite_size")
    enkfn = _jitted(make_enkfn(operator, MEMBERS))
    steps = []
    for k, ours, info, theirs, their_info in _side_by_side(smoother, enkfn, flow, _settings(tolerance=1e-12), 10,
                                                           seed=10):
        np.testing.assert_allclose(np.asarray(ours.members), np.asarray(theirs.members), rtol=0, atol=1e-8,
                                   err_msg=f"cycle {k}")
        np.testing.assert_allclose(float(info["inflation"]), float(their_info["inflation"]), rtol=1e-9)
        steps.append(int(info["iterations"]))
    assert max(steps) < 50 and min(steps) > 2, steps  # converged, and not in one step


def test_iterations_stop_at_the_cap():
    model = _linear_model()
    operator = every_kth(SIZE, 2)
    flow = jax.jit(make_model_flow(model, 1, ensemble=True))
    smoother = _ienks(model, operator, MEMBERS, 2, 1, 1, "transform", 1)
    for _, _, info in _cycle_both(smoother, _etkf(operator), flow, _settings(), 3):
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
    # The summary's distribution: the share of cycles after burn-in at each step count, 1 to the cap.
    after = iterations[:, :, 10:]
    shares = np.array([result.summary[f"iterations_share{k}"] for k in range(1, 11)])  # (steps, lane)
    np.testing.assert_allclose(shares, [(after == k).mean(axis=(1, 2)) for k in range(1, 11)], rtol=0, atol=1e-12)
    np.testing.assert_allclose(shares.sum(axis=0), 1.0, rtol=0, atol=1e-12)
    assert "iterations_share0" not in result.summary  # shift 1: every cycle analyses


@pytest.mark.parametrize("override, message", [
    ("filter.shift=3", "filter.shift=3 is not allowed: an integer from 1 to the window (2)"),
    ("filter.variant=newton", "filter.variant='newton' is not allowed: transform or bundle"),
    ("filter.tolerance=0", "filter.tolerance=0.0 is not allowed: a finite number > 0"),
    ("filter.max_iterations=0", "filter.max_iterations=0 is not allowed: an integer >= 1"),
    ("smoother.lag=3", "smoother.lag=3 is not allowed: at most 2 with filter ienks (its window)"),
    ("filter.assimilation=twice", "filter.assimilation='twice' is not allowed: single or multiple"),
    ("filter.prior=flat", "filter.prior='flat' is not allowed: gaussian or finite_size"),
    ("filter.prior_extra_count=2", "filter.prior_extra_count=2 is not allowed: 0 (count N, Bocquet 2011) or 1 (N + 1, "
                                   "Bocquet et al. 2015)"),
])
def test_bad_window_settings_are_one_line(override, message):
    with pytest.raises(ConfigError) as caught:
        resolve(compose_config(["filter=ienks", "filter.window=2", override]))
    assert str(caught.value) == message


def test_multiple_data_assimilation_needs_a_shift_that_divides_the_window():
    with pytest.raises(ConfigError) as caught:
        resolve(compose_config(["filter=ienks", "filter.window=3", "filter.shift=2", "filter.assimilation=multiple"]))
    assert str(caught.value) == ("filter.assimilation='multiple' is not allowed: single, or multiple with a shift "
                                 "that divides the window (here window 3, shift 2)")
