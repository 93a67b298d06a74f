"""Iterative ensemble Kalman smoother (IEnKS) over a sliding window; window 1 is the iterative EnKF.

A window of L analysis intervals starts at t_0 with the ensemble E_0 (N, n),
mean x_0, anomalies A_0 = E_0 - x_0 (rows). Its state at t_0 is searched in
the span of the anomalies, x_0(w) = x_0 + w A_0 with w (N,), minimising
(Sakov, Oliver & Bertino 2012, Mon. Wea. Rev. 140, eq. 5-10; Bocquet & Sakov
2012, Nonlin. Processes Geophys. 19; 2014, Q. J. R. Meteorol. Soc. 140,
1521-1535, citation from memory)

    J(w) = (N - 1)/2 |w|^2 + 1/2 sum_j m_j |y_j - h(M_j(x_0(w)))|^2_{R^-1},

M_j the forecast model over j intervals, m_j = 1 for the observations this
analysis assimilates. Gauss-Newton in ensemble space, from w = 0, T = I:

    E     = x_0(w) + T A_0             (transform variant; bundle: x_0(w) + eps A_0)
    Z_j   = h(M_j(E)),  zbar_j its member mean, Z'_j = Z_j - zbar_j          (N, p)
    S_j   = T^-1 Z'_j                  (bundle: Z'_j / eps), the sensitivities
    H     = (N - 1) I + sum_j m_j S_j R^-1 S_j^T                             (N, N)
    grad  = (N - 1) w - sum_j m_j S_j R^-1 (y_j - zbar_j)
    w    <- w - H^-1 grad,             T <- sqrt(N - 1) H^(-1/2)

until the increment is small, sqrt(N - 1) rms(dw) < ``tolerance`` (dw in units
of its prior standard deviation, since w ~ N(0, I / (N - 1)) a priori), or
after ``max_iterations`` steps. The analysis at t_0 is then
E_0* = x_0(w) + sqrt(N - 1) H^(-1/2) A_0, the ETKF's symmetric transform with
the last H. With a linear model and operator the first step lands on the
minimum, and for L = 1 the analysis at t_1 is the ETKF's (tested).

Cycling (single data assimilation, shift S <= L). Every cycle adds its
observation to the window; once S observations wait (``pending``), the
analysis assimilates exactly those S (the latest ones; the earlier ones of
the window were assimilated by earlier analyses, so each observation counts
once), and the members at the current time are M_held(E_0*). The window then
slides so that the next S observations fit in it: by m = held - (L - S)
intervals when that is positive (its new start is M_m(E_0*), a smoothed
ensemble), otherwise not at all (while it fills during the first cycles its
start stays, with E_0* as its new prior). Between analyses the members are
forecast as for every filter. The inflation pieces act on the window-start
ensemble: the prior side on E_0 before the search, RTPP and RTPS on E_0*
(with a linear model, inflating A_0 is inflating the forecast anomalies).

Multiple data assimilation (``assimilation=multiple``, the shift dividing
the window; Bocquet & Sakov 2014, Sec. 3, from memory): every analysis
assimilates every observation of the window with the weight m_j = S / L
(R scaled by L / S), so each observation, seen by L / S analyses, counts once
in all. This analysis is the one the window slides on. The window start then
carries the observations of the window only in part (the state keeps how
much of each: ``used``), so a second, balancing search from the same prior
gives each held observation the rest of its weight, m_j = 1 - used_j; its
trajectory gives the current members and the smoothed ensembles. Single data
assimilation is the same bookkeeping with m_j = 1 - used_j in the one search.

Finite-size prior (``prior=finite_size``; Bocquet & Sakov 2012, Nonlin.
Processes Geophys. 19, 383-399, the IEnKF-N, from memory): the Gaussian term
(N - 1)/2 |w|^2 becomes the EnKF-N's (c/2) ln(eps_N + |w|^2) (c = N +
``prior_extra_count``; :mod:`assimbench.filters.kalman.enkfn`), so no inflation
needs tuning. Its Gauss-Newton steps use the gradient zeta w - sum_j m_j S_j
R^-1 (y_j - zbar_j) and the positive part zeta I + G of the Hessian, zeta =
c / (eps_N + |w|^2), G = sum_j m_j S_j R^-1 S_j^T: local steps (the exact
minimiser of the linearised cost, the EnKF-N's dual solution, can leap far
into the prior's heavy tail on one outlying innovation; measured on
Lorenz-63 with 3 members). The transform is sqrt(N - 1) H^(-1/2) with the
whole Hessian H = zeta I + G - (2 zeta^2 / c) w w^T. For a window of one
interval on a linear problem the converged analysis is the EnKF-N's
(tested). The implied anomaly
inflation sqrt((N - 1) / zeta) of the last analysis is reported as
``inflation``.

Cost: every iteration integrates the N members over the whole window (L
intervals: fixed shapes), and the analysed ensemble once more; the
``iterations`` diagnostics report both per cycle.

Smoothing (``smoother.lag`` = K <= L, shift 1): the analysed trajectory is
the smoothed estimate of the window's times, so the ensemble of cycle k - l
given y_1 .. y_k is M_(held - l)(E_0*) for l < held and E_0* itself for
l = held (held = L once the window is full); ``lagged`` holds them, lag 1
first, for the smoothed-error diagnostics. Unlike the fixed-lag smoother of
the other filters (:mod:`assimbench.filters.smoother`), which inflates only
the current forecast, these carry the window start's inflation; without
inflation, on a linear problem, the two are the same (tested).
"""

from dataclasses import dataclass
from typing import NamedTuple

import jax
import jax.numpy as jnp

from assimbench.config.spec import FilterSpec, floats
from assimbench.estimation.parameters import make_member_forecast
from assimbench.filters.base import Filter
from assimbench.filters.kalman.ensemble_space import symmetric_square_root_transform
from assimbench.filters.kalman.inflation import (
    INFLATION_KEYS,
    WIDEST,
    InflationConfig,
    check_inflation,
    inflation_pieces,
    with_inflation,
)
from assimbench.filters.kalman.precision_solvers import check_transform_solver, solve_precision
from assimbench.integrators import make_model_flow

VARIANTS = ("transform", "bundle")
ASSIMILATIONS = ("single", "multiple")
PRIORS = ("gaussian", "finite_size")


class IEnKSState(NamedTuple):
    """members (N, n) the ensemble at the current time; start (N, n) the window's start ensemble;
    obs (L, p) the observations after the start, oldest first (obs[j] at start + j + 1 intervals);
    held: how many of them are real; pending: how many of those wait for an analysis (int32 each);
    used (L,) the weight of each observation already in the start ensemble (0 to 1);
    lagged (K, N, n) the smoothed ensembles of the K cycles before the current one, lag 1 first
    (K = 0 without smoothing); inflation: the last analysis's implied anomaly inflation
    (finite-size prior; 1 otherwise)."""

    members: jax.Array
    start: jax.Array
    obs: jax.Array
    held: jax.Array
    pending: jax.Array
    used: jax.Array
    lagged: jax.Array
    inflation: jax.Array


def forecast_window(ensemble: jax.Array, advance, operator, params, length: int):
    """The members (N, n) forecast over ``length`` intervals: states (L, N, n) and their images (L, N, p)."""

    def step(x, _):
        x = advance(x, params)
        return x, (x, operator(x))

    _, (states, observed) = jax.lax.scan(step, ensemble, None, length=length)
    return states, observed


def window_search(prior: jax.Array, obs: jax.Array, weights: jax.Array, error_var, advance, operator, params,
                  max_iterations: int, tolerance, variant: str = "transform", bundle_scale=1e-4,
                  solver: str = "eigh", prior_count: float | None = None, frame=None):
    """Minimise J(w) by Gauss-Newton in ensemble space (module docstring): (E_0* (N, n), iterations, zeta).

    prior: E_0 (N, n), inflation already applied; obs (L, p) and weights (L,)
    the window's observations and the weight m_j this analysis gives each (0:
    not assimilated); error_var: R = diag(error_var), a scalar or (p,);
    advance(x, params): one analysis interval of the forecast model on members
    (N, n); operator: h on the last axis; prior_count: None for the Gaussian
    prior, c for the finite-size one; iterations (int32): Gauss-Newton steps
    taken; zeta: the prior's curvature at the minimum (N - 1 for the Gaussian); frame: takes the
    predicted observations (L, N, p) to the frame ``obs`` is in (masked, whitened; None: as they are).
    """
    members = prior.shape[0]
    floor = members - 1.0
    mean = prior.mean(axis=0)
    anomalies = prior - mean
    eye = jnp.eye(members)
    eps_n = 1.0 + 1.0 / members

    def gauss_newton(carry):
        w, transform, inverse_transform, count, _, _ = carry
        spread = bundle_scale * anomalies if variant == "bundle" else transform @ anomalies
        _, observed = forecast_window(mean + w @ anomalies + spread, advance, operator, params, obs.shape[0])
        if frame is not None:
            observed = frame(observed)
        obs_mean = observed.mean(axis=1)  # (L, p)
        deviations = observed - obs_mean[:, None, :]
        if variant == "bundle":
            sensitivities = deviations / bundle_scale
        else:
            sensitivities = jnp.einsum("ij,ljp->lip", inverse_transform, deviations)
        weighted = weights[:, None, None] * sensitivities / error_var  # m_j S_j R^-1, (L, N, p)
        gram = jnp.einsum("lip,ljp->ij", weighted, sensitivities)  # G = sum_j m_j S_j R^-1 S_j^T
        pull = jnp.einsum("lip,lp->i", weighted, obs - obs_mean)  # sum_j m_j S_j R^-1 (y_j - zbar_j)
        if prior_count is None:
            hessian = floor * eye + gram
            solved = solve_precision(hessian, floor, solver)
            new_w = w - solved.apply_inverse(floor * w - pull)
            new_transform = solved.inverse_root(jnp.sqrt(floor))
            # T^-1 = H^(1/2) / sqrt(N - 1) = H T / (N - 1): no second root needed.
            new_inverse = hessian @ new_transform / floor
            zeta = jnp.asarray(floor)
        else:
            # A Gauss-Newton step on the primal cost with the prior's positive part of the Hessian,
            # zeta I (zeta = c / (eps_N + |w|^2)): local steps, where the exact minimiser of the
            # linearised cost can leap into the heavy tail on one outlying innovation.
            zeta = prior_count / (eps_n + w @ w)
            solved = solve_precision(zeta * eye + gram, zeta, "eigh")
            new_w = w - solved.apply_inverse(zeta * w - pull)
            # The transform from the whole Hessian at the new w (the EnKF-N's at the minimum).
            zeta = prior_count / (eps_n + new_w @ new_w)
            hessian = zeta * eye + gram - (2.0 * zeta**2 / prior_count) * jnp.outer(new_w, new_w)
            h_evals, h_evecs = jnp.linalg.eigh(hessian)
            h_evals = jnp.maximum(h_evals, 1e-8 * zeta)  # positive semi-definite near the minimum
            new_transform = symmetric_square_root_transform(h_evals, h_evecs)
            new_inverse = (h_evecs * jnp.sqrt(h_evals)) @ h_evecs.T / jnp.sqrt(floor)
        size = jnp.sqrt(floor * jnp.mean((new_w - w) ** 2))
        return new_w, new_transform, new_inverse, count + 1, size, zeta

    def unfinished(carry):
        count, size = carry[3], carry[4]
        return (count < max_iterations) & (size >= tolerance)

    start = (jnp.zeros(members), eye, eye, jnp.asarray(0, jnp.int32), jnp.asarray(jnp.inf), jnp.asarray(floor))
    # At least one step runs, so the carried transform is sqrt(N - 1) H^(-1/2) of the last H.
    w, transform, _, count, _, zeta = jax.lax.while_loop(unfinished, gauss_newton, start)
    return mean + w @ anomalies + transform @ anomalies, count, zeta


def make_ienks(model, operator, members: int, window: int, shift: int, max_iterations: int, variant: str,
               steps_per_interval: int, pieces=frozenset(), solver: str = "eigh", lag: int = 0,
               assimilation: str = "single", prior: str = "gaussian", prior_extra_count: int = 1,
               estimated: tuple = ()) -> Filter:
    """The IEnKS of the module docstring with the forecast ``model``; settings["filter"] carries the
    inflation pieces, ``tolerance`` and ``bundle_scale``; ``lag`` > 0 keeps the smoothed ensembles of
    the last ``lag`` cycles (shift 1, lag <= window). With ``estimated`` (names of the forecast
    model's parameters) it offers ``analyse_augmented`` only: the window search runs on the
    augmented start ensemble [x_0, theta] (N, n + q), each member forecast through the window with
    its own theta, so the parameters are part of the control variable w as the state is
    (Bocquet & Sakov 2013, Nonlin. Processes Geophys. 20, 803-818; from memory)."""
    if not 1 <= shift <= window:
        raise ValueError(f"the shift must be from 1 to the window ({window}), got {shift}")
    if lag and (shift != 1 or lag > window):
        raise ValueError(f"the IEnKS smooths with shift 1 and a lag of at most its window ({window}), got "
                         f"shift {shift}, lag {lag}")
    if variant not in VARIANTS:
        raise ValueError(f"unknown IEnKS variant {variant!r}; known: {VARIANTS}")
    if assimilation not in ASSIMILATIONS or (assimilation == "multiple" and window % shift):
        raise ValueError(f"assimilation must be one of {ASSIMILATIONS} (multiple: the shift dividing the window), "
                         f"got {assimilation!r} with window {window}, shift {shift}")
    if prior not in PRIORS:
        raise ValueError(f"unknown IEnKS prior {prior!r}; known: {PRIORS}")
    size = model.size
    if estimated:
        # Augmented members [x, theta] (N, n + q): each member forecast with its own parameter values,
        # which persist through the window (assimbench/estimation).
        member_forecast = make_member_forecast(model, steps_per_interval, estimated)

        def advance(z, params):
            return jnp.concatenate([member_forecast(z[:, :size], z[:, size:], params), z[:, size:]], axis=1)
    else:
        advance = make_model_flow(model, steps_per_interval, ensemble=True)
    p = operator.size
    prior_count = float(members + prior_extra_count) if prior == "finite_size" else None
    # With the window equal to the shift every observation is seen once: multiple is single.
    multiple = assimilation == "multiple" and window > shift

    def search(key, start, window_obs, settings):
        del key  # deterministic
        obs, weights = window_obs
        f = settings["filter"]
        frame = operator.window_frame(settings, obs)  # the window's observations (W, p) in the filter's frame
        analysed, iterations, zeta = window_search(
            start, frame.obs, weights, frame.variance, advance, operator,
            settings["forecast_model"], max_iterations, f["tolerance"], variant, f["bundle_scale"], solver,
            prior_count, frame.apply)
        return analysed, (iterations, zeta)

    inflation_search = with_inflation(search, pieces)

    def inflated_search(key, start, window_obs, settings):
        """The inflation pieces act on the state columns of the start ensemble only."""
        if start.shape[1] == size:
            return inflation_search(key, start, window_obs, settings)
        analysed, parameters, info = inflation_search(key, start[:, :size], window_obs, settings,
                                                      parameters=start[:, size:])
        return jnp.concatenate([analysed, parameters], axis=1), info

    def init(key, initial_ensemble, settings):
        del key, settings
        zero = jnp.asarray(0, jnp.int32)
        return IEnKSState(members=initial_ensemble, start=initial_ensemble, obs=jnp.zeros((window, p)),
                          held=zero, pending=zero, used=jnp.zeros(window),
                          lagged=jnp.broadcast_to(initial_ensemble, (lag,) + initial_ensemble.shape),
                          inflation=jnp.asarray(1.0))

    def analyse(key, state, y, settings):
        held, pending = state.held + 1, state.pending + 1
        obs = state.obs.at[state.held].set(y)

        def assimilate(_):
            positions = jnp.arange(window)
            held_now = positions < held
            # What brings every held observation to its full weight from the start ensemble.
            rest = jnp.where(held_now, 1.0 - state.used, 0.0)
            weights = jnp.where(held_now, shift / window, 0.0) if multiple else rest
            analysed_start, (iterations, zeta) = inflated_search(key, state.start, (obs, weights), settings)
            trajectory, _ = forecast_window(analysed_start, advance, operator, settings["forecast_model"], window)
            searches = 1
            if multiple:  # the balancing search: the current and smoothed ensembles see every observation fully
                final_start, (balancing, _) = inflated_search(key, state.start, (obs, rest), settings)
                final, _ = forecast_window(final_start, advance, operator, settings["forecast_model"], window)
                iterations, searches = iterations + balancing, 2
            else:
                final_start, final = analysed_start, trajectory
            # Slide so that the next `shift` observations fit: m = held - (L - S) intervals, if positive.
            slide = jnp.maximum(held - (window - shift), 0)
            new_start = jnp.where(slide > 0, trajectory[jnp.maximum(slide - 1, 0)], analysed_start)
            used = jnp.roll(jnp.where(held_now, state.used + weights, 0.0), -slide)
            integrations = (iterations + searches) * window * members
            # Lag l: M_(held - l)(E_0*) = final[held - 1 - l] while l < held, else E_0* itself.
            lags = jnp.arange(1, lag + 1)
            lagged = jnp.where((lags < held)[:, None, None], final[jnp.maximum(held - 1 - lags, 0)], final_start[None])
            return (IEnKSState(members=final[held - 1], start=new_start, obs=jnp.roll(obs, -slide, axis=0),
                               held=held - slide, pending=jnp.asarray(0, jnp.int32),
                               used=jnp.where(positions < held - slide, used, 0.0), lagged=lagged,
                               inflation=jnp.sqrt((members - 1.0) / zeta)),
                    iterations, integrations)

        def wait(_):
            nothing = jnp.asarray(0, jnp.int32)
            return state._replace(obs=obs, held=held, pending=pending), nothing, nothing

        new_state, iterations, integrations = jax.lax.cond(pending == shift, assimilate, wait, None)
        # The cycle's own forecast of the members counts too: N member-intervals.
        info = {"iterations": iterations, "model_integrations": jnp.asarray(integrations + members, jnp.float64)}
        if prior_count is not None:
            info["inflation"] = new_state.inflation
        return new_state, info

    def analyse_augmented(key, state, parameters, y, settings):
        # The parameters are constant in time, so the window's start carries the current values.
        def widen(ensemble):
            return jnp.concatenate([ensemble, jnp.broadcast_to(parameters, ensemble.shape[:-2] + parameters.shape)],
                                   axis=-1)

        widened = state._replace(members=widen(state.members), start=widen(state.start), lagged=widen(state.lagged))
        new, info = analyse(key, widened, y, settings)
        narrowed = new._replace(members=new.members[:, :size], start=new.start[:, :size],
                                lagged=new.lagged[..., :size])
        return narrowed, new.members[:, size:], info

    return Filter(name="ienks", members=members, init=init, analyse=analyse,
                  reports_inflation=prior_count is not None,
                  analyse_augmented=analyse_augmented if estimated else None)


@dataclass
class IEnKSConfig(InflationConfig):
    """Iterative ensemble Kalman smoother: a window of ``window`` analysis intervals sliding by ``shift``
    (window = shift = 1: the iterative EnKF); Gauss-Newton in ensemble space for at most
    ``max_iterations`` steps, stopped when the increment's rms in prior standard deviations is below
    ``tolerance``; ``variant`` transform (anomalies rescaled by the last transform) or bundle
    (anomalies scaled by ``bundle_scale``, a finite-difference step); ``assimilation`` single (each
    observation once) or multiple (its weight split over the windows that see it, and a balancing
    search); ``prior`` gaussian or finite_size (the EnKF-N's, count members + prior_extra_count:
    leave inflation at 1); transform_solver as for the ETKF (the Gaussian prior's)."""

    name: str = "ienks"
    window: int = 1
    shift: int = 1
    max_iterations: int = 10
    tolerance: float = 1e-3
    variant: str = "transform"
    bundle_scale: float = 1e-4
    assimilation: str = "single"
    prior: str = "gaussian"
    prior_extra_count: int = 1
    transform_solver: str = "eigh"


def _check(c, model) -> None:
    check_inflation(c)
    window = c.integer("window", 1, "an integer >= 1 (analysis intervals)")
    c.integer("shift", 1, "an integer >= 1 (analysis intervals)")
    if int(c.node.shift) > window:
        c.fail("shift", c.node.shift, f"an integer from 1 to the window ({window})")
    c.integer("max_iterations", 1, "an integer >= 1")
    c.real("tolerance", "a finite number > 0", minimum=0.0)
    if c.node.variant not in VARIANTS:
        c.fail("variant", c.node.variant, " or ".join(VARIANTS))
    c.real("bundle_scale", "a finite number > 0", minimum=0.0)
    if c.node.assimilation not in ASSIMILATIONS:
        c.fail("assimilation", c.node.assimilation, " or ".join(ASSIMILATIONS))
    if c.node.assimilation == "multiple" and window % int(c.node.shift):
        c.fail("assimilation", c.node.assimilation,
               f"single, or multiple with a shift that divides the window (here window {window}, shift "
               f"{c.node.shift})")
    if c.node.prior not in PRIORS:
        c.fail("prior", c.node.prior, " or ".join(PRIORS))
    c.integer("prior_extra_count", 0, "0 (count N, Bocquet 2011) or 1 (N + 1, Bocquet et al. 2015)", maximum=1)
    check_transform_solver(c)


TRACED = INFLATION_KEYS + ("tolerance", "bundle_scale")


def step_counts(node) -> range:
    """The Gauss-Newton steps a cycle can report: 0 while observations wait (shift > 1), else one to
    max_iterations per search (two searches with multiple data assimilation)."""
    searches = 2 if node.assimilation == "multiple" and int(node.window) > int(node.shift) else 1
    return range(0 if int(node.shift) > 1 else searches, searches * int(node.max_iterations) + 1)


def _build(node, ctx) -> Filter:
    return make_ienks(ctx.model, ctx.operator, int(node.members), int(node.window), int(node.shift),
                      int(node.max_iterations), str(node.variant), ctx.steps_per_interval, inflation_pieces(node),
                      str(node.transform_solver), ctx.smoother_lag, str(node.assimilation), str(node.prior),
                      int(node.prior_extra_count), ctx.estimated)


SPEC = FilterSpec(
    name="ienks",
    schema=IEnKSConfig,
    build=_build,
    settings=lambda node: floats(node, TRACED),
    check=_check,
    traced=TRACED,
    widest=WIDEST,
    iterative=True,
    step_counts=step_counts,
    reports_inflation=lambda node: node.prior == "finite_size",
    smoothable=lambda node: int(node.shift) == 1,
    lag_limit=lambda node: int(node.window),
    windowed=True,
    estimates=True,
)
