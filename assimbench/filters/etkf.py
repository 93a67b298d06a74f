"""Ensemble transform Kalman filter, symmetric square-root form.

Hunt, Kostelich & Szunyogh (2007, Physica D 230, 112-126), eq. 15-24 (the
global version of their algorithm). Members are rows: X_b is (N, n).
"""

import jax
import jax.numpy as jnp

from assimbench.filters import Filter, ensemble_filter
from assimbench.filters.adaptive import adaptive_ensemble_filter


def etkf_analysis(members: jax.Array, obs_members: jax.Array, y: jax.Array, error_var) -> jax.Array:
    """One ETKF analysis of the ensemble ``members`` (N, n).

    obs_members: h applied to every member, (N, p); y: observations (p,);
    error_var: observation error variance, a scalar or (p,) (R is diagonal).
    With anomalies X (N, n) and Y (N, p) about the means xbar and ybar:

        A      = (N - 1) I + Y R^-1 Y^T           (N, N)
        P~a    = A^-1
        wbar   = P~a Y R^-1 (y - ybar)
        W      = sqrt(N - 1) A^(-1/2)             (symmetric square root)
        x_a,i  = xbar + sum_j (wbar_j + W_ji) X_j

    Any inflation must already be applied to ``members``. Returns (N, n).
    """
    n_members = members.shape[0]
    mean = members.mean(axis=0)
    anomalies = members - mean
    obs_mean = obs_members.mean(axis=0)
    obs_anomalies = obs_members - obs_mean
    scaled = obs_anomalies / error_var  # rows of Y R^-1, (N, p)
    precision = (n_members - 1) * jnp.eye(n_members) + scaled @ obs_anomalies.T
    evals, evecs = jnp.linalg.eigh(precision)
    weights_mean = evecs @ ((evecs.T @ (scaled @ (y - obs_mean))) / evals)
    transform = jnp.sqrt(n_members - 1.0) * (evecs / jnp.sqrt(evals)) @ evecs.T
    return mean + (weights_mean[None, :] + transform) @ anomalies


def make_etkf(operator, members: int, pieces=frozenset(), adaptive: bool = False) -> Filter:
    """ETKF with the inflation pieces of :mod:`assimbench.filters.inflation`; with ``adaptive`` the
    multiplicative factor is estimated every cycle (:mod:`assimbench.filters.adaptive`)."""

    def update(key, prior, y, settings):
        del key  # deterministic square-root filter
        error_var = settings["observation"]["error_std"] ** 2
        return etkf_analysis(prior, operator(prior), y, error_var), {}

    if adaptive:
        return adaptive_ensemble_filter("etkf", members, update, operator, pieces)
    return ensemble_filter("etkf", members, update, pieces)
