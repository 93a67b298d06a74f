"""The reference-vectors file (HDF5, written through a temporary name) and the port file read against it.

    /cycle, /member, /state, /state_column, /observation, /ensemble_row, /ensemble_column   dimension scales
    /inputs/<name>          what the analysis step is given (forecast ensemble, y, R, H, ...)
    /draws/<name>           the random numbers it used
    /intermediates/<name>   what it computes on the way, in the order it computes them
    /outputs/<name>         the analysis ensemble, mean and covariance
    /settings/<section.key> every traced setting of the analysis in force
    attrs: file_kind, format_version, filter, members, state_size, observation_count,
           observation_transform, seed, replicate, experiment_key, config (YAML),
           computed_in_order, the conventions (convention_*), library versions, complete

Every quantity's dataset carries ``units``, ``formula`` and ``dimensions`` attributes
(:mod:`assimbench.vectors.quantities`) besides its HDF5 dimension scales, so that
``xarray.open_dataset(path, group="outputs", engine="h5netcdf")`` shows named dimensions.

A port file holds any of the compared quantities (intermediates, outputs) at the same paths with
the same shapes; a netCDF-4 file with groups ``intermediates`` and ``outputs`` is such a file.
"""

import os
from typing import NamedTuple

import h5py
import numpy as np

from assimbench.io.atomic import atomic_file
from assimbench.io.provenance import provenance_versions
from assimbench.vectors.quantities import CONVENTIONS, QUANTITIES, compared, path_of

FILE_KIND = "assimbench reference vectors"
FORMAT_VERSION = 1
SCALES = ("cycle", "member", "state", "state_column", "observation", "ensemble_row", "ensemble_column")


class VectorsFileError(ValueError):
    """A vectors or port file that cannot be read as one (one line: which file, what is wrong)."""


class Vectors(NamedTuple):
    """A vectors file read back: the chosen cycles (K,), every quantity by name (numpy arrays), the
    compared names in the order they are computed, and the root attributes."""

    cycles: np.ndarray
    arrays: dict
    order: tuple
    attrs: dict


def write_vectors(path: str, cycles: np.ndarray, arrays: dict, settings: dict, attrs: dict,
                  static: dict | None = None) -> str:
    """Write ``arrays`` (name -> array, in the order computed) with ``settings`` (name -> float), the
    filter's ``static`` keys (attributes of /settings) and the root ``attrs`` to ``path`` through a
    temporary name; returns the absolute path."""
    sizes = {"cycle": len(cycles), "member": arrays["forecast_ensemble"].shape[1],
             "state": arrays["forecast_ensemble"].shape[2], "observation": arrays["observations"].shape[1]}
    sizes["ensemble_row"] = sizes["ensemble_column"] = sizes["member"]
    sizes["state_column"] = sizes["state"]
    with atomic_file(path) as partial, h5py.File(partial, "w") as f:
        f.attrs.update({"file_kind": FILE_KIND, "format_version": FORMAT_VERSION, "complete": 0, **attrs,
                        **CONVENTIONS, **provenance_versions(),
                        "computed_in_order": ",".join(name for name in arrays if compared(name))})
        scales = {}
        for dim in SCALES:
            values = np.asarray(cycles, dtype=np.int64) if dim == "cycle" else np.arange(sizes[dim])
            scales[dim] = f.create_dataset(dim, data=values)
            scales[dim].attrs["long_name"] = "cycle number (1 = the first analysis)" if dim == "cycle" else (
                f"{dim} index, 0-based")
            scales[dim].make_scale(dim)
        for name, values in arrays.items():
            quantity = QUANTITIES[name]
            dims = (("cycle",) if quantity.per_cycle else ()) + quantity.dims
            data = np.asarray(values)
            if data.shape != tuple(sizes[d] for d in dims):
                raise AssertionError(f"{name}: shape {data.shape} does not match its dimensions {dims}")
            dataset = f.create_dataset(path_of(name), data=data)
            dataset.attrs.update({"units": quantity.units, "formula": quantity.formula, "dimensions": ",".join(dims),
                                  "default_tolerance": quantity.tolerance})
            for axis, dim in enumerate(dims):
                dataset.dims[axis].attach_scale(scales[dim])
        group = f.create_group("settings")
        group.attrs.update(static or {})
        for name, value in settings.items():
            group.create_dataset(name, data=np.asarray(value, dtype=np.float64))
        f.attrs["complete"] = 1
    return os.path.abspath(path)


def _open(path: str, role: str) -> h5py.File:
    if not os.path.isfile(path):
        raise VectorsFileError(f"{role} file {path} does not exist")
    try:
        return h5py.File(path, "r")
    except OSError:
        raise VectorsFileError(f"{role} file {path} is not an HDF5 file (corrupt, truncated, or another format)") \
            from None


def read_vectors(path: str) -> Vectors:
    """The vectors file at ``path``; VectorsFileError for a missing, foreign, corrupt or unfinished one."""
    with _open(path, "vectors") as f:
        kind = f.attrs.get("file_kind")
        if kind != FILE_KIND:
            raise VectorsFileError(f"vectors file {path} is not a reference-vectors file (file_kind {kind!r}; "
                                   "write one with: assimbench-vectors write)")
        version = int(f.attrs.get("format_version", -1))
        if version != FORMAT_VERSION:
            raise VectorsFileError(f"vectors file {path} has format version {version}; this assimbench reads "
                                   f"version {FORMAT_VERSION}")
        if not f.attrs.get("complete"):
            raise VectorsFileError(f"vectors file {path} is incomplete (its writer stopped)")
        try:
            arrays = {name: f[path_of(name)][()] for name in QUANTITIES if path_of(name) in f}
            cycles = f["cycle"][()]
            attrs = {key: _plain(value) for key, value in f.attrs.items()}
        except (OSError, KeyError) as err:
            raise VectorsFileError(f"vectors file {path} is corrupt ({err})") from None
    order = tuple(name for name in attrs.get("computed_in_order", "").split(",") if name in arrays)
    damaged = [name for name in order if not np.all(np.isfinite(arrays[name]))]
    if damaged:  # the bench never writes a non-finite analysis (the self-check refuses it)
        raise VectorsFileError(f"vectors file {path} is corrupt: {path_of(damaged[0])} holds values that are not "
                               "finite")
    return Vectors(cycles, arrays, order, attrs)


def read_port(path: str, vectors: Vectors) -> tuple:
    """(the compared quantities a port file gives, name -> array; the paths of its other datasets
    under /intermediates, /outputs or at the root, which are not compared: a misspelt or misplaced
    quantity shows there), checked against ``vectors``: the same shapes, the same cycles when the
    port stores ``/cycle``; VectorsFileError otherwise, or when it gives none of them."""
    with _open(path, "port") as f:
        try:
            found = {name: f[path_of(name)][()] for name in vectors.order if path_of(name) in f}
            port_cycles = f["cycle"][()] if "cycle" in f and isinstance(f["cycle"], h5py.Dataset) else None
            ignored = [name for name, item in f.items() if isinstance(item, h5py.Dataset) and name not in SCALES]
            for group in ("intermediates", "outputs"):
                if isinstance(f.get(group), h5py.Group):
                    ignored += [f"{group}/{name}" for name in f[group] if name not in found]
        except (OSError, KeyError, TypeError) as err:
            raise VectorsFileError(f"port file {path} is corrupt ({err})") from None
    if not found:
        expected = ", ".join(path_of(name) for name in vectors.order if QUANTITIES[name].group == "outputs")
        raise VectorsFileError(f"port file {path} holds none of the quantities the vectors hold: give at least one "
                               f"of {expected} (or an intermediate at its path under /intermediates)")
    if port_cycles is not None and not np.array_equal(np.asarray(port_cycles).ravel(), vectors.cycles):
        raise VectorsFileError(f"port file {path} covers cycles {_cycles_text(port_cycles)}; the vectors cover "
                               f"{_cycles_text(vectors.cycles)}")
    for name, values in found.items():
        expected = vectors.arrays[name].shape
        if values.shape != expected:
            dims = "cycle," + ",".join(QUANTITIES[name].dims) if QUANTITIES[name].dims else "cycle"
            raise VectorsFileError(f"port file {path}: {path_of(name)} has shape {values.shape}; the vectors' is "
                                   f"{expected} ({dims})")
        if not np.issubdtype(values.dtype, np.number) and values.dtype != bool:
            raise VectorsFileError(f"port file {path}: {path_of(name)} is not numeric ({values.dtype})")
    return found, ignored


def _cycles_text(cycles) -> str:
    cycles = [int(c) for c in np.asarray(cycles).ravel()]
    return "[" + ",".join(map(str, cycles[:8])) + (",..." if len(cycles) > 8 else "") + "]"


def _plain(value):
    """An HDF5 attribute as a plain Python value."""
    if isinstance(value, bytes):
        return value.decode()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, np.generic):
        return value.item()
    return value
