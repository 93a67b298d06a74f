"""One pass of checks over a composed config: every node through its component's spec.

:func:`check` returns the :class:`Choice` (the chosen specs and what is known
of the models before anything is built) or raises one :class:`ConfigError`
naming the first key that is not allowed, the value and what is allowed.
Nothing here builds a component or touches a file.
"""

import dataclasses
from typing import NamedTuple

from omegaconf import DictConfig, OmegaConf

from assimbench.config.catalogue import Catalogue, catalogue
from assimbench.config.checks import ConfigError, NodeChecks, fail
from assimbench.config.lanes import COMBINATIONS, check_lane_lists, given_lanes, lane_rows, plain_config, with_values
from assimbench.config.schema import ExperimentBase, SmootherConfig, StoreConfig
from assimbench.config.spec import FilterSpec, ModelFacts
from assimbench.estimation.section import (
    ESTIMATE_TRACED,
    EstimateConfig,
    check_estimate,
    check_estimated_lanes,
    check_spread_keeping,
    estimated,
)
from assimbench.integrators import steps_per_cycle
from assimbench.observations.networks import ASSUMED_TRACED, AssumedErrorsConfig, check_assumed
from assimbench.observations.station_rules import expand_station_rules
from assimbench.twin.diagnostics import OPTIONAL, available_groups


class Choice(NamedTuple):
    """The components a config chooses: specs, model facts, and the lane lists given."""

    model: object  # ModelSpec
    forecast: object  # ModelSpec or DerivedModelSpec
    filter: FilterSpec
    truth: ModelFacts
    forecaster: ModelFacts
    lanes: list  # (full key, values) of every lane list

    def diagnostic_groups(self, node) -> tuple:
        """The optional diagnostic groups this filter can give."""
        spec = self.filter
        return available_groups(spec.members(node), spec.weighted, spec.reports_inflation(node), spec.iterative)


def _chosen(specs: dict, name, key: str, group: str):
    if name not in specs:
        fail(key, name, f"choose the {group.replace('_', ' ')} with {group}=" + "|".join(sorted(specs)))
    return specs[name]


def _truth(cfg, cat: Catalogue):
    spec = _chosen(cat.models, cfg.model.name, "model.name", "model")
    c = NodeChecks(cfg.model, "model")
    c.real("dt", "a finite time step > 0", minimum=0.0)
    spec.check(c)
    size, resolved = spec.sizes(cfg.model)
    return spec, ModelFacts(spec.name, size, resolved, spec.ring, spec.lorenz96_ring)


def _check_interval(interval: float, dt: float, dt_key: str) -> None:
    if steps_per_cycle(interval, dt) == 0:
        fail("observation.interval", interval, f"a whole multiple (>= 1) of {dt_key}={dt}")


def _forecaster(cfg, cat: Catalogue, spec, truth: ModelFacts, interval: float):
    """The forecast model's facts (``spec``: its chosen spec). It must resolve exactly the truth's resolved variables
    and carry either only those or the whole truth state (its initial ensemble is the truth's
    state, or its resolved part, plus noise)."""
    node = cfg.forecast_model
    if spec.name == "same":
        return truth
    c = NodeChecks(node, "forecast_model")
    dt = c.real("dt", "a finite time step > 0", minimum=0.0)
    if spec.name in cat.derived:
        spec.check(c, truth)
        size, resolved = spec.sizes(node, truth)
        facts = ModelFacts(spec.name, size, resolved, spec.ring(truth))
    else:
        spec.check(c)
        size, resolved = spec.sizes(node)
        facts = ModelFacts(spec.name, size, resolved, spec.ring, spec.lorenz96_ring)
    if resolved != truth.resolved or size not in (truth.size, truth.resolved):
        fail("forecast_model", spec.name,
             f"a forecast model whose state is the truth's {truth.resolved} resolved variables"
             + (f" (or all its {truth.size})" if truth.size != truth.resolved else "")
             + f"; this one has {size} variables, {resolved} of them resolved")
    _check_interval(interval, dt, "forecast_model.dt")
    return facts


def _check_diagnostics(cfg, choice: Choice) -> None:
    if cfg.diagnostics is None:
        return
    available = choice.diagnostic_groups(cfg.filter)
    for name in cfg.diagnostics:
        if name not in OPTIONAL:
            fail("diagnostics", name, "names from " + ", ".join(OPTIONAL))
        if name not in available:
            fail("diagnostics", name, f"filter {choice.filter.name} can give only " + ", ".join(available))


def _check_run(cfg) -> None:
    """The keys of the run itself: length, seeds, chunks, stored fields, the divergence rule, output."""
    c = NodeChecks(cfg, "")
    c.real("truth_noise_std", "a finite standard deviation >= 0 (0 = a deterministic truth)", minimum=0.0,
           strict=False)
    cycles = c.integer("cycles", 1, "an integer >= 1")
    c.integer("burn_in", 0, f"an integer from 0 to cycles - 1 = {cycles - 1}", maximum=cycles - 1)
    c.seed()
    c.integer("replicates", 1, "an integer >= 1")
    c.integer("chunk_cycles", 1, "an integer >= 1")
    if cfg.get("lane_combination", "all") not in COMBINATIONS:
        fail("lane_combination", cfg.lane_combination, "all (every combination of the lane lists) or matched "
             "(the lists side by side)")
    workers = cfg.get("workers", "auto")
    if workers != "auto" and (isinstance(workers, bool) or not isinstance(workers, int) or workers < 1):
        fail("workers", workers, "auto (one process per core for a long batch) or an integer >= 1 (1 = this process)")
    c.real("initial_spread", "a finite standard deviation >= 0", minimum=0.0, strict=False)


def _check_smoother(cfg, choice) -> None:
    """smoother.lag: an integer >= 0, above 0 only beside a filter that can carry the smoother."""
    lag = NodeChecks(cfg.smoother, "smoother").integer("lag", 0, "an integer >= 0 (cycles; 0 = off)")
    spec = choice.filter
    if lag > 0 and not spec.smoothable(cfg.filter):
        able = [name for name, other in catalogue().filters.items() if other.smoothable(_default_node(other))]
        fail("smoother.lag", lag, f"0 with filter {spec.name} as configured; a fixed-lag smoother goes beside "
             + ", ".join(able) + " (the IEnKS with shift 1)")
    limit = spec.lag_limit(cfg.filter)
    if limit is not None and lag > limit:
        fail("smoother.lag", lag, f"at most {limit} with filter {spec.name} (its window)")


def _default_node(spec):
    return OmegaConf.structured(spec.schema)


def _check_outputs(cfg) -> None:
    NodeChecks(cfg.store, "store").integer("ensemble_every", 0, "an integer >= 0 (0 = never)")
    c = NodeChecks(cfg, "")
    c.real("divergence_factor", "a finite factor > 0", minimum=0.0)
    c.integer("divergence_patience", 1, "an integer >= 1 (cycles)")
    output = cfg.output
    if output is not None and (not isinstance(output, str) or not output.strip()):
        fail("output", output, "a file path, or null for no file")


def _section_checks(choice: Choice, cat: Catalogue, observation) -> dict:
    """section -> check(node) of the node a lane section varies."""
    return {
        "model": lambda node: choice.model.check(NodeChecks(node, "model")),
        "forecast_model": lambda node: (choice.forecast.check(NodeChecks(node, "forecast_model"), choice.truth)
                                        if choice.forecast.name in cat.derived
                                        else choice.forecast.check(NodeChecks(node, "forecast_model"))),
        "observation": lambda node: cat.network.check(NodeChecks(node, "observation"), choice.truth),
        "assumed": lambda node: check_assumed(node, observation, choice.truth),
        "filter": lambda node: choice.filter.check(NodeChecks(node, "filter"), choice.forecaster),
        "estimate": lambda node: check_spread_keeping(NodeChecks(node, "estimate")),
        "": lambda node: NodeChecks(node, "").real("initial_spread", "a finite standard deviation >= 0",
                                                   minimum=0.0, strict=False),
    }


def _check_lanes(cfg, choice: Choice, cat: Catalogue) -> None:
    """Lane keys must be traced settings of the chosen components; every lane value, with the
    other lanes of its section, must pass the section's checks."""
    given = choice.lanes
    if not given:
        return
    traced = {"model": choice.model.traced, "forecast_model": () if choice.forecast.name == "same"
              else choice.forecast.traced, "observation": cat.network.traced, "assumed": ASSUMED_TRACED,
              "filter": choice.filter.traced, "estimate": ESTIMATE_TRACED if estimated(cfg.estimate) else ()}
    names = {section: f"{section} {cfg[section].name}" if "name" in cfg[section] else section for section in traced}
    forecaster = "model" if choice.forecast.name == "same" else "forecast_model"
    combination = cfg.get("lane_combination", "all")
    check_lane_lists(given, traced, names, forecaster if choice.filter.climatology else None, combination)
    plain = plain_config(cfg)
    checks = _section_checks(choice, cat, cfg.observation)
    for section, check_node in checks.items():
        lists = [(key, values) for key, values in given if key.rpartition(".")[0] == section]
        for values in lane_rows([v for _, v in lists], combination) if lists else ():
            lane = with_values(plain, [k for k, _ in lists], values)
            try:
                check_node(lane[section] if section else lane)
            except ValueError as err:
                raise type(err)(f"lanes.{err}") from None


def estimable_names(cfg, choice: Choice) -> tuple:
    """The names of the forecast model's parameters a filter can estimate (the truth's for ``same``)."""
    if choice.forecast.name == "same":
        return choice.model.estimable_names(cfg.model)
    return choice.forecast.estimable_names(cfg.forecast_model)


def _check_analysis_every(cfg, spec: FilterSpec) -> None:
    every = NodeChecks(cfg, "").integer("analysis_every", 1, "an integer >= 1 (cycles between analyses)")
    if every == 1:
        return
    if spec.windowed:
        how = "filter.shift" if "shift" in cfg.filter else "filter.window"
        fail("analysis_every", every, f"1 with filter {spec.name}: a window method uses every observation time of "
                                      f"its window (set {how})")
    if int(cfg.smoother.lag) > 0:
        fail("analysis_every", every, "1 with a fixed-lag smoother (smoother.lag > 0)")


def _check_known_keys(cfg, specs: dict) -> None:
    """Every key must be one of its node's schema (``+filter.foo=1`` adds a key Hydra accepts)."""
    schemas = {"": ExperimentBase, "store": StoreConfig, "smoother": SmootherConfig, "assumed": AssumedErrorsConfig,
               "estimate": EstimateConfig, **{section: spec.schema for section, spec in specs.items()}}
    for section, schema in schemas.items():
        node = cfg[section] if section else cfg
        allowed = {f.name for f in dataclasses.fields(schema)} | ({"lanes"} if not section else set())
        for key in node:
            if key not in allowed:
                full = f"{section}.{key}" if section else key
                what = f"{section} {node.name}" if "name" in node else (section or "the experiment")
                raise ConfigError(f"{full} is not a key of this configuration: {what} has "
                                  + ", ".join(sorted(allowed)))


def check(cfg: DictConfig) -> Choice:
    """Check every node of a composed experiment config; return the choice or raise ConfigError."""
    cat = catalogue()
    model, truth = _truth(cfg, cat)
    filter_spec = _chosen(cat.filters, cfg.filter.name, "filter.name", "filter")
    forecast = _chosen(cat.forecast_models, cfg.forecast_model.name, "forecast_model.name", "forecast_model")
    _check_known_keys(cfg, {"model": model, "forecast_model": forecast, "observation": cat.network,
                            "filter": filter_spec})
    expand_station_rules(cfg, truth.resolved)
    interval = NodeChecks(cfg.observation, "observation").real("interval", "a finite model time > 0", minimum=0.0)
    _check_interval(interval, float(cfg.model.dt), "model.dt")
    cat.network.check(NodeChecks(cfg.observation, "observation"), truth)
    check_assumed(cfg.assumed, cfg.observation, truth)
    forecaster = _forecaster(cfg, cat, forecast, truth, interval)
    filter_spec.check(NodeChecks(cfg.filter, "filter"), forecaster)
    _check_run(cfg)
    _check_analysis_every(cfg, filter_spec)
    choice = Choice(model, forecast, filter_spec, truth, forecaster, given_lanes(cfg, cat.lane_keys()))
    _check_diagnostics(cfg, choice)
    _check_smoother(cfg, choice)
    check_estimate(cfg.estimate, estimable_names(cfg, choice), filter_spec,
                   [name for name, spec in cat.filters.items() if spec.estimates], int(cfg.smoother.lag),
                   int(cfg.analysis_every))
    check_estimated_lanes(cfg.estimate, choice.lanes)
    _check_outputs(cfg)
    _check_lanes(cfg, choice, cat)
    return choice


def check_lyapunov(cfg: DictConfig) -> ModelFacts:
    """Ranges of an assimbench-lyapunov config; returns the model's facts."""
    _, truth = _truth(cfg, catalogue())
    c = NodeChecks(cfg, "")
    if cfg.count is not None:
        c.integer("count", 1, f"an integer from 1 to the state size {truth.size}, or null for all", maximum=truth.size)
    every = c.integer("reorthonormalise", 1, "an integer >= 1 (RK4 steps between QR factorisations)")
    c.real("spinup_time", "a finite model time >= 0", minimum=0.0, strict=False)
    time = c.real("time", "a finite model time > 0", minimum=0.0)
    blocks = c.integer("blocks", 1, "an integer >= 1")
    dt = float(cfg.model.dt)
    if blocks * every * dt > time * (1 + 1e-9):
        fail("blocks", blocks, f"at most time / (reorthonormalise x model.dt) = {int(time / (every * dt))}")
    NodeChecks(cfg.observation, "observation").real("interval", "a finite model time > 0", minimum=0.0)
    c.seed()
    return truth
