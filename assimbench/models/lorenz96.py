"""Lorenz-96 rings: the single-scale ring and the two-scale model of slow and fast variables."""

from dataclasses import dataclass

import jax
import jax.numpy as jnp
import numpy as np

from assimbench.config.spec import ModelSpec, NodeChecks
from assimbench.models.base import Model


def lorenz96_tendency(x: jax.Array, params: dict) -> jax.Array:
    """Lorenz (1996) / Lorenz & Emanuel (1998, J. Atmos. Sci. 55, eq. 1) on a ring.

    dx_i/dt = (x_{i+1} - x_{i-2}) x_{i-1} - x_i + F, indices modulo n.
    x: (..., n).
    """
    ahead, _, back, two_back = ring_neighbours(x)
    return (ahead - two_back) * back - x + params["forcing"]


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


def ring_neighbours(x: jax.Array):
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
    ahead, _, back, two_back = ring_neighbours(big)
    slow_part = (ahead - two_back) * back - coupling * small.reshape(small.shape[:-1] + (slow, fast_per_slow)).sum(-1)
    y_ahead, y_two_ahead, y_back, _ = ring_neighbours(small)
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


@dataclass
class Lorenz96Config:
    """Lorenz-96 ring of ``size`` variables with forcing F, RK4 step ``dt``. One model time unit is
    about five days (0.05 = six hours; Lorenz & Emanuel 1998)."""

    name: str = "lorenz96"
    size: int = 40
    forcing: float = 8.0
    dt: float = 0.01


def _check_lorenz96(c: NodeChecks) -> None:
    c.integer("size", 4, "an integer >= 4")
    c.real("forcing", "a finite number")


SPEC = ModelSpec(
    name="lorenz96",
    schema=Lorenz96Config,
    build=lambda node: make_lorenz96(size=node.size, forcing=node.forcing, dt=node.dt),
    sizes=lambda node: (int(node.size), int(node.size)),
    check=_check_lorenz96,
    traced=("forcing",),
    ring=True,
    lorenz96_ring=True,
)


@dataclass
class Lorenz96TwoScaleConfig:
    """Two-scale Lorenz-96 (Lorenz 1996): ``slow`` variables X_k, each coupled to ``fast_per_slow``
    fast Y_{j,k}; coupling h, time_scale c (the fast variables are c times faster), space_scale b
    (and b times smaller); only the slow variables are observed and scored."""

    name: str = "lorenz96_two_scale"
    slow: int = 36
    fast_per_slow: int = 10
    forcing: float = 10.0
    coupling: float = 1.0
    time_scale: float = 10.0
    space_scale: float = 10.0
    dt: float = 0.005


def _check_two_scale(c: NodeChecks) -> None:
    c.integer("slow", 4, "an integer >= 4")
    c.integer("fast_per_slow", 1, "an integer >= 1")
    for key in ("forcing", "coupling", "time_scale", "space_scale"):
        c.real(key, "a finite number")
    c.real("space_scale", "a finite number > 0", minimum=0.0)


def _build_two_scale(node) -> Model:
    return make_lorenz96_two_scale(
        slow=int(node.slow), fast_per_slow=int(node.fast_per_slow), forcing=node.forcing, coupling=node.coupling,
        time_scale=node.time_scale, space_scale=node.space_scale, dt=node.dt,
    )


TWO_SCALE_SPEC = ModelSpec(
    name="lorenz96_two_scale",
    schema=Lorenz96TwoScaleConfig,
    build=_build_two_scale,
    sizes=lambda node: (int(node.slow) * (int(node.fast_per_slow) + 1), int(node.slow)),
    check=_check_two_scale,
    traced=("forcing", "coupling", "time_scale", "space_scale"),
    lorenz96_ring=True,
)
