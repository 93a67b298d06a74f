"""A linear twin for exact checks: a random linear flow, jitted filters, and two filters cycled side by
side on one set of observations (every second variable observed)."""

import jax
import jax.numpy as jnp
import numpy as np

from assimbench.models.base import Model
from assimbench.observations.operators import every_kth


def linear_model(size: int, seed: int = 0, ring: bool = False) -> Model:
    """dx/dt = A x with A a random matrix of moderate growth; RK4 keeps the flow linear."""
    rng = np.random.default_rng(seed)
    matrix = jnp.asarray(0.4 * rng.standard_normal((size, size)) - 0.2 * np.eye(size))
    return Model(name="linear", size=size, dt=0.05, tendency=lambda x, params: x @ matrix.T, params={},
                 spinup_time=0.0, first_guess=lambda key, params: jnp.zeros(size), ring=ring)


def jitted(filt):
    """The filter with a compiled analysis: one compile per filter instead of eager tracing every cycle."""
    return filt._replace(analyse=jax.jit(filt.analyse))


def side_by_side(first, second, flow, settings, cycles, members, size, seed=1):
    """Cycle two filters from one initial ensemble (members, size) on one set of observations
    (every_kth(size, 2)); yield per cycle (k, first's state, its info, second's state, its info), k from 1."""
    rng = np.random.default_rng(seed)
    ensemble = jnp.asarray(rng.standard_normal((members, size)))
    key = jax.random.PRNGKey(0)
    states = [first.init(key, ensemble, settings), second.init(key, ensemble, settings)]
    for k in range(1, cycles + 1):
        y = jnp.asarray(rng.standard_normal(every_kth(size, 2).size))
        (state_a, info_a), (state_b, info_b) = [
            f.analyse(key, state._replace(members=flow(state.members, {})), y, settings)
            for f, state in zip((first, second), states)]
        states = [state_a, state_b]
        yield k, state_a, info_a, state_b, info_b
