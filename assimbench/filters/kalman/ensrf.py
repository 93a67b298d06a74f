"""Serial ensemble square-root filter with Schur-product localization.

Whitaker & Hamill (2002, Mon. Wea. Rev. 130, 1913-1924), eq. 4-13: the
observations are assimilated one at a time (a scan over observations); the
gain is tapered elementwise by the Gaspari-Cohn weight of the distance from
the observation (Houtekamer & Mitchell 2001, Mon. Wea. Rev. 129). The
predicted observations h(x_i) are carried as extra state components and
updated with the state, so a nonlinear h is evaluated once per analysis.
Estimated parameters (assimbench/estimation) are global: they are carried as
further state components with taper weight 1 for every observation.
"""

from dataclasses import dataclass

import jax
import jax.numpy as jnp
import numpy as np

from assimbench.config.spec import FilterSpec
from assimbench.filters.base import Filter
from assimbench.filters.kalman import inflation
from assimbench.localization import gaspari_cohn, radius_of, radius_setting, ring_distance, with_radius_check


def ensrf_analysis(members, obs_members, y, error_var, taper):
    """Serial EnSRF analysis; members (N, n), obs_members (N, p), y (p,), error_var r scalar or (p,)
    (R diagonal: one station at a time).

    taper (p, n + p): localization weight of observation j on every
    component of the augmented state [x, h(x)]. For observation j with
    predicted anomalies a_j (N,) and variance s = a_j.a_j / (N - 1):

        K_j = taper_j * cov(z, a_j) / (s + r)
        zbar <- zbar + K_j (y_j - mean_j)
        z'_i <- z'_i - alpha K_j a_ij,  alpha = 1 / (1 + sqrt(r / (s + r)))   (W&H 2002, eq. 13)
    """
    assimilate = _serial_step(members.shape[1])
    state, _ = jax.lax.scan(lambda z, inputs: (assimilate(z, inputs)[0], None),
                            jnp.concatenate([members, obs_members], axis=1),
                            _serial_inputs(y, taper, error_var))
    return state[:, : members.shape[1]]


def ensrf_steps(members, obs_members, y, error_var, taper) -> dict:
    """:func:`ensrf_analysis` step by step, for reference vectors (assimbench/vectors/quantities.py):
    h(x_b,i), the innovation, the localization weights on the state (n, p), and after each observation
    j its gain K_j and the ensemble mean (p, n), then the analysis."""
    size = members.shape[1]
    assimilate = _serial_step(size)
    state, (gains, means) = jax.lax.scan(assimilate, jnp.concatenate([members, obs_members], axis=1),
                                         _serial_inputs(y, taper, error_var))
    return {"predicted_observations": obs_members, "innovation": y - obs_members.mean(axis=0),
            "localization_weights": taper[:, :size].T, "serial_gain": gains[:, :size],
            "serial_mean": means[:, :size], "analysis_ensemble": state[:, :size]}


def _serial_inputs(y, taper, error_var):
    return jnp.arange(y.shape[0]), y, taper, jnp.broadcast_to(error_var, y.shape)


def _serial_step(size: int):
    """One observation of :func:`ensrf_analysis`: ``assimilate(augmented (N, n + p), (j, y_j, taper_j, r_j))
    -> (augmented, (gain K_j, mean after it))``, ``size`` = n."""

    def assimilate(augmented, inputs):
        j, value, weights, error_var = inputs
        n_members = augmented.shape[0]
        mean = augmented.mean(axis=0)
        anomalies = augmented - mean
        predicted = anomalies[:, size + j]
        variance = predicted @ predicted / (n_members - 1)
        gain = weights * (anomalies.T @ predicted) / ((n_members - 1) * (variance + error_var))
        alpha = 1.0 / (1.0 + jnp.sqrt(error_var / (variance + error_var)))
        mean = mean + gain * (value - mean[size + j])
        anomalies = anomalies - alpha * predicted[:, None] * gain[None, :]
        return mean + anomalies, (gain, mean)

    return assimilate


def make_ensrf_with_steps(model, operator, members: int, radius: float | None, pieces=frozenset()) -> tuple:
    """(the serial EnSRF, its step record for reference vectors (FilterSpec.steps)); ``radius=None``
    switches localization off (weights 1)."""
    size = model.size
    positions = np.concatenate([np.arange(size, dtype=np.float64), operator.positions])
    distance = ring_distance(operator.positions[:, None], positions[None, :], size)  # (p, n + p)

    def tapers(settings):
        """(p, n + p): each observation's weight on the state and on the predicted observations."""
        if radius is None:
            return jnp.ones(distance.shape)
        return gaspari_cohn(distance / settings["filter"]["radius"])

    def tapered(settings, blocks: int = 1, global_columns: int = 0):
        """(p, B n + q + p): each observation's weight on B blocks of the state, q global columns (weight
        1) and the predicted observations."""
        taper = tapers(settings)
        return jnp.concatenate([jnp.tile(taper[:, :size], (1, blocks)), jnp.ones((taper.shape[0], global_columns)),
                                taper[:, size:]], axis=1)

    def analysed(prior, y, settings, global_columns: int = 0):
        """The serial EnSRF of ``prior`` (N, B n + q): B blocks of the state (a fixed-lag smoother's
        earlier states after the current one), each variable tapered at its own grid point, then q
        global columns (estimated parameters) with weight 1 for every observation."""
        white = operator.whiten(settings, y)
        taper = tapered(settings, (prior.shape[1] - global_columns) // size, global_columns)
        # A correlated R: the whitened observations L^-1 y are processed one by one, each tapered at the
        # position of the station of its row (row j of L^-1 mixes stations 1..j, mostly j).
        return ensrf_analysis(prior, white.observe(prior), white.obs, white.variance, taper)

    def update(key, prior, y, settings):
        del key
        return analysed(prior, y, settings), {}

    def global_update(key, prior, parameters, y, settings):
        del key
        both = analysed(jnp.concatenate([prior, parameters], axis=1), y, settings, parameters.shape[1])
        return both[:, :size], both[:, size:], {}

    def update_steps(key, prior, y, settings):
        del key
        white = operator.whiten(settings, y)
        return ensrf_steps(prior, white.observe(prior), white.obs, white.variance, tapered(settings))

    filt = inflation.ensemble_filter("ensrf", members, update, pieces, global_update=global_update)
    return filt, inflation.steps_with_inflation(update_steps, pieces)


@dataclass
class EnSRFConfig(inflation.InflationConfig):
    """Serial EnSRF (Whitaker & Hamill 2002); radius as for the LETKF (null: no localization)."""

    name: str = "ensrf"
    radius: float | None = 4.0


def make_ensrf(model, operator, members: int, radius: float | None, pieces=frozenset()) -> Filter:
    """Serial EnSRF; ``radius=None`` switches localization off (weights 1)."""
    return make_ensrf_with_steps(model, operator, members, radius, pieces)[0]


SPEC = FilterSpec(
    name="ensrf",
    schema=EnSRFConfig,
    build=lambda node, ctx: make_ensrf(ctx.model, ctx.operator, int(node.members), radius_of(node),
                                       inflation.inflation_pieces(node)),
    settings=lambda node: {**inflation.inflation_settings(node), **radius_setting(node)},
    check=with_radius_check(inflation.check_inflation),
    traced=inflation.INFLATION_KEYS + ("radius",),
    widest=inflation.WIDEST + ("radius",),
    kalman_exact=True,
    smoothable=lambda node: True,
    estimates=True,
    steps=lambda node, ctx: make_ensrf_with_steps(ctx.model, ctx.operator, int(node.members), radius_of(node),
                                                  inflation.inflation_pieces(node))[1],
)
