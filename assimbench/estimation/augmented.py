"""Joint state and parameter estimation by state augmentation.

Every member i carries its own values theta_i (q,) of the estimated
parameters besides its state x_i. The forecast integrates each member with
its own values (the parameters persist: d theta / dt = 0), and the analysis
treats z_i = [x_i, theta_i] as one augmented state: the parameters take the
information of the observations through their ensemble covariance with the
predicted observations (common practice; e.g. Evensen 2009, Data
Assimilation: The Ensemble Kalman Filter, 2nd ed., Springer, the chapter on
parameter estimation; from memory). Parameters are global: a localizing filter updates them with no
distance taper (the LETKF with the mean of its local transforms, the serial
EnSRF with weight 1 for every observation). The IEnKS searches the augmented
start of its window, each member forecast through the window with its own
values (so the spread keeping before an analysis acts on the parameters the
window is forecast with; with a shift S > 1 it acts at every cycle, S times
between two analyses). The state's inflation pieces do
not act on them; their spread is kept by the pieces of this module, in this
order:

    before the analysis   theta'_i <- a theta'_i                      (estimate.inflation = a)
                          theta_i  <- theta_i + s q sigma_0 (e_i - ebar)  (estimate.noise = q)
    after the analysis    theta'_i <- theta'_i max(1, f sigma_0 / sigma_a)  (estimate.spread_floor = f)

with sigma_0 the parameter's initial_std, sigma_a its analysis spread
((N - 1)-normalised) and e_i ~ N(0, I). The floor is the conditional
covariance inflation of Aksoy, Zhang & Nielsen-Gammon (2006, Mon. Wea.
Rev. 134, 2951-2970; from memory): only a spread that fell below it is
restored. The initial values are initial_mean + initial_std e_i with the
e_i centred and scaled to unit sample spread, so the prior's sample mean
and spread are exactly the configured ones.
"""

from typing import NamedTuple

import jax
import jax.numpy as jnp

from assimbench.filters.base import Filter

PIECES = ("noise", "spread_floor")


class EstimatingState(NamedTuple):
    """members (N, n) the state part; parameters (N, q) each member's parameter values; inner: the
    filter's own state, whose members are the last analysis."""

    members: jax.Array
    parameters: jax.Array
    inner: tuple


def standard_draw(key, members: int, count: int) -> jax.Array:
    """(N, q) standard normal draws centred and scaled to zero sample mean and unit sample spread."""
    draw = jax.random.normal(key, (members, count))
    draw = draw - draw.mean(axis=0)
    return draw / jnp.std(draw, axis=0, ddof=1)


def floor_spread(parameters: jax.Array, floor) -> jax.Array:
    """Anomalies whose (N - 1)-normalised spread is below ``floor`` (q,) scaled up to it."""
    mean = parameters.mean(axis=0)
    spread = jnp.std(parameters, axis=0, ddof=1)
    factor = jnp.where(spread < floor, floor / jnp.where(spread > 0, spread, 1.0), 1.0)
    return mean + factor * (parameters - mean)


def with_parameters(filt: Filter, count: int, pieces=frozenset()) -> Filter:
    """``filt`` estimating ``count`` parameters by state augmentation (module docstring); ``pieces``:
    the spread-keeping pieces switched on for the job besides the inflation (a subset of PIECES).
    The filter must offer ``analyse_augmented``."""
    if filt.analyse_augmented is None:
        raise ValueError(f"filter {filt.name} cannot estimate parameters")
    unknown = set(pieces) - set(PIECES)
    if unknown:
        raise ValueError(f"unknown spread-keeping pieces {sorted(unknown)}; known: {PIECES}")

    def init(key, initial_ensemble, settings):
        e = settings["estimate"]
        draw = standard_draw(jax.random.fold_in(key, 1), initial_ensemble.shape[0], count)
        parameters = e["initial_mean"] + e["initial_std"] * draw
        return EstimatingState(members=initial_ensemble, parameters=parameters,
                               inner=filt.init(key, initial_ensemble, settings))

    def analyse(key, state, y, settings):
        e = settings["estimate"]
        parameters = state.parameters
        mean = parameters.mean(axis=0)
        parameters = mean + e["inflation"] * (parameters - mean)
        if "noise" in pieces:
            noise = jax.random.normal(jax.random.fold_in(key, 11), parameters.shape)
            parameters = parameters + e["noise"] * e["initial_std"] * (noise - noise.mean(axis=0))
        inner, parameters, info = filt.analyse_augmented(key, state.inner._replace(members=state.members),
                                                         parameters, y, settings)
        if "spread_floor" in pieces:
            parameters = floor_spread(parameters, e["spread_floor"] * e["initial_std"])
        return EstimatingState(members=inner.members, parameters=parameters, inner=inner), info

    return filt._replace(init=init, analyse=analyse, analyse_lagged=None, analyse_augmented=None)
