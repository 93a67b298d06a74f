"""What a tuning study writes: per-point records (for resuming), the tuned table, the figures, and one
ready-to-run config per tuned point.

Files, in the study folder:
- ``points/<point>.json``: a finished point (its key, tuned values, objective, every candidate);
- ``tuned.csv``, ``tuned.md``: one row per static point;
- ``tuned_curve.png``: the tuned objective against ensemble size, one line per filter, 95% bands;
- ``landscape_<point>.png``: every candidate evaluated at a point;
- ``configs/<point>.yaml``: the tuned point as an experiment file of the main command
  (``assimbench --config-path <study>/configs --config-name <point>`` runs it again and gives the
  same value, to the bit on the same machine: lanes and standalone runs agree).
All are written through temporary names.
"""

import json
import math
import os

import matplotlib
import matplotlib.ticker
import matplotlib.transforms
import numpy as np
from matplotlib.figure import Figure

from assimbench.io.atomic import write_text
from assimbench.io.experiment_file import experiment_file
from assimbench.report.figures import OKABE_ITO, STATE_UNITS, STYLE, colours, save_png
from assimbench.report.tables import to_csv, to_markdown
from assimbench.report.words import filter_word, metric_word, setting_word, value_text


def record(point, key: str, objective: str, tuned: dict) -> dict:
    """A finished point as plain data (JSON). ``tuned`` is what :func:`assimbench.commands.tune.tuned_run`
    returns: the outcome (its minimiser the tuned settings), the value (mean, low, high) of a standalone
    run at them (what the written config gives) and its lost replicates, the same on fresh seeds, the
    search's fitted minimiser, the steps moved away from the lost region and the checks' run-cycles."""
    outcome = tuned["outcome"]
    names = [a.key for a in outcome.axes]
    fresh = tuned["fresh"]
    return {
        "key": key, "name": point.name, "overrides": list(point.overrides), "filter": point.filter,
        "members": point.members, "objective": objective,
        "axes": [{"key": a.key, "low": a.low, "high": a.high, "scale": a.scale} for a in outcome.axes],
        "best": None if outcome.minimiser is None else dict(zip(names, outcome.minimiser)),
        "fitted": None if tuned["fitted"] is None else dict(zip(names, tuned["fitted"])),
        "moved": tuned["moved"],
        "value": None if tuned["value"] is None else list(tuned["value"]),
        "lost": tuned["lost"],
        "fresh": None if fresh is None else list(fresh[0]),
        "fresh_lost": None if fresh is None else int(fresh[1]),
        "ranges": {k: list(v) for k, v in outcome.ranges.items()},
        "spent": outcome.spent, "checked": tuned["checked"], "seconds": outcome.seconds, "passes": outcome.passes,
        "stopped": outcome.stopped,
        "candidates": [{"values": list(c.values), "pass": c.pass_number, "lost": c.lost,
                        "mean": None if c.lost else c.mean, "low": None if c.lost else c.low,
                        "high": None if c.lost else c.high} for c in outcome.candidates],
    }


def save_record(folder: str, data: dict) -> str:
    return write_text(os.path.join(folder, "points", f"{data['name']}.json"), json.dumps(data, indent=1))


def load_record(folder: str, name: str, key: str):
    """The finished point's record when its key matches, else None (run it again)."""
    path = os.path.join(folder, "points", f"{name}.json")
    try:
        with open(path, encoding="utf-8") as handle:
            data = json.load(handle)
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) and data.get("key") == key else None


def other_record(folder: str, name: str, key: str) -> bool:
    """True when the study holds a finished record of this point made with other inputs."""
    path = os.path.join(folder, "points", f"{name}.json")
    return os.path.exists(path) and load_record(folder, name, key) is None


def table(records: list) -> tuple:
    """(columns, rows) of tuned.csv: the point's static keys; each tuned setting, the search's fitted
    minimiser and the 95% range of that minimiser; the steps the tuned setting moved away from the
    lost region; the objective of a run at the tuned settings with its 95% limits and lost
    replicates, the same on fresh seeds; and the run-cycles of the search and of the checks."""
    keys = list(dict.fromkeys(a["key"] for r in records for a in r["axes"]))
    objective = records[0]["objective"] if records else "rmse_analysis"
    columns = ["point", "filter", "members"] + [c for k in keys for c in (k, f"{k}_fitted", f"{k}_low", f"{k}_high")]
    columns += ["moved_steps", objective, f"{objective}_low", f"{objective}_high", "lost_replicates",
                f"fresh_{objective}", f"fresh_{objective}_low", f"fresh_{objective}_high", "fresh_lost_replicates",
                "cycles_spent", "check_cycles", "passes", "stopped"]
    rows = []
    for r in records:
        row = {"point": r["name"], "filter": r["filter"], "members": r["members"], "cycles_spent": r["spent"],
               "check_cycles": r["checked"], "passes": r["passes"], "stopped": r["stopped"]}
        if r["best"] is not None:
            for k in keys:
                row[k], row[f"{k}_fitted"] = r["best"].get(k, ""), r["fitted"].get(k, "")
                row[f"{k}_low"], row[f"{k}_high"] = r["ranges"].get(k, ("", ""))
            row[objective], row[f"{objective}_low"], row[f"{objective}_high"] = r["value"]
            row["moved_steps"], row["lost_replicates"] = r["moved"], r["lost"]
        if r.get("fresh") is not None:
            row[f"fresh_{objective}"], row[f"fresh_{objective}_low"], row[f"fresh_{objective}_high"] = r["fresh"]
            row["fresh_lost_replicates"] = r["fresh_lost"]
        rows.append(row)
    return columns, rows


def write_tables(folder: str, records: list) -> list:
    columns, rows = table(records)
    return [write_text(os.path.join(folder, "tuned.csv"), to_csv(columns, rows)),
            write_text(os.path.join(folder, "tuned.md"), "# Tuned settings\n\n" + to_markdown(columns, rows))]


def tuned_config(point, best: dict) -> str:
    """The tuned point as an experiment file of the main command (:func:`experiment_file`)."""
    head = (f"# Tuned by assimbench-tune: {', '.join(f'{k}={value_text(float(v))}' for k, v in best.items())}.\n"
            "# Run it with: assimbench --config-path <this folder> --config-name <this file's name>\n")
    return experiment_file(point.config, best, head)


def write_config(folder: str, point, best: dict) -> str:
    return write_text(os.path.join(folder, "configs", f"{point.name}.yaml"), tuned_config(point, best))


def landscape(data: dict, path: str) -> str:
    """Every candidate of one point: objective against the setting (one axis; colour by pass) or the
    candidates over the first two settings coloured by objective; lost candidates marked x."""
    axes = data["axes"]
    objective = metric_word(data["objective"])
    candidates = data["candidates"]
    kept = [c for c in candidates if not c["lost"]]
    lost = [c for c in candidates if c["lost"]]
    with matplotlib.rc_context(STYLE):
        fig = Figure(figsize=(6.0, 4.0) if len(axes) == 1 else (6.0, 5.6))
        ax = fig.subplots()
        if len(axes) == 1:
            passes = sorted({c["pass"] for c in candidates})
            palette = colours([f"pass {p}" for p in passes])
            for p in passes:
                mine = sorted((c for c in kept if c["pass"] == p), key=lambda c: c["values"][0])
                x = [c["values"][0] for c in mine]
                y = np.array([c["mean"] for c in mine])
                err = np.abs(np.array([[c["mean"] - c["low"], c["high"] - c["mean"]] for c in mine]).T) if mine else None
                ax.errorbar(x, y, yerr=np.nan_to_num(err) if mine else None, ls="none", marker="o", ms=4, capsize=2,
                            color=palette[f"pass {p}"], label=f"pass {p}")
            top = matplotlib.transforms.blended_transform_factory(ax.transData, ax.transAxes)
            if lost:
                ax.plot([c["values"][0] for c in lost], [0.96] * len(lost), ls="none", marker="x", color="black",
                        transform=top, label="lost (diverged, or no\nbetter than the observations)")
            if data["best"] is not None:
                key = axes[0]["key"]
                low, high = data["ranges"][key]
                if math.isfinite(low):
                    ax.axvspan(low, high, color=OKABE_ITO["sky blue"], alpha=0.25, lw=0,
                               label="fitted minimiser's 95% range")
                if data["moved"]:
                    ax.axvline(data["fitted"][key], color=OKABE_ITO["blue"], ls="--", lw=1,
                               label="fitted minimiser")
                ax.plot([data["best"][key]], [data["value"][0]], marker="*", ms=14, color=OKABE_ITO["vermillion"],
                        markeredgecolor="black", markeredgewidth=0.6, ls="none", label="tuned setting (its own run;\nmoved from the lost region\nwhen the fitted one lost a replicate)")
            if axes[0]["scale"] == "log":
                ax.set_xscale("log")
                ax.xaxis.set_major_formatter(matplotlib.ticker.FormatStrFormatter("%g"))
            ax.set_xlabel(f"{setting_word(axes[0]['key'])} (as configured)")
            ax.set_ylabel(f"time-mean {objective} ({STATE_UNITS}), 95% bars")
            ax.legend(fontsize=7.5, loc="upper left", bbox_to_anchor=(1.02, 1.0))  # beside: never over the points
        else:
            x = [c["values"][0] for c in kept]
            y = [c["values"][1] for c in kept]
            image = ax.scatter(x, y, c=[c["mean"] for c in kept], cmap="cividis_r",
                               s=[14 + 6 * c["pass"] for c in kept], edgecolors="none")
            if lost:
                ax.plot([c["values"][0] for c in lost], [c["values"][1] for c in lost], ls="none", marker="x",
                        color="black", label="lost (diverged, or no better than the observations)")
            if data["best"] is not None and data["moved"]:
                ax.plot([data["fitted"][axes[0]["key"]]], [data["fitted"][axes[1]["key"]]], marker="P", ms=9,
                        ls="none", color=OKABE_ITO["blue"], label="fitted minimiser")
            if data["best"] is not None:
                ax.plot([data["best"][axes[0]["key"]]], [data["best"][axes[1]["key"]]], marker="*", ms=14, ls="none",
                        color=OKABE_ITO["vermillion"], markeredgecolor="black", markeredgewidth=0.6, label="tuned")
            for j, (setter, axis) in enumerate(((ax.set_xscale, ax.xaxis), (ax.set_yscale, ax.yaxis))):
                if axes[j]["scale"] == "log":
                    setter("log")  # ticks as plain numbers (2, 5, 10), not powers of ten
                    axis.set_major_formatter(matplotlib.ticker.FormatStrFormatter("%g"))
                    axis.set_minor_formatter(matplotlib.ticker.FormatStrFormatter("%g"))
            ax.set_xlabel(setting_word(axes[0]["key"]))
            ax.set_ylabel(setting_word(axes[1]["key"]))
            bar = fig.colorbar(image, ax=ax)
            bar.set_label(f"time-mean {objective} ({STATE_UNITS})")
            ax.legend(fontsize=7.5, loc="upper left", bbox_to_anchor=(0.0, -0.15))  # below: never over the points
        members = f", {data['members']} members" if data["members"] else ""
        passes = f"{data['passes']} pass{'es' if data['passes'] != 1 else ''}"
        ax.set_title(f"Searched: {filter_word(data['filter'])}{members}\n({passes}, {data['spent']:,} run-cycles"
                     + ("; larger dots: later passes)" if len(axes) > 1 else ")"), fontsize=9)
        return save_png(fig, path)


def tuned_curve(records: list, path: str) -> str:
    """The tuned objective against ensemble size, one line per filter, with 95% bands."""
    decided = [r for r in records if r["value"] is not None and r["members"]]
    filters = list(dict.fromkeys(r["filter"] for r in decided))
    palette = colours(filters)
    with matplotlib.rc_context(STYLE):
        fig = Figure(figsize=(5.4, 3.8))
        ax = fig.subplots()
        for name in filters:
            mine = sorted((r for r in decided if r["filter"] == name), key=lambda r: r["members"])
            x = [r["members"] for r in mine]
            mean, low, high = (np.array([r["value"][i] for r in mine]) for i in range(3))
            ax.errorbar(x, mean, yerr=np.abs(np.vstack([mean - low, high - mean])), marker="o", ms=4, capsize=3,
                        color=palette[name], label=filter_word(name))  # bars show even for a single size
            ax.fill_between(x, low, high, color=palette[name], alpha=0.2, lw=0)
        sizes = sorted({r["members"] for r in decided})
        if sizes:
            ax.set_xscale("log", base=2)
            ax.set_xticks(sizes, [str(m) for m in sizes])
            ax.xaxis.set_minor_locator(matplotlib.ticker.NullLocator())
        objective = metric_word(records[0]["objective"]) if records else "objective"
        ax.set_xlabel("ensemble size (members)")
        ax.set_ylabel(f"tuned time-mean {objective} ({STATE_UNITS})")
        ax.set_title("Tuned curve (bars and bands: 95% intervals)")
        if filters:
            ax.legend(fontsize=8)
        return save_png(fig, path)


def summary_line(data: dict) -> str:
    """One printed line per tuned point."""
    if data["value"] is None:
        return (f"{data['name']}: no tuned value, every candidate was lost "
                f"({data['passes']} pass{'es' if data['passes'] != 1 else ''})")
    mean, low, high = data["value"]
    half = (high - low) / 2 if math.isfinite(low) else float("nan")
    settings = ", ".join(f"{setting_word(k)} {v:.4g} [{data['ranges'][k][0]:.4g}, {data['ranges'][k][1]:.4g}]"
                         if math.isfinite(data["ranges"][k][0]) else f"{setting_word(k)} {v:.4g} [range unknown]"
                         for k, v in data["best"].items())
    fresh = ""
    if data["moved"]:
        steps = f"{data['moved']} step{'s' if data['moved'] > 1 else ''}"
        settings += (f" (moved {steps} away from the lost region; fitted minimiser "
                     + ", ".join(f"{v:.4g}" for v in data["fitted"].values()) + ")")
    if data.get("fresh") is not None:
        f_mean, f_low, f_high = data["fresh"]
        fresh = f"; fresh seeds {f_mean:.4f} +- {(f_high - f_low) / 2:.4f}"
        lost = [f"{n} {where}" for n, where in ((data["lost"], "on the search's seeds"),
                                                  (data["fresh_lost"], "on fresh seeds")) if n]
        if lost:
            fresh += f", LOST {' and '.join(lost)} (replicates): NOT ROBUST"
    passes = f"{data['passes']} pass{'es' if data['passes'] != 1 else ''}"
    return (f"{data['name']}: {settings}; {metric_word(data['objective'])} {mean:.4f} +- {half:.4f}{fresh} "
            f"({passes}, {data['spent']:,} run-cycles, stopped: {data['stopped']})")
