"""The runner: compiled chunks of cycles fed to sinks.

:func:`run_plan` compiles the start-up and the chunk program of a plan once,
then runs the chunks in order and hands each one to every sink: the time
means, the divergence monitor, the result writer, the progress callback. The
batch axis inside a run is lanes x replicates, lane-major; :class:`Batch`
reshapes it to (lane, replicate) in this one place, for the writer and for
the result. With ``workers`` > 1 the batch is cut into contiguous blocks run
by worker processes (twin/block_workers.py); the sinks see the same chunks.
"""

import time
from collections.abc import Callable
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
from omegaconf import OmegaConf

from assimbench.io.result_writer import ResultWriter
from assimbench.io.results import Result
from assimbench.twin.block_workers import BlockWorkers, worker_count
from assimbench.twin.cycling import make_chunk, make_start, replicate_keys
from assimbench.twin.diagnostics import GAPPED, STATION_MEANS, STATION_SUMS
from assimbench.twin.summaries import TimeMeans, update_lost_runs


class Batch(NamedTuple):
    """The flat batch of a run: ``lanes`` x ``replicates``, lane-major; ``split`` gives arrays their
    (lane, replicate) axes when the run has lanes (``batched``), and leaves them as (replicate,) otherwise."""

    lanes: int
    replicates: int
    batched: bool

    @property
    def size(self) -> int:
        return self.lanes * self.replicates

    def split(self, values) -> np.ndarray:
        values = np.asarray(values)
        return values.reshape((self.lanes, self.replicates) + values.shape[1:]) if self.batched else values


class Chunk(NamedTuple):
    """One chunk's output: cycles first_cycle .. first_cycle + length - 1; series name -> (batch, length, ...)
    (the stored ensemble: (batch, snapshots, ...)); snapshots: the cycles of the stored ensembles."""

    first_cycle: int
    length: int
    series: dict
    snapshots: np.ndarray


class MeansSink:
    """Time means after burn-in (with batch-means intervals) and, if asked, the whole series in memory.
    A series with a third axis, (replicates, L, K), listed in ``columns`` = {name: K mean names} is
    averaged column by column under those names (``<name>_lag<l>`` per lag of a smoother,
    ``estimate_<p>_mean`` per estimated parameter); a series with ``shares`` = {name: values} also
    as the share of cycles at each value, ``<name>_share<v>`` (the time mean of an indicator: a
    distribution with intervals)."""

    def __init__(self, plan, names: list, keep_series: bool, columns: dict | None = None, shares: dict | None = None):
        self.means = TimeMeans(plan.lanes * plan.replicates, plan.cycles, plan.burn_in, gapped=GAPPED)
        self.columns = columns or {}
        self.names = list(names) + list(self.columns)
        self.shares = shares or {}
        self.kept = {name: [] for name in self.names} if keep_series else None

    def add(self, chunk: Chunk) -> None:
        for name in self.names:
            values = chunk.series[name]
            if name in self.columns:
                for column, mean_name in enumerate(self.columns[name]):
                    self.means.add(mean_name, values[:, :, column], chunk.first_cycle)
            else:
                self.means.add(name, values, chunk.first_cycle)
            for value in self.shares.get(name, ()):
                self.means.add(f"{name}_share{value}", (values == value).astype(np.float64), chunk.first_cycle)
            if self.kept is not None:
                self.kept[name].append(values)

    def series(self) -> dict:
        return {name: np.concatenate(parts, axis=1) for name, parts in self.kept.items()} if self.kept else {}


class DivergenceMonitor:
    """The first diverged cycle of every run: any value not finite, or a lost filter (analysis RMSE
    above the threshold for ``patience`` consecutive cycles; a brief excursion is a result)."""

    def __init__(self, plan, scalar_names: list):
        batch = plan.lanes * plan.replicates
        self.threshold = np.repeat(plan.thresholds, plan.replicates)[:, None]
        self.patience = plan.patience
        self.scalar_names = scalar_names
        self.first_bad = np.full(batch, -1, dtype=np.int64)
        self.open_runs = np.zeros(batch, dtype=np.int64)

    def add(self, chunk: Chunk) -> None:
        broken = np.zeros((self.first_bad.size, chunk.length), dtype=bool)
        for name in self.scalar_names:
            if name not in GAPPED:  # undefined on a cycle without observations to score, not broken
                broken |= ~np.isfinite(chunk.series[name])
        newly = (self.first_bad < 0) & broken.any(axis=1)
        self.first_bad[newly] = chunk.first_cycle + np.argmax(broken[newly], axis=1)
        above = chunk.series["rmse_analysis"] > self.threshold
        hit, start, self.open_runs = update_lost_runs(above, self.open_runs, self.patience)
        newly = (self.first_bad < 0) & (hit >= 0)
        self.first_bad[newly] = chunk.first_cycle + start[newly]


class WriterSink:
    """Appends every chunk to the result file (through its temporary name)."""

    def __init__(self, plan, output: str, batch: Batch):
        self.batch = batch
        self.writer = ResultWriter(output, plan.replicates, plan.interval, plan.layouts, plan.coordinates, plan.attrs,
                                   plan.grid.coordinates() or None)

    def add(self, chunk: Chunk) -> None:
        self.writer.append({name: self.batch.split(v) for name, v in chunk.series.items()}, chunk.snapshots)


class ProgressSink(NamedTuple):
    """Calls ``progress(done, total)`` after every chunk."""

    progress: Callable
    total: int

    def add(self, chunk: Chunk) -> None:
        self.progress(chunk.first_cycle + chunk.length - 1, self.total)


def block_programs(plan, first: int, stop: int, length: int) -> tuple:
    """(start carry, compiled chunk, keys, settings) of the batch elements first..stop-1 of a plan
    (lane-major flat indices): one compilation of each program, for chunks of ``length`` cycles."""
    keys = jnp.tile(replicate_keys(plan.seed, plan.replicates), (plan.lanes, 1))[first:stop]
    settings = jax.tree.map(lambda leaf: leaf[first:stop], plan.settings) if plan.batched else plan.settings
    start = make_start(plan.setup, plan.batched).lower(keys, settings).compile()
    carry = start(keys, settings)
    first_cycle = jnp.asarray(1, dtype=jnp.int64)
    chunk = make_chunk(plan.setup, length, plan.batched).lower(carry, keys, first_cycle, settings).compile()
    return carry, chunk, keys, settings


def run_block(plan, carry, chunk, keys, settings, length: int):
    """Yield every chunk's outputs of one block in cycle order: name -> (block, kept cycles, ...) numpy
    arrays (the last chunk may run past the end; its extra cycles are cut)."""
    for first_cycle in range(1, plan.cycles + 1, length):
        carry, out = chunk(carry, keys, jnp.asarray(first_cycle, dtype=jnp.int64), settings)
        keep = min(length, plan.cycles - first_cycle + 1)
        yield {name: np.asarray(values[:, :keep]) for name, values in jax.device_get(out).items()}


def _in_process(plan, length: int) -> tuple:
    """(compile seconds, every chunk's outputs of the whole batch), run in this process."""
    tic = time.perf_counter()
    programs = block_programs(plan, 0, plan.lanes * plan.replicates, length)
    return time.perf_counter() - tic, run_block(plan, *programs, length)


def _in_workers(plan, length: int, workers: int) -> tuple:
    """(longest compile seconds, every chunk's outputs of the whole batch), run in ``workers``
    processes (see block_workers); closing the outputs stops the workers."""
    pool = BlockWorkers(OmegaConf.to_container(plan.config, resolve=True), plan.lanes * plan.replicates, workers,
                        length)
    try:
        seconds = pool.compiled()
    except BaseException:
        pool.close()
        raise

    def joined():
        try:
            for _ in range(1, plan.cycles + 1, length):
                yield pool.next_chunk()
        finally:
            pool.close()

    return seconds, joined()


def _chunks(plan, outputs, clock: list):
    """Yield every Chunk of the run in cycle order from the per-chunk ``outputs``; ``clock[0]``
    accumulates the seconds spent cycling (waiting for the outputs)."""
    length = min(plan.chunk_cycles, plan.cycles)
    every = plan.ensemble_every
    for first_cycle in range(1, plan.cycles + 1, length):
        tic = time.perf_counter()
        out = next(outputs)
        clock[0] += time.perf_counter() - tic
        keep = min(length, plan.cycles - first_cycle + 1)
        cycles = first_cycle + np.arange(keep)
        snapshots = cycles[cycles % every == 0] if every else np.array([], dtype=np.int64)
        if "analysis_ensemble" in out:
            out["analysis_ensemble"] = out["analysis_ensemble"][:, snapshots - first_cycle]
        yield Chunk(first_cycle, keep, out, snapshots)


def _summaries(plan, means: MeansSink, scalar_names: list, batch: Batch) -> tuple:
    """(summary, per_replicate): time means over replicates with intervals, and per replicate."""
    summary, per_replicate = {}, {}
    for name in scalar_names:
        stats = means.means.summarise_groups(name, plan.lanes)
        summary.update({name: stats["mean"], name + "_low": stats["low"], name + "_high": stats["high"]})
        per_replicate[name] = batch.split(stats["per_replicate"])
        per_replicate[name + "_halfwidth"] = batch.split(stats["per_replicate_halfwidth"])
    for when in ("forecast", "analysis"):
        summary[f"spread_skill_ratio_{when}"] = summary[f"spread_{when}"] / summary[f"rmse_{when}"]
    if not plan.batched:
        summary = {name: float(value[0]) for name, value in summary.items()}
    return summary, per_replicate


def column_means(layouts: dict, coordinates: dict) -> dict:
    """{series: the names of its column means} for the series with a lag or a parameter axis."""
    out = {}
    for name, layout in layouts.items():
        if layout.dims[2:] == ("lag",):
            out[name] = [f"{name}_lag{lag}" for lag in coordinates["lag"]]
        elif layout.dims[2:] == ("parameter",):
            what = name.removeprefix("parameter_")
            out[name] = [f"estimate_{p.decode()}_{what}" for p in coordinates["parameter"]]
    return out


def estimate_errors(plan, summary: dict) -> None:
    """``estimate_<p>_error`` (with _low, _high) = the time-mean estimate minus the truth model's value,
    for every estimated parameter the truth model has (a scalar of the same name)."""
    truth = plan.settings["model"]
    for name in plan.setup.estimated:
        if name not in truth or np.ndim(truth[name]) > (1 if plan.batched else 0):
            continue
        values = np.asarray(truth[name])
        value = values.reshape(plan.lanes, plan.replicates)[:, 0] if plan.batched else float(values)
        for suffix in ("", "_low", "_high"):
            summary[f"estimate_{name}_error{suffix}"] = summary[f"estimate_{name}_mean{suffix}"] - value


def station_means(means, kept_cycles: int, batch) -> dict:
    """The by_station group's time means after burn-in, each (replicates, stations) (with lanes, a
    leading lane axis): every sum over the cycles a station reported divided by their number, and
    ``station_reports``, the share of the cycles it reported (NaN for a station that never did)."""
    reports = means.totals("station_reports")
    counted = np.where(reports > 0, reports, np.nan)
    out = {"station_reports": batch.split(reports / kept_cycles)}
    out.update({mean: batch.split(means.totals(total) / counted) for total, mean in STATION_MEANS.items()})
    return out


def run_plan(plan, output: str | None = None, progress: Callable | None = None, keep_series: bool = True,
             started: float | None = None) -> Result:
    """Run a plan; write ``output`` (HDF5) if given. ``started``: when the caller began (for the
    start-up time: checks, building, climatology and compilation)."""
    started = time.perf_counter() if started is None else started
    batch = Batch(plan.lanes, plan.replicates, plan.batched)
    scalar_names = [n for n, lay in plan.layouts.items() if lay.dims == ("replicate", "cycle")]
    count_names = [n for n, lay in plan.layouts.items() if len(lay.dims) == 3 and lay.dims[2] == "rank"]
    station_names = [n for n in plan.layouts if n in STATION_SUMS]
    columns = column_means(plan.layouts, plan.coordinates)
    shares = {"iterations": plan.choice.filter.step_counts(plan.config.filter)} if "iterations" in scalar_names else {}
    share_means = [f"{n}_share{value}" for n, values in shares.items() for value in values]
    length = min(plan.chunk_cycles, plan.cycles)
    workers = worker_count(plan.workers, plan.lanes * plan.replicates, plan.cycles)
    compile_seconds, outputs = _in_workers(plan, length, workers) if workers > 1 else _in_process(plan, length)
    startup_seconds = time.perf_counter() - started
    means = MeansSink(plan, scalar_names + count_names + station_names, keep_series, columns, shares)
    monitor = DivergenceMonitor(plan, scalar_names)
    sinks = [means, monitor]
    writer = WriterSink(plan, output, batch) if output is not None else None
    sinks += [writer] if writer else []
    sinks += [ProgressSink(progress, plan.cycles)] if progress else []
    clock = [0.0]
    try:
        for piece in _chunks(plan, outputs, clock):
            for sink in sinks:
                sink.add(piece)
        column_names = [name for names in columns.values() for name in names]
        summary, per_replicate = _summaries(plan, means, scalar_names + column_names + share_means, batch)
        if "parameter_mean" in columns:
            estimate_errors(plan, summary)
        if station_names:
            per_replicate.update(station_means(means.means, plan.cycles - plan.burn_in, batch))
        first_bad = batch.split(monitor.first_bad)
        finish = {
            "diverged": bool(np.any(first_bad >= 0)),
            "burn_in": plan.burn_in,
            "divergence_threshold": float(plan.thresholds[0]) if plan.lanes == 1 else plan.thresholds,
            "climatological_std": float(plan.climate_stds[0]) if plan.lanes == 1 else plan.climate_stds,
            "divergence_patience": plan.patience,
            "interval_method": "batch means, 20 batches after burn-in, Student t 95%",
            "compile_seconds": compile_seconds,
            "workers": workers,
            "startup_seconds": startup_seconds,
            "run_seconds": clock[0],
        }
        result = Result(
            config=OmegaConf.to_container(plan.config, resolve=True), summary=summary, per_replicate=per_replicate,
            totals={name: batch.split(means.means.totals(name)) for name in count_names}, first_bad_cycle=first_bad,
            attrs={**plan.attrs, **finish}, series={n: batch.split(v) for n, v in means.series().items()},
            lanes=plan.grid.coordinates(), layouts=plan.layouts, coordinates=plan.coordinates,
        )
        if writer is not None:
            result.path = writer.writer.finish(summary, per_replicate, result.totals, first_bad, finish)
    except BaseException:
        if writer is not None:
            writer.writer.close_incomplete()
        raise
    finally:
        outputs.close()  # stops the workers of an interrupted run
    return result
