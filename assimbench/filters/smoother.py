"""A fixed-lag ensemble smoother around any ensemble filter that can carry one.

The ensemble Kalman smoother (Evensen & van Leeuwen 2000, Mon. Wea. Rev. 128,
1852-1867) is the filter's analysis applied to the state augmented with its
earlier states: an analysis that forms the new members as weighted sums of the
forecast members, x_a,i = sum_j T_ji x_j (T from the observations at cycle k
alone), forms the same weighted sums of the members of the K earlier
ensembles, so that every earlier estimate takes the information of y_k
through the ensemble's cross-covariances. With localization (LETKF, serial
EnSRF) each grid point's earlier values take that grid point's weights. The
inflation pieces act on the current forecast only: they stand for its missing
spread, not for the earlier states'.

After the analysis of cycle k the state holds ``lagged[l - 1]``, the ensemble
of cycle k - l given y_1 .. y_k (l = 1 .. K), and in ``inner.members`` the
analysis of cycle k (the cycle forecasts only ``members``), which becomes
lag 1 at cycle k + 1. Before cycle K + 1 the missing
earlier ensembles are copies of the initial one.
"""

from typing import NamedTuple

import jax
import jax.numpy as jnp

from assimbench.filters.base import Filter


class LaggedState(NamedTuple):
    """members (N, n) the current ensemble; lagged (K, N, n) the smoothed ensembles of the K cycles
    before the current one, newest first; inner: the filter's own state, whose members are the last
    analysis (the cycle forecasts only ``members``)."""

    members: jax.Array
    lagged: jax.Array
    inner: tuple


def with_fixed_lag(filt: Filter, lag: int) -> Filter:
    """``filt`` with a fixed-lag smoother of ``lag`` >= 1 cycles (module docstring); the filter must
    offer ``analyse_lagged``."""
    if lag < 1:
        raise ValueError(f"a fixed-lag smoother needs lag >= 1, got {lag}")
    if filt.analyse_lagged is None:
        raise ValueError(f"filter {filt.name} cannot carry a fixed-lag smoother")

    def init(key, initial_ensemble, settings):
        inner = filt.init(key, initial_ensemble, settings)
        lagged = jnp.broadcast_to(initial_ensemble, (lag,) + initial_ensemble.shape)
        return LaggedState(members=initial_ensemble, lagged=lagged, inner=inner)

    def analyse(key, state, y, settings):
        members, width = state.members.shape
        # The ensembles of cycles k-1 .. k-K, newest first, side by side as columns: (N, K n).
        earlier = jnp.concatenate([state.inner.members[None], state.lagged[:-1]], axis=0)
        columns = jnp.moveaxis(earlier, 0, 1).reshape(members, lag * width)
        inner, columns, info = filt.analyse_lagged(key, state.inner._replace(members=state.members), columns, y,
                                                   settings)
        lagged = jnp.moveaxis(columns.reshape(members, lag, width), 1, 0)
        return LaggedState(members=inner.members, lagged=lagged, inner=inner), info

    return filt._replace(init=init, analyse=analyse, analyse_lagged=None)
