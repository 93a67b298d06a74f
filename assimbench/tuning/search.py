"""Adaptive refinement of traced settings on paired lanes: the search of the tuner.

One pass evaluates a grid of candidate settings side by side (lanes of one
compiled program), every candidate on the same truths and observations, so
differences between candidates are paired. Pass 1 is a grid of ``points``
values per axis over the whole bounds (every combination for several axes:
a 2-D grid for two settings). Each later pass lays a grid of the same size
over one grid step either side of the estimated minimiser, so the step
shrinks by (points - 1) / 2 per pass (3x for 7 points) and the compiled
program is reused (the same number of lanes). An axis may be logarithmic:
its grid is even in log(value).

Why a fitted minimiser, not the lowest candidate: a chaotic filter's error
at one setting is a noisy function of the setting (two inflations 1e-5 apart
follow different trajectories after a few hundred cycles), and on short runs
the batch-means intervals of differences understate that roughness. So the
minimiser is estimated by a local quadratic response surface (Box & Wilson
1951, J. R. Stat. Soc. B 13; from memory): a least-squares fit of
f(u) = a + g.u + u'Hu/2 to the pass's kept candidates within two grid steps of
its lowest one, u* = -H^-1 g when H is positive definite (clipped to the
fitted region), else the lowest candidate (pass 1 fits near its lowest
candidate, where the landscape may be far from quadratic; later passes fit
every kept candidate inside their window, from any pass). The fit's residuals measure the
roughness the intervals miss (never taken below the candidates' own
sampling noise); the delta method turns them into a standard error of u*,
and u* +- t(0.975, n - p) se is the settings' 95% range. The estimate
reported is the most precise of the passes' fits.

A lost candidate (diverged, or a non-finite objective) counts as infinitely
bad: it is never the minimiser and never fitted, and the minimiser is never
moved past the kept candidates.

The search stops at the first of:
- ``resolved``: the minimiser's 95% range is wider than the grid step on every
  axis: a finer grid cannot place it better;
- ``tolerance``: the grid step, or the minimiser's uncertainty, is below
  ``tolerance`` x the bounds' width on every axis;
- ``passes``: the pass limit;
- ``budget``: the next pass would spend more run-cycles (cycles x lanes x
  replicates) than remain, or the wall-time budget would be passed;
- ``lost``: every candidate so far was lost.
"""

import itertools
import math
import time
from dataclasses import dataclass, field

import numpy as np
from scipy.special import stdtrit

from assimbench.twin.summaries import TimeMeans

SCALES = ("linear", "log")


@dataclass(frozen=True)
class Axis:
    """One setting to tune: its key, bounds and scale."""

    key: str
    low: float
    high: float
    scale: str = "linear"

    def value(self, unit: np.ndarray) -> np.ndarray:
        """Setting values at positions ``unit`` in [0, 1] of the bounds (even in log for a log axis)."""
        unit = np.asarray(unit, float)
        if self.scale == "log":
            return np.exp(np.log(self.low) + unit * (np.log(self.high) - np.log(self.low)))
        return self.low + unit * (self.high - self.low)


@dataclass
class Evaluation:
    """What one pass returns: the per-cycle objective series (lanes, replicates, cycles), the burn-in,
    which lanes were lost (lanes,), and the run-cycles spent."""

    series: np.ndarray
    burn_in: int
    lost: np.ndarray
    cost: int


@dataclass
class Candidate:
    """One evaluated setting: its values (one per axis), grid position (unit), time mean with its
    95% interval (inf when lost), its per-cycle series and the pass that evaluated it."""

    values: tuple
    unit: tuple
    mean: float
    low: float
    high: float
    lost: bool
    series: np.ndarray = field(repr=False)
    pass_number: int = 1


@dataclass
class Outcome:
    """The result of a search: every candidate, the estimated minimiser (values per axis; None when
    every candidate was lost), its uncertainty per axis (key -> (low, high)), what was spent, and
    why it stopped."""

    axes: tuple
    candidates: list
    minimiser: tuple | None
    ranges: dict
    spent: int
    seconds: float
    passes: int
    stopped: str
    burn_in: int = 0


def time_mean(series: np.ndarray, burn_in: int) -> tuple:
    """(mean, low, high) of the time mean after burn-in over replicates of (replicates, cycles)."""
    means = TimeMeans(series.shape[0], series.shape[1], burn_in)
    means.add("x", series, 1)
    out = means.summarise("x")
    return out["mean"], out["low"], out["high"]


def grid(axes: tuple, centre: tuple | None, step: float, points: int) -> tuple:
    """(unit positions (lanes, k), unit step): ``points`` per axis over [0, 1] (no centre), or over
    one ``step`` either side of ``centre``, shifted to stay inside [0, 1]."""
    per_axis = []
    for j, _ in enumerate(axes):
        if centre is None:
            low, high = 0.0, 1.0
        else:
            low, high = centre[j] - step, centre[j] + step
            if low < 0:
                low, high = 0.0, high - low
            if high > 1:
                low, high = max(0.0, low - (high - 1)), 1.0
        per_axis.append(np.linspace(low, high, points))
    units = np.array(list(itertools.product(*per_axis)))
    return units, float(per_axis[0][1] - per_axis[0][0])


def _features(units: np.ndarray) -> np.ndarray:
    """Columns 1, u_i, u_i u_j (i <= j) of a full quadratic in k variables."""
    k = units.shape[1]
    columns = [np.ones(len(units))] + [units[:, i] for i in range(k)]
    columns += [units[:, i] * units[:, j] for i in range(k) for j in range(i, k)]
    return np.column_stack(columns)


def _stationary_point(beta: np.ndarray, k: int):
    """(u*, positive definite) of the quadratic with coefficients ``beta``."""
    g = beta[1 : 1 + k]
    hessian = np.zeros((k, k))
    at = 1 + k
    for i in range(k):
        for j in range(i, k):
            hessian[i, j] = hessian[j, i] = (2.0 if i == j else 1.0) * beta[at]
            at += 1
    if np.any(np.linalg.eigvalsh(hessian) <= 0):
        return None, False
    return -np.linalg.solve(hessian, g), True


def fit_minimiser(units: np.ndarray, means: np.ndarray, step: float, noise: np.ndarray | None = None) -> tuple:
    """(u*, 95% half-width per axis or NaN) from a local quadratic fit around the lowest of ``means``
    (within two grid steps of it, or all of them when too few are that close); the lowest point and
    NaN when the fit has no minimum there or too few points.

    The fit's noise variance is the residual variance, but never below the mean squared standard
    error of the fitted means (``noise``, when given; :func:`paired_noise`): with a handful of
    points the residuals alone can be small by chance. The half-width is Student t(0.975, n - p) x the delta-method error."""
    lowest = int(np.argmin(means))
    near = np.all(np.abs(units - units[lowest]) <= 2 * step * (1 + 1e-9), axis=1)  # all when step is inf
    k = units.shape[1]
    unknown = np.full(k, np.nan)
    if near.sum() <= _features(units[:1]).shape[1]:
        near = np.ones(len(units), dtype=bool)  # too few close by (lost neighbours): fit every kept one
    x, y = units[near], means[near]
    design = _features(x)
    if len(y) <= design.shape[1]:
        return units[lowest], unknown
    dof = len(y) - design.shape[1]
    beta, *_ = np.linalg.lstsq(design, y, rcond=None)
    centre, convex = _stationary_point(beta, k)
    if not convex:
        return units[lowest], unknown
    residual = y - design @ beta
    variance = float(residual @ residual) / dof
    if noise is not None:
        variance = max(variance, float(np.mean(np.asarray(noise, float)[near] ** 2)))
    covariance = variance * np.linalg.pinv(design.T @ design)
    # Delta method: the Jacobian of u*(beta) by central differences.
    jacobian = np.zeros((k, len(beta)))
    for p in range(len(beta)):
        h = 1e-6 * max(1.0, abs(beta[p]))
        up, down = beta.copy(), beta.copy()
        up[p] += h
        down[p] -= h
        plus, ok_plus = _stationary_point(up, k)
        minus, ok_minus = _stationary_point(down, k)
        if not (ok_plus and ok_minus):
            return np.clip(centre, x.min(axis=0), x.max(axis=0)), unknown
        jacobian[:, p] = (plus - minus) / (2 * h)
    se = np.sqrt(np.maximum(np.diag(jacobian @ covariance @ jacobian.T), 0.0))
    return np.clip(centre, x.min(axis=0), x.max(axis=0)), stdtrit(dof, 0.975) * se


def paired_noise(kept: list, burn_in: int) -> np.ndarray:
    """Per-candidate noise for the fit's floor: the standard error one candidate's time mean has in a
    paired comparison, sqrt(mean over candidates of SE(c - lowest)^2 / 2) (a difference of two
    equally noisy means has twice the variance of one); the share every candidate has in common
    (the truth's weather) cancels, as it does between the candidates."""
    lowest = min(kept, key=lambda c: c.mean)
    squares = []
    for c in kept:
        if c is not lowest:
            _, low, high = time_mean(c.series - lowest.series, burn_in)
            if np.isfinite(low):
                squares.append(((high - low) / 2 / 1.96) ** 2)
    return np.full(len(kept), np.sqrt(np.mean(squares) / 2) if squares else 0.0)


def search(axes: tuple, evaluate, points: int = 7, passes: int = 8, tolerance: float = 0.005,
           budget_cycles: int | None = None, budget_seconds: float | None = None, pass_cost: int = 0,
           report=None) -> Outcome:
    """Refine ``axes`` by passes of ``evaluate(values (lanes, k)) -> Evaluation``; see the module text.

    ``pass_cost``: the run-cycles of one pass, for the budget (checked before each pass);
    ``report(outcome_so_far, this pass's candidates)`` is called after every pass (progress lines)."""
    started = time.perf_counter()
    candidates, spent, burn_in = [], 0, 0
    centre, step, stopped, number = None, 1.0, "passes", 0
    minimiser, half = None, None
    for number in range(1, passes + 1):
        if budget_cycles is not None and spent + pass_cost > budget_cycles:
            stopped, number = "budget", number - 1
            break
        elapsed = time.perf_counter() - started
        if budget_seconds is not None and number > 1 and elapsed * number / (number - 1) > budget_seconds:
            stopped, number = "budget", number - 1  # the next pass would end past the wall-time budget
            break
        units, step = grid(axes, centre, step, points)
        values = np.column_stack([axis.value(units[:, j]) for j, axis in enumerate(axes)])
        evaluation = evaluate(values)
        spent += evaluation.cost
        burn_in = evaluation.burn_in
        this_pass = []
        for lane in range(values.shape[0]):
            series = np.asarray(evaluation.series[lane], float)
            lost = bool(evaluation.lost[lane]) or not np.all(np.isfinite(series[:, burn_in:]))
            mean, low, high = (math.inf, math.inf, math.inf) if lost else time_mean(series, burn_in)
            this_pass.append(Candidate(tuple(float(v) for v in values[lane]), tuple(units[lane]), mean, low, high,
                                       lost, series, number))
        candidates += this_pass
        kept = [c for c in this_pass if not c.lost]
        if kept:
            # Pass 1 spans the bounds, where the landscape need not be quadratic: fit near its lowest
            # point. A later pass's window is already local: fit every kept candidate inside it, from
            # any pass (they share the truths).
            low, high = units.min(axis=0) - 1e-12, units.max(axis=0) + 1e-12
            inside = kept if number == 1 else [c for c in candidates if not c.lost and
                                                np.all((np.array(c.unit) >= low) & (np.array(c.unit) <= high))]
            centre_unit, fitted = fit_minimiser(np.array([c.unit for c in inside]), np.array([c.mean for c in inside]),
                                                step if number == 1 else np.inf, paired_noise(inside, burn_in))
            centre = tuple(float(u) for u in centre_unit)
            # The estimate kept is the most precise so far: a window much narrower than the noise can
            # resolve gives a flat, poorly placed fit, so a later fit replaces an earlier one only when
            # it is at least as precise.
            if half is None or not np.all(np.isfinite(half)) or np.all(np.nan_to_num(fitted, nan=np.inf) <= half):
                minimiser = tuple(float(axis.value(centre[j])) for j, axis in enumerate(axes))
                half = fitted
        if report is not None:
            report(_outcome(axes, candidates, minimiser, half, spent, started, number, "", burn_in), this_pass)
        if minimiser is None:
            stopped = "lost"
            break
        if not kept:
            continue  # this pass lost everything: zoom on the last minimiser again
        if np.all(fitted > step / 2):
            stopped = "resolved"  # the minimiser's 95% range spans more than a grid step
            break
        if step < tolerance or np.all(fitted < tolerance):
            stopped = "tolerance"
            break
    return _outcome(axes, candidates, minimiser, half, spent, started, number, stopped, burn_in)


def _outcome(axes, candidates, minimiser, half, spent, started, number, stopped, burn_in) -> Outcome:
    ranges = {}
    if minimiser is not None:
        for j, axis in enumerate(axes):
            if half is None or not np.isfinite(half[j]):
                ranges[axis.key] = (float("nan"), float("nan"))
                continue
            centre = float(np.interp(minimiser[j], [axis.low, axis.high], [0, 1])) if axis.scale == "linear" else (
                float((np.log(minimiser[j]) - np.log(axis.low)) / (np.log(axis.high) - np.log(axis.low))))
            width = float(half[j])
            ranges[axis.key] = (float(axis.value(max(0.0, centre - width))), float(axis.value(min(1.0, centre + width))))
    return Outcome(tuple(axes), candidates, minimiser, ranges, spent, time.perf_counter() - started, number, stopped,
                   burn_in)
