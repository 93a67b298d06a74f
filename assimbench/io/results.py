"""The result file: one HDF5 file per job, written through a temporary name.

Layout (all names are ours; see README "Result file"):

    /                      attrs: file_kind, format_version, config (YAML),
                           config_hash, versions, seed, replicates, created,
                           complete, diverged, cycles_done, lane_keys
    /replicate   (replicate,)        dimension scale, 0..R-1
    /lane        (lane,)             dimension scale, 0..L-1, only when the job has lanes;
                                     then every dataset below gains a leading lane axis and
    /<lane key>  (lane,)             e.g. /filter.inflation holds each lane's value
    /cycle       (cycle,)            dimension scale, 1..K
    /time        (cycle,)            model time of each analysis
    /first_bad_cycle (replicate,)    first cycle with a non-finite value, -1 if none
    /<series>    (replicate, cycle[, rank])   per-cycle diagnostics, chunked, compressed
    /truth, /observations, /forecast_mean, /analysis_mean  (replicate, cycle, variable|station), optional
    /analysis_ensemble (replicate, snapshot, member, variable), optional, every k-th cycle
    /summary                         attrs: time means after burn-in over replicates, with
                                     <name>_low / <name>_high (95% interval)
    /summary/<series> (replicate,)   the same time means per replicate (and <series>_halfwidth)
    /summary/rank_* (replicate, rank) rank counts summed after burn-in

The file is created as ``<output>.partial`` next to the final path and
renamed only when complete, so a killed run never leaves a file at the final
name. ``read_result`` refuses files that are not assimbench results.
"""

import copy
from dataclasses import dataclass, field, replace

import h5py
import numpy as np
import yaml

from assimbench.io.result_writer import FILE_KIND, ResultWriter


class ResultFileError(ValueError):
    """A file that is not a complete, readable assimbench result; one-line message."""


@dataclass
class Result:
    """A run's results, in memory after a run or read back from its file.

    config: the resolved config (a dict); summary: name -> time mean after
    burn-in over replicates, with name_low / name_high its 95% interval;
    per_replicate: name -> time means per replicate (and name_halfwidth);
    totals: rank-count name -> counts after burn-in; first_bad_cycle: first
    diverged cycle per replicate, -1 if none; series: name -> per-cycle
    diagnostics (empty when not kept); attrs: the file's root attributes
    (provenance, timings, the divergence rule); lanes: lane key -> (L,) values.

    Without lanes the shapes are summary float, per_replicate (R,), totals
    (R, N + 1), first_bad_cycle (R,), series (R, K[, k]). With lanes every
    array gains a leading lane axis (summary values (L,)); :meth:`lane` slices
    one lane out (``lane_index`` then names it).
    """

    config: dict
    summary: dict
    per_replicate: dict
    totals: dict
    first_bad_cycle: np.ndarray
    attrs: dict
    series: dict = field(default_factory=dict)
    lanes: dict = field(default_factory=dict)
    layouts: dict = field(default_factory=dict)
    coordinates: dict = field(default_factory=dict)
    path: str | None = None
    lane_index: int = -1

    @property
    def replicates(self) -> int:
        return int(self.attrs["replicates"])

    @property
    def interval(self) -> float:
        return float(self.config["observation"]["interval"])

    @property
    def cycles(self) -> int:
        return int(self.config["cycles"])

    @property
    def diverged(self) -> bool:
        return bool(np.any(np.asarray(self.first_bad_cycle) >= 0))

    @property
    def compile_seconds(self) -> float:
        return float(self.attrs["compile_seconds"])

    @property
    def run_seconds(self) -> float:
        return float(self.attrs["run_seconds"])

    @property
    def microseconds_per_cycle(self) -> float:
        """Wall time per cycle (all replicates together) of the compiled chunks, compile excluded."""
        return 1e6 * self.run_seconds / self.cycles

    @property
    def experiment_keys(self) -> list:
        """One key per lane (one without lanes); empty for files written before keys were stored."""
        return str(self.attrs.get("experiment_key", "")).split()

    @property
    def lane_count(self) -> int:
        return len(next(iter(self.lanes.values()))) if self.lanes else 0

    def lane(self, index: int) -> "Result":
        """Lane ``index`` of a result with lanes, as a result without lanes (config with the lane's values)."""
        config = copy.deepcopy(self.config)
        for key, values in self.lanes.items():
            node = config
            *parents, leaf = key.split(".")
            for part in parents:
                node = node[part]
            node[leaf] = float(values[index])
        keys = self.experiment_keys
        attrs = dict(self.attrs, experiment_key=keys[index] if len(keys) > index else "")
        return replace(
            self, config=config, attrs=attrs, lanes={}, lane_index=index,
            summary={k: float(np.asarray(v)[index]) for k, v in self.summary.items()},
            per_replicate={k: v[index] for k, v in self.per_replicate.items()},
            totals={k: v[index] for k, v in self.totals.items()},
            first_bad_cycle=np.asarray(self.first_bad_cycle[index]),
            series={k: v[index] for k, v in self.series.items()},
        )


def stored_config_hash(path: str):
    """The config hash of a complete result file, or None (missing, incomplete, foreign, unreadable)."""
    try:
        with h5py.File(path, "r") as f:
            if f.attrs.get("file_kind") != FILE_KIND or not bool(f.attrs.get("complete", False)):
                return None
            digest = f.attrs.get("config_hash")
    except (OSError, ValueError):
        return None
    return _plain(digest) if digest is not None else None


def read_result(path: str, series: bool = True) -> Result:
    """Read a complete result file; raise ResultFileError (one line) for anything else.

    Nothing stored in the file is unpickled or evaluated: the config is parsed
    with ``yaml.safe_load``. With ``series=False`` the per-cycle datasets are
    left on disk (read them by name when needed).
    """
    try:
        f = h5py.File(path, "r")
    except (OSError, ValueError) as err:
        raise ResultFileError(f"{path}: not a readable HDF5 file ({err.__class__.__name__})") from None
    with f:
        if f.attrs.get("file_kind") != FILE_KIND:
            raise ResultFileError(f"{path}: not an assimbench result file")
        if not bool(f.attrs.get("complete", False)):
            raise ResultFileError(f"{path}: incomplete result (the run did not finish)")
        try:
            config = yaml.safe_load(str(f.attrs["config"]))
            names = [n for n in f if isinstance(f[n], h5py.Dataset) and f[n].ndim >= 2]
            stored = {n: f[n][...] for n in names} if series else {}
            summary = {k: _number(v) for k, v in f["summary"].attrs.items()}
            group = f["summary"]
            attrs = {k: _plain(v) for k, v in f.attrs.items()}
            lane_keys = str(attrs.get("lane_keys", "")).split()
            # The group's own coordinates (dimension scales, lane values) are not results.
            values = [n for n in group if n not in lane_keys and not h5py.h5ds.is_scale(group[n].id)]
            per_replicate = {n: group[n][...] for n in values if group[n].dtype.kind == "f"}
            totals = {n: group[n][...] for n in values if group[n].dtype.kind in "iu"}
            lanes = {key: f[key][...] for key in lane_keys}
            first_bad = f["first_bad_cycle"][...]
        except (KeyError, OSError, ValueError, TypeError, yaml.YAMLError) as err:
            raise ResultFileError(f"{path}: damaged result file ({err.__class__.__name__})") from None
    if not isinstance(config, dict):
        raise ResultFileError(f"{path}: damaged result file (stored config is not a mapping)")
    return Result(config=config, summary=summary, per_replicate=per_replicate, totals=totals,
                  first_bad_cycle=first_bad, attrs=attrs, series=stored, lanes=lanes, path=path)


def write_result(result: Result, path: str) -> str:
    """Write an in-memory :class:`Result` (its diagnostics and summary; stored fields are written
    only while running) to ``path`` through a temporary name."""
    layouts = {name: result.layouts[name] for name in result.series}
    attrs = {k: v for k, v in result.attrs.items() if k not in ("file_kind", "format_version", "complete")}
    with ResultWriter(path, result.replicates, result.interval, layouts, result.coordinates, attrs,
                      result.lanes or None) as writer:
        writer.append(result.series)
        return writer.finish(result.summary, result.per_replicate, result.totals, result.first_bad_cycle, {})


def _number(value):
    array = np.asarray(value, dtype=np.float64)
    return float(array) if array.ndim == 0 else array


def _plain(value):
    if isinstance(value, bytes):
        return value.decode()
    if isinstance(value, np.generic):
        return value.item()
    return value
