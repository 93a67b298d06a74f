"""Console script ``assimbench-lyapunov``: the Lyapunov spectrum of a configured model.

A Hydra app over the same ``configs/model`` groups (primary config
``configs/lyapunov.yaml``), e.g. ``assimbench-lyapunov model=lorenz63 time=2000
output=l63.h5``. Writes an HDF5 file through a temporary name:

    /exponents   (exponent,)         descending, per model time unit
    /time        (block,)            end of each block of the averaging window
    /running     (block, exponent)   running estimate (the convergence record)
    attrs: file_kind, config, kaplan_yorke_dimension, positive_count,
           doubling_time (model time units), doubling_time_intervals
           (in analysis intervals of observation.interval), complete

and prints a short table. Bad input: one line, exit status 2, nothing written.
"""

import os
import sys

import h5py
import hydra
import jax
import numpy as np
from hydra.core.hydra_config import HydraConfig
from omegaconf import DictConfig, OmegaConf

from assimbench.api import provenance_versions
from assimbench.cli import EXIT_BAD_INPUT, INFORMATIONAL, compose_jobs
from assimbench.composition import config_dir
from assimbench.lyapunov import lyapunov_spectrum
from assimbench.registry import MODELS, STATE_SIZE
from assimbench.results import PARTIAL_SUFFIX
from assimbench.validation import ConfigError

FILE_KIND = "assimbench lyapunov spectrum"


def write_spectrum(path: str, spectrum, cfg: DictConfig) -> str:
    """The spectrum file, written as ``path.partial`` and renamed when complete."""
    path = os.path.abspath(path)
    os.makedirs(os.path.dirname(path), exist_ok=True)
    partial = path + PARTIAL_SUFFIX
    interval = float(cfg.observation.interval)
    with h5py.File(partial, "w") as f:
        f.attrs.update({"file_kind": FILE_KIND, "complete": False, "config": OmegaConf.to_yaml(cfg, resolve=True),
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
            "complete": True,
        })
    os.replace(partial, path)
    return path


def format_spectrum(spectrum, cfg: DictConfig, path) -> str:
    n = spectrum.exponents.size
    shown = spectrum.exponents if n <= 8 else np.concatenate([spectrum.exponents[:5], spectrum.exponents[-2:]])
    labels = [str(i + 1) for i in range(n)] if n <= 8 else [str(i + 1) for i in range(5)] + [str(n - 1), str(n)]
    change = spectrum.drift.max()
    lines = [
        f"assimbench-lyapunov  {cfg.model.name} (n={STATE_SIZE[cfg.model.name](cfg.model)}), {n} exponents "
        f"averaged over {cfg.time:g} model time units",
        "  " + "  ".join(f"l{label}={value:+.4f}" for label, value in zip(labels, shown)),
        f"  sum {spectrum.exponents.sum():+.4f}   positive {spectrum.positive_count}   "
        f"Kaplan-Yorke dimension {spectrum.kaplan_yorke_dimension:.3f}",
        f"  doubling time {spectrum.doubling_time:.4f} model time units = "
        f"{spectrum.doubling_time / float(cfg.observation.interval):.2f} analysis intervals of {cfg.observation.interval:g}",
        f"  convergence: largest change over the second half of the window {change:.2e}",
    ]
    if path is not None:
        lines.append(f"  result: {path}")
    return "\n".join(lines)


@hydra.main(config_path=config_dir(), config_name="lyapunov", version_base="1.3")
def _app(cfg: DictConfig) -> None:
    model = MODELS[cfg.model.name](cfg.model)
    x0 = model.first_guess(jax.random.PRNGKey(int(cfg.seed)), model.params)
    spectrum = lyapunov_spectrum(model, model.params, x0, count=cfg.count, reorthonormalise=int(cfg.reorthonormalise),
                                 spinup_time=float(cfg.spinup_time), time=float(cfg.time), blocks=int(cfg.blocks),
                                 key=jax.random.PRNGKey(int(cfg.seed) + 1))
    path = None
    if cfg.output is not None:
        output = cfg.output if os.path.isabs(cfg.output) else os.path.join(HydraConfig.get().runtime.output_dir, cfg.output)
        path = write_spectrum(output, spectrum, cfg)
    print(format_spectrum(spectrum, cfg, path), flush=True)


def main(argv=None) -> int:
    """Entry point of the ``assimbench-lyapunov`` console script."""
    argv = list(sys.argv[1:] if argv is None else argv)
    if not INFORMATIONAL.intersection(argv):
        try:
            compose_jobs(argv, config_name="lyapunov")
        except ConfigError as err:
            print(f"assimbench-lyapunov: error: {err}", file=sys.stderr)
            return EXIT_BAD_INPUT
    sys.argv = [sys.argv[0]] + argv
    _app()
    return 0


if __name__ == "__main__":
    sys.exit(main())
