"""Console script ``assimbench-report PATH... [--out FOLDER] [--fail-ratio R | --fail-rmse X]``.

Reads result files and sweep folders and answers, for every experiment: at
each static point (filter, ensemble size, any other setting a lane cannot
sweep), which setting is best, which is the runner-up, by how much they
differ (a paired difference with its 95% interval) and whether that
difference is distinguishable from zero; which settings lost replicates and
why; how the tuned filters and ensemble sizes compare. Runs that differ only
in their seed are pooled. Writes into ``--out`` (default ``report``):
``tuned.csv``, ``paired.csv``, ``summary.csv``, ``runs.csv``, ``report.md``
and PNG figures. An unreadable, truncated, incomplete or foreign file is
named in one line, with its reason, and skipped.
"""

import argparse
import math
import os
import sys

import numpy as np

from assimbench.io.atomic import unwritable, write_text
from assimbench.report import figures
from assimbench.report.collect import collect, experiment_differences, varied_settings
from assimbench.report.decide import comparisons, decide, distinguishable, setting_text
from assimbench.report.pooling import FailingLevel, pool
from assimbench.report.tables import (
    COMPARISON_COLUMNS,
    SPREAD_OVER_RMSE,
    comparisons_table,
    decisions_table,
    interval_text,
    runs_table,
    settings_table,
    to_csv,
    to_markdown,
    with_interval,
)
from assimbench.report.words import describe

COMMAND = "assimbench-report"
EXIT_BAD_INPUT = 2
DEFAULT_LEVEL = FailingLevel()


class ReportError(ValueError):
    """Nothing to report on, or an option out of range: one line for the user."""


def _numeric(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def decision_lines(points: list) -> list:
    """Markdown lines: one table row per static point."""
    header = ("| experiment | static point | best | analysis RMSE (95%) | spread / RMSE | runner-up | "
              "its RMSE | best minus runner-up (95%) | distinguishable | lost settings |")
    lines = [header, "|" + "---|" * 10]
    for p in points:
        lost = f"{len(p.lost)} of {len(p.settings)}"
        if p.best is None:
            lines.append(f"| e{p.experiment} | {p.name} | none: every setting lost a replicate | | | | | | | {lost} |")
            continue
        best = setting_text(p.best, p.tuned_keys) if p.tuned_keys else "(only setting)"
        cells = [f"e{p.experiment}", p.name, best, with_interval(*p.best.estimate("rmse_analysis")),
                 f"{p.best.spread_over_rmse():.3f}"]
        if p.runner_up is not None:
            d = p.difference
            cells += [setting_text(p.runner_up, p.tuned_keys), f"{p.runner_up.value('rmse_analysis'):.4f}",
                      interval_text(d["mean"], d["low"], d["high"]) if d else "not paired",
                      "yes" if distinguishable(d) else "no"]
        else:
            cells += ["", "", "", ""]
        lines.append("| " + " | ".join(cells + [lost]) + " |")
    return lines + [""]


def lost_lines(points: list) -> list:
    """Markdown list of every lost setting, by its swept values, with the reason of each lost replicate."""
    lines = []
    for p in points:
        for s in p.lost:
            what = f": {setting_text(s, p.tuned_keys)}" if p.tuned_keys else ""
            lines.append(f"- e{p.experiment} {p.name}{what}: {s.lost} of {s.replicates} replicates lost: "
                         + "; ".join(s.lost_reasons[:6]) + (" ..." if s.lost > 6 else ""))
    return lines


def _file_tag(key: str) -> str:
    return key.replace(".", "_")


def heat_maps(points: list, out: str, tag: str) -> list:
    """Heat maps of each filter's settings over two numeric axes (ensemble size is one when it varies),
    the other swept settings at the filter's best values."""
    written = []
    by_filter = {}
    for p in points:
        by_filter.setdefault((p.filter, p.static), []).append(p)
    for (name, _static), mine in sorted(by_filter.items(), key=lambda item: repr(item[0])):
        settings = [s for p in mine for s in p.settings]
        tuned = [k for k in dict.fromkeys(k for p in mine for k in p.tuned_keys)
                 if all(_numeric(s.config.get(k)) for s in settings)]
        tuned.sort(key=lambda k: -len({s.config.get(k) for s in settings}))
        decided = [p.best for p in mine if p.best is not None]
        overall = min(decided, key=lambda s: s.value("rmse_analysis")) if decided else settings[0]
        if len(mine) > 1 and tuned:
            x_key, y_key, groups = tuned[0], "filter.members", [mine]
        elif len(tuned) >= 2:
            x_key, y_key, groups = tuned[0], tuned[1], [[p] for p in mine]
        else:
            continue
        for group in groups:
            anchor = overall if len(group) > 1 else (group[0].best or group[0].settings[0])
            others = [k for k in tuned if k not in (x_key, y_key)]
            chosen = [s for p in group for s in p.settings
                      if all(repr(s.config.get(k)) == repr(anchor.config.get(k)) for k in others)]
            where = describe(anchor.config, others)
            title = f"{group[0].name if len(group) == 1 else group[0].name.split(',')[0]}" + (f" ({where})" if where else "")
            size = "" if y_key == "filter.members" else f"_N{group[0].members or 0}"
            path = os.path.join(out, f"heat_map_{name}{size}_{tag}.png")
            best = anchor if not anchor.lost and anchor in chosen else None
            written.append(figures.heat_map(chosen, x_key, y_key, path, f"Time-mean analysis RMSE: {title}", best))
    return written


def build_report(paths: list, out: str, failing: FailingLevel = DEFAULT_LEVEL) -> tuple:
    """Write the report; returns (written files, problems, points, comparisons).
    Raises ReportError when no file is readable."""
    rows, problems = collect(paths)
    if not rows:
        reasons = "; ".join(problems) if problems else "no .h5 file found"
        raise ReportError(f"no complete result files among {' '.join(paths)}: {reasons}")
    settings, notes = pool(rows, failing)
    points = decide(settings)
    compared = comparisons(points)
    os.makedirs(out, exist_ok=True)
    written = []
    columns, records = settings_table(settings)
    written.append(write_text(os.path.join(out, "summary.csv"), to_csv(columns, records)))
    written.append(write_text(os.path.join(out, "runs.csv"), to_csv(*runs_table(rows))))
    written.append(write_text(os.path.join(out, "tuned.csv"), to_csv(*decisions_table(points))))
    pair_records = comparisons_table(compared)
    written.append(write_text(os.path.join(out, "paired.csv"), to_csv(COMPARISON_COLUMNS, pair_records)))

    experiments = sorted({s.experiment for s in settings})
    level = "the observation error" if failing.rmse is None and failing.ratio == 1 else (
        f"{failing.rmse:g} (state units)" if failing.rmse is not None else f"{failing.ratio:g} x the observation error")
    lines = ["# assimbench report", "",
             f"{len(settings)} settings from {len(rows)} runs in {len({r.path for r in rows})} files, "
             f"{len(experiments)} experiment{'s' if len(experiments) > 1 else ''}. Runs that differ only in their "
             "seed are pooled; differences are paired by seed (same truth, same observations).",
             "", f"A replicate is lost when it blew up or when its time-mean analysis RMSE is above {level} "
             "(reference runs excepted; change the level with --fail-ratio or --fail-rmse). A setting with a lost "
             "replicate is never the best."]
    differing = experiment_differences(rows)
    if differing:
        lines += ["", "Experiments differ in " + ", ".join(differing) + "; they are reported separately and "
                  "never compared with each other."]
    lines += ["", "## Best setting at each static point", "", *decision_lines(points)]
    lines += ["## Paired comparisons (a minus b, time-mean analysis RMSE, 95% interval)", ""]
    if pair_records:
        shown = [{**r, "experiment": f"e{r['experiment']}", "difference (95%)": interval_text(r["difference"], r["low"], r["high"])
                  if np.isfinite(r["difference"]) else ""} for r in pair_records]
        lines.append(to_markdown(["experiment", "kind", "a", "b", "difference (95%)", "seeds", "verdict"], shown))
    else:
        lines.append("Nothing to compare: no static point has two candidate settings.\n")
    lost = lost_lines(points)
    lines += ["## Lost settings", "", *(lost or ["None."]), ""]
    shown_columns = [c for c in columns if not c.endswith(("_low", "_high")) and c not in
                     ("rmse_forecast", "crps_analysis", "lost_reasons")]
    estimates = [c for c in shown_columns if c.startswith("estimate_")]

    def cell(r, c):
        if c in estimates and not np.isfinite(r[c]):
            return ""  # a setting that did not estimate this parameter
        return with_interval(r[c], r[c + "_low"], r[c + "_high"]) if c.endswith("_mean") else r[c]

    readable = [{**r, "experiment": f"e{r['experiment']}",
                 "rmse_analysis": with_interval(r["rmse_analysis"], r["rmse_analysis_low"], r["rmse_analysis_high"]),
                 **{c: cell(r, c) for c in estimates}} for r in records]
    headers = {"rmse_analysis": "analysis RMSE (95%)", "spread_analysis": "analysis spread",
               SPREAD_OVER_RMSE: "spread / RMSE", "innovation_ratio": "innovation ratio",
               "lost_replicates": "lost replicates"}
    for column in columns:  # estimate_forcing_mean -> "forcing estimate (95%)"
        if column.startswith("estimate_") and column.endswith(("_mean", "_spread")):
            parameter, _, kind = column[len("estimate_"):].rpartition("_")
            headers[column] = f"{parameter} estimate (95%)" if kind == "mean" else f"{parameter} spread"
    lines += ["## Every setting, pooled over seeds (all columns: summary.csv; every run: runs.csv)", "",
              to_markdown(shown_columns, readable, headers)]
    if problems or notes:
        lines += ["## Skipped", ""] + [f"- {p}" for p in problems + notes] + [""]
    written.append(write_text(os.path.join(out, "report.md"), "\n".join(lines)))

    for experiment in experiments:
        mine = [p for p in points if p.experiment == experiment]
        tag = f"e{experiment}"
        if any(p.best is not None for p in mine):
            written.append(figures.errors_over_cycles(mine, os.path.join(out, f"errors_over_cycles_{tag}.png")))
            if any(p.best is not None and p.members for p in mine):
                written.append(figures.tuned_curve(mine, os.path.join(out, f"tuned_curve_{tag}.png")))
            if any(p.best is not None and p.best.totals("rank_truth_forecast") is not None for p in mine):
                written.append(figures.rank_histograms(mine, os.path.join(out, f"rank_histograms_{tag}.png")))
        for key in dict.fromkeys(k for p in mine for k in p.tuned_keys):
            if all(_numeric(s.config.get(key)) for p in mine if key in p.tuned_keys for s in p.settings):
                written.append(figures.error_against_setting(
                    mine, key, os.path.join(out, f"error_against_{_file_tag(key)}_{tag}.png")))
        written.append(figures.spread_against_error(mine, os.path.join(out, f"spread_against_error_{tag}.png")))
        if any(p.best is not None and figures.smoothed_lags(p.best) for p in mine):
            written.append(figures.error_by_lag(mine, os.path.join(out, f"error_by_lag_{tag}.png")))
        if any(p.best is not None and p.best.has("model_integrations") for p in mine):
            written.append(figures.error_against_cost(mine, os.path.join(out, f"error_against_cost_{tag}.png")))
        estimating = [s for p in mine for s in p.settings if figures.estimated_parameters(s)]
        if estimating:
            keys = varied_settings([row for s in estimating for row in s.rows])
            written.append(figures.parameter_trajectories(
                estimating, keys, os.path.join(out, f"parameter_trajectories_{tag}.png")))
        written += heat_maps(mine, out, tag)
    return written, problems + notes, points, compared


def print_decisions(points: list, compared: list) -> None:
    """The answer on the terminal: best and runner-up per static point, then the comparisons."""
    for p in points:
        head = f"e{p.experiment} {p.name}"
        if p.best is None:
            print(f"{head}: no setting kept every replicate ({len(p.lost)} of {len(p.settings)} lost)")
            continue
        best = setting_text(p.best, p.tuned_keys) if p.tuned_keys else "(its only setting)"
        print(f"{head}: best {best}, analysis RMSE {with_interval(*p.best.estimate('rmse_analysis'))}")
        if p.runner_up is not None:
            d = p.difference
            diff = interval_text(d["mean"], d["low"], d["high"]) if d else "not paired"
            verdict = "distinguishable" if distinguishable(d) else "not distinguishable"
            print(f"    runner-up {setting_text(p.runner_up, p.tuned_keys)}, "
                  f"{p.runner_up.value('rmse_analysis'):.4f}; best minus runner-up {diff}: {verdict}")
        if p.lost:
            print(f"    {len(p.lost)} of {len(p.settings)} settings lost a replicate (report.md lists them)")
    for c in compared:
        if c.kind == "runner-up":
            continue
        d = c.difference
        diff = interval_text(d["mean"], d["low"], d["high"]) if d else ""
        print(f"e{c.experiment} {c.a} minus {c.b}: {diff}  {c.verdict}")


def _level(text: str) -> float:
    value = float(text)
    if not math.isfinite(value) or value < 0:
        raise argparse.ArgumentTypeError(f"{text} is not allowed: a finite number >= 0")
    return value


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(prog=COMMAND, description=__doc__.split("\n\n")[1].replace("\n", " ").replace("``", ""))
    parser.add_argument("paths", nargs="+", help="result files (.h5) and folders to search for them")
    parser.add_argument("--out", default="report", help="folder for the tables and figures (default: report)")
    level = parser.add_mutually_exclusive_group()
    level.add_argument("--fail-ratio", type=_level, default=1.0, metavar="R",
                       help="a replicate is lost when its time-mean analysis RMSE is above R x the observation "
                            "error standard deviation (default 1; 0 = only blow-ups)")
    level.add_argument("--fail-rmse", type=_level, default=None, metavar="X",
                       help="a replicate is lost when its time-mean analysis RMSE is above X (state units)")
    args = parser.parse_args(argv)
    problem = unwritable(args.out)  # before anything is read or made: a refusal leaves nothing behind
    if problem:
        print(f"assimbench-report: error: {problem}; choose another --out", file=sys.stderr)
        return EXIT_BAD_INPUT
    try:
        written, problems, points, compared = build_report(args.paths, args.out,
                                                           FailingLevel(args.fail_ratio, args.fail_rmse))
    except ReportError as err:
        print(f"{COMMAND}: error: {err}", file=sys.stderr)
        return EXIT_BAD_INPUT
    for problem in problems:
        print(f"{COMMAND}: {problem}", file=sys.stderr)
    print_decisions(points, compared)
    print(f"wrote {len(written)} files to {os.path.abspath(args.out)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
