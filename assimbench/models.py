"""Chaotic benchmark models as pure tendencies ``f(x, params) -> dx/dt``.

Every tendency acts on the last axis of ``x``, so the same function serves a
single state ``(n,)`` and an ensemble ``(members, n)``. Shape-fixing choices
(state size, time step) are static fields of :class:`Model`; the floats a user
may sweep (forcing, sigma, ...) are a dict of traced parameters.
"""

from collections.abc import Callable
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np


class Model(NamedTuple):
    """A model ready to integrate.

    name: registry name; size: state dimension n; dt: RK4 step (model time);
    tendency: ``f(x, params) -> dx/dt`` on the last axis; params: default
    dynamic parameters; spinup_time: model time integrated from
    ``first_guess`` to land on the attractor; first_guess:
    ``(key, params) -> (n,)``;
    ring: True when the variables sit on a periodic 1-D grid (a distance
    exists for localization); ensemble_tendency: optionally the same
    tendency for an ensemble stored variables-first, (n, members), when that
    layout vectorises better (Lorenz-63: three long rows instead of many rows
    of three); resolved: the number of leading variables that are observed and
    scored (None: all of them; a two-scale model's slow variables); stepper:
    optionally the model's own one-step map ``step(x, params) -> x(t + dt)``
    on the last axis, for models whose scheme is not RK4 on the tendency
    (Kuramoto-Sivashinsky: ETDRK4); spread_scale: optionally (n,) factors of
    ``initial_spread`` per variable, for models whose variables differ in
    scale (two-scale Lorenz-96: the fast ones are b times smaller, and noise
    of their slow size makes the explicit step unstable).
    """

    name: str
    size: int
    dt: float
    tendency: Callable
    params: dict
    spinup_time: float
    first_guess: Callable
    ring: bool
    ensemble_tendency: Callable | None = None
    resolved: int | None = None
    stepper: Callable | None = None
    spread_scale: np.ndarray | None = None

    @property
    def resolved_size(self) -> int:
        """Leading variables observed and scored: all for single-scale models."""
        return self.size if self.resolved is None else self.resolved


def lorenz63_tendency(x: jax.Array, params: dict) -> jax.Array:
    """Lorenz (1963, J. Atmos. Sci. 20, 130-141), eq. 25-27.

    dx/dt = sigma (y - x),  dy/dt = x (rho - z) - y,  dz/dt = x y - beta z.
    x: (..., 3).
    """
    u, v, w = x[..., 0], x[..., 1], x[..., 2]
    return jnp.stack(
        [
            params["sigma"] * (v - u),
            u * (params["rho"] - w) - v,
            u * v - params["beta"] * w,
        ],
        axis=-1,
    )


def lorenz96_tendency(x: jax.Array, params: dict) -> jax.Array:
    """Lorenz (1996) / Lorenz & Emanuel (1998, J. Atmos. Sci. 55, eq. 1) on a ring.

    dx_i/dt = (x_{i+1} - x_{i-2}) x_{i-1} - x_i + F, indices modulo n.
    x: (..., n).
    """
    ahead, _, back, two_back = _ring_neighbours(x)
    return (ahead - two_back) * back - x + params["forcing"]


def lorenz63_tendency_variables_first(x: jax.Array, params: dict) -> jax.Array:
    """:func:`lorenz63_tendency` for x of shape (3, ...): the same equations, variables on the first axis."""
    u, v, w = x[0], x[1], x[2]
    return jnp.stack([params["sigma"] * (v - u), u * (params["rho"] - w) - v, u * v - params["beta"] * w])


def make_lorenz63(sigma: float = 10.0, rho: float = 28.0, beta: float = 8.0 / 3.0, dt: float = 0.01) -> Model:
    """Lorenz-63 with the classic parameters as defaults."""

    def first_guess(key, params):
        return jnp.array([1.0, 1.0, 20.0]) + jax.random.normal(key, (3,))

    return Model(
        name="lorenz63",
        size=3,
        dt=float(dt),
        tendency=lorenz63_tendency,
        params={"sigma": float(sigma), "rho": float(rho), "beta": float(beta)},
        spinup_time=20.0,
        first_guess=first_guess,
        ring=False,
        # Measured: an RK4 forecast of 1,000 members 1.7x faster variables-first.
        ensemble_tendency=lorenz63_tendency_variables_first,
    )


def make_lorenz96(size: int = 40, forcing: float = 8.0, dt: float = 0.01) -> Model:
    """Lorenz-96 with ``size`` variables on a ring (any size >= 4)."""
    if size < 4:
        raise ValueError(f"Lorenz-96 needs size >= 4, got {size}")

    def first_guess(key, params):
        # The rest state x_i = F is an unstable fixed point; a small kick leaves it.
        return params["forcing"] + 0.01 * jax.random.normal(key, (size,))

    return Model(
        name="lorenz96",
        size=int(size),
        dt=float(dt),
        tendency=lorenz96_tendency,
        params={"forcing": float(forcing)},
        spinup_time=20.0,
        first_guess=first_guess,
        ring=True,
    )


def _ring_neighbours(x: jax.Array):
    """(x_{i+1}, x_{i+2}, x_{i-1}, x_{i-2}) on the periodic last axis, by one pad and slices.

    One periodic pad and slices compile to fewer, larger kernels than rolls
    (measured about 2x faster per RK4 step on the CPU)."""
    padded = jnp.concatenate([x[..., -2:], x, x[..., :2]], axis=-1)  # x_{-2} .. x_{n+1}
    n = x.shape[-1]
    return padded[..., 3 : 3 + n], padded[..., 4 : 4 + n], padded[..., 1 : 1 + n], padded[..., : n]


def two_scale_exchange(x: jax.Array, params: dict, slow: int) -> jax.Array:
    """The energy-conserving part of the two-scale Lorenz-96 tendency (advection and coupling).

    Lorenz (1996, Proc. ECMWF Seminar on Predictability, eq. 3.2-3.3) without
    damping and forcing, with K = ``slow`` variables X_k and J fast Y_{j,k}
    per slow one, stored x = [X_1..X_K, Y_{1,1}..Y_{J,1}, Y_{1,2}, ...] (the
    fast variables form one ring of K J, Y_{J,k} next to Y_{1,k+1}):

        dX_k/dt = X_{k-1} (X_{k+1} - X_{k-2}) - (h c / b) sum_j Y_{j,k}
        dY_{j,k}/dt = -c b Y_{j+1,k} (Y_{j+2,k} - Y_{j-1,k}) + (h c / b) X_k

    Both advection terms sum to zero against x and the coupling terms cancel
    between the scales, so sum(x * exchange(x)) = 0 exactly: the energy
    E = (sum X^2 + sum Y^2) / 2 is an invariant of this part.
    x: (..., K (J + 1)).
    """
    big, small = x[..., :slow], x[..., slow:]
    fast_per_slow = small.shape[-1] // slow
    coupling = params["coupling"] * params["time_scale"] / params["space_scale"]  # h c / b
    ahead, _, back, two_back = _ring_neighbours(big)
    slow_part = (ahead - two_back) * back - coupling * small.reshape(small.shape[:-1] + (slow, fast_per_slow)).sum(-1)
    y_ahead, y_two_ahead, y_back, _ = _ring_neighbours(small)
    fast_part = (-params["time_scale"] * params["space_scale"] * y_ahead * (y_two_ahead - y_back)
                 + coupling * jnp.repeat(big, fast_per_slow, axis=-1))
    return jnp.concatenate([slow_part, fast_part], axis=-1)


def make_lorenz96_two_scale(
    slow: int = 36,
    fast_per_slow: int = 10,
    forcing: float = 10.0,
    coupling: float = 1.0,
    time_scale: float = 10.0,
    space_scale: float = 10.0,
    dt: float = 0.005,
) -> Model:
    """Two-scale Lorenz-96 (Lorenz 1996): K slow variables, each coupled to J fast ones.

    dX_k/dt = X_{k-1} (X_{k+1} - X_{k-2}) - X_k + F - (h c / b) sum_j Y_{j,k}
    dY_{j,k}/dt = -c b Y_{j+1,k} (Y_{j+2,k} - Y_{j-1,k}) - c Y_{j,k} + (h c / b) X_k

    with the published K = 36, J = 10, F = 10, h = 1 (``coupling``), c = 10
    (``time_scale``), b = 10 (``space_scale``) as defaults. State size K (J + 1);
    the K slow variables come first and are the ones observed and scored
    (``resolved``). The fast variables are c = 10 times faster, hence the
    smaller default step (0.005, common practice).
    """
    if slow < 4 or fast_per_slow < 1:
        raise ValueError(f"two-scale Lorenz-96 needs slow >= 4 and fast_per_slow >= 1, got {slow}, {fast_per_slow}")

    def tendency(x, params):
        damping = jnp.concatenate(
            [x[..., :slow] - params["forcing"], params["time_scale"] * x[..., slow:]], axis=-1
        )
        return two_scale_exchange(x, params, slow) - damping

    def first_guess(key, params):
        slow_key, fast_key = jax.random.split(key)
        big = params["forcing"] + jax.random.normal(slow_key, (slow,))
        small = 0.1 * jax.random.normal(fast_key, (slow * fast_per_slow,))
        return jnp.concatenate([big, small])

    return Model(
        name="lorenz96_two_scale",
        size=int(slow * (fast_per_slow + 1)),
        dt=float(dt),
        tendency=tendency,
        params={"forcing": float(forcing), "coupling": float(coupling), "time_scale": float(time_scale),
                "space_scale": float(space_scale)},
        spinup_time=10.0,
        first_guess=first_guess,
        # Slow and fast variables do not share one grid, so no localization distance.
        ring=False,
        resolved=int(slow),
        spread_scale=np.concatenate([np.ones(slow), np.full(slow * fast_per_slow, 1.0 / space_scale)]),
    )


class ETDRK4Coefficients(NamedTuple):
    """Constants of one ETDRK4 step for rfft modes (Kassam & Trefethen 2005, eq. 2.5 and Sec. 5).

    For linear part L (diagonal in Fourier space) and step h: e = exp(hL),
    e_half = exp(hL/2), q = h phi_1(hL/2)-type weight of the half steps, and
    f1, f2, f3 the weights of the final combination; derivative = i k for the
    nonlinear term. All (modes,) complex128 (derivative purely imaginary).
    """

    e: jax.Array
    e_half: jax.Array
    q: jax.Array
    f1: jax.Array
    f2: jax.Array
    f3: jax.Array
    derivative: jax.Array


def etdrk4_coefficients(linear: np.ndarray, wavenumber: np.ndarray, h: float, contour_points: int = 32):
    """ETDRK4 weights by the contour-integral average of Kassam & Trefethen (2005, Sec. 5).

    The phi-functions (e^z - 1)/z and their higher cousins cancel badly for
    small |z|; averaging them over points on a circle of radius 1 around each
    z = hL evaluates them to full precision. With real L the circle's upper
    half suffices (take the real part): points exp(i pi (m - 1/2) / M).
    """
    roots = np.exp(1j * np.pi * (np.arange(1, contour_points + 1) - 0.5) / contour_points)
    lr = h * linear[:, None] + roots[None, :]
    q = h * np.real(np.mean((np.exp(lr / 2) - 1) / lr, axis=1))
    f1 = h * np.real(np.mean((-4 - lr + np.exp(lr) * (4 - 3 * lr + lr**2)) / lr**3, axis=1))
    f2 = h * np.real(np.mean((2 + lr + np.exp(lr) * (-2 + lr)) / lr**3, axis=1))
    f3 = h * np.real(np.mean((-4 - 3 * lr - lr**2 + np.exp(lr) * (4 - lr)) / lr**3, axis=1))
    return ETDRK4Coefficients(
        *(jnp.asarray(v) for v in (np.exp(h * linear), np.exp(h * linear / 2), q, f1, f2, f3, 1j * wavenumber))
    )


def kuramoto_sivashinsky_operators(size: int, length: float):
    """(derivative wavenumber k, linear symbol k^2 - k^4) of the rfft modes of ``size`` points on [0, length).

    The Nyquist mode's derivative wavenumber is 0, as in Kassam & Trefethen's
    code, so derivatives of a real field stay real; its linear symbol keeps
    the true |k|, so the mode stays damped. (With a zero symbol it would be
    a neutral direction of the discrete model: a spurious zero Lyapunov
    exponent.)
    """
    full = 2 * np.pi / length * np.arange(size // 2 + 1, dtype=np.float64)
    wavenumber = full.copy()
    if size % 2 == 0:
        wavenumber[-1] = 0.0
    return wavenumber, full**2 - full**4


def kuramoto_sivashinsky_tendency_factory(size: int, length: float):
    """The pseudo-spectral tendency u_t = -u u_x - u_xx - u_xxxx on the periodic last axis (for tests
    and derivatives; the model itself is stepped by ETDRK4)."""
    wavenumber, linear = kuramoto_sivashinsky_operators(size, length)
    wavenumber, linear = jnp.asarray(wavenumber), jnp.asarray(linear)

    def tendency(u, params):
        del params
        spectrum = jnp.fft.rfft(u, axis=-1)
        nonlinear = -0.5j * wavenumber * jnp.fft.rfft(u * u, axis=-1)  # -(u^2 / 2)_x
        return jnp.fft.irfft(linear * spectrum + nonlinear, n=size, axis=-1)

    return tendency


def make_etdrk4_step(size: int, length: float, dt: float):
    """``step(u, params) -> u(t + dt)`` of Kuramoto-Sivashinsky by ETDRK4 (Cox & Matthews 2002;
    Kassam & Trefethen 2005, eq. 2.5 with the nonlinear term N(v) = -(i k / 2) F[(F^-1 v)^2])."""
    wavenumber, linear = kuramoto_sivashinsky_operators(size, length)
    c = etdrk4_coefficients(linear, wavenumber, dt)

    def nonlinear(v):
        u = jnp.fft.irfft(v, n=size, axis=-1)
        return -0.5 * c.derivative * jnp.fft.rfft(u * u, axis=-1)

    def step(u, params):
        del params
        v = jnp.fft.rfft(u, axis=-1)
        nv = nonlinear(v)
        a = c.e_half * v + c.q * nv
        na = nonlinear(a)
        b = c.e_half * v + c.q * na
        nb = nonlinear(b)
        cc = c.e_half * a + c.q * (2 * nb - nv)
        nc = nonlinear(cc)
        v = c.e * v + nv * c.f1 + 2 * (na + nb) * c.f2 + nc * c.f3
        return jnp.fft.irfft(v, n=size, axis=-1)

    return step


def make_kuramoto_sivashinsky(size: int = 64, length: float = 22.0, dt: float = 0.25) -> Model:
    """Kuramoto-Sivashinsky u_t = -u u_x - u_xx - u_xxxx on a periodic domain of ``length``.

    ``size`` grid points, stepped by ETDRK4 (Kassam & Trefethen 2005). The
    default length 22 is a small chaotic domain (common practice); the spatial
    mean of u is an invariant (the k = 0 mode has no linear or nonlinear
    term), so the first guess has mean 0.
    """
    if size < 8:
        raise ValueError(f"Kuramoto-Sivashinsky needs size >= 8, got {size}")
    grid = np.arange(size) * length / size

    def first_guess(key, params):
        del params
        # A smooth bump plus small noise: the profile of Kassam & Trefethen's example, scaled to the domain.
        angle = 2 * np.pi * grid / length
        u = jnp.asarray(np.cos(angle) * (1 + np.sin(angle))) + 0.1 * jax.random.normal(key, (size,))
        return u - u.mean()

    return Model(
        name="kuramoto_sivashinsky",
        size=int(size),
        dt=float(dt),
        tendency=kuramoto_sivashinsky_tendency_factory(size, length),
        params={},
        spinup_time=200.0,
        first_guess=first_guess,
        ring=True,
        stepper=make_etdrk4_step(size, length, dt),
    )
