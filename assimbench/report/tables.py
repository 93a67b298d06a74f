"""Tables of a report, as records (dicts) for CSV and Markdown.

- settings: one record per setting pooled over seeds (summary.csv);
- runs: one record per run, i.e. per lane of each file and seed (runs.csv);
- decisions: the best and runner-up at every static point (tuned.csv);
- comparisons: paired differences with verdicts (paired.csv).

Numbers stay numbers in the CSV files: a time mean has its own column and its
95% limits columns ``<name>_low`` and ``<name>_high``. Only the Markdown
tables write "mean +- half-width", for reading.
"""

import csv
import io

import numpy as np

from assimbench.report.collect import varied_settings
from assimbench.report.decide import distinguishable, setting_text
from assimbench.report.words import metric_word

METRICS = ("rmse_analysis", "spread_analysis", "rmse_forecast", "crps_analysis", "innovation_ratio")
SPREAD_OVER_RMSE = "spread_over_rmse_analysis"


def estimate_metrics(settings: list) -> tuple:
    """The time means of estimated parameters any setting holds: ``estimate_<p>_mean`` and
    ``estimate_<p>_spread`` for every parameter p, in the order first met (a setting without one
    shows NaN)."""
    names = {}
    for s in settings:
        for parameter in s.config.get("estimate.parameters") or ():
            names.update({f"estimate_{parameter}_mean": None, f"estimate_{parameter}_spread": None})
    return tuple(names)


def settings_table(settings: list) -> tuple:
    """(columns, records): experiment, filter, members, the varied settings, seeds, replicates, every
    metric (and every estimated parameter's time-mean estimate and spread) with its 95% limits, the spread / RMSE ratio of the time means, lost replicates and why."""
    keys = varied_settings([s.rows[0] for s in settings])
    columns = ["experiment", "filter", "members"] + keys + ["seeds", "replicates"]
    metrics = METRICS + estimate_metrics(settings)
    for name in metrics:
        columns += [name, name + "_low", name + "_high"]
    columns += [SPREAD_OVER_RMSE, "lost_replicates", "lost_reasons"]
    records = []
    for s in settings:
        record = {"experiment": s.experiment, "filter": s.filter, "members": s.members,
                  "seeds": " ".join(str(seed) for seed in s.seeds), "replicates": s.replicates,
                  SPREAD_OVER_RMSE: s.spread_over_rmse(), "lost_replicates": s.lost,
                  "lost_reasons": "; ".join(s.lost_reasons)}
        record.update({k: s.config.get(k, "") for k in keys})
        for name in metrics:
            record[name], record[name + "_low"], record[name + "_high"] = s.estimate(name)
        records.append(record)
    records.sort(key=lambda r: (r["experiment"], r["filter"], r["members"] or 0, *(str(r[k]) for k in keys)))
    return columns, records


def runs_table(rows: list) -> tuple:
    """(columns, records): one record per run (lane of a file), with its seed, file and lane."""
    keys = varied_settings(rows)
    columns = ["experiment", "filter", "members"] + keys + ["seed", "replicates", "rmse_analysis",
                                                            "rmse_analysis_low", "rmse_analysis_high",
                                                            "blown_up_replicates", "file", "lane"]
    records = []
    for row in rows:
        record = {"experiment": row.experiment, "filter": row.filter, "members": row.members, "seed": row.seed,
                  "replicates": len(row.first_bad_cycle), "blown_up_replicates": row.blown_up, "file": row.path,
                  "lane": row.lane if row.lane >= 0 else ""}
        record.update({k: row.config.get(k, "") for k in keys})
        for name in ("rmse_analysis", "rmse_analysis_low", "rmse_analysis_high"):
            record[name] = row.summary.get(name, float("nan"))
        records.append(record)
    return columns, records


def decisions_table(points: list) -> tuple:
    """(columns, records): per static point the best setting's values and time means, the runner-up,
    their paired difference (best minus runner-up) with its interval, and whether they differ."""
    tuned_keys = sorted({k for p in points for k in p.tuned_keys})
    static_keys = sorted({k for p in points for k, _ in p.static})
    columns = (["experiment", "filter", "members"] + static_keys + tuned_keys +
               ["rmse_analysis", "rmse_analysis_low", "rmse_analysis_high", "spread_analysis", SPREAD_OVER_RMSE,
                "runner_up", "runner_up_rmse_analysis", "difference", "difference_low", "difference_high",
                "distinguishable", "candidates", "lost_settings"])
    records = []
    for p in points:
        record = {"experiment": p.experiment, "filter": p.filter, "members": p.members, **dict(p.static),
                  "candidates": len(p.settings) - len(p.lost), "lost_settings": len(p.lost)}
        if p.best is not None:
            record.update({k: p.best.config.get(k, "") for k in tuned_keys if k in p.tuned_keys})
            (record["rmse_analysis"], record["rmse_analysis_low"],
             record["rmse_analysis_high"]) = p.best.estimate("rmse_analysis")
            record["spread_analysis"] = p.best.value("spread_analysis")
            record[SPREAD_OVER_RMSE] = p.best.spread_over_rmse()
        if p.runner_up is not None:
            record["runner_up"] = setting_text(p.runner_up, p.tuned_keys)
            record["runner_up_rmse_analysis"] = p.runner_up.value("rmse_analysis")
            if p.difference is not None:
                record.update({"difference": p.difference["mean"], "difference_low": p.difference["low"],
                               "difference_high": p.difference["high"]})
            record["distinguishable"] = "yes" if distinguishable(p.difference) else "no"
        records.append(record)
    return columns, records


COMPARISON_COLUMNS = ["experiment", "kind", "a", "b", "difference", "low", "high", "seeds", "verdict"]


def comparisons_table(comparisons: list) -> list:
    """Records of paired comparisons a minus b (analysis RMSE)."""
    records = []
    for c in comparisons:
        d = c.difference or {}
        records.append({"experiment": c.experiment, "kind": c.kind, "a": c.a, "b": c.b,
                        "difference": d.get("mean", float("nan")), "low": d.get("low", float("nan")),
                        "high": d.get("high", float("nan")), "seeds": " ".join(map(str, d.get("seeds", []))),
                        "verdict": c.verdict})
    return records


def _listed(value) -> str:
    """A list-valued key (estimate.parameters) as it is written on the command line: [forcing,rho]."""
    return "[" + ",".join(str(v) for v in value) + "]"


def _text(value) -> str:
    if isinstance(value, float):
        return "" if np.isnan(value) else f"{value:.4g}"
    if isinstance(value, (tuple, list)):
        return _listed(value)
    return "" if value is None else str(value)


def to_csv(columns: list, records: list) -> str:
    """CSV text; floats written in full (repr), missing values empty."""
    out = io.StringIO()
    writer = csv.DictWriter(out, fieldnames=columns, extrasaction="ignore", lineterminator="\n")
    writer.writeheader()
    for record in records:
        writer.writerow({k: ("" if isinstance(v, float) and np.isnan(v) else repr(v) if isinstance(v, float)
                             else _listed(v) if isinstance(v, (tuple, list)) else v) for k, v in record.items()})
    return out.getvalue()


def to_markdown(columns: list, records: list, headers: dict | None = None) -> str:
    headers = headers or {}
    lines = ["| " + " | ".join(headers.get(c, c) for c in columns) + " |", "|" + "|".join("---" for _ in columns) + "|"]
    for record in records:
        lines.append("| " + " | ".join(_text(record.get(c, "")) for c in columns) + " |")
    return "\n".join(lines) + "\n"


def with_interval(mean: float, low: float, high: float) -> str:
    """"0.1862 +- 0.0063" (the half-width of the 95% interval), or the mean alone without one."""
    if not np.isfinite(mean):
        return "not finite"
    if not (np.isfinite(low) and np.isfinite(high)):
        return f"{mean:.4f}"
    return f"{mean:.4f} +- {(high - low) / 2:.4f}"


def interval_text(mean: float, low: float, high: float) -> str:
    """"-0.0041 [-0.0059, -0.0023]" for a paired difference."""
    return f"{mean:+.4f} [{low:+.4f}, {high:+.4f}]"


def metric_header(name: str) -> str:
    return f"{metric_word(name)} (95%)"
