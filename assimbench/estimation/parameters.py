"""The scalar parameters of a forecast model that a filter can estimate, and per-member values of them.

A model's dynamic parameters (``Model.params``) are scalars (the Lorenz-96
forcing, the Lorenz-63 sigma, rho, beta) or vectors (the coefficients of a
closure polynomial). Every scalar is estimable under its key; every entry i of
a vector ``key`` under ``key_i`` (``closure_0`` is the constant term of the
closure g).
"""

import jax
import jax.numpy as jnp
import numpy as np

from assimbench.integrators import make_model_flow


def split_name(name: str, params: dict) -> tuple:
    """(key, index) of an estimable name in ``params``: index None for a scalar key."""
    if name in params:
        return name, None
    key, _, index = name.rpartition("_")
    return key, int(index)


def values_of(params: dict, names) -> np.ndarray:
    """(q,) the values ``params`` gives the estimable ``names``."""
    out = []
    for name in names:
        key, index = split_name(name, params)
        value = np.asarray(params[key], dtype=np.float64)
        out.append(float(value if index is None else value[index]))
    return np.array(out)


def member_params(params: dict, names, values: jax.Array) -> tuple:
    """(params with a leading member axis on every estimated key, vmap in_axes for them).

    values: (N, q), member i's value of ``names[j]`` in column j. A vector parameter is copied to
    every member and its estimated entries replaced."""
    batched = dict(params)
    members = values.shape[0]
    for j, name in enumerate(names):
        key, index = split_name(name, params)
        if index is None:
            batched[key] = values[:, j]
        else:
            current = batched[key]
            if jnp.ndim(current) == 1:
                current = jnp.broadcast_to(current, (members,) + jnp.shape(current))
            batched[key] = current.at[:, index].set(values[:, j])
    axes = {key: 0 if key in {split_name(name, params)[0] for name in names} else None for key in params}
    return batched, axes


def make_member_forecast(model, steps: int, names):
    """``forecast(members (N, n), values (N, q), params) -> (N, n)``: every member integrated over
    ``steps`` model steps with its own values of the estimated ``names`` (the others from ``params``)."""
    flow = make_model_flow(model, steps)

    def forecast(members, values, params):
        batched, axes = member_params(params, names, values)
        return jax.vmap(flow, in_axes=(0, axes))(members, batched)

    return forecast
