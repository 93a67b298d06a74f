"""Observation operators ``h(x) -> y`` with a known output size.

The noise level is not part of the operator: it is the dynamic parameter
``observation.error_std`` (R = error_std**2 I), so one compiled program serves
every noise level of a sweep. ``observation.transform`` makes h nonlinear
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
    """Observe every ``stride``-th variable, starting with variable 0, through ``transform``.

    indices: (p,) observed variable indices (static, NumPy); positions: (p,)
    grid positions of the observations, in grid units, for localization;
    transform: a key of TRANSFORMS applied elementwise after the selection;
    limit: only the first ``limit`` variables are observable (a two-scale
    model's slow variables come first; None: all).
    """

    indices: np.ndarray
    positions: np.ndarray
    stride: int
    transform: str = "identity"
    limit: int | None = None

    @property
    def size(self) -> int:
        return int(self.indices.shape[0])

    @property
    def linear(self) -> bool:
        return self.transform == "identity"

    def standard_noise(self, key: jax.Array, state_size: int) -> jax.Array:
        """N(0, I) noise of the observed stations, (p,).

        One draw per grid point, then the observed ones are taken: a station
        gets the same noise whichever other stations are observed, so two
        networks compared on the same seed differ only where they differ.
        """
        return jax.random.normal(key, (state_size,))[self.indices]

    def __call__(self, x: jax.Array) -> jax.Array:
        """y = f(H x) for a selection H and elementwise f; x: (..., n) -> (..., p)."""
        # A strided slice, not a gather: XLA fuses it into its neighbours.
        return TRANSFORMS[self.transform](x[..., : self.limit : self.stride])


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
