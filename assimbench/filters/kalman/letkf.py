"""Local ensemble transform Kalman filter with R-localization.

Hunt, Kostelich & Szunyogh (2007, Physica D 230), sec. 2.3 and eq. 15-24
applied at every grid point: the local observation error variances are
divided by the Gaspari-Cohn weight of the distance between grid point and
observation (Hunt et al. 2007, sec. 2.3, "observation localization"), so
distant observations fade out smoothly. The local analyses are one batched
computation over grid points, never a Python loop.

A correlated R is localized through its local block R_g (the rows and
columns of the observations grid point g sees) in the symmetric form

    R_g^-1  ->  D_g^(1/2) R_g^-1 D_g^(1/2),   D_g = diag(rho_g),

which is Hunt et al.'s weighting rho_g / r when R_g is diagonal: the
tapered anomalies and innovations are whitened by the Cholesky factor of
R_g (a choice of the bench; tapering R_g^-1 entry by entry is another).

Estimated parameters (assimbench/estimation) are global: every local
analysis g updates them with its own weights and no distance taper,
p_a,g = pbar + P'^T (wbar_g + W_g), and the analysis is the mean of those n
local analyses over the grid points,

    p_a = pbar + P'^T mean_g (wbar_g 1^T + W_g),

the spatially averaged update of global parameters in local ensemble
filters (reviewed by Ruiz, Pulido & Miyoshi 2013, J. Meteor. Soc. Japan 91,
79-99; from memory). It is linear in the weights, so one (N, N) mean of the
local transforms serves every parameter.
"""

from dataclasses import dataclass

import jax
import jax.numpy as jnp
import numpy as np
from jax.scipy.linalg import solve_triangular

from assimbench.config.spec import FilterSpec
from assimbench.filters.base import Filter
from assimbench.filters.kalman.adaptive import (
    ADAPTIVE_KEYS,
    AdaptiveInflationConfig,
    adaptive_ensemble_filter,
    adaptive_inflation_settings,
    check_adaptive_inflation,
)
from assimbench.filters.kalman.ensemble_space import ensemble_space
from assimbench.filters.kalman.inflation import (
    INFLATION_KEYS,
    WIDEST,
    ensemble_filter,
    inflation_pieces,
    steps_with_inflation,
)
from assimbench.filters.kalman.precision_solvers import check_transform_solver, solve_precision, spectral_apply
from assimbench.localization import gaspari_cohn, radius_of, radius_setting, ring_distance, with_radius_check
from assimbench.observations.operators import decoupled


def local_windows(state_size: int, positions: np.ndarray, window_radius: float | None):
    """Static table of the observations each grid point may see.

    Returns (index (n, K) int, distance (n, K), mask (n, K) bool): for grid
    point g the K observations within 2 * window_radius (all of them when
    window_radius is None), padded with masked entries.
    """
    grid = np.arange(state_size, dtype=np.float64)
    distance = ring_distance(grid[:, None], positions[None, :], state_size)  # (n, p)
    inside = np.ones_like(distance, dtype=bool) if window_radius is None else distance < 2.0 * window_radius
    width = max(1, int(inside.sum(axis=1).max()))
    index = np.zeros((state_size, width), dtype=np.int64)
    mask = np.zeros((state_size, width), dtype=bool)
    for g in range(state_size):  # build-time table, not a hot path
        chosen = np.flatnonzero(inside[g])
        index[g, : chosen.size] = chosen
        mask[g, : chosen.size] = True
    return index, np.take_along_axis(distance, index, axis=1), mask


def local_error_blocks(covariance, local_index, local_mask):
    """R_g (n, K, K): the block of R (p, p) between the observations grid point g sees (local_index,
    local_mask (n, K) from :func:`local_windows`), the padding decoupled with unit variance."""
    return decoupled(covariance[local_index[:, :, None], local_index[:, None, :]], local_mask)


def letkf_whitened(members, white, local_index, local_weight, local_mask, solver: str = "eigh"):
    """:func:`letkf_analysis` of ``members`` in the frame ``white`` gives
    (:meth:`assimbench.observations.operators.ObservationOperator.whiten`): R's diagonal as it is, or
    a correlated R by its local blocks."""
    if white.covariance is None:
        return letkf_analysis(members, white.observe(members), white.obs, white.variance, local_index,
                              local_weight, solver)
    return letkf_analysis(members, white.operator(members), white.y, 1.0, local_index, local_weight, solver,
                          local_error_blocks(white.covariance, local_index, local_mask))


def letkf_analysis(members, obs_members, y, error_var, local_index, local_weight, solver: str = "eigh",
                   local_cov=None):
    """LETKF analysis of ``members`` (N, n) with local observation weights.

    obs_members (N, p); y (p,); error_var scalar or (p,); local_index (n, K) which
    observations grid point g sees; local_weight (n, K) their localization
    weights rho in [0, 1] (0 for padding). At grid point g, with local
    anomalies Y_g (N, K) and R_g^-1 = diag(rho_g) / error_var:

        A_g = (N - 1) I + Y_g R_g^-1 Y_g^T,
        wbar_g = A_g^-1 Y_g R_g^-1 (y_g - ybar_g),  W_g = sqrt(N - 1) A_g^(-1/2),
        x_a[:, g] = xbar_g + X[:, g] . wbar_g + W_g X[:, g].

    With ``local_cov`` (n, K, K) the local blocks R_g of a correlated R (error_var unused), R_g^-1
    above is D_g^(1/2) R_g^-1 D_g^(1/2) with D_g = diag(rho_g) (module docstring).

    Every grid point's A_g has N - 1 as its smallest eigenvalue. ``solver="eigh"`` decomposes the n
    matrices (a loop of LAPACK calls) and applies W_g without forming it; ``"newton_schulz"`` forms
    every A_g^-1 and A_g^(-1/2) as one batched chain of matrix products
    (:mod:`assimbench.filters.kalman.precision_solvers`).

    ``members`` may be (N, B n): B blocks of the n grid points, the first the state being analysed
    and the others earlier states of a fixed-lag smoother, which take grid point g's weights and
    transform at their own grid point g.
    """
    n_grid = local_index.shape[0]
    if members.shape[1] != n_grid:
        return _letkf_blocks(members, obs_members, y, error_var, local_index, local_weight, solver, local_cov)
    n_members = members.shape[0]
    space = ensemble_space(members, obs_members, 1.0)
    mean, anomalies = space.mean, space.anomalies  # anomalies (N, n)
    precision, rhs = local_systems(space, y, error_var, local_index, local_weight, local_cov)
    column = anomalies.T  # (n, N): the anomalies of each grid point
    if solver == "eigh":
        evals, evecs = jax.lax.stop_gradient(jnp.linalg.eigh(precision))  # batched over grid points
        # A_g^-1 rhs_g and A_g^(-1/2) X[:, g] without forming either; differentiable where eigenvalues repeat
        weights_mean, rooted = spectral_apply(precision, evecs, evals, rhs, column)
        transformed = jnp.sqrt(n_members - 1.0) * rooted  # W_g X[:, g]
    else:
        solved = solve_precision(precision, n_members - 1.0, solver)
        weights_mean = solved.apply_inverse(rhs)
        transformed = jnp.sqrt(n_members - 1.0) * jnp.einsum("gij,gj->gi", solved.inverse_root(), column)
    update = jnp.sum(weights_mean * column, axis=1)  # (n,)
    return mean + update[None, :] + transformed.T


def local_systems(space, y, error_var, local_index, local_weight, local_cov=None):
    """Every grid point's A_g (n, N, N) and right-hand side Y_g R_g^-1 (y_g - ybar_g) (n, N), from the
    observation-space part of ``space`` (:func:`letkf_analysis`)."""
    n_members = space.obs_anomalies.shape[0]
    local_y = jnp.moveaxis(space.obs_anomalies[:, local_index], 1, 0)  # (n, N, K)
    if local_cov is not None:
        root = jnp.linalg.cholesky(local_cov)  # (n, K, K)
        taper = jnp.sqrt(local_weight)
        whitened = solve_triangular(root, jnp.swapaxes(local_y * taper[:, None, :], 1, 2), lower=True)  # (n, K, N)
        departures = solve_triangular(root, ((y - space.obs_mean)[local_index] * taper)[..., None], lower=True)
        precision = (n_members - 1) * jnp.eye(n_members) + jnp.einsum("gki,gkj->gij", whitened, whitened)
        return precision, jnp.einsum("gki,gk->gi", whitened, departures[..., 0])
    # R diagonal: a scalar variance, or one per station, taken for each grid point's window.
    local_var = error_var if jnp.ndim(error_var) == 0 else error_var[local_index]
    scaled = local_y * (local_weight / local_var)[:, None, :]
    precision = (n_members - 1) * jnp.eye(n_members) + jnp.einsum("gik,gjk->gij", scaled, local_y)
    return precision, jnp.einsum("gik,gk->gi", scaled, (y - space.obs_mean)[local_index])


def local_transforms(members, obs_members, y, error_var, local_index, local_weight, solver, local_cov=None):
    """Every grid point's weights (n, N, N), wbar_g 1^T + W_g, of :func:`letkf_analysis`:
    x_a[i, g] = xbar_g + sum_j weights[g, j, i] X[j, g]; ``members`` (N, n)."""
    n_members = members.shape[0]
    precision, rhs = local_systems(ensemble_space(members, obs_members, 1.0), y, error_var, local_index,
                                   local_weight, local_cov)
    solved = solve_precision(precision, n_members - 1.0, solver)
    return solved.apply_inverse(rhs)[:, :, None] + solved.inverse_root(jnp.sqrt(n_members - 1.0))


def _letkf_blocks(members, obs_members, y, error_var, local_index, local_weight, solver, local_cov=None):
    """:func:`letkf_analysis` of B blocks of n grid points, (N, B n): the first block is analysed and
    every block takes the first block's local weights and transforms, grid point by grid point."""
    n_members, width = members.shape
    n_grid = local_index.shape[0]
    blocks = members.reshape(n_members, width // n_grid, n_grid)
    mean = blocks.mean(axis=0)  # (B, n)
    anomalies = blocks - mean
    weights = local_transforms(members[:, :n_grid], obs_members, y, error_var, local_index, local_weight, solver,
                               local_cov)
    # x_a[i, b, g] = mean[b, g] + sum_j (wbar_g,j + W_g,ji) X[j, b, g]
    analysed = mean + jnp.einsum("gji,jbg->ibg", weights, anomalies)
    return analysed.reshape(n_members, width)


def letkf_with_parameters(members, parameters, white, local_index, local_weight, local_mask, solver: str = "eigh"):
    """(analysed members (N, n), analysed parameters (N, q)): the LETKF analysis of ``members`` in the
    frame ``white`` (:func:`letkf_whitened`), and of the global ``parameters`` with the mean over grid
    points of the local transforms (module docstring)."""
    if white.covariance is None:
        args = (white.observe(members), white.obs, white.variance, local_index, local_weight, solver)
    else:
        args = (white.operator(members), white.y, 1.0, local_index, local_weight, solver,
                local_error_blocks(white.covariance, local_index, local_mask))
    weights = local_transforms(members, *args)  # (n, N, N)
    mean = members.mean(axis=0)
    analysed = mean + jnp.einsum("gji,jg->ig", weights, members - mean)
    centre = parameters.mean(axis=0)
    return analysed, centre + weights.mean(axis=0).T @ (parameters - centre)


def localization_of(model, operator, radius: float | None):
    """(index, mask, ``local_weight(settings)``): the static windows of :func:`local_windows` (2c wide for
    the configured ``radius`` c) and the traced Gaspari-Cohn weights inside them (n, K); every
    weight 1 without localization (``radius`` None)."""
    index, distance, mask = local_windows(model.size, operator.positions, radius)

    def local_weight(settings):
        if radius is None:
            return jnp.asarray(mask, dtype=jnp.float64)
        return jnp.where(mask, gaspari_cohn(distance / settings["filter"]["radius"]), 0.0)

    return index, mask, local_weight


def make_letkf_steps(model, operator, radius: float | None, pieces=frozenset(), solver: str = "eigh"):
    """The LETKF's step record ``steps(key, state, y, settings) -> dict`` (FilterSpec.steps; R diagonal)."""
    index, _, local_weight = localization_of(model, operator, radius)

    def update_steps(key, prior, y, settings):
        del key
        white = operator.whiten(settings, y)
        return letkf_steps(prior, white.observe(prior), white.obs, white.variance, index, local_weight(settings),
                           solver)

    return steps_with_inflation(update_steps, pieces)


def letkf_steps(members, obs_members, y, error_var, local_index, local_weight, solver: str = "eigh") -> dict:
    """:func:`letkf_analysis` (R diagonal) step by step, for reference vectors
    (assimbench/vectors/quantities.py): h(x_b,i), the innovation, the localization weights rho_gj
    (n, p) dense, every grid point's A_g, wbar_g and W_g, and the analysis, in that order."""
    n_members, n_grid = members.shape
    space = ensemble_space(members, obs_members, 1.0)
    # Padding entries of a window carry weight 0, so adding them leaves their station's weight alone.
    dense = jnp.zeros((n_grid, obs_members.shape[1])).at[jnp.arange(n_grid)[:, None], local_index].add(local_weight)
    precision, rhs = local_systems(space, y, error_var, local_index, local_weight)
    solved = solve_precision(precision, n_members - 1.0, solver)
    weights_mean, transform = solved.apply_inverse(rhs), solved.inverse_root(jnp.sqrt(n_members - 1.0))
    # x_a[i, g] = xbar_g + sum_j (wbar_g,j + W_g,ij) X[j, g]  (W_g symmetric)
    analysed = space.mean + jnp.einsum("gij,jg->ig", weights_mean[:, None, :] + transform, space.anomalies)
    return {"predicted_observations": obs_members, "innovation": y - space.obs_mean, "localization_weights": dense,
            "local_precision": precision, "local_mean_weights": weights_mean, "local_transform": transform,
            "analysis_ensemble": analysed}


def make_letkf(model, operator, members: int, radius: float | None, pieces=frozenset(),
               adaptive: bool = False, solver: str = "eigh") -> Filter:
    """LETKF on a ring model. ``radius`` (the configured c) fixes the static observation window
    (2c); the traced ``settings["filter"]["radius"]`` sets the taper inside it. With
    ``radius=None`` every grid point sees every observation with weight 1."""
    index, mask, local_weight = localization_of(model, operator, radius)

    def update(key, prior, y, settings):
        del key
        return letkf_whitened(prior, operator.whiten(settings, y), index, local_weight(settings), mask, solver), {}

    def global_update(key, prior, parameters, y, settings):
        del key
        white = operator.whiten(settings, y)
        return *letkf_with_parameters(prior, parameters, white, index, local_weight(settings), mask, solver), {}

    if adaptive:  # one factor per grid point, from the observations it sees (assimbench/filters/adaptive.py)
        windows = lambda settings: (index, local_weight(settings))
        return adaptive_ensemble_filter("letkf", members, update, operator, pieces, windows, model.size,
                                        global_update)
    return ensemble_filter("letkf", members, update, pieces, global_update=global_update)


@dataclass
class LETKFConfig(AdaptiveInflationConfig):
    """LETKF; radius is the Gaspari-Cohn half-width c in grid units (weights reach zero at 2c;
    null: no localization); transform_solver: eigh, or newton_schulz (matrix products only)."""

    name: str = "letkf"
    radius: float | None = 4.0
    transform_solver: str = "eigh"


def _build(node, ctx) -> Filter:
    return make_letkf(ctx.model, ctx.operator, int(node.members), radius_of(node), inflation_pieces(node),
                      bool(node.adaptive), str(node.transform_solver))


SPEC = FilterSpec(
    name="letkf",
    schema=LETKFConfig,
    build=_build,
    settings=lambda node: {**adaptive_inflation_settings(node), **radius_setting(node)},
    check=with_radius_check(lambda c: (check_adaptive_inflation(c), check_transform_solver(c))),
    traced=INFLATION_KEYS + ("radius",) + ADAPTIVE_KEYS[:1],
    widest=WIDEST + ("radius",),
    kalman_exact=True,
    reports_inflation=lambda node: bool(node.adaptive),
    smoothable=lambda node: True,
    estimates=True,
    steps=lambda node, ctx: make_letkf_steps(ctx.model, ctx.operator, radius_of(node), inflation_pieces(node),
                                             str(node.transform_solver)),
)
