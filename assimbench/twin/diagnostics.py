"""Per-cycle diagnostics: pure functions of (truth, observations, states) returning
scalars or small vectors, evaluated inside the jitted cycle.

Conventions (stated once for the whole package):
- RMSE is the root mean square over variables of (ensemble mean - truth).
- Spread is the square root of the mean over variables of the ensemble
  variance with the unbiased (N - 1) denominator, so that for a calibrated
  ensemble time-mean spread and RMSE agree up to sqrt((N + 1) / N) (common
  practice; e.g. Fortin et al. 2014, J. Hydrometeor. 15, eq. 9). Weighted
  ensembles (particle filters) use weighted moments with the reliability
  denominator 1 - sum(w^2). A single-state filter reports spread 0.
- "forecast" is the ensemble the model produced, before any inflation;
  "analysis" is the filter's output.
- Innovations use the forecast ensemble: d_ob = y - mean_i h(x_f,i),
  d_oa = y - mean_i h(x_a,i), d_ab = d_ob - d_oa.
"""

from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

# Optional groups of series; the four RMSE/spread series are always stored.
OPTIONAL = ("spread_skill", "crps", "rank_histogram", "innovation", "desroziers", "ess", "increment", "inflation",
            "iterations", "by_station")

# Series undefined (NaN) on a cycle with no station reporting (innovations) or without an analysis
# (the Desroziers statistics, which need d_oa); their time means skip those cycles.
GAPPED = ("innovation_mean", "innovation_ratio", "desroziers_r", "desroziers_hbht", "desroziers_total")

# Groups computed only when asked for by name (diagnostics=[...]): they store a station axis per cycle.
OPT_IN = ("by_station",)

# The by_station group's per-cycle sums (station axis), and the per-station time means made from them
# after burn-in (each sum over the cycles the station reported, divided by their number).
STATION_SUMS = {
    "station_reports": "1 where the station reported this cycle, else 0",
    "station_innovation": "d_ob = y - h(forecast mean) at each station (0 where out)",
    "station_innovation_square": "d_ob^2 at each station (0 where out)",
    "station_desroziers_r": "d_oa d_ob at each station, d_oa = y - h(analysis mean) (0 where out)",
}
STATION_MEANS = {
    "station_innovation": "station_innovation_mean",
    "station_innovation_square": "station_desroziers_total",
    "station_desroziers_r": "station_desroziers_r",
}


class Series(NamedTuple):
    """What the result file needs to know of one stored series."""

    long_name: str
    units: str
    extra_dim: str | None = None  # e.g. "rank" for rank histograms


def series_catalogue(groups, members: int, smoother_lag: int = 0, outages: bool = False,
                     estimates: bool = False) -> dict:
    """name -> Series for the always-stored series, the chosen optional groups, with a fixed-lag
    smoother the smoothed errors at lags 1 .. smoother_lag, on a network with ``outages`` the
    number of stations that reported, and when the filter ``estimates`` parameters their analysis
    mean and spread."""
    out = {
        "rmse_forecast": Series("RMSE of the forecast ensemble mean against the truth", "state units"),
        "rmse_analysis": Series("RMSE of the analysis ensemble mean against the truth", "state units"),
        "spread_forecast": Series("spread (root mean ensemble variance) of the forecast ensemble", "state units"),
        "spread_analysis": Series("spread (root mean ensemble variance) of the analysis ensemble", "state units"),
    }
    if "spread_skill" in groups:
        out["spread_skill_forecast"] = Series("forecast spread divided by forecast RMSE", "1")
        out["spread_skill_analysis"] = Series("analysis spread divided by analysis RMSE", "1")
    if "crps" in groups:
        for when in ("forecast", "analysis"):
            out[f"crps_{when}"] = Series(f"CRPS of the {when} ensemble against the truth, mean over variables (Hersbach 2000)", "state units")
            out[f"crps_fair_{when}"] = Series(f"fair CRPS of the {when} ensemble against the truth, mean over variables", "state units")
    if "rank_histogram" in groups:
        out["rank_truth_forecast"] = Series("counts over variables of the truth's rank in the sorted forecast ensemble", "count", "rank")
        out["rank_observation_forecast"] = Series(
            "counts over stations of the observation's rank among forecast members plus observation noise", "count", "rank"
        )
    if "innovation" in groups:
        out["innovation_mean"] = Series("mean over stations of y - h(forecast)", "observation units")
        out["innovation_ratio"] = Series("mean squared innovation over mean (forecast variance in observation space + R)", "1")
    if "desroziers" in groups:
        out["desroziers_r"] = Series("mean over stations of d_oa d_ob (estimates R; Desroziers et al. 2005)", "observation units^2")
        out["desroziers_hbht"] = Series("mean over stations of d_ab d_ob (estimates H B H^T; Desroziers et al. 2005)", "observation units^2")
        out["desroziers_total"] = Series("mean over stations of d_ob d_ob (estimates H B H^T + R)", "observation units^2")
    if "ess" in groups:
        out["ess"] = Series("effective sample size 1 / sum(w^2) after the weight update", "members")
    if "inflation" in groups:
        out["inflation"] = Series("anomaly inflation factor the analysis used (adaptive) or implied (EnKF-N)", "1")
    if "iterations" in groups:
        out["iterations"] = Series("Gauss-Newton steps of the window search this cycle (0: no analysis)", "1")
        out["model_integrations"] = Series(
            "forecast-model integrations this cycle, in member-intervals (one member over one analysis interval)",
            "member-intervals")
    if "by_station" in groups:
        for name, meaning in STATION_SUMS.items():
            out[name] = Series(meaning, "1" if name == "station_reports" else "observation units"
                               + ("^2" if name.endswith(("square", "_r")) else ""), "station")
    if outages:
        out["stations_seen"] = Series("stations that reported this cycle (the others were out)", "stations")
    if smoother_lag:
        out["rmse_smoothed"] = Series("RMSE of the smoothed ensemble mean of the cycle `lag` cycles before, against "
                                      "its truth", "state units", "lag")
        out["spread_smoothed"] = Series("spread of the smoothed ensemble of the cycle `lag` cycles before",
                                        "state units", "lag")
    if estimates:
        out["parameter_mean"] = Series("analysis ensemble mean of each estimated parameter", "parameter units",
                                       "parameter")
        out["parameter_spread"] = Series("analysis spread ((N - 1)-normalised std) of each estimated parameter",
                                         "parameter units", "parameter")
    if "increment" in groups:
        out["increment_norm"] = Series("root mean square over variables of the analysis increment of the mean", "state units")
    return out


def available_groups(members: int, weighted: bool, reports_inflation: bool = False, iterative: bool = False) -> tuple:
    """The optional groups a filter of this kind can give."""
    if members == 1:
        return ("desroziers", "increment", "by_station")
    groups = ["spread_skill", "crps", "innovation", "desroziers", "increment", "by_station"]
    groups += ["ess"] if weighted else ["rank_histogram"]
    groups += ["inflation"] if reports_inflation else []
    groups += ["iterations"] if iterative else []
    return tuple(g for g in OPTIONAL if g in groups)


def rmse(estimate: jax.Array, truth: jax.Array) -> jax.Array:
    """sqrt(mean_i (estimate_i - truth_i)^2); estimate, truth: (n,)."""
    return jnp.sqrt(jnp.mean((estimate - truth) ** 2))


def spread(members: jax.Array) -> jax.Array:
    """sqrt(mean_i var_i) with var the (N - 1)-normalised member variance; members (N, n)."""
    if members.shape[0] == 1:
        return jnp.zeros((), members.dtype)
    return jnp.sqrt(jnp.mean(jnp.var(members, axis=0, ddof=1)))


def normalised_weights(state) -> jax.Array:
    """(N,) weights of a state: exp(log_weights) or 1/N."""
    log_weights = getattr(state, "log_weights", None)
    n = state.members.shape[0]
    return jnp.full(n, 1.0 / n) if log_weights is None else jnp.exp(log_weights)


def ensemble_mean_and_spread(state):
    """(mean (n,), spread scalar) of a filter state, weighted when it has ``log_weights``."""
    members = state.members
    if getattr(state, "log_weights", None) is None:
        return members.mean(axis=0), spread(members)
    weights = normalised_weights(state)
    mean = weights @ members
    variance = (weights @ (members - mean) ** 2) / (1.0 - jnp.sum(weights**2))
    return mean, jnp.sqrt(jnp.mean(variance))


# Up to this many members the pair term is summed directly (a fused elementwise
# reduction); beyond it the sorted form avoids N^2 work (XLA's sort is slow on the CPU).
PAIRWISE_LIMIT = 64


def ensemble_crps(members: jax.Array, weights, truth: jax.Array):
    """(CRPS, fair CRPS), each the mean over variables; members (N, n), weights (N,), truth (n,).

    CRPS = sum_i w_i |x_i - y| - 1/2 sum_ij w_i w_j |x_i - x_j| (Hersbach 2000, Wea.
    Forecasting 15; Gneiting & Raftery 2007, eq. 20), which with equal weights is
    mean |x_i - y| - 1/(2 N^2) sum |x_i - x_j|. The fair variant divides the pair
    term by 1 - sum(w^2) (with equal weights: 1/(2 N (N - 1)); Ferro 2014, QJRMS 140).
    For large N the pair sum uses the sorted members: sum_ij w_i w_j |x_i - x_j| =
    2 sum_i w_(i) x_(i) (2 C_i - w_(i) - 1), C the cumulative sorted weights.
    ``weights=None`` means equal weights (a cheaper path).
    """
    n_members = members.shape[0]
    if weights is None and n_members <= PAIRWISE_LIMIT:
        absolute = jnp.mean(jnp.abs(members - truth), axis=0)
        pairs = jnp.sum(jnp.abs(members[:, None, :] - members[None, :, :]), axis=(0, 1)) / n_members**2
        fair_factor = n_members / (n_members - 1.0) if n_members > 1 else 1.0
        return jnp.mean(absolute - 0.5 * pairs), jnp.mean(absolute - 0.5 * fair_factor * pairs)
    if weights is None:
        weights = jnp.full(n_members, 1.0 / n_members)
    absolute = weights @ jnp.abs(members - truth)  # (n,)
    if members.shape[0] <= PAIRWISE_LIMIT:
        gaps = jnp.abs(members[:, None, :] - members[None, :, :])  # (N, N, n)
        pairs = jnp.sum((weights[:, None] * weights[None, :])[:, :, None] * gaps, axis=(0, 1))
    else:
        order = jnp.argsort(members, axis=0)
        sorted_members = jnp.take_along_axis(members, order, axis=0)
        sorted_weights = weights[order]  # (N, n)
        cumulative = jnp.cumsum(sorted_weights, axis=0)
        pairs = 2.0 * jnp.sum(sorted_weights * sorted_members * (2.0 * cumulative - sorted_weights - 1.0), axis=0)
    crps = absolute - 0.5 * pairs
    purity = 1.0 - jnp.sum(weights**2)
    fair = absolute - 0.5 * pairs / jnp.where(purity > 0, purity, 1.0)
    return jnp.mean(crps), jnp.mean(fair)


def rank_perturbations(key: jax.Array, shape: tuple) -> jax.Array:
    """Standard normal draws, (N, p) float32, from 16 random bits each, for the observation rank histogram.

    z = sqrt(2) erfinv(2u - 1) with u = (k + 1/2) / 2^16 and k uniform on 0 .. 2^16 - 1 (the
    inverse-CDF method, e.g. Devroye 1986, Sec. 2.1): two draws per 32-bit word halve the
    random-number work, the per-cycle cost of this diagnostic. The quantisation moves no draw by
    more than a 2^-16 step in probability and cuts the tails at |z| = 4.33 (1.5e-5 lies beyond);
    only ranks are decided by these draws.
    """
    count = int(np.prod(shape))
    words = jax.random.bits(key, ((count + 1) // 2,), jnp.uint32)
    halves = jnp.concatenate([words >> 16, words & 0xFFFF])[:count].astype(jnp.float32)
    uniform = (halves + 0.5) / 65536.0
    return (np.float32(np.sqrt(2.0)) * jax.scipy.special.erfinv(2.0 * uniform - 1.0)).reshape(shape)


def rank_counts(members: jax.Array, verifying: jax.Array, counted=None) -> jax.Array:
    """Counts over variables of the rank of ``verifying`` in the ensemble: (N + 1,) int32.

    Rank r = number of members strictly below the verifying value (Hamill 2001,
    Mon. Wea. Rev. 129, sec. 2); members (N, m), verifying (m,); ``counted`` (m,) bool
    leaves the other variables out (None: all counted).
    """
    ranks = jnp.sum(members < verifying, axis=0)
    # A one-hot compare and sum, not a scatter: it fuses into one small loop.
    hits = ranks[:, None] == jnp.arange(members.shape[0] + 1)[None, :]
    if counted is not None:
        hits = hits & counted[:, None]
    return jnp.sum(hits, axis=0, dtype=jnp.int32)


def make_cycle_diagnostics(groups, operator, weighted: bool):
    """Return ``diagnose(rank_noise, truth, y, forecast, analysis, info, settings) -> dict`` of this cycle's series.

    rank_noise: (N, p) standard normal draws that perturb the members for the
    observation rank histogram (the cycle draws them per chunk); unused, and
    may be None, when that group is off.
    """
    groups = tuple(groups)

    def diagnose(rank_noise, truth, y, forecast, analysis, info, settings):
        mean_f, spread_f = ensemble_mean_and_spread(forecast)
        mean_a, spread_a = ensemble_mean_and_spread(analysis)
        out = {
            "rmse_forecast": rmse(mean_f, truth),
            "rmse_analysis": rmse(mean_a, truth),
            "spread_forecast": spread_f,
            "spread_analysis": spread_a,
        }
        if "spread_skill" in groups:
            out["spread_skill_forecast"] = spread_f / out["rmse_forecast"]
            out["spread_skill_analysis"] = spread_a / out["rmse_analysis"]
        if "crps" in groups:
            for when, state in (("forecast", forecast), ("analysis", analysis)):
                weights = normalised_weights(state) if weighted else None
                out[f"crps_{when}"], out[f"crps_fair_{when}"] = ensemble_crps(state.members, weights, truth)
        error_std = operator.error_std_of(settings)
        seen, mean = None, jnp.mean
        if operator.outages:  # a missing station (NaN in y) is left out of every station mean
            seen = jnp.isfinite(y)
            y = jnp.where(seen, y, 0.0)
            out["stations_seen"] = jnp.sum(seen).astype(jnp.float64)
            count = jnp.sum(seen)
            mean = lambda v: jnp.where(count > 0, jnp.sum(jnp.where(seen, v, 0.0)) / jnp.maximum(count, 1), jnp.nan)
        if "rank_histogram" in groups:
            out["rank_truth_forecast"] = rank_counts(forecast.members, truth)
            noisy = operator(forecast.members) + jax.vmap(lambda e: operator.noise(e, settings))(rank_noise)
            out["rank_observation_forecast"] = rank_counts(noisy, y, seen)
        needs_innovations = "innovation" in groups or "desroziers" in groups or "by_station" in groups
        if needs_innovations:
            obs_f = operator(forecast.members)
            w_f = normalised_weights(forecast)
            d_ob = y - w_f @ obs_f
        if "innovation" in groups:
            variance = w_f @ (obs_f - w_f @ obs_f) ** 2 / (1.0 - jnp.sum(w_f**2))
            out["innovation_mean"] = mean(d_ob)
            noise = jnp.mean(error_std**2) if seen is None else mean(jnp.broadcast_to(error_std**2, y.shape))
            out["innovation_ratio"] = mean(d_ob**2) / (mean(variance) + noise)
        if "desroziers" in groups or "by_station" in groups:
            d_oa = y - normalised_weights(analysis) @ operator(analysis.members)
        analysed = info.get("analysed")  # 0 on a cycle a filter skipped (analysis_every > 1): no d_oa
        if "by_station" in groups:
            reported = jnp.ones_like(y) if seen is None else seen.astype(jnp.float64)
            if analysed is not None:
                reported = reported * analysed
            out["station_reports"] = reported
            out["station_innovation"] = reported * d_ob
            out["station_innovation_square"] = reported * d_ob * d_ob
            out["station_desroziers_r"] = reported * d_oa * d_ob
        if "desroziers" in groups:
            out["desroziers_r"] = mean(d_oa * d_ob)
            out["desroziers_hbht"] = mean((d_ob - d_oa) * d_ob)
            out["desroziers_total"] = mean(d_ob * d_ob)
            if analysed is not None:
                for name in ("desroziers_r", "desroziers_hbht", "desroziers_total"):
                    out[name] = jnp.where(analysed > 0, out[name], jnp.nan)
        if "ess" in groups:
            out["ess"] = info["ess"]
        if "inflation" in groups:
            out["inflation"] = info["inflation"]
        if "iterations" in groups:
            out["iterations"] = info["iterations"]
            out["model_integrations"] = info["model_integrations"]
        if "increment" in groups:
            out["increment_norm"] = rmse(mean_a, mean_f)
        return out

    return diagnose
