"""Kuramoto-Sivashinsky on a periodic domain, pseudo-spectral, stepped by ETDRK4."""

from dataclasses import dataclass

import jax
import jax.numpy as jnp
import numpy as np

from assimbench.config.spec import ModelSpec, NodeChecks
from assimbench.etdrk4 import etdrk4_coefficients, make_etdrk4_step
from assimbench.models.base import Model


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


def make_kuramoto_sivashinsky_step(size: int, length: float, dt: float):
    """``step(u, params) -> u(t + dt)`` of Kuramoto-Sivashinsky by ETDRK4 (:mod:`assimbench.etdrk4`)
    with the nonlinear term N(v) = -(i k / 2) F[(F^-1 v)^2] (Kassam & Trefethen 2005, eq. 2.5)."""
    wavenumber, linear = kuramoto_sivashinsky_operators(size, length)
    coefficients = etdrk4_coefficients(linear, dt)
    derivative = jnp.asarray(1j * wavenumber)

    def nonlinear(v):
        u = jnp.fft.irfft(v, n=size, axis=-1)
        return -0.5 * derivative * jnp.fft.rfft(u * u, axis=-1)

    return make_etdrk4_step(coefficients, nonlinear, size)


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
        stepper=make_kuramoto_sivashinsky_step(size, length, dt),
        static=(float(length),),
    )


@dataclass
class KuramotoSivashinskyConfig:
    """Kuramoto-Sivashinsky u_t = -u u_x - u_xx - u_xxxx on a periodic domain of ``length``,
    ``size`` grid points, ETDRK4 step ``dt``. Observe it every model time unit or so
    (observation.interval=1.0): its errors grow far more slowly than Lorenz-96's."""

    name: str = "kuramoto_sivashinsky"
    size: int = 64
    length: float = 22.0
    dt: float = 0.25


def _check(c: NodeChecks) -> None:
    c.integer("size", 8, "an integer >= 8")
    c.real("length", "a finite domain length > 0", minimum=0.0)


SPEC = ModelSpec(
    name="kuramoto_sivashinsky",
    schema=KuramotoSivashinskyConfig,
    build=lambda node: make_kuramoto_sivashinsky(size=int(node.size), length=float(node.length), dt=float(node.dt)),
    sizes=lambda node: (int(node.size), int(node.size)),
    check=_check,
    ring=True,
)
