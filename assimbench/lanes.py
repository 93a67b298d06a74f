"""Lanes: settings run side by side as one vectorised batch of one compiled program.

A lane is one combination of values of traced settings, given as lists under
``lanes``, e.g. ``lanes.filter.inflation=[1.02,1.05,1.1] replicates=4``: the
job then runs 3 lanes x 4 replicates = 12 experiments in one program. With
several lists the lanes are every combination (the last key varies fastest).
Every lane of a replicate sees the same truth and observations (they depend on
the seed, the replicate and the model and observation settings only), so lane
differences are paired.

Only traced floats can be lanes. The static parts of the job are built once
from the "hull" of the lanes: the LETKF/EnSRF observation window from the
largest radius, and the additive / RTPP / RTPS pieces switched on when any lane
uses them. A lane with such a piece at strength 0 inside a batch that uses it
applies it with zero strength, which equals not applying it up to rounding,
except that the additive piece still draws its noise: with a stochastic filter
(EnKF) that lane's random stream differs from a standalone run with
additive_std=0 (the statistics are the same).
"""

import dataclasses
import itertools
from typing import NamedTuple

import numpy as np
from omegaconf import DictConfig, OmegaConf

from assimbench.schema import FilterLanes, LanesConfig, ModelLanes, ObservationLanes
from assimbench.validation import ConfigError

# Component keys that are traced floats, hence allowed as lanes: the fields of the
# lane schemas (schema.LanesConfig), so the two can never disagree.
LANE_KEYS = {
    section: tuple(f.name for f in dataclasses.fields(node))
    for section, node in (("model", ModelLanes), ("forecast_model", ModelLanes), ("observation", ObservationLanes),
                          ("filter", FilterLanes))
}
TOP_LANE_KEYS = tuple(f.name for f in dataclasses.fields(LanesConfig) if f.name not in LANE_KEYS)
MAX_LANES = 4096
# Filters whose static parts are estimated from the model's climatology: a lane
# over a model parameter would leave them describing another model.
CLIMATOLOGY_FILTERS = ("3dvar", "climatology")


class LaneGrid(NamedTuple):
    """keys: the lane keys ("filter.inflation", ...); values: (lanes, len(keys)) float64."""

    keys: tuple
    values: np.ndarray

    @property
    def size(self) -> int:
        return int(self.values.shape[0])

    def coordinates(self) -> dict:
        """key -> (lanes,) values."""
        return {key: self.values[:, j] for j, key in enumerate(self.keys)}


def _given(cfg: DictConfig) -> list:
    """(full key, values) of every non-null lane list, in schema order."""
    lanes = cfg.get("lanes")
    if lanes is None:
        return []
    given = []
    for section, names in LANE_KEYS.items():
        for name in names:
            values = lanes[section][name]
            if values is not None:
                given.append((f"{section}.{name}", list(values)))
    for name in TOP_LANE_KEYS:
        if lanes[name] is not None:
            given.append((name, list(lanes[name])))
    return given


def lane_grid(cfg: DictConfig) -> LaneGrid:
    """Every combination of the lane lists (one lane, no keys, when there are none)."""
    given = _given(cfg)
    if not given:
        return LaneGrid(keys=(), values=np.zeros((1, 0)))
    keys = tuple(key for key, _ in given)
    values = np.array(list(itertools.product(*(vals for _, vals in given))), dtype=np.float64)
    return LaneGrid(keys=keys, values=values.reshape(-1, len(keys)))


def _set(cfg: DictConfig, key: str, value) -> None:
    OmegaConf.update(cfg, key, value, merge=False)


def _without_lanes(cfg: DictConfig) -> DictConfig:
    plain = OmegaConf.create(OmegaConf.to_container(cfg, resolve=True))
    plain.pop("lanes", None)
    return plain


def lane_config(cfg: DictConfig, grid: LaneGrid, lane: int) -> DictConfig:
    """The plain config of one lane: the lane's values set, no lanes."""
    one = _without_lanes(cfg)
    for j, key in enumerate(grid.keys):
        _set(one, key, float(grid.values[lane, j]))
    return one


def hull_config(cfg: DictConfig, grid: LaneGrid) -> DictConfig:
    """The config the static parts are built from: large enough for every lane."""
    hull = _without_lanes(cfg)
    for j, key in enumerate(grid.keys):
        column = grid.values[:, j]
        if key in ("filter.radius", "filter.additive_std", "filter.rtpp", "filter.rtps"):
            # Largest window; a piece switched on when any lane uses it.
            _set(hull, key, float(column.max()))
        else:
            _set(hull, key, float(column[0]))
    return hull


def check_lanes(cfg: DictConfig, check_one) -> None:
    """Lane keys must be traced settings of the chosen components; every lane must
    be a valid config (``check_one(lane_cfg)`` raises ConfigError)."""
    given = _given(cfg)
    if not given:
        return
    for key, values in given:
        if not values:
            raise ConfigError(f"lanes.{key}=[] is not allowed: a non-empty list of numbers")
        section, _, name = key.rpartition(".")
        if section:
            node = cfg[section]
            if name not in node:
                own = [k for k in LANE_KEYS[section] if k in node]
                what = f"{section} {node.name}" if "name" in node else section
                allowed = ", ".join(own) if own else "none"
                raise ConfigError(
                    f"lanes.{key} is not allowed: the {what} has no setting {name} "
                    f"(its lane settings: {allowed})"
                )
            forecaster = "model" if cfg.forecast_model.name == "same" else "forecast_model"
            if section == forecaster and cfg.filter.name in CLIMATOLOGY_FILTERS:
                raise ConfigError(
                    f"lanes.{key} is not allowed with filter={cfg.filter.name}: its static parts come from "
                    f"the forecast model's climatology; sweep model settings with --multirun"
                )
    grid = lane_grid(cfg)
    if grid.size > MAX_LANES:
        raise ConfigError(f"lanes: {grid.size} lanes is not allowed: at most {MAX_LANES} in one job")
    for lane in range(grid.size):
        try:
            check_one(lane_config(cfg, grid, lane))
        except ConfigError as err:
            raise ConfigError(f"lanes.{err}") from None


def lane_label(grid: LaneGrid, lane: int) -> str:
    """A short text naming one lane's values, e.g. "filter.inflation=1.05"."""
    return " ".join(f"{key}={grid.values[lane, j]:g}" for j, key in enumerate(grid.keys))
