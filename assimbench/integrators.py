"""Fixed-step explicit Runge-Kutta integration of autonomous systems.

A scheme is its Butcher tableau (data), and one step is a small loop over its
stages. The classic fourth-order scheme is the one every model uses; other
tableaux exist so that the convergence test can show that the order comes from
the coefficients, not from the code.
"""

from collections.abc import Callable
from typing import NamedTuple

import jax
import jax.numpy as jnp

Tendency = Callable[[jax.Array, dict], jax.Array]


class ButcherTableau(NamedTuple):
    """Coefficients of an explicit Runge-Kutta scheme.

    ``a[i]`` holds the weights of stages ``0..i-1`` used to form stage ``i``;
    ``b`` are the final weights. Autonomous systems need no ``c`` nodes.
    """

    a: tuple[tuple[float, ...], ...]
    b: tuple[float, ...]
    order: int


# Classic RK4 (Kutta 1901; e.g. Hairer, Norsett & Wanner, Solving ODEs I, Table 1.2).
RK4 = ButcherTableau(
    a=((), (0.5,), (0.0, 0.5), (0.0, 0.0, 1.0)),
    b=(1.0 / 6.0, 1.0 / 3.0, 1.0 / 3.0, 1.0 / 6.0),
    order=4,
)

# Explicit Euler and Heun's second-order method, used by the order tests.
EULER = ButcherTableau(a=((),), b=(1.0,), order=1)
HEUN = ButcherTableau(a=((), (1.0,)), b=(0.5, 0.5), order=2)


def rk_step(tableau: ButcherTableau, tendency: Tendency, x: jax.Array, params: dict, dt) -> jax.Array:
    """One explicit Runge-Kutta step of ``dx/dt = f(x, params)``.

    k_i = f(x + dt * sum_j a_ij k_j),  x_next = x + dt * sum_i b_i k_i.
    ``x`` may carry leading batch axes if ``tendency`` acts on the last axis.
    Zero coefficients are skipped at trace time, so RK4 costs four tendencies.
    """
    stages = []
    for weights in tableau.a:
        increment = sum((w * k for w, k in zip(weights, stages) if w != 0.0), jnp.zeros_like(x))
        stages.append(tendency(x + dt * increment, params))
    return x + dt * sum(w * k for w, k in zip(tableau.b, stages) if w != 0.0)


def make_flow(tendency: Tendency, dt: float, steps: int, tableau: ButcherTableau = RK4):
    """Return ``flow(x, params)``: the state after ``steps`` fixed steps of size ``dt``.

    ``dt`` and ``steps`` are static (they fix the program); ``params`` is a
    pytree of traced floats. The steps run in a ``lax.fori_loop`` so the
    compiled program does not grow with the number of steps.
    """
    if steps < 1:
        raise ValueError(f"steps must be >= 1, got {steps}")

    def flow(x, params):
        def body(_, state):
            return rk_step(tableau, tendency, state, params, dt)

        return jax.lax.fori_loop(0, steps, body, x)

    return flow


def model_step(model) -> Callable:
    """``step(x, params)``: one step of ``model`` of size model.dt, its own scheme if it has one
    (``model.stepper``), otherwise RK4 on its tendency."""
    if model.stepper is not None:
        return model.stepper
    return lambda x, params: rk_step(RK4, model.tendency, x, params, model.dt)


def make_model_flow(model, steps: int, ensemble: bool = False):
    """``flow(x, params)``: ``steps`` steps of ``model`` (see :func:`model_step`).

    With ``ensemble`` the flow takes members (N, n); a model with an
    ``ensemble_tendency`` then integrates them variables-first, (n, N), the
    layout that vectorises better for it."""
    if steps < 1:
        raise ValueError(f"steps must be >= 1, got {steps}")
    if ensemble and model.ensemble_tendency is not None and model.stepper is None:
        columns = make_flow(model.ensemble_tendency, model.dt, steps)
        return lambda members, params: columns(members.T, params).T
    step = model_step(model)
    return lambda x, params: jax.lax.fori_loop(0, steps, lambda _, state: step(state, params), x)


def steps_per_cycle(interval: float, dt: float) -> int:
    """Number of steps of ``dt`` in one analysis interval, or 0 when it is not a whole multiple of dt."""
    steps = round(interval / dt)
    if steps >= 1 and abs(steps * dt - interval) <= 1e-9 * max(interval, dt):
        return steps
    return 0
