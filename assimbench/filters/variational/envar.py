"""3DEnVar: a variational analysis of the mean with a hybrid static/ensemble background covariance.

The background covariance blends the static climatological one with the
localized ensemble one (Hamill & Snyder 2000, Mon. Wea. Rev. 128, 2905-2919;
Lorenc 2003, Q. J. R. Meteorol. Soc. 129, 3183-3203; Buehner 2005, Q. J. R.
Meteorol. Soc. 131, 1013-1043; citations from memory):

    B = (1 - beta) s B_c + beta (P_e o C),

B_c the forecast model's climatological covariance (the 3D-Var's), s
``static_scale``, P_e = X^T X / (N - 1) the inflated forecast ensemble's
covariance (X (N, n) its anomalies), C_ij = GC(d_ij / radius) the
Gaspari-Cohn taper of ring distance (all ones without localization) and
beta = ``ensemble_weight``. In the control variable v of the square-root
preconditioning x = x_b + U v, U U^T = B with U = [sqrt((1 - beta) s) L_c,
sqrt(beta / (N - 1)) Z] (L_c L_c^T = B_c; Z the modulated ensemble, columns
x'_k o c_j for c_j the columns of a square root of C: Lorenc 2003, the
alpha control variable), the cost

    J(v) = 1/2 |v|^2 + 1/2 (y - h(x_b + U v))^T R^-1 (y - h(...))

has, for a linear h, the minimiser v* = U^T H^T (H B H^T + R)^-1 d, d = y -
h(x_b), so x_a = x_b + B H^T (H B H^T + R)^-1 d: the bench forms B (n, n)
from its two parts, solves in observation space (p, p) and never inverts an
n x n matrix. For a nonlinear h, ``iterations`` Gauss-Newton steps, each the
exact minimiser with h linearised at the current iterate, as the 3D-Var
(:mod:`assimbench.filters.variational.threedvar`). With beta = 0 this is the
3D-Var with b_scale = s; with beta = 1 and no localization the mean is the
ETKF's (both minimise the same quadratic; tested).

The members: the ETKF's perturbation update (the LETKF's with the same
radius, when localized; transforms by Newton-Schulz products, see
:mod:`assimbench.filters.variational.hybrid`)
of the inflated forecast ensemble, recentred on the
variational mean x_a (common practice in hybrid systems: the ensemble keeps
its own analysis of the spread, the mean comes from the variational
analysis). The inflation pieces act as for every ensemble filter.
"""

from dataclasses import dataclass

import jax.numpy as jnp
import numpy as np

from assimbench.config.spec import FilterSpec
from assimbench.filters.kalman.inflation import (
    WIDEST,
    InflationConfig,
    check_inflation,
    ensemble_filter,
    inflation_pieces,
)
from assimbench.filters.variational.hybrid import (
    HYBRID_TRACED,
    check_hybrid_weights,
    hybrid_settings,
    make_perturbation_update,
    recentred,
)
from assimbench.filters.variational.threedvar import gauss_newton_3dvar
from assimbench.localization import check_radius, gaspari_cohn, radius_of, ring_distance
from assimbench.models.climatology import climatology


def hybrid_covariance(members, climate_cov, ensemble_weight, static_scale, taper):
    """B = (1 - beta) s B_c + beta (P_e o C), (n, n); members (N, n) the inflated forecast ensemble,
    climate_cov B_c (n, n), taper C (n, n) (ones: no localization)."""
    anomalies = members - members.mean(axis=0)
    ensemble_cov = anomalies.T @ anomalies / (members.shape[0] - 1.0)
    return (1.0 - ensemble_weight) * static_scale * climate_cov + ensemble_weight * ensemble_cov * taper


def make_3denvar(model, operator, climate_cov, members: int, radius: float | None, iterations: int,
                 pieces=frozenset()):
    """3DEnVar of the module docstring; settings["filter"] carries ensemble_weight, static_scale,
    radius (traced) and the inflation pieces. ``radius`` (the configured one) fixes the LETKF's
    static observation windows (2 radius); None: no localization anywhere."""
    climate_cov = jnp.asarray(climate_cov)
    steps = 1 if operator.linear else iterations
    perturbation_update = make_perturbation_update(model.size, operator, radius)
    if radius is not None:
        grid = np.arange(model.size, dtype=np.float64)
        grid_distance = jnp.asarray(ring_distance(grid[:, None], grid[None, :], model.size))

    def update(key, prior, y, settings):
        del key  # deterministic
        f = settings["filter"]
        white = operator.whiten(settings, y)
        taper = 1.0 if radius is None else gaspari_cohn(grid_distance / f["radius"])
        b_cov = hybrid_covariance(prior, climate_cov, f["ensemble_weight"], f["static_scale"], taper)
        mean = gauss_newton_3dvar(prior.mean(axis=0), white.obs, b_cov, white.variance, white.observe, steps)[-1]
        return recentred(mean, perturbation_update(prior, white, f)), {}

    return ensemble_filter("3denvar", members, update, pieces)


@dataclass
class ThreeDEnVarConfig(InflationConfig):
    """3DEnVar: B = (1 - ensemble_weight) static_scale B_c + ensemble_weight (P_e o C); radius the
    Gaspari-Cohn half-width of C and of the LETKF perturbation update (null: none); iterations of
    Gauss-Newton for a nonlinear h."""

    name: str = "3denvar"
    members: int = 10
    inflation: float = 1.05
    ensemble_weight: float = 0.8
    static_scale: float = 0.005
    radius: float | None = 6.0
    iterations: int = 3


def check_3denvar(c, model) -> None:
    """Ranges of the 3DEnVar's keys (the 4DEnVar's too, besides its window)."""
    check_inflation(c)
    check_hybrid_weights(c)
    check_radius(c, model)
    c.integer("iterations", 1, "an integer >= 1")


SPEC = FilterSpec(
    name="3denvar",
    schema=ThreeDEnVarConfig,
    build=lambda node, ctx: make_3denvar(ctx.model, ctx.operator, climatology(ctx.model)[1], int(node.members),
                                         radius_of(node), int(node.iterations), inflation_pieces(node)),
    settings=hybrid_settings,
    check=check_3denvar,
    traced=HYBRID_TRACED,
    widest=WIDEST + ("radius",),
    climatology=True,
)
