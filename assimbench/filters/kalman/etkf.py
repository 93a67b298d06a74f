"""Ensemble transform Kalman filter, symmetric square-root form.

Hunt, Kostelich & Szunyogh (2007, Physica D 230, 112-126), eq. 15-24 (the
global version of their algorithm). Members are rows: X_b is (N, n).
"""

from dataclasses import dataclass

import jax

from assimbench.config.spec import FilterSpec
from assimbench.filters.base import Filter
from assimbench.filters.kalman.adaptive import (
    ADAPTIVE_KEYS,
    AdaptiveInflationConfig,
    adaptive_ensemble_filter,
    adaptive_inflation_settings,
    check_adaptive_inflation,
)
from assimbench.filters.kalman.ensemble_space import (
    ensemble_space,
    mean_weights,
    precision,
    solve,
    square_root_transform,
    transform_members,
)
from assimbench.filters.kalman.inflation import (
    INFLATION_KEYS,
    WIDEST,
    ensemble_filter,
    inflation_pieces,
    steps_with_inflation,
)
from assimbench.filters.kalman.precision_solvers import check_transform_solver


def etkf_analysis(members: jax.Array, obs_members: jax.Array, y: jax.Array, error_var,
                  solver: str = "eigh") -> jax.Array:
    """One ETKF analysis of the ensemble ``members`` (N, n).

    obs_members: h applied to every member, (N, p); y: observations (p,);
    error_var: observation error variance, a scalar or (p,) (R is diagonal).
    With anomalies X (N, n) and Y (N, p) about the means xbar and ybar:

        A      = (N - 1) I + Y R^-1 Y^T           (N, N)
        P~a    = A^-1
        wbar   = P~a Y R^-1 (y - ybar)
        W      = sqrt(N - 1) A^(-1/2)             (symmetric square root)
        x_a,i  = xbar + sum_j (wbar_j + W_ji) X_j

    Any inflation must already be applied to ``members``. ``solver``: how A^-1 and A^(-1/2) are
    formed (:mod:`assimbench.filters.kalman.precision_solvers`). Returns (N, n).
    """
    space = ensemble_space(members, obs_members, error_var)
    solved = solve(space, solver)
    return transform_members(space, mean_weights(space, y, solved), square_root_transform(solved))


def etkf_steps(members: jax.Array, obs_members: jax.Array, y: jax.Array, error_var, solver: str = "eigh") -> dict:
    """:func:`etkf_analysis` step by step, for reference vectors (assimbench/vectors/quantities.py):
    h(x_b,i), the innovation, A, wbar, W, T = 1 wbar^T + W and the analysis, in that order."""
    space = ensemble_space(members, obs_members, error_var)
    solved = solve(space, solver)
    weights_mean, transform = mean_weights(space, y, solved), square_root_transform(solved)
    return {"predicted_observations": obs_members, "innovation": y - space.obs_mean,
            "ensemble_precision": precision(space), "mean_weights": weights_mean, "transform": transform,
            "analysis_weights": weights_mean[None, :] + transform,
            "analysis_ensemble": transform_members(space, weights_mean, transform)}


def make_etkf_steps(operator, pieces=frozenset(), solver: str = "eigh"):
    """The ETKF's step record ``steps(key, state, y, settings) -> dict`` (FilterSpec.steps)."""

    def update_steps(key, prior, y, settings):
        del key
        white = operator.whiten(settings, y)
        return etkf_steps(prior, white.observe(prior), white.obs, white.variance, solver)

    return steps_with_inflation(update_steps, pieces)


def make_etkf(operator, members: int, pieces=frozenset(), adaptive: bool = False, solver: str = "eigh") -> Filter:
    """ETKF with the inflation pieces of :mod:`assimbench.filters.inflation`; with ``adaptive`` the
    multiplicative factor is estimated every cycle (:mod:`assimbench.filters.adaptive`)."""

    def update(key, prior, y, settings):
        del key  # deterministic square-root filter
        white = operator.whiten(settings, y)
        return etkf_analysis(prior, white.observe(prior), white.obs, white.variance, solver), {}

    if adaptive:
        return adaptive_ensemble_filter("etkf", members, update, operator, pieces)
    return ensemble_filter("etkf", members, update, pieces)


@dataclass
class ETKFConfig(AdaptiveInflationConfig):
    """ETKF (Hunt et al. 2007) with the inflation pieces and optional adaptive inflation; transform_solver
    forms A^-1 and A^(-1/2) by eigh or by matrix products only (newton_schulz)."""

    name: str = "etkf"
    transform_solver: str = "eigh"


SPEC = FilterSpec(
    name="etkf",
    schema=ETKFConfig,
    build=lambda node, ctx: make_etkf(ctx.operator, int(node.members), inflation_pieces(node), bool(node.adaptive),
                                      str(node.transform_solver)),
    settings=adaptive_inflation_settings,
    check=lambda c, model: (check_adaptive_inflation(c), check_transform_solver(c)),
    traced=INFLATION_KEYS + ADAPTIVE_KEYS[:1],
    widest=WIDEST,
    kalman_exact=True,
    reports_inflation=lambda node: bool(node.adaptive),
    smoothable=lambda node: True,
    estimates=True,
    steps=lambda node, ctx: make_etkf_steps(ctx.operator, inflation_pieces(node), str(node.transform_solver)),
)
