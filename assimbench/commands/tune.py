"""Console script ``assimbench-tune``: find the settings that minimise a run's error, point by point.

    assimbench-tune filter=etkf,letkf filter.members=10,20 'tune.filter.inflation=[1.0,1.3]' \\
        cycles=2000 burn_in=500 replicates=2 study=studies/ring

Takes the main command's overrides (or ``--config-path DIR --config-name NAME``), the study's keys
(:mod:`assimbench.tuning.study`) and ``tune.<setting>=[low,high]`` for each traced setting to tune.
Every static point (combination of the comma lists) is searched by adaptive refinement on paired
lanes (:mod:`assimbench.tuning.search`); one line per pass shows the progress; the study folder gets
the tuned table, the figures and one ready-to-run config per point
(:mod:`assimbench.tuning.outputs`). Re-running the same command resumes: finished points are read
back, not recomputed. Bad input: one line on stderr, exit status 2, nothing written.
"""

import dataclasses
import math
import os
import sys

import numpy as np

from assimbench.commands._hydra import compose_jobs, expand_jobs, fail, job_folder, prepare_hydra, user_config_arguments
from assimbench.config.checks import ConfigError
from assimbench.io.atomic import unwritable
from assimbench.report.words import setting_word
from assimbench.tuning import outputs
from assimbench.tuning.search import retreat_path, search, time_mean
from assimbench.tuning.study import (
    Point,
    check_point,
    evaluator,
    pass_cost,
    split_arguments,
    standalone_run,
    study_folder,
)

COMMAND = "assimbench-tune"
USAGE = (__doc__.split("\n\n")[0] + "\n\n" + __doc__.split("\n\n")[1] + """

The study's own keys (defaults in brackets):
  tune.<setting>=[low,high] or [low,high,log]   a traced setting to tune (any lane key)
  study=PATH [tuning]        the folder of the study's files
  objective=NAME [rmse_analysis]   the per-cycle series whose time mean is minimised
  points=N [7]               values per axis per pass (>= 4)
  passes=N [8]               the most passes per point
  tolerance=F [0.005]        stop when the step or the range is below F x the bounds
  budget_cycles=N            run-cycles (cycles x lanes x replicates) for the whole study
  budget_seconds=T           wall time for the whole study""").replace("``", "")


def static_points(rest: list) -> list:
    """Every static point of the main command's arguments, composed and checked, each named by the
    overrides that tell it from the others."""
    argv = user_config_arguments(rest, "config")
    _, jobs = compose_jobs(["-m"] + argv)
    overrides = [job for job in expand_jobs([a for a in argv if "=" in a and not a.startswith("-")], True)]
    if len(overrides) != len(jobs):
        overrides = [[] for _ in jobs]
    varied = [set(job) for job in overrides]
    shared = set.intersection(*varied) if varied else set()
    points = []
    for job, cfg in zip(overrides, jobs):
        own = [o for o in job if o not in shared and not o.startswith("hydra")]
        if not own:  # a single point: named by its filter and size
            own = [f"filter={cfg.filter.name}"] + ([f"filter.members={cfg.filter.members}"]
                                                    if "members" in cfg.filter else [])
        points.append(Point(job_folder(own), job, cfg))
    return points


def prepare(argv: list) -> tuple:
    """(points, axes, options, folder, per-point budget): everything checked before anything runs."""
    rest, axes, options = split_arguments(argv)
    points = static_points(rest)
    for point in points:
        check_point(point, axes, options)
    share = len(points)
    cycles = None if options.budget_cycles is None else options.budget_cycles // share
    seconds = None if options.budget_seconds is None else options.budget_seconds / share
    for point in points:
        cost = pass_cost(point, options, axes)
        if cycles is not None and cost > cycles:
            raise ConfigError(f"budget_cycles={options.budget_cycles} is too small: one pass of {point.name} costs "
                              f"{cost:,} run-cycles (cycles x {options.points}^{len(axes)} lanes x replicates), "
                              f"and the budget is shared by {share} point{'s' if share > 1 else ''}")
    folder = study_folder(options)
    for point in points:
        if outputs.other_record(folder, point.name, point.key(axes, options, (cycles, seconds))):
            raise ConfigError(f"study={options.study} already holds {point.name} tuned with other inputs (config, "
                              f"bounds, search, budget or tuner version); choose another study= or remove "
                              f"{os.path.join(folder, 'points', point.name + '.json')}")
    problem = unwritable(folder)
    if problem:
        raise ConfigError(f"{problem}; choose another study=")
    return points, axes, options, folder, (cycles, seconds)


def progress(point):
    """The per-pass line: the point, the grid searched, the best so far with its interval."""

    def report(outcome, this_pass):
        number = this_pass[0].pass_number
        spans = []
        for j, axis in enumerate(outcome.axes):
            values = [c.values[j] for c in this_pass]
            spans.append(f"{setting_word(axis.key)} {min(values):.4g}..{max(values):.4g}")
        lost = sum(c.lost for c in this_pass)
        head = f"{point.name}  pass {number}: {', '.join(spans)} ({len(this_pass)} lanes, {lost} lost)"
        kept = [c for c in this_pass if not c.lost]
        if outcome.minimiser is None or not kept:
            print(f"{head}; every candidate lost", flush=True)
            return
        lowest = min(kept, key=lambda c: c.mean)
        where = ", ".join(f"{setting_word(a.key)} {v:.5g}" for a, v in zip(outcome.axes, outcome.minimiser))
        spread = ", ".join(f"[{low:.5g}, {high:.5g}]" if math.isfinite(low) else "[range unknown]"
                           for low, high in outcome.ranges.values())
        print(f"{head}; lowest {lowest.mean:.4f} +- {(lowest.high - lowest.low) / 2:.4f}; "
              f"minimiser {where} {spread}", flush=True)

    return report


def confirm(point, tuned: dict, objective: str, seed_shift: int = 0) -> tuple:
    """((mean, low, high) of ``objective``, lost replicates, run-cycles) from one standalone run at the
    tuned settings; with ``seed_shift`` 0 the search's seeds (exactly what the point's written config
    gives with the main command), else the seed moved by it: fresh truths and observations. A
    replicate is lost as in the search (:func:`lost_replicates`)."""
    result, cfg, lost = standalone_run(point.config, tuned, seed_shift)
    summary = result.summary
    value = (summary[objective], summary.get(objective + "_low", math.nan), summary.get(objective + "_high", math.nan))
    if not math.isfinite(value[0]):
        lost = max(lost, 1)
    return value, lost, int(cfg.cycles) * int(cfg.replicates)


def retreat(point, outcome, start: tuple, options) -> tuple:
    """(steps moved or None, settings, run-cycles): on the path away from the lost region
    (:func:`retreat_path`, ``points`` settings, so a one-setting study reuses the search's compiled
    program), the setting of lowest error (the mean of its time means on the search's seeds and on
    fresh seeds) among those that keep every replicate on both; steps is None when no setting on
    the path does (or nothing was lost to move away from)."""
    path = retreat_path(outcome, start, options.points)
    if len(path) < 2:
        return None, start, 0
    kept, error, cost = np.ones(len(path), dtype=bool), np.zeros(len(path)), 0
    for shift in (0, 1):
        evaluation = evaluator(point, outcome.axes, options.objective, seed_shift=shift)(path)
        kept &= ~np.asarray(evaluation.lost, dtype=bool)
        for lane in np.flatnonzero(kept):
            error[lane] += time_mean(np.asarray(evaluation.series[lane], float), evaluation.burn_in)[0] / 2
        cost += evaluation.cost
    kept[0] = False  # the start is the setting that failed
    if not kept.any():
        return None, start, cost
    steps = int(np.argmin(np.where(kept, error, np.inf)))
    return steps, tuple(float(v) for v in path[steps]), cost


def _settings(keys, values) -> str:
    return ", ".join(f"{setting_word(k)} {v:.5g}" for k, v in zip(keys, values))


def tuned_run(point, outcome, options) -> dict:
    """The tuned settings and their checks: ``outcome`` (its minimiser the tuned settings), ``value``
    of the tuned run or None, ``fresh`` ((mean, low, high), lost replicates) or None, ``fitted`` (the
    search's minimiser), ``moved`` (steps away from the lost region) and ``checked`` (run-cycles).

    What "tuned" means here: the lowest-error setting the search found that keeps every replicate on
    the search's seeds and on fresh ones. A chaotic filter's error is often lowest right beside the
    settings where it loses the truth (too little inflation), and a setting there that kept every
    replicate in the search may lose one on other truths. So:
    1. the tuned run is the run at the fitted minimiser with the search's seeds; when it loses the
       truth or is worse than the lowest kept candidate's upper 95% limit (a fit next to that edge,
       where the error is rough), the lowest kept candidate is taken instead;
    2. the chosen settings run again on fresh seeds (the seed + 1): an independent value, free of the
       selection's optimism;
    3. when either run lost a replicate, the settings move away from the nearest lost candidate
       (:func:`retreat_path`) to the setting of lowest error among those that keep every replicate
       on both seed sets (:func:`retreat`); when none does, they stay and are flagged not robust."""
    done = {"outcome": outcome, "value": None, "lost": None, "fresh": None, "fitted": outcome.minimiser, "moved": 0,
            "checked": 0}
    if outcome.minimiser is None:
        return done
    keys, objective = [a.key for a in outcome.axes], options.objective
    chosen = outcome.minimiser
    value, lost, checked = confirm(point, dict(zip(keys, chosen)), objective)
    lowest = min((c for c in outcome.candidates if not c.lost), key=lambda c: c.mean)
    if lost or value[0] > lowest.high:
        what = "lost the truth" if lost else f"is worse ({value[0]:.4f}) than the lowest candidate's 95% limit"
        print(f"{point.name}  the run at the fitted minimiser {what}; the lowest kept candidate "
              f"({_settings(keys, lowest.values)}) is taken", flush=True)
        outcome = dataclasses.replace(outcome, minimiser=lowest.values,
                                      stopped=f"{outcome.stopped}; fitted minimiser failed, lowest candidate kept")
        chosen = lowest.values
        value, lost, cost = confirm(point, dict(zip(keys, chosen)), objective)
        checked += cost
    fresh, fresh_lost, cost = confirm(point, dict(zip(keys, chosen)), objective, seed_shift=1)
    checked += cost
    moved = 0
    if lost or fresh_lost:
        steps, settings, cost = retreat(point, outcome, chosen, options)
        checked += cost
        if steps is not None:
            print(f"{point.name}  {_settings(keys, chosen)} lost a replicate on the search's or fresh seeds; moved "
                  f"{steps} step{'s' if steps > 1 else ''} away from where the filter loses the truth, to the "
                  f"lowest error kept on both: "
                  f"{_settings(keys, settings)}", flush=True)
            moved, chosen = steps, settings
            outcome = dataclasses.replace(outcome, minimiser=chosen, stopped=f"{outcome.stopped}; moved {steps} "
                                          f"step{'s' if steps > 1 else ''} away from the lost region")
            value, lost, cost = confirm(point, dict(zip(keys, chosen)), objective)
            fresh, fresh_lost, more = confirm(point, dict(zip(keys, chosen)), objective, seed_shift=1)
            checked += cost + more
    replicates = int(point.config.replicates)
    print(f"{point.name}  tuned run: {objective} {value[0]:.4f} +- {(value[2] - value[1]) / 2:.4f}"
          + (f", LOST {lost} of {replicates} replicates" if lost else "")
          + f"; on fresh seeds {fresh[0]:.4f} +- {(fresh[2] - fresh[1]) / 2:.4f}"
          + (f", LOST {fresh_lost} of {replicates} replicates" if fresh_lost else "")
          + ("; not robust" if lost or fresh_lost else ""), flush=True)
    return {**done, "outcome": outcome, "value": value, "lost": lost, "fresh": (fresh, fresh_lost), "moved": moved,
            "checked": checked}


def tune_point(point, axes, options, folder, budget) -> dict:
    """Search one point (or read it back when finished with the same inputs) and write its files."""
    key = point.key(axes, options, budget)
    data = outputs.load_record(folder, point.name, key)
    if data is not None:
        print(f"{point.name}: finished earlier, read back from {os.path.join(folder, 'points')}", flush=True)
        return data
    outcome = search(axes, evaluator(point, axes, options.objective), points=options.points, passes=options.passes,
                     tolerance=options.tolerance, budget_cycles=budget[0], budget_seconds=budget[1],
                     pass_cost=pass_cost(point, options, axes), report=progress(point))
    data = outputs.record(point, key, options.objective, tuned_run(point, outcome, options))
    if data["best"] is not None:
        outputs.write_config(folder, point, data["best"])
    outputs.landscape(data, os.path.join(folder, f"landscape_{point.name}.png"))
    outputs.save_record(folder, data)  # last: a point counts as finished only with all its files
    return data


def main(argv=None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    if any(a in ("-h", "--help") for a in argv):
        print(USAGE)
        return 0
    prepare_hydra()
    try:
        points, axes, options, folder, budget = prepare(argv)
    except ConfigError as err:
        return fail(COMMAND, str(err))
    records = [tune_point(point, axes, options, folder, budget) for point in points]
    outputs.write_tables(folder, records)
    if any(r["members"] for r in records):
        outputs.tuned_curve(records, os.path.join(folder, "tuned_curve.png"))
    print("tuned (in brackets: the 95% range of the fitted minimiser; the error is that of a run at the tuned "
          "settings):")
    for data in records:
        print("  " + outputs.summary_line(data))
    print(f"study: {folder}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
