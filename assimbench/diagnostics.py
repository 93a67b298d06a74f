"""Per-cycle diagnostics: pure functions of (truth, ensemble) returning scalars.

RMSE is the root mean square over variables of (ensemble mean - truth).
Spread is the square root of the mean over variables of the ensemble variance
with the unbiased (N - 1) denominator, so that for a calibrated ensemble the
time-mean spread and RMSE agree up to a factor sqrt((N + 1) / N) (common
practice; e.g. Fortin et al. 2014, J. Hydrometeor. 15, eq. 9).
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
    return jnp.sqrt(jnp.mean(jnp.var(members, axis=0, ddof=1)))


def cycle_diagnostics(truth: jax.Array, forecast: jax.Array, analysis: jax.Array) -> dict:
    """The stored scalars of one cycle. forecast, analysis: (N, n) ensembles; truth (n,)."""
    return {
        "rmse_forecast": rmse(forecast.mean(axis=0), truth),
        "rmse_analysis": rmse(analysis.mean(axis=0), truth),
        "spread_forecast": spread(forecast),
        "spread_analysis": spread(analysis),
    }
