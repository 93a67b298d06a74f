"""Figures of a report, as PNG files: plain words, units on every axis, readable numeric ticks.

Each function takes pooled settings or decided points
(:mod:`assimbench.report.pooling`, :mod:`assimbench.report.decide`) and a
path, draws one figure and writes it through a temporary name. Figures are
made with matplotlib's object interface (no pyplot, so no backend is chosen
or switched: files only, no screen).

Colours: the palette of Okabe & Ito (2008, "Color Universal Design", J*Fly,
jfly.uni-koeln.de/color; values from memory), chosen to stay distinguishable
for readers with the common forms of colour blindness. Yellow comes last: it
is faint on white.
"""

import math

import matplotlib
import matplotlib.patches
import matplotlib.ticker
import matplotlib.transforms
import numpy as np
from matplotlib.figure import Figure

from assimbench.io.atomic import atomic_file
from assimbench.report.words import describe, observation_error_level, point_name, setting_word, value_text

OKABE_ITO = {
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "bluish green": "#009E73",
    "orange": "#E69F00",
    "reddish purple": "#CC79A7",
    "sky blue": "#56B4E9",
    "black": "#000000",
    "yellow": "#F0E442",
}
PALETTE = tuple(OKABE_ITO.values())
NEUTRAL = "#8c8c8c"
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
MAX_PANELS = 8


def save_png(fig, path: str) -> str:
    """Write ``fig`` as a PNG through a temporary name; returns ``path``."""
    with atomic_file(path) as partial:
        fig.savefig(partial, format="png", bbox_inches="tight")
    return path


def _axes(rows: int = 1, columns: int = 1, squeeze: bool = True, sharex: bool = False, **figure) -> tuple:
    """A new figure and its axes (as ``Figure.subplots`` gives them)."""
    fig = Figure(**figure)
    axes = fig.subplots(rows, columns, squeeze=squeeze, sharex=sharex)
    return fig, axes


def colours(names: list) -> dict:
    """A colour per name, in the order the names first appear."""
    return {name: PALETTE[i % len(PALETTE)] for i, name in enumerate(dict.fromkeys(names))}


def running_mean(values: np.ndarray, window: int) -> np.ndarray:
    """Mean over the last ``window`` values (fewer at the start)."""
    cumulative = np.cumsum(np.insert(values, 0, 0.0))
    counts = np.minimum(np.arange(1, values.size + 1), window)
    return (cumulative[1:] - cumulative[np.arange(1, values.size + 1) - counts]) / counts


def readable_log_ticks(low: float, high: float) -> list:
    """Tick values for a log axis from ``low`` to ``high``: the 1-2-5 steps of each decade, finer
    steps when fewer than three fall in the range, evenly spaced values for a very narrow range."""
    first, last = math.floor(math.log10(low)) - 1, math.ceil(math.log10(high)) + 1
    for steps in ((1, 2, 5), (1, 1.5, 2, 3, 5, 7)):
        ticks = [m * 10.0**e for e in range(first, last) for m in steps if low <= m * 10.0**e <= high]
        if len(ticks) >= 3:
            return ticks
    return list(matplotlib.ticker.MaxNLocator(4).tick_values(low, high)[1:-1]) or [low, high]


def set_log_axis(ax, values: np.ndarray, which: str = "y") -> None:
    """A log axis (``which``: "y" or "x") over the finite positive ``values`` with numeric ticks that
    always show."""
    shown = values[np.isfinite(values) & (values > 0)]
    if shown.size == 0:
        return
    low, high = float(shown.min()) / 1.1, float(shown.max()) * 1.1
    axis = ax.yaxis if which == "y" else ax.xaxis
    (ax.set_yscale if which == "y" else ax.set_xscale)("log")
    (ax.set_ylim if which == "y" else ax.set_xlim)(low, high)
    ticks = readable_log_ticks(low, high)
    axis.set_major_locator(matplotlib.ticker.FixedLocator(ticks))
    axis.set_major_formatter(matplotlib.ticker.FixedFormatter([f"{t:.3g}" for t in ticks]))
    axis.set_minor_locator(matplotlib.ticker.NullLocator())


def _observation_error(ax, setting, highest: float = np.inf) -> None:
    """A dotted line at the observation error (in state units only for an identity network). When it
    is far above the plotted values (``highest``) it would flatten them: the legend names it instead."""
    config = setting.config
    if config.get("observation.transform", "identity") != "identity" or "observation.error_std" not in config:
        return
    error = observation_error_level(config)
    rms = ", RMS over the stations" if config.get("observation.error_factors") is not None else ""
    if error <= 1.5 * highest:
        ax.axhline(error, color=NEUTRAL, lw=0.9, ls=":", label=f"observation error ({error:.4g}{rms})")
    else:
        ax.plot([], [], color=NEUTRAL, lw=0.9, ls=":",
                label=f"observation error ({error:.4g}{rms}, above the plotted range)")


def errors_over_cycles(points: list, path: str, window: int = 20) -> str:
    """One panel per decided point: the best setting's analysis RMSE of every replicate of every seed
    (thin), their mean (thick) and the mean spread (dashed), as running means over model time."""
    points = [p for p in points if p.best is not None][:MAX_PANELS]
    columns = 1 if len(points) == 1 else 2
    rows = math.ceil(len(points) / columns)
    with matplotlib.rc_context(STYLE):
        fig, axes = _axes(rows, columns, squeeze=False, figsize=(6.4 * columns if columns == 1 else 11.0, 2.9 * rows),
                          sharex=True, layout="constrained")
        palette = colours([p.name for p in points])
        shown = []
        for ax, point in zip(axes.flat, points):
            best = point.best
            rmse, spread = best.series("rmse_analysis"), best.series("spread_analysis")
            smooth = np.array([running_mean(r, window) for r in rmse])
            time = best.rows[0].interval * np.arange(1, rmse.shape[1] + 1)
            colour = palette[point.name]
            for replicate in smooth:
                ax.plot(time, replicate, color=colour, lw=0.5, alpha=0.3)
            label = f"RMSE, mean of {len(smooth)} replicates" if len(smooth) > 1 else "RMSE"
            ax.plot(time, smooth.mean(axis=0), color=colour, lw=1.6, label=label)
            ax.plot(time, running_mean(spread.mean(axis=0), window), color="black", lw=1.0, ls="--",
                    label="spread, mean")
            _observation_error(ax, best)
            burn_in = int(best.config.get("burn_in", 0)) * best.rows[0].interval
            ax.axvspan(0, burn_in, color="#f0f0f0", lw=0, zorder=0)
            seeds = ", ".join(map(str, best.seeds))
            tuned = f": {describe(best.config, point.tuned_keys)}" if point.tuned_keys else ""
            ax.set_title(f"{point.name}{tuned} (seed{'s' if len(best.seeds) > 1 else ''} {seeds})", fontsize=9)
            ax.legend(fontsize=7.5, loc="upper right")
            shown.append(smooth)
            if best.config.get("observation.transform", "identity") == "identity":
                shown.append(np.array([observation_error_level(best.config)]))
        for ax in list(axes.flat)[len(points):]:
            ax.set_visible(False)
        everything = np.concatenate([s.ravel() for s in shown])
        for ax in list(axes.flat)[: len(points)]:
            set_log_axis(ax, everything)  # one range for every panel, so panels compare at a glance
        fig.supxlabel(f"time ({TIME_UNITS}); shaded: burn-in", fontsize=9)
        fig.supylabel(f"analysis RMSE and spread ({STATE_UNITS})", fontsize=9)
        fig.suptitle(f"Analysis error over time at the best settings ({window}-cycle running means)",
                     fontsize=10, fontweight="bold")
        return save_png(fig, path)


def _profile(point, key: str) -> list:
    """The point's settings along ``key`` with every other tuned key at the best setting's value."""
    anchor = point.best or point.settings[0]
    others = [k for k in point.tuned_keys if k != key]
    chosen = [s for s in point.settings if all(repr(s.config.get(k)) == repr(anchor.config.get(k)) for k in others)]
    return sorted(chosen, key=lambda s: s.config.get(key))


def error_against_setting(points: list, key: str, path: str) -> str:
    """Pooled time-mean analysis RMSE against one swept setting, one line per static point (ensemble
    size, filter), 95% intervals; other swept settings at each line's best; lost settings marked x."""
    points = [p for p in points if key in p.tuned_keys]
    with matplotlib.rc_context(STYLE):
        fig, ax = _axes(figsize=(6.2, 4.0))
        palette = colours([p.name for p in points])
        top = matplotlib.transforms.blended_transform_factory(ax.transData, ax.transAxes)
        any_lost = 0
        for point in points:
            profile = _profile(point, key)
            colour = palette[point.name]
            kept = [s for s in profile if not s.lost]
            x = np.array([s.config[key] for s in kept], float)
            est = np.array([s.estimate("rmse_analysis") for s in kept]).reshape(-1, 3)
            others = [k for k in point.tuned_keys if k != key]
            label = point.name + (f" ({describe((point.best or profile[0]).config, others)})" if others else "")
            ax.errorbar(x, est[:, 0], yerr=np.nan_to_num(np.abs(np.vstack([est[:, 0] - est[:, 1], est[:, 2] - est[:, 0]]))),
                        color=colour, marker="o", ms=4, lw=1.3, capsize=3, label=label)
            if point.best is not None and point.best in kept:
                ax.plot([point.best.config[key]], [point.best.value("rmse_analysis")], marker="*", ms=13,
                        color=colour, markeredgecolor="black", markeredgewidth=0.6, zorder=5)
            lost = [s.config[key] for s in profile if s.lost]
            if lost:
                # One row of marks per line above the data, so that marks of several lines never hide each other.
                any_lost += 1
                ax.plot(lost, [1.0 - 0.04 * any_lost] * len(lost), ls="none", marker="x", ms=7, mew=1.5, color=colour, transform=top,
                        clip_on=False)
        if points:
            plotted = [s.value("rmse_analysis") for p in points for s in p.settings if not s.lost]
            _observation_error(ax, points[0].settings[0], max([v for v in plotted if np.isfinite(v)], default=np.inf))
        if any_lost:
            low, high = ax.get_ylim()
            ax.set_ylim(low, high + (high - low) * (0.06 + 0.05 * any_lost))  # room for the rows of marks
            # The marks sit in a band of their own above the values: no value ticks there, a rule below.
            ticks = [t for t in matplotlib.ticker.MaxNLocator(6).tick_values(low, high) if low <= t <= high]
            ax.set_yticks(ticks, [f"{t:g}" for t in ticks])
            ax.axhline(high, color=NEUTRAL, lw=0.6)
            ax.text(1.01, (1.0 + high_fraction(ax, high)) / 2, "lost", transform=ax.transAxes, fontsize=7.5,
                    va="center", ha="left", color="#444444")
        values = sorted({s.config[key] for p in points for s in p.settings})
        if len(values) <= 10:
            ax.set_xticks(values, [value_text(v) for v in values])
        ax.set_xlabel(f"{setting_word(key)} (as configured)")
        ax.set_ylabel(f"time-mean analysis RMSE ({STATE_UNITS})")
        note = "; x above the rule: lost, a replicate failed" if any_lost else ""
        ax.set_title(f"Analysis error against {setting_word(key)}\n(95% intervals; star: best{note})", fontsize=9)
        ax.legend(fontsize=8)
        return save_png(fig, path)


def high_fraction(ax, value: float) -> float:
    """Where ``value`` sits on the y axis, as a fraction of its height."""
    low, high = ax.get_ylim()
    return (value - low) / (high - low)


def heat_map(settings: list, x_key: str, y_key: str, path: str, title: str, best=None) -> str:
    """Pooled time-mean analysis RMSE over two settings; lost cells hatched, the best outlined."""
    xs = sorted({s.config[x_key] for s in settings})
    ys = sorted({s.config[y_key] for s in settings})
    grid = np.full((len(ys), len(xs)), np.nan)
    lost = np.zeros_like(grid, dtype=bool)
    for s in settings:
        i, j = ys.index(s.config[y_key]), xs.index(s.config[x_key])
        grid[i, j] = s.value("rmse_analysis")
        lost[i, j] = s.lost > 0
    with matplotlib.rc_context({**STYLE, "axes.grid": False}):
        fig, ax = _axes(figsize=(1.6 + 0.9 * len(xs), 1.4 + 0.55 * len(ys)))
        shown = np.where(lost, np.nan, grid)
        finite = shown[np.isfinite(shown)]
        vmin, vmax = (finite.min(), finite.max()) if finite.size else (0.0, 1.0)
        image = ax.imshow(shown, origin="lower", cmap="cividis_r", vmin=vmin, vmax=vmax, aspect="auto")
        for i in range(len(ys)):
            for j in range(len(xs)):
                if lost[i, j]:
                    ax.add_patch(matplotlib.patches.Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False, hatch="xxx",
                                                              color="#9a9a9a"))
                    ax.text(j, i, "lost", ha="center", va="center", fontsize=8, color="#444444")
                elif np.isfinite(grid[i, j]):
                    dark = (grid[i, j] - vmin) > 0.5 * (vmax - vmin)
                    ax.text(j, i, f"{grid[i, j]:.3f}", ha="center", va="center", fontsize=8,
                            color="white" if dark else "black")
        if best is not None:
            j, i = xs.index(best.config[x_key]), ys.index(best.config[y_key])
            ax.add_patch(matplotlib.patches.Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False, lw=2.0,
                                                      color=OKABE_ITO["vermillion"]))
        ax.set_xticks(range(len(xs)), [value_text(v) for v in xs])
        ax.set_yticks(range(len(ys)), [value_text(v) for v in ys])
        ax.set_xlabel(setting_word(x_key))
        ax.set_ylabel(setting_word(y_key))
        ax.set_title(title + ("\n(outlined: the best kept setting)" if best is not None else ""), fontsize=9)
        bar = fig.colorbar(image, ax=ax)
        bar.set_label(f"time-mean analysis RMSE ({STATE_UNITS})")
        return save_png(fig, path)


def tuned_curve(points: list, path: str) -> str:
    """The best time-mean analysis RMSE against ensemble size, one line per filter, 95% error bars."""
    decided = [p for p in points if p.best is not None and p.members]
    with matplotlib.rc_context(STYLE):
        fig, ax = _axes(figsize=(5.4, 3.8))
        lines = {}
        for p in decided:
            lines.setdefault(p.name.split(",")[0] + "".join(f", {setting_word(k)} {v}" for k, v in p.static), []).append(p)
        palette = colours(list(lines))
        for label, mine in lines.items():
            mine.sort(key=lambda p: p.members)
            x = np.array([p.members for p in mine], float)
            est = np.array([p.best.estimate("rmse_analysis") for p in mine])
            ax.errorbar(x, est[:, 0], yerr=np.nan_to_num(np.abs(np.vstack([est[:, 0] - est[:, 1], est[:, 2] - est[:, 0]]))),
                        color=palette[label], marker="o", ms=4, lw=1.3, capsize=3, label=label)
        if decided:
            _observation_error(ax, decided[0].best, max(p.best.estimate("rmse_analysis")[2] for p in decided))
        sizes = sorted({p.members for p in decided})
        ax.set_xscale("log", base=2)
        ax.set_xticks(sizes, [str(m) for m in sizes])
        ax.xaxis.set_minor_locator(matplotlib.ticker.NullLocator())
        ax.set_xlabel("ensemble size (members)")
        ax.set_ylabel(f"best time-mean analysis RMSE ({STATE_UNITS})")
        ax.set_title("Best-tuned error against ensemble size (95% intervals)")
        ax.legend(fontsize=8)
        return save_png(fig, path)


def rank_histograms(points: list, path: str, name: str = "rank_truth_forecast") -> str:
    """Relative frequency of the truth's rank among the forecast members at each best setting."""
    chosen = [p for p in points if p.best is not None and p.best.totals(name) is not None][:MAX_PANELS]
    count = max(1, len(chosen))
    with matplotlib.rc_context(STYLE):
        fig, axes = _axes(1, count, squeeze=False, figsize=(2.7 * count, 2.9), layout="constrained")
        for ax, point in zip(axes[0], chosen):
            counts = np.asarray(point.best.totals(name), float)
            frequency = counts / counts.sum()
            ranks = np.arange(counts.size)
            ax.bar(ranks, frequency, width=0.85, color=OKABE_ITO["blue"])
            ax.axhline(1.0 / counts.size, color=OKABE_ITO["vermillion"], lw=1.0, ls="--")
            ax.xaxis.set_major_locator(matplotlib.ticker.MaxNLocator(nbins=6, integer=True))
            ax.set_xlim(-0.6, counts.size - 0.4)
            ax.set_title(point.name, fontsize=9)
        fig.supxlabel("rank of the truth among the forecast members (0: below every member)", fontsize=9)
        axes[0][0].set_ylabel("relative frequency")
        fig.suptitle("Rank histograms at the best settings, after burn-in (dashed: flat)", fontsize=10,
                     fontweight="bold")
        return save_png(fig, path)


def spread_against_error(points: list, path: str) -> str:
    """Time-mean analysis spread against RMSE for every setting that kept all replicates, each point
    labelled by its swept values; one colour per static point."""
    with matplotlib.rc_context(STYLE):
        fig, ax = _axes(figsize=(5.6, 5.0))
        palette = colours([p.name for p in points])
        values = []
        lost = 0
        for point in points:
            kept = [s for s in point.settings if not s.lost and s.has("spread_analysis")]
            lost += len(point.settings) - len(kept)
            if not kept:
                continue
            x = [s.value("rmse_analysis") for s in kept]
            y = [s.value("spread_analysis") for s in kept]
            ax.scatter(x, y, s=18, color=palette[point.name], label=point.name, alpha=0.9, zorder=3)
            for s, xi, yi in zip(kept, x, y):
                if point.tuned_keys:
                    text = ", ".join(value_text(s.config.get(k)) for k in point.tuned_keys)
                    ax.annotate(text, (xi, yi), xytext=(3, 3), textcoords="offset points", fontsize=6.5,
                                color=palette[point.name])
            values += x + y
        finite = [v for v in values if np.isfinite(v)]
        if finite:
            # Zoomed on the points (not from 0), so that their labels can be read; same scale on both axes.
            low, top = min(finite) * 0.92, max(finite) * 1.08
            ax.plot([low, top], [low, top], color=NEUTRAL, lw=0.8, ls=":", label="spread = RMSE")
            ax.set_xlim(low, top)
            ax.set_ylim(low, top)
            ax.set_aspect("equal")
        keys = list(dict.fromkeys(k for p in points for k in p.tuned_keys))
        labels = f": {', '.join(setting_word(k) for k in keys)}" if keys else ""
        dropped = f"; {lost} lost setting{'s' if lost != 1 else ''} not shown" if lost else ""
        ax.set_xlabel(f"time-mean analysis RMSE ({STATE_UNITS})")
        ax.set_ylabel(f"time-mean analysis spread ({STATE_UNITS})")
        ax.set_title(f"Spread against error\n(points labelled by their settings{labels}{dropped})", fontsize=9)
        if finite:
            ax.legend(fontsize=8, loc="upper left")
        else:
            ax.text(0.5, 0.5, "every setting lost a replicate", ha="center", va="center", transform=ax.transAxes)
        return save_png(fig, path)


def smoothed_lags(setting) -> list:
    """The lags 1, 2, ... whose smoothed RMSE every run of ``setting`` holds."""
    lags = []
    while setting.has(f"rmse_smoothed_lag{len(lags) + 1}"):
        lags.append(len(lags) + 1)
    return lags


def error_by_lag(points: list, path: str) -> str:
    """Time-mean RMSE of the analysis (lag 0) and of the smoothed ensembles at lags 1 .. K, with 95%
    intervals, at the best setting of every point that smoothed: how much each later observation
    improves an earlier estimate."""
    chosen = [p for p in points if p.best is not None and smoothed_lags(p.best)]
    with matplotlib.rc_context(STYLE):
        fig, ax = _axes(figsize=(7.0, 3.8), layout="constrained")
        palette = colours([p.name for p in chosen])
        for point in chosen:
            best = point.best
            names = ["rmse_analysis"] + [f"rmse_smoothed_lag{lag}" for lag in smoothed_lags(best)]
            estimates = np.array([best.estimate(name) for name in names])  # (K + 1, 3): mean, low, high
            lags = np.arange(len(names))
            tuned = f" ({describe(best.config, point.tuned_keys)})" if point.tuned_keys else ""
            ax.errorbar(lags, estimates[:, 0], yerr=[estimates[:, 0] - estimates[:, 1], estimates[:, 2] - estimates[:, 0]],
                        color=palette[point.name], marker="o", ms=4, lw=1.4, capsize=3, label=point.name + tuned)
        ax.xaxis.set_major_locator(matplotlib.ticker.MaxNLocator(integer=True))
        ax.set_xlabel("lag (analysis cycles after the estimated time; 0: the filter's analysis)")
        ax.set_ylabel(f"time-mean RMSE ({STATE_UNITS})")
        ax.set_title("Filter and smoother: error by lag at the best settings (95% intervals)")
        ax.legend(fontsize=7.5, loc="upper left", bbox_to_anchor=(1.02, 1.0))
        return save_png(fig, path)


def cycle_cost(setting) -> float:
    """Forecast-model integrations per cycle in member-intervals: the iterative methods' own count,
    else one forecast of every member."""
    if setting.has("model_integrations"):
        return setting.value("model_integrations")
    return float(setting.members or 1)


def error_against_cost(points: list, path: str) -> str:
    """Best time-mean analysis RMSE (95% interval) of every point against its forecast cost per cycle,
    in member-intervals (one member integrated over one analysis interval): what iterating buys."""
    chosen = [p for p in points if p.best is not None]
    with matplotlib.rc_context(STYLE):
        fig, ax = _axes(figsize=(7.0, 3.8), layout="constrained")
        palette = colours([p.name for p in chosen])
        costs = []
        for point in chosen:
            mean, low, high = point.best.estimate("rmse_analysis")
            cost = cycle_cost(point.best)
            costs.append(cost)
            ax.errorbar([cost], [mean], yerr=[[mean - low], [high - mean]], color=palette[point.name], marker="o",
                        ms=5, capsize=3, lw=1.2, label=point.name, ls="none")
        if costs:
            set_log_axis(ax, np.array(costs), which="x")
        ax.set_xlabel("forecast cost per cycle (member-intervals, log scale)")
        ax.set_ylabel(f"time-mean analysis RMSE ({STATE_UNITS})")
        ax.set_title("Accuracy against cost at the best settings (95% intervals)")
        ax.legend(fontsize=7.5, loc="upper left", bbox_to_anchor=(1.02, 1.0))
        return save_png(fig, path)


def estimated_parameters(setting) -> list:
    """The names of the parameters a setting estimated (its ``estimate.parameters``), or []."""
    return list(setting.config.get("estimate.parameters") or [])


# Setting colours of the trajectories figure: black is the truth's line there.
TRAJECTORY_PALETTE = tuple(c for c in PALETTE if c != OKABE_ITO["black"])


def _trajectories(ax, setting, column: int, colour: str, label: str) -> np.ndarray:
    """One setting's estimates of one parameter on ``ax``: every replicate (thin), their mean (thick),
    the mean ± the mean spread (dotted). Returns the values drawn (for the axis range)."""
    means = setting.series("parameter_mean")[..., column]  # (replicates of every seed, cycles)
    spreads = setting.series("parameter_spread")[..., column]
    time = setting.rows[0].interval * np.arange(1, means.shape[1] + 1)
    for replicate in means:
        ax.plot(time, replicate, color=colour, lw=0.5, alpha=0.35)
    centre, width = means.mean(axis=0), spreads.mean(axis=0)
    # The band is drawn as its edges: filled bands of several settings would hide each other.
    for edge in (centre - width, centre + width):
        ax.plot(time, edge, color=colour, lw=0.8, ls=":")
    replicates, seeds = means.shape[0], len(setting.seeds)
    lost = f", lost {setting.lost}" if setting.lost else ""
    ax.plot(time, centre, color=colour, lw=1.6, label=f"{label} ({replicates} replicate{'s' if replicates > 1 else ''}, "
            f"{seeds} seed{'s' if seeds > 1 else ''}{lost})")
    return np.concatenate([means.ravel(), centre - width, centre + width])


def parameter_trajectories(settings: list, keys: list, path: str) -> str:
    """One panel per estimated parameter: the analysis-mean estimate of every replicate of every seed
    (thin) and of their mean (thick), with the mean parameter spread as a band around it, for every
    setting (colour) that estimated it; the truth's value dashed where the truth has the parameter.
    ``keys`` are the config keys besides filter and ensemble size that tell the settings apart in the
    legend. The axis range is that of the settings that lost no replicate (when there are any), so
    one that lost the truth does not flatten the others; the legend marks it."""
    estimating = [s for s in settings if estimated_parameters(s)]
    settings = estimating[: len(TRAJECTORY_PALETTE)]
    names = list(dict.fromkeys(n for s in settings for n in estimated_parameters(s)))
    with matplotlib.rc_context(STYLE):
        panels = min(len(names), MAX_PANELS)
        fig, axes = _axes(panels, 1, squeeze=False, figsize=(9.0, 2.2 + 2.6 * panels), sharex=True, layout="constrained")
        labels = [point_name(s.filter, s.members, describe(s.config, keys)) for s in settings]
        palette = dict(zip(labels, TRAJECTORY_PALETTE))
        for ax, name in zip(axes[:, 0], names):
            truth, kept, drawn = None, [], []
            for setting, label in zip(settings, labels):
                if name not in estimated_parameters(setting):
                    continue
                values = _trajectories(ax, setting, estimated_parameters(setting).index(name), palette[label], label)
                drawn.append(values)
                if not setting.lost:
                    kept.append(values)
                summary = setting.rows[0].summary
                if f"estimate_{name}_error" in summary:  # the truth has the parameter: mean - error is its value
                    truth = float(summary[f"estimate_{name}_mean"] - summary[f"estimate_{name}_error"])
            if truth is not None:
                ax.axhline(truth, color="black", lw=1.0, ls="--", label="the truth's value")
                ax.annotate(f"truth {truth:.4g}", (1.0, truth), xycoords=("axes fraction", "data"), fontsize=7.5,
                            ha="right", va="bottom")
            if kept and len(kept) < len(drawn):
                shown = np.concatenate(kept + ([np.array([truth])] if truth is not None else []))
                low, high = float(np.nanmin(shown)), float(np.nanmax(shown))
                margin = 0.08 * (high - low) if high > low else 0.5
                ax.set_ylim(low - margin, high + margin)
            burn_in = int(settings[0].config.get("burn_in", 0)) * settings[0].rows[0].interval
            ax.axvspan(0, burn_in, color="#f0f0f0", lw=0, zorder=0)
            ax.set_ylabel(setting_word(f"forecast_model.{name}"))
            ax.set_title(f"Estimated {name.replace('_', ' ')}", fontsize=9)
        legend = {}
        for ax in axes[:, 0]:
            for handle, text in zip(*ax.get_legend_handles_labels()):
                legend.setdefault(text, handle)
        fig.legend(list(legend.values()), list(legend), loc="outside lower center", ncols=1, fontsize=7.5)
        axes[-1, 0].set_xlabel(f"time ({TIME_UNITS}); shaded: burn-in")
        left_out = []
        if len(settings) < len(estimating):
            left_out.append(f"the first {len(settings)} of {len(estimating)} settings")
        if len(names) > MAX_PANELS:
            left_out.append(f"the first {MAX_PANELS} of {len(names)} parameters")
        more = f"; shown: {' and '.join(left_out)} (all in summary.csv)" if left_out else ""
        fig.suptitle("Parameter estimates over time: the analysis mean of the members' values\n(thick: mean of the "
                     f"replicates; thin: each replicate; dotted: that mean ± the mean parameter spread{more})",
                     fontsize=10, fontweight="bold")
        return save_png(fig, path)
