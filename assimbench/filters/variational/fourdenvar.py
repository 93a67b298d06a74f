"""4DEnVar: a four-dimensional variational analysis whose covariances across the window come from
ensemble trajectories, with no tangent-linear model and no adjoint.

The window and its cycling are the 4D-Var's (:mod:`assimbench.filters.variational.fourdvar`):
W analysis intervals ending at the current cycle, sliding by one interval, background x_b at its
start t_0, observations y_j at t_1 .. t_W. The ensemble at t_0 is x_b + A_0 (A_0 the analysis
anomalies of cycle t_0, times ``inflation``), integrated by the forecast model with x_b beside it:
backgrounds xbar_j = M_j(x_b), anomalies X_j about the members' own mean at t_j. The increment at
t_j is U_j v with one control v for the whole window (Liu, Xiao & Wang 2008, Mon. Wea. Rev. 136;
Buehner et al. 2010, Mon. Wea. Rev. 138, 1550-1566; citations from memory):

    U_j = [sqrt((1 - beta) s) L_c,  sqrt(beta / (N - 1)) (x'_(j,k) o c_r)]

(:func:`assimbench.filters.variational.hybrid.hybrid_factor`; the same localization columns c_r
at every time). The static part does not evolve across the window: without a tangent-linear
model it stays the increment at t_0 (common practice in 4DEnVar systems, from memory). The cost

    J(v) = 1/2 |v|^2 + 1/2 sum_j m_j |y_j - h(xbar_j + U_j v)|^2 / sigma_o^2

(m_j = 1 for the observations the window holds) is minimised by ``iterations`` Gauss-Newton
steps (one for a linear h), each the exact minimiser of the cost with h linearised at the current
iterate, solved in observation space: with G (W p, m) the stacked rows m_j H_j U_j and d the
stacked m_j (y_j - h(x_j) + H_j U_j v),

    v <- G^T (G G^T + sigma_o^2 I)^-1 d.

The analysis is the analysed trajectory at the window's last observation, xbar_W + U_W v; the
next window starts from xbar_1 + U_1 v. The members are the ETKF's (LETKF's with the radius)
perturbation update of the inflated forecast ensemble, recentred on the analysis, as for the
3DEnVar. With a linear model, an unlocalized ensemble and beta = 1, U_j = M_j U_0, so this is
strong-constraint 4D-Var with B = P_e at the window start (tested), and a window of one interval
is the 3DEnVar (tested).

Cost per cycle: N + 1 model integrations over the window (the cycle's own forecast of the members
besides), and a (W p) x (W p) solve per Gauss-Newton step. The factors are (W, n, n + N n) with
localization: meant for rings of up to a few hundred points.
"""

from dataclasses import dataclass

import jax
import jax.numpy as jnp
import numpy as np

from assimbench.config.spec import FilterSpec
from assimbench.filters.base import Filter
from assimbench.filters.kalman.inflation import WIDEST, inflation_pieces
from assimbench.filters.variational.envar import ThreeDEnVarConfig, check_3denvar
from assimbench.filters.variational.hybrid import (
    HYBRID_TRACED,
    WindowEnsembleState,
    circulant_taper_root,
    hybrid_factor,
    hybrid_settings,
    init_window_ensemble,
    make_member_update,
    push_anomalies,
    slide_window,
)
from assimbench.integrators import make_model_flow
from assimbench.localization import radius_of
from assimbench.models.climatology import climatology


def gauss_newton_4denvar(backgrounds, factors, obs, mask, error_var, h, iterations: int, frame=None):
    """The control v (m,) after ``iterations`` Gauss-Newton steps from v = 0 (module docstring);
    backgrounds (W, n), factors U_j (W, n, m), obs (W, p), mask (W,); ``frame`` takes (W, ..., p) predicted
    observations to the window's frame (masked, whitened; obs are in it; None: as they are)."""
    length, size = obs.shape

    def step(v, _):
        states = backgrounds + factors @ v
        jacobians = jax.vmap(jax.jacfwd(h))(states)  # (W, p, n)
        sensitivities = jacobians @ factors  # (W, p, m)
        predicted = jax.vmap(h)(states)
        if frame is not None:
            sensitivities = jnp.swapaxes(frame(jnp.swapaxes(sensitivities, 1, 2)), 1, 2)
            predicted = frame(predicted)
        rows = (mask[:, None, None] * sensitivities).reshape(length * size, -1)
        departures = (mask[:, None] * (obs - predicted)).reshape(-1) + rows @ v
        variances = jnp.broadcast_to(error_var, (length, size)).reshape(-1)
        innovation_cov = rows @ rows.T + jnp.diag(variances)
        return rows.T @ jnp.linalg.solve(innovation_cov, departures), None

    v, _ = jax.lax.scan(step, jnp.zeros(factors.shape[-1]), None, length=iterations)
    return v


def ensemble_trajectories(flow, start, anomalies, params, length: int):
    """(backgrounds (W, n), anomalies (W, N, n)): x_b and x_b + A_0 integrated over ``length``
    intervals by ``flow`` (members (N + 1, n) at once); anomalies about the members' own mean."""
    stacked = jnp.concatenate([start[None, :], start + anomalies], axis=0)
    _, path = jax.lax.scan(lambda e, _: (flow(e, params),) * 2, stacked, None, length=length)
    members = path[:, 1:]
    return path[:, 0], members - members.mean(axis=1, keepdims=True)


def make_4denvar(model, operator, climate_cov, members: int, window: int, radius: float | None, iterations: int,
                 steps_per_interval: int, pieces=frozenset()) -> Filter:
    """4DEnVar of the module docstring; settings["filter"] carries ensemble_weight, static_scale,
    radius (traced) and the inflation pieces; ``radius`` (the configured one) fixes the LETKF's
    windows, None: no localization."""
    climate_factor = jnp.asarray(np.linalg.cholesky(np.asarray(climate_cov)))
    flow = make_model_flow(model, steps_per_interval, ensemble=True)
    update_members = make_member_update(model.size, operator, radius, pieces)
    steps = 1 if operator.linear else iterations

    def init(key, initial_ensemble, settings):
        del key, settings
        return init_window_ensemble(initial_ensemble, window, operator.size)

    def analyse(key, state, y, settings):
        f = settings["filter"]
        start, obs, filled, mask = slide_window(state.start, state.shifted, state.obs, state.filled, y, window)
        backgrounds, anomalies = ensemble_trajectories(flow, start, f["inflation"] * state.past[0],
                                                       settings["forecast_model"], window)
        root = None if radius is None else circulant_taper_root(model.size, f["radius"])
        factors = jax.vmap(lambda a: hybrid_factor(a, climate_factor, f["ensemble_weight"], f["static_scale"],
                                                   root))(anomalies)
        frame = operator.window_frame(settings, obs)  # the window's observations (W, p) in the filter's frame
        v = gauss_newton_4denvar(backgrounds, factors, frame.obs, mask, frame.variance, operator, steps, frame.apply)
        trajectory = backgrounds + factors @ v
        analysed, info = update_members(key, state.members, y, trajectory[filled - 1], settings)
        return WindowEnsembleState(members=analysed, start=start, shifted=trajectory[0], obs=obs, filled=filled,
                                   past=push_anomalies(state.past, analysed)), info

    return Filter(name="4denvar", members=members, init=init, analyse=analyse)


@dataclass
class FourDEnVarConfig(ThreeDEnVarConfig):
    """4DEnVar over a sliding window of ``window`` analysis intervals: B_j from the ensemble
    trajectories and the static B; the other keys as the 3DEnVar's."""

    name: str = "4denvar"
    inflation: float = 1.01
    window: int = 2


def _check(c, model) -> None:
    check_3denvar(c, model)
    c.integer("window", 1, "an integer >= 1 (analysis intervals)")


def _build(node, ctx) -> Filter:
    return make_4denvar(ctx.model, ctx.operator, climatology(ctx.model)[1], int(node.members), int(node.window),
                        radius_of(node), int(node.iterations), ctx.steps_per_interval, inflation_pieces(node))


SPEC = FilterSpec(
    name="4denvar",
    schema=FourDEnVarConfig,
    build=_build,
    settings=hybrid_settings,
    check=_check,
    traced=HYBRID_TRACED,
    widest=WIDEST + ("radius",),
    climatology=True,
    windowed=True,
)
