"""Model tendencies against their definitions and exact identities."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest

from assimbench.integrators import make_flow
from assimbench.models.lorenz63 import lorenz63_tendency, make_lorenz63
from assimbench.models.lorenz96 import lorenz96_tendency, make_lorenz96


@pytest.mark.parametrize("size", [4, 5, 40, 101])
def test_lorenz96_matches_its_defining_equation(size):
    """dx_i/dt = (x_{i+1} - x_{i-2}) x_{i-1} - x_i + F, indices mod n (Lorenz & Emanuel 1998, eq. 1)."""
    rng = np.random.default_rng(size)
    x = rng.normal(size=size) * 3
    forcing = 8.0
    expected = [
        (x[(i + 1) % size] - x[(i - 2) % size]) * x[(i - 1) % size] - x[i] + forcing for i in range(size)
    ]
    got = lorenz96_tendency(jnp.asarray(x), {"forcing": forcing})
    np.testing.assert_allclose(np.asarray(got), expected, rtol=1e-14, atol=1e-12)


@pytest.mark.parametrize("size", [4, 7, 40])
def test_lorenz96_jacobian_trace_is_minus_size(size):
    """Divergence identity: d f_i / d x_i = -1 for every i, so trace(J) = -n exactly."""
    rng = np.random.default_rng(10 + size)
    for _ in range(3):
        x = jnp.asarray(rng.normal(size=size) * 4)
        jac = jax.jacfwd(lorenz96_tendency)(x, {"forcing": 8.0})
        assert float(jnp.trace(jac)) == pytest.approx(-size, abs=1e-12)


def test_lorenz63_jacobian_trace_is_minus_sigma_plus_one_plus_beta():
    """Divergence identity of Lorenz (1963): trace(J) = -(sigma + 1 + beta) everywhere."""
    params = {"sigma": 10.0, "rho": 28.0, "beta": 8.0 / 3.0}
    x = jnp.asarray([3.0, -4.0, 20.0])
    jac = jax.jacfwd(lorenz63_tendency)(x, params)
    assert float(jnp.trace(jac)) == pytest.approx(-(10.0 + 1.0 + 8.0 / 3.0), abs=1e-12)


def test_lorenz96_tendency_acts_on_the_last_axis():
    """One call on an ensemble equals one call per member."""
    rng = np.random.default_rng(0)
    members = jnp.asarray(rng.normal(size=(6, 9)))
    params = {"forcing": 8.0}
    batched = lorenz96_tendency(members, params)
    np.testing.assert_array_equal(np.asarray(batched), np.stack([lorenz96_tendency(m, params) for m in members]))


def test_lorenz96_forcing_eight_climatology():
    """Mean about 2.3 and standard deviation about 3.6 per variable (common practice, from memory)."""
    model = make_lorenz96(size=40, forcing=8.0, dt=0.01)
    spin = make_flow(model.tendency, model.dt, 2000)
    step = make_flow(model.tendency, model.dt, 10)
    x0 = spin(model.first_guess(jax.random.PRNGKey(7), model.params), model.params)

    @jax.jit
    def sample(x):
        return jax.lax.scan(lambda x, _: (step(x, model.params),) * 2, x, None, length=10000)[1]

    states = np.asarray(sample(x0))  # 1,000 time units, 400,000 values
    assert states.mean() == pytest.approx(2.3, abs=0.1)
    assert states.std() == pytest.approx(3.6, abs=0.1)


def test_lorenz63_stays_on_the_attractor():
    """After spin-up the state stays in the known bounding box (|x|,|y| < 30, 0 < z < 60; from memory)."""
    model = make_lorenz63()
    flow = make_flow(model.tendency, model.dt, round(model.spinup_time / model.dt))
    x = np.asarray(flow(model.first_guess(jax.random.PRNGKey(0), model.params), model.params))
    assert abs(x[0]) < 30 and abs(x[1]) < 30 and 0 < x[2] < 60


def test_lorenz96_refuses_fewer_than_four_variables():
    with pytest.raises(ValueError):
        make_lorenz96(size=3)


def test_the_variables_first_lorenz63_tendency_is_the_same_function():
    """The ensemble layout the forecast uses must not change the equations."""
    from assimbench.models.lorenz63 import lorenz63_tendency_variables_first

    model = make_lorenz63()
    params = {k: jnp.asarray(v) for k, v in model.params.items()}
    members = jax.random.normal(jax.random.PRNGKey(4), (7, 3)) * 5.0
    np.testing.assert_array_equal(
        np.asarray(lorenz63_tendency_variables_first(members.T, params).T),
        np.asarray(lorenz63_tendency(members, params)),
    )
