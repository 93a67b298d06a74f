"""Observation networks: which variables are observed, how often, through what and with what error.

Every ``stride``-th resolved variable, or ``stations`` at any grid positions
(linear interpolation between grid points), every ``interval`` model time
units, through an elementwise ``transform``, with errors of standard
deviation ``error_std`` (a traced setting) times per-station factors,
correlated over ``correlation_length`` grid units (traced; 0: independent)
with a ``correlation_shape``. The group's options (``every_station``,
``every_other_station``) are presets of this one spec.

The filter may assume other errors than the truth's: the ``assumed`` node
(:class:`AssumedErrorsConfig`) gives the filter's own error_std,
correlation length and shape, and factors; each null key is the truth's.
"""

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from omegaconf import OmegaConf

from assimbench.config.spec import NetworkSpec, NodeChecks
from assimbench.observations.operators import CORRELATION_SHAPES, TRANSFORMS, at_stations, every_kth
from assimbench.observations.outages import outage_schedule


@dataclass
class ObservationConfig:
    """Observe every ``stride``-th variable every ``interval`` model time units.

    y = f(H truth) + N(0, error_std^2 I) with f given by ``transform``
    (identity, absolute or square); ``interval`` must be a whole multiple of
    ``model.dt``. The default is the demo's: every station of the ring every
    six hours (0.05 model time units) with unit error. ``stations``, a list of
    grid positions in [0, n) (fractions between grid points on a ring), replaces
    the stride; so do ``random_stations`` (a count drawn once from
    ``subset_seed``), ``block`` ([first, count] consecutive grid points) and
    ``station_file`` (CSV or YAML of position, error_std), each written out as
    the station list before anything reads it
    (:mod:`assimbench.observations.station_rules`). ``error_factors``, one per
    station, make the errors unequal:
    station i's standard deviation is error_std x error_factors[i].
    ``correlation_length`` L > 0 (grid units) correlates the errors,
    R_ij = sigma_i sigma_j rho(d_ij / L) with d_ij the ring distance and rho
    ``exponential`` (exp(-d/L)) or ``gaussian`` (exp(-d^2 / (2 L^2))).
    A station is out in a cycle with probability ``outage_probability``, in
    spells of ``outage_spell`` cycles on average (0: drawn afresh every
    cycle); ``outage_schedule`` lists blocks {first_cycle, last_cycle,
    stations: [station numbers from 0]} out on top
    (:mod:`assimbench.observations.outages`).
    """

    interval: float = 0.05
    stride: int = 1
    stations: list[float] | None = None
    random_stations: int | None = None
    subset_seed: int = 0
    block: list[int] | None = None
    station_file: str | None = None
    error_factors: list[float] | None = None
    error_std: float = 1.0
    correlation_length: float = 0.0
    correlation_shape: str = "exponential"
    outage_probability: float = 0.0
    outage_spell: float = 0.0
    outage_schedule: list[Any] | None = None
    transform: str = "identity"


@dataclass
class AssumedErrorsConfig:
    """The observation errors the filter assumes, R_f (null: the truth's value of that key), so a run can
    study a misspecified R: a wrong error_std, other factors, independent errors (correlation_length 0)
    when the truth's are correlated, or another shape."""

    error_std: float | None = None
    correlation_length: float | None = None
    correlation_shape: str | None = None
    error_factors: list[float] | None = None


ASSUMED_KEYS = ("error_std", "correlation_length", "correlation_shape", "error_factors")
# The assumed keys a lane may sweep (lanes.assumed.error_std=[...]): the filter's traced view of R.
ASSUMED_TRACED = ("error_std", "correlation_length")


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
    _check_correlation(c, truth, c.node)
    _check_outages(c, truth)


def station_count(node, resolved: int) -> int:
    """The network's number of stations (``node``: the observation node, or its plain dict)."""
    stations = node.get("stations")
    return len(stations) if stations is not None else -(-resolved // int(node.get("stride", 1)))


def rms_error(error_std, factors) -> float:
    """The stations' root-mean-square error std: error_std, times sqrt(mean(factors^2)) with factors."""
    if factors is None:
        return float(error_std)
    return float(error_std) * float(np.sqrt(np.mean(np.square(np.asarray(list(factors), dtype=float)))))


def _check_outages(c: NodeChecks, truth) -> None:
    q = c.in_range("outage_probability", 0.0, 1.0, "a probability from 0 to 1")
    spell = c.real("outage_spell", "0 (outages drawn afresh every cycle) or a mean spell >= 1 cycle",
                   minimum=0.0, strict=False)
    if spell != 0 and (spell < 1 or (q < 1 and spell < q / (1 - q))):
        least = max(1.0, q / (1 - q)) if q < 1 else 1.0
        c.fail("outage_spell", spell, f"0, or at least {least:g} cycles: a station out a share {q:g} of the time "
                                      "cannot have shorter spells")
    blocks = c.node.outage_schedule
    if blocks is None:
        return
    count = station_count(c.node, truth.resolved)
    form = ("allowed are blocks {first_cycle: k1, last_cycle: k2, stations: [numbers]} with whole cycles "
            f"1 <= k1 <= k2 and station numbers from 0 to {count - 1}, each once")
    shown = _shown(blocks)
    whole = lambda v: isinstance(v, int) and not isinstance(v, bool)
    for number, block in enumerate(blocks, start=1):
        where = f"block {number}"
        if not hasattr(block, "keys"):
            c.fail("outage_schedule", shown, f"{where} is not a {{...}} mapping: {form}")
        keys = set(block.keys())
        if keys != {"first_cycle", "last_cycle", "stations"}:
            missing, extra = {"first_cycle", "last_cycle", "stations"} - keys, keys - {"first_cycle", "last_cycle",
                                                                                      "stations"}
            said = ", ".join([f"lacks {k}" for k in sorted(missing)] + [f"has unknown key {k}" for k in sorted(extra)])
            c.fail("outage_schedule", shown, f"{where} {said}: {form}")
        first, last, stations = block["first_cycle"], block["last_cycle"], block["stations"]
        if not (whole(first) and whole(last)) or first < 1:
            c.fail("outage_schedule", shown, f"{where} has cycles {first}..{last}, not whole cycles from 1: {form}")
        if first > last:
            c.fail("outage_schedule", shown, f"{where} ends (cycle {last}) before it starts (cycle {first}): {form}")
        if not hasattr(stations, "__len__") or isinstance(stations, str) or not stations:
            c.fail("outage_schedule", shown, f"{where} lists no station: {form}")
        bad = [i for i in stations if not (whole(i) and 0 <= i < count)]
        if bad:
            c.fail("outage_schedule", shown, f"{where} has station {bad[0]}, not a station number: {form}")
        if len(set(stations)) != len(stations):
            c.fail("outage_schedule", shown, f"{where} lists a station twice: {form}")


def _shown(value) -> str:
    plain = OmegaConf.to_container(value) if OmegaConf.is_config(value) else value
    return str(plain).replace("'", "").replace(" ", "")


def _check_correlation(c: NodeChecks, truth, network) -> None:
    """correlation_length >= 0 on a ring model, a known shape, and an R that is positive definite
    (``network``: the observation node whose stations R is built on)."""
    length = c.real("correlation_length", "a finite length >= 0 in grid units (0: independent errors)",
                    minimum=0.0, strict=False)
    if c.node.correlation_shape not in CORRELATION_SHAPES:
        c.fail("correlation_shape", c.node.correlation_shape, "one of " + ", ".join(CORRELATION_SHAPES))
    if length == 0:
        return
    if not truth.ring:
        c.fail("correlation_length", length, f"0: {truth.name} has no distance between variables")
    operator = _build(network, truth.resolved)._replace(correlation_shape=str(c.node.correlation_shape))
    correlation = np.asarray(operator.error_correlation({operator.error_section: {"correlation_length": length}}))
    spectrum = np.linalg.eigvalsh(correlation)
    smallest = float(spectrum[0])
    # Relative to the largest eigenvalue: below this the Cholesky factor loses most of its digits.
    if smallest <= 1e-10 * float(spectrum[-1]):
        c.fail("correlation_length", length, f"a length whose R is positive definite: with the "
               f"{c.node.correlation_shape} shape on these {operator.size} stations the correlation matrix's "
               f"smallest eigenvalue is {smallest:.2g} (use a shorter length or the exponential shape)")


def check_assumed(assumed, observation, truth) -> None:
    """The ``assumed`` node's keys (each null, or a value allowed for the network's key of that name)."""
    c = NodeChecks(assumed, "assumed")
    if assumed.error_std is not None:
        c.real("error_std", "a finite standard deviation > 0, or null for the truth's", minimum=0.0)
    if assumed.error_factors is not None:
        _check_error_factors(NodeChecks(_merged(assumed, observation), "assumed"), truth)
    if assumed.correlation_length is not None or assumed.correlation_shape is not None:
        _check_correlation(NodeChecks(_merged(assumed, observation), "assumed"), truth, observation)


def _merged(assumed, observation):
    """The observation node with the assumed keys that are set (for the network's checks)."""
    merged = OmegaConf.to_container(observation)
    merged.update({key: assumed[key] for key in ASSUMED_KEYS if assumed[key] is not None})
    return OmegaConf.create(merged)


def assumed_settings(assumed, observation) -> dict:
    """settings["assumed"]: the filter's error_std and correlation_length, each the truth's where null."""
    return {key: float(observation[key] if assumed[key] is None else assumed[key]) for key in ASSUMED_TRACED}


def filter_view(operator, assumed, observation):
    """The network as the filter sees it: ``operator`` itself when ``assumed`` sets nothing, else with
    the assumed factors and correlation, reading settings["assumed"]."""
    if all(assumed[key] is None for key in ASSUMED_KEYS):
        return operator
    merged = _merged(assumed, observation)
    factors = None if merged.error_factors is None else np.asarray(list(merged.error_factors), dtype=np.float64)
    shape = str(merged.correlation_shape) if float(merged.correlation_length) > 0 else None
    return operator._replace(error_factors=factors, correlation_shape=shape, error_section="assumed")


def _numbers(c: NodeChecks, key: str) -> list:
    """The list ``key`` holds, each entry a number (a nested list or a word is refused)."""
    values = list(c.node[key])
    if any(isinstance(v, bool) or not isinstance(v, (int, float)) for v in values):
        c.fail(key, str(c.node[key]), "a flat list of numbers")
    return values


def _check_error_factors(c: NodeChecks, truth) -> None:
    factors = _numbers(c, "error_factors")
    shown = "[" + ",".join(f"{f:g}" for f in factors) + "]"
    count = station_count(c.node, truth.resolved)
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
    if float(node.get("correlation_length", 0.0)) > 0:
        operator = operator._replace(correlation_shape=str(node.correlation_shape))
    blocks = node.get("outage_schedule")
    if float(node.get("outage_probability", 0.0)) > 0 or blocks:
        plain = OmegaConf.to_container(blocks) if OmegaConf.is_config(blocks) else blocks
        operator = operator._replace(outages=True, schedule=outage_schedule(plain, operator.size))
    if node.error_factors is None:
        return operator
    return operator._replace(error_factors=np.asarray(list(node.error_factors), dtype=np.float64))


SPEC = NetworkSpec(
    name="stride",
    schema=ObservationConfig,
    build=_build,
    check=_check,
    traced=("error_std", "correlation_length", "outage_probability", "outage_spell"),
)
