"""The result file: one HDF5 file per job, written through a temporary name.

Layout (all names are ours; see README "Result file"):

    /                      attrs: file_kind, format_version, config (YAML),
                           versions, seed, replicates, created, complete,
                           diverged, cycles_done
    /replicate   (replicate,)        dimension scale, 0..R-1
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
from dataclasses import dataclass
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

    def __init__(self, path: str, replicates: int, interval: float, layouts: dict, coordinates: dict, attrs: dict):
        self.path = os.path.abspath(path)
        self.partial_path = self.path + PARTIAL_SUFFIX
        os.makedirs(os.path.dirname(self.path), exist_ok=True)
        self._file = h5py.File(self.partial_path, "w")
        self._interval = float(interval)
        self._cycles = 0
        f = self._file
        f.attrs.update({"file_kind": FILE_KIND, "format_version": FORMAT_VERSION, "complete": False})
        f.attrs.update(attrs)
        scales = {"replicate": self._scale("replicate", np.arange(replicates), "replicate (independent seed)", "1")}
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
        for name, layout in layouts.items():
            fixed = tuple(len(scales[d]) for d in layout.dims[2:])
            chunk_len = max(1, min(1024, (1 << 20) // (8 * replicates * int(np.prod(fixed or (1,))))))
            ds = f.create_dataset(
                name,
                shape=(replicates, 0) + fixed,
                maxshape=(replicates, None) + fixed,
                dtype=layout.dtype,
                chunks=(replicates, chunk_len) + fixed,
                compression="gzip",
                compression_opts=4,
                shuffle=True,
            )
            ds.attrs["long_name"] = layout.long_name
            ds.attrs["units"] = layout.units
            if layout.dims[1] == "cycle":
                ds.attrs["coordinates"] = "time"  # netCDF convention: time is an auxiliary coordinate
            for axis, dim in enumerate(layout.dims):
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

    @staticmethod
    def _grow(ds, values):
        start = ds.shape[1]
        ds.resize(start + values.shape[1], axis=1)
        ds[:, start:] = values

    def append(self, series: dict, snapshot_cycles=()) -> None:
        """Append one chunk: cycle datasets get (replicates, L, ...) for the next L cycles;
        snapshot datasets get (replicates, S, ...) for the cycles listed in ``snapshot_cycles``."""
        f = self._file
        cycle_sets = [n for n, lay in self._layouts.items() if lay.dims[1] == "cycle"]
        length = series[cycle_sets[0]].shape[1]
        start, stop = self._cycles, self._cycles + length
        f["cycle"].resize((stop,))
        f["cycle"][start:stop] = np.arange(start + 1, stop + 1)
        f["time"].resize((stop,))
        f["time"][start:stop] = self._interval * np.arange(start + 1, stop + 1)
        for name, layout in self._layouts.items():
            if layout.dims[1] == "cycle":
                self._grow(f[name], np.asarray(series[name], dtype=layout.dtype))
            elif len(snapshot_cycles):
                self._grow(f[name], np.asarray(series[name], dtype=layout.dtype))
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

        summary: attribute name -> float; per_replicate: name -> (replicates,);
        totals: name -> (replicates, k) summed counts (dims from the layout)."""
        f = self._file
        bad = f.create_dataset("first_bad_cycle", data=np.asarray(first_bad_cycle, dtype=np.int64))
        bad.attrs["long_name"] = "first cycle that diverged (non-finite or beyond the divergence threshold); -1: none"
        bad.attrs["units"] = "1"
        bad.dims[0].attach_scale(self._scales["replicate"])
        group = f.create_group("summary")
        group.attrs.update({k: float(v) for k, v in summary.items()})
        for name, values in per_replicate.items():
            ds = group.create_dataset(name, data=np.asarray(values, dtype=np.float64))
            ds.attrs["long_name"] = "time mean after burn-in of " + name
            ds.attrs["units"] = "see the per-cycle dataset"
            ds.dims[0].attach_scale(self._scales["replicate"])
        for name, values in totals.items():
            ds = group.create_dataset(name, data=np.asarray(values, dtype=np.int64))
            ds.attrs["long_name"] = "counts summed over the cycles after burn-in of " + name
            ds.attrs["units"] = "count"
            ds.dims[0].attach_scale(self._scales["replicate"])
            ds.dims[1].attach_scale(self._scales[self._layouts[name].dims[2]])
        f.attrs.update(attrs)
        f.attrs["complete"] = True
        f.close()
        os.replace(self.partial_path, self.path)
        return self.path

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
    """A result file read back: config (dict), series (name -> (R, K)), summary, attrs."""

    path: str
    config: dict
    series: dict
    summary: dict
    attrs: dict
    first_bad_cycle: np.ndarray


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
            summary = {k: float(v) for k, v in f["summary"].attrs.items()}
            attrs = {k: _plain(v) for k, v in f.attrs.items()}
            first_bad = f["first_bad_cycle"][...]
        except (KeyError, OSError, yaml.YAMLError) as err:
            raise ResultFileError(f"{path}: damaged result file ({err.__class__.__name__})") from None
    return StoredResult(path=path, config=config, series=series, summary=summary, attrs=attrs, first_bad_cycle=first_bad)


def write_result(result, path: str) -> str:
    """Write an in-memory :class:`assimbench.api.RunResult` (its diagnostics and summary;
    stored fields are written only while running) to ``path`` through a temporary name."""
    layouts = {name: result.layouts[name] for name in result.series}
    with ResultWriter(path, result.replicates, result.interval, layouts, result.coordinates, result.file_attrs) as writer:
        writer.append(result.series)
        return writer.finish(result.summary, result.per_replicate, result.totals, result.first_bad_cycle, result.finish_attrs)


def _plain(value):
    if isinstance(value, bytes):
        return value.decode()
    if isinstance(value, np.generic):
        return value.item()
    return value
