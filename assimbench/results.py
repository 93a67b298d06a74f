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

import os
from dataclasses import dataclass, field
from typing import NamedTuple

import h5py
import numpy as np
import yaml

FILE_KIND = "assimbench result"
FORMAT_VERSION = 1
PARTIAL_SUFFIX = ".partial"


class ResultFileError(ValueError):
    """A file that is not a complete, readable assimbench result; one-line message."""


class Layout(NamedTuple):
    """One stored dataset: long name, units, dimensions (replicate first, then the
    growing dimension "cycle" or "snapshot", then fixed ones) and dtype."""

    long_name: str
    units: str
    dims: tuple
    dtype: type = np.float64


class ResultWriter:
    """Stream per-cycle datasets into a new result file, chunk by chunk.

    ``layouts`` maps dataset names to :class:`Layout`; ``coordinates`` maps each
    fixed dimension name (variable, station, member, rank) to its values.
    Use as a context manager: an exception inside leaves the partial file
    marked ``complete = False`` under its temporary name and never renames it.
    """

    def __init__(self, path: str, replicates: int, interval: float, layouts: dict, coordinates: dict, attrs: dict,
                 lanes: dict | None = None):
        """``lanes``: lane key -> (L,) values, or None; with lanes every array handed to
        :meth:`append` and :meth:`finish` has a flat leading axis of L x replicates
        (lane-major) that the file stores as (lane, replicate)."""
        self.path = os.path.abspath(path)
        self.partial_path = self.path + PARTIAL_SUFFIX
        os.makedirs(os.path.dirname(self.path), exist_ok=True)
        self._file = h5py.File(self.partial_path, "w")
        self._interval = float(interval)
        self._cycles = 0
        f = self._file
        f.attrs.update({"file_kind": FILE_KIND, "format_version": FORMAT_VERSION, "complete": False})
        f.attrs.update(attrs)
        lanes = lanes or {}
        lane_count = len(next(iter(lanes.values()))) if lanes else 0
        self._lead = (lane_count, replicates) if lanes else (replicates,)
        lead_dims = ("lane", "replicate") if lanes else ("replicate",)
        scales = {"replicate": self._scale("replicate", np.arange(replicates), "replicate (independent seed)", "1")}
        if lanes:
            scales["lane"] = self._scale("lane", np.arange(lane_count), "lane (one combination of lane settings)", "1")
            f.attrs["lane_keys"] = " ".join(lanes)
            for key, values in lanes.items():
                ds = f.create_dataset(key, data=np.asarray(values, dtype=np.float64))
                ds.attrs["long_name"] = f"value of {key} in each lane"
                ds.attrs["units"] = "as the config key"
                ds.dims[0].attach_scale(scales["lane"])
        self._lead_dims = lead_dims
        lane_coords = " ".join(lanes)
        scales["cycle"] = self._scale("cycle", None, "analysis cycle number", "1")
        if any("snapshot" in layout.dims for layout in layouts.values()):
            scales["snapshot"] = self._scale("snapshot", None, "cycle number of a stored ensemble", "1")
        names = {"variable": "state variable index", "station": "grid position of the observing station",
                 "member": "ensemble member", "rank": "rank of the verifying value among the members"}
        for dim, values in coordinates.items():
            scales[dim] = self._scale(dim, np.asarray(values), names.get(dim, dim), "1")
        time = f.create_dataset("time", shape=(0,), maxshape=(None,), dtype=np.float64, chunks=(4096,))
        time.attrs["long_name"] = "model time of the analysis"
        time.attrs["units"] = "model time units"
        time.dims[0].attach_scale(scales["cycle"])
        self._scales = scales
        self._layouts = layouts
        batch = int(np.prod(self._lead))
        for name, layout in layouts.items():
            fixed = tuple(len(scales[d]) for d in layout.dims[2:])
            chunk_len = max(1, min(1024, (1 << 20) // (8 * batch * int(np.prod(fixed or (1,))))))
            ds = f.create_dataset(
                name,
                shape=self._lead + (0,) + fixed,
                maxshape=self._lead + (None,) + fixed,
                dtype=layout.dtype,
                chunks=self._lead + (chunk_len,) + fixed,
                compression="gzip",
                compression_opts=4,
                shuffle=True,
            )
            ds.attrs["long_name"] = layout.long_name
            ds.attrs["units"] = layout.units
            # netCDF convention: auxiliary coordinates (time, lane values) are listed by name.
            auxiliary = ("time " if layout.dims[1] == "cycle" else "") + lane_coords
            if auxiliary.strip():
                ds.attrs["coordinates"] = auxiliary.strip()
            for axis, dim in enumerate(lead_dims + layout.dims[1:]):
                ds.dims[axis].attach_scale(scales[dim])

    def _scale(self, name, values, long_name, units):
        f = self._file
        if values is None:
            ds = f.create_dataset(name, shape=(0,), maxshape=(None,), dtype=np.int64, chunks=(4096,))
        else:
            ds = f.create_dataset(name, data=values)
        ds.attrs["long_name"] = long_name
        ds.attrs["units"] = units
        ds.make_scale(name)
        return ds

    def _shaped(self, values, dtype=None) -> np.ndarray:
        """Flat (batch, ...) -> (lane, replicate, ...) when the file has lanes."""
        values = np.asarray(values, dtype=dtype)
        return values.reshape(self._lead + values.shape[1:])

    def _grow(self, ds, values):
        axis = len(self._lead)
        start = ds.shape[axis]
        ds.resize(start + values.shape[axis], axis=axis)
        ds[(slice(None),) * axis + (slice(start, None),)] = values

    def append(self, series: dict, snapshot_cycles=()) -> None:
        """Append one chunk: cycle datasets get (replicates, L, ...) for the next L cycles;
        snapshot datasets get (replicates, S, ...) for the cycles listed in ``snapshot_cycles``."""
        f = self._file
        cycle_sets = [n for n, lay in self._layouts.items() if lay.dims[1] == "cycle"]
        length = np.shape(series[cycle_sets[0]])[1]
        start, stop = self._cycles, self._cycles + length
        f["cycle"].resize((stop,))
        f["cycle"][start:stop] = np.arange(start + 1, stop + 1)
        f["time"].resize((stop,))
        f["time"][start:stop] = self._interval * np.arange(start + 1, stop + 1)
        for name, layout in self._layouts.items():
            if layout.dims[1] == "cycle" or len(snapshot_cycles):
                self._grow(f[name], self._shaped(series[name], layout.dtype))
        if len(snapshot_cycles) and "snapshot" in f:
            snap = f["snapshot"]
            old = snap.shape[0]
            snap.resize((old + len(snapshot_cycles),))
            snap[old:] = snapshot_cycles
        self._cycles = stop
        f.attrs["cycles_done"] = stop
        f.flush()

    def finish(self, summary: dict, per_replicate: dict, totals: dict, first_bad_cycle, attrs: dict) -> str:
        """Write the summary, mark the file complete, close it and move it to its final name.

        summary: attribute name -> float, or (lanes,) array with lanes; per_replicate:
        name -> (batch,); totals: name -> (batch, k) summed counts (dims from the layout)."""
        f = self._file
        lead = len(self._lead)
        bad = f.create_dataset("first_bad_cycle", data=self._shaped(first_bad_cycle, np.int64))
        bad.attrs["long_name"] = "first cycle that diverged (non-finite or beyond the divergence threshold); -1: none"
        bad.attrs["units"] = "1"
        self._attach_lead(bad)
        group = f.create_group("summary")
        if lead == 1:
            group.attrs.update({k: float(v) for k, v in summary.items()})
        else:
            group.attrs.update({k: np.asarray(v, dtype=np.float64) for k, v in summary.items()})
        for name, values in per_replicate.items():
            ds = group.create_dataset(name, data=self._shaped(values, np.float64))
            ds.attrs["long_name"] = "time mean after burn-in of " + name
            ds.attrs["units"] = "see the per-cycle dataset"
            self._attach_lead(ds)
        for name, values in totals.items():
            ds = group.create_dataset(name, data=self._shaped(values, np.int64))
            ds.attrs["long_name"] = "counts summed over the cycles after burn-in of " + name
            ds.attrs["units"] = "count"
            self._attach_lead(ds)
            ds.dims[lead].attach_scale(self._scales[self._layouts[name].dims[2]])
        f.attrs.update(attrs)
        f.attrs["complete"] = True
        f.close()
        os.replace(self.partial_path, self.path)
        return self.path

    def _attach_lead(self, ds) -> None:
        for axis, dim in enumerate(self._lead_dims):
            ds.dims[axis].attach_scale(self._scales[dim])

    def close_incomplete(self) -> None:
        if self._file.id.valid:
            self._file.attrs["complete"] = False
            self._file.close()

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is not None:
            self.close_incomplete()
        return False


@dataclass
class StoredResult:
    """A result file read back.

    config (dict); series: name -> (R, K[, k]), or (L, R, K[, k]) with lanes;
    summary: name -> float, or (L,) array with lanes; per_replicate: name ->
    (R,) or (L, R) time means; totals: rank-count name -> (R[, L], N + 1);
    lanes: lane key -> (L,) values (empty without lanes).
    """

    path: str
    config: dict
    series: dict
    summary: dict
    attrs: dict
    first_bad_cycle: np.ndarray
    per_replicate: dict = field(default_factory=dict)
    totals: dict = field(default_factory=dict)
    lanes: dict = field(default_factory=dict)


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


def read_result(path: str) -> StoredResult:
    """Read a complete result file; raise ResultFileError (one line) for anything else.

    Nothing stored in the file is unpickled or evaluated: the config is parsed
    with ``yaml.safe_load``.
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
            series = {n: f[n][...] for n in names}
            summary = {k: _number(v) for k, v in f["summary"].attrs.items()}
            group = f["summary"]
            per_replicate = {n: group[n][...] for n in group if group[n].dtype.kind == "f"}
            totals = {n: group[n][...] for n in group if group[n].dtype.kind in "iu"}
            attrs = {k: _plain(v) for k, v in f.attrs.items()}
            lane_keys = str(attrs.get("lane_keys", "")).split()
            lanes = {key: f[key][...] for key in lane_keys}
            first_bad = f["first_bad_cycle"][...]
        except (KeyError, OSError, ValueError, TypeError, yaml.YAMLError) as err:
            raise ResultFileError(f"{path}: damaged result file ({err.__class__.__name__})") from None
    if not isinstance(config, dict):
        raise ResultFileError(f"{path}: damaged result file (stored config is not a mapping)")
    return StoredResult(path=path, config=config, series=series, summary=summary, attrs=attrs,
                        first_bad_cycle=first_bad, per_replicate=per_replicate, totals=totals, lanes=lanes)


def write_result(result, path: str) -> str:
    """Write an in-memory :class:`assimbench.api.RunResult` (its diagnostics and summary;
    stored fields are written only while running) to ``path`` through a temporary name."""
    layouts = {name: result.layouts[name] for name in result.series}
    lanes = result.lanes or None
    lead = 2 if lanes else 1

    def flat(values):
        values = np.asarray(values)
        return values.reshape((-1,) + values.shape[lead:])

    with ResultWriter(path, result.replicates, result.interval, layouts, result.coordinates, result.file_attrs,
                      lanes) as writer:
        writer.append({name: flat(v) for name, v in result.series.items()})
        return writer.finish(
            result.summary,
            {name: flat(v) for name, v in result.per_replicate.items()},
            {name: flat(v) for name, v in result.totals.items()},
            flat(result.first_bad_cycle),
            result.finish_attrs,
        )


def _number(value):
    array = np.asarray(value, dtype=np.float64)
    return float(array) if array.ndim == 0 else array


def _plain(value):
    if isinstance(value, bytes):
        return value.decode()
    if isinstance(value, np.generic):
        return value.item()
    return value
