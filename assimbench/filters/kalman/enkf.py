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
    steps_with_inflation,
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


def ensemble_gain(members, obs_members, error_var):
    """K = X^T Y (Y^T Y + (N - 1) R)^-1 (n, p), X and Y the anomalies of ``members`` (N, n) and
    ``obs_members`` (N, p): the gain :func:`enkf_analysis` applies (its p x p form)."""
    n_members, n_obs = obs_members.shape
    anomalies = members - members.mean(axis=0)
    obs_anomalies = obs_members - obs_members.mean(axis=0)
    system = obs_anomalies.T @ obs_anomalies + (n_members - 1) * jnp.diag(jnp.broadcast_to(error_var, (n_obs,)))
    return jnp.linalg.solve(system, obs_anomalies.T @ anomalies).T


def make_enkf_with_steps(operator, members: int, centre_perturbations: bool, pieces=frozenset()) -> tuple:
    """(the perturbed-observation EnKF, its step record for reference vectors (FilterSpec.steps));
    ``centre_perturbations`` removes the perturbations' ensemble mean so the analysis mean is the
    Kalman update of the forecast mean (static choice)."""

    def perturbed_observations(key, white):
        draws = jax.random.normal(key, (members, operator.size))
        perturbations = draws - draws.mean(axis=0) if centre_perturbations else draws
        # Unit perturbations of the whitened observations are L e in y's frame: correlated as R is.
        return draws, white.obs + white.std * perturbations

    def update(key, prior, y, settings):
        white = operator.whiten(settings, y)
        perturbed = perturbed_observations(key, white)[1]
        return enkf_analysis(prior, white.observe(prior), perturbed, white.std**2), {}

    def update_steps(key, prior, y, settings):
        white = operator.whiten(settings, y)
        draws, perturbed = perturbed_observations(key, white)
        predicted = white.observe(prior)
        return {"observation_perturbation_draws": draws, "predicted_observations": predicted,
                "innovation": white.obs - predicted.mean(axis=0), "perturbed_observations": perturbed,
                "gain": ensemble_gain(prior, predicted, white.std**2),
                "analysis_ensemble": enkf_analysis(prior, predicted, perturbed, white.std**2)}

    return ensemble_filter("enkf", members, update, pieces), steps_with_inflation(update_steps, pieces)


def make_enkf(operator, members: int, centre_perturbations: bool, pieces=frozenset()) -> Filter:
    """Perturbed-observation EnKF (:func:`make_enkf_with_steps`)."""
    return make_enkf_with_steps(operator, members, centre_perturbations, pieces)[0]


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
    steps=lambda node, ctx: make_enkf_with_steps(ctx.operator, int(node.members), bool(node.centre_perturbations),
                                                 inflation_pieces(node))[1],
    **INFLATION_SPEC_FIELDS,
)
