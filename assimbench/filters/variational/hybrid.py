"""Parts shared by the hybrid ensemble-variational filters: the square-root factor of the hybrid
background covariance, the ensemble's perturbation update, and the sliding window that carries an
ensemble.

The hybrid covariance (Hamill & Snyder 2000, Mon. Wea. Rev. 128; Lorenc 2003, Q. J. R. Meteorol.
Soc. 129; Buehner 2005, Q. J. R. Meteorol. Soc. 131; citations from memory)

    B = (1 - beta) s B_c + beta (P_e o C),   P_e = X^T X / (N - 1)   (X (N, n) the anomalies)

has the square root U (n, m), U U^T = B, with the columns

    U = [sqrt((1 - beta) s) L_c,  sqrt(beta / (N - 1)) (x'_k o c_r) for k = 1..N, r = 1..n]

(L_c L_c^T = B_c the Cholesky factor; c_r the columns of a square root of C, the modulated
ensemble of Lorenc 2003's alpha control variable, since sum_r (x'_k o c_r)(x'_k o c_r)^T =
x'_k x'_k^T o C). Without localization the second block is sqrt(beta / (N - 1)) X^T, m = n + N.
On the ring C is circulant, so its symmetric square root is circulant too and comes from the
discrete Fourier transform of C's first row, with no eigendecomposition in the program. The
Gaspari-Cohn taper of ring distance is positive semi-definite while its support 4 radius fits on
the ring without overlapping itself (measured on 40 points: smallest eigenvalue 1.5e-4 at radius
10, -0.07 at 15); beyond, the root keeps the non-negative part of the spectrum, the nearest
positive semi-definite taper.
"""

from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from assimbench.config.spec import floats
from assimbench.filters.kalman.etkf import etkf_analysis
from assimbench.filters.kalman.inflation import INFLATION_KEYS, with_inflation
from assimbench.filters.kalman.letkf import letkf_whitened, local_windows
from assimbench.localization import gaspari_cohn, radius_setting, ring_distance

# The perturbation update forms its transforms by matrix products only. With LAPACK's batched eigh
# beside the variational solve in one program, 30 runs of 20 members deadlocked XLA's CPU runtime
# (every thread waiting, measured with jax 0.10.2; 10 members or the ETKF path did not); the
# products are tested against eigh cycle by cycle for the ETKF and LETKF.
SOLVER = "newton_schulz"


HYBRID_TRACED = INFLATION_KEYS + ("ensemble_weight", "static_scale", "radius")


def check_hybrid_weights(c) -> None:
    """The hybrid covariance's weight and static scale."""
    c.real("ensemble_weight", "a weight from 0 to 1", minimum=0.0, strict=False, maximum=1.0)
    c.real("static_scale", "a finite factor > 0", minimum=0.0)


def hybrid_settings(node) -> dict:
    """The traced settings of a hybrid filter: the inflation pieces, beta, s and the radius."""
    return {**floats(node, INFLATION_KEYS + ("ensemble_weight", "static_scale")), **radius_setting(node)}


def circulant_taper_root(size: int, radius):
    """The symmetric square root (n, n) of the Gaspari-Cohn taper C_ij = GC(d(i, j) / radius) on a
    ring of ``size`` points (d the ring distance), from the spectrum of its first row; negative
    eigenvalues (a support wider than the ring) are set to 0. ``radius`` may be traced."""
    grid = np.arange(size, dtype=np.float64)
    first_row = gaspari_cohn(jnp.asarray(ring_distance(0.0, grid, size)) / radius)
    # A real symmetric circulant's eigenvalues are the real DFT of its first row.
    root_row = jnp.fft.irfft(jnp.sqrt(jnp.maximum(jnp.fft.rfft(first_row).real, 0.0)), n=size)
    shifts = (grid[None, :] - grid[:, None]) % size
    return root_row[jnp.asarray(shifts, dtype=jnp.int32)]


def hybrid_factor(anomalies, climate_factor, ensemble_weight, static_scale, taper_root):
    """U (n, m) with U U^T = (1 - beta) s B_c + beta (P_e o C) (module docstring); anomalies (N, n)
    centred, climate_factor L_c (n, n), taper_root C^(1/2) (n, n) or None (no localization)."""
    count = anomalies.shape[0]
    if taper_root is None:
        ensemble_part = anomalies.T
    else:  # columns x'_k o c_r, member-major: (n, N n)
        ensemble_part = (anomalies[:, :, None] * taper_root[None, :, :]).transpose(1, 0, 2).reshape(
            anomalies.shape[1], -1)
    return jnp.concatenate([jnp.sqrt((1.0 - ensemble_weight) * static_scale) * climate_factor,
                            jnp.sqrt(ensemble_weight / (count - 1.0)) * ensemble_part], axis=1)


def make_perturbation_update(size: int, operator, radius: float | None):
    """``update(prior, white, f)`` -> (N, n): the ETKF's analysis of ``prior`` in the observation frame
    ``white`` (:meth:`assimbench.observations.operators.ObservationOperator.whiten`; the LETKF's
    with the traced f["radius"] when ``radius``, the configured one fixing the local windows, is
    not None); the caller recentres it on the variational mean."""
    if radius is None:
        return lambda prior, white, f: etkf_analysis(prior, white.observe(prior), white.obs, white.variance, SOLVER)
    index, distance, mask = local_windows(size, operator.positions, radius)

    def update(prior, white, f):
        weights = jnp.where(mask, gaspari_cohn(distance / f["radius"]), 0.0)
        return letkf_whitened(prior, white, index, weights, mask, SOLVER)

    return update


def make_member_update(size: int, operator, radius: float | None, pieces=frozenset()):
    """``update(key, members, y, mean, settings)`` -> (analysis members, info): the inflation pieces
    around the perturbation update of the forecast ``members`` (N, n), recentred on the variational
    ``mean`` (n,)."""
    perturbation_update = make_perturbation_update(size, operator, radius)

    def update(key, prior, y_and_mean, settings):
        del key  # deterministic
        y, mean = y_and_mean
        return recentred(mean, perturbation_update(prior, operator.whiten(settings, y), settings["filter"])), {}

    inflated = with_inflation(update, pieces)
    return lambda key, members, y, mean, settings: inflated(key, members, (y, mean), settings)


def recentred(mean, members):
    """members moved so that their mean is ``mean``; members (N, n)."""
    return mean + members - members.mean(axis=0)


class WindowEnsembleState(NamedTuple):
    """State of a windowed hybrid filter: members (N, n) the current analysis ensemble; start (n,)
    the background at the window start, shifted (n,) the analysed trajectory one interval later;
    obs (W, p) the window's observations, oldest first, filled how many are real (int32); past
    (W, N, n) the analysis anomalies of the last W cycles, oldest first (the initial ensemble's
    until the window has slid past them), so past[0] belongs to the window start."""

    members: jax.Array
    start: jax.Array
    shifted: jax.Array
    obs: jax.Array
    filled: jax.Array
    past: jax.Array


def slide_window(start, shifted, obs, filled, y, window: int):
    """The window ending at this cycle: (start, obs, filled, mask). Once full it slides by one
    interval (its start becomes ``shifted``, its oldest observation leaves); while it fills, its
    start stays and y is added."""
    full = filled == window
    start = jnp.where(full, shifted, start)
    obs = jnp.where(full, jnp.roll(obs, -1, axis=0).at[-1].set(y), obs.at[filled].set(y))
    filled = jnp.minimum(filled + 1, window)
    mask = (jnp.arange(window) < filled).astype(jnp.float64)
    return start, obs, filled, mask


def init_window_ensemble(initial_ensemble, window: int, observations: int) -> WindowEnsembleState:
    """The state before the first cycle: the window starts at the initial ensemble's mean."""
    mean = initial_ensemble.mean(axis=0)
    anomalies = initial_ensemble - mean
    return WindowEnsembleState(members=initial_ensemble, start=mean, shifted=mean,
                               obs=jnp.zeros((window, observations)), filled=jnp.asarray(0, dtype=jnp.int32),
                               past=jnp.broadcast_to(anomalies, (window,) + anomalies.shape))


def push_anomalies(past, members):
    """``past`` with the anomalies of ``members`` appended and the oldest dropped."""
    return jnp.roll(past, -1, axis=0).at[-1].set(members - members.mean(axis=0))
