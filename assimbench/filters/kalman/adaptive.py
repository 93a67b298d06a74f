"""Adaptive multiplicative inflation estimated from innovation statistics, carried in the filter state.

Miyoshi (2011, Mon. Wea. Rev. 139, 1519-1535), in its global form (one factor
for the whole state; Li, Kalnay & Miyoshi 2009 for the observation estimate).
With the forecast ensemble's uninflated covariance P, innovation
d = y - mean(h(x_i)) and R = r I over p stations, the innovation identity
E[d d^T] = rho H P H^T + R (common practice; Desroziers et al. 2005) gives the
observation estimate of the covariance inflation rho

    rho_o = (d^T d - tr R) / tr(H P H^T),

whose variance, for p nearly independent chi-square terms, is about

    v_o = (2 / p) ((rho_b tr(H P H^T) + tr R) / tr(H P H^T))^2.

A Gaussian prior rho_b with fixed variance v_b = adaptive_std^2 (the previous
cycle's estimate: persistence) is updated as the product of two Gaussians,

    rho_a = (v_o rho_b + v_b rho_o) / (v_o + v_b),

clipped to [adaptive_min^2, adaptive_max^2], and the prior anomalies are
multiplied by sqrt(rho_a) before the filter's update. The state carries rho;
the per-cycle anomaly factor sqrt(rho_a) is reported as ``inflation``.
``filter.inflation`` is the starting anomaly factor, sqrt(rho_0).

Local form (the LETKF; Miyoshi 2011, Sec. 2b, from memory): every grid point
g keeps its own rho_g, estimated from the observations it sees, each weighted
by its localization weight w_gk as in the R-localization,

    rho_o,g = (sum_k w_gk d_k^2 - r sum_k w_gk) / sum_k w_gk s_k^2,
    v_o,g = (2 / sum_k w_gk) ((rho_b,g sum_k w_gk s_k^2 + r sum_k w_gk) / sum_k w_gk s_k^2)^2,

s_k^2 the forecast variance at station k; the prior anomalies of variable g
are multiplied by sqrt(rho_g). With all weights 1 this is the global form at
every grid point; ``inflation`` reports the mean factor over grid points.
"""

from dataclasses import dataclass
from typing import NamedTuple

import jax
import jax.numpy as jnp

from assimbench.config.spec import NodeChecks, floats
from assimbench.filters.base import Filter
from assimbench.filters.kalman.inflation import InflationConfig, check_inflation, inflation_settings, with_inflation


class AdaptiveState(NamedTuple):
    """members (N, n) and rho, the current covariance inflation estimate (scalar)."""

    members: jax.Array
    rho: jax.Array


def update_inflation(rho_b, obs_members, y, error_var, prior_variance, local=None, seen=None):
    """(rho_a before clipping) from the prior ``rho_b`` and this cycle's innovations (equations above).

    obs_members (N, p) uninflated forecast members in observation space; y (p,);
    error_var the scalar r (or one per station, whose sum replaces p r); prior_variance v_b. Global form: rho_b scalar,
    ``local`` None. Local form: rho_b (n,) and ``local`` = (index, weight),
    each (n, K): the stations each grid point sees and their localization
    weights (0 for padding), as the LETKF's observation windows. ``seen`` (p,) bool: the stations that
    reported this cycle (None: all); a missing one (0 in y and obs_members) is left out of every sum.
    """
    p = y.shape[0]
    if seen is not None:
        p = jnp.sum(seen)
        error_var = jnp.where(seen, error_var, 0.0)
        if local is not None:
            local = (local[0], local[1] * seen[local[0]])
    d = y - obs_members.mean(axis=0)
    variance = jnp.var(obs_members, axis=0, ddof=1)  # s_k^2, (p,)
    if local is None:
        count, signal, departure = p, jnp.sum(variance), d @ d
    else:
        index, weight = local
        count = weight.sum(axis=1)
        signal, departure = jnp.sum(weight * variance[index], axis=1), jnp.sum(weight * (d * d)[index], axis=1)
    if jnp.ndim(error_var) == 0:
        noise = count * error_var
    else:  # one variance per station: their sum over the stations seen
        noise = jnp.sum(error_var) if local is None else jnp.sum(weight * error_var[index], axis=1)
    rho_o = (departure - noise) / signal
    v_o = 2.0 / count * ((rho_b * signal + noise) / signal) ** 2
    updated = (v_o * rho_b + prior_variance * rho_o) / (v_o + prior_variance)
    if seen is None:
        return updated
    return jnp.where(count > 0, updated, rho_b)  # no station seen: nothing to learn from


def adaptive_ensemble_filter(name: str, members: int, update, operator, pieces=frozenset(),
                             local_windows=None, state_size: int | None = None, global_update=None) -> Filter:
    """A Filter from ``update(key, prior, y, settings)`` on (N, n) arrays with the adaptive factor
    in place of the fixed ``filter.inflation``, and the other inflation pieces composed around it.

    ``local_windows(settings) -> (index, weight)``, each (n, K), switches on the local form (one
    factor per grid point of a ``state_size`` state); without it one global factor is estimated."""
    analyse_members = with_inflation(update, pieces, global_update)

    def init(key, initial_ensemble, settings):
        del key
        start = settings["filter"]["inflation"] ** 2
        rho = start if local_windows is None else jnp.full(state_size, start, dtype=jnp.float64)
        return AdaptiveState(members=initial_ensemble, rho=rho)

    def adapted(state, y, settings):
        """(rho_a, the settings with its anomaly factor in place of filter.inflation)."""
        f = settings["filter"]
        white = operator.whiten(settings, y)  # a correlated R: whitened innovations, tapered by station
        local = None if local_windows is None else local_windows(settings)
        rho = update_inflation(state.rho, white.observe(state.members), white.obs, white.variance,
                               f["adaptive_std"] ** 2, local, white.seen)
        rho = jnp.clip(rho, f["adaptive_min"] ** 2, f["adaptive_max"] ** 2)
        factor = jnp.sqrt(rho)  # scalar, or (n,): multiplies the anomalies of each variable
        return rho, {**settings, "filter": {**f, "inflation": factor}}

    def analyse(key, state, y, settings):
        rho, settings = adapted(state, y, settings)
        posterior, info = analyse_members(key, state.members, y, settings)
        return AdaptiveState(members=posterior, rho=rho), {**info, "inflation": jnp.mean(jnp.sqrt(rho))}

    def analyse_lagged(key, state, lagged, y, settings):
        # The factor is estimated from the current forecast and inflates it alone, as a fixed factor does.
        rho, settings = adapted(state, y, settings)
        posterior, lagged, info = analyse_members(key, state.members, y, settings, lagged)
        return AdaptiveState(members=posterior, rho=rho), lagged, {**info, "inflation": jnp.mean(jnp.sqrt(rho))}

    def analyse_augmented(key, state, parameters, y, settings):
        # As with lagged columns: the factor inflates the current forecast, not the parameters.
        rho, settings = adapted(state, y, settings)
        posterior, parameters, info = analyse_members(key, state.members, y, settings, parameters=parameters)
        return AdaptiveState(members=posterior, rho=rho), parameters, {**info, "inflation": jnp.mean(jnp.sqrt(rho))}

    return Filter(name=name, members=members, init=init, analyse=analyse, reports_inflation=True,
                  analyse_lagged=analyse_lagged, analyse_augmented=analyse_augmented)


@dataclass
class AdaptiveInflationConfig(InflationConfig):
    """With adaptive=true the anomaly factor is estimated every cycle from the innovations
    (Miyoshi 2011), starting at ``inflation``; adaptive_std is the standard deviation of the prior
    of the covariance factor per cycle (sets how fast it adapts); the anomaly factor is kept within
    [adaptive_min, adaptive_max]. The default 0.1 adapts within a few hundred cycles on the demo
    ring (measured: 0.05 needs thousands, 0.5 is noisy)."""

    adaptive: bool = False
    adaptive_std: float = 0.1
    adaptive_min: float = 1.0
    adaptive_max: float = 2.0


ADAPTIVE_KEYS = ("adaptive_std", "adaptive_min", "adaptive_max")


def check_adaptive_inflation(c: NodeChecks) -> None:
    """The inflation pieces, and the adaptive factor's prior and bounds when it is on."""
    check_inflation(c)
    if not c.node.adaptive:
        return
    c.real("adaptive_std", "a finite standard deviation > 0", minimum=0.0)
    low = c.real("adaptive_min", "a finite anomaly factor >= 1", minimum=1.0, strict=False)
    high = c.real("adaptive_max", "a finite anomaly factor >= adaptive_min", minimum=1.0, strict=False)
    if high < low:
        c.fail("adaptive_max", high, f"an anomaly factor >= {c.name('adaptive_min')}={low} (bounds reversed)")
    start = float(c.node.inflation)
    if not low <= start <= high:
        c.fail("inflation", start, f"a starting factor within [adaptive_min, adaptive_max] = [{low}, {high}]")


def adaptive_inflation_settings(node) -> dict:
    """The traced inflation strengths, with the adaptive factor's when it is on."""
    values = inflation_settings(node)
    if node.adaptive:
        values.update(floats(node, ADAPTIVE_KEYS))
    return values
