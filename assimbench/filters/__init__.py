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


class EnsembleState(NamedTuple):
    """State of an ensemble filter: the members, (N, n)."""

    members: jax.Array


def keep_ensemble(key, initial_ensemble, settings) -> EnsembleState:
    """``init`` for filters whose whole state is the ensemble."""
    del key, settings
    return EnsembleState(members=initial_ensemble)


def ensemble_filter(name: str, members: int, update: Callable, pieces=frozenset(),
                    reports_inflation: bool = False) -> Filter:
    """A Filter from ``update(key, prior, y, settings) -> (posterior, info)`` on (N, n) arrays,
    with every inflation piece of :mod:`assimbench.filters.inflation` composed around it."""
    from assimbench.filters.inflation import with_inflation

    analyse_members = with_inflation(update, pieces)

    def analyse(key, state, y, settings):
        posterior, info = analyse_members(key, state.members, y, settings)
        return EnsembleState(members=posterior), info

    return Filter(name=name, members=members, init=keep_ensemble, analyse=analyse,
                  reports_inflation=reports_inflation)
