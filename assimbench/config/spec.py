"""Specs: everything the bench needs to know about one component, in one object.

A model, a forecast model, an observation network and a filter are each one
spec. The spec holds the component's config schema (a dataclass: its keys,
their types and their only defaults), its checks, its static build, its
traced settings (the floats a lane may vary, built into the ``settings``
pytree so one compiled program serves every value) and its traits. The
catalogue (:mod:`assimbench.config.catalogue`) is the only registry; a spec
lives in the module of the component it describes.
"""

from collections.abc import Callable
from dataclasses import dataclass
from typing import NamedTuple

from assimbench.config.checks import NodeChecks


def _nothing(*args) -> None:
    """A check with nothing to check."""


def floats(node, keys) -> dict:
    """{key: float(node[key])} for ``keys``: the traced settings of a node."""
    return {key: float(node[key]) for key in keys}


class _Estimable:
    """The names of a model spec's parameters a filter can estimate: ``estimable(node)``, or its
    traced keys when the spec gives none."""

    def estimable_names(self, node) -> tuple:
        return self.traced if self.estimable is None else tuple(self.estimable(node))


@dataclass(frozen=True)
class ModelSpec(_Estimable):
    """A model of the ``model`` group (and of the ``forecast_model`` group).

    build(node) -> Model; sizes(node) -> (state size, resolved size) without
    building; check(c: NodeChecks) the ranges of its keys; traced: keys of its
    dynamic parameters (``Model.params``, lane keys); ring: its variables sit
    on a periodic grid (localization distances exist); lorenz96_ring: its
    resolved variables are a Lorenz-96 ring (a closure can be fitted to them);
    estimable(node) -> the names of its parameters a filter can estimate
    (assimbench/estimation/parameters.py; None: its traced keys).
    """

    name: str
    schema: type
    build: Callable
    sizes: Callable
    check: Callable = _nothing
    traced: tuple = ()
    ring: bool = False
    lorenz96_ring: bool = False
    estimable: Callable | None = None


class ModelFacts(NamedTuple):
    """What the checks know of a model before anything is built: its name, state size, resolved
    size, whether its variables sit on a ring, and whether its resolved variables are a Lorenz-96 ring."""

    name: str
    size: int
    resolved: int
    ring: bool
    lorenz96_ring: bool = False


@dataclass(frozen=True)
class DerivedModelSpec(_Estimable):
    """A forecast model made from the truth model (only in the ``forecast_model`` group).

    build(node, truth: Model) -> Model; sizes(node, truth: ModelFacts) ->
    (size, resolved); check(c, truth: ModelFacts) the ranges of its keys;
    ring(truth: ModelFacts) -> bool; traced: keys of its dynamic parameters
    (``Model.params``, lane keys); estimable(node) -> the names of its
    parameters a filter can estimate (None: its traced keys; the perfect
    model ``same`` has the truth's).
    """

    name: str
    schema: type
    build: Callable
    sizes: Callable
    ring: Callable
    check: Callable = _nothing
    traced: tuple = ()
    estimable: Callable | None = None


@dataclass(frozen=True)
class NetworkSpec:
    """An observation network: build(node, resolved_size) -> ObservationOperator;
    check(c, truth: ModelFacts); traced: its swept floats (lane keys)."""

    name: str
    schema: type
    build: Callable
    check: Callable = _nothing
    traced: tuple = ()

    def settings(self, node) -> dict:
        return floats(node, self.traced)


class FilterContext(NamedTuple):
    """What a filter is built against: the forecast model, the observation operator, the
    forecast model's steps per analysis interval, the smoother's lag (``smoother.lag``) for a
    filter that smooths by itself (its state then carries ``lagged``), and the names of the forecast
    model's parameters estimated with the state, for a filter that forecasts by itself (the IEnKS
    over its window)."""

    model: object
    operator: object
    steps_per_interval: int
    smoother_lag: int = 0
    estimated: tuple = ()


@dataclass(frozen=True)
class FilterSpec:
    """A filter of the ``filter`` group.

    build(node, context: FilterContext) -> Filter (the static part);
    settings(node) -> dict of traced floats (``settings["filter"]``);
    check(c: NodeChecks, model: ModelFacts) the ranges of its keys (``model``:
    the forecast model the filter works with); traced: the keys a lane may
    vary; widest: traced keys whose lanes are built from their largest value
    (a localization window, or a piece switched on when any lane uses it);
    members(node) -> ensemble size; weighted: a weighted ensemble;
    reports_inflation(node) -> whether info carries an inflation series;
    iterative: info carries ``iterations`` and ``model_integrations`` per cycle;
    step_counts(node) -> the per-cycle ``iterations`` values an iterative filter
    can report (the summary gives the share of cycles at each);
    smoothable(node) -> whether the built filter can carry a fixed-lag smoother
    (``Filter.analyse_lagged``) or smooths by itself (see FilterContext);
    lag_limit(node) -> the largest smoother lag it can give (None: any);
    climatology: its static parts come from the forecast model's climatology;
    assimilates: False for reference runs (no divergence rule applies);
    kalman_exact: on a linear Gaussian problem, without localization and
    inflation, one analysis gives the Kalman filter's mean and covariance from
    the forecast ensemble's sample mean and covariance (tested for every filter
    that declares it); windowed: the filter keeps a window of observation
    times and uses every one of them (it refuses ``analysis_every`` > 1);
    estimates: the built filter offers ``Filter.analyse_augmented``, so it can
    estimate forecast-model parameters (assimbench/estimation); steps(node,
    context) -> ``record(key, state, y, settings) -> dict``, the analysis step
    by step for reference vectors (assimbench/vectors: the names and order of
    assimbench/vectors/quantities.py; None: the filter has no vectors yet).
    """

    name: str
    schema: type
    build: Callable
    settings: Callable = lambda node: {}
    check: Callable = _nothing
    traced: tuple = ()
    widest: tuple = ()
    members: Callable = lambda node: int(node.members)
    weighted: bool = False
    reports_inflation: Callable = lambda node: False
    iterative: bool = False
    step_counts: Callable = lambda node: range(0)
    smoothable: Callable = lambda node: False
    lag_limit: Callable = lambda node: None
    climatology: bool = False
    assimilates: bool = True
    kalman_exact: bool = False
    windowed: bool = False
    estimates: bool = False
    steps: Callable | None = None


__all__ = ["DerivedModelSpec", "FilterContext", "FilterSpec", "ModelSpec", "NetworkSpec", "ModelFacts", "NodeChecks",
           "floats"]
