"""Finite-size ensemble Kalman filter (EnKF-N): the ETKF with the inflation its prior implies.

Bocquet (2011, Nonlin. Processes Geophys. 18, 735-750, eq. 20 and Sec. 4);
the dual form of Bocquet, Raanes & Hannart (2015, Nonlin. Processes Geophys.
22, 645-662). Integrating the unknown mean and covariance of the forecast
distribution out (Jeffreys hyperprior) makes the prior of the ensemble-space
weights w (x = xbar + X^T w, X (N, n) unnormalised anomalies) a heavy-tailed

    J_b(w) = (c / 2) ln(eps_N + w^T w),   eps_N = 1 + 1 / N,

in place of the ETKF's (N - 1) w^T w / 2, with the count c = N + 1 of
Bocquet, Raanes & Hannart (2015; from memory) by default, or c = N of
Bocquet (2011) with ``filter.prior_extra_count=0`` (c = N + prior_extra_count). With Y (N, p) observation anomalies,
G = Y R^-1 Y^T = V diag(lambda) V^T and b = V^T Y R^-1 (y - ybar), the
minimiser of J_b + (y - ybar - Y^T w)^T R^-1 (...) / 2 is w(zeta) =
V diag(1 / (zeta + lambda)) b for the zeta that minimises the scalar dual

    D(zeta) = -(1/2) sum_i b_i^2 / (zeta + lambda_i) + eps_N zeta / 2 + (c / 2) ln(c / zeta)

(constants dropped; from c ln(a) / 2 = min over zeta of zeta a / 2 + c ln(c / zeta) / 2 - c / 2)
over 0 < zeta <= c / eps_N; at its minimum zeta = c / (eps_N + |w|^2). The
ensemble is then transformed with the Hessian of the primal cost at w_a,

    H = zeta I + G - (2 zeta^2 / c) w_a w_a^T,   W = sqrt(N - 1) H^(-1/2),
    x_a,i = xbar + sum_j (w_a,j + W_ji) X_j,

so zeta plays the role of (N - 1) / inflation^2 of the ETKF: the implied
anomaly inflation sqrt((N - 1) / zeta) is reported as ``inflation``.
"""

from dataclasses import dataclass

import jax
import jax.numpy as jnp

from assimbench.config.spec import FilterSpec
from assimbench.filters.base import Filter
from assimbench.filters.kalman.ensemble_space import ensemble_space, symmetric_square_root_transform, transform_members
from assimbench.filters.kalman.inflation import (
    INFLATION_SPEC_FIELDS,
    InflationConfig,
    check_inflation,
    ensemble_filter,
    inflation_pieces,
)

GRID_POINTS = 64  # coarse search of the dual over log(zeta), then Newton steps
NEWTON_STEPS = 8


def dual_cost(zeta, evals, b, members: int, count: float):
    """D(zeta) above (constants dropped); evals, b (N,); count c."""
    eps = 1.0 + 1.0 / members
    return -0.5 * jnp.sum(b**2 / (zeta + evals)) + 0.5 * eps * zeta + 0.5 * count * jnp.log(count / zeta)


def minimise_dual(evals, b, members: int, count: float):
    """zeta minimising D on (0, c / eps_N]: the best point of a log grid, refined by safeguarded
    Newton steps on D'(zeta) = (1/2) sum b^2 / (zeta + lambda)^2 + eps / 2 - c / (2 zeta)."""
    top = count / (1.0 + 1.0 / members)
    grid = top * jnp.logspace(-6.0, 0.0, GRID_POINTS)
    costs = jax.vmap(lambda z: dual_cost(z, evals, b, members, count))(grid)
    best = jnp.argmin(costs)
    low = grid[jnp.maximum(best - 1, 0)]
    high = grid[jnp.minimum(best + 1, GRID_POINTS - 1)]

    def newton(zeta, _):
        first = 0.5 * jnp.sum(b**2 / (zeta + evals) ** 2) + 0.5 * (1.0 + 1.0 / members) - 0.5 * count / zeta
        second = -jnp.sum(b**2 / (zeta + evals) ** 3) + 0.5 * count / zeta**2
        step = jnp.where(second > 0, first / jnp.where(second > 0, second, 1.0), 0.0)
        return jnp.clip(zeta - step, low, high), None

    zeta, _ = jax.lax.scan(newton, grid[best], None, length=NEWTON_STEPS)
    # Keep the grid point if the refinement did not improve the cost (a boundary minimum).
    return jnp.where(dual_cost(zeta, evals, b, members, count) <= costs[best], zeta, grid[best])


def enkfn_analysis(members, obs_members, y, error_var, extra_count: int = 1):
    """One EnKF-N analysis of ``members`` (N, n); obs_members (N, p); y (p,); error_var scalar;
    the prior count c = N + extra_count. Returns (analysis members (N, n), zeta)."""
    n_members = members.shape[0]
    space = ensemble_space(members, obs_members, error_var)
    gram = space.scaled @ space.obs_anomalies.T  # G = Y R^-1 Y^T, (N, N)
    evals, evecs = jnp.linalg.eigh(gram)
    evals = jnp.maximum(evals, 0.0)  # G is positive semi-definite; remove rounding below zero
    b = evecs.T @ (space.scaled @ (y - space.obs_mean))
    count = float(n_members + extra_count)
    zeta = minimise_dual(evals, b, n_members, count)
    weights_mean = evecs @ (b / (zeta + evals))
    hessian = zeta * jnp.eye(n_members) + gram - (2.0 * zeta**2 / count) * jnp.outer(weights_mean, weights_mean)
    h_evals, h_evecs = jnp.linalg.eigh(hessian)
    # At the minimum H is positive semi-definite; a floor guards the square root against rounding.
    h_evals = jnp.maximum(h_evals, 1e-8 * zeta)
    return transform_members(space, weights_mean, symmetric_square_root_transform(h_evals, h_evecs)), zeta


def make_enkfn(operator, members: int, pieces=frozenset(), extra_count: int = 1) -> Filter:
    """EnKF-N with prior count N + extra_count; the other inflation pieces still compose (off by default)."""

    def update(key, prior, y, settings):
        del key
        white = operator.whiten(settings, y)
        posterior, zeta = enkfn_analysis(prior, white.observe(prior), white.obs, white.variance, extra_count)
        return posterior, {"inflation": jnp.sqrt((members - 1.0) / zeta)}

    return ensemble_filter("enkfn", members, update, pieces, reports_inflation=True)


@dataclass
class EnKFNConfig(InflationConfig):
    """Finite-size EnKF (Bocquet 2011): the inflation is implied by the prior, none to tune; the
    prior's count is members + prior_extra_count (1: Bocquet et al. 2015; 0: Bocquet 2011)."""

    name: str = "enkfn"
    inflation: float = 1.0
    prior_extra_count: int = 1


def _check(c, model) -> None:
    check_inflation(c)
    allowed = "0 (count N, Bocquet 2011) or 1 (N + 1, Bocquet et al. 2015)"
    c.integer("prior_extra_count", 0, allowed, maximum=1)


SPEC = FilterSpec(
    name="enkfn",
    schema=EnKFNConfig,
    build=lambda node, ctx: make_enkfn(ctx.operator, int(node.members), inflation_pieces(node),
                                       int(node.prior_extra_count)),
    **{**INFLATION_SPEC_FIELDS, "check": _check},
    reports_inflation=lambda node: True,
)
