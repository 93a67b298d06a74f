"""The files of a learning study, each written through a temporary name.

fit (``learn.mode=fit``):
- ``learned.yaml``: the experiment with the learned values, a file the main
  command runs as it is (only when every step finished);
- ``learning.csv``: one row per gradient pass: the values, the objective, the
  gradient with respect to each value and its standard error, the windows
  used and left out as non-finite;
- ``learning_curve.png``: the objective and every value against the
  iteration;
- ``checks.csv``: the main command at the starting and the learned values
  (:mod:`.checks`).

windows (``learn.mode=windows``):
- ``window_gradients.csv`` and ``window_gradients.png``: per window length,
  the mean window gradient, its standard error and the windows' spread.
"""

import os

import matplotlib
import matplotlib.ticker
import numpy as np
from matplotlib.figure import Figure

from assimbench.io.atomic import write_text
from assimbench.io.experiment_file import experiment_file
from assimbench.report.figures import OKABE_ITO, STYLE, save_png, set_log_axis
from assimbench.report.tables import to_csv
from assimbench.report.words import setting_word, value_text

OBJECTIVE_WORDS = {"innovation": "innovation -log-likelihood per observation",
                   "truth": "analysis RMSE (state units)"}


def learned_file(config, learnables: tuple, values, objective: str) -> str:
    learned = {item.key: float(v) for item, v in zip(learnables, values)}
    head = (f"# Learned by assimbench-learn ({OBJECTIVE_WORDS[objective]}): "
            + ", ".join(f"{k}={value_text(v)}" for k, v in learned.items()) + ".\n"
            "# Run it with: assimbench --config-path <this folder> --config-name learned\n")
    return experiment_file(config, learned, head)


def history_rows(learnables: tuple, history) -> tuple:
    keys = [item.key for item in learnables]
    columns = (["iteration", "objective"] + keys + [f"gradient_{k}" for k in keys]
               + [f"gradient_{k}_error" for k in keys] + ["windows_used", "windows_nonfinite", "seconds"])
    rows = []
    for step in history.steps:
        row = {"iteration": step.iteration, "objective": step.objective, "windows_used": step.used,
               "windows_nonfinite": step.nonfinite, "seconds": round(step.seconds, 3)}
        for j, key in enumerate(keys):
            row[key], row[f"gradient_{key}"] = float(step.values[j]), float(step.gradient[j])
            row[f"gradient_{key}_error"] = float(step.gradient_error[j])
        rows.append(row)
    return columns, rows


def learning_curve(learnables: tuple, history, objective: str, path: str, reference: dict | None = None) -> str:
    """Left: the objective (top) and each learned value against the iteration; right: the gradient
    with respect to each value with its 95% interval (a value has settled where the interval holds
    0). ``reference``: key -> value drawn as a dashed line (e.g. the truth's own forcing)."""
    steps = history.steps
    iterations = np.array([s.iteration for s in steps])
    rows = 1 + len(learnables)
    with matplotlib.rc_context(STYLE):
        fig = Figure(figsize=(10.0, 2.1 * rows + 0.4), layout="constrained")
        axes = fig.subplots(rows, 2, squeeze=False, sharex=True)
        ax = axes[0, 0]
        ax.plot(iterations, [s.objective for s in steps], marker="o", ms=3, color=OKABE_ITO["blue"])
        ax.set_ylabel(OBJECTIVE_WORDS[objective].replace(" per observation", "\nper observation"))
        ax.set_title("objective")
        axes[0, 1].axis("off")
        for j, item in enumerate(learnables):
            ax = axes[1 + j, 0]
            ax.plot(iterations, [s.values[j] for s in steps], marker="o", ms=3, color=OKABE_ITO["vermillion"],
                    label="learned value")
            if reference and item.key in reference:
                ax.axhline(reference[item.key], color="black", ls="--", lw=1, label="reference")
                ax.legend(loc="best", fontsize="small")
            ax.set_ylabel(setting_word(item.key))
            if j == 0:
                ax.set_title("values")
            ax = axes[1 + j, 1]
            gradient = np.array([s.gradient[j] for s in steps])
            error = np.array([s.gradient_error[j] for s in steps])
            ax.fill_between(iterations, gradient - 1.96 * error, gradient + 1.96 * error, color=OKABE_ITO["sky blue"],
                            alpha=0.4, lw=0, label="95% interval")
            ax.plot(iterations, gradient, marker="o", ms=3, color=OKABE_ITO["blue"], label="mean over windows")
            ax.axhline(0.0, color="black", lw=0.8)
            ax.set_ylabel(f"d objective / d {setting_word(item.key)}")
            if j == 0:
                ax.set_title("gradient")
                ax.legend(loc="best", fontsize="small")
        for ax in axes[-1]:
            ax.set_xlabel("step (one gradient pass over every window)")
        if history.stopped:
            fig.suptitle(f"stopped: {history.stopped}")
    return save_png(fig, path)


def window_rows(learnables: tuple, measured: list) -> tuple:
    """(columns, rows) of the windows mode; ``measured``: per window length a dict with window, windows,
    seconds, objective, and per key (q,) arrays mean, error (standard error), spread (the windows' std)."""
    keys = [item.key for item in learnables]
    columns = ["window", "windows", "objective", "seconds"]
    for key in keys:
        columns += [f"gradient_{key}", f"gradient_{key}_error", f"gradient_{key}_spread"]
    rows = []
    for m in measured:
        row = {"window": m["window"], "windows": m["windows"], "objective": m["objective"],
               "seconds": round(m["seconds"], 3)}
        for j, key in enumerate(keys):
            row[f"gradient_{key}"], row[f"gradient_{key}_error"] = float(m["mean"][j]), float(m["error"][j])
            row[f"gradient_{key}_spread"] = float(m["spread"][j])
        rows.append(row)
    return columns, rows


def window_figure(learnables: tuple, measured: list, objective: str, path: str) -> str:
    """Per learned quantity (columns): the spread of one window's gradient over the windows (top, log)
    and the mean gradient with its 95% interval (bottom), against the window length."""
    lengths = np.array([m["window"] for m in measured], dtype=float)
    with matplotlib.rc_context(STYLE):
        fig = Figure(figsize=(3.8 * len(learnables) + 1.0, 5.6), layout="constrained")
        axes = fig.subplots(2, len(learnables), squeeze=False, sharex=True)
        for j, item in enumerate(learnables):
            spread = np.array([m["spread"][j] for m in measured])
            mean = np.array([m["mean"][j] for m in measured])
            error = np.array([m["error"][j] for m in measured])
            top, bottom = axes[0, j], axes[1, j]
            top.plot(lengths, spread, marker="o", color=OKABE_ITO["vermillion"])
            set_log_axis(top, spread)
            top.set_title(setting_word(item.key) + (" (per unit)" if len(learnables) > 1 else ""))
            if j == 0:
                top.set_ylabel("spread of one window's\ngradient (std over windows)")
            # Windows whose gradient has exploded would flatten the others: they are left out of this
            # panel (the top one shows their spread), and the panel says so.
            calm = np.isfinite(spread) & (spread <= 10.0 * np.nanmin(spread))
            shown = calm if calm.sum() >= 2 else np.ones_like(calm)
            bottom.errorbar(lengths[shown], mean[shown], yerr=1.96 * np.nan_to_num(error[shown]), marker="o", capsize=3,
                            color=OKABE_ITO["blue"])
            bottom.axhline(0.0, color="black", lw=0.8)
            if not calm.all() and calm.sum() >= 2:
                low = np.min((mean - 1.96 * error)[calm])
                high = np.max((mean + 1.96 * error)[calm])
                margin = 0.15 * (high - low) if high > low else 1.0
                bottom.set_ylim(min(low, 0.0) - margin, max(high, 0.0) + margin)
                first = int(lengths[~calm].min())
                bottom.text(0.02, 0.96, f"windows of {first} cycles and more: left out\n(spread over 10 x the "
                            "shortest window's)", transform=bottom.transAxes, va="top", fontsize="small")
            if j == 0:
                bottom.set_ylabel("mean gradient\n(95% interval)")
            bottom.set_xlabel("window (cycles)")
            set_log_axis(bottom, lengths, which="x")
            # Decades only: the 1-2-5 steps crowd a narrow panel over three decades.
            bottom.xaxis.set_major_locator(matplotlib.ticker.LogLocator(base=10.0, numticks=8))
            bottom.xaxis.set_major_formatter(matplotlib.ticker.FuncFormatter(lambda t, _: f"{t:,.0f}"))
        fig.suptitle(f"gradient of the {OBJECTIVE_WORDS[objective]}\nper unit of each setting, against the window length")
    return save_png(fig, path)


def write_fit(folder: str, config, learnables: tuple, history, objective: str, finished: bool,
              checks: list | None = None, reference: dict | None = None) -> list:
    """The fit's files (module text); ``learned.yaml`` only when ``finished``; ``checks.csv`` with the
    check runs when given (:mod:`.checks`)."""
    columns, rows = history_rows(learnables, history)
    written = [write_text(os.path.join(folder, "learning.csv"), to_csv(columns, rows)),
               learning_curve(learnables, history, objective, os.path.join(folder, "learning_curve.png"), reference)]
    if checks:
        columns = list(checks[0])
        written.append(write_text(os.path.join(folder, "checks.csv"), to_csv(columns, checks)))
    if finished:
        values = history.steps[-1].values
        written.insert(0, write_text(os.path.join(folder, "learned.yaml"),
                                     learned_file(config, learnables, values, objective)))
    return written


def write_windows(folder: str, learnables: tuple, measured: list, objective: str) -> list:
    columns, rows = window_rows(learnables, measured)
    return [write_text(os.path.join(folder, "window_gradients.csv"), to_csv(columns, rows)),
            window_figure(learnables, measured, objective, os.path.join(folder, "window_gradients.png"))]
