"""Inflation of ensemble anomalies.

Convention of the whole package: ``filter.inflation`` multiplies the anomalies
(deviations from the ensemble mean), so the ensemble covariance grows by its
square. Common practice since Anderson & Anderson (1999, Mon. Wea. Rev. 127).
"""

import jax


def inflate_anomalies(members: jax.Array, factor) -> jax.Array:
    """x_i <- xbar + factor (x_i - xbar); members (N, n), factor a scalar >= 1."""
    mean = members.mean(axis=0)
    return mean + factor * (members - mean)
