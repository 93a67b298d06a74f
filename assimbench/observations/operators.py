"""Observation operators ``h(x) -> y`` with a known output size: every ``stride``-th variable, or
stations anywhere on the grid (linear interpolation between grid points).

The noise level is not part of the operator: it is the dynamic parameter
``observation.error_std`` (R = error_std**2 I, or error_std**2 diag(f**2)
with the network's static per-station factors f), so one compiled program
serves every noise level of a sweep. Filters read R only through
:meth:`ObservationOperator.error_variance` and ``error_std_of``. ``observation.transform`` makes h nonlinear
(the same noise model), so users can see where Gaussian assumptions break.
"""

from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

TRANSFORMS = {
    "identity": lambda v: v,
    "absolute": jnp.abs,
    "square": jnp.square,
}


class ObservationOperator(NamedTuple):
    """Observe the state at the stations' positions through ``transform``.

    indices: (p,) the grid point at or just below each station (the
    observed variable itself for a station on a grid point); positions: (p,)
    grid positions of the stations, in grid units, for localization and
    interpolation; stride: a station every ``stride``-th variable from 0
    (observed by a strided slice), or 0 for a list of stations; fractions:
    (p,) where a station sits between its grid point and the next one on the
    ring (0 on a grid point; None for a stride network); error_factors: (p,)
    each station's error standard deviation in units of ``error_std``, so
    R = error_std^2 diag(error_factors^2) (None: all 1); transform: a key of
    TRANSFORMS applied elementwise after the selection or interpolation;
    limit: only the first ``limit`` variables are observable (a two-scale
    model's slow variables come first; None: all).
    """

    indices: np.ndarray
    positions: np.ndarray
    stride: int
    transform: str = "identity"
    limit: int | None = None
    fractions: np.ndarray | None = None
    error_factors: np.ndarray | None = None

    def error_std_of(self, error_std):
        """The stations' error standard deviations: ``error_std`` (the traced network-wide value),
        times each station's factor when the network gives factors ((p,); else the scalar itself)."""
        return error_std if self.error_factors is None else error_std * jnp.asarray(self.error_factors)

    def error_variance(self, error_std):
        """R's diagonal, error_std_of(error_std)^2: a scalar, or (p,) with per-station factors."""
        return self.error_std_of(error_std) ** 2

    @property
    def size(self) -> int:
        return int(self.indices.shape[0])

    @property
    def linear(self) -> bool:
        return self.transform == "identity"

    def standard_noise(self, key: jax.Array, state_size: int) -> jax.Array:
        """N(0, I) noise of the stations, (p,).

        One draw per grid point, then the observed ones are taken: a station
        gets the same noise whichever other stations are observed, so two
        networks compared on the same seed differ only where they differ. A
        station between grid points gets its own draw (a second stream, one
        draw per station of the list).
        """
        on_grid = jax.random.normal(key, (state_size,))[self.indices]
        if self.fractions is None or not np.any(self.fractions):
            return on_grid
        between = jax.random.normal(jax.random.fold_in(key, 1), (self.size,))
        return jnp.where(jnp.asarray(self.fractions == 0.0), on_grid, between)

    def __call__(self, x: jax.Array) -> jax.Array:
        """y = f(H x), H a selection or a linear interpolation between the two grid points around
        each station, f elementwise; x: (..., n) -> (..., p)."""
        if self.fractions is None:
            # A strided slice, not a gather: XLA fuses it into its neighbours.
            return TRANSFORMS[self.transform](x[..., : self.limit : self.stride])
        at_left = x[..., self.indices]
        if not np.any(self.fractions):
            return TRANSFORMS[self.transform](at_left)
        # (1 - a) x_i + a x_(i+1): exactly x_i for a station on a grid point.
        at_right = x[..., (self.indices + 1) % (self.limit or x.shape[-1])]
        return TRANSFORMS[self.transform]((1.0 - self.fractions) * at_left + self.fractions * at_right)


def every_kth(state_size: int, stride: int, transform: str = "identity") -> ObservationOperator:
    """Observe variables 0, stride, 2 stride, ... below ``state_size`` (the observable, resolved
    variables; a state may carry more after them)."""
    if not 1 <= stride <= state_size:
        raise ValueError(f"stride must be in [1, {state_size}], got {stride}")
    if transform not in TRANSFORMS:
        raise ValueError(f"transform must be one of {sorted(TRANSFORMS)}, got {transform!r}")
    indices = np.arange(0, state_size, stride)
    return ObservationOperator(
        indices=indices, positions=indices.astype(np.float64), stride=int(stride), transform=transform,
        limit=int(state_size),
    )


def at_stations(state_size: int, positions, transform: str = "identity") -> ObservationOperator:
    """Observe the given grid positions (floats in [0, state_size)), each by linear interpolation
    between grid points floor(q) and floor(q) + 1 (the ring's first point after its last)."""
    positions = np.asarray(positions, dtype=np.float64)
    if positions.ndim != 1 or positions.size == 0 or np.any(positions < 0) or np.any(positions >= state_size):
        raise ValueError(f"positions must be a non-empty list in [0, {state_size}), got {positions}")
    if transform not in TRANSFORMS:
        raise ValueError(f"transform must be one of {sorted(TRANSFORMS)}, got {transform!r}")
    indices = np.floor(positions).astype(np.int64)
    return ObservationOperator(indices=indices, positions=positions, stride=0, transform=transform,
                               limit=int(state_size), fractions=positions - indices)
