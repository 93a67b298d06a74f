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
at one setting is a rough function of the setting (two inflations 1e-5
apart follow different trajectories after a few hundred cycles), and on
short runs the batch-means intervals of paired differences understate that
roughness (measured on the demo ring, 1,500 cycles: inflations 1.01605 and
1.01667 differed by 0.013 in RMSE with a paired interval of +-0.005). So the
minimiser is estimated from a local quadratic response surface (Box & Wilson
1951, J. R. Stat. Soc. B 13; from memory): a least-squares fit of a full
quadratic to the kept candidates, minimised over the fitted region, so a
minimum on the region's edge (the error falling towards the inflation where
the filter is lost) is found too. The fit's residuals measure the roughness
the intervals miss (never taken below the candidates' own paired sampling
noise); a parametric bootstrap of the fit gives the minimiser's 95% range.
Pass 1 fits near its lowest candidate (over the whole bounds the landscape
need not be quadratic); every later pass refits every kept candidate of
every pass inside pass 2's window, one coarse step either side of pass 1's
estimate: a scale at which the curvature shows above the roughness, with
more points near the minimum after each pass. When the range reaches the
edge of that region (not the end of the bounds, nor within the tolerance of
a lost candidate), the stop reason says so: the minimiser's place is then
less certain than the range.

A lost candidate (diverged, or a non-finite objective) counts as infinitely
bad: it is never the minimiser and never fitted, and the minimiser never
leaves the region of kept candidates.

The search stops at the first of:
- ``resolved``: the 95% range spans two grid steps or more on every axis: the
  next window would hold nothing the noise lets us tell apart;
- ``tolerance``: the grid step, or the range, is below ``tolerance`` x the
  bounds' width on every axis;
(a range that reaches the fitted region's edge with unexplored settings
beyond it stops neither: the search goes on towards that edge)
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
BOOTSTRAP = 400


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

    def unit(self, value) -> np.ndarray:
        """The inverse of :meth:`value`: positions in [0, 1] of setting values."""
        value = np.asarray(value, float)
        if self.scale == "log":
            return (np.log(value) - np.log(self.low)) / (np.log(self.high) - np.log(self.low))
        return (value - self.low) / (self.high - self.low)


@dataclass
class Evaluation:
    """What one pass returns: the per-cycle objective series (lanes, replicates, cycles), the burn-in,
    which lanes were lost (lanes,), the run-cycles spent, and (when known) how many replicates each
    lane lost (lanes,)."""

    series: np.ndarray
    burn_in: int
    lost: np.ndarray
    cost: int
    lost_count: np.ndarray | None = None


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
    every candidate was lost), its uncertainty per axis (key -> (low, high)), what was spent, why it
    stopped, and the last pass's grid step (unit positions)."""

    axes: tuple
    candidates: list
    minimiser: tuple | None
    ranges: dict
    spent: int
    seconds: float
    passes: int
    stopped: str
    step: float = 1.0

    def units(self, values) -> np.ndarray:
        """(k,) unit positions of setting values (one per axis)."""
        return np.array([float(axis.unit(v)) for axis, v in zip(self.axes, values)])

    def values(self, units: np.ndarray) -> tuple:
        """Setting values (one per axis) at unit positions (k,)."""
        return tuple(float(axis.value(u)) for axis, u in zip(self.axes, units))


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


def _dense(low: np.ndarray, high: np.ndarray, per_axis: int) -> np.ndarray:
    """A dense grid over the box [low, high] (per_axis points per axis)."""
    return np.array(list(itertools.product(*(np.linspace(lo, hi, per_axis) for lo, hi in zip(low, high)))))


def fit_minimiser(units: np.ndarray, means: np.ndarray, step: float, noise: np.ndarray | None = None) -> tuple:
    """(u*, low, high): the minimiser of a local quadratic fit around the lowest of ``means`` (within
    two grid steps of it, or all of them when too few are that close) over the fitted region, and
    the 95% range of that minimiser (low, high per axis, unit positions) from a parametric bootstrap
    of the fit: the fitted values plus noise of the fit's sigma, refitted and minimised over the
    region BOOTSTRAP times. With too few points for a fit: the lowest point, and NaN bounds.

    sigma^2 is the residual variance, but never below the mean squared standard error of the fitted
    means (``noise``, when given; :func:`paired_noise`): with a handful of points the residuals
    alone can be small by chance. A fit without an interior minimum (the error falls towards the
    edge where the filter is lost) has its minimum on the region's edge: a boundary minimum, whose
    range the bootstrap gives as well."""
    lowest = int(np.argmin(means))
    near = np.all(np.abs(units - units[lowest]) <= 2 * step * (1 + 1e-9), axis=1)  # all when step is inf
    k = units.shape[1]
    unknown = np.full(k, np.nan)
    if near.sum() <= _features(units[:1]).shape[1]:
        near = np.ones(len(units), dtype=bool)  # too few close by (lost neighbours): fit every kept one
    x, y = units[near], means[near]
    design = _features(x)
    if len(y) <= design.shape[1]:
        return units[lowest], unknown, unknown
    dof = len(y) - design.shape[1]
    beta, *_ = np.linalg.lstsq(design, y, rcond=None)
    residual = y - design @ beta
    variance = float(residual @ residual) / dof
    if noise is not None:
        variance = max(variance, float(np.mean(np.asarray(noise, float)[near] ** 2)))
    per_axis = 401 if k == 1 else 61 if k == 2 else 15
    region = _dense(x.min(axis=0), x.max(axis=0), per_axis)
    basis = _features(region)
    best = int(np.argmin(basis @ beta))
    # Parametric bootstrap of the fit (fixed draws: the same data give the same range). The noise is
    # widened by t(0.975, n - p) / z(0.975) for the few degrees of freedom of its estimate.
    sigma = np.sqrt(variance) * stdtrit(dof, 0.975) / stdtrit(np.inf, 0.975)
    draws = (design @ beta)[None, :] + sigma * np.random.default_rng(0).standard_normal((BOOTSTRAP, len(y)))
    betas = draws @ np.linalg.pinv(design).T  # (draws, p) least-squares fits
    located = region[np.argmin(betas @ basis.T, axis=1)]  # (draws, k) minimiser of each
    low, high = np.percentile(located, [2.5, 97.5], axis=0)
    # The minimiser is placed on a dense grid: the range is never narrower than its spacing.
    spacing = (x.max(axis=0) - x.min(axis=0)) / (per_axis - 1)
    low = np.maximum(np.minimum(low, region[best]) - spacing, x.min(axis=0))
    high = np.minimum(np.maximum(high, region[best]) + spacing, x.max(axis=0))
    return region[best], low, high


def open_sides(low: np.ndarray, high: np.ndarray, inside: list, candidates: list, tolerance: float) -> np.ndarray:
    """(k,) True where the range [low, high] is cut by the fitted region: it reaches the region's
    edge and that edge is not the end of the bounds, nor within ``tolerance`` of a lost candidate
    beyond it (the edge of the lost region, found to the tolerance). Such a range is a lower bound on
    the uncertainty, and the search goes on towards that edge."""
    units = np.array([c.unit for c in inside])
    region_low, region_high = units.min(axis=0), units.max(axis=0)
    tiny = 1e-9
    cut = np.zeros(len(low), dtype=bool)
    for j in range(len(low)):
        for touches, edge, sign in ((low[j] <= region_low[j] + tiny, region_low[j], -1),
                                    (high[j] >= region_high[j] - tiny, region_high[j], 1)):
            if not touches or edge <= tiny or edge >= 1 - tiny:
                continue
            lost_gap = min((sign * (c.unit[j] - edge) for c in candidates if c.lost and sign * (c.unit[j] - edge) > tiny),
                           default=np.inf)
            cut[j] |= not lost_gap <= tolerance + tiny
    return cut


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
    minimiser, box, windows, fitted = None, None, [], []
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
        windows.append((units.min(axis=0) - 1e-12, units.max(axis=0) + 1e-12))
        if kept:
            # Pass 1 spans the bounds, where the landscape need not be quadratic: fit near its lowest
            # candidate. From pass 2 on, fit every kept candidate of every pass inside pass 2's
            # window (one coarse step either side of pass 1's estimate): a scale where the curvature
            # shows above the roughness, with more points near the minimum after every pass.
            inside = kept if number == 1 else _within(candidates, windows[1])
            centre_unit, low_unit, high_unit = fit_minimiser(
                np.array([c.unit for c in inside]), np.array([c.mean for c in inside]),
                step if number == 1 else np.inf, paired_noise(inside, burn_in))
            centre = tuple(float(u) for u in centre_unit)
            width = high_unit - low_unit
            minimiser = tuple(float(axis.value(centre[j])) for j, axis in enumerate(axes))
            box, fitted = (low_unit, high_unit), inside
        if report is not None:
            report(_outcome(axes, candidates, minimiser, box, spent, started, number, "", step), this_pass)
        if minimiser is None:
            stopped = "lost"
            break
        if not kept:
            continue  # this pass lost everything: zoom on the last minimiser again
        # A range cut at the edge of the fitted region, with unexplored settings beyond it (the gap
        # before the first lost candidate, say), says neither that the noise dominates nor that the
        # minimiser is placed: search on towards that edge.
        closed = not open_sides(low_unit, high_unit, inside, candidates, tolerance).any()
        if closed and np.all(width >= 2 * step):
            stopped = "resolved"  # the next window would hold nothing the noise lets us tell apart
            break
        if step < tolerance or (closed and np.all(width < tolerance)):
            stopped = "tolerance"
            break
    if minimiser is not None and np.all(np.isfinite(box[1] - box[0])) and open_sides(
            box[0], box[1], fitted, candidates, tolerance).any():
        stopped += "; range reaches the edge of the searched region"
    return _outcome(axes, candidates, minimiser, box, spent, started, number, stopped, step)


def _within(candidates: list, window: tuple) -> list:
    """The kept candidates inside a window (unit box)."""
    low, high = window
    return [c for c in candidates if not c.lost and np.all((np.array(c.unit) >= low) & (np.array(c.unit) <= high))]


def _outcome(axes, candidates, minimiser, box, spent, started, number, stopped, step) -> Outcome:
    ranges = {}
    if minimiser is not None:
        for j, axis in enumerate(axes):
            if box is None or not np.isfinite(box[0][j]):
                ranges[axis.key] = (float("nan"), float("nan"))
            else:
                ranges[axis.key] = (float(axis.value(box[0][j])), float(axis.value(box[1][j])))
    return Outcome(tuple(axes), candidates, minimiser, ranges, spent, time.perf_counter() - started, number, stopped,
                   step)


def retreat_path(outcome: Outcome, start: tuple, count: int) -> np.ndarray:
    """(m, k) setting values, m <= count: ``start`` and then settings ever further from the nearest
    lost candidate, the way out of the region where the filter loses the truth; only ``start`` when
    nothing was lost. The distances from ``start`` are s, 3s, 7s, ... (2^i - 1) s: the first step
    is the width of the minimiser's 95% range (settings the search could not tell apart by their
    error), never less than the last pass's grid step, and doubling steps reach far with few
    settings while the first safe one found lies at most twice as far out as the nearest safe
    distance on the path's scale. Positions are kept inside the bounds (a path that reaches a bound
    stops there)."""
    origin = outcome.units(start)
    lost = np.array([c.unit for c in outcome.candidates if c.lost])
    if not len(lost):
        return np.array([start])
    nearest = lost[np.argmin(np.linalg.norm(lost - origin, axis=1))]
    direction = origin - nearest
    direction /= np.linalg.norm(direction) or 1.0
    width = max((float(axis.unit(high) - axis.unit(low)) for axis, (low, high) in
                 zip(outcome.axes, outcome.ranges.values()) if math.isfinite(low)), default=0.0)
    step = max(width, outcome.step)
    distance = step * (2.0 ** np.arange(count) - 1)
    units = np.clip(origin[None, :] + distance[:, None] * direction[None, :], 0.0, 1.0)
    distinct = [0] + [i for i in range(1, count) if np.any(np.abs(units[i] - units[i - 1]) > 1e-12)]
    return np.array([outcome.values(units[i]) for i in distinct])
