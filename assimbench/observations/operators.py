"""Observation operators ``h(x) -> y`` with a known output size: every ``stride``-th variable, or
stations anywhere on the grid (linear interpolation between grid points).

The noise level is not part of the operator: it is the traced setting
``error_std`` of the operator's settings section (``observation`` for the
truth's network, ``assumed`` for the filter's view of it), so one compiled
program serves every noise level of a sweep. With the network's static
per-station factors f and, when ``correlation_shape`` is set, the traced
``correlation_length`` L,

    R_ij = sigma_i sigma_j rho(d_ij / L),   sigma_i = error_std f_i,

d_ij the ring distance between stations i and j, rho exponential,
exp(-d/L), or Gaussian, exp(-d^2 / (2 L^2)) (common practice). Filters read R
only through :meth:`ObservationOperator.whiten`: with R diagonal they see
h and y as they are with R's diagonal; with a correlated R they see
L^-1 h and L^-1 y with R = I, L the Cholesky factor of R (the whitening
every filter then shares). ``observation.transform`` makes h nonlinear (the
same noise model), so users can see where Gaussian assumptions break.
"""

from typing import Callable, NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
from jax.scipy.linalg import solve_triangular

TRANSFORMS = {
    "identity": lambda v: v,
    "absolute": jnp.abs,
    "square": jnp.square,
}


def _exponential(scaled):
    return jnp.exp(-scaled)


def _gaussian(scaled):
    return jnp.exp(-0.5 * scaled**2)


CORRELATION_SHAPES = {"exponential": _exponential, "gaussian": _gaussian}


class Whitened(NamedTuple):
    """What a filter assimilates: ``observe`` (x (..., n) -> (..., p)) and ``obs`` (p,) in a frame where
    R is diagonal with ``variance`` (a scalar or (p,)); ``std`` = sqrt(variance) as the truth draws it.
    For a correlated R the frame is the whitened one (observe = L^-1 h, obs = L^-1 y, variance 1) and
    ``covariance`` holds R itself (p, p) for the filters that localize R's blocks; ``operator`` and
    ``y`` are the unwhitened h and y. On a network with outages, ``seen`` (p,) marks the stations that
    reported: a missing one is 0 in y and in h (so it carries no information) and, in a correlated R,
    decoupled from the others with unit variance (R's block of the stations seen is what is used).
    Without outages ``seen`` is None."""

    observe: Callable
    obs: jax.Array
    variance: object
    std: object
    operator: object
    y: jax.Array
    covariance: jax.Array | None = None
    seen: jax.Array | None = None


class WindowFrame(NamedTuple):
    """A window's observations (W, p) as a 4D method assimilates them: ``obs`` in the frame, R's
    diagonal there (``variance``, ``std``), and ``apply`` taking any (W, ..., p) array of predicted
    observations (or their sensitivities) to the frame, time by time: missing stations (NaN in the
    window's y) masked, and with a correlated R whitened by the Cholesky factor of that time's R
    (None when the frame is y's own: independent errors and no outages)."""

    obs: jax.Array
    variance: object
    std: object
    apply: Callable


def decoupled(covariance, seen):
    """R (..., p, p) with the rows and columns of the stations not ``seen`` (..., p) replaced by the identity's:
    what is left is R's block of the stations seen, and the others are independent with unit variance."""
    both = seen[..., :, None] & seen[..., None, :]
    return jnp.where(both, covariance, jnp.eye(covariance.shape[-1]))


def _by_time(mask, v):
    """``mask`` (W, p) shaped to broadcast against v (W, ..., p)."""
    return mask.reshape(mask.shape[:1] + (1,) * (v.ndim - 2) + mask.shape[1:])


class ObservationOperator(NamedTuple):
    """Observe the state at the stations' positions through ``transform``.

    indices: (p,) the grid point at or just below each station (the
    observed variable itself for a station on a grid point); positions: (p,)
    grid positions of the stations, in grid units, for localization and
    interpolation; stride: a station every ``stride``-th variable from 0
    (observed by a strided slice), or 0 for a list of stations; fractions:
    (p,) where a station sits between its grid point and the next one on the
    ring (0 on a grid point; None for a stride network); error_factors: (p,)
    each station's error standard deviation in units of ``error_std``, so
    R = error_std^2 diag(error_factors^2) (None: all 1); transform: a key of
    TRANSFORMS applied elementwise after the selection or interpolation;
    limit: only the first ``limit`` variables are observable (a two-scale
    model's slow variables come first; None: all); correlation_shape: a key
    of CORRELATION_SHAPES for correlated errors (None: independent errors,
    R diagonal); error_section: the settings section whose ``error_std``
    and ``correlation_length`` set R (``observation``: the truth's errors;
    ``assumed``: the filter's view of them); outages: stations may be missing
    in a cycle (y then holds NaN there; :mod:`assimbench.observations.outages`),
    schedule: the network's scheduled outages (an OutageSchedule or None).
    """

    indices: np.ndarray
    positions: np.ndarray
    stride: int
    transform: str = "identity"
    limit: int | None = None
    fractions: np.ndarray | None = None
    error_factors: np.ndarray | None = None
    correlation_shape: str | None = None
    error_section: str = "observation"
    outages: bool = False
    schedule: object = None

    def error_std_of(self, settings):
        """The stations' error standard deviations: the traced ``error_std`` of the operator's settings
        section, times each station's factor when the network gives factors ((p,); else the scalar)."""
        error_std = settings[self.error_section]["error_std"]
        return error_std if self.error_factors is None else error_std * jnp.asarray(self.error_factors)

    @property
    def correlated(self) -> bool:
        return self.correlation_shape is not None

    def station_distances(self) -> np.ndarray:
        """(p, p) ring distances between the stations, in grid units."""
        size = self.limit if self.limit is not None else int(np.max(self.positions)) + 1
        d = np.abs(self.positions[:, None] - self.positions[None, :]) % size
        return np.minimum(d, size - d)

    def error_correlation(self, settings) -> jax.Array:
        """(p, p) rho(d_ij / L) with L the traced ``correlation_length`` (L = 0: the identity)."""
        distance = self.station_distances()
        length = settings[self.error_section]["correlation_length"]
        shape = CORRELATION_SHAPES[self.correlation_shape]
        # L = 0 in a lane of a correlated run means independent errors: rho(inf) = 0 off the diagonal.
        scaled = jnp.where(distance > 0, distance / jnp.maximum(length, 1e-300), 0.0)
        return jnp.where(distance > 0, shape(scaled), 1.0)

    def error_covariance(self, settings) -> jax.Array:
        """R (p, p): diag(sigma) rho diag(sigma), or diag(sigma^2) for independent errors."""
        std = jnp.broadcast_to(self.error_std_of(settings), (self.size,))
        if not self.correlated:
            return jnp.diag(std**2)
        return std[:, None] * self.error_correlation(settings) * std[None, :]

    def error_root(self, settings) -> jax.Array:
        """L (p, p), lower triangular, R = L L^T (the truth's noise is L e, e ~ N(0, I))."""
        return jnp.linalg.cholesky(self.error_covariance(settings))

    def noise(self, standard, settings) -> jax.Array:
        """Observation errors from standard normal ``standard`` (p,): sigma e, or L e when correlated."""
        if not self.correlated:
            return self.error_std_of(settings) * standard
        return self.error_root(settings) @ standard

    def window_frame(self, settings, obs) -> WindowFrame:
        """The frame a 4D method assimilates a window's observations ``obs`` (W, p) in: R's diagonal as it
        is, or whitened by R's Cholesky factor; a missing station masked at its own time."""
        return _window_frame(self, settings, obs)

    def whiten(self, settings, y) -> Whitened:
        """The frame a filter assimilates ``y`` (p,) in (:class:`Whitened`). Independent errors: h and y
        unchanged with R's diagonal (no arithmetic added: the results are those of a diagonal R).
        Correlated: L^-1 h and L^-1 y with unit variance, L = cholesky(R). Missing stations (NaN in y)
        are masked (:class:`Whitened`)."""
        observe, seen = self, None
        if self.outages:
            seen = jnp.isfinite(y)
            y = jnp.where(seen, y, 0.0)
            observe = lambda x: jnp.where(seen, self(x), 0.0)
        if not self.correlated:
            std = self.error_std_of(settings)
            return Whitened(observe, y, std**2, std, observe, y, None, seen)
        covariance = self.error_covariance(settings)
        if seen is not None:
            covariance = decoupled(covariance, seen)
        root = jnp.linalg.cholesky(covariance)
        apply = lambda v: whiten_with(root, v)
        return Whitened(lambda x: apply(observe(x)), apply(y), 1.0, 1.0, observe, y, covariance, seen)

    @property
    def size(self) -> int:
        return int(self.indices.shape[0])

    @property
    def linear(self) -> bool:
        return self.transform == "identity"

    def standard_noise(self, key: jax.Array, state_size: int) -> jax.Array:
        """N(0, I) noise of the stations, (p,).

        One draw per grid point, then the observed ones are taken: a station
        gets the same noise whichever other stations are observed, so two
        networks compared on the same seed differ only where they differ. A
        station between grid points gets its own draw (a second stream, one
        draw per station of the list).
        """
        on_grid = jax.random.normal(key, (state_size,))[self.indices]
        if self.fractions is None or not np.any(self.fractions):
            return on_grid
        between = jax.random.normal(jax.random.fold_in(key, 1), (self.size,))
        return jnp.where(jnp.asarray(self.fractions == 0.0), on_grid, between)

    def __call__(self, x: jax.Array) -> jax.Array:
        """y = f(H x), H a selection or a linear interpolation between the two grid points around
        each station, f elementwise; x: (..., n) -> (..., p)."""
        if self.fractions is None:
            # A strided slice, not a gather: XLA fuses it into its neighbours.
            return TRANSFORMS[self.transform](x[..., : self.limit : self.stride])
        at_left = x[..., self.indices]
        if not np.any(self.fractions):
            return TRANSFORMS[self.transform](at_left)
        # (1 - a) x_i + a x_(i+1): exactly x_i for a station on a grid point.
        at_right = x[..., (self.indices + 1) % (self.limit or x.shape[-1])]
        return TRANSFORMS[self.transform]((1.0 - self.fractions) * at_left + self.fractions * at_right)


def _window_frame(operator, settings, obs) -> WindowFrame:
    """:meth:`ObservationOperator.window_frame` (here to keep the class short)."""
    seen = None
    if operator.outages:
        seen = jnp.isfinite(obs)
        obs = jnp.where(seen, obs, 0.0)
    if not operator.correlated:
        std = operator.error_std_of(settings)
        if seen is None:
            return WindowFrame(obs, std**2, std, None)
        return WindowFrame(obs, std**2, std, lambda v: jnp.where(_by_time(seen, v), v, 0.0))
    covariance = operator.error_covariance(settings)
    if seen is None:
        root = jnp.linalg.cholesky(covariance)
        apply = lambda v: whiten_with(root, v)
    else:  # one R per time: the block of the stations seen, the others decoupled with unit variance
        roots = jnp.linalg.cholesky(decoupled(covariance, seen))  # (W, p, p)

        def apply(v):
            masked = jnp.where(_by_time(seen, v), v, 0.0)
            flat = masked.reshape(v.shape[0], -1, v.shape[-1])  # (W, m, p)
            solved = solve_triangular(roots, jnp.swapaxes(flat, 1, 2), lower=True)  # (W, p, m)
            return jnp.swapaxes(solved, 1, 2).reshape(v.shape)

    return WindowFrame(apply(obs), 1.0, 1.0, apply)


def whiten_with(root, v):
    """L^-1 v for lower-triangular ``root`` L (p, p) and v (..., p): solve L z = v along the last axis."""
    flat = v.reshape(-1, v.shape[-1]).T  # (p, m)
    return solve_triangular(root, flat, lower=True).T.reshape(v.shape)


def every_kth(state_size: int, stride: int, transform: str = "identity") -> ObservationOperator:
    """Observe variables 0, stride, 2 stride, ... below ``state_size`` (the observable, resolved
    variables; a state may carry more after them)."""
    if not 1 <= stride <= state_size:
        raise ValueError(f"stride must be in [1, {state_size}], got {stride}")
    if transform not in TRANSFORMS:
        raise ValueError(f"transform must be one of {sorted(TRANSFORMS)}, got {transform!r}")
    indices = np.arange(0, state_size, stride)
    return ObservationOperator(
        indices=indices, positions=indices.astype(np.float64), stride=int(stride), transform=transform,
        limit=int(state_size),
    )


def at_stations(state_size: int, positions, transform: str = "identity") -> ObservationOperator:
    """Observe the given grid positions (floats in [0, state_size)), each by linear interpolation
    between grid points floor(q) and floor(q) + 1 (the ring's first point after its last)."""
    positions = np.asarray(positions, dtype=np.float64)
    if positions.ndim != 1 or positions.size == 0 or np.any(positions < 0) or np.any(positions >= state_size):
        raise ValueError(f"positions must be a non-empty list in [0, {state_size}), got {positions}")
    if transform not in TRANSFORMS:
        raise ValueError(f"transform must be one of {sorted(TRANSFORMS)}, got {transform!r}")
    indices = np.floor(positions).astype(np.int64)
    return ObservationOperator(indices=indices, positions=positions, stride=0, transform=transform,
                               limit=int(state_size), fractions=positions - indices)
