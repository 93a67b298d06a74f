"""Config to plan in one pass: everything a run needs, checked and built once, frozen.

    cfg --check--> Choice --build--> Plan --run--> result file

:func:`resolve` checks every node through its spec (:mod:`assimbench.config.choice`),
builds the static parts once (from the lanes' hull), computes the traced
settings of every lane without building another filter, and fixes the file
layout and the provenance. After it nothing can fail on bad input, and nothing
downstream reads the config again.
"""

import json
from dataclasses import dataclass

import jax
import jax.numpy as jnp
import numpy as np
from omegaconf import DictConfig, OmegaConf

from assimbench.config.catalogue import catalogue
from assimbench.config.choice import Choice, check
from assimbench.config.lanes import LaneGrid, hull_values, lane_grid, plain_config, with_values
from assimbench.config.spec import FilterContext
from assimbench.estimation.augmented import with_parameters
from assimbench.estimation.section import ESTIMATE_WIDEST, estimate_settings, estimated
from assimbench.filters.smoother import with_fixed_lag
from assimbench.filters.sparse import every_kth_analysis
from assimbench.integrators import steps_per_cycle
from assimbench.io.provenance import provenance
from assimbench.models.climatology import climate_std
from assimbench.observations.networks import assumed_settings, filter_view
from assimbench.twin.cycling import FIELDS, TwinSetup, experiment_key
from assimbench.twin.diagnostics import OPT_IN
from assimbench.twin.layout import layouts_of


@dataclass(frozen=True)
class Plan:
    """A checked experiment, ready to run.

    setup: the static parts (built once, from the lanes' hull); settings: the
    traced settings pytree, every leaf with a leading (lanes x replicates) axis,
    lane-major, when the job has lanes (``batched``); climate_stds: (lanes,)
    climatological standard deviation of a resolved truth variable (the RMSE
    of the climatological mean, a reference level); thresholds: (lanes,)
    analysis RMSE above which a run counts as lost (inf for reference runs);
    experiment_keys: (lanes,) hashes of what fixes each lane's truth and
    observations; workers: "auto" or the most processes the run may use
    (see twin/block_workers.py); attrs: the provenance stored in the result file; title: one
    line naming the run for printed summaries.
    """

    config: DictConfig
    choice: Choice
    setup: TwinSetup
    settings: dict
    grid: LaneGrid
    replicates: int
    cycles: int
    burn_in: int
    chunk_cycles: int
    workers: object
    seed: int
    interval: float
    patience: int
    ensemble_every: int
    climate_stds: np.ndarray
    thresholds: np.ndarray
    experiment_keys: tuple
    layouts: dict
    coordinates: dict
    attrs: dict
    title: str

    @property
    def batched(self) -> bool:
        return bool(self.grid.keys)

    @property
    def lanes(self) -> int:
        return self.grid.size


def _forecast_model(cfg, choice: Choice, truth):
    node = cfg.forecast_model
    return choice.forecast.build(node, truth) if choice.forecast.name in catalogue().derived else choice.forecast.build(node)


def build_setup(cfg, choice: Choice) -> TwinSetup:
    """The static parts of the experiment of a plain (lane-free) config."""
    model = choice.model.build(cfg.model)
    forecaster = _forecast_model(cfg, choice, model)
    operator = catalogue().network.build(cfg.observation, model.resolved_size)
    view = filter_view(operator, cfg.assumed, cfg.observation)
    interval = float(cfg.observation.interval)
    forecast_steps = steps_per_cycle(interval, forecaster.dt)
    lag = int(cfg.smoother.lag)
    names = estimated(cfg.estimate)
    filt = choice.filter.build(cfg.filter, FilterContext(forecaster, view, forecast_steps, lag, names))
    if lag > 0 and filt.analyse_lagged is not None:  # otherwise the filter smooths by itself
        filt = with_fixed_lag(filt, lag)
    if int(cfg.get("analysis_every", 1)) > 1:
        filt = every_kth_analysis(filt, int(cfg.analysis_every))
    if names:
        filt = with_parameters(filt, len(names), frozenset(k for k in ESTIMATE_WIDEST if float(cfg.estimate[k]) > 0))
    available = choice.diagnostic_groups(cfg.filter)
    groups = (tuple(g for g in available if g not in OPT_IN) if cfg.diagnostics is None
              else tuple(g for g in available if g in cfg.diagnostics))
    wanted = {name: bool(cfg.store[name]) for name in FIELDS if name != "analysis_ensemble"}
    wanted["analysis_ensemble"] = cfg.store.ensemble_every > 0
    imperfect = forecaster is not model
    return TwinSetup(
        model=model,
        operator=operator,
        filter=filt,
        steps_per_cycle=steps_per_cycle(interval, model.dt),
        diagnostics=groups,
        fields=tuple(name for name in FIELDS if wanted[name]),
        forecast_model=forecaster if imperfect else None,
        forecast_steps=forecast_steps if imperfect else 0,
        truth_noise=float(cfg.truth_noise_std) > 0.0,
        smoother_lag=lag,
        filter_operator=None if view is operator else view,
        estimated=names,
    )


class _LaneModels:
    """The truth and forecast models of each lane, built once per distinct pair of model nodes
    (a lane grid over filter settings builds them once)."""

    def __init__(self, choice: Choice):
        self._choice = choice
        self._built = {}

    def __call__(self, lane: DictConfig):
        key = json.dumps(OmegaConf.to_container(lane.model) | {"_forecast": OmegaConf.to_container(lane.forecast_model)},
                         sort_keys=True)
        if key not in self._built:
            truth = self._choice.model.build(lane.model)
            self._built[key] = (truth, _forecast_model(lane, self._choice, truth))
        return self._built[key]


def _lane_settings(lane: DictConfig, choice: Choice, truth, forecaster) -> dict:
    """The traced settings of one lane (a plain config with its lane values set)."""
    estimate = {"estimate": estimate_settings(lane.estimate, forecaster.params)} if estimated(lane.estimate) else {}
    return estimate | {
        "model": truth.params,
        "forecast_model": forecaster.params,
        "truth_noise_std": float(lane.truth_noise_std),
        "observation": catalogue().network.settings(lane.observation),
        "assumed": assumed_settings(lane.assumed, lane.observation),
        "filter": choice.filter.settings(lane.filter),
        "initial_spread": float(lane.initial_spread),
    }


def _title(cfg, choice: Choice) -> str:
    truth = choice.truth
    shape = f"n={truth.size}" if truth.size == truth.resolved else f"n={truth.size}, {truth.resolved} resolved"
    forecast = "" if choice.forecast.name == "same" else f", forecast model {choice.forecast.name}"
    members = f", {cfg.filter.members} members" if int(cfg.filter.get("members", 1)) > 1 else ""
    reps = int(cfg.replicates)
    return (f"assimbench  {truth.name} ({shape}{forecast})  {choice.filter.name}{members}  "
            f"{reps} replicate{'s' if reps > 1 else ''} x {cfg.cycles} cycles (burn-in {cfg.burn_in})")


def resolve(cfg: DictConfig) -> Plan:
    """Check ``cfg`` (ConfigError on the first bad key) and build its frozen plan."""
    choice = check(cfg)
    plain = plain_config(cfg)
    grid = lane_grid(choice.lanes, cfg.get("lane_combination", "all"))
    # A correlated lane makes the network's R correlated (a lane of length 0 is then independent), a lane
    # with outages makes the network one with outages (a lane of probability 0 then has none).
    widest = {f"filter.{key}" for key in choice.filter.widest} | {"observation.correlation_length",
                                                                   "observation.outage_probability",
                                                                   "assumed.correlation_length"}
    widest |= {f"estimate.{key}" for key in ESTIMATE_WIDEST}
    hull = with_values(plain, grid.keys, hull_values(grid, widest)) if grid.keys else plain
    setup = build_setup(hull, choice)
    lanes = [with_values(plain, grid.keys, row) for row in grid.values] if grid.keys else [plain]
    models = _LaneModels(choice)
    per_lane = [_lane_settings(lane, choice, *models(lane)) for lane in lanes]
    replicates = int(cfg.replicates)
    if grid.keys:
        settings = jax.tree.map(lambda *leaves: jnp.repeat(jnp.stack(leaves), replicates, axis=0),
                                *(jax.tree.map(lambda v: jnp.asarray(v, dtype=jnp.float64), s) for s in per_lane))
    else:
        settings = jax.tree.map(lambda v: jnp.asarray(v, dtype=jnp.float64), per_lane[0])
    factor = float(cfg.divergence_factor)
    climate_stds = np.array([climate_std(models(lane)[0]) for lane in lanes])
    thresholds = factor * climate_stds if choice.filter.assimilates else np.full(len(lanes), np.inf)
    keys = tuple(experiment_key(OmegaConf.to_container(lane.model), OmegaConf.to_container(lane.observation),
                                lane.truth_noise_std, cfg.seed, replicates, cfg.cycles) for lane in lanes)
    layouts, coordinates = layouts_of(setup)
    return Plan(
        config=cfg, choice=choice, setup=setup, settings=settings, grid=grid, replicates=replicates,
        cycles=int(cfg.cycles), burn_in=int(cfg.burn_in), chunk_cycles=int(cfg.chunk_cycles),
        workers=cfg.get("workers", "auto"), seed=int(cfg.seed),
        interval=float(cfg.observation.interval), patience=int(cfg.divergence_patience),
        ensemble_every=int(cfg.store.ensemble_every), climate_stds=climate_stds, thresholds=thresholds, experiment_keys=keys,
        layouts=layouts, coordinates=coordinates, attrs=provenance(cfg, list(keys)), title=_title(cfg, choice),
    )
