"""Figures of a report, as PNG files: plain, labelled, with units on every axis.

Each function takes rows (:class:`assimbench.report.collect.Row`) and a path,
draws one figure and writes it through a temporary name. Figures are made
with matplotlib's object interface (no pyplot, so no backend is chosen or
switched: files only, no screen).
"""

import matplotlib
import matplotlib.patches
import matplotlib.ticker
import numpy as np
from matplotlib.figure import Figure

from assimbench.io.atomic import atomic_file

# Our own muted palette and a quiet frame.
PALETTE = ("#1f4e79", "#c0504d", "#4f7f3a", "#8064a2", "#d08c1b", "#2f8f9d", "#7f6a4f", "#5a5a5a")
STYLE = {
    "figure.dpi": 110,
    "savefig.dpi": 130,
    "font.size": 9.5,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.color": "#e4e4e4",
    "grid.linewidth": 0.6,
    "axes.edgecolor": "#777777",
    "axes.titlesize": 10,
    "axes.titleweight": "bold",
    "legend.frameon": False,
}
STATE_UNITS = "state units"
TIME_UNITS = "model time units"


def _save(fig, path: str) -> str:
    with atomic_file(path) as partial:
        fig.savefig(partial, format="png", bbox_inches="tight")
    return path


def _axes(rows: int = 1, columns: int = 1, squeeze: bool = True, **figure) -> tuple:
    """A new figure and its axes (as ``Figure.subplots`` gives them)."""
    fig = Figure(**figure)
    axes = fig.subplots(rows, columns, squeeze=squeeze)
    return fig, axes


def _label(row) -> str:
    members = f" N={row.members}" if row.members else ""
    return f"{row.filter}{members}"


def _colour(names: list) -> dict:
    return {name: PALETTE[i % len(PALETTE)] for i, name in enumerate(sorted(set(names)))}


def running_mean(values: np.ndarray, window: int) -> np.ndarray:
    """Mean over the last ``window`` values (fewer at the start)."""
    cumulative = np.cumsum(np.insert(values, 0, 0.0))
    counts = np.minimum(np.arange(1, values.size + 1), window)
    return (cumulative[1:] - cumulative[np.arange(1, values.size + 1) - counts]) / counts


def errors_over_cycles(rows: list, path: str, window: int = 20) -> str:
    """Analysis RMSE (solid) and spread (dashed) of replicate 0 against model time."""
    with matplotlib.rc_context(STYLE):
        fig, ax = _axes(figsize=(7.0, 3.6))
        colours = _colour([_label(r) for r in rows])
        for row in rows[: len(PALETTE)]:
            rmse, spread = row.series("rmse_analysis")[0], row.series("spread_analysis")[0]
            time = row.interval * np.arange(1, rmse.size + 1)
            colour = colours[_label(row)]
            ax.plot(time, running_mean(rmse, window), color=colour, lw=1.1, label=f"{_label(row)} RMSE")
            ax.plot(time, running_mean(spread, window), color=colour, lw=1.0, ls="--", label=f"{_label(row)} spread")
        burn_in = int(rows[0].config.get("burn_in", 0)) * rows[0].interval
        ax.axvspan(0, burn_in, color="#f3f3f3", lw=0, zorder=0)
        ax.set_xlabel(f"time ({TIME_UNITS})")
        ax.set_ylabel(f"analysis RMSE, spread ({STATE_UNITS})")
        ax.set_title(f"Analysis error and spread, replicate 0 ({window}-cycle running mean; shaded: burn-in)")
        ax.set_yscale("log")
        ax.yaxis.set_major_formatter(matplotlib.ticker.FormatStrFormatter("%g"))
        ax.yaxis.set_minor_formatter(matplotlib.ticker.NullFormatter())
        ax.legend(fontsize=8, ncol=2)
        return _save(fig, path)


def heat_map(rows: list, x_key: str, y_key: str, path: str, metric: str = "rmse_analysis") -> str:
    """Time-mean ``metric`` over two swept settings; cells with a lost replicate are hatched."""
    xs = sorted({r.config[x_key] for r in rows})
    ys = sorted({r.config[y_key] for r in rows})
    grid = np.full((len(ys), len(xs)), np.nan)
    lost = np.zeros_like(grid, dtype=bool)
    for r in rows:
        i, j = ys.index(r.config[y_key]), xs.index(r.config[x_key])
        grid[i, j] = r.summary.get(metric, np.nan)
        lost[i, j] = r.lost > 0
    with matplotlib.rc_context({**STYLE, "axes.grid": False}):
        fig, ax = _axes(figsize=(1.2 + 0.9 * len(xs), 1.2 + 0.6 * len(ys)))
        shown = np.where(lost, np.nan, grid)
        finite = shown[np.isfinite(shown)]
        vmin, vmax = (finite.min(), finite.max()) if finite.size else (0.0, 1.0)
        image = ax.imshow(shown, origin="lower", cmap="cividis_r", vmin=vmin, vmax=vmax, aspect="auto")
        for i in range(len(ys)):
            for j in range(len(xs)):
                if lost[i, j]:
                    ax.add_patch(matplotlib.patches.Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False, hatch="xxx", color="#9a9a9a"))
                    ax.text(j, i, "lost", ha="center", va="center", fontsize=8, color="#444444")
                elif np.isfinite(grid[i, j]):
                    dark = (grid[i, j] - vmin) > 0.5 * (vmax - vmin)
                    ax.text(j, i, f"{grid[i, j]:.3f}", ha="center", va="center", fontsize=8,
                            color="white" if dark else "black")
        ax.set_xticks(range(len(xs)), [f"{v:g}" for v in xs])
        ax.set_yticks(range(len(ys)), [f"{v:g}" for v in ys])
        ax.set_xlabel(f"{x_key} (as configured)")
        ax.set_ylabel(f"{y_key} (as configured)")
        first = rows[0]
        ax.set_title(f"Time-mean {metric.replace('_', ' ')}: {_label(first)}")
        bar = fig.colorbar(image, ax=ax)
        bar.set_label(f"{metric.replace('_', ' ')} ({STATE_UNITS})")
        return _save(fig, path)


def tuned_curve(best: list, path: str, metric: str = "rmse_analysis") -> str:
    """Tuned time-mean ``metric`` against ensemble size, one line per filter, 95% error bars."""
    with matplotlib.rc_context(STYLE):
        fig, ax = _axes(figsize=(5.2, 3.6))
        filters = sorted({r.filter for r in best})
        colours = _colour(filters)
        for name in filters:
            mine = sorted((r for r in best if r.filter == name and r.members), key=lambda r: r.members)
            if not mine:
                continue
            x = np.array([r.members for r in mine], dtype=float)
            y = np.array([r.summary[metric] for r in mine])
            low = np.array([r.summary.get(metric + "_low", np.nan) for r in mine])
            high = np.array([r.summary.get(metric + "_high", np.nan) for r in mine])
            ax.errorbar(x, y, yerr=np.nan_to_num(np.vstack([y - low, high - y])), color=colours[name], marker="o",
                        ms=4, lw=1.2, capsize=3, label=name)
        sizes = sorted({r.members for r in best if r.members})
        ax.set_xscale("log", base=2)
        ax.set_xticks(sizes, [str(m) for m in sizes])
        ax.xaxis.set_minor_locator(matplotlib.ticker.NullLocator())
        ax.set_xlabel("ensemble size (members)")
        ax.set_ylabel(f"tuned {metric.replace('_', ' ')} ({STATE_UNITS})")
        ax.set_title("Best-tuned error against ensemble size (95% intervals)")
        ax.legend()
        return _save(fig, path)


def rank_histograms(best: list, path: str, name: str = "rank_truth_forecast") -> str:
    """Relative frequency of the truth's rank among the forecast members, one panel per row."""
    rows = [r for r in best if name in r.totals][:6]
    with matplotlib.rc_context(STYLE):
        fig, axes = _axes(1, max(1, len(rows)), squeeze=False, figsize=(2.6 * max(1, len(rows)), 2.8),
                          layout="constrained")
        for ax, row in zip(axes[0], rows):
            counts = np.asarray(row.totals[name]).sum(axis=0).astype(float)
            frequency = counts / counts.sum()
            ax.bar(np.arange(counts.size), frequency, width=0.85, color=PALETTE[0])
            ax.axhline(1.0 / counts.size, color=PALETTE[1], lw=1.0, ls="--")
            ax.set_title(_label(row))
        fig.supxlabel("rank of the truth among the forecast members (0 = below all), count", fontsize=9)
        axes[0][0].set_ylabel("relative frequency (1)")
        fig.suptitle("Rank histograms after burn-in (dashed: flat)", fontsize=10, fontweight="bold")
        return _save(fig, path)


def spread_against_error(rows: list, path: str) -> str:
    """Time-mean analysis spread against RMSE for every setting that kept all replicates."""
    kept = [r for r in rows if not r.lost]
    with matplotlib.rc_context(STYLE):
        fig, ax = _axes(figsize=(4.4, 4.0))
        colours = _colour([r.filter for r in kept])
        for name, colour in colours.items():
            mine = [r for r in kept if r.filter == name]
            ax.scatter([r.summary["rmse_analysis"] for r in mine], [r.summary["spread_analysis"] for r in mine],
                       s=16, color=colour, label=name, alpha=0.85)
        values = [v for r in kept for v in (r.summary["rmse_analysis"], r.summary["spread_analysis"])]
        if values:
            top = max(values) * 1.05
            ax.plot([0, top], [0, top], color="#888888", lw=0.8, ls=":", label="spread = RMSE")
            ax.set_xlim(0, top)
            ax.set_ylim(0, top)
        ax.set_xlabel(f"time-mean analysis RMSE ({STATE_UNITS})")
        ax.set_ylabel(f"time-mean analysis spread ({STATE_UNITS})")
        ax.set_title("Spread against error")
        ax.legend(fontsize=8)
        return _save(fig, path)
