"""ETDRK4: the fourth-order exponential time-differencing Runge-Kutta scheme, as data.

For u_t = L u + N(u) with L diagonal in the real-FFT modes (a periodic
pseudo-spectral model), one step of Cox & Matthews (2002, J. Comput. Phys.
176) in the stable form of Kassam & Trefethen (2005, SIAM J. Sci. Comput. 26,
eq. 2.5 and Sec. 5). The scheme is its coefficients plus the model's N; the
Runge-Kutta tableaux of :mod:`assimbench.integrators` play the same role for
explicit steps.
"""

from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np


class ETDRK4Coefficients(NamedTuple):
    """Constants of one ETDRK4 step for rfft modes (Kassam & Trefethen 2005, eq. 2.5 and Sec. 5).

    For linear part L (diagonal in Fourier space) and step h: e = exp(hL),
    e_half = exp(hL/2), q = h phi_1(hL/2)-type weight of the half steps, and
    f1, f2, f3 the weights of the final combination. All (modes,).
    """

    e: jax.Array
    e_half: jax.Array
    q: jax.Array
    f1: jax.Array
    f2: jax.Array
    f3: jax.Array


def etdrk4_coefficients(linear: np.ndarray, h: float, contour_points: int = 32) -> ETDRK4Coefficients:
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
    return ETDRK4Coefficients(*(jnp.asarray(v) for v in (np.exp(h * linear), np.exp(h * linear / 2), q, f1, f2, f3)))


def make_etdrk4_step(c: ETDRK4Coefficients, nonlinear, size: int):
    """``step(u, params) -> u(t + h)`` on the periodic last axis of ``size`` points; ``nonlinear(v)``
    is N in Fourier space (rfft modes in, rfft modes out)."""

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
