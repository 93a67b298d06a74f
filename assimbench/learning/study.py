"""A learning study: its options, checked against the experiment before anything runs.

The command's arguments are the main command's (overrides, a config file) plus
the study's own keys (defaults in brackets):

- ``learn.parameters=[key,...]``: the quantities to learn (:mod:`.learnables`);
  each starts from its value in the config;
- ``learn.objective=innovation|truth`` [innovation]: the innovation
  log-likelihood (observations only) or the analysis RMSE against the truth
  (:mod:`.objectives`);
- ``learn.window=K`` [10]: cycles per window (:mod:`.windows`);
- ``learn.iterations=N`` [40], ``learn.rate=F`` [0.2], ``learn.optimizer=adam|sgd``
  [adam]: the optimizer's steps on the unconstrained values (the rate decays
  along a cosine to 2% of itself by the last step);
- ``learn.nonfinite=stop|skip`` [stop]: on a window whose objective or gradient
  is not finite, stop (the values so far are kept) or leave that window out
  of the mean, counted in every line and in the history;
- ``learn.mode=fit|windows`` [fit]: learn, or measure the gradient's mean and
  spread over windows of every length in ``learn.windows=[1,2,5,10,20,40]``
  at the configured values, to choose the window;
- ``study=PATH`` [learning]: the folder of the study's files.

The config's cycles, burn_in, replicates and seed are the data: the burn-in
cycles run without gradient, the rest are cut into windows.
"""

import copy
import dataclasses
import math
import os
from dataclasses import dataclass

from omegaconf import OmegaConf

from assimbench.config.checks import ConfigError
from assimbench.config.plan import Plan, resolve
from assimbench.learning.learnables import LEARNABLE_SECTIONS, learnable
from assimbench.learning.objectives import OBJECTIVES

OPTIMIZERS = ("adam", "sgd")
# Said in refusals; the command finds out for any other filter by compiling its gradient.
LEARNABLE_FILTERS = "etkf, letkf, ensrf, enkf, denkf, enkfn (3dvar and 4dvar with learn.objective=truth)"
MODES = ("fit", "windows")
NONFINITE = ("stop", "skip")
DEFAULTS = {"parameters": None, "objective": "innovation", "window": 10, "iterations": 40, "rate": 0.2,
            "optimizer": "adam", "nonfinite": "stop", "mode": "fit", "windows": (1, 2, 5, 10, 20, 40)}


@dataclass(frozen=True)
class LearnOptions:
    """The study's own keys (module text)."""

    parameters: tuple
    objective: str
    window: int
    iterations: int
    rate: float
    optimizer: str
    nonfinite: str
    mode: str
    windows: tuple
    study: str


def _items(value: str, key: str) -> list:
    text = value.strip()
    if not (text.startswith("[") and text.endswith("]")):
        raise ConfigError(f"learn.{key}={value} is not allowed: a list in brackets, e.g. "
                          + ("'learn.parameters=[filter.inflation]'" if key == "parameters" else "'learn.windows=[5,10,20]'"))
    return [item.strip() for item in text[1:-1].split(",") if item.strip()]


def _integer(value: str, key: str, allowed: str) -> int:
    try:
        number = int(value)
    except ValueError:
        raise ConfigError(f"learn.{key}={value} is not allowed: {allowed}") from None
    if number < 1:
        raise ConfigError(f"learn.{key}={value} is not allowed: {allowed}")
    return number


def _choice(value: str, key: str, allowed: tuple) -> str:
    if value not in allowed:
        raise ConfigError(f"learn.{key}={value} is not allowed: one of {', '.join(allowed)}")
    return value


def split_arguments(argv: list) -> tuple:
    """(the main command's arguments, LearnOptions) from the command's argument list."""
    rest, given, study = [], dict(DEFAULTS), "learning"
    for item in argv:
        key, equals, value = item.partition("=")
        name = key[len("learn."):] if key.startswith("learn.") else None
        if equals and name is not None:
            if name == "parameters":
                given["parameters"] = tuple(_items(value, name))
            elif name == "windows":
                given["windows"] = tuple(sorted({_integer(v, name, "a list of integers >= 1 (cycles per window)")
                                                 for v in _items(value, name)}))
            elif name in ("window", "iterations"):
                given[name] = _integer(value, name, "an integer >= 1")
            elif name == "rate":
                try:
                    given["rate"] = float(value)
                except ValueError:
                    given["rate"] = math.nan
                if not (math.isfinite(given["rate"]) and given["rate"] > 0):
                    raise ConfigError(f"learn.rate={value} is not allowed: a step size > 0")
            elif name in ("objective", "optimizer", "nonfinite", "mode"):
                allowed = {"objective": OBJECTIVES, "optimizer": OPTIMIZERS, "nonfinite": NONFINITE, "mode": MODES}
                given[name] = _choice(value, name, allowed[name])
            else:
                raise ConfigError(f"learn.{name} is not a key of assimbench-learn; its keys: "
                                  + ", ".join(f"learn.{k}" for k in DEFAULTS))
        elif equals and key == "study":
            study = value
        elif item in ("-m", "--multirun") or (equals and "," in value and not value.startswith("[")):
            raise ConfigError(f"{item}: a learning study is one experiment: give one value per key (no comma lists)")
        elif equals and key.lstrip("+").startswith("lanes."):
            raise ConfigError(f"{key}: a learning study is one experiment without lanes")
        else:
            rest.append(item)
    if not given["parameters"]:
        raise ConfigError("nothing to learn: give learn.parameters=[...], e.g. 'learn.parameters=[filter.inflation]'")
    if len(set(given["parameters"])) != len(given["parameters"]):
        raise ConfigError(f"learn.parameters={list(given['parameters'])} names a key twice")
    if not study or study in ("null", "None"):
        raise ConfigError(f"study={study} is not allowed: the folder of the study's files")
    return rest, LearnOptions(**given, study=study)


def learnables_of(cfg, plan: Plan, options: LearnOptions, bounds: dict) -> tuple:
    """The :class:`Learnable` of every learned key, checked against the experiment (one line each)."""
    spec, forecast = plan.choice.filter, plan.choice.forecast
    traced = {"filter": tuple(spec.traced), "assumed": ("error_std", "correlation_length"),
              "forecast_model": tuple(getattr(forecast, "traced", ()))}
    out = []
    for key in options.parameters:
        section, _, name = key.rpartition(".")
        if section == "forecast_model" and plan.setup.forecast_model is None and plan.choice.forecast.name == "same":
            raise ConfigError(f"learn.parameters: {key} is not allowed with forecast_model=same (the truth's own "
                              f"model): choose a forecast model, e.g. forecast_model={plan.choice.truth.name} "
                              f"{key}=<starting value>")
        value = OmegaConf.select(cfg, key) if section in LEARNABLE_SECTIONS else None
        if section == "assumed" and value is None and name in traced["assumed"]:
            raise ConfigError(f"learn.parameters: {key} is null (the truth's own); give its starting value, "
                              f"e.g. {key}=1.0")
        if value is None and section in LEARNABLE_SECTIONS and name in traced.get(section, ()):
            raise ConfigError(f"learn.parameters: {key} has no value in the config to start from")
        out.append(learnable(key, plan.settings, traced, math.nan if value is None else float(value), bounds))
    return tuple(out)


def check_experiment(cfg, options: LearnOptions) -> tuple:
    """(plan, learnables, windows): ConfigError (one line) when this experiment cannot be learned on."""
    plan = resolve(cfg)
    spec = plan.choice.filter
    if not spec.assimilates or spec.weighted:
        why = ("it does not assimilate" if not spec.assimilates else
               "its resampling draws members by index, which has no gradient")
        raise ConfigError(f"filter={spec.name} cannot be learned through: {why}; choose one of {LEARNABLE_FILTERS}")
    if cfg.filter.get("transform_solver", "eigh") != "eigh":
        raise ConfigError(f"filter.transform_solver={cfg.filter.transform_solver} is not allowed when learning: "
                          "eigh (the Newton-Schulz loop's length depends on the data, which reverse-mode "
                          "differentiation does not go through)")
    if options.objective == "innovation" and plan.setup.filter.members < 2:
        raise ConfigError(f"learn.objective=innovation is not allowed with filter={spec.name}: it carries one state, "
                          "and the innovation likelihood needs an ensemble's covariance; use learn.objective=truth")
    if plan.setup.smoother_lag or plan.setup.estimated or int(cfg.get("analysis_every", 1)) > 1:
        raise ConfigError("a learning study runs the filter alone: set smoother.lag=0, estimate.parameters=[] "
                          "and analysis_every=1")
    bounds = {}
    if "filter.radius" in options.parameters and cfg.filter.get("radius") is not None:
        # A localizing filter's observation window is static, built from the configured radius: the
        # learned radius is kept below a quarter of the ring (the taper then reaches half of it) and the
        # window is built for that largest radius.
        widest = plan.choice.truth.resolved / 4.0
        bounds["filter.radius"] = (0.0, widest)
        wide = copy.deepcopy(cfg)
        OmegaConf.update(wide, "filter.radius", widest, merge=False)
        plan = dataclasses.replace(plan, setup=resolve(wide).setup)
    learned = learnables_of(cfg, plan, options, bounds)
    scored = plan.cycles - plan.burn_in
    lengths = options.windows if options.mode == "windows" else (options.window,)
    least = 2 if options.mode == "windows" else 1
    for length in lengths:
        if scored // length < least:
            key = "learn.windows" if options.mode == "windows" else "learn.window"
            raise ConfigError(f"{key}: a window of {length} cycles is not allowed: cycles - burn_in = {scored} "
                              f"holds {scored // length} such window{'s' if scored // length != 1 else ''} "
                              f"(at least {least}); shorten it or raise cycles")
    return plan, learned


def study_folder(options: LearnOptions) -> str:
    return os.path.abspath(options.study)
