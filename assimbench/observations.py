"""Observation operators ``h(x) -> y`` with a known output size.

The noise level is not part of the operator: it is the dynamic parameter
``observation.error_std`` (R = error_std**2 I), so one compiled program serves
every noise level of a sweep.
"""

from typing import NamedTuple

import jax
import numpy as np


class ObservationOperator(NamedTuple):
    """Select every ``stride``-th variable, starting with variable 0.

    indices: (p,) observed variable indices (static, NumPy);
    positions: (p,) grid positions of the observations, in grid units, used
    for localization distances.
    """

    indices: np.ndarray
    positions: np.ndarray
    stride: int

    def standard_noise(self, key: jax.Array, state_size: int) -> jax.Array:
        """N(0, I) noise of the observed stations, (p,).

        One draw per grid point, then the observed ones are taken: a station
        gets the same noise whichever other stations are observed, so two
        networks compared on the same seed differ only where they differ.
        """
        return jax.random.normal(key, (state_size,))[self.indices]

    @property
    def size(self) -> int:
        return int(self.indices.shape[0])

    def __call__(self, x: jax.Array) -> jax.Array:
        """y = H x for a selection H; x: (..., n) -> (..., p)."""
        # A strided slice, not a gather: XLA fuses it into its neighbours.
        return x[..., :: self.stride]


def every_kth(state_size: int, stride: int) -> ObservationOperator:
    """Observe variables 0, stride, 2 stride, ... of an ``state_size`` state."""
    if not 1 <= stride <= state_size:
        raise ValueError(f"stride must be in [1, {state_size}], got {stride}")
    indices = np.arange(0, state_size, stride)
    return ObservationOperator(indices=indices, positions=indices.astype(np.float64), stride=int(stride))
