"""The result file: one HDF5 file per job, written through a temporary name.

Layout (all names are ours; see README "Result file"):

    /                      attrs: file_kind, format_version, config (YAML),
                           versions, seed, replicates, created, complete,
                           diverged, cycles_done
    /replicate   (replicate,)        dimension scale, 0..R-1
    /cycle       (cycle,)            dimension scale, 1..K
    /time        (cycle,)            model time of each analysis
    /first_bad_cycle (replicate,)    first cycle with a non-finite value, -1 if none
    /<series>    (replicate, cycle)  per-cycle diagnostics, chunked, compressed
    /summary                         attrs: time means after burn-in over replicates
    /summary/<series> (replicate,)   the same time means per replicate

The file is created as ``<output>.partial`` next to the final path and
renamed only when complete, so a killed run never leaves a file at the final
name. ``read_result`` refuses files that are not assimbench results.
"""

import os
from dataclasses import dataclass

import h5py
import numpy as np
import yaml

FILE_KIND = "assimbench result"
FORMAT_VERSION = 1
PARTIAL_SUFFIX = ".partial"


class ResultFileError(ValueError):
    """A file that is not a complete, readable assimbench result; one-line message."""


class ResultWriter:
    """Stream per-cycle series into a new result file, chunk by chunk.

    Use as a context manager: an exception inside leaves the partial file
    marked ``complete = False`` under its temporary name and never renames it.
    """

    def __init__(self, path: str, replicates: int, interval: float, series_info: dict, attrs: dict):
        self.path = os.path.abspath(path)
        self.partial_path = self.path + PARTIAL_SUFFIX
        os.makedirs(os.path.dirname(self.path), exist_ok=True)
        self._file = h5py.File(self.partial_path, "w")
        self._interval = float(interval)
        self._cycles = 0
        f = self._file
        f.attrs.update({"file_kind": FILE_KIND, "format_version": FORMAT_VERSION, "complete": False})
        f.attrs.update(attrs)
        rep = f.create_dataset("replicate", data=np.arange(replicates, dtype=np.int64))
        rep.attrs["long_name"] = "replicate (independent seed)"
        rep.attrs["units"] = "1"
        rep.make_scale("replicate")
        cycle = f.create_dataset("cycle", shape=(0,), maxshape=(None,), dtype=np.int64, chunks=(4096,))
        cycle.attrs["long_name"] = "analysis cycle number"
        cycle.attrs["units"] = "1"
        cycle.make_scale("cycle")
        time = f.create_dataset("time", shape=(0,), maxshape=(None,), dtype=np.float64, chunks=(4096,))
        time.attrs["long_name"] = "model time of the analysis"
        time.attrs["units"] = "model time units"
        time.dims[0].attach_scale(cycle)
        self._series = {}
        for name, long_name in series_info.items():
            ds = f.create_dataset(
                name,
                shape=(replicates, 0),
                maxshape=(replicates, None),
                dtype=np.float64,
                chunks=(replicates, 1024),
                compression="gzip",
                compression_opts=4,
                shuffle=True,
            )
            ds.attrs["long_name"] = long_name
            ds.attrs["units"] = "state units"
            ds.attrs["coordinates"] = "time"  # netCDF convention: time is an auxiliary coordinate
            ds.dims[0].attach_scale(rep)
            ds.dims[1].attach_scale(cycle)
            self._series[name] = ds

    def append(self, series: dict) -> None:
        """Append one chunk: each value is (replicates, L) for the next L cycles."""
        length = next(iter(series.values())).shape[1]
        start, stop = self._cycles, self._cycles + length
        f = self._file
        f["cycle"].resize((stop,))
        f["cycle"][start:stop] = np.arange(start + 1, stop + 1)
        f["time"].resize((stop,))
        f["time"][start:stop] = self._interval * np.arange(start + 1, stop + 1)
        for name, ds in self._series.items():
            ds.resize((ds.shape[0], stop))
            ds[:, start:stop] = series[name]
        self._cycles = stop
        f.attrs["cycles_done"] = stop
        f.flush()

    def finish(self, summary: dict, per_replicate: dict, first_bad_cycle: np.ndarray, attrs: dict) -> str:
        """Write the summary, mark the file complete, close it and move it to its final name."""
        f = self._file
        bad = f.create_dataset("first_bad_cycle", data=np.asarray(first_bad_cycle, dtype=np.int64))
        bad.attrs["long_name"] = "first cycle with a non-finite value (-1: none)"
        bad.attrs["units"] = "1"
        bad.dims[0].attach_scale(f["replicate"])
        group = f.create_group("summary")
        group.attrs.update({k: float(v) for k, v in summary.items()})
        for name, values in per_replicate.items():
            ds = group.create_dataset(name, data=np.asarray(values, dtype=np.float64))
            ds.attrs["long_name"] = "time mean after burn-in of " + name
            ds.attrs["units"] = "state units"
            ds.dims[0].attach_scale(f["replicate"])
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
            names = [n for n in f if isinstance(f[n], h5py.Dataset) and f[n].ndim == 2]
            series = {n: f[n][...] for n in names}
            summary = {k: float(v) for k, v in f["summary"].attrs.items()}
            attrs = {k: _plain(v) for k, v in f.attrs.items()}
            first_bad = f["first_bad_cycle"][...]
        except (KeyError, OSError, yaml.YAMLError) as err:
            raise ResultFileError(f"{path}: damaged result file ({err.__class__.__name__})") from None
    return StoredResult(path=path, config=config, series=series, summary=summary, attrs=attrs, first_bad_cycle=first_bad)


def write_result(result, path: str) -> str:
    """Write an in-memory :class:`assimbench.api.RunResult` to ``path`` (through a temporary name)."""
    with ResultWriter(path, result.replicates, result.interval, result.series_info, result.file_attrs) as writer:
        writer.append(result.series)
        return writer.finish(result.summary, result.per_replicate, result.first_bad_cycle, {})


def _plain(value):
    if isinstance(value, bytes):
        return value.decode()
    if isinstance(value, np.generic):
        return value.item()
    return value
