"""The Lyapunov spectrum file: one HDF5 file per spectrum, written through a temporary name.

    /exponents   (exponent,)         descending, per model time unit
    /time        (block,)            end of each block of the averaging window
    /running     (block, exponent)   running estimate (the convergence record)
    attrs: file_kind, config, kaplan_yorke_dimension, positive_count,
           doubling_time (model time units), doubling_time_intervals
           (in analysis intervals of observation.interval), complete
"""

import os

import h5py
import numpy as np
from omegaconf import DictConfig, OmegaConf

from assimbench.io.atomic import atomic_file
from assimbench.io.provenance import provenance_versions

FILE_KIND = "assimbench lyapunov spectrum"


def write_spectrum(path: str, spectrum, cfg: DictConfig) -> str:
    """The spectrum file, written as ``path.partial`` and renamed when complete."""
    interval = float(cfg.observation.interval)
    with atomic_file(path) as partial, h5py.File(partial, "w") as f:
        f.attrs.update({"file_kind": FILE_KIND, "complete": 0, "config": OmegaConf.to_yaml(cfg, resolve=True),
                        **provenance_versions()})
        index = f.create_dataset("exponent", data=np.arange(spectrum.exponents.size))
        index.attrs.update({"long_name": "exponent index, descending", "units": "1"})
        index.make_scale("exponent")
        times = f.create_dataset("time", data=spectrum.times)
        times.attrs.update({"long_name": "end of the averaged time", "units": "model time units"})
        times.make_scale("time")
        exponents = f.create_dataset("exponents", data=spectrum.exponents)
        exponents.attrs.update({"long_name": "Lyapunov exponents", "units": "per model time unit"})
        exponents.dims[0].attach_scale(index)
        running = f.create_dataset("running", data=spectrum.running)
        running.attrs.update({"long_name": "running estimate of the exponents", "units": "per model time unit"})
        running.dims[0].attach_scale(times)
        running.dims[1].attach_scale(index)
        f.attrs.update({
            "kaplan_yorke_dimension": spectrum.kaplan_yorke_dimension,
            "positive_count": spectrum.positive_count,
            "doubling_time": spectrum.doubling_time,
            "doubling_time_intervals": spectrum.doubling_time / interval,
            "observation_interval": interval,
            "complete": 1,
        })
    return os.path.abspath(path)
