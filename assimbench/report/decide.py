"""Decisions of a report: the best setting at every static point, its runner-up, and paired
differences with a verdict.

A static point is what a study cannot sweep inside one compiled program: the
filter, the ensemble size and every other varied key that is not a traced
setting (the lane keys of the catalogue). At each static point of an
experiment the candidates are its settings that lost no replicate
(:mod:`assimbench.report.pooling`); the best has the lowest time-mean
analysis RMSE over all replicates of all seeds (common practice in tuning
studies: the best over the swept values), the runner-up the next lowest.

Paired difference of two settings of one experiment: for every seed both ran,
they saw the same truth and observations, so the difference of their
per-cycle analysis RMSE, d_r(k) = e_A,r(k) - e_B,r(k), is formed cycle by
cycle and replicate by replicate; the replicates of all shared seeds are then
one set of independent series, and the time mean of d after burn-in gets the
same batch-means 95% interval as every other time mean
(:mod:`assimbench.twin.summaries`). Pairing removes the variability the two
settings share (the weather of the truth and the observation noise), so the
interval is much narrower than one formed from the two separate intervals.
Two settings are distinguishable when that interval excludes zero. Each
interval is a 95% interval of its own; with many comparisons some will
exclude zero by chance.
"""

import itertools
from dataclasses import dataclass

import numpy as np

from assimbench.config.catalogue import catalogue
from assimbench.report.collect import varied_settings
from assimbench.report.words import describe, point_name, setting_word
from assimbench.twin.summaries import TimeMeans

METRIC = "rmse_analysis"


def traced_keys() -> set:
    """Every key a lane can sweep ("filter.inflation", ...), from the catalogue."""
    return {f"{section}.{name}" for section, names in catalogue().lane_keys().items() for name in names}


@dataclass
class Point:
    """The decision at one static point: its settings, the best and the runner-up (None when
    fewer candidates), their paired difference (best minus runner-up) and the tuned keys."""

    experiment: int
    static: tuple  # ((key, value), ...) of the static keys other than filter and members
    settings: list
    tuned_keys: list
    best: object = None
    runner_up: object = None
    difference: dict | None = None

    @property
    def filter(self) -> str:
        return self.settings[0].filter

    @property
    def members(self):
        return self.settings[0].members

    @property
    def name(self) -> str:
        extras = ", ".join(f"{setting_word(k)} {v}" for k, v in self.static)
        return point_name(self.filter, self.members, extras)

    @property
    def lost(self) -> list:
        return [s for s in self.settings if s.lost]


def paired_difference(a, b, metric: str = METRIC) -> dict | None:
    """Time mean of a's minus b's per-cycle ``metric`` over the seeds both ran, with its 95% interval;
    None when they share no seed. Keys: mean, low, high, seeds."""
    b_rows = {row.experiment_key: row for row in b.rows}
    pairs = [(row, b_rows[row.experiment_key]) for row in a.rows if row.experiment_key in b_rows]
    if not pairs:
        return None
    difference = np.concatenate([x.series(metric) - y.series(metric) for x, y in pairs], axis=0)  # (R, K)
    burn_in = int(a.config.get("burn_in", 0))
    means = TimeMeans(difference.shape[0], difference.shape[1], burn_in)
    means.add("d", difference, 1)
    out = means.summarise("d")
    return {"mean": out["mean"], "low": out["low"], "high": out["high"], "seeds": [x.seed for x, _ in pairs]}


def distinguishable(difference: dict | None) -> bool:
    return difference is not None and (difference["low"] > 0 or difference["high"] < 0)


def verdict(difference: dict | None, a: str, b: str) -> str:
    """Plain words for a paired difference a minus b."""
    if difference is None:
        return "not paired (no common seed)"
    if difference["low"] > 0:
        return f"{b} lower"
    if difference["high"] < 0:
        return f"{a} lower"
    return "not distinguishable"


def _static_keys(settings: list) -> list:
    """Varied keys that are not traced settings (beyond filter and members)."""
    traced = traced_keys()
    return [k for k in varied_settings([s.rows[0] for s in settings]) if k not in traced]


def decide(settings: list, metric: str = METRIC) -> list:
    """The :class:`Point` of every experiment and static point, in a stable order."""
    points = []
    for experiment, mine in itertools.groupby(sorted(settings, key=lambda s: s.experiment), key=lambda s: s.experiment):
        mine = list(mine)
        static_keys = _static_keys(mine)
        tuned_keys = [k for k in varied_settings([s.rows[0] for s in mine]) if k not in static_keys]

        def where(s, static_keys=static_keys):
            return (s.filter, s.members or 0, tuple((k, repr(s.config.get(k))) for k in static_keys))

        for _key, group in itertools.groupby(sorted(mine, key=where), key=where):
            group = list(group)
            static = tuple((k, group[0].config.get(k)) for k in static_keys)
            point = Point(experiment, static, group, [k for k in tuned_keys
                                                      if len({repr(s.config.get(k)) for s in group}) > 1])
            ranked = sorted((s for s in group if not s.lost and np.isfinite(s.value(metric))),
                            key=lambda s: s.value(metric))
            if ranked:
                point.best = ranked[0]
            if len(ranked) > 1:
                point.runner_up = ranked[1]
                point.difference = paired_difference(ranked[0], ranked[1], metric)
            points.append(point)
    return points


def setting_text(setting, keys: list) -> str:
    """A setting in words, by the given keys ("inflation 1.05"), or its filter and size."""
    return describe(setting.config, keys) if keys else point_name(setting.filter, setting.members)


@dataclass
class Comparison:
    """A paired comparison of two tuned settings of one experiment."""

    experiment: int
    kind: str  # "runner-up", "filters" or "ensemble sizes"
    a: str
    b: str
    difference: dict | None

    @property
    def verdict(self) -> str:
        return verdict(self.difference, self.a, self.b)


def comparisons(points: list, metric: str = METRIC) -> list:
    """Best against runner-up at every point; tuned filters against each other at the same ensemble
    size and static settings; each filter's tuned settings at consecutive ensemble sizes."""
    out = []
    for p in points:
        if p.runner_up is not None:
            out.append(Comparison(p.experiment, "runner-up", f"{p.name}: {setting_text(p.best, p.tuned_keys)}",
                                  f"{p.name}: {setting_text(p.runner_up, p.tuned_keys)}", p.difference))
    decided = [p for p in points if p.best is not None]

    def compare(kind, grouping, order, label):
        for _, group in itertools.groupby(sorted(decided, key=grouping), key=grouping):
            group = sorted(group, key=order)
            pairs = itertools.combinations(group, 2) if kind == "filters" else zip(group, group[1:])
            for x, y in pairs:
                out.append(Comparison(x.experiment, kind, label(x), label(y), paired_difference(x.best, y.best, metric)))

    compare("filters", lambda p: (p.experiment, p.members or 0, repr(p.static)), lambda p: p.filter,
            lambda p: f"{p.name} (tuned)")
    compare("ensemble sizes", lambda p: (p.experiment, p.filter, repr(p.static)), lambda p: p.members or 0,
            lambda p: f"{p.name} (tuned)")
    return out
