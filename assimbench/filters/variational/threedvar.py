"""3D-Var with a static climatological background covariance.

Minimises J(x) = 1/2 (x - x_b)^T B^-1 (x - x_b) + 1/2 (y - h(x))^T R^-1 (y - h(x))
with B = b_scale * C (C the model's climatological covariance) and
R = error_std^2 I (Lorenc 1986, Q. J. R. Meteorol. Soc. 112; Courtier et al.
1998, Q. J. R. Meteorol. Soc. 124). For a linear h the minimiser is the BLUE
x_a = x_b + B H^T (H B H^T + R)^-1 (y - H x_b), computed exactly; for a
nonlinear h a fixed number of Gauss-Newton iterations, each the exact
minimiser of J with h linearised at the current iterate (Jacobian by JAX
forward-mode autodiff).
"""

from dataclasses import dataclass

import jax
import jax.numpy as jnp

from assimbench.config.spec import FilterSpec, floats
from assimbench.filters.base import EnsembleState, Filter
from assimbench.models.climatology import climatology


def threedvar_cost(x, background, y, b_cov, error_var, h):
    """J(x) above; background (n,), b_cov (n, n) = B, error_var scalar or (p,)."""
    dx = x - background
    dy = y - h(x)
    return 0.5 * dx @ jnp.linalg.solve(b_cov, dx) + 0.5 * jnp.sum(dy * dy / error_var)


def _diagonal(error_var, size: int):
    """R (size, size) from a scalar variance or one per observation."""
    return error_var * jnp.eye(size) if jnp.ndim(error_var) == 0 else jnp.diag(error_var)


def gauss_newton_3dvar(background, y, b_cov, error_var, h, iterations: int):
    """Iterates (iterations + 1, n) of Gauss-Newton from x_0 = background.

    x_{k+1} = x_b + B H_k^T (H_k B H_k^T + R)^-1 (y - h(x_k) + H_k (x_k - x_b)),
    H_k = dh/dx at x_k. One iteration is exact for a linear h.
    """

    def step(x, _):
        jac = jax.jacfwd(h)(x)
        departure = y - h(x) + jac @ (x - background)
        innovation_cov = jac @ b_cov @ jac.T + _diagonal(error_var, jac.shape[0])
        x_next = background + b_cov @ jac.T @ jnp.linalg.solve(innovation_cov, departure)
        return x_next, x_next

    _, path = jax.lax.scan(step, background, None, length=iterations)
    return jnp.concatenate([background[None], path], axis=0)


def make_3dvar_steps(operator, climate_cov, iterations: int):
    """3D-Var's step record ``steps(key, state, y, settings) -> dict`` for reference vectors
    (FilterSpec.steps; R diagonal): B, the innovation y - h(x_b), J and grad J at the background, the
    gain B H^T (H B H^T + R)^-1 at the background, J at the analysis and the analysis."""
    climate_cov = jnp.asarray(climate_cov)

    def steps(key, state, y, settings):
        del key
        background = state.members[0]
        b_cov = settings["filter"]["b_scale"] * climate_cov
        white = operator.whiten(settings, y)
        cost = lambda x: threedvar_cost(x, background, white.obs, b_cov, white.variance, white.observe)
        jac = jax.jacfwd(white.observe)(background)
        gain = jnp.linalg.solve(jac @ b_cov @ jac.T + _diagonal(white.variance, jac.shape[0]), jac @ b_cov).T
        path = gauss_newton_3dvar(background, white.obs, b_cov, white.variance, white.observe,
                                  1 if operator.linear else iterations)
        return {"background_covariance": b_cov, "innovation": white.obs - white.observe(background),
                "cost_at_background": cost(background),
                "gradient_at_background": jax.grad(cost)(background), "gain": gain,
                "cost_at_analysis": cost(path[-1]), "analysis_ensemble": path[-1][None, :]}

    return steps


def make_3dvar(operator, climate_cov, iterations: int) -> Filter:
    """3D-Var; ``settings["filter"]["b_scale"]`` multiplies the climatological covariance (n, n)."""
    climate_cov = jnp.asarray(climate_cov)

    def analyse(key, state, y, settings):
        del key
        b_cov = settings["filter"]["b_scale"] * climate_cov
        white = operator.whiten(settings, y)  # a correlated R: L^-1 h and L^-1 y with R = I
        path = gauss_newton_3dvar(state.members[0], white.obs, b_cov, white.variance, white.observe,
                                  1 if operator.linear else iterations)
        return EnsembleState(members=path[-1][None, :]), {}

    def init(key, initial_ensemble, settings):
        del key, settings
        return EnsembleState(members=initial_ensemble.mean(axis=0, keepdims=True))

    return Filter(name="3dvar", members=1, init=init, analyse=analyse)


@dataclass
class ThreeDVarConfig:
    """3D-Var; B = b_scale x climatological covariance; iterations of Gauss-Newton for nonlinear h."""

    name: str = "3dvar"
    b_scale: float = 0.1
    iterations: int = 3


def check_b_scale(c) -> None:
    """``b_scale``: the factor of the climatological covariance in B."""
    c.real("b_scale", "a finite factor > 0", minimum=0.0)


def _check(c, model) -> None:
    check_b_scale(c)
    c.integer("iterations", 1, "an integer >= 1")


SPEC = FilterSpec(
    name="3dvar",
    schema=ThreeDVarConfig,
    build=lambda node, ctx: make_3dvar(ctx.operator, climatology(ctx.model)[1], int(node.iterations)),
    settings=lambda node: floats(node, ("b_scale",)),
    check=_check,
    traced=("b_scale",),
    members=lambda node: 1,
    climatology=True,
    steps=lambda node, ctx: make_3dvar_steps(ctx.operator, climatology(ctx.model)[1], int(node.iterations)),
)
