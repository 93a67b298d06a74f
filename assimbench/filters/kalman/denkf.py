"""Deterministic ensemble Kalman filter (DEnKF): the Kalman gain for the mean, half of it for the anomalies.

Sakov & Oke (2008, Tellus A 60, 361-371, eq. 4-5). With the ensemble's sample
covariance P, the gain K = P H^T (H P H^T + R)^-1 updates the mean as the
Kalman filter does, and the anomalies with half the gain,

    xbar_a = xbar + K (y - H xbar),    A_a = A - (1/2) K H A,

which approximates the square-root update to first order in K H and
overestimates the analysis covariance by K H P H^T K^T / 4 (eq. 6): an
implicit inflation. In ensemble space (:mod:`assimbench.filters.kalman.ensemble_space`),
with A = (N - 1) I + Y R^-1 Y^T, the mean weights are the ETKF's,
wbar = A^-1 Y R^-1 (y - ybar), and since A^-1 Y R^-1 Y^T = I - (N - 1) A^-1
the anomaly transform is the symmetric

    W = I - (1/2) A^-1 Y R^-1 Y^T = (I + (N - 1) A^-1) / 2

in place of the ETKF's sqrt(N - 1) A^(-1/2).
"""

from dataclasses import dataclass

import jax
import jax.numpy as jnp

from assimbench.config.spec import FilterSpec
from assimbench.filters.base import Filter
from assimbench.filters.kalman.ensemble_space import ensemble_space, mean_weights, solve, transform_members
from assimbench.filters.kalman.inflation import (
    INFLATION_SPEC_FIELDS,
    InflationConfig,
    check_inflation,
    ensemble_filter,
    inflation_pieces,
)
from assimbench.filters.kalman.precision_solvers import check_transform_solver


def denkf_analysis(members: jax.Array, obs_members: jax.Array, y: jax.Array, error_var,
                   solver: str = "eigh") -> jax.Array:
    """One DEnKF analysis of ``members`` (N, n); obs_members (N, p); y (p,); error_var a scalar or (p,)
    (R diagonal); ``solver`` forms A^-1 (:mod:`assimbench.filters.kalman.precision_solvers`). Any
    inflation must already be applied. Returns (N, n)."""
    n_members = members.shape[0]
    space = ensemble_space(members, obs_members, error_var)
    solved = solve(space, solver)
    transform = 0.5 * (jnp.eye(n_members) + (n_members - 1) * solved.inverse())
    return transform_members(space, mean_weights(space, y, solved), transform)


def make_denkf(operator, members: int, pieces=frozenset(), solver: str = "eigh") -> Filter:
    """DEnKF with the inflation pieces of :mod:`assimbench.filters.kalman.inflation`."""

    def update(key, prior, y, settings):
        del key  # deterministic
        white = operator.whiten(settings, y)
        return denkf_analysis(prior, white.observe(prior), white.obs, white.variance, solver), {}

    return ensemble_filter("denkf", members, update, pieces)


@dataclass
class DEnKFConfig(InflationConfig):
    """Deterministic EnKF (Sakov & Oke 2008): its half-gain anomaly update inflates implicitly, so it
    usually needs less multiplicative inflation than the ETKF. transform_solver forms A^-1 by eigh or by
    matrix products only (newton_schulz)."""

    name: str = "denkf"
    inflation: float = 1.01
    transform_solver: str = "eigh"


SPEC = FilterSpec(
    name="denkf",
    schema=DEnKFConfig,
    build=lambda node, ctx: make_denkf(ctx.operator, int(node.members), inflation_pieces(node),
                                       str(node.transform_solver)),
    **{**INFLATION_SPEC_FIELDS, "check": lambda c, model: (check_inflation(c), check_transform_solver(c))},
)
