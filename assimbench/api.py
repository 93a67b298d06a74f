"""Run a twin experiment from Python: config in, diagnostics out.

    >>> import assimbench
    >>> result = assimbench.run(["filter.members=10", "cycles=500", "burn_in=100"])
    >>> result.summary["rmse_analysis"], result.series["rmse_analysis"].shape

The command line is a thin layer over :func:`run_experiment`.
"""

import datetime
import math
import platform
import time
from dataclasses import dataclass, field
from importlib import metadata
from typing import Callable, Optional

import jax
import jax.numpy as jnp
import numpy as np
from omegaconf import DictConfig, OmegaConf

from assimbench.composition import compose_config, validate_config
from assimbench.cycling import TwinSetup, make_chunk, make_start, replicate_keys
from assimbench.diagnostics import CYCLE_SERIES
from assimbench.observations import every_kth
from assimbench.registry import FILTERS, MODELS
from assimbench.results import ResultWriter
from assimbench.validation import steps_per_cycle

LIBRARIES = ("jax", "jaxlib", "numpy", "scipy", "h5py", "hydra-core", "omegaconf")


@dataclass
class RunResult:
    """What one run returns.

    series: name -> (replicates, cycles) per-cycle diagnostics;
    summary: name -> time mean after burn-in, averaged over replicates;
    per_replicate: name -> (replicates,) time means after burn-in;
    first_bad_cycle: (replicates,) first cycle with a non-finite value, -1 if none.
    """

    config: DictConfig
    replicates: int
    interval: float
    series: dict
    summary: dict
    per_replicate: dict
    first_bad_cycle: np.ndarray
    compile_seconds: float
    run_seconds: float
    file_attrs: dict
    series_info: dict = field(default_factory=lambda: dict(CYCLE_SERIES))
    path: Optional[str] = None

    @property
    def diverged(self) -> bool:
        return bool(np.any(self.first_bad_cycle >= 0))

    @property
    def microseconds_per_cycle(self) -> float:
        """Wall time per cycle and replicate of the compiled chunks (compile excluded)."""
        cycles = next(iter(self.series.values())).shape[1]
        return 1e6 * self.run_seconds / cycles


def build(cfg: DictConfig):
    """Turn a validated config into the static setup and the dynamic settings pytree."""
    model = MODELS[cfg.model.name](cfg.model)
    operator = every_kth(model.size, int(cfg.observation.stride))
    filt, filter_settings = FILTERS[cfg.filter.name](cfg.filter, model, operator)
    setup = TwinSetup(
        model=model,
        operator=operator,
        filter=filt,
        steps_per_cycle=steps_per_cycle(float(cfg.observation.interval), model.dt),
    )
    settings = {
        "model": model.params,
        "observation": {"error_std": float(cfg.observation.error_std)},
        "filter": filter_settings,
        "initial_spread": float(cfg.initial_spread),
    }
    return setup, jax.tree.map(lambda v: jnp.asarray(v, dtype=jnp.float64), settings)


def first_bad_cycles(series: dict) -> np.ndarray:
    """(replicates,) first cycle (1-based) at which any series is non-finite; -1 if none."""
    bad = np.zeros_like(next(iter(series.values())), dtype=bool)
    for values in series.values():
        bad |= ~np.isfinite(values)
    first = np.argmax(bad, axis=1) + 1
    return np.where(bad.any(axis=1), first, -1)


def provenance(cfg: DictConfig) -> dict:
    """Root attributes that make a file reproducible: config, versions, seeds, time."""
    from assimbench import __version__

    versions = {}
    for name in LIBRARIES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = "not installed"
    return {
        "config": OmegaConf.to_yaml(cfg, resolve=True),
        "assimbench_version": __version__,
        "python_version": platform.python_version(),
        "library_versions": " ".join(f"{k}={v}" for k, v in versions.items()),
        "machine": platform.machine(),
        "seed": int(cfg.seed),
        "replicates": int(cfg.replicates),
        "replicate_keys": "fold_in(PRNGKey(seed), r) for r = 0 .. replicates-1",
        "created": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
    }


def run_experiment(
    cfg: DictConfig,
    output: Optional[str] = None,
    progress: Optional[Callable[[int, int], None]] = None,
) -> RunResult:
    """Validate ``cfg``, run the experiment, and write ``output`` (HDF5) if given.

    The cycles run in compiled chunks of ``cfg.chunk_cycles``; each chunk is
    appended to the file as it completes. ``progress(done, total)`` is called
    after every chunk.
    """
    validate_config(cfg)
    setup, settings = build(cfg)
    cycles, replicates = int(cfg.cycles), int(cfg.replicates)
    length = min(int(cfg.chunk_cycles), cycles)
    keys = replicate_keys(int(cfg.seed), replicates)
    attrs = provenance(cfg)

    tic = time.perf_counter()
    start = make_start(setup).lower(keys, settings).compile()
    carry = start(keys, settings)
    first = jnp.asarray(1, dtype=jnp.int64)
    chunk = make_chunk(setup, length).lower(carry, keys, first, settings).compile()
    compile_seconds = time.perf_counter() - tic

    writer = None
    if output is not None:
        writer = ResultWriter(output, replicates, float(cfg.observation.interval), CYCLE_SERIES, attrs)
    pieces = {name: [] for name in CYCLE_SERIES}
    run_seconds = 0.0
    try:
        for first_cycle in range(1, cycles + 1, length):
            tic = time.perf_counter()
            carry, series = chunk(carry, keys, jnp.asarray(first_cycle, dtype=jnp.int64), settings)
            series = jax.device_get(series)
            run_seconds += time.perf_counter() - tic
            keep = min(length, cycles - first_cycle + 1)  # the last chunk may run past the end
            series = {name: np.asarray(series[name][:, :keep]) for name in CYCLE_SERIES}
            if writer is not None:
                writer.append(series)
            for name in CYCLE_SERIES:
                pieces[name].append(series[name])
            if progress is not None:
                progress(first_cycle + keep - 1, cycles)
        full = {name: np.concatenate(parts, axis=1) for name, parts in pieces.items()}
        first_bad = first_bad_cycles(full)
        burn_in = int(cfg.burn_in)
        per_replicate = {name: values[:, burn_in:].mean(axis=1) for name, values in full.items()}
        summary = {name: float(values.mean()) for name, values in per_replicate.items()}
        result = RunResult(
            config=cfg,
            replicates=replicates,
            interval=float(cfg.observation.interval),
            series=full,
            summary=summary,
            per_replicate=per_replicate,
            first_bad_cycle=first_bad,
            compile_seconds=compile_seconds,
            run_seconds=run_seconds,
            file_attrs=attrs,
        )
        if writer is not None:
            finish_attrs = {
                "diverged": result.diverged,
                "burn_in": burn_in,
                "compile_seconds": compile_seconds,
                "run_seconds": run_seconds,
            }
            result.path = writer.finish(summary, per_replicate, first_bad, finish_attrs)
    except BaseException:
        if writer is not None:
            writer.close_incomplete()
        raise
    return result


def run(overrides=(), output: Optional[str] = None) -> RunResult:
    """Compose the config from ``overrides`` and run it; see :func:`run_experiment`."""
    return run_experiment(compose_config(overrides), output=output)


def is_finite_summary(summary: dict) -> bool:
    return all(math.isfinite(v) for v in summary.values())
