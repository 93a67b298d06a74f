"""The model every part of the bench integrates: a pure tendency ``f(x, params) -> dx/dt``.

Every tendency acts on the last axis of ``x``, so the same function serves a
single state ``(n,)`` and an ensemble ``(members, n)``. Shape-fixing choices
(state size, time step) are static fields of :class:`Model`; the floats a user
may sweep (forcing, sigma, ...) are a dict of traced parameters.
"""

from collections.abc import Callable
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from assimbench.config.spec import DerivedModelSpec


class Model(NamedTuple):
    """A model ready to integrate.

    name: registry name; size: state dimension n; dt: RK4 step (model time);
    tendency: ``f(x, params) -> dx/dt`` on the last axis; params: default
    dynamic parameters; spinup_time: model time integrated from
    ``first_guess`` to land on the attractor; first_guess:
    ``(key, params) -> (n,)``;
    ring: True when the variables sit on a periodic 1-D grid (a distance
    exists for localization); ensemble_tendency: optionally the same
    tendency for an ensemble stored variables-first, (n, members), when that
    layout vectorises better (Lorenz-63: three long rows instead of many rows
    of three); resolved: the number of leading variables that are observed and
    scored (None: all of them; a two-scale model's slow variables); stepper:
    optionally the model's own one-step map ``step(x, params) -> x(t + dt)``
    on the last axis, for models whose scheme is not RK4 on the tendency
    (Kuramoto-Sivashinsky: ETDRK4); spread_scale: optionally (n,) factors of
    ``initial_spread`` per variable, for models whose variables differ in
    scale (two-scale Lorenz-96: the fast ones are b times smaller, and noise
    of their slow size makes the explicit step unstable); static: any other
    static choice the dynamics depend on beyond name, size, dt and resolved
    (Kuramoto-Sivashinsky: the domain length), so that compiled programs can
    be shared by every model with the same static parts.
    """

    name: str
    size: int
    dt: float
    tendency: Callable
    params: dict
    spinup_time: float
    first_guess: Callable
    ring: bool
    ensemble_tendency: Callable | None = None
    resolved: int | None = None
    stepper: Callable | None = None
    spread_scale: np.ndarray | None = None
    static: tuple = ()

    @property
    def resolved_size(self) -> int:
        """Leading variables observed and scored: all for single-scale models."""
        return self.size if self.resolved is None else self.resolved


@dataclass
class SameModelConfig:
    """Forecast with the truth model itself (a perfect-model experiment)."""

    name: str = "same"


SAME_SPEC = DerivedModelSpec(
    name="same",
    schema=SameModelConfig,
    build=lambda node, truth: truth,
    sizes=lambda node, truth: (truth.size, truth.resolved),
    ring=lambda truth: truth.ring,
)
