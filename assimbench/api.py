"""Run a twin experiment from Python: config in, diagnostics out.

    >>> import assimbench
    >>> result = assimbench.run(["filter.members=10", "cycles=500", "burn_in=100"])
    >>> result.summary["rmse_analysis"], result.series["rmse_analysis"].shape

The command line is a thin layer over :func:`run_experiment`.
"""

import datetime
import hashlib
import json
import platform
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from importlib import metadata

import jax
import jax.numpy as jnp
import numpy as np
from omegaconf import DictConfig, OmegaConf

from assimbench.climatology import climatology
from assimbench.composition import compose_config, validate_config
from assimbench.cycling import FIELDS, TwinSetup, make_chunk, make_start, replicate_keys
from assimbench.diagnostics import available_groups, series_catalogue
from assimbench.lanes import hull_config, lane_config, lane_grid
from assimbench.observations import every_kth
from assimbench.registry import FILTERS, MODELS, NEEDS_INTERVAL, forecast_model
from assimbench.results import Layout, ResultWriter
from assimbench.summaries import TimeMeans, update_lost_runs
from assimbench.validation import steps_per_cycle

LIBRARIES = ("jax", "jaxlib", "numpy", "scipy", "h5py", "hydra-core", "omegaconf")


@dataclass
class RunResult:
    """What one run returns.

    series: name -> (replicates, cycles[, k]) per-cycle diagnostics (empty when
    the run was asked not to keep them); summary: name -> time mean after
    burn-in over replicates, with name_low / name_high its 95% interval;
    per_replicate: name -> (replicates,) time means (and name_halfwidth);
    totals: rank-count name -> (replicates, N + 1) counts after burn-in;
    first_bad_cycle: (replicates,) first diverged cycle, -1 if none.

    With lanes (``lanes``: key -> (L,) values) every array gains a leading
    lane axis: series (L, R, cycles), summary values (L,), per_replicate
    (L, R), totals (L, R, N + 1), first_bad_cycle (L, R).
    """

    config: DictConfig
    replicates: int
    interval: float
    cycles: int
    series: dict
    summary: dict
    per_replicate: dict
    totals: dict
    first_bad_cycle: np.ndarray
    compile_seconds: float
    run_seconds: float
    file_attrs: dict
    layouts: dict = field(default_factory=dict)
    coordinates: dict = field(default_factory=dict)
    finish_attrs: dict = field(default_factory=dict)
    path: str | None = None
    lanes: dict = field(default_factory=dict)

    @property
    def diverged(self) -> bool:
        return bool(np.any(self.first_bad_cycle >= 0))

    @property
    def microseconds_per_cycle(self) -> float:
        """Wall time per cycle (all replicates together) of the compiled chunks, compile excluded."""
        return 1e6 * self.run_seconds / self.cycles


def build(cfg: DictConfig):
    """Turn a validated config into the static setup and the dynamic settings pytree."""
    model = MODELS[cfg.model.name](cfg.model)
    forecaster = forecast_model(cfg.forecast_model, model)
    operator = every_kth(model.resolved_size, int(cfg.observation.stride), str(cfg.observation.transform))
    interval = float(cfg.observation.interval)
    forecast_steps = steps_per_cycle(interval, forecaster.dt)
    extra = {"steps_per_interval": forecast_steps} if cfg.filter.name in NEEDS_INTERVAL else {}
    filt, filter_settings = FILTERS[cfg.filter.name](cfg.filter, forecaster, operator, **extra)
    available = available_groups(filt.members, filt.weighted, filt.reports_inflation)
    groups = available if cfg.diagnostics is None else tuple(g for g in available if g in cfg.diagnostics)
    store = cfg.store
    wanted = {name: bool(store[name]) for name in FIELDS if name != "analysis_ensemble"}
    wanted["analysis_ensemble"] = store.ensemble_every > 0
    fields = tuple(name for name in FIELDS if wanted[name])
    imperfect = forecaster is not model
    setup = TwinSetup(
        model=model,
        operator=operator,
        filter=filt,
        steps_per_cycle=steps_per_cycle(interval, model.dt),
        diagnostics=groups,
        fields=fields,
        forecast_model=forecaster if imperfect else None,
        forecast_steps=forecast_steps if imperfect else 0,
        truth_noise=float(cfg.truth_noise_std) > 0.0,
    )
    settings = {
        "model": model.params,
        "forecast_model": forecaster.params,
        "truth_noise_std": float(cfg.truth_noise_std),
        "observation": {"error_std": float(cfg.observation.error_std)},
        "filter": filter_settings,
        "initial_spread": float(cfg.initial_spread),
    }
    return setup, jax.tree.map(lambda v: jnp.asarray(v, dtype=jnp.float64), settings)


def layouts_of(setup: TwinSetup) -> tuple:
    """(layouts, coordinates) of every dataset this setup stores."""
    members = setup.filter.members
    layouts = {}
    for name, series in series_catalogue(setup.diagnostics, members).items():
        if series.extra_dim is None:
            layouts[name] = Layout(series.long_name, series.units, ("replicate", "cycle"))
        else:
            layouts[name] = Layout(series.long_name, series.units, ("replicate", "cycle", series.extra_dim), np.int32)
    field_layouts = {
        "truth": Layout("true state", "state units", ("replicate", "cycle", "variable")),
        "observations": Layout("observations y", "observation units", ("replicate", "cycle", "station")),
        "forecast_mean": Layout("forecast ensemble mean", "state units", ("replicate", "cycle", "variable")),
        "analysis_mean": Layout("analysis ensemble mean", "state units", ("replicate", "cycle", "variable")),
        "analysis_ensemble": Layout("analysis ensemble", "state units", ("replicate", "snapshot", "member", "variable")),
    }
    layouts.update({name: field_layouts[name] for name in setup.fields})
    coordinates = {
        "variable": np.arange(setup.model.resolved_size),
        "station": setup.operator.indices,
        "member": np.arange(members),
        "rank": np.arange(members + 1),
    }
    used = {d for layout in layouts.values() for d in layout.dims[2:]}
    return layouts, {d: v for d, v in coordinates.items() if d in used}


def climate_std(model) -> float:
    """Climatological standard deviation of one resolved variable (mean over them), for the divergence rule."""
    _, covariance = climatology(model, samples=4000)
    return float(np.sqrt(np.mean(np.diag(covariance)[: model.resolved_size])))


def config_hash(cfg: DictConfig) -> str:
    """SHA-256 of the resolved config without ``output`` (where a result goes does not change it)."""
    plain = OmegaConf.to_container(cfg, resolve=True)
    plain.pop("output", None)
    return hashlib.sha256(json.dumps(plain, sort_keys=True).encode()).hexdigest()


def provenance_versions() -> dict:
    """Versions of the package, Python and the libraries, and the machine kind."""
    from assimbench import __version__

    versions = {}
    for name in LIBRARIES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = "not installed"
    return {
        "assimbench_version": __version__,
        "python_version": platform.python_version(),
        "library_versions": " ".join(f"{k}={v}" for k, v in versions.items()),
        "machine": platform.machine(),
    }


def provenance(cfg: DictConfig) -> dict:
    """Root attributes that make a file reproducible: config, versions, seeds, time."""
    return {
        "config": OmegaConf.to_yaml(cfg, resolve=True),
        "config_hash": config_hash(cfg),
        **provenance_versions(),
        "seed": int(cfg.seed),
        "replicates": int(cfg.replicates),
        "replicate_keys": "fold_in(PRNGKey(seed), r) for r = 0 .. replicates-1",
        "created": datetime.datetime.now(datetime.UTC).isoformat(timespec="seconds"),
    }


def run_experiment(
    cfg: DictConfig,
    output: str | None = None,
    progress: Callable[[int, int], None] | None = None,
    keep_series: bool = True,
) -> RunResult:
    """Validate ``cfg``, run the experiment, and write ``output`` (HDF5) if given.

    The cycles run in compiled chunks of ``cfg.chunk_cycles``; each chunk is
    appended to the file as it completes and folded into the time means, so
    memory does not grow with the number of cycles when ``keep_series`` is
    False. ``progress(done, total)`` is called after every chunk.
    """
    entered = time.perf_counter()
    validate_config(cfg)
    grid = lane_grid(cfg)
    lanes, replicates = grid.size, int(cfg.replicates)
    batch = lanes * replicates  # lane-major: batch index = lane * replicates + replicate
    if grid.keys:
        setup, _ = build(hull_config(cfg, grid))
        lane_cfgs = [lane_config(cfg, grid, lane) for lane in range(lanes)]
        built = [build(one) for one in lane_cfgs]
        settings = jax.tree.map(lambda *leaves: jnp.repeat(jnp.stack(leaves), replicates, axis=0),
                                *(b[1] for b in built))
        thresholds = [_threshold(cfg, setup, b[0].model) for b in built]
    else:
        setup, settings = build(cfg)
        thresholds = [_threshold(cfg, setup, setup.model)]
    threshold = np.repeat(np.asarray(thresholds), replicates)[:, None]
    cycles, burn_in = int(cfg.cycles), int(cfg.burn_in)
    length = min(int(cfg.chunk_cycles), cycles)
    keys = jnp.tile(replicate_keys(int(cfg.seed), replicates), (lanes, 1))
    attrs = provenance(cfg)
    layouts, coordinates = layouts_of(setup)
    scalar_names = [n for n, lay in layouts.items() if lay.dims == ("replicate", "cycle")]
    count_names = [n for n, lay in layouts.items() if len(lay.dims) == 3 and lay.dims[2] == "rank"]
    diagnostic_names = scalar_names + count_names
    every = int(cfg.store.ensemble_every)
    batched = bool(grid.keys)

    tic = time.perf_counter()
    start = make_start(setup, batched).lower(keys, settings).compile()
    carry = start(keys, settings)
    first = jnp.asarray(1, dtype=jnp.int64)
    chunk = make_chunk(setup, length, batched).lower(carry, keys, first, settings).compile()
    compile_seconds = time.perf_counter() - tic
    startup_seconds = time.perf_counter() - entered  # validation, building, climatology, compilation

    writer = None
    if output is not None:
        writer = ResultWriter(output, replicates, float(cfg.observation.interval), layouts, coordinates, attrs,
                              grid.coordinates() or None)
    means = TimeMeans(batch, cycles, burn_in)
    kept = {name: [] for name in diagnostic_names} if keep_series else None
    first_bad = np.full(batch, -1, dtype=np.int64)
    open_runs = np.zeros(batch, dtype=np.int64)
    patience = int(cfg.divergence_patience)
    run_seconds = 0.0
    try:
        for first_cycle in range(1, cycles + 1, length):
            tic = time.perf_counter()
            carry, out = chunk(carry, keys, jnp.asarray(first_cycle, dtype=jnp.int64), settings)
            out = jax.device_get(out)
            run_seconds += time.perf_counter() - tic
            keep = min(length, cycles - first_cycle + 1)  # the last chunk may run past the end
            out = {name: np.asarray(values[:, :keep]) for name, values in out.items()}
            chunk_cycles = first_cycle + np.arange(keep)
            snapshots = chunk_cycles[chunk_cycles % every == 0] if every else np.array([], dtype=np.int64)
            if "analysis_ensemble" in out:
                out["analysis_ensemble"] = out["analysis_ensemble"][:, snapshots - first_cycle]
            # Diverged: any non-finite value, or a lost filter (analysis RMSE above the
            # threshold for `patience` consecutive cycles; a brief excursion is a result).
            broken = np.zeros((batch, keep), dtype=bool)
            for name in scalar_names:
                broken |= ~np.isfinite(out[name])
            newly = (first_bad < 0) & broken.any(axis=1)
            first_bad[newly] = first_cycle + np.argmax(broken[newly], axis=1)
            hit, start_of_run, open_runs = update_lost_runs(out["rmse_analysis"] > threshold, open_runs, patience)
            newly = (first_bad < 0) & (hit >= 0)
            first_bad[newly] = first_cycle + start_of_run[newly]
            for name in diagnostic_names:
                means.add(name, out[name], first_cycle)
                if kept is not None:
                    kept[name].append(out[name])
            if writer is not None:
                writer.append(out, snapshots)
            if progress is not None:
                progress(first_cycle + keep - 1, cycles)
        summary, per_replicate = {}, {}
        for name in scalar_names:
            stats_ = means.summarise_groups(name, lanes)
            summary[name] = stats_["mean"]
            summary[name + "_low"] = stats_["low"]
            summary[name + "_high"] = stats_["high"]
            per_replicate[name] = stats_["per_replicate"]
            per_replicate[name + "_halfwidth"] = stats_["per_replicate_halfwidth"]
        for when in ("forecast", "analysis"):
            summary[f"spread_skill_ratio_{when}"] = summary[f"spread_{when}"] / summary[f"rmse_{when}"]
        if not grid.keys:
            summary = {name: float(value[0]) for name, value in summary.items()}
        totals = {name: means.totals(name) for name in count_names}
        finish_attrs = {
            "diverged": bool(np.any(first_bad >= 0)),
            "burn_in": burn_in,
            "divergence_threshold": float(threshold[0, 0]) if lanes == 1 else threshold[::replicates, 0],
            "divergence_patience": patience,
            "interval_method": "batch means, 20 batches after burn-in, Student t 95%",
            "compile_seconds": compile_seconds,
            "startup_seconds": startup_seconds,
            "run_seconds": run_seconds,
        }
        series = {name: np.concatenate(parts, axis=1) for name, parts in kept.items()} if kept is not None else {}
        result = RunResult(
            config=cfg,
            replicates=replicates,
            interval=float(cfg.observation.interval),
            cycles=cycles,
            series=series,
            summary=summary,
            per_replicate=per_replicate,
            totals=totals,
            first_bad_cycle=first_bad,
            compile_seconds=compile_seconds,
            run_seconds=run_seconds,
            file_attrs=attrs,
            layouts=layouts,
            coordinates=coordinates,
            finish_attrs=finish_attrs,
        )
        if writer is not None:
            result.path = writer.finish(summary, per_replicate, totals, first_bad, finish_attrs)
        if grid.keys:
            _split_lanes(result, grid, replicates)
    except BaseException:
        if writer is not None:
            writer.close_incomplete()
        raise
    return result


def _threshold(cfg: DictConfig, setup: TwinSetup, model) -> float:
    """Analysis RMSE above which a run counts as lost (inf for reference runs)."""
    if not setup.filter.assimilates:
        return np.inf
    return float(cfg.divergence_factor) * climate_std(model)


def _split_lanes(result: RunResult, grid, replicates: int) -> None:
    """Reshape the flat (lanes x replicates) batch axis of every array to (lane, replicate)."""
    def split(values):
        values = np.asarray(values)
        return values.reshape((grid.size, replicates) + values.shape[1:])

    result.series = {name: split(v) for name, v in result.series.items()}
    result.per_replicate = {name: split(v) for name, v in result.per_replicate.items()}
    result.totals = {name: split(v) for name, v in result.totals.items()}
    result.first_bad_cycle = split(result.first_bad_cycle)
    result.lanes = grid.coordinates()


def run(overrides=(), output: str | None = None) -> RunResult:
    """Compose the config from ``overrides`` and run it; see :func:`run_experiment`."""
    return run_experiment(compose_config(overrides), output=output)
