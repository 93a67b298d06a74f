"""Strong-constraint 4D-Var over a sliding window, with the adjoint by JAX reverse mode.

For a window of W analysis intervals starting at t_0 with background x_b, the
cost of the initial state x_0 is (Le Dimet & Talagrand 1986; Courtier,
Thepaut & Hollingsworth 1994, Q. J. R. Meteorol. Soc. 120)

    J(x_0) = 1/2 (x_0 - x_b)^T B^-1 (x_0 - x_b)
             + 1/2 sum_{j=1..W} m_j (y_j - h(M_j(x_0)))^T R^-1 (y_j - h(M_j(x_0))),

M_j the model over j intervals, m_j = 1 for the observations the window
holds (0 while it fills during the first W - 1 cycles), B = static_scale x the
forecast model's climatological covariance, R = error_std^2 I. With the
control variable x_0 = x_b + L v (B = L L^T, Cholesky) the cost is
J(v) = |v|^2 / 2 + |e(v)|^2 / 2 for the scaled residuals e. It is minimised
by ``iterations`` Gauss-Newton steps, each solving (I + E^T E) dv = -grad J
with ``inner_iterations`` of conjugate gradients: E u by forward mode (the
tangent linear model, ``jax.jvp``), E^T z by reverse mode (the adjoint,
``jax.vjp``), and grad J = v + E^T e by reverse mode. Everything stays in jit
with fixed iteration counts.

Cycling: the window ends at the current cycle k. The analysis at k is
M_W(x_0*) (M_m while the window holds only m < W observations); the window
then slides by one interval, with the background of its new start
M_1(x_0*), the analysed trajectory (a sliding, overlapping window).

Hybrid 4D-Var (``members`` >= 2): B at the window start is the hybrid
(1 - beta) s B_c + beta (P_e o C) of the 3DEnVar, P_e from the analysis
anomalies of the window start's cycle (times ``inflation``), and L is its
square root U (n, m) of :func:`assimbench.filters.variational.hybrid.hybrid_factor`
(the control v has m entries; the adjoint carries the ensemble covariance
across the window as the tangent-linear model evolves it). The members are
the ETKF's (LETKF's with a radius) perturbation update of the inflated
forecast ensemble, recentred on the analysis, as for the 3DEnVar and the
4DEnVar; with beta = 1, no localization and a linear model this is the
4DEnVar (tested). ``members`` = 1 is the pure 4D-Var and carries no ensemble.
"""

from dataclasses import dataclass
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from assimbench.config.spec import FilterSpec
from assimbench.filters.base import Filter
from assimbench.filters.kalman.inflation import (
    WIDEST,
    InflationConfig,
    check_inflation,
    inflation_pieces,
)
from assimbench.filters.variational.hybrid import (
    HYBRID_TRACED,
    WindowEnsembleState,
    check_hybrid_weights,
    circulant_taper_root,
    hybrid_factor,
    hybrid_settings,
    init_window_ensemble,
    make_member_update,
    push_anomalies,
    slide_window,
)
from assimbench.integrators import make_model_flow
from assimbench.localization import check_radius, radius_of
from assimbench.models.climatology import climatology


class FourDVarState(NamedTuple):
    """members (1, n) the current estimate; start (n,) background at the window start; shifted
    (n,) M_1 of the last analysed start; obs (W, p) the window's observations, oldest first;
    filled how many of them are real (int32)."""

    members: jax.Array
    start: jax.Array
    shifted: jax.Array
    obs: jax.Array
    filled: jax.Array


def window_residuals(v, background, factor, obs, mask, error_std, advance, h, params, frame=None):
    """Scaled residuals e(v) (W, p): m_j (F_j h(M_j(x_b + L v)) - y_j) / error_std; factor = L (n, m); ``frame``
    takes the predicted observations (W, p) to the window's frame F_j (masked, whitened; obs are in it; None:
    they are in y's own frame)."""
    x0 = background + factor @ v

    def step(x, _):
        x = advance(x, params)
        return x, h(x)

    _, predicted = jax.lax.scan(step, x0, None, length=obs.shape[0])
    if frame is not None:
        predicted = frame(predicted)
    return mask[:, None] * (predicted - obs) / error_std


def window_cost(v, *args):
    """J(v) = |v|^2 / 2 + |e(v)|^2 / 2 (see the module docstring); args as for window_residuals."""
    e = window_residuals(v, *args)
    return 0.5 * v @ v + 0.5 * jnp.sum(e**2)


def conjugate_gradients(apply, rhs, iterations: int):
    """x with apply(x) = rhs for a symmetric positive definite ``apply``, from x = 0, fixed iterations
    (Hestenes & Stiefel 1952). A converged residual stops changing x (guarded divisions)."""

    def body(carry, _):
        x, r, p, rr = carry
        ap = apply(p)
        curvature = p @ ap
        alpha = jnp.where(curvature > 0, rr / jnp.where(curvature > 0, curvature, 1.0), 0.0)
        x = x + alpha * p
        r = r - alpha * ap
        rr_new = r @ r
        beta = jnp.where(rr > 0, rr_new / jnp.where(rr > 0, rr, 1.0), 0.0)
        return (x, r, r + beta * p, rr_new), None

    zero = jnp.zeros_like(rhs)
    (x, _, _, _), _ = jax.lax.scan(body, (zero, rhs, rhs, rhs @ rhs), None, length=iterations)
    return x


def minimise_window(background, factor, obs, mask, error_std, advance, h, params, iterations, inner_iterations,
                    frame=None):
    """v* after the Gauss-Newton-CG iterations (module docstring), starting from v = 0."""
    args = (background, factor, obs, mask, error_std, advance, h, params, frame)

    def outer(v, _):
        residual = lambda u: window_residuals(u, *args)
        e, adjoint = jax.vjp(residual, v)
        gradient = v + adjoint(e)[0]

        def hessian(u):  # (I + E^T E) u: tangent linear then adjoint
            return u + adjoint(jax.jvp(residual, (v,), (u,))[1])[0]

        return v + conjugate_gradients(hessian, -gradient, inner_iterations), None

    v, _ = jax.lax.scan(outer, jnp.zeros(factor.shape[1]), None, length=iterations)
    return v


def make_4dvar(model, operator, climate_cov, window: int, iterations: int, inner_iterations: int,
               steps_per_interval: int) -> Filter:
    """Sliding-window strong-constraint 4D-Var with the forecast ``model``; ``settings["filter"]["static_scale"]``
    multiplies the climatological covariance (n, n)."""

    advance = make_model_flow(model, steps_per_interval)
    # Cholesky factor of the climatological covariance; B = s C, so L = sqrt(s) L_C.
    climate_factor = jnp.asarray(np.linalg.cholesky(np.asarray(climate_cov)))
    p = operator.size

    def init(key, initial_ensemble, settings):
        del key, settings
        mean = initial_ensemble.mean(axis=0)
        return FourDVarState(members=mean[None, :], start=mean, shifted=mean,
                             obs=jnp.zeros((window, p)), filled=jnp.asarray(0, dtype=jnp.int32))

    def analyse(key, state, y, settings):
        del key
        start, obs, filled, mask = slide_window(state.start, state.shifted, state.obs, state.filled, y, window)
        factor = jnp.sqrt(settings["filter"]["static_scale"]) * climate_factor
        analysis, shifted = analyse_window(start, factor, obs, mask, filled, settings, advance, operator, iterations,
                                           inner_iterations, window)
        return FourDVarState(members=analysis[None, :], start=start, shifted=shifted, obs=obs, filled=filled), {}

    return Filter(name="4dvar", members=1, init=init, analyse=analyse)


def analyse_window(start, factor, obs, mask, filled, settings, advance, operator, iterations, inner_iterations,
                   window):
    """(analysis at the window's last observation, analysed state one interval after the start)."""
    params = settings["forecast_model"]
    frame = operator.window_frame(settings, obs)  # the window's observations (W, p) in the filter's frame
    v = minimise_window(start, factor, frame.obs, mask, frame.std, advance, operator, params,
                        iterations, inner_iterations, frame.apply)
    x0 = start + factor @ v
    trajectory = jax.lax.scan(lambda x, _: (advance(x, params),) * 2, x0, None, length=window)[1]
    return trajectory[filled - 1], trajectory[0]


def make_hybrid_4dvar(model, operator, climate_cov, members: int, window: int, radius: float | None,
                      iterations: int, inner_iterations: int, steps_per_interval: int, pieces=frozenset()) -> Filter:
    """Hybrid 4D-Var of the module docstring; settings["filter"] carries ensemble_weight, static_scale,
    radius (traced) and the inflation pieces."""
    advance = make_model_flow(model, steps_per_interval)
    climate_factor = jnp.asarray(np.linalg.cholesky(np.asarray(climate_cov)))
    update_members = make_member_update(model.size, operator, radius, pieces)

    def init(key, initial_ensemble, settings):
        del key, settings
        return init_window_ensemble(initial_ensemble, window, operator.size)

    def analyse(key, state, y, settings):
        f = settings["filter"]
        start, obs, filled, mask = slide_window(state.start, state.shifted, state.obs, state.filled, y, window)
        root = None if radius is None else circulant_taper_root(model.size, f["radius"])
        factor = hybrid_factor(f["inflation"] * state.past[0], climate_factor, f["ensemble_weight"], f["static_scale"],
                               root)
        analysis, shifted = analyse_window(start, factor, obs, mask, filled, settings, advance, operator, iterations,
                                           inner_iterations, window)
        analysed, info = update_members(key, state.members, y, analysis, settings)
        return WindowEnsembleState(members=analysed, start=start, shifted=shifted, obs=obs, filled=filled,
                                   past=push_anomalies(state.past, analysed)), info

    return Filter(name="4dvar", members=members, init=init, analyse=analyse)


@dataclass
class FourDVarConfig(InflationConfig):
    """Strong-constraint 4D-Var over a sliding window of ``window`` analysis intervals, B =
    static_scale B_c; ``iterations`` Gauss-Newton steps of ``inner_iterations`` conjugate gradients
    each. With members >= 2, hybrid 4D-Var: B = (1 - ensemble_weight) static_scale B_c +
    ensemble_weight (P_e o C), radius the Gaspari-Cohn half-width of C and of the LETKF perturbation
    update (null: none), and the inflation pieces act on the ensemble."""

    name: str = "4dvar"
    static_scale: float = 0.1
    window: int = 5
    iterations: int = 3
    inner_iterations: int = 10
    members: int = 1
    inflation: float = 1.0
    ensemble_weight: float = 0.0
    radius: float | None = None


def _check(c, model) -> None:
    c.integer("members", 1, "an integer >= 1 (1: pure 4D-Var; >= 2: hybrid with an ensemble)")
    check_hybrid_weights(c)
    if int(c.node.members) == 1:
        for key in ("ensemble_weight", "radius"):
            if c.node[key] not in (None, 0.0):
                c.fail(key, c.node[key], f"the hybrid's {key.replace('_', ' ')} needs an ensemble: set "
                                         f"{c.name('members')} >= 2 (1 is the pure 4D-Var)")
    else:
        check_inflation(c)
    check_radius(c, model)
    c.integer("iterations", 1, "an integer >= 1")
    c.integer("inner_iterations", 1, "an integer >= 1 (conjugate-gradient steps)")
    c.integer("window", 1, "an integer >= 1 (analysis intervals)")


def _build(node, ctx) -> Filter:
    if int(node.members) == 1:
        return make_4dvar(ctx.model, ctx.operator, climatology(ctx.model)[1], int(node.window), int(node.iterations),
                          int(node.inner_iterations), ctx.steps_per_interval)
    return make_hybrid_4dvar(ctx.model, ctx.operator, climatology(ctx.model)[1], int(node.members), int(node.window),
                             radius_of(node), int(node.iterations), int(node.inner_iterations),
                             ctx.steps_per_interval, inflation_pieces(node))


SPEC = FilterSpec(
    name="4dvar",
    schema=FourDVarConfig,
    build=_build,
    settings=hybrid_settings,
    check=_check,
    traced=HYBRID_TRACED,
    widest=WIDEST + ("radius",),
    climatology=True,
    windowed=True,
)
