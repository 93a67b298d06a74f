"""What a learning run minimises, per cycle.

``innovation``: the negative log-likelihood of the observations given the
forecast, as the filter sees the forecast, per observation (observations
only; no truth needed). With the prior ensemble X (N members as rows, after
the filter's multiplicative inflation), its observed anomalies Y (N, p), the
innovation d = y - mean_i h(x_i) and the observation error covariance R:

    S = Y^T Y / (N - 1) + R,
    -log p(y) = (d^T S^-1 d + log det S + p log 2 pi) / 2,

the Gaussian predictive density of the ensemble Kalman filter (the marginal
likelihood used to learn filter and model parameters, e.g. Chen, Sanz-Alonso &
Willett 2022, SIAM J. Math. Data Sci. 4; from memory). It is evaluated in the
ensemble space, where the filter works, by the matrix determinant lemma and
Woodbury's identity (Petersen & Pedersen, The Matrix Cookbook, eq. 24 and
156; common practice): with whitened anomalies Yw = Y R^-1/2, dw = R^-1/2 d
and A = (N - 1) I + Yw Yw^T (N, N),

    log det S = log det R + log det A - N log(N - 1),
    d^T S^-1 d = dw^T dw - (Yw dw)^T A^-1 (Yw dw).

The covariance is the ensemble's own (not localized): a localizing filter is
scored by how well its forecasts predict the observations. Missing stations
(an outage) are left out of every term. The value is divided by the number of
observations seen, so networks of different sizes read alike.

``truth``: the analysis RMSE against the truth's resolved variables,
sqrt(mean_j (xbar_a,j - x_t,j)^2), as the run's ``rmse_analysis``.
"""

import math

import jax
import jax.numpy as jnp

from assimbench.filters.kalman.inflation import inflate_anomalies

OBJECTIVES = ("innovation", "truth")


def innovation_loss(members: jax.Array, y: jax.Array, operator, settings: dict) -> jax.Array:
    """-log p(y) / p_seen of ``y`` (p,) under the forecast ensemble ``members`` (N, n), as in the module
    text; ``operator``: the network as the filter sees it (its assumed errors). The multiplicative
    inflation of ``settings["filter"]`` is applied first when the filter has one."""
    if "inflation" in settings["filter"]:
        members = inflate_anomalies(members, settings["filter"]["inflation"])
    white = operator.whiten(settings, y)
    n_members = members.shape[0]
    seen = jnp.ones(y.shape, bool) if white.seen is None else white.seen
    if white.covariance is None:
        variance = jnp.broadcast_to(white.variance, y.shape)
        log_det_r = jnp.sum(jnp.where(seen, jnp.log(variance), 0.0))
        scale = jnp.sqrt(variance)
        observed = white.observe(members) / scale
        innovation = white.obs / scale
    else:  # correlated errors: whitened by the Cholesky factor (unseen rows decoupled, unit variance)
        log_det_r = jnp.linalg.slogdet(white.covariance)[1]
        observed, innovation = white.observe(members), white.obs
    anomalies = observed - observed.mean(axis=0)
    anomalies = jnp.where(seen, anomalies, 0.0)
    innovation = jnp.where(seen, innovation - observed.mean(axis=0), 0.0)
    precision = (n_members - 1.0) * jnp.eye(n_members) + anomalies @ anomalies.T
    factor = jnp.linalg.cholesky(precision)
    projected = jax.scipy.linalg.solve_triangular(factor, anomalies @ innovation, lower=True)
    quadratic = innovation @ innovation - projected @ projected
    log_det = log_det_r + 2.0 * jnp.sum(jnp.log(jnp.diagonal(factor))) - n_members * jnp.log(n_members - 1.0)
    count = jnp.sum(seen)
    return 0.5 * (quadratic + log_det + count * math.log(2.0 * math.pi)) / jnp.maximum(count, 1)


def analysis_rmse(members: jax.Array, truth: jax.Array) -> jax.Array:
    """sqrt(mean_j (xbar_j - x_t,j)^2) over the truth's resolved variables; members (N, n), truth (r,)."""
    mean = members[:, : truth.shape[0]].mean(axis=0)
    return jnp.sqrt(jnp.mean((mean - truth) ** 2))
