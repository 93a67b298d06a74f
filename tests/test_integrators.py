"""RK4 and its relatives: order of convergence and agreement with SciPy."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy.integrate import solve_ivp

from assimbench.integrators import EULER, HEUN, RK4, make_flow
from assimbench.models.lorenz63 import lorenz63_tendency
from assimbench.models.lorenz96 import lorenz96_tendency

L63 = {"sigma": 10.0, "rho": 28.0, "beta": 8.0 / 3.0}
X0 = np.array([1.5, -2.0, 22.0])


def _integrate(tableau, dt, total=1.0, x0=X0):
    flow = jax.jit(make_flow(lorenz63_tendency, dt, round(total / dt), tableau))
    return np.asarray(flow(jnp.asarray(x0), L63))


def _reference(total=1.0, x0=X0):
    # SciPy's DOP853 at tight tolerances is the outside reference (scipy.integrate.solve_ivp).
    sol = solve_ivp(
        lambda t, x: np.asarray(lorenz63_tendency(jnp.asarray(x), L63)),
        (0.0, total),
        x0,
        method="DOP853",
        rtol=1e-13,
        atol=1e-13,
    )
    return sol.y[:, -1]


@pytest.mark.parametrize("tableau", [EULER, HEUN, RK4], ids=["euler", "heun", "rk4"])
def test_fitted_order_matches_the_tableau(tableau):
    """log(error) against log(dt) has slope = the scheme's order (Hairer, Norsett & Wanner, Solving ODEs I, II.3)."""
    reference = _reference()
    # Steps small enough to be in the asymptotic range, large enough to stay above round-off.
    steps = {1: [1e-4, 5e-5, 2.5e-5], 2: [1e-3, 5e-4, 2.5e-4], 4: [2.5e-3, 1.25e-3, 6.25e-4]}[tableau.order]
    errors = [np.linalg.norm(_integrate(tableau, dt) - reference) for dt in steps]
    slope = np.polyfit(np.log(steps), np.log(errors), 1)[0]
    assert abs(slope - tableau.order) < 0.15, (slope, errors)


def test_rk4_agrees_with_scipy_dop853_over_one_time_unit():
    """RK4 with dt = 1e-3 on Lorenz-63 over one time unit matches solve_ivp (DOP853, rtol 1e-13)."""
    assert np.allclose(_integrate(RK4, 1e-3), _reference(), rtol=0, atol=1e-8)


def test_flow_of_an_ensemble_is_the_flow_of_each_member():
    """vmap over members and a loop over members give the same numbers."""
    rng = np.random.default_rng(3)
    members = jnp.asarray(rng.normal(size=(5, 12)) + 2.0)
    flow = make_flow(lorenz96_tendency, 0.01, 5)
    params = {"forcing": jnp.asarray(8.0)}
    batched = jax.jit(jax.vmap(flow, in_axes=(0, None)))(members, params)
    looped = np.stack([np.asarray(jax.jit(flow)(m, params)) for m in members])
    np.testing.assert_allclose(np.asarray(batched), looped, rtol=0, atol=1e-13)


def test_flow_refuses_zero_steps():
    with pytest.raises(ValueError):
        make_flow(lorenz63_tendency, 0.01, 0)
