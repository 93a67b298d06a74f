"""Filters as small named pairs of pure functions.

A filter is ``init(key, initial_ensemble, settings) -> state`` and
``analyse(key, state, y, settings) -> (state, info)``. Every state is a
NamedTuple pytree with at least a ``members`` field of shape (N, n), which the
cycle forecasts with the model (unless ``runs_model`` is False); a state with
a ``log_weights`` field (N,) is a weighted ensemble. ``info`` is a dict of
per-cycle arrays the filter reports. ``settings`` is the nested dict of traced
floats (``settings["filter"]["inflation"]``, ``settings["observation"]["error_std"]``...).
"""

from collections.abc import Callable
from typing import NamedTuple

import jax


class Filter(NamedTuple):
    """A named (init, analyse) pair; ``members`` is the static ensemble size."""

    name: str
    members: int
    init: Callable
    analyse: Callable
    runs_model: bool = True
    weighted: bool = False
    assimilates: bool = True  # False for reference runs: no divergence rule applies
    reports_inflation: bool = False  # info["inflation"]: the anomaly factor estimated or implied per cycle
    # analyse_lagged(key, state, lagged, y, settings) -> (state, lagged, info): the analysis that also
    # transforms ``lagged`` (N, m), columns of earlier states, as it transforms the members (same
    # member weights, local ones at each grid point), with no inflation piece on them. None: the
    # filter cannot carry a fixed-lag smoother.
    analyse_lagged: Callable | None = None
    # analyse_augmented(key, state, parameters, y, settings) -> (state, parameters, info): the analysis
    # that also updates ``parameters`` (N, q), global columns such as a forecast model's estimated
    # parameters (assimbench/estimation), with the members' weights (with localization: no distance
    # taper) and no inflation piece on them. None: the filter cannot estimate parameters.
    analyse_augmented: Callable | None = None


class EnsembleState(NamedTuple):
    """State of an ensemble filter: the members, (N, n)."""

    members: jax.Array


def keep_ensemble(key, initial_ensemble, settings) -> EnsembleState:
    """``init`` for filters whose whole state is the ensemble."""
    del key, settings
    return EnsembleState(members=initial_ensemble)
