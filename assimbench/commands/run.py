"""Command line ``assimbench``: a Hydra app over the ``configs/`` groups.

Before Hydra starts, every job of the command (every point of a ``-m`` sweep)
is composed and validated, so a bad value stops the whole command with one
line on stderr and exit status 2, before anything is written.

A user's own experiment file: ``assimbench --config-path DIR --config-name
NAME [overrides]`` composes DIR/NAME.yaml on top of the package's config
(``_hydra.user_config_arguments``).

Re-run: ``assimbench --from FILE [overrides]`` runs the experiment stored in
a result file again (its stored resolved config, then the overrides).

Resume: a job whose output already holds a complete result of the same
resolved config (the stored ``config_hash``) is skipped; a complete result
of another config is never overwritten (exit 2); a missing or incomplete
file is (re)written. In a multirun each job's folder is named by its own
overrides, so re-running the same command into the same ``hydra.sweep.dir``
finds the finished jobs, and the command says how many it skips.
"""

import os
import signal
import sys

import hydra
import numpy as np
from hydra.core.hydra_config import HydraConfig
from omegaconf import DictConfig
from tqdm import tqdm

from assimbench.api import run_experiment
from assimbench.commands._hydra import fail, informational, job_folder_of, preflight_jobs, run_command
from assimbench.config.checks import ConfigError
from assimbench.config.composition import config_dir
from assimbench.config.plan import resolve
from assimbench.estimation.section import spread_warning
from assimbench.io.atomic import PARTIAL_SUFFIX
from assimbench.io.provenance import config_hash
from assimbench.io.results import ResultFileError, read_result, stored_config_hash
from assimbench.observations.networks import rms_error, station_count
from assimbench.report.words import setting_word, value_text
from assimbench.twin.block_workers import WorkerFailed

COMMAND = "assimbench"


# The jobs of this call's multirun as the pre-flight found them: (config, Hydra node) pairs, for
# the sweep's closing summary (:func:`sweep_summary`).
_SWEEP = []


def _job_output(cfg, hydra_node) -> str | None:
    return None if cfg.get("output") is None else os.path.join(job_folder_of(hydra_node, True), str(cfg.output))


def preflight(argv: list[str]) -> None:
    """Compose and check every job of ``argv`` and its folders; raise ConfigError on the first bad
    one (nothing to check for a call that only prints). For a multirun, say how many jobs already have a complete
    result (they are skipped)."""
    args, jobs = preflight_jobs(argv)
    _SWEEP.clear()
    if informational(args):
        return
    if args.multirun:
        _SWEEP.extend(jobs)
        # Each job's own output file, where the job will look for it: a complete result elsewhere in
        # the sweep (an older folder name) is not this job's and is not counted.
        skipped = 0
        for cfg, hydra_node in jobs:
            path = _job_output(cfg, hydra_node)
            if path is None:
                continue
            skipped += os.path.isfile(path) and stored_config_hash(path) == config_hash(cfg)
        if skipped:
            folder = str(jobs[0][1].sweep.dir)
            print(f"assimbench: resuming {folder}: {skipped} of {len(jobs)} jobs already have a complete "
                  "result with the same config and are skipped", file=sys.stderr, flush=True)


def _already_done(cfg: DictConfig, output: str) -> bool:
    """True when ``output`` holds a complete result of this config; ConfigError when it
    holds a complete result of another config (never overwritten)."""
    if not os.path.exists(output):
        return False
    stored = stored_config_hash(output)
    if stored is None:
        return False  # incomplete or unreadable: run again
    if stored != config_hash(cfg):
        raise ConfigError(f"output={output} holds a complete result of another config; it is not overwritten "
                          "(choose another output or hydra.sweep.dir)")
    return True


def _cell(summary, name):
    if name not in summary:
        return f"{'-':>22}"
    mean, low, high = summary[name], summary.get(name + "_low"), summary.get(name + "_high")
    if low is None or np.isnan(low):  # no interval
        return f"{mean:>22.4f}"
    return f"{mean:.4f} +- {(high - low) / 2:.4f}".rjust(22)


def _lane_value(value, lane: int):
    """A stored attribute that is one value per lane, or one value for all."""
    array = np.asarray(value, dtype=float)
    return float(array) if array.ndim == 0 else float(array[lane])


# Filter keys shown only while their switch is on; other keys are shown when not zero, null or false.
SWITCHED = {"adaptive": ("adaptive_std", "adaptive_min", "adaptive_max")}


def settings_line(config: dict, lane_keys=()) -> str:
    """The filter's settings in force, in plain words: what is on, and at what value (a setting that
    varies over the lanes is named as such: its values are in the lane table)."""
    node = dict(config.get("filter", {}))
    laned = [k.split(".", 1)[1] for k in lane_keys if k.startswith("filter.")]
    hidden = {"name", "members", *laned}
    for switch, keys in SWITCHED.items():
        if not node.get(switch):
            hidden.update(keys)
    shown = [(k, v) for k, v in node.items() if k not in hidden and v not in (0, None, False)]
    if "inflation" in node:
        shown = [("inflation", node["inflation"])] + [(k, v) for k, v in shown if k != "inflation"]
    text = "; ".join(f"{setting_word('filter.' + k)} {value_text(v)}" for k, v in shown)
    if laned:
        text += ("; " if text else "") + "by lane: " + ", ".join(setting_word("filter." + k) for k in laned)
    lag = int(config.get("smoother", {}).get("lag", 0))
    if lag:
        text += ("; " if text else "") + f"fixed-lag smoother over {lag} cycle{'s' if lag > 1 else ''}"
    every = int(config.get("analysis_every", 1))
    if every > 1:
        text += ("; " if text else "") + f"analyses every {every} cycles (the observations between them unused)"
    return text or "none to tune"


def network_line(config: dict) -> str:
    """Where, how often and how precisely the truth is observed."""
    net = config.get("observation", {})
    model = config.get("model", {})
    size = model.get("size") or model.get("slow") or 3
    stride = int(net.get("stride", 1))
    seen = "every variable" if stride == 1 else (f"one variable in {stride} ({-(-int(size) // stride)} of {size})")
    stations = net.get("stations")
    if stations is not None:
        between = sum(1 for q in stations if q != int(q))
        seen = f"{len(stations)} stations" + (f" ({between} between grid points)" if between else "")
    transform = net.get("transform", "identity")
    how = "" if transform == "identity" else f", {transform} of the state"
    factors = net.get("error_factors")
    scaled = "" if factors is None else f" x per-station factors {min(factors):g} to {max(factors):g}"
    length = float(net.get("correlation_length") or 0)
    correlated = "" if not length else f", correlated over {length:g} grid unit{'s' if length != 1 else ''} ({net.get('correlation_shape')})"
    line = f"{seen}{how} every {net.get('interval'):g} time units, error std {net.get('error_std'):g}{scaled}{correlated}"
    return line + outage_words(net) + assumed_words(config.get("assumed") or {})


def outage_words(net: dict) -> str:
    """How the network's stations fail, or nothing for a network without outages."""
    q, spell, blocks = float(net.get("outage_probability") or 0), float(net.get("outage_spell") or 0), net.get(
        "outage_schedule")
    words = []
    if q:
        words.append(f"stations out {q:.0%} of the cycles" + (f" in spells of {spell:g} cycles on average" if spell
                                                              else ", drawn afresh every cycle"))
    if blocks:
        words.append(f"{len(blocks)} scheduled outage block{'s' if len(blocks) > 1 else ''}")
    return "; " + ", ".join(words) if words else ""


def assumed_words(assumed: dict) -> str:
    """The filter's own view of R where it differs from the truth's."""
    given = {key: value for key, value in assumed.items() if value is not None}
    if not given:
        return ""
    names = {"error_std": "error std", "correlation_length": "correlation length",
             "correlation_shape": "correlation shape", "error_factors": "factors"}
    shown = []
    for key, value in given.items():
        if isinstance(value, (list, tuple)):
            listed = [float(v) for v in value]
            text = ("[" + ",".join(f"{v:g}" for v in listed) + "]" if len(listed) <= 6
                    else f"{len(listed)} values from {min(listed):g} to {max(listed):g}")
        else:
            text = f"{value:g}" if isinstance(value, (int, float)) else str(value)
        shown.append(f"{names.get(key, key)} {text}")
    return "; the filter assumes " + ", ".join(shown)


def station_total(config: dict) -> int:
    """The network's number of stations, from a run's config."""
    model = config.get("model", {})
    return station_count(config.get("observation", {}), int(model.get("size") or model.get("slow") or 3))


def assumed_variances(config: dict) -> np.ndarray:
    """R's diagonal as the filter assumes it, per station (the truth's where ``assumed`` is silent)."""
    network, assumed = config.get("observation", {}), config.get("assumed") or {}
    std = assumed.get("error_std") if assumed.get("error_std") is not None else network.get("error_std")
    factors = assumed.get("error_factors") if assumed.get("error_factors") is not None else network.get("error_factors")
    return float(std) ** 2 * np.square(np.asarray(factors if factors is not None else [1.0], dtype=float))


def station_lines(per_replicate: dict, config: dict) -> list:
    """The by_station diagnostics in two lines: the stations' Desroziers estimates of their error
    variance (mean over replicates) against the variances the filter assumed."""
    if "station_desroziers_r" not in per_replicate:
        return []
    estimate = np.nanmean(np.asarray(per_replicate["station_desroziers_r"], dtype=float), axis=-2)
    network = config.get("observation", {})
    stations = network.get("stations")
    positions = (np.asarray(stations, dtype=float) if stations is not None
                 else int(network.get("stride", 1)) * np.arange(estimate.size, dtype=float))
    where = lambda i: f"station number {i}, at grid position {positions[i]:g}"
    assumed = np.broadcast_to(assumed_variances(config), estimate.shape)
    ratio = estimate / assumed
    low, high = int(np.nanargmin(ratio)), int(np.nanargmax(ratio))
    return [f"  {'by station':<20}error variance as the data estimate it (Desroziers) over the variance the "
            f"filter assumed: from {ratio[low]:.3g} ({estimate[low]:.3g} / {assumed[low]:.3g}, {where(low)}) to "
            f"{ratio[high]:.3g} ({estimate[high]:.3g} / {assumed[high]:.3g}, {where(high)}); near 1 for a right R",
            f"  {'':<20}(every station's: station_desroziers_r in the file's /summary and in Result.per_replicate)"]


def observation_error(config: dict, error_std=None) -> tuple:
    """(the observation error a reader compares with, its label's suffix): ``error_std`` (default the
    config's), or with per-station factors the root mean square of the stations' errors."""
    network = config.get("observation", {})
    factors = network.get("error_factors")
    error = rms_error(network.get("error_std", np.nan) if error_std is None else error_std, factors)
    return error, "" if factors is None else " (RMS over the stations)"


def reference_lines(summary: dict, config: dict, climate: float) -> list:
    """The reference levels beside the filter's numbers: the observation error and climatology, and
    where the analysis stands against them."""
    error, rms = observation_error(config)
    identity = config.get("observation", {}).get("transform", "identity") == "identity"
    levels = ([f"observation error {error:.4f}{rms}"] if identity else []) + [f"climatology {climate:.4f} "
                                                                          "(RMSE of the climatological mean)"]
    lines = ["  references          " + ", ".join(levels)]
    rmse = summary.get("rmse_analysis")
    if rmse is None:
        return lines
    if not np.isfinite(rmse):
        lines.append("  analysis RMSE is    not finite (a replicate diverged): no verdict against the references")
        return lines
    parts = []
    if identity:
        parts.append(f"{rmse / error:.2f} x the observation error")
    parts.append(f"{rmse / climate:.2f} x climatology")
    levels = [(name, level) for name, level, used in (("the observation error", error, identity),
                                                      ("climatology", climate, True)) if used]
    better = [name for name, level in levels if rmse < level]
    worse = [name for name, level in levels if not rmse < level]
    if not worse:
        verdict = "better than both" if len(better) == 2 else f"better than {better[0]}"
    else:
        verdict = "; ".join(([f"better than {' and '.join(better)}"] if better else [])
                            + [f"NOT better than {' or '.join(worse)}"])
    lines.append(f"  analysis RMSE is    {', '.join(parts)}: {verdict}")
    return lines


def estimate_lines(summary: dict, config: dict) -> list:
    """The estimated parameters: time-mean analysis mean and spread with intervals, and the error
    against the truth's value where the truth model has the parameter."""
    names = list(config.get("estimate", {}).get("parameters") or [])
    if not names:
        return []
    lines = [f"  {'estimated':<20}{'mean':>22}{'spread':>22}{'minus truth':>22}"]
    for name in names:
        stem = f"estimate_{name}"
        lines.append(f"  {name:<20}{_cell(summary, stem + '_mean')}{_cell(summary, stem + '_spread')}"
                     f"{_cell(summary, stem + '_error')}")
    return lines


def format_summary(result, path, title: str) -> str:
    """The block printed at the end of a run: what ran (settings, network), time means after burn-in
    with 95% intervals, and the reference levels the analysis error should beat."""
    config = result.config
    head = [title, f"  settings            {settings_line(config, list(result.lanes))}",
            f"  observed            {network_line(config)}"]
    climate = result.attrs.get("climatological_std")
    if result.lanes:
        head[0] += f", {result.lane_count} lanes"
        lines = head + _lane_rows(result)
        if climate is not None:
            swept = result.lanes.get("observation.error_std")
            error, rms = observation_error(config, None if swept is None else swept[0])
            lines.append(f"  references          observation error {error:.4g}{rms}, climatology "
                         f"{_lane_value(climate, 0):.4f} (RMSE of the climatological mean, lane 0)")
        return "\n".join(lines + _footer(result, path))
    s = result.summary
    lines = head + [f"  {'time mean (95%)':<20}{'forecast':>22}{'analysis':>22}"]
    for label, stem in (("RMSE", "rmse"), ("spread", "spread"), ("CRPS", "crps"), ("CRPS (fair)", "crps_fair")):
        if f"{stem}_analysis" in s:
            lines.append(f"  {label:<20}{_cell(s, stem + '_forecast')}{_cell(s, stem + '_analysis')}")
    lags = sorted(int(name[len("rmse_smoothed_lag"):]) for name in s
                  if name.startswith("rmse_smoothed_lag") and name[len("rmse_smoothed_lag"):].isdigit())
    if lags:
        lines.append(f"  {'smoothed, lag':<20}{'RMSE':>22}{'spread':>22}")
        lines += [f"  {lag:>13}{'':<7}{_cell(s, f'rmse_smoothed_lag{lag}')}{_cell(s, f'spread_smoothed_lag{lag}')}"
                  for lag in lags]
    lines += estimate_lines(s, config)
    if "spread_skill_ratio_analysis" in s:
        lines.append(f"  {'spread / RMSE':<20}{s['spread_skill_ratio_forecast']:>22.4f}"
                     f"{s['spread_skill_ratio_analysis']:>22.4f}   (ratio of the time means)")
    for label, name in (("innovation ratio", "innovation_ratio"), ("Desroziers R", "desroziers_r"),
                        ("Desroziers HBH^T", "desroziers_hbht"), ("ESS", "ess"),
                        ("Gauss-Newton steps", "iterations"), ("member-intervals", "model_integrations"),
                        ("stations reporting", "stations_seen")):
        if name in s:
            of = f"   of {station_total(config)}" if name == "stations_seen" else ""
            lines.append(f"  {label:<20}{_cell(s, name)}{of}")
    lines += station_lines(result.per_replicate, config)
    shares = {int(name[len("iterations_share"):]): s[name] for name in s
              if name.startswith("iterations_share") and name[len("iterations_share"):].isdigit()}
    if shares:
        # A share is printed as a whole percent when it rounds to one or more, else listed as under 1%.
        seen = ", ".join(f"{steps}: {round(100 * share)}%" for steps, share in sorted(shares.items())
                         if round(100 * share) >= 1)
        rare = [str(steps) for steps, share in sorted(shares.items()) if 0 < share and round(100 * share) < 1]
        lines.append(f"  {'steps per cycle':<20}{seen}" + (f"; {', '.join(rare)}: under 1%" if rare else "")
                     + "   (share of cycles after burn-in; both searches' steps with multiple assimilation)")
    if climate is not None:
        lines += reference_lines(s, config, float(climate))
    if result.diverged:
        where = ", ".join(f"replicate {r} at cycle {c}" for r, c in enumerate(result.first_bad_cycle) if c >= 0)
        lines.append(f"  DIVERGED (the filter lost the truth): {where}")
    return "\n".join(lines + _footer(result, path))


def _lane_rows(result) -> list:
    """One row per lane: its values, analysis RMSE and spread with 95% intervals, lost replicates."""
    keys = list(result.lanes)
    width = max(12, *(len(k) + 2 for k in keys))
    s = result.summary
    head = "  " + "".join(f"{k:>{width}}" for k in keys)
    head += f"{'analysis RMSE (95%)':>24}{'analysis spread':>22}{'blew up':>9}"
    estimates = [name for name in s if name.startswith("estimate_") and name.endswith(("_mean", "_error"))]
    head += "".join(f"{name.removeprefix('estimate_').replace('_mean', '').replace('_error', ' minus truth'):>22}"
                    for name in estimates)
    rows = [head]
    for lane in range(result.lane_count):
        one = {name: float(np.asarray(v)[lane]) for name, v in s.items()}
        lost = int(np.sum(result.first_bad_cycle[lane] >= 0))
        row = "  " + "".join(f"{result.lanes[k][lane]:>{width}g}" for k in keys)
        rows.append(row + f"{_cell(one, 'rmse_analysis'):>24}{_cell(one, 'spread_analysis')}{lost:>9}"
                    + "".join(_cell(one, name) for name in estimates))
    return rows


def _footer(result, path) -> list:
    batch = int(np.size(result.first_bad_cycle))
    runs = f"{batch} runs side by side" if batch > 1 else "1 run"
    workers = int(result.attrs.get("workers", 1))
    runs += f" in {workers} worker processes" if workers > 1 else ""
    lines = [
        f"  start-up {result.attrs['startup_seconds']:.1f} s (compile {result.compile_seconds:.1f} s), "
        + f"cycling {result.run_seconds:.2f} s "
        + f"({result.microseconds_per_cycle:.0f} us per cycle for {runs})"
    ]
    if path is not None:
        lines.append(f"  result: {path}")
    return lines


class _ChunkProgress:
    """A progress bar per chunk on a terminal (tqdm on stderr); silent otherwise. After every chunk
    it raises :class:`Stopped` if a stop signal was recorded.

    The bar appears with the first finished chunk, so its rate excludes compilation.
    """

    def __init__(self, total: int):
        self._total = total
        self._bar = None
        self.done = 0

    def __call__(self, done: int, total: int) -> None:
        self.done = done
        if self._bar is None and sys.stderr.isatty():
            self._bar = tqdm(total=total, unit="cycle", desc="assimbench", leave=False, file=sys.stderr)
        if self._bar is not None:
            self._bar.update(done - self._bar.n)
        _raise_if_stopped()  # between chunks: the writer closes the partial file cleanly

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()


class Stopped(BaseException):
    """SIGTERM or SIGINT arrived; raised between chunks so the writer can close cleanly."""

    def __init__(self, signum: int):
        super().__init__(signum)
        self.signum = signum


# The signal that asked the run to stop. The handler only records it and the run raises Stopped
# between chunks: an exception raised inside a signal handler lands wherever Python happens to be,
# and inside a finaliser (a weak-reference callback of a cache) Python only prints "Exception
# ignored" and carries on, so the run would finish as if nothing had been typed.
_STOP = {"signum": None}


def _record_stop(signum, frame) -> None:
    _STOP["signum"] = signum


def _raise_if_stopped() -> None:
    if _STOP["signum"] is not None:
        raise Stopped(_STOP["signum"])


def _catch_stop_signals() -> None:
    _STOP["signum"] = None
    for signum in (signal.SIGTERM, signal.SIGINT):
        try:
            signal.signal(signum, _record_stop)
        except ValueError:  # not the main thread (some launchers): keep the default behaviour
            pass


@hydra.main(config_path=config_dir(), config_name="config", version_base="1.3")
def _hydra_app(cfg: DictConfig) -> None:
    output = cfg.output
    if output is not None and not os.path.isabs(output):
        output = os.path.join(HydraConfig.get().runtime.output_dir, output)
    progress = _ChunkProgress(int(cfg.cycles))
    _catch_stop_signals()
    try:
        if output is not None and _already_done(cfg, output):
            print(f"{COMMAND}: skipped: {output} is complete for this config", flush=True)
            return
        plan = resolve(cfg)
        warning = spread_warning(cfg.estimate, cfg.lanes.get("estimate"))
        if warning:
            print(f"{COMMAND}: {warning}", file=sys.stderr, flush=True)
        _raise_if_stopped()
        result = run_experiment(plan, output=output, progress=progress, keep_series=False)
    except ConfigError as err:
        sys.exit(fail(COMMAND, str(err)))
    except WorkerFailed as err:
        kept = f"; the completed chunks are kept in {output}.partial, marked incomplete" if output is not None else ""
        print(f"{COMMAND}: error: {err}{kept}", file=sys.stderr, flush=True)
        sys.exit(1)
    except Stopped as stop:
        name = signal.Signals(stop.signum).name
        kept = (f"the completed chunks ({progress.done} of {cfg.cycles} cycles) are kept in {output}.partial, "
                "marked incomplete" if output is not None else "no file was asked for")
        print(f"{COMMAND}: stopped by {name}; {kept}; run the same command again to start it anew",
              file=sys.stderr, flush=True)
        sys.exit(128 + stop.signum)
    finally:
        progress.close()
        # The result is complete (or the job ended): a late signal must not report a stop.
        for signum in (signal.SIGTERM, signal.SIGINT):
            try:
                signal.signal(signum, signal.SIG_DFL if signum == signal.SIGTERM else signal.default_int_handler)
            except ValueError:
                pass
    print(format_summary(result, result.path, plan.title), flush=True)


def _override_value(value) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, (list, tuple)):
        return "[" + ",".join(_override_value(v) for v in value) + "]"
    return "'" + str(value).replace("\\", "\\\\").replace("'", "\\'") + "'"


# The config groups a stored config chose, in the order they are selected.
GROUP_CHOICES = ("model", "forecast_model", "filter")


def overrides_from_config(config: dict, prefix: str = "") -> list[str]:
    """Overrides that compose back to ``config`` (a stored, resolved config): every group choice
    first, then every leaf as key=value."""
    out = []
    if not prefix:
        out += [f"{group}={config[group]['name']}" for group in GROUP_CHOICES if group in config]
    for key, value in config.items():
        full = f"{prefix}{key}"
        if isinstance(value, dict):
            out += overrides_from_config(value, full + ".")
        else:
            out.append(f"{full}={_override_value(value)}")
    return out


def _from_file(argv: list[str]) -> list[str]:
    """``--from FILE`` -> the overrides of the config stored in FILE, followed by the other arguments."""
    at = argv.index("--from")
    if at + 1 >= len(argv):
        raise ConfigError("--from needs the path of a result file")
    path = argv[at + 1]
    try:
        stored = read_result(path, series=False)
    except ResultFileError as err:
        raise ConfigError(str(err)) from None
    rest = argv[:at] + argv[at + 2 :]
    return overrides_from_config(stored.config) + rest


def job_state(cfg, output: str | None) -> str:
    """``complete`` (a complete result of this config), ``stopped`` (a ``.partial`` file: the job
    started and did not finish), ``other config`` or ``missing``."""
    if output is None:
        return "complete"  # nothing was asked for
    stored = stored_config_hash(output)
    if stored is not None:
        return "complete" if stored == config_hash(cfg) else "other config"
    return "stopped" if os.path.exists(output + PARTIAL_SUFFIX) else "missing"


def sweep_summary(status: int) -> int:
    """After a multirun, however it ended: one line for the whole sweep, and one per job that has no
    complete result (stopped, failed, cancelled, or never run), so that a launcher that gave up on a
    failed job does not leave the user guessing; exit status 1 when any job is not complete."""
    if not _SWEEP:
        return status
    states = [(job_folder_of(node, True), job_state(cfg, _job_output(cfg, node))) for cfg, node in _SWEEP]
    unfinished = [(folder, state) for folder, state in states if state != "complete"]
    folder = str(_SWEEP[0][1].sweep.dir)
    if not unfinished:
        print(f"{COMMAND}: sweep {folder}: all {len(states)} jobs complete", file=sys.stderr, flush=True)
        return status
    again = ("; run the same command again to finish the others (the complete ones are skipped)"
             if any(state in ("stopped", "missing") for _, state in unfinished) else "")
    print(f"{COMMAND}: sweep {folder}: {len(states) - len(unfinished)} of {len(states)} jobs complete{again}",
          file=sys.stderr, flush=True)
    for job, state in unfinished:
        why = {"stopped": "started, did not finish (stopped, cancelled or failed, or still running on a cluster: "
                          "check squeue before running again; its .partial file is kept)",
               "missing": "no result (failed before it wrote one, or never ran)",
               "other config": "its folder holds a complete result of another config"}[state]
        print(f"  {os.path.relpath(job, folder)}: {why}", file=sys.stderr, flush=True)
    return status or 1


def main(argv=None) -> int:
    """Entry point of the ``assimbench`` console script."""
    return run_command(COMMAND, argv, _hydra_app, preflight, lambda args: _from_file(args) if "--from" in args else args,
                       finish=sweep_summary)


if __name__ == "__main__":
    sys.exit(main())
