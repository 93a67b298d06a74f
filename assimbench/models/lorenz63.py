"""Lorenz-63: three variables, the classic chaotic convection model."""

from dataclasses import dataclass

import jax
import jax.numpy as jnp

from assimbench.config.spec import ModelSpec, NodeChecks
from assimbench.models.base import Model


def lorenz63_tendency(x: jax.Array, params: dict) -> jax.Array:
    """Lorenz (1963, J. Atmos. Sci. 20, 130-141), eq. 25-27.

    dx/dt = sigma (y - x),  dy/dt = x (rho - z) - y,  dz/dt = x y - beta z.
    x: (..., 3).
    """
    u, v, w = x[..., 0], x[..., 1], x[..., 2]
    return jnp.stack(
        [
            params["sigma"] * (v - u),
            u * (params["rho"] - w) - v,
            u * v - params["beta"] * w,
        ],
        axis=-1,
    )


def lorenz63_tendency_variables_first(x: jax.Array, params: dict) -> jax.Array:
    """:func:`lorenz63_tendency` for x of shape (3, ...): the same equations, variables on the first axis."""
    u, v, w = x[0], x[1], x[2]
    return jnp.stack([params["sigma"] * (v - u), u * (params["rho"] - w) - v, u * v - params["beta"] * w])


def make_lorenz63(sigma: float = 10.0, rho: float = 28.0, beta: float = 8.0 / 3.0, dt: float = 0.01) -> Model:
    """Lorenz-63 with the classic parameters as defaults."""

    def first_guess(key, params):
        return jnp.array([1.0, 1.0, 20.0]) + jax.random.normal(key, (3,))

    return Model(
        name="lorenz63",
        size=3,
        dt=float(dt),
        tendency=lorenz63_tendency,
        params={"sigma": float(sigma), "rho": float(rho), "beta": float(beta)},
        spinup_time=20.0,
        first_guess=first_guess,
        ring=False,
        # Measured: an RK4 forecast of 1,000 members 1.7x faster variables-first.
        ensemble_tendency=lorenz63_tendency_variables_first,
    )


@dataclass
class Lorenz63Config:
    """Lorenz-63: dx/dt = sigma (y - x), dy/dt = x (rho - z) - y, dz/dt = x y - beta z; RK4 step ``dt``."""

    name: str = "lorenz63"
    sigma: float = 10.0
    rho: float = 28.0
    beta: float = 8.0 / 3.0
    dt: float = 0.01


def _check(c: NodeChecks) -> None:
    for key in ("sigma", "rho", "beta"):
        c.real(key, "a finite number")


SPEC = ModelSpec(
    name="lorenz63",
    schema=Lorenz63Config,
    build=lambda node: make_lorenz63(sigma=node.sigma, rho=node.rho, beta=node.beta, dt=node.dt),
    sizes=lambda node: (3, 3),
    check=_check,
    traced=("sigma", "rho", "beta"),
)
