"""Tables of a report: the tidy table, the tuned curve and paired differences.

Tuned curve: for every experiment, filter and ensemble size, the setting with
the lowest time-mean analysis RMSE among the settings none of whose
replicates diverged (common practice in tuning studies: best over the swept
inflation / localization values).

Paired difference of two tuned filters of the same experiment: they saw the
same truth and observations, so the difference d_r(k) = e_A,r(k) - e_B,r(k)
of their per-cycle analysis RMSE is formed cycle by cycle and replicate by
replicate, and its time mean after burn-in gets the same batch-means 95%
interval as every other time mean (:mod:`assimbench.twin.summaries`). Pairing
removes the variability the two filters share (the weather of the truth and
the observation noise), so the interval is much narrower than one formed from
the two separate intervals.
"""

import csv
import io
import itertools

import numpy as np

from assimbench.report.collect import Row, varied_settings
from assimbench.twin.summaries import TimeMeans

METRICS = (
    ("rmse_analysis", "analysis RMSE"),
    ("spread_analysis", "analysis spread"),
    ("spread_skill_ratio_analysis", "spread / RMSE"),
    ("rmse_forecast", "forecast RMSE"),
    ("crps_analysis", "analysis CRPS"),
    ("innovation_ratio", "innovation ratio"),
)
WITH_INTERVAL = ("rmse_analysis", "spread_analysis", "rmse_forecast", "crps_analysis", "innovation_ratio")


def tidy_table(rows: list) -> tuple:
    """(columns, records): one record per row: experiment, filter, members, the varied
    settings, the metrics with their 95% limits, lost replicates, file and lane."""
    settings = varied_settings(rows)
    columns = ["experiment", "filter", "members"] + settings + ["replicates"]
    for name, _ in METRICS:
        columns.append(name)
        if name in WITH_INTERVAL:
            columns += [name + "_low", name + "_high"]
    columns += ["lost_replicates", "file", "lane"]
    records = []
    for row in rows:
        record = {"experiment": row.experiment, "filter": row.filter, "members": row.members,
                  "replicates": len(row.first_bad_cycle), "lost_replicates": row.lost,
                  "file": row.path, "lane": row.lane if row.lane >= 0 else ""}
        record.update({key: row.config.get(key, "") for key in settings})
        for name in columns:
            if name not in record:
                record[name] = row.summary.get(name, float("nan"))
        records.append(record)
    records.sort(key=lambda r: (r["experiment"], r["filter"], r["members"] or 0, *(str(r[k]) for k in settings)))
    return columns, records


def tuned(rows: list, metric: str = "rmse_analysis") -> list:
    """The best row per (experiment, filter, members) among rows with no lost replicate."""
    best = {}
    for row in rows:
        if row.lost or not np.isfinite(row.summary.get(metric, np.nan)):
            continue
        key = (row.experiment, row.filter, row.members or 0)
        if key not in best or row.summary[metric] < best[key].summary[metric]:
            best[key] = row
    return [best[k] for k in sorted(best)]


def paired_difference(a: Row, b: Row, metric: str = "rmse_analysis") -> dict:
    """Time mean of a's minus b's per-cycle ``metric`` (same truth and observations) with its interval."""
    da, db = a.series(metric), b.series(metric)
    difference = da - db  # (R, K)
    cycles = difference.shape[1]
    burn_in = int(a.config.get("burn_in", 0))
    means = TimeMeans(difference.shape[0], cycles, burn_in)
    means.add("d", difference, 1)
    out = means.summarise("d")
    return {"mean": out["mean"], "low": out["low"], "high": out["high"]}


def paired_table(best: list, metric: str = "rmse_analysis") -> list:
    """Every pair of tuned filters with the same experiment and ensemble size."""
    records = []
    groups = itertools.groupby(sorted(best, key=lambda r: (r.experiment, r.members or 0)),
                               key=lambda r: (r.experiment, r.members or 0))
    for (experiment, members), group in groups:
        for a, b in itertools.combinations(sorted(group, key=lambda r: r.filter), 2):
            d = paired_difference(a, b, metric)
            if d["low"] > 0:
                verdict = f"{b.filter} lower"
            elif d["high"] < 0:
                verdict = f"{a.filter} lower"
            else:
                verdict = "no clear difference"
            records.append({"experiment": experiment, "members": members, "a": a.filter, "b": b.filter,
                            "difference": d["mean"], "low": d["low"], "high": d["high"], "verdict": verdict})
    return records


def _text(value) -> str:
    if isinstance(value, float):
        return "" if np.isnan(value) else f"{value:.4g}"
    return str(value)


def to_csv(columns: list, records: list) -> str:
    out = io.StringIO()
    writer = csv.DictWriter(out, fieldnames=columns, extrasaction="ignore", lineterminator="\n")
    writer.writeheader()
    for record in records:
        writer.writerow({k: (repr(v) if isinstance(v, float) else v) for k, v in record.items()})
    return out.getvalue()


def to_markdown(columns: list, records: list) -> str:
    lines = ["| " + " | ".join(columns) + " |", "|" + "|".join("---" for _ in columns) + "|"]
    for record in records:
        lines.append("| " + " | ".join(_text(record.get(c, "")) for c in columns) + " |")
    return "\n".join(lines) + "\n"


def with_interval(mean: float, low: float, high: float) -> str:
    if not np.isfinite(low):
        return f"{mean:.4f}"
    return f"{mean:.4f} +- {(high - low) / 2:.4f}"


def tuned_records(best: list, settings: list, metric: str = "rmse_analysis") -> tuple:
    """(columns, records) of the tuned curve for Markdown/CSV."""
    columns = ["experiment", "filter", "members"] + settings + [metric + " (95%)", "spread_analysis"]
    records = []
    for row in best:
        s = row.summary
        record = {"experiment": row.experiment, "filter": row.filter, "members": row.members,
                  metric + " (95%)": with_interval(s[metric], s.get(metric + "_low", np.nan), s.get(metric + "_high", np.nan)),
                  "spread_analysis": s.get("spread_analysis", np.nan)}
        record.update({k: row.config.get(k, "") for k in settings})
        records.append(record)
    return columns, records
