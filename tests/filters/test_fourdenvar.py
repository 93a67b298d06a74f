"""4DEnVar and hybrid 4D-Var: the window analysis against strong-constraint 4D-Var and the textbook
solution on a linear model, the two cycled side by side, the window of one interval against the
3DEnVar, the hybrid factor against the hybrid covariance, and the one-line checks."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest
import scipy.linalg
from linear_problem import jitted, linear_model, side_by_side
from refusals import assert_refused

import assimbench
from assimbench.filters.variational.envar import hybrid_covariance, make_3denvar
from assimbench.filters.variational.fourdenvar import ensemble_trajectories, gauss_newton_4denvar, make_4denvar
from assimbench.filters.variational.fourdvar import make_hybrid_4dvar, minimise_window
from assimbench.filters.variational.hybrid import circulant_taper_root, hybrid_factor
from assimbench.integrators import make_model_flow
from assimbench.localization import gaspari_cohn, ring_distance
from assimbench.observations.operators import every_kth

SIZE, MEMBERS, WINDOW, ERROR_STD = 6, 10, 3, 0.7


def _settings(ensemble_weight=1.0, static_scale=0.3, radius=0.0, inflation=1.0):
    return {"filter": {"inflation": inflation, "additive_std": 0.0, "rtpp": 0.0, "rtps": 0.0,
                       "ensemble_weight": ensemble_weight, "static_scale": static_scale, "radius": radius},
            "observation": {"error_std": ERROR_STD}, "forecast_model": {}}


def _window_problem(seed=0):
    """A linear model, an ensemble of MEMBERS > SIZE members (it spans the state), a window of observations."""
    model = linear_model(SIZE, seed)
    rng = np.random.default_rng(seed + 1)
    ensemble = jnp.asarray(2.0 * rng.standard_normal((MEMBERS, SIZE)))
    operator = every_kth(SIZE, 2)
    obs = jnp.asarray(rng.standard_normal((WINDOW, operator.size)))
    return model, operator, ensemble, obs


@pytest.mark.parametrize("filled", [WINDOW, 2])
def test_the_window_analysis_is_strong_constraint_4dvar_with_the_ensemble_covariance(filled):
    """Linear model, an ensemble that spans the state, no localization, ensemble weight 1: the
    ensemble trajectories give U_j = M_j U_0, so 4DEnVar minimises the 4D-Var cost with B = P_e and
    its analysed trajectory is the 4D-Var's (the bench's Gauss-Newton-CG with the adjoint, CG run to
    the control's size), and both are the textbook minimiser x_0 = x_b + B G^T (G B G^T + R)^-1
    (y - G x_b), G the stacked H M_j (the best linear unbiased estimate; Talagrand 1997, J. Meteor.
    Soc. Japan 75, from memory). A window still filling (``filled`` < W) masks the later times."""
    model, operator, ensemble, obs = _window_problem()
    flow = make_model_flow(model, 1, ensemble=True)
    start = ensemble.mean(axis=0)
    anomalies = ensemble - start
    mask = (jnp.arange(WINDOW) < filled).astype(jnp.float64)
    error_var = ERROR_STD**2
    backgrounds, trajectory_anomalies = ensemble_trajectories(flow, start, anomalies, {}, WINDOW)
    factors = jax.vmap(lambda a: hybrid_factor(a, jnp.eye(SIZE), 1.0, 0.3, None))(trajectory_anomalies)
    v = gauss_newton_4denvar(backgrounds, factors, obs, mask, error_var, operator, 1)
    ours = np.asarray(backgrounds + factors @ v)

    b_cov = np.asarray(anomalies.T @ anomalies) / (MEMBERS - 1)
    factor = jnp.asarray(np.linalg.cholesky(b_cov))
    advance = make_model_flow(model, 1)
    w = minimise_window(start, factor, obs, mask, ERROR_STD, advance, operator, {}, 2, 2 * SIZE)
    x0 = start + factor @ w
    fourdvar = np.asarray(jax.lax.scan(lambda x, _: (advance(x, {}),) * 2, x0, None, length=WINDOW)[1])
    np.testing.assert_allclose(ours, fourdvar, rtol=0, atol=1e-9)

    propagators = [np.asarray(jax.jacfwd(lambda x, j=j: jax.lax.fori_loop(0, j, lambda _, s: advance(s, {}), x))(start))
                   for j in range(1, WINDOW + 1)]
    h = np.eye(SIZE)[operator.indices]
    g = np.concatenate([h @ m for m in propagators[:filled]])
    y = np.asarray(obs[:filled]).ravel()
    gain = b_cov @ g.T @ np.linalg.inv(g @ b_cov @ g.T + error_var * np.eye(len(y)))
    textbook_x0 = np.asarray(start) + gain @ (y - g @ np.asarray(start))
    np.testing.assert_allclose(ours, np.stack([m @ textbook_x0 for m in propagators]), rtol=0, atol=1e-9)


def test_cycled_4denvar_and_hybrid_4dvar_are_the_same_filter_on_a_linear_model():
    """Ensemble weight 1, no localization, a spanning ensemble, a linear model: every cycle's window
    analysis is the same minimiser (test above) and the members get the same perturbation update, so
    the two filters agree cycle by cycle (here 25 cycles, with inflation on the start anomalies)."""
    model = linear_model(SIZE, 3)
    operator = every_kth(SIZE, 2)
    common = (model, operator, np.eye(SIZE), MEMBERS, WINDOW, None)
    fourdenvar = jitted(make_4denvar(*common, 1, 1))
    hybrid = jitted(make_hybrid_4dvar(*common, 2, MEMBERS + SIZE, 1))
    flow = make_model_flow(model, 1, ensemble=True)
    for k, ours, _, theirs, _ in side_by_side(fourdenvar, hybrid, flow, _settings(inflation=1.1), 25, MEMBERS, SIZE):
        np.testing.assert_allclose(np.asarray(ours.members), np.asarray(theirs.members), rtol=0, atol=1e-8,
                                   err_msg=f"cycle {k}")


def test_a_window_of_one_interval_is_the_3denvar():
    """W = 1 on a linear model: the start anomalies integrated over one interval are the forecast
    anomalies (and inflating before or after is the same), the background is the forecast mean, and
    on a ring of 12 points radius 2 is inside the range where the Gaspari-Cohn taper is positive
    semi-definite, so the modulated ensemble gives the 3DEnVar's P_e o C: the same analysis every
    cycle, localized, with both parts of B."""
    size, members = 12, 6
    model = linear_model(size, 4, ring=True)
    operator = every_kth(size, 2)
    climate = np.eye(size) + 0.5 * np.eye(size, k=1) + 0.5 * np.eye(size, k=-1)
    fourdenvar = jitted(make_4denvar(model, operator, climate, members, 1, 2.0, 1, 1))
    threedenvar = jitted(make_3denvar(model, operator, climate, members, 2.0, 1))
    flow = make_model_flow(model, 1, ensemble=True)
    settings = _settings(ensemble_weight=0.6, radius=2.0, inflation=1.05)
    for k, ours, _, theirs, _ in side_by_side(fourdenvar, threedenvar, flow, settings, 20, members, size):
        np.testing.assert_allclose(np.asarray(ours.members), np.asarray(theirs.members), rtol=0, atol=1e-9,
                                   err_msg=f"cycle {k}")


def _taper(size, radius):
    grid = np.arange(size, dtype=np.float64)
    return np.asarray(gaspari_cohn(ring_distance(grid[:, None], grid[None, :], size) / radius))


def test_the_circulant_root_of_the_taper_is_its_matrix_square_root():
    """Radius 4 on 40 points: C is positive definite, and the root from the Fourier spectrum equals
    scipy.linalg.sqrtm(C) (the principal square root). Radius 15: the support wraps round the ring
    and C has negative eigenvalues; the root squares to the nearest positive semi-definite matrix
    (Higham 1988, Linear Algebra Appl. 103: clip the eigenvalues, from memory), from numpy's eigh."""
    taper = _taper(40, 4.0)
    np.testing.assert_allclose(np.asarray(circulant_taper_root(40, 4.0)), scipy.linalg.sqrtm(taper).real,
                               rtol=0, atol=1e-12)
    wide = _taper(40, 15.0)
    values, vectors = np.linalg.eigh(wide)
    assert values.min() < -0.01  # the case this part covers
    nearest = (vectors * np.maximum(values, 0.0)) @ vectors.T
    root = np.asarray(circulant_taper_root(40, 15.0))
    np.testing.assert_allclose(root @ root, nearest, rtol=0, atol=1e-12)


@pytest.mark.parametrize("radius", [None, 3.0])
def test_the_hybrid_factor_is_a_square_root_of_the_hybrid_covariance(radius):
    """U U^T = (1 - beta) s B_c + beta (P_e o C), with and without localization: the 4D filters'
    B is the 3DEnVar's."""
    rng = np.random.default_rng(5)
    members = jnp.asarray(rng.standard_normal((7, 20)))
    climate = np.cov(rng.standard_normal((20, 60)))
    taper = 1.0 if radius is None else _taper(20, radius)
    root = None if radius is None else circulant_taper_root(20, radius)
    factor = hybrid_factor(members - members.mean(axis=0), jnp.asarray(np.linalg.cholesky(climate)), 0.7, 0.2, root)
    np.testing.assert_allclose(np.asarray(factor @ factor.T),
                               np.asarray(hybrid_covariance(members, climate, 0.7, 0.2, taper)), rtol=0, atol=1e-12)


def test_on_the_demo_ring_4denvar_and_hybrid_4dvar_cycle_their_ensembles_in_lanes():
    """Both run through the main command with lanes of the hybrid weight, stay well below the
    observation error on every replicate and keep a spread."""
    common = ["observation=every_other_station", "cycles=300", "burn_in=100", "replicates=2", "filter.members=8",
              "filter.radius=4", "filter.inflation=1.05", "lanes.filter.ensemble_weight=[0.3,0.8]",
              "filter.static_scale=0.02", "filter.window=2", "output=null"]
    for overrides in (["filter=4denvar"], ["filter=4dvar"]):
        result = assimbench.run(common + overrides)
        rmse = np.asarray(result.per_replicate["rmse_analysis"])
        assert rmse.shape == (2, 2) and np.all(rmse < 0.8), (overrides, rmse)
        assert np.all(np.asarray(result.per_replicate["spread_analysis"]) > 0.05), overrides


@pytest.mark.parametrize("overrides, words", [
    (["filter=4dvar", "filter.ensemble_weight=0.5"], ["filter.ensemble_weight", "filter.members >= 2"]),
    (["filter=4dvar", "filter.radius=4"], ["filter.radius", "needs an ensemble", "filter.members >= 2"]),
    (["filter=4denvar", "filter.window=0"], ["filter.window", ">= 1"]),
    (["filter=4denvar", "filter.ensemble_weight=1.5"], ["filter.ensemble_weight", "from 0 to 1"]),
    (["model=lorenz63", "filter=4denvar"], ["filter.radius", "null"]),
])
def test_bad_hybrid_settings_are_one_line(overrides, words):
    assert_refused(overrides + ["output=null"], words)
