"""Observation networks: which variables are observed, how often, through what and with what error.

Every ``stride``-th resolved variable, or ``stations`` at any grid positions
(linear interpolation between grid points), every ``interval`` model time
units, through an elementwise ``transform``, with independent errors of
standard deviation ``error_std`` (R = error_std^2 I, a traced setting). The
group's options (``every_station``, ``every_other_station``) are presets of
this one spec.
"""

import math
from dataclasses import dataclass

import numpy as np

from assimbench.config.spec import NetworkSpec, NodeChecks
from assimbench.observations.operators import TRANSFORMS, at_stations, every_kth


@dataclass
class ObservationConfig:
    """Observe every ``stride``-th variable every ``interval`` model time units.

    y = f(H truth) + N(0, error_std^2 I) with f given by ``transform``
    (identity, absolute or square); ``interval`` must be a whole multiple of
    ``model.dt``. The default is the demo's: every station of the ring every
    six hours (0.05 model time units) with unit error. ``stations``, a list of
    grid positions in [0, n) (fractions between grid points on a ring), replaces
    the stride. ``error_factors``, one per station, make the errors unequal:
    station i's standard deviation is error_std x error_factors[i].
    """

    interval: float = 0.05
    stride: int = 1
    stations: list[float] | None = None
    error_factors: list[float] | None = None
    error_std: float = 1.0
    transform: str = "identity"


def _check(c: NodeChecks, truth) -> None:
    """Ranges of the network's keys; ``truth`` the facts of the truth model (ModelFacts)."""
    resolved = truth.resolved
    allowed = f"an integer from 1 to the observable state size {resolved}"
    c.integer("stride", 1, allowed, maximum=resolved)
    c.real("error_std", "a finite standard deviation > 0", minimum=0.0)
    if c.node.transform not in TRANSFORMS:
        c.fail("transform", c.node.transform, "one of " + ", ".join(TRANSFORMS))
    if c.node.stations is not None:
        _check_stations(c, truth)
    if c.node.error_factors is not None:
        _check_error_factors(c, truth)


def _numbers(c: NodeChecks, key: str) -> list:
    """The list ``key`` holds, each entry a number (a nested list or a word is refused)."""
    values = list(c.node[key])
    if any(isinstance(v, bool) or not isinstance(v, (int, float)) for v in values):
        c.fail(key, str(c.node[key]), "a flat list of numbers")
    return values


def _check_error_factors(c: NodeChecks, truth) -> None:
    factors = _numbers(c, "error_factors")
    shown = "[" + ",".join(f"{f:g}" for f in factors) + "]"
    count = len(c.node.stations) if c.node.stations is not None else -(-truth.resolved // int(c.node.stride))
    if len(factors) != count:
        c.fail("error_factors", shown, f"one factor per station: {count} here, got {len(factors)}")
    for f in factors:
        if not math.isfinite(f) or f <= 0:
            c.fail("error_factors", shown, f"finite factors > 0 (each station's error std over {c.name('error_std')})")


def _check_stations(c: NodeChecks, truth) -> None:
    stations = _numbers(c, "stations")
    shown = "[" + ",".join(f"{q:g}" for q in stations) + "]"
    if int(c.node.stride) != 1:
        c.fail("stride", c.node.stride, f"1 when {c.name('stations')} is given (a station list replaces the stride; "
                                             "leave out stride presets such as observation=every_other_station)")
    if not stations:
        c.fail("stations", shown, "a list of at least one grid position")
    within = f"grid positions from 0 to below the observable state size {truth.resolved}"
    for q in stations:
        if not math.isfinite(q) or q < 0 or q >= truth.resolved:
            c.fail("stations", shown, f"{within}; {q:g} is not")
        if q != int(q) and not truth.ring:
            c.fail("stations", shown, f"whole grid positions: {truth.name} has no distance between variables, so "
                                      f"{q:g} cannot lie between two grid points")
    if len(set(stations)) != len(stations):
        c.fail("stations", shown, "each position once (a repeated station would share its noise)")


def _build(node, resolved: int):
    if node.stations is None:
        operator = every_kth(resolved, int(node.stride), str(node.transform))
    else:
        operator = at_stations(resolved, list(node.stations), str(node.transform))
    if node.error_factors is None:
        return operator
    return operator._replace(error_factors=np.asarray(list(node.error_factors), dtype=np.float64))


SPEC = NetworkSpec(
    name="stride",
    schema=ObservationConfig,
    build=_build,
    check=_check,
    traced=("error_std",),
)
