"""Gather result files into rows: one row per lane of each complete file.

A row is one lane of one result (a :class:`~assimbench.io.results.Result`
without lanes) with its config flattened ("filter.inflation" -> 1.05) and the
number of its experiment.

An experiment is everything about a run but the filter's settings and the
seed: the truth model, the observation network, the truth's model error, the
replicates, the cycles and the burn-in. Rows of one experiment with the same
seed saw the same truth and the same observations: the same stored
experiment key (a hash of everything that fixes them, written by the run), so
their differences are paired cycle by cycle. Rows of one experiment with
different seeds are independent draws of the same experiment, so the report
pools them (:mod:`assimbench.report.pooling`). A file without an experiment
key is named and never paired.
"""

import os
from dataclasses import dataclass

import h5py
import numpy as np

from assimbench.io.results import Result, ResultFileError, read_result

# Keys that make an experiment (the seed aside); pairing within one is by the stored key.
EXPERIMENT_PREFIXES = ("model.", "observation.")
EXPERIMENT_KEYS = ("replicates", "cycles", "burn_in", "truth_noise_std")
# Keys that never describe a setting of the comparison.
IGNORED_PREFIXES = ("lanes.", "store.", "output", "chunk_cycles", "workers", "lane_combination", "diagnostics", "divergence_")


@dataclass
class Row:
    """One lane of one result file: the result, its flattened config, its experiment number."""

    result: Result
    config: dict  # flattened: "filter.inflation" -> 1.05
    experiment: int = 0

    @property
    def path(self) -> str:
        return self.result.path

    @property
    def lane(self) -> int:
        """The lane index in its file (-1 for a file without lanes)."""
        return self.result.lane_index

    @property
    def summary(self) -> dict:
        return self.result.summary

    @property
    def per_replicate(self) -> dict:
        return self.result.per_replicate

    @property
    def totals(self) -> dict:
        return self.result.totals

    @property
    def first_bad_cycle(self) -> np.ndarray:
        return np.asarray(self.result.first_bad_cycle)

    @property
    def interval(self) -> float:
        return self.result.interval

    @property
    def experiment_key(self) -> tuple:
        """What pairs rows: the stored experiment key and the burn-in."""
        return (self.result.experiment_keys[0], self.config.get("burn_in"))

    @property
    def description(self) -> tuple:
        """What makes rows one experiment (all but the settings and the seed), hashable."""
        return tuple(sorted((k, repr(v)) for k, v in self.config.items()
                            if k.startswith(EXPERIMENT_PREFIXES) or k in EXPERIMENT_KEYS))

    @property
    def seed(self) -> int:
        return int(self.config.get("seed", 0))

    @property
    def blown_up(self) -> int:
        """How many replicates diverged (non-finite, or beyond the divergence threshold)."""
        return int(np.sum(self.first_bad_cycle >= 0))

    @property
    def filter(self) -> str:
        return str(self.config.get("filter.name"))

    @property
    def members(self):
        return self.config.get("filter.members")

    def series(self, name: str) -> np.ndarray:
        """(R, K) per-cycle series of this row, read from its (already checked) file."""
        with h5py.File(self.path, "r") as f:
            return f[name][self.lane] if self.lane >= 0 else f[name][...]


def flatten(node, prefix: str = "") -> dict:
    """Nested dict -> {"a.b": value}; lists become tuples (hashable)."""
    flat = {}
    for key, value in node.items():
        full = f"{prefix}{key}"
        if isinstance(value, dict):
            flat.update(flatten(value, full + "."))
        else:
            flat[full] = tuple(value) if isinstance(value, list) else value
    return flat


def result_files(paths) -> tuple:
    """(files, problems): every .h5 under the given files and folders; problems name missing paths."""
    files, problems = [], []
    for path in paths:
        if os.path.isdir(path):
            for root, dirs, names in os.walk(path):
                dirs[:] = sorted(d for d in dirs if not d.startswith("."))
                files.extend(os.path.join(root, n) for n in sorted(names) if n.endswith(".h5"))
        elif os.path.isfile(path):
            files.append(path)
        else:
            problems.append(f"{path}: no such file or folder")
    return files, problems


def rows_of(path: str) -> list:
    """The rows of one file; ResultFileError when it is not a complete result or has no experiment key."""
    stored = read_result(path, series=False)
    if not stored.experiment_keys:
        raise ResultFileError(f"{path}: no experiment key (written by an older version), so it cannot be "
                              "paired with other runs; run it again")
    slices = [stored.lane(i) for i in range(stored.lane_count)] if stored.lanes else [stored]
    return [Row(one, flatten(one.config)) for one in slices]


def collect(paths) -> tuple:
    """(rows, problems): rows of every readable file, numbered by experiment; one line per problem."""
    files, problems = result_files(paths)
    rows = []
    for path in files:
        try:
            rows.extend(rows_of(path))
        except ResultFileError as err:
            problems.append(f"{err}; skipped")
    experiments = {}
    for row in rows:
        row.experiment = experiments.setdefault(row.description, len(experiments) + 1)
    return rows, problems


def varied_settings(rows: list) -> list:
    """Config keys (besides the experiment's) whose values differ between the rows that have them, sorted."""
    keys = set()
    for row in rows:
        keys.update(row.config)
    varied = []
    for key in sorted(keys):
        # Keys the tables show in columns of their own are never listed again as settings.
        if key.startswith(IGNORED_PREFIXES) or key in ("filter.name", "filter.members", "seed", "replicates"):
            continue
        # Only rows that have the key count: a key of one filter (an IEnKS window, an LETKF radius)
        # is not a difference between filters that do not have it.
        values = {repr(row.config[key]) for row in rows if key in row.config}
        if len(values) > 1:
            varied.append(key)
    return varied


def experiment_differences(rows: list) -> list:
    """Keys that tell the experiments apart (empty for a single experiment)."""
    first = {}
    for row in rows:
        first.setdefault(row.experiment, row)
    if len(first) < 2:
        return []
    keys = set()
    for row in first.values():
        keys.update(k for k in row.config if k.startswith(EXPERIMENT_PREFIXES) or k in EXPERIMENT_KEYS)
    return sorted(k for k in keys if len({repr(r.config.get(k)) for r in first.values()}) > 1)
