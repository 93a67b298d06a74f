"""Gather result files into rows: one row per lane of each complete file.

A row carries the flattened resolved config (lane values applied), the time
means with their intervals, and the path to read per-cycle series from when a
paired comparison needs them. Rows are grouped into experiments: rows of one
experiment share the truth and the observations (same model, observation
network, seed, replicates and cycles), so their differences are paired.
"""

import os
from dataclasses import dataclass, field

import h5py
import numpy as np

from assimbench.results import ResultFileError, read_result

# Keys that fix the truth and the observations: rows differing in them are separate experiments.
EXPERIMENT_PREFIXES = ("model.", "observation.")
EXPERIMENT_KEYS = ("seed", "replicates", "cycles", "burn_in")
# Keys that never describe a setting of the comparison.
IGNORED_PREFIXES = ("lanes.", "store.", "output", "chunk_cycles", "diagnostics", "divergence_")


@dataclass
class Row:
    """One lane of one result file."""

    path: str
    lane: int  # -1 for a file without lanes
    config: dict  # flattened: "filter.inflation" -> 1.05
    summary: dict  # name -> float
    per_replicate: dict  # name -> (R,)
    totals: dict  # rank-count name -> (R, N + 1)
    first_bad_cycle: np.ndarray  # (R,)
    interval: float
    experiment: int = 0
    extra: dict = field(default_factory=dict)

    @property
    def lost(self) -> int:
        """How many replicates diverged."""
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
    """The rows of one file; ResultFileError when it is not a complete result."""
    stored = read_result(path)
    config = flatten(stored.config)
    interval = float(config.get("observation.interval", 1.0))
    if not stored.lanes:
        return [Row(path, -1, config, stored.summary, stored.per_replicate, stored.totals,
                    np.asarray(stored.first_bad_cycle), interval)]
    rows = []
    for lane in range(len(next(iter(stored.lanes.values())))):
        lane_config = dict(config)
        lane_config.update({key: float(values[lane]) for key, values in stored.lanes.items()})
        rows.append(Row(
            path, lane, lane_config,
            {k: float(np.asarray(v)[lane]) for k, v in stored.summary.items()},
            {k: v[lane] for k, v in stored.per_replicate.items()},
            {k: v[lane] for k, v in stored.totals.items()},
            np.asarray(stored.first_bad_cycle[lane]), interval,
        ))
    return rows


def experiment_key(row: Row) -> tuple:
    items = [(k, v) for k, v in row.config.items() if k.startswith(EXPERIMENT_PREFIXES) or k in EXPERIMENT_KEYS]
    return tuple(sorted((k, repr(v)) for k, v in items))


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
        row.experiment = experiments.setdefault(experiment_key(row), len(experiments) + 1)
    return rows, problems


def varied_settings(rows: list) -> list:
    """Config keys (besides the experiment's) whose values differ between rows, sorted."""
    keys = set()
    for row in rows:
        keys.update(row.config)
    varied = []
    for key in sorted(keys):
        if key.startswith(IGNORED_PREFIXES) or key in ("filter.name", "filter.members"):
            continue
        values = {repr(row.config.get(key)) for row in rows}
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
