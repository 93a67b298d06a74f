"""4D-Var with the adjoint by reverse mode, the finite-size EnKF and adaptive inflation: exact
identities, reference libraries (scipy, NumPy) and the published comparisons on Lorenz-96."""

import os

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy import optimize

import assimbench
from assimbench.filters.kalman.adaptive import update_inflation
from assimbench.filters.kalman.enkfn import enkfn_analysis
from assimbench.filters.variational.fourdvar import conjugate_gradients, minimise_window, window_cost
from assimbench.integrators import RK4, make_model_flow, rk_step
from assimbench.models.lorenz96 import make_lorenz96
from assimbench.observations.operators import every_kth

LONG = os.environ.get("ASSIMBENCH_LONG") == "1"


# 4D-Var -------------------------------------------------------------------------------

def _lorenz96_window(window=4, n=40, seed=0):
    model = make_lorenz96(n)
    advance = make_model_flow(model, 5)
    params = {"forcing": jnp.asarray(8.0)}
    rng = np.random.default_rng(seed)
    background = 8.0 + 2.0 * rng.standard_normal(n)
    factor = 0.5 * np.eye(n) + 0.1 * np.tril(rng.standard_normal((n, n)), -1)  # any Cholesky-like L
    obs = 8.0 + 2.0 * rng.standard_normal((window, n // 2))
    mask = np.array([1.0] * (window - 1) + [0.0])
    operator = every_kth(n, 2)
    args = (jnp.asarray(background), jnp.asarray(factor), jnp.asarray(obs), jnp.asarray(mask), 1.0, advance,
            operator, params)
    return args, rng


def test_the_4dvar_gradient_by_reverse_mode_equals_finite_differences():
    """The adjoint (jax.grad, reverse mode through every RK4 step of the window) against central
    differences: J(v + h e) - J(v - h e) = 2 h grad J . e + O(h^3) (textbook; relative error ~1e-6 in
    float64 at h = 1e-5 for a cost of order 1e3)."""
    args, rng = _lorenz96_window()
    v = jnp.asarray(0.3 * rng.standard_normal(40))
    gradient = np.asarray(jax.grad(window_cost)(v, *args))
    cost = jax.jit(lambda u: window_cost(u, *args))
    h = 1e-5
    for _ in range(4):
        direction = rng.standard_normal(40)
        direction /= np.linalg.norm(direction)
        finite = (float(cost(v + h * direction)) - float(cost(v - h * direction))) / (2 * h)
        assert finite == pytest.approx(gradient @ direction, rel=1e-6)


def test_conjugate_gradients_solve_a_symmetric_positive_definite_system_in_n_steps():
    """Hestenes & Stiefel (1952): in exact arithmetic CG solves an n x n SPD system in n steps;
    against numpy.linalg.solve."""
    rng = np.random.default_rng(3)
    a = rng.standard_normal((12, 12))
    matrix = a @ a.T + 12 * np.eye(12)
    rhs = rng.standard_normal(12)
    x = conjugate_gradients(lambda u: jnp.asarray(matrix) @ u, jnp.asarray(rhs), 24)
    np.testing.assert_allclose(x, np.linalg.solve(matrix, rhs), rtol=1e-10)


def test_linear_4dvar_ends_its_window_at_the_kalman_filter_mean():
    """Exact equivalence for linear Gaussian problems (e.g. Lorenc 1986; Fisher et al. 2005, QJRMS 131):
    strong-constraint 4D-Var's trajectory at the end of the window equals the Kalman filter's
    analysis mean after the same observations, from the same prior N(x_b, B)."""
    n, window, interval_steps, dt = 4, 3, 5, 0.05
    rng = np.random.default_rng(7)
    generator = 0.3 * rng.standard_normal((n, n)) - 0.2 * np.eye(n)
    tendency = lambda x, params: x @ jnp.asarray(generator).T
    advance = lambda x, params: jax.lax.fori_loop(0, interval_steps, lambda _, s: rk_step(RK4, tendency, s, params, dt), x)
    propagator = np.asarray(jax.vmap(lambda e: advance(e, {}))(jnp.eye(n))).T  # M (n, n): x -> M x
    operator = every_kth(n, 2)
    h_matrix = np.eye(n)[operator.indices]
    error_std = 0.5
    b_cov = np.diag([1.0, 2.0, 0.5, 1.5]) + 0.2
    background = rng.standard_normal(n)
    obs = rng.standard_normal((window, operator.size))

    mean, cov = background.copy(), b_cov.copy()
    for j in range(window):  # Kalman filter, no model error
        mean, cov = propagator @ mean, propagator @ cov @ propagator.T
        gain = cov @ h_matrix.T @ np.linalg.inv(h_matrix @ cov @ h_matrix.T + error_std**2 * np.eye(operator.size))
        mean = mean + gain @ (obs[j] - h_matrix @ mean)
        cov = (np.eye(n) - gain @ h_matrix) @ cov

    factor = np.linalg.cholesky(b_cov)
    v = minimise_window(jnp.asarray(background), jnp.asarray(factor), jnp.asarray(obs), jnp.ones(window), error_std,
                        advance, operator, {}, iterations=1, inner_iterations=2 * n)
    x0 = background + factor @ np.asarray(v)
    end = np.linalg.matrix_power(propagator, window) @ x0
    np.testing.assert_allclose(end, mean, rtol=1e-9, atol=1e-10)


def test_4dvar_with_a_window_of_several_intervals_beats_3dvar():
    """Common practice (e.g. Kalnay et al. 2007, Tellus 59A): on the demo ring with the same static B
    (0.05 times the climatological one), a 5-interval 4D-Var analyses better than 3D-Var (measured
    0.39 vs 0.50 over 1,500 cycles). Margin: at least 10% lower RMSE."""
    common = ["cycles=500", "burn_in=100"]
    var3 = assimbench.run(common + ["filter=3dvar", "filter.b_scale=0.05"])
    var4 = assimbench.run(common + ["filter=4dvar", "filter.window=5", "filter.static_scale=0.05"])
    assert not var4.diverged
    assert var4.summary["rmse_analysis"] < 0.9 * var3.summary["rmse_analysis"]


# Finite-size EnKF ---------------------------------------------------------------------

def test_the_enkfn_dual_minimum_is_the_primal_minimum():
    """Bocquet (2011) / Bocquet et al. (2015): minimising the scalar dual gives the minimiser of the
    primal cost J(w) = c/2 ln(eps_N + |w|^2) + |R^-1/2 (y - ybar - Y^T w)|^2 / 2; against
    scipy.optimize.minimize (BFGS) on the primal, and the mean of the analysed ensemble is
    xbar + X^T w_a."""
    rng = np.random.default_rng(11)
    members, n = 10, 6
    ensemble = rng.standard_normal((members, n))
    y = 0.8 * rng.standard_normal(n) + 0.5
    error_var = 0.5
    analysed, zeta = enkfn_analysis(jnp.asarray(ensemble), jnp.asarray(ensemble), jnp.asarray(y), error_var)
    mean, anomalies = ensemble.mean(0), ensemble - ensemble.mean(0)
    count, eps = members + 1, 1 + 1 / members

    def primal(w):
        residual = y - mean - anomalies.T @ w
        return 0.5 * count * np.log(eps + w @ w) + 0.5 * residual @ residual / error_var

    w = optimize.minimize(primal, np.zeros(members), method="BFGS", options={"gtol": 1e-12}).x
    np.testing.assert_allclose(np.asarray(analysed).mean(0), mean + anomalies.T @ w, atol=1e-6)
    assert float(zeta) == pytest.approx(count / (eps + w @ w), rel=1e-5)


def _tuned_etkf_and(others, replicates, cycles):
    common = [f"replicates={replicates}", f"cycles={cycles}", "burn_in=300"]
    etkf = assimbench.run(common + ["lanes.filter.inflation=[1.0,1.01,1.02,1.03,1.04,1.06]"])
    best = float(np.min(etkf.summary["rmse_analysis"]))
    return best, [assimbench.run(common + extra) for extra in others]


def test_enkfn_and_adaptive_inflation_approach_the_tuned_etkf_without_tuning():
    """Lorenz-96 n=40, F=8, all observed every 0.05 with R = I, 20 members: the finite-size EnKF
    with no tuning is within 5% of the best-tuned ETKF (Bocquet 2011 reports it matching the tuned
    filter; from memory) and the adaptive inflation (Miyoshi 2011) within 10%. Short form: 2
    replicates x 1,500 cycles (ASSIMBENCH_LONG=1: 4 x 5,000). Measured over 4 x 3,000: best ETKF
    0.186 (inflation 1.02), EnKF-N 0.192 (implied inflation 1.011), adaptive 0.188 (mean 1.015)."""
    replicates, cycles = (4, 5000) if LONG else (2, 1500)
    best, (enkfn, adaptive) = _tuned_etkf_and(
        [["filter=enkfn"], ["filter.adaptive=true", "filter.inflation=1.0"]], replicates, cycles)
    assert enkfn.summary["rmse_analysis"] < 1.05 * best
    assert adaptive.summary["rmse_analysis"] < 1.10 * best
    assert 1.0 <= adaptive.summary["inflation"] <= 2.0
    assert np.all((adaptive.series["inflation"] >= 1.0) & (adaptive.series["inflation"] <= 2.0))


# Adaptive inflation -------------------------------------------------------------------

def test_the_inflation_estimate_is_unbiased_for_a_known_covariance_factor():
    """Innovation identity E[d d^T] = rho H P H^T + R (common practice; Desroziers et al. 2005,
    QJRMS 131, eq. 1): with a large forecast ensemble drawn from N(0, P), truth from N(0, rho P) and
    y = truth + N(0, R), the observation estimate rho_o = (d.d - tr R) / tr(HPH^T) averages to rho.
    Through update_inflation with an uninformative prior (v_b large) it returns rho_o."""
    rng = np.random.default_rng(5)
    p, members, rho, error_var = 40, 4000, 1.3, 0.5
    scales = np.linspace(0.5, 2.0, p)
    estimates = []
    for _ in range(200):
        ensemble = scales * rng.standard_normal((members, p))
        truth = np.sqrt(rho) * scales * rng.standard_normal(p)
        y = truth + np.sqrt(error_var) * rng.standard_normal(p)
        estimates.append(float(update_inflation(1.0, jnp.asarray(ensemble), jnp.asarray(y), error_var, 1e12)))
    assert np.mean(estimates) == pytest.approx(rho, rel=0.05)


def test_the_inflation_update_is_the_product_of_two_gaussians():
    """rho_a = (v_o rho_b + v_b rho_o) / (v_o + v_b) (Miyoshi 2011, eq. 6-8): no information in the
    prior (v_b huge) gives rho_o, a certain prior (v_b = 0) keeps rho_b."""
    rng = np.random.default_rng(2)
    obs_members = jnp.asarray(rng.standard_normal((20, 10)))
    y = jnp.asarray(rng.standard_normal(10) * 2)
    certain = update_inflation(1.7, obs_members, y, 1.0, 0.0)
    assert float(certain) == pytest.approx(1.7, rel=1e-12)
    vague = update_inflation(1.7, obs_members, y, 1.0, 1e14)
    d = np.asarray(y - obs_members.mean(0))
    rho_o = (d @ d - 10.0) / np.sum(np.var(np.asarray(obs_members), axis=0, ddof=1))
    assert float(vague) == pytest.approx(rho_o, rel=1e-9)


def test_local_adaptive_inflation_without_localization_is_the_global_one():
    """With every weight 1 the local estimate at each grid point is the global estimate, and the
    LETKF without localization is the ETKF (Hunt et al. 2007): the adaptive LETKF with
    radius=null equals the adaptive ETKF to rounding, inflation series included."""
    common = ["cycles=60", "burn_in=10", "model.size=12", "filter.members=8", "filter.adaptive=true",
              "filter.inflation=1.0", "filter.adaptive_std=0.3"]
    local = assimbench.run(common + ["filter=letkf", "filter.radius=null"])
    global_ = assimbench.run(common + ["filter=etkf"])
    np.testing.assert_allclose(local.series["inflation"], global_.series["inflation"], rtol=1e-9)
    np.testing.assert_allclose(local.series["rmse_analysis"], global_.series["rmse_analysis"], rtol=1e-8)
    assert np.ptp(global_.series["inflation"]) > 0.01  # it did adapt


def test_the_inflation_series_is_stored_for_the_filters_that_estimate_it(tmp_path):
    import h5py

    path = tmp_path / "adaptive.h5"
    result = assimbench.run(["cycles=60", "burn_in=10", "filter=letkf", "filter.adaptive=true",
                             "filter.adaptive_max=1.3", "filter.inflation=1.0"], output=str(path))
    with h5py.File(path) as f:
        series = f["inflation"][0]
        assert series.shape == (60,) and "inflation" in f["inflation"].attrs["long_name"]
    assert np.all((series >= 1.0) & (series <= 1.3))
    assert result.summary["inflation"] == pytest.approx(series[10:].mean())
    plain = assimbench.run(["cycles=20", "burn_in=5"])
    assert "inflation" not in plain.series
