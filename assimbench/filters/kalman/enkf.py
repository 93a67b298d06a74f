"""Perturbed-observation (stochastic) EnKF.

Burgers, van Leeuwen & Evensen (1998, Mon. Wea. Rev. 126, 1719-1724);
Evensen (2003, Ocean Dynamics 53, eq. 37-44). Each member assimilates its own
perturbed copy of the observations, y + e_i with e_i ~ N(0, R).
"""

from dataclasses import dataclass

import jax
import jax.numpy as jnp
from jax.scipy.linalg import cho_factor, cho_solve

from assimbench.config.spec import FilterSpec
from assimbench.filters.base import Filter
from assimbench.filters.kalman.inflation import (
    INFLATION_SPEC_FIELDS,
    InflationConfig,
    ensemble_filter,
    inflation_pieces,
)


def enkf_analysis(members, obs_members, perturbed_y, error_var):
    """x_a,i = x_i + K (y + e_i - h(x_i)) with the ensemble gain K.

    members (N, n); obs_members (N, p); perturbed_y (N, p) rows y + e_i;
    error_var scalar or (p,). With anomalies X, Y:

        K d = X^T Y (Y^T Y + (N-1) R)^-1 d          (p x p system; used when p < N)
            = X^T A^-1 Y R^-1 d,  A = (N-1) I + Y R^-1 Y^T   (N x N; used otherwise)

    the two forms being equal by the push-through identity. The smaller
    system is chosen from the static shapes.
    """
    n_members, n_obs = obs_members.shape
    anomalies = members - members.mean(axis=0)
    obs_anomalies = obs_members - obs_members.mean(axis=0)
    innovations = perturbed_y - obs_members  # (N, p), row i is d_i
    if n_obs < n_members:
        variances = jnp.broadcast_to(error_var, (n_obs,))
        system = obs_anomalies.T @ obs_anomalies + (n_members - 1) * jnp.diag(variances)
        solved = cho_solve(cho_factor(system), innovations.T)  # (p, N): S^-1 d_i
        weights = obs_anomalies @ solved  # (N, N): column i is Y S^-1 d_i
    else:
        scaled = obs_anomalies / error_var
        precision = (n_members - 1) * jnp.eye(n_members) + scaled @ obs_anomalies.T
        weights = cho_solve(cho_factor(precision), scaled @ innovations.T)  # column i: A^-1 Y R^-1 d_i
    return members + weights.T @ anomalies


def make_enkf(operator, members: int, centre_perturbations: bool, pieces=frozenset()) -> Filter:
    """Perturbed-observation EnKF; ``centre_perturbations`` removes the perturbations' ensemble
    mean so the analysis mean is the Kalman update of the forecast mean (static choice)."""

    def update(key, prior, y, settings):
        white = operator.whiten(settings, y)
        perturbations = jax.random.normal(key, (members, operator.size))
        if centre_perturbations:
            perturbations = perturbations - perturbations.mean(axis=0)
        # Unit perturbations of the whitened observations are L e in y's frame: correlated as R is.
        perturbed = white.obs + white.std * perturbations
        return enkf_analysis(prior, white.observe(prior), perturbed, white.std**2), {}

    return ensemble_filter("enkf", members, update, pieces)


@dataclass
class EnKFConfig(InflationConfig):
    """Perturbed-observation EnKF (Burgers, van Leeuwen & Evensen 1998); centre_perturbations removes
    the perturbations' ensemble mean."""

    name: str = "enkf"
    inflation: float = 1.05
    centre_perturbations: bool = True


SPEC = FilterSpec(
    name="enkf",
    schema=EnKFConfig,
    build=lambda node, ctx: make_enkf(ctx.operator, int(node.members), bool(node.centre_perturbations),
                                      inflation_pieces(node)),
    **INFLATION_SPEC_FIELDS,
)
