"""The writer of result files: datasets streamed chunk by chunk into a temporary file, renamed when complete.

The layout it writes is described in :mod:`assimbench.io.results`.
"""

from typing import NamedTuple

import h5py
import numpy as np

from assimbench.io.atomic import partial_path, prepare, publish

FILE_KIND = "assimbench result"
FORMAT_VERSION = 1


class Layout(NamedTuple):
    """One stored dataset: long name, units, dimensions (replicate first, then the
    growing dimension "cycle" or "snapshot", then fixed ones) and dtype."""

    long_name: str
    units: str
    dims: tuple
    dtype: type = np.float64


def plain_attributes(attrs: dict) -> dict:
    """Attributes as every HDF5 and netCDF reader sees them: a boolean becomes the integer 0 or 1
    (HDF5 has no boolean type; h5py's enum for it is lost by netCDF libraries)."""
    return {k: int(v) if isinstance(v, (bool, np.bool_)) else v for k, v in attrs.items()}


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
        :meth:`append` and :meth:`finish` leads with (lane, replicate) axes, else with (replicate,)."""
        self.path = prepare(path)
        self.partial_path = partial_path(self.path)
        self._file = h5py.File(self.partial_path, "w")
        self._interval = float(interval)
        self._cycles = 0
        f = self._file
        f.attrs.update({"file_kind": FILE_KIND, "format_version": FORMAT_VERSION, "complete": 0})
        f.attrs.update(plain_attributes(attrs))
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
        for name, layout in layouts.items():
            self._create(name, layout, lane_coords)

    def _create(self, name: str, layout, lane_coords: str) -> None:
        """An empty, growable, compressed dataset with its attributes and dimension scales."""
        f, scales, lead_dims = self._file, self._scales, self._lead_dims
        batch = int(np.prod(self._lead))
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
        """The array as stored; its leading axes must be the file's (lane, replicate) or (replicate,)."""
        values = np.asarray(values, dtype=dtype)
        if values.shape[: len(self._lead)] != self._lead:
            raise ValueError(f"leading axes {values.shape[: len(self._lead)]} are not the file's {self._lead}")
        return values

    def _grow(self, ds, values):
        axis = len(self._lead)
        start = ds.shape[axis]
        ds.resize(start + values.shape[axis], axis=axis)
        ds[(slice(None),) * axis + (slice(start, None),)] = values

    def append(self, series: dict, snapshot_cycles=()) -> None:
        """Append one chunk: cycle datasets get (lead..., L, ...) for the next L cycles; snapshot
        datasets get (lead..., S, ...) for the cycles listed in ``snapshot_cycles``; lead is the
        file's (lane, replicate) or (replicate,)."""
        f = self._file
        cycle_sets = [n for n, lay in self._layouts.items() if lay.dims[1] == "cycle"]
        length = np.shape(series[cycle_sets[0]])[len(self._lead)]
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
        name -> (lanes, replicates) or (replicates,); totals: the same with a count axis (dims
        from the layout)."""
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
        # The group carries its own copies of its coordinates, so that a netCDF reader opening the
        # group alone (xarray's group="summary") sees them by name.
        local = {}

        def scale(dim):
            if dim not in local:
                source = self._scales[dim]
                local[dim] = group.create_dataset(dim, data=source[...])
                local[dim].attrs.update(dict(source.attrs.items()))
                local[dim].make_scale(dim)
            return local[dim]

        lane_keys = str(f.attrs.get("lane_keys", "")).split()
        for key in lane_keys:
            ds = group.create_dataset(key, data=f[key][...])
            ds.attrs.update({k: v for k, v in f[key].attrs.items() if k in ("long_name", "units")})
            ds.dims[0].attach_scale(scale("lane"))

        def attach(ds, dims):
            for axis, dim in enumerate(dims):
                ds.dims[axis].attach_scale(scale(dim))
            if lane_keys:
                ds.attrs["coordinates"] = " ".join(lane_keys)

        for name, values in per_replicate.items():
            ds = group.create_dataset(name, data=self._shaped(values, np.float64))
            base = name.removesuffix("_halfwidth")
            what = f"time mean after burn-in of {base}"
            ds.attrs["long_name"] = (f"half-width of the 95% interval of the {what}" if base != name else what)
            if base in self._layouts:
                ds.attrs["units"] = self._layouts[base].units
            # A per-station time mean (the by_station diagnostics) has the station axis last.
            attach(ds, self._lead_dims + (("station",) if ds.ndim > len(self._lead_dims) else ()))
        for name, values in totals.items():
            ds = group.create_dataset(name, data=self._shaped(values, np.int64))
            ds.attrs["long_name"] = "counts summed over the cycles after burn-in of " + name
            ds.attrs["units"] = "count"
            attach(ds, self._lead_dims + (self._layouts[name].dims[2],))
        f.attrs.update(plain_attributes(attrs))
        f.attrs["complete"] = 1
        f.close()
        return publish(self.path)

    def _attach_lead(self, ds) -> None:
        for axis, dim in enumerate(self._lead_dims):
            ds.dims[axis].attach_scale(self._scales[dim])

    def close_incomplete(self) -> None:
        if self._file.id.valid:
            self._file.attrs["complete"] = 0
            self._file.close()

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is not None:
            self.close_incomplete()
        return False


