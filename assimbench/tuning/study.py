"""A tuning study: its options, its static points and the evaluation of a pass on lanes.

The command's arguments are the main command's (overrides, a config file)
plus the study's own keys:

- ``tune.<setting>=[low,high]`` or ``[low,high,log]``: a traced setting to
  tune (any lane key of the chosen components), its bounds and scale;
- ``study=PATH``: the folder of the study's files (default ``tuning``);
- ``objective=NAME``: the per-cycle series whose time mean is minimised
  (default ``rmse_analysis``; e.g. ``crps_analysis``);
- ``points=7``, ``passes=8``, ``tolerance=0.005``: the search
  (:mod:`assimbench.tuning.search`);
- ``budget_cycles=N``, ``budget_seconds=T``: the study's budget in run-cycles
  (cycles x lanes x replicates, over every pass of every point) or in wall
  time, shared evenly by the static points.

Comma lists in the overrides (``filter=etkf,letkf filter.members=5,10,20``)
are static points, each tuned on its own; the cycles, burn-in, seed and
replicates of the config are those of every evaluation.
"""

import copy
import math
import os
from dataclasses import dataclass

import numpy as np
from omegaconf import OmegaConf
from omegaconf.errors import OmegaConfBaseException

from assimbench.api import run_experiment
from assimbench.config.checks import ConfigError
from assimbench.config.choice import check
from assimbench.config.composition import lane_key_error
from assimbench.config.plan import resolve
from assimbench.io.provenance import config_hash, content_hash
from assimbench.report.pooling import FailingLevel
from assimbench.tuning.search import SCALES, Axis, Evaluation

OPTIONS = {"study": str, "objective": str, "points": int, "passes": int, "tolerance": float,
           "budget_cycles": int, "budget_seconds": float}
# Part of every point's key: a record written by a tuner that chose or stored differently is not reused.
TUNER_VERSION = 3
DEFAULTS = {"study": "tuning", "objective": "rmse_analysis", "points": 7, "passes": 8, "tolerance": 0.005,
            "budget_cycles": None, "budget_seconds": None}


@dataclass(frozen=True)
class Options:
    """The study's own settings (see the module text)."""

    study: str
    objective: str
    points: int
    passes: int
    tolerance: float
    budget_cycles: int | None
    budget_seconds: float | None


@dataclass
class Point:
    """One static point: its name (a folder-safe text of its own overrides), its overrides and config."""

    name: str
    overrides: list
    config: object

    @property
    def filter(self) -> str:
        return str(self.config.filter.name)

    @property
    def members(self):
        return self.config.filter.get("members")

    def key(self, axes: tuple, options: Options, budget: tuple) -> str:
        """What a finished point's result depends on: resume reuses it only when this is unchanged."""
        return content_hash({"tuner": TUNER_VERSION, "config": config_hash(self.config),
                             "axes": [a.__dict__ for a in axes],
                             "objective": options.objective, "points": options.points, "passes": options.passes,
                             "tolerance": options.tolerance, "budget": list(budget)})


def _number(text: str, kind, key: str):
    try:
        value = kind(text)
    except ValueError:
        raise ConfigError(f"{key}={text} is not allowed: {'an integer' if kind is int else 'a number'}") from None
    if kind is float and not math.isfinite(value):
        raise ConfigError(f"{key}={text} is not allowed: a finite number")
    return value


def parse_axis(key: str, text: str) -> Axis:
    """``tune.filter.inflation=[1.0,1.3]`` or ``[1,20,log]`` -> Axis; ConfigError otherwise."""
    inner = text.strip()
    if not (inner.startswith("[") and inner.endswith("]")):
        raise ConfigError(f"tune.{key}={text} is not allowed: bounds as [low,high] or [low,high,log]")
    parts = [p.strip() for p in inner[1:-1].split(",")]
    scale = "linear"
    if len(parts) == 3 and parts[2] in SCALES:
        scale = parts.pop()
    if len(parts) != 2:
        raise ConfigError(f"tune.{key}={text} is not allowed: bounds as [low,high] or [low,high,log]")
    low, high = (_number(p, float, f"tune.{key}") for p in parts)
    if not low < high:
        raise ConfigError(f"tune.{key}={text} is not allowed: the bounds are reversed or equal (low < high)")
    if scale == "log" and low <= 0:
        raise ConfigError(f"tune.{key}={text} is not allowed: a log scale needs bounds > 0")
    return Axis(key, low, high, scale)


def split_arguments(argv: list) -> tuple:
    """(the main command's arguments, axes, Options) from the tuner's argument list."""
    rest, axes, given = [], [], dict(DEFAULTS)
    for item in argv:
        key, equals, value = item.partition("=")
        if equals and key.startswith("tune."):
            axis = parse_axis(key[len("tune."):], value)
            if any(a.key == axis.key for a in axes):
                raise ConfigError(f"tune.{axis.key} is given twice")
            axes.append(axis)
        elif equals and key in OPTIONS:
            given[key] = _number(value, OPTIONS[key], key) if OPTIONS[key] is not str else value
        elif equals and key.lstrip("+").startswith("lanes."):
            raise ConfigError(f"{key}: the tuner sets the lanes itself; give tune.{key.lstrip('+')[6:]}=[low,high]")
        elif item in ("-m", "--multirun"):
            continue  # comma lists are static points anyway
        else:
            rest.append(item)
    if not axes:
        raise ConfigError("nothing to tune: give tune.<setting>=[low,high], e.g. 'tune.filter.inflation=[1.0,1.3]'")
    options = Options(**given)
    if options.points < 4:
        # A later pass spans one step either side of the minimiser, so its step is 2 / (points - 1) of
        # the last one: 3 points would never refine.
        raise ConfigError(f"points={options.points} is not allowed: an integer >= 4 (values per axis per pass)")
    if options.passes < 1:
        raise ConfigError(f"passes={options.passes} is not allowed: an integer >= 1")
    if not 0 < options.tolerance < 1:
        raise ConfigError(f"tolerance={options.tolerance} is not allowed: a fraction of the bounds in (0, 1)")
    for name in ("budget_cycles", "budget_seconds"):
        value = getattr(options, name)
        if value is not None and value <= 0:
            raise ConfigError(f"{name}={value} is not allowed: a number > 0")
    return rest, tuple(axes), options


def with_lanes(cfg, axes: tuple, values: np.ndarray):
    """A copy of ``cfg`` whose lanes are the rows of ``values`` (lanes, k), for every axis (the lists
    matched side by side, not combined); ConfigError for a key that is not a lane key (in the main
    command's words)."""
    out = copy.deepcopy(cfg)
    OmegaConf.update(out, "lane_combination", "matched", merge=False)
    for j, axis in enumerate(axes):
        try:
            OmegaConf.update(out, f"lanes.{axis.key}", [float(v) for v in values[:, j]], merge=False)
        except OmegaConfBaseException:
            raise lane_key_error(cfg, axis.key, ",".join(f"{v:g}" for v in values[:, j])) from None
    return out


def check_point(point: Point, axes: tuple, options: Options) -> None:
    """ConfigError (one line, as the study's keys) when a point cannot be tuned on these axes."""
    bounds = np.array([[a.low for a in axes], [a.high for a in axes]])
    try:
        check(with_lanes(point.config, axes, bounds))
    except ConfigError as err:
        raise ConfigError(str(err).replace("lanes.", "tune.")) from None
    plan_layouts = resolve(point.config).layouts
    if options.objective not in plan_layouts or plan_layouts[options.objective].dims[1:] != ("cycle",):
        series = sorted(n for n, lay in plan_layouts.items() if lay.dims[1:] == ("cycle",))
        raise ConfigError(f"objective={options.objective} is not allowed: a per-cycle series of this run "
                          f"({', '.join(series)})")


def pass_cost(point: Point, options: Options, axes: tuple) -> int:
    """Run-cycles of one pass: cycles x lanes x replicates."""
    return int(point.config.cycles) * options.points ** len(axes) * int(point.config.replicates)


def lost_replicates(result, cfg) -> np.ndarray:
    """(lanes, replicates) True where a replicate blew up or its time-mean analysis RMSE is above the
    failing level: the observation error, as the report counts it (:class:`FailingLevel`); a filter
    that does not beat its observations has lost the truth even when it has not blown up. A result
    without lanes is one lane."""
    lost = np.atleast_2d(result.first_bad_cycle) >= 0
    flat = {"observation.transform": cfg.observation.transform, "observation.error_std": cfg.observation.error_std}
    level, _ = FailingLevel().level(flat)
    if level is not None and "rmse_analysis" in result.per_replicate:
        lost |= ~(np.atleast_2d(result.per_replicate["rmse_analysis"]) <= level)
    return lost


def standalone_run(cfg, values: dict, seed_shift: int = 0) -> tuple:
    """(result, the config run, lost replicates): one run of ``cfg`` with ``values`` (config path ->
    number) set, no output file, the seed moved by ``seed_shift`` (0: the same truths and observations;
    1: fresh ones). Lost as in the search (:func:`lost_replicates`), and at least one when the time-mean
    analysis RMSE is not finite."""
    one = copy.deepcopy(cfg)
    for key, value in values.items():
        OmegaConf.update(one, key, float(value), merge=False)
    OmegaConf.update(one, "output", None, merge=False)
    OmegaConf.update(one, "seed", int(one.seed) + seed_shift, merge=False)
    result = run_experiment(one, keep_series=False)
    lost = int(lost_replicates(result, one).sum())
    if not math.isfinite(result.summary["rmse_analysis"]):
        lost = max(lost, 1)
    return result, one, lost


def evaluator(point: Point, axes: tuple, objective: str, seed_shift: int = 0):
    """``evaluate(values) -> Evaluation``: one run of the point with the rows of ``values`` as lanes;
    with ``seed_shift``, on the seed moved by it (fresh truths and observations)."""

    def evaluate(values: np.ndarray) -> Evaluation:
        cfg = with_lanes(point.config, axes, values)
        OmegaConf.update(cfg, "output", None, merge=False)
        OmegaConf.update(cfg, "seed", int(cfg.seed) + seed_shift, merge=False)
        result = run_experiment(cfg, keep_series=True)
        lost = lost_replicates(result, point.config)
        cost = int(cfg.cycles) * values.shape[0] * int(cfg.replicates)
        return Evaluation(np.asarray(result.series[objective]), int(cfg.burn_in), lost.any(axis=1), cost,
                          lost.sum(axis=1))

    return evaluate


def study_folder(options: Options) -> str:
    return os.path.abspath(options.study)
