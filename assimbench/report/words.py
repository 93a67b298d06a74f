"""Plain words for config keys, metrics and filters, for the report's tables, figures and lines.

A reader of a report should see "inflation 1.05" and "analysis RMSE", not
"filter.inflation=1.05" and "rmse_analysis". Every text here is a label only:
the CSV files keep the config keys as column names, so scripts can find them.
"""

from assimbench.observations.networks import rms_error

SETTING_WORDS = {
    "filter.members": "ensemble size",
    "filter.inflation": "inflation",
    "filter.radius": "localization radius",
    "filter.additive_std": "additive noise",
    "filter.rtpp": "RTPP",
    "filter.rtps": "RTPS",
    "filter.b_scale": "B scale",
    "filter.static_scale": "static B scale",
    "filter.ensemble_weight": "ensemble weight",
    "filter.jitter": "jitter",
    "filter.ess_threshold": "resampling threshold",
    "filter.adaptive": "adaptive inflation",
    "filter.window": "window",
    "observation.error_std": "observation error",
    "observation.correlation_length": "error correlation length",
    "observation.outage_probability": "outage share",
    "observation.outage_spell": "outage spell",
    "assumed.error_std": "assumed observation error",
    "assumed.correlation_length": "assumed correlation length",
    "initial_spread": "initial spread",
    "truth_noise_std": "truth model error",
    "estimate.parameters": "estimated",
    "estimate.initial_mean": "initial parameter guess",
    "estimate.initial_std": "initial parameter spread",
    "estimate.inflation": "parameter inflation",
    "estimate.noise": "parameter noise",
    "estimate.spread_floor": "parameter spread floor",
}

METRIC_WORDS = {
    "rmse_analysis": "analysis RMSE",
    "rmse_forecast": "forecast RMSE",
    "spread_analysis": "analysis spread",
    "spread_forecast": "forecast spread",
    "crps_analysis": "analysis CRPS",
    "innovation_ratio": "innovation ratio",
}

FILTER_WORDS = {
    "3dvar": "3D-Var",
    "4dvar": "4D-Var",
    "enkf": "EnKF",
    "enkfn": "EnKF-N",
    "ensrf": "EnSRF",
    "denkf": "DEnKF",
    "ienks": "IEnKS",
    "3denvar": "3DEnVar",
    "4denvar": "4DEnVar",
    "free": "free run",
    "climatology": "climatology",
}


def setting_word(key: str) -> str:
    """"filter.inflation" -> "inflation"; an unlisted key reads as its last part in words."""
    if key in SETTING_WORDS:
        return SETTING_WORDS[key]
    section, _, leaf = key.rpartition(".")
    words = leaf.replace("_", " ")
    return f"forecast model {words}" if section == "forecast_model" else words


def metric_word(name: str) -> str:
    return METRIC_WORDS.get(name, name.replace("_", " "))


def filter_word(name: str) -> str:
    return FILTER_WORDS.get(name, name.upper())


def value_text(value) -> str:
    """A setting's value as a reader writes it: 1.05, 20, none, yes."""
    if value is None:
        return "none"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, (tuple, list)):  # a list key (estimate.parameters): "forcing, rho", or none
        return ", ".join(value_text(v) for v in value) or "none"
    return str(value)


def describe(config: dict, keys) -> str:
    """"inflation 1.05, localization radius 4" for the given keys of a flattened config."""
    return ", ".join(f"{setting_word(k)} {value_text(config.get(k))}" for k in keys)


def point_name(filter_name: str, members, extras: str = "") -> str:
    """"ETKF, 20 members" (plus any other static settings in words)."""
    text = filter_word(filter_name)
    if members:
        text += f", {members} members"
    return f"{text}, {extras}" if extras else text


def observation_error_level(config: dict) -> float:
    """The observation error a state RMSE is read against, from a flat config ("observation.error_std"):
    error_std, or with per-station factors the root mean square of the stations' errors."""
    return rms_error(config.get("observation.error_std", float("nan")), config.get("observation.error_factors"))
