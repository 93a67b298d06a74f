"""The ensemble-space pieces shared by the ETKF, the EnKF-N and the LETKF.

Members are rows: X_b is (N, n), its observation-space image (N, p). With
anomalies X = X_b - xbar and Y = h(X_b) - ybar (Hunt, Kostelich & Szunyogh
2007, Physica D 230, eq. 12-13), an analysis in ensemble space finds mean
weights wbar (N,) and a transform W (N, N) and returns

    x_a,i = xbar + sum_j (wbar_j + W_ji) X_j        (eq. 22-24).
"""

from typing import NamedTuple

import jax
import jax.numpy as jnp

from assimbench.filters.kalman.precision_solvers import solve_precision


class EnsembleSpace(NamedTuple):
    """mean (n,), anomalies X (N, n), obs_mean (p,), obs_anomalies Y (N, p) and scaled = Y R^-1 (N, p)."""

    mean: jax.Array
    anomalies: jax.Array
    obs_mean: jax.Array
    obs_anomalies: jax.Array
    scaled: jax.Array


def ensemble_space(members: jax.Array, obs_members: jax.Array, error_var) -> EnsembleSpace:
    """Means and anomalies of ``members`` (N, n) and ``obs_members`` (N, p); R = diag(error_var)."""
    mean = members.mean(axis=0)
    obs_mean = obs_members.mean(axis=0)
    obs_anomalies = obs_members - obs_mean
    return EnsembleSpace(mean, members - mean, obs_mean, obs_anomalies, obs_anomalies / error_var)


def precision(space: EnsembleSpace) -> jax.Array:
    """A = (N - 1) I + Y R^-1 Y^T, the ensemble-space analysis precision (Hunt et al. 2007, eq. 19), (N, N)."""
    n_members = space.anomalies.shape[0]
    return (n_members - 1) * jnp.eye(n_members) + space.scaled @ space.obs_anomalies.T


def solve(space: EnsembleSpace, solver: str):
    """A^-1 and A^(-1/2) of the precision A = (N - 1) I + Y R^-1 Y^T (:func:`precision`), whose smallest
    eigenvalue is N - 1, by ``solver`` (:mod:`assimbench.filters.kalman.precision_solvers`)."""
    return solve_precision(precision(space), space.anomalies.shape[0] - 1.0, solver)


def mean_weights(space: EnsembleSpace, y: jax.Array, solved) -> jax.Array:
    """wbar = A^-1 Y R^-1 (y - ybar) (Hunt et al. 2007, eq. 21), (N,); ``solved`` from :func:`solve`."""
    return solved.apply_inverse(space.scaled @ (y - space.obs_mean))


def square_root_transform(solved) -> jax.Array:
    """W = sqrt(N - 1) A^(-1/2), the symmetric square root (Hunt et al. 2007, eq. 20), (N, N)."""
    return solved.inverse_root(jnp.sqrt(solved.size - 1.0))


def symmetric_square_root_transform(evals: jax.Array, evecs: jax.Array) -> jax.Array:
    """W = sqrt(N - 1) A^(-1/2) = sqrt(N - 1) V diag(evals^-1/2) V^T for A = V diag(evals) V^T, (N, N)
    (the symmetric square root: Hunt et al. 2007, eq. 20; Ott et al. 2004)."""
    n_members = evals.shape[0]
    return jnp.sqrt(n_members - 1.0) * (evecs / jnp.sqrt(evals)) @ evecs.T


def transform_members(space: EnsembleSpace, weights_mean: jax.Array, transform: jax.Array) -> jax.Array:
    """x_a,i = xbar + sum_j (wbar_j + W_ji) X_j, (N, n)."""
    return space.mean + (weights_mean[None, :] + transform) @ space.anomalies
