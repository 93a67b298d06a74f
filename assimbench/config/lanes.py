"""Lanes: settings run side by side as one vectorised batch of one compiled program.

A lane is one combination of values of traced settings, given as lists under
``lanes``, e.g. ``lanes.filter.inflation=[1.02,1.05,1.1] replicates=4``: the
job then runs 3 lanes x 4 replicates = 12 experiments in one program. With
several lists the lanes are every combination (the last key varies fastest;
keys in catalogue order), or, with ``lane_combination=matched``, the lists
read side by side (lists of equal length; lane i takes the i-th value of each:
a diagonal, or any set of points, such as the tuner's candidates). Every lane of a replicate sees the same truth and
observations unless a lane key changes them (model settings, the observation
error), so lane differences are paired.

Only traced floats can be lanes: the keys a component's spec lists as
``traced``. The static parts of the job are built once from the "hull" of the
lanes: keys a spec lists as ``widest`` take their largest lane value (the
LETKF/EnSRF observation window from the largest radius; the additive / RTPP /
RTPS pieces switched on when any lane uses them), the others the first lane's.
A lane with such a piece at strength 0 inside a batch that uses it applies it
with zero strength, which equals not applying it up to rounding, except that
the additive piece still draws its noise: with a stochastic filter (EnKF)
that lane's random stream differs from a standalone run with additive_std=0
(the statistics are the same).
"""

import itertools
from typing import NamedTuple

import numpy as np
from omegaconf import DictConfig, OmegaConf

from assimbench.config.checks import ConfigError
from assimbench.config.schema import TOP_LANE_KEYS

MAX_LANES = 4096


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

    def label(self, lane: int) -> str:
        """A short text naming one lane's values, e.g. "filter.inflation=1.05"."""
        return " ".join(f"{key}={self.values[lane, j]:g}" for j, key in enumerate(self.keys))


def given_lanes(cfg: DictConfig, lane_keys: dict) -> list:
    """(full key, values) of every non-null lane list, in catalogue order (``lane_keys``: section -> keys)."""
    lanes = cfg.get("lanes")
    if lanes is None:
        return []
    given = [(f"{section}.{name}", list(lanes[section][name]))
             for section, names in lane_keys.items() for name in names if lanes[section][name] is not None]
    return given + [(name, list(lanes[name])) for name in TOP_LANE_KEYS if lanes[name] is not None]


COMBINATIONS = ("all", "matched")


def lane_rows(lists: list, combination: str = "all") -> list:
    """The lanes of value lists, one tuple per lane: every combination (``all``; the last list varies
    fastest), or the lists read side by side (``matched``: lane i takes the i-th value of each list;
    the lists have equal lengths, see :func:`check_lane_lists`)."""
    return list(zip(*lists)) if combination == "matched" else list(itertools.product(*lists))


def lane_grid(given: list, combination: str = "all") -> LaneGrid:
    """The lanes of the lane lists (one lane, no keys, when there are none); see :func:`lane_rows`."""
    if not given:
        return LaneGrid(keys=(), values=np.zeros((1, 0)))
    keys = tuple(key for key, _ in given)
    values = np.array(lane_rows([vals for _, vals in given], combination), dtype=np.float64)
    return LaneGrid(keys=keys, values=values.reshape(-1, len(keys)))


def plain_config(cfg: DictConfig) -> DictConfig:
    """A resolved copy of ``cfg`` without its lanes."""
    plain = OmegaConf.create(OmegaConf.to_container(cfg, resolve=True))
    plain.pop("lanes", None)
    return plain


def with_values(plain: DictConfig, keys, values) -> DictConfig:
    """A copy of the plain config with the given lane values set."""
    one = plain.copy()
    for key, value in zip(keys, values):
        OmegaConf.update(one, key, float(value), merge=False)
    return one


def hull_values(grid: LaneGrid, widest: set) -> np.ndarray:
    """The values the static parts are built from: the largest of a ``widest`` key, else the first lane's."""
    return np.array([grid.values[:, j].max() if key in widest else grid.values[0, j] for j, key in enumerate(grid.keys)])


def check_lane_lists(given: list, traced: dict, names: dict, climatology_section: str | None,
                     combination: str = "all") -> None:
    """Lane lists must be non-empty, name traced settings of the chosen components and, when
    ``combination`` is ``matched``, have equal lengths.

    traced: section -> the chosen component's traced keys; names: section -> a
    description of the chosen component ("filter etkf"); climatology_section:
    the section whose lanes are refused because the filter's static parts come
    from that model's climatology (None: no such section)."""
    for key, values in given:
        if not values:
            raise ConfigError(f"lanes.{key}=[] is not allowed: a non-empty list of numbers")
        section, _, name = key.rpartition(".")
        if not section:
            continue
        if name not in traced[section]:
            allowed = ", ".join(traced[section]) or "none"
            raise ConfigError(f"lanes.{key} is not allowed: the {names[section]} has no setting {name} "
                              f"(its lane settings: {allowed})")
        if section == climatology_section:
            raise ConfigError(f"lanes.{key} is not allowed with {names['filter']}: its static parts come from "
                              "the forecast model's climatology; sweep model settings with --multirun")
    lengths = [len(values) for _, values in given]
    if combination == "matched" and len(set(lengths)) > 1:
        listed = ", ".join(f"lanes.{key} {len(values)}" for key, values in given)
        raise ConfigError(f"lanes: lists of different lengths ({listed}) are not allowed with "
                          "lane_combination=matched: lists of equal length (lane i takes the i-th value of each)")
    size = (lengths[0] if combination == "matched" else int(np.prod(lengths))) if given else 1
    if size > MAX_LANES:
        raise ConfigError(f"lanes: {size} lanes is not allowed: at most {MAX_LANES} in one job")
