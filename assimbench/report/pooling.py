"""Settings pooled over seeds, and the rule that marks a replicate as lost.

A setting is one point of a study (filter, ensemble size and every other
setting) in one experiment. Its rows are the runs of it with different seeds;
their replicates are independent draws of the same experiment, so the
setting's time means pool them: the mean over all replicates, with the
batch-means interval combined over replicates as independent
(:func:`assimbench.twin.summaries.pooled_interval`).

A replicate is lost when the filter blew up (the run's divergence rule: a
non-finite value, or RMSE beyond the divergence threshold for a patience of
cycles) or when its time-mean analysis RMSE is above the failing level. A
filter that has lost the truth without blowing up is still worse than not
assimilating at all where it is observed, so the default level is the
observation error standard deviation (common practice: an analysis should
beat the observations it was given). The user can change it, as a multiple of
the observation error or as an RMSE in state units. Reference runs (the free
ensemble, climatology) are never lost by the level: they are yardsticks.
"""

import itertools
from dataclasses import dataclass, field

import numpy as np

from assimbench.config.catalogue import catalogue
from assimbench.report.collect import IGNORED_PREFIXES, Row
from assimbench.report.words import observation_error_level
from assimbench.twin.summaries import batch_count, pooled_interval

# Keys that never tell two settings of one experiment apart.
NOT_A_SETTING = ("seed",)


@dataclass(frozen=True)
class FailingLevel:
    """When a replicate's time-mean analysis RMSE counts as lost: above ``ratio`` x the observation
    error standard deviation, or above ``rmse`` (state units) when given; ratio 0 and no rmse: never."""

    ratio: float = 1.0
    rmse: float | None = None

    def level(self, config: dict):
        """The failing RMSE of one setting and its description, or (None, "") when the rule is off.

        The observation error is in observation units; it is a level for the state only when the
        network observes the state itself (``identity`` transform)."""
        if self.rmse is not None:
            return float(self.rmse), f"the failing level {self.rmse:g}"
        if self.ratio <= 0 or config.get("observation.transform", "identity") != "identity":
            return None, ""
        error = observation_error_level(config)
        times = "" if self.ratio == 1 else f"{self.ratio:g} x "
        return self.ratio * error, f"{times}the observation error {error:g}"


@dataclass
class Setting:
    """One setting of one experiment, pooled over its rows (one per seed, sorted by seed)."""

    rows: list
    experiment: int
    lost_reasons: list = field(default_factory=list)  # one line per lost replicate

    @property
    def config(self) -> dict:
        return self.rows[0].config

    @property
    def filter(self) -> str:
        return self.rows[0].filter

    @property
    def members(self):
        return self.rows[0].members

    @property
    def seeds(self) -> list:
        return [row.seed for row in self.rows]

    @property
    def replicates(self) -> int:
        return sum(len(row.first_bad_cycle) for row in self.rows)

    @property
    def lost(self) -> int:
        return len(self.lost_reasons)

    @property
    def reference(self) -> bool:
        """A reference run (no analysis), not a candidate."""
        spec = catalogue().filters.get(self.filter)
        return spec is not None and not spec.assimilates

    def per_replicate(self, name: str) -> np.ndarray:
        return np.concatenate([np.asarray(row.per_replicate[name], float) for row in self.rows])

    def has(self, name: str) -> bool:
        return all(name in row.per_replicate for row in self.rows)

    def estimate(self, name: str) -> tuple:
        """(mean, low, high) of the time mean of ``name`` over all replicates of all seeds."""
        if not self.has(name):
            return float("nan"), float("nan"), float("nan")
        first = self.rows[0]
        batches = batch_count(int(first.config["cycles"]), int(first.config.get("burn_in", 0)))
        return pooled_interval(self.per_replicate(name), self.per_replicate(name + "_halfwidth"), batches)

    def value(self, name: str) -> float:
        return self.estimate(name)[0]

    def spread_over_rmse(self) -> float:
        """Time-mean analysis spread divided by time-mean analysis RMSE (the ratio of the time means)."""
        return self.value("spread_analysis") / self.value("rmse_analysis")

    def totals(self, name: str):
        """Rank counts summed over every replicate of every seed, or None."""
        if not all(name in row.totals for row in self.rows):
            return None
        return sum(np.asarray(row.totals[name]).sum(axis=0) for row in self.rows)

    def series(self, name: str) -> np.ndarray:
        """(all replicates, cycles) of a per-cycle series, seeds in order."""
        return np.concatenate([row.series(name) for row in self.rows], axis=0)


def setting_key(row: Row) -> tuple:
    """What tells a row's setting apart within its experiment: its config without the
    experiment's keys, the seed and the keys that never describe a setting."""
    described = dict(row.description)
    return tuple(sorted((k, repr(v)) for k, v in row.config.items()
                        if k not in described and k not in NOT_A_SETTING and not k.startswith(IGNORED_PREFIXES)))


def lost_reasons(setting: Setting, failing: FailingLevel) -> list:
    """One line per lost replicate: which seed and replicate, and why."""
    level, words = (None, "") if setting.reference else failing.level(setting.config)
    reasons = []
    for row in setting.rows:
        rmse = np.asarray(row.per_replicate.get("rmse_analysis", []), float)
        for replicate, cycle in enumerate(np.atleast_1d(row.first_bad_cycle)):
            where = f"seed {row.seed} replicate {replicate}"
            if cycle >= 0:
                reasons.append(f"{where}: blew up at cycle {int(cycle)}")
            elif level is not None and replicate < rmse.size and not rmse[replicate] <= level:
                reasons.append(f"{where}: analysis RMSE {rmse[replicate]:.3g} above {words}")
    return reasons


def pool(rows: list, failing: FailingLevel | None = None) -> tuple:
    """(settings, notes): rows pooled into settings per experiment; a second row of the same setting
    and seed (the same run twice) is left out with a note."""
    failing = failing or FailingLevel()
    settings, notes = [], []
    ordered = sorted(rows, key=lambda r: (r.experiment, setting_key(r), r.seed))
    for (experiment, _), group in itertools.groupby(ordered, key=lambda r: (r.experiment, setting_key(r))):
        kept, seen = [], {}
        for row in group:
            if row.experiment_key in seen:
                notes.append(f"{row.path}: the same run as {seen[row.experiment_key]} (same setting and seed); "
                             "counted once")
                continue
            seen[row.experiment_key] = row.path if row.lane < 0 else f"{row.path} lane {row.lane}"
            kept.append(row)
        setting = Setting(kept, experiment)
        setting.lost_reasons = lost_reasons(setting, failing)
        settings.append(setting)
    return settings, notes
