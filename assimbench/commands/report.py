"""Console script ``assimbench-report PATH... [--out FOLDER]``.

Reads result files and sweep folders, and writes into ``--out`` (default
``report``): ``summary.csv`` (the tidy table: one row per setting, i.e. per
lane of each file), ``tuned.csv``, ``paired.csv``, ``report.md`` (all tables
in Markdown) and PNG figures. Files from different experiments (model,
observation network, seed, replicates or cycles differ) are numbered as
separate experiments and never compared with each other. An unreadable,
truncated, incomplete or foreign file is named in one line and skipped.
"""

import argparse
import os
import sys

import numpy as np

from assimbench.io.atomic import unwritable, write_text
from assimbench.report import figures
from assimbench.report.collect import collect, experiment_differences, varied_settings
from assimbench.report.tables import (
    paired_table,
    tidy_table,
    to_csv,
    to_markdown,
    tuned,
    tuned_records,
    with_interval,
)

EXIT_BAD_INPUT = 2


def _numeric(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and value is not None


def compact(columns: list, records: list) -> tuple:
    """The tidy table for reading: intervals as "mean +- half-width", no file paths."""
    settings = columns[3 : columns.index("replicates")]
    shown = ["experiment", "filter", "members"] + settings + [
        "analysis RMSE (95%)", "analysis spread (95%)", "spread / RMSE", "innovation ratio", "lost replicates"]
    out = []
    for r in records:
        out.append({**{k: r[k] for k in ["experiment", "filter", "members"] + settings},
                    "analysis RMSE (95%)": with_interval(r["rmse_analysis"], r["rmse_analysis_low"], r["rmse_analysis_high"]),
                    "analysis spread (95%)": with_interval(r["spread_analysis"], r["spread_analysis_low"],
                                                           r["spread_analysis_high"]),
                    "spread / RMSE": r["spread_skill_ratio_analysis"],
                    "innovation ratio": r["innovation_ratio"],
                    "lost replicates": f"{r['lost_replicates']} of {r['replicates']}"})
    return shown, out


def heat_map_axes(rows: list, anchor) -> tuple:
    """The two numeric settings with the most distinct values among ``rows``, and the rows
    that share the anchor's values of every other varied setting; None when fewer than two vary."""
    varied = [k for k in varied_settings(rows) if all(_numeric(r.config.get(k)) for r in rows)]
    if len(varied) < 2:
        return None
    varied.sort(key=lambda k: -len({r.config[k] for r in rows}))
    x_key, y_key = varied[0], varied[1]
    others = [k for k in varied_settings(rows) if k not in (x_key, y_key)]
    chosen = [r for r in rows if all(r.config.get(k) == anchor.config.get(k) for k in others)]
    return x_key, y_key, chosen


def build_report(paths: list, out: str) -> tuple:
    """Write the report; returns (written files, problems, tuned rows, paired records).
    Raises ValueError when no file is readable."""
    rows, problems = collect(paths)
    if not rows:
        reasons = "; ".join(problems) if problems else "no .h5 file found"
        raise ValueError(f"no complete result files among {' '.join(paths)}: {reasons}")
    os.makedirs(out, exist_ok=True)
    written = []
    columns, records = tidy_table(rows)
    written.append(write_text(os.path.join(out, "summary.csv"), to_csv(columns, records)))
    best = tuned(rows)
    settings = varied_settings(rows)
    tuned_columns, tuned_rows = tuned_records(best, settings)
    written.append(write_text(os.path.join(out, "tuned.csv"), to_csv(tuned_columns, tuned_rows)))
    pairs = paired_table(best)
    pair_columns = ["experiment", "members", "a", "b", "difference", "low", "high", "verdict"]
    written.append(write_text(os.path.join(out, "paired.csv"), to_csv(pair_columns, pairs)))

    experiments = sorted({r.experiment for r in rows})
    lines = ["# assimbench report", "", f"{len(rows)} settings from {len({r.path for r in rows})} files, "
             f"{len(experiments)} experiment{'s' if len(experiments) > 1 else ''}."]
    differing = experiment_differences(rows)
    if differing:
        lines += ["", "Experiments differ in " + ", ".join(differing) + "; they are reported separately and "
                  "never compared with each other."]
    lines += ["", "## Tuned: lowest time-mean analysis RMSE per filter and ensemble size (no lost replicate)", "",
              to_markdown(tuned_columns, tuned_rows)]
    chosen = {(r.experiment, r.filter, r.members or 0) for r in best}
    never = sorted({(r.experiment, r.filter, r.members or 0) for r in rows} - chosen)
    if never:
        lines += ["Every setting lost a replicate (no tuned value): "
                  + ", ".join(f"e{e} {f} N={m}" for e, f, m in never) + ".", ""]
    lines += ["## Paired differences of tuned filters (a minus b, analysis RMSE, same truth and observations)", "",
              to_markdown(pair_columns, pairs) if pairs else "No two filters share an experiment and ensemble size.\n"]
    lines += ["## Every setting (all columns, file paths included: summary.csv)", "",
              to_markdown(*compact(columns, records))]
    if problems:
        lines += ["## Skipped", ""] + [f"- {p}" for p in problems] + [""]
    written.append(write_text(os.path.join(out, "report.md"), "\n".join(lines)))

    for experiment in experiments:
        mine = [r for r in rows if r.experiment == experiment]
        mine_best = [r for r in best if r.experiment == experiment]
        tag = f"e{experiment}"
        if mine_best:
            written.append(figures.errors_over_cycles(mine_best, os.path.join(out, f"errors_over_cycles_{tag}.png")))
            written.append(figures.tuned_curve(mine_best, os.path.join(out, f"tuned_curve_{tag}.png")))
            if any("rank_truth_forecast" in r.totals for r in mine_best):
                written.append(figures.rank_histograms(mine_best, os.path.join(out, f"rank_histograms_{tag}.png")))
        written.append(figures.spread_against_error(mine, os.path.join(out, f"spread_against_error_{tag}.png")))
        for key in sorted({(r.filter, r.members or 0) for r in mine}):
            subset = [r for r in mine if (r.filter, r.members or 0) == key]
            anchor = next((b for b in mine_best if (b.filter, b.members or 0) == key), subset[0])
            axes = heat_map_axes(subset, anchor)
            if axes is not None:
                x_key, y_key, chosen = axes
                name = f"heat_map_{key[0]}_N{key[1]}_{tag}.png"
                written.append(figures.heat_map(chosen, x_key, y_key, os.path.join(out, name)))
    return written, problems, best, pairs


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(prog="assimbench-report", description=__doc__.splitlines()[0])
    parser.add_argument("paths", nargs="+", help="result files (.h5) and folders to search for them")
    parser.add_argument("--out", default="report", help="folder for the tables and figures (default: report)")
    args = parser.parse_args(argv)
    problem = unwritable(args.out)  # before anything is read or made: a refusal leaves nothing behind
    if problem:
        print(f"assimbench-report: error: {problem}; choose another --out", file=sys.stderr)
        return EXIT_BAD_INPUT
    try:
        written, problems, best, pairs = build_report(args.paths, args.out)
    except ValueError as err:
        print(f"assimbench-report: error: {err}", file=sys.stderr)
        return EXIT_BAD_INPUT
    for problem in problems:
        print(f"assimbench-report: {problem}", file=sys.stderr)
    for row in best:
        s = row.summary
        half = (s["rmse_analysis_high"] - s["rmse_analysis_low"]) / 2
        half_text = f" +- {half:.4f}" if np.isfinite(half) else ""
        print(f"tuned  e{row.experiment} {row.filter:<12} N={row.members!s:<5} analysis RMSE "
              f"{s['rmse_analysis']:.4f}{half_text}")
    for pair in pairs:
        print(f"paired e{pair['experiment']} N={pair['members']!s:<5} {pair['a']} - {pair['b']}: "
              f"{pair['difference']:+.4f} [{pair['low']:+.4f}, {pair['high']:+.4f}]  {pair['verdict']}")
    print(f"wrote {len(written)} files to {os.path.abspath(args.out)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
