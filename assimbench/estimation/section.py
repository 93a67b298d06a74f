"""The ``estimate`` section: which forecast-model parameters the filter estimates, their prior, and
how their spread is kept.

    estimate.parameters=[forcing]        estimable names (assimbench/estimation/parameters.py)
    estimate.initial_mean=7.0            the prior mean (one number per parameter; null: the
                                         forecast model's configured value)
    estimate.initial_std=1.0             the prior spread (one number per parameter, > 0)
    estimate.inflation=1.0               multiplies the parameter anomalies before every analysis
    estimate.noise=0.0                   centred additive noise before every analysis, std as a
                                         fraction of initial_std
    estimate.spread_floor=0.0            after every analysis, anomalies whose spread fell below
                                         this fraction of initial_std are scaled back up to it

Each of the last three keeps the parameter spread from collapsing (the
estimate would freeze); they are traced, so lanes can sweep them.
"""

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from assimbench.config.checks import NodeChecks, fail
from assimbench.estimation.parameters import values_of

ESTIMATE_TRACED = ("inflation", "noise", "spread_floor")
# Pieces switched on for the whole job when any lane uses them (zero costs nothing then).
ESTIMATE_WIDEST = ("noise", "spread_floor")


@dataclass
class EstimateConfig:
    """Forecast-model parameters estimated with the state by state augmentation: every member
    carries its own values and is forecast with them; the filter updates them with the state
    (parameters: estimable names, empty = off; initial_mean: null = the forecast model's values;
    initial_std: > 0 per parameter; inflation, noise, spread_floor: the spread keeping, see
    assimbench/estimation/section.py)."""

    parameters: list[str] = field(default_factory=list)
    initial_mean: Any = None
    initial_std: Any = None
    inflation: float = 1.0
    noise: float = 0.0
    spread_floor: float = 0.0


def estimated(node) -> tuple:
    """The estimated parameter names of an ``estimate`` node (empty: no estimation)."""
    return tuple(str(name) for name in node.parameters)


def _per_parameter(c: NodeChecks, key: str, count: int, allowed: str, positive: bool) -> list:
    """``key`` as one finite number per parameter (a single number stands for one parameter)."""
    value = c.node[key]
    values = [value] if isinstance(value, (int, float)) and not isinstance(value, bool) else value
    try:
        values = list(values)
    except TypeError:
        c.fail(key, value, allowed)
    if len(values) != count or any(isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v)
                                   for v in values):
        c.fail(key, value, allowed)
    if positive and any(v <= 0 for v in values):
        c.fail(key, value, f"{allowed}; a parameter with no spread has no covariance with the observations and "
                           "is never updated")
    return [float(v) for v in values]


def check_estimate(node, names_allowed: tuple, filter_spec, able_filters: list, lag: int, every: int) -> None:
    """The ``estimate`` section against the forecast model's estimable names and the filter
    (``able_filters``: the names of the filters that can estimate parameters)."""
    c = NodeChecks(node, "estimate")
    chosen = estimated(node)
    if not chosen:
        check_spread_keeping(c)
        return
    shown = "[" + ",".join(chosen) + "]"
    for name in chosen:
        if name not in names_allowed:
            c.fail("parameters", shown, f"{name} is not a parameter of the forecast model; its parameters: "
                   + (", ".join(names_allowed) or "none"))
    if len(set(chosen)) != len(chosen):
        c.fail("parameters", shown, "each parameter once")
    if not filter_spec.estimates:
        c.fail("parameters", shown, f"[] with filter {filter_spec.name}, which cannot carry parameters; the filters "
                                    "that estimate them: " + ", ".join(able_filters))
    if lag > 0:
        fail("smoother.lag", lag, "0 while estimate.parameters is given (a smoother does not carry parameters)")
    if every > 1:
        fail("analysis_every", every, "1 while estimate.parameters is given (the parameters' spread keeping acts "
                                      "at every analysis)")
    count = len(chosen)
    how = "one number" if count == 1 else f"a list of {count} numbers (one per parameter)"
    positive = "one number > 0" if count == 1 else f"{how}, each > 0"
    if node.initial_mean is not None:
        _per_parameter(c, "initial_mean", count, f"{how} (null: the forecast model's values)", positive=False)
    if node.initial_std is None:
        c.fail("initial_std", "null", f"{positive}: the prior spread of {shown}")
    _per_parameter(c, "initial_std", count, positive, positive=True)
    check_spread_keeping(c)


def check_estimated_lanes(node, lanes: list) -> None:
    """Lanes over a forecast-model value the filter estimates from a given ``initial_mean`` would all be
    the same run: refused (``lanes``: (full key, values) of every lane list)."""
    if node.initial_mean is None:
        return  # the prior mean is each lane's value: a real sweep
    for key, values in lanes:
        section, _, leaf = key.rpartition(".")
        if section == "forecast_model" and leaf in estimated(node):
            fail(f"lanes.{key}", "[" + ",".join(f"{v:g}" for v in values) + "]",
                 f"no lanes while {leaf} is estimated from estimate.initial_mean: every lane would be the same run "
                 "(estimate.initial_mean=null starts each lane from its own value)")


def check_spread_keeping(c: NodeChecks) -> None:
    c.real("inflation", "a finite factor >= 1 (1 = none)", minimum=1.0, strict=False)
    c.real("noise", "a finite fraction of initial_std >= 0 (0 = none)", minimum=0.0, strict=False)
    c.real("spread_floor", "a finite fraction of initial_std >= 0 (0 = none)", minimum=0.0, strict=False)


def spread_warning(node, lanes=None) -> str | None:
    """One line when parameters are estimated with no spread keeping at all, in the section or in
    any of its lanes (``lanes``: the ``lanes.estimate`` node, or None), else None."""
    def kept(key, none) -> bool:
        values = [node[key]] + list((lanes or {}).get(key) or [])
        return any(float(v) != none for v in values)

    if not estimated(node) or kept("inflation", 1.0) or kept("noise", 0.0) or kept("spread_floor", 0.0):
        return None
    return ("warning: estimate.parameters with no spread keeping (estimate.inflation=1, noise=0, spread_floor=0): "
            "the parameter spread collapses and the estimate freezes")


def estimate_settings(node, forecast_params: dict) -> dict:
    """settings["estimate"]: the prior mean and spread (q,) each, and the spread keeping strengths."""
    names = estimated(node)
    count = len(names)
    mean = values_of(forecast_params, names) if node.initial_mean is None else _listed(node.initial_mean, count)
    return {"initial_mean": mean, "initial_std": _listed(node.initial_std, count),
            **{key: float(node[key]) for key in ESTIMATE_TRACED}}


def _listed(value, count: int) -> np.ndarray:
    """(count,) floats of a number or a list (an array: one leaf of the settings pytree)."""
    return np.array([float(value)] * count if isinstance(value, (int, float)) else [float(v) for v in value])
