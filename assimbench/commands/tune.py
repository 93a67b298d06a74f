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

import copy
import dataclasses
import math
import os
import sys

from omegaconf import OmegaConf

from assimbench.api import run_experiment
from assimbench.commands._hydra import compose_jobs, expand_jobs, fail, job_folder, prepare_hydra, user_config_arguments
from assimbench.config.checks import ConfigError
from assimbench.io.atomic import unwritable
from assimbench.report.words import setting_word
from assimbench.tuning import outputs
from assimbench.tuning.search import search
from assimbench.tuning.study import (
    Point,
    check_point,
    evaluator,
    lost_replicates,
    pass_cost,
    split_arguments,
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
                              f"bounds, search or budget); choose another study= or remove "
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
    """((mean, low, high) of ``objective``, lost replicates) from one standalone run at the tuned
    settings; with ``seed_shift`` 0 the search's seeds (exactly what the point's written config gives
    with the main command), else the seed moved by it: fresh truths and observations. A replicate is
    lost as in the search (:func:`lost_replicates`)."""
    cfg = copy.deepcopy(point.config)
    for key, value in tuned.items():
        OmegaConf.update(cfg, key, float(value), merge=False)
    OmegaConf.update(cfg, "output", None, merge=False)
    OmegaConf.update(cfg, "seed", int(cfg.seed) + seed_shift, merge=False)
    result = run_experiment(cfg, keep_series=False)
    summary = result.summary
    value = (summary[objective], summary.get(objective + "_low", math.nan), summary.get(objective + "_high", math.nan))
    lost = int(lost_replicates(result, cfg).sum())
    if not math.isfinite(value[0]):
        lost = max(lost, 1)
    return value, lost


def tuned_run(point, outcome, objective: str) -> tuple:
    """(outcome, the tuned run's value or None, the check on fresh seeds or None).

    The tuned run is the run at the fitted minimiser with the search's seeds; when it loses the truth
    or is worse than the lowest kept candidate's upper 95% limit (a minimiser fitted next to the edge
    where the filter diverges, where the error is rough), the lowest kept candidate is taken instead.
    The check runs the chosen settings again on fresh seeds (the seed + 1): an independent value,
    free of the selection's optimism, and a warning when the setting loses the truth there."""
    if outcome.minimiser is None:
        return outcome, None, None
    keys = [a.key for a in outcome.axes]
    value, lost = confirm(point, dict(zip(keys, outcome.minimiser)), objective)
    lowest = min((c for c in outcome.candidates if not c.lost), key=lambda c: c.mean)
    if lost or value[0] > lowest.high:
        what = "lost the truth" if lost else f"is worse ({value[0]:.4f}) than the lowest candidate's 95% limit"
        print(f"{point.name}  the run at the fitted minimiser {what}; the lowest kept candidate "
              f"({', '.join(f'{setting_word(k)} {v:.5g}' for k, v in zip(keys, lowest.values))}) is reported",
              flush=True)
        outcome = dataclasses.replace(outcome, minimiser=lowest.values,
                                      stopped=f"{outcome.stopped}; fitted minimiser failed, lowest candidate kept")
        value, _ = confirm(point, dict(zip(keys, lowest.values)), objective)
    fresh, fresh_lost = confirm(point, dict(zip(keys, outcome.minimiser)), objective, seed_shift=1)
    print(f"{point.name}  tuned run: {objective} {value[0]:.4f} +- {(value[2] - value[1]) / 2:.4f}; on fresh seeds "
          f"{fresh[0]:.4f} +- {(fresh[2] - fresh[1]) / 2:.4f}"
          + (f", LOST {fresh_lost} of {int(point.config.replicates)} replicates: not robust" if fresh_lost else ""),
          flush=True)
    return outcome, value, (fresh, fresh_lost)


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
    outcome, confirmed, fresh = tuned_run(point, outcome, options.objective)
    data = outputs.record(point, outcome, key, options.objective, confirmed, fresh)
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
    print("tuned (in brackets: the 95% range of each tuned setting; the error is that of a run at the tuned settings):")
    for data in records:
        print("  " + outputs.summary_line(data))
    print(f"study: {folder}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
