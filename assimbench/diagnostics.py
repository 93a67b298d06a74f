"""Per-cycle diagnostics: pure functions of (truth, ensemble) returning scalars.

RMSE is the root mean square over variables of (ensemble mean - truth).
Spread is the square root of the mean over variables of the ensemble variance
with the unbiased (N - 1) denominator, so that for a calibrated ensemble the
time-mean spread and RMSE agree up to a factor sqrt((N + 1) / N) (common
practice; e.g. Fortin et al. 2014, J. Hydrometeor. 15, eq. 9). For a weighted
ensemble (particle filters) the mean and variance are weighted, the variance
with the reliability-weight denominator 1 - sum(w^2) (which is N - 1 over N
for equal weights). A single-state filter (3D-Var, climatology) reports
spread 0: it makes no claim of uncertainty.
"""

import jax
import jax.numpy as jnp

# Names of the per-cycle series every run stores, with their long names.
CYCLE_SERIES = {
    "rmse_forecast": "RMSE of the forecast ensemble mean against the truth",
    "rmse_analysis": "RMSE of the analysis ensemble mean against the truth",
    "spread_forecast": "spread (root mean ensemble variance) of the forecast ensemble",
    "spread_analysis": "spread (root mean ensemble variance) of the analysis ensemble",
}


def rmse(estimate: jax.Array, truth: jax.Array) -> jax.Array:
    """sqrt(mean_i (estimate_i - truth_i)^2); estimate, truth: (n,)."""
    return jnp.sqrt(jnp.mean((estimate - truth) ** 2))


def spread(members: jax.Array) -> jax.Array:
    """sqrt(mean_i var_i) with var the (N - 1)-normalised member variance; members (N, n)."""
    if members.shape[0] == 1:
        return jnp.zeros((), members.dtype)
    return jnp.sqrt(jnp.mean(jnp.var(members, axis=0, ddof=1)))


def ensemble_mean_and_spread(state):
    """(mean (n,), spread scalar) of a filter state, weighted when it has ``log_weights``."""
    members = state.members
    log_weights = getattr(state, "log_weights", None)
    if log_weights is None:
        return members.mean(axis=0), spread(members)
    weights = jnp.exp(log_weights)
    mean = weights @ members
    variance = (weights @ (members - mean) ** 2) / (1.0 - jnp.sum(weights**2))
    return mean, jnp.sqrt(jnp.mean(variance))


def cycle_diagnostics(truth: jax.Array, forecast, analysis) -> dict:
    """The stored scalars of one cycle; forecast and analysis are filter states, truth (n,)."""
    mean_f, spread_f = ensemble_mean_and_spread(forecast)
    mean_a, spread_a = ensemble_mean_and_spread(analysis)
    return {
        "rmse_forecast": rmse(mean_f, truth),
        "rmse_analysis": rmse(mean_a, truth),
        "spread_forecast": spread_f,
        "spread_analysis": spread_a,
    }
