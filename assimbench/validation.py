"""Value ranges and cross-key rules, checked before any work starts.

Each failure is a :class:`ConfigError` whose message is one line naming the
key, the value given and what is allowed.
"""

import math

from omegaconf import DictConfig


class ConfigError(ValueError):
    """A configuration value that is not allowed; the message is one line."""


def _fail(key: str, value, allowed: str):
    raise ConfigError(f"{key}={value!r} is not allowed: {allowed}")


def _integer(cfg, key: str, minimum: int, allowed: str):
    value = _get(cfg, key)
    if isinstance(value, bool) or not isinstance(value, int) or value < minimum:
        _fail(key, value, allowed)
    return value


def _real(cfg, key: str, allowed: str, minimum=None, strict=True):
    value = _get(cfg, key)
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        _fail(key, value, allowed)
    if minimum is not None and (value <= minimum if strict else value < minimum):
        _fail(key, value, allowed)
    return float(value)


def _get(cfg, key: str):
    node = cfg
    for part in key.split("."):
        node = node[part]
    return node


def steps_per_cycle(interval: float, dt: float) -> int:
    """Number of RK4 steps in one interval, or 0 when it is not a whole multiple of dt."""
    steps = round(interval / dt)
    if steps >= 1 and abs(steps * dt - interval) <= 1e-9 * max(interval, dt):
        return steps
    return 0


def _in_range(cfg, key, low, high, allowed):
    value = _real(cfg, key, allowed)
    if not low <= value <= high:
        _fail(key, value, allowed)


def _check_filter(cfg, model_name: str, ring: bool) -> None:
    """Ranges of the filter keys present in this filter's schema, and the radius rule
    (``model_name``, ``ring``: the forecast model's name and whether its variables sit on a ring)."""
    from assimbench.registry import LOCALIZED

    node = cfg.filter
    keys = set(node.keys())
    if "members" in keys:
        _integer(cfg, "filter.members", 2, "an integer >= 2")
    if "inflation" in keys:
        _real(cfg, "filter.inflation", "a finite factor >= 1 (1 = no inflation)", minimum=1.0, strict=False)
    if "additive_std" in keys:
        _real(cfg, "filter.additive_std", "a finite standard deviation >= 0 (0 = off)", minimum=0.0, strict=False)
    if "rtpp" in keys:
        _in_range(cfg, "filter.rtpp", 0.0, 1.0, "a coefficient from 0 (off) to 1")
    if "rtps" in keys:
        _in_range(cfg, "filter.rtps", 0.0, 2.0, "a coefficient from 0 (off) to 2")
    if "radius" in keys and node.radius is not None:
        _real(cfg, "filter.radius", "a finite half-width > 0 in grid units, or null for no localization", minimum=0.0)
        if node.name in LOCALIZED and not ring:
            _fail(
                "filter.radius",
                node.radius,
                f"null: {model_name} has no distance between variables (use filter.radius=null)",
            )
    if "b_scale" in keys:
        _real(cfg, "filter.b_scale", "a finite factor > 0", minimum=0.0)
    if "iterations" in keys:
        _integer(cfg, "filter.iterations", 1, "an integer >= 1")
    if "inner_iterations" in keys:
        _integer(cfg, "filter.inner_iterations", 1, "an integer >= 1 (conjugate-gradient steps)")
    if "prior_extra_count" in keys:
        allowed = "0 (count N, Bocquet 2011) or 1 (N + 1, Bocquet et al. 2015)"
        if _integer(cfg, "filter.prior_extra_count", 0, allowed) > 1:
            _fail("filter.prior_extra_count", node.prior_extra_count, allowed)
    if "window" in keys:
        _integer(cfg, "filter.window", 1, "an integer >= 1 (analysis intervals)")
    if node.get("adaptive", False):
        _real(cfg, "filter.adaptive_std", "a finite standard deviation > 0", minimum=0.0)
        low = _real(cfg, "filter.adaptive_min", "a finite anomaly factor >= 1", minimum=1.0, strict=False)
        high = _real(cfg, "filter.adaptive_max", "a finite anomaly factor >= adaptive_min", minimum=1.0,
                     strict=False)
        if high < low:
            _fail("filter.adaptive_max", high, f"an anomaly factor >= filter.adaptive_min={low} (bounds reversed)")
        start = float(node.inflation)
        if not low <= start <= high:
            _fail("filter.inflation", start, f"a starting factor within [adaptive_min, adaptive_max] = [{low}, {high}]")
    if "ess_threshold" in keys:
        value = _real(cfg, "filter.ess_threshold", "a fraction in (0, 1]")
        if not 0.0 < value <= 1.0:
            _fail("filter.ess_threshold", value, "a fraction in (0, 1]")
    if "jitter" in keys:
        _real(cfg, "filter.jitter", "a finite standard deviation >= 0", minimum=0.0, strict=False)


def filter_kind(cfg) -> tuple:
    """(members, weighted, reports_inflation) of the configured filter, from the config alone."""
    from assimbench.registry import INFLATION_REPORTING, WEIGHTED

    members = int(cfg.filter.members) if "members" in cfg.filter else 1
    reports = cfg.filter.name in INFLATION_REPORTING or bool(cfg.filter.get("adaptive", False))
    return members, cfg.filter.name in WEIGHTED, reports


def _check_diagnostics(cfg) -> None:
    from assimbench.diagnostics import OPTIONAL, available_groups

    asked = cfg.diagnostics
    if asked is None:
        return
    available = available_groups(*filter_kind(cfg))
    for name in asked:
        if name not in OPTIONAL:
            _fail("diagnostics", name, "names from " + ", ".join(OPTIONAL))
        if name not in available:
            _fail("diagnostics", name, f"filter {cfg.filter.name} can give only " + ", ".join(available))


def _check_model(cfg, model_names, prefix: str = "model") -> tuple:
    """The model node's name, step and parameters; returns (name, dt, state size, resolved size)."""
    from assimbench.registry import model_sizes

    model_name = _get(cfg, f"{prefix}.name")
    if model_name not in model_names:
        _fail(f"{prefix}.name", model_name, f"choose the model with {prefix}=" + "|".join(sorted(model_names)))
    dt = _real(cfg, f"{prefix}.dt", "a finite time step > 0", minimum=0.0)
    if model_name == "lorenz96":
        _integer(cfg, f"{prefix}.size", 4, "an integer >= 4")
        _real(cfg, f"{prefix}.forcing", "a finite number")
    if model_name == "lorenz63":
        for key in ("sigma", "rho", "beta"):
            _real(cfg, f"{prefix}.{key}", "a finite number")
    if model_name == "lorenz96_two_scale":
        _integer(cfg, f"{prefix}.slow", 4, "an integer >= 4")
        _integer(cfg, f"{prefix}.fast_per_slow", 1, "an integer >= 1")
        for key in ("forcing", "coupling", "time_scale", "space_scale"):
            _real(cfg, f"{prefix}.{key}", "a finite number")
        _real(cfg, f"{prefix}.space_scale", "a finite number > 0", minimum=0.0)
    if model_name == "kuramoto_sivashinsky":
        _integer(cfg, f"{prefix}.size", 8, "an integer >= 8")
        _real(cfg, f"{prefix}.length", "a finite domain length > 0", minimum=0.0)
    return (model_name, dt, *model_sizes(_get(cfg, prefix)))


def _check_forecast_model(cfg, model_names, truth: tuple, interval: float) -> tuple:
    """The forecast model's rules; returns (state size, ring) of the model the filter works with.

    It must resolve exactly the truth's resolved variables, and carry either
    only those or the whole truth state (its initial ensemble is the truth's
    state, or its resolved part, plus noise)."""
    from assimbench.registry import FORECAST_ONLY, LORENZ96_RINGS, MODELS

    truth_name, _, truth_size, truth_resolved = truth
    node = cfg.forecast_model
    name = node.name
    choices = sorted(set(model_names) | set(FORECAST_ONLY))
    if name not in choices:
        _fail("forecast_model.name", name, "choose the forecast model with forecast_model=" + "|".join(choices))
    if name == "same":
        return truth_size, MODELS[truth_name](cfg.model).ring
    if name == "lorenz96_closure":
        if truth_name not in LORENZ96_RINGS:
            _fail("forecast_model", name, "a truth model whose resolved variables are a Lorenz-96 ring "
                  f"(model={'|'.join(LORENZ96_RINGS)}), not {truth_name}")
        dt = _real(cfg, "forecast_model.dt", "a finite time step > 0", minimum=0.0)
        _real(cfg, "forecast_model.forcing", "a finite number")
        _integer(cfg, "forecast_model.degree", 0, "an integer from 0 to 6")
        if node.degree > 6:
            _fail("forecast_model.degree", node.degree, "an integer from 0 to 6")
        size = resolved = truth_resolved
        ring = True
    else:
        _, dt, size, resolved = _check_model(cfg, model_names, "forecast_model")
        ring = MODELS[name](node).ring
    if resolved != truth_resolved or size not in (truth_size, truth_resolved):
        _fail("forecast_model", name,
              f"a forecast model whose state is the truth's {truth_resolved} resolved variables"
              + (f" (or all its {truth_size})" if truth_size != truth_resolved else "")
              + f"; this one has {size} variables, {resolved} of them resolved")
    if steps_per_cycle(interval, dt) == 0:
        _fail("observation.interval", interval, f"a whole multiple (>= 1) of forecast_model.dt={dt}")
    return size, ring


def _check_seed(cfg) -> None:
    seed = _integer(cfg, "seed", 0, "an integer from 0 to 2**32 - 1")
    if seed >= 2**32:
        _fail("seed", seed, "an integer from 0 to 2**32 - 1")


def check_config(cfg: DictConfig, model_names, filter_names) -> None:
    """Raise ConfigError for the first value or combination that is not allowed."""
    truth = _check_model(cfg, model_names)
    model_name, dt, _, size = truth
    filter_name = _get(cfg, "filter.name")
    if filter_name not in filter_names:
        _fail("filter.name", filter_name, "choose the filter with filter=" + "|".join(sorted(filter_names)))

    interval = _real(cfg, "observation.interval", "a finite model time > 0", minimum=0.0)
    if steps_per_cycle(interval, dt) == 0:
        _fail("observation.interval", interval, f"a whole multiple (>= 1) of model.dt={dt}")
    _integer(cfg, "observation.stride", 1, f"an integer from 1 to the observable state size {size}")
    if cfg.observation.stride > size:
        _fail("observation.stride", cfg.observation.stride, f"an integer from 1 to the observable state size {size}")
    _real(cfg, "observation.error_std", "a finite standard deviation > 0", minimum=0.0)

    from assimbench.observations import TRANSFORMS

    transform = cfg.observation.transform
    if transform not in TRANSFORMS:
        _fail("observation.transform", transform, "one of " + ", ".join(TRANSFORMS))
    _, ring = _check_forecast_model(cfg, model_names, truth, interval)
    forecaster = model_name if cfg.forecast_model.name == "same" else cfg.forecast_model.name
    _check_filter(cfg, forecaster, ring)
    _real(cfg, "truth_noise_std", "a finite standard deviation >= 0 (0 = a deterministic truth)",
          minimum=0.0, strict=False)

    cycles = _integer(cfg, "cycles", 1, "an integer >= 1")
    burn_in = _integer(cfg, "burn_in", 0, f"an integer from 0 to cycles - 1 = {cycles - 1}")
    if burn_in >= cycles:
        _fail("burn_in", burn_in, f"an integer from 0 to cycles - 1 = {cycles - 1}")
    _check_seed(cfg)
    _integer(cfg, "replicates", 1, "an integer >= 1")
    _integer(cfg, "chunk_cycles", 1, "an integer >= 1")
    _real(cfg, "initial_spread", "a finite standard deviation >= 0", minimum=0.0, strict=False)
    _check_diagnostics(cfg)
    _integer(cfg, "store.ensemble_every", 0, "an integer >= 0 (0 = never)")
    _real(cfg, "divergence_factor", "a finite factor > 0", minimum=0.0)
    _integer(cfg, "divergence_patience", 1, "an integer >= 1 (cycles)")
    output = cfg.output
    if output is not None and (not isinstance(output, str) or not output.strip()):
        _fail("output", output, "a file path, or null for no file")


def check_lyapunov(cfg: DictConfig, model_names) -> None:
    """Ranges of an assimbench-lyapunov config."""
    _, dt, size, _ = _check_model(cfg, model_names)
    if cfg.count is not None:
        count = _integer(cfg, "count", 1, f"an integer from 1 to the state size {size}, or null for all")
        if count > size:
            _fail("count", count, f"an integer from 1 to the state size {size}, or null for all")
    every = _integer(cfg, "reorthonormalise", 1, "an integer >= 1 (RK4 steps between QR factorisations)")
    _real(cfg, "spinup_time", "a finite model time >= 0", minimum=0.0, strict=False)
    time = _real(cfg, "time", "a finite model time > 0", minimum=0.0)
    blocks = _integer(cfg, "blocks", 1, "an integer >= 1")
    if blocks * every * dt > time * (1 + 1e-9):
        _fail("blocks", blocks, f"at most time / (reorthonormalise x model.dt) = {int(time / (every * dt))}")
    _real(cfg, "observation.interval", "a finite model time > 0", minimum=0.0)
    _check_seed(cfg)
