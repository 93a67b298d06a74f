"""Lyapunov spectrum of a model by the QR method (Benettin et al. 1980; Shimada & Nagashima 1979).

The state x is integrated with the model's step (RK4, or its own scheme); m tangent vectors Q
(n, m) are propagated by the derivative of that same step map (JAX forward
mode, ``jax.jvp`` vmapped over the columns), and every ``reorthonormalise``
steps re-orthonormalised by a QR factorisation Q R = M Q. After a spin-up
(of the state, then of the tangent vectors), the exponents are

    lambda_i = (1 / T) sum over factorisations of log |R_ii|,

in descending order, per model time unit. Their sum is the time mean of the
trace of the Jacobian (for Lorenz-63 exactly -(sigma + 1 + beta); for
Lorenz-96 exactly -n), up to the RK4 error.

Derived numbers: the Kaplan-Yorke dimension k + (lambda_1 + ... + lambda_k) /
|lambda_{k+1}| with k the largest index whose partial sum is >= 0 (Kaplan &
Yorke 1979); the doubling time ln 2 / lambda_1.

One jitted ``lax.scan`` over blocks of steps; the running estimate after each
block is the convergence record.
"""

from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from assimbench.integrators import model_step
from assimbench.models.base import Model


class Spectrum(NamedTuple):
    """exponents (m,) descending, per model time unit; times (B,) and running (B, m): the
    estimate after each block of the averaging window (the convergence record)."""

    exponents: np.ndarray
    times: np.ndarray
    running: np.ndarray

    @property
    def kaplan_yorke_dimension(self) -> float:
        return kaplan_yorke_dimension(self.exponents)

    @property
    def drift(self) -> np.ndarray:
        """(m,) how much each estimate still moved over the second half of the window: a
        convergence measure (the estimates converge roughly as 1 / time)."""
        return np.abs(self.running[-1] - self.running[len(self.running) // 2])

    @property
    def positive_count(self) -> int:
        """Exponents above zero by more than their own drift (the exponent of the flow
        direction is exactly 0 and its estimate wanders either side of it)."""
        return int(np.sum(self.exponents > self.drift))

    @property
    def doubling_time(self) -> float:
        """ln 2 / lambda_1 in model time units (inf when the leading exponent is not positive)."""
        lead = float(self.exponents[0])
        return float(np.log(2.0) / lead) if lead > 0 else float("inf")


def kaplan_yorke_dimension(exponents) -> float:
    """k + sum_{i<=k} lambda_i / |lambda_{k+1}|, k the largest index with a non-negative partial sum."""
    values = np.sort(np.asarray(exponents, dtype=np.float64))[::-1]
    partial = np.cumsum(values)
    if partial[0] < 0:
        return 0.0
    k = int(np.max(np.nonzero(partial >= 0)[0])) + 1
    if k == values.size:
        return float(values.size)
    return float(k + partial[k - 1] / abs(values[k]))


def lyapunov_spectrum(
    model: Model,
    params: dict,
    x0,
    count: int | None = None,
    reorthonormalise: int = 10,
    spinup_time: float = 20.0,
    time: float = 500.0,
    blocks: int = 100,
    key=None,
) -> Spectrum:
    """The ``count`` leading exponents (all n by default) of ``model`` from ``x0``.

    The state is spun up for ``spinup_time``, the tangent vectors for another
    ``spinup_time``; then ``time`` model time units are averaged, cut into
    ``blocks`` equal blocks of whole QR intervals for the convergence record.
    """
    n = model.size
    m = n if count is None else int(count)
    dt = model.dt
    params = jax.tree.map(lambda v: jnp.asarray(v, dtype=jnp.float64), params)
    one_step = model_step(model)
    step = lambda x: one_step(x, params)
    per_block = max(1, round(time / dt / reorthonormalise / blocks))
    spin_steps = max(1, round(spinup_time / dt))
    key = jax.random.PRNGKey(0) if key is None else key
    q0, _ = jnp.linalg.qr(jax.random.normal(key, (n, m)))

    def advance(carry, _):
        x, q = carry
        x_next, tangent = jax.vmap(lambda column: jax.jvp(step, (x,), (column,)), in_axes=1, out_axes=(None, 1))(q)
        return (x_next, tangent), None

    def interval(carry, _):
        (x, q), _ = jax.lax.scan(advance, carry, None, length=reorthonormalise)
        q, r = jnp.linalg.qr(q)
        diagonal = jnp.diagonal(r)
        signs = jnp.where(diagonal < 0, -1.0, 1.0)
        return (x, q * signs[None, :]), jnp.log(jnp.abs(diagonal))

    def block(carry, _):
        carry, logs = jax.lax.scan(interval, carry, None, length=per_block)
        return carry, logs.sum(axis=0)

    @jax.jit
    def run(x, q):
        x = jax.lax.fori_loop(0, spin_steps, lambda _, s: step(s), x)
        carry, _ = jax.lax.scan(interval, (x, q), None, length=max(1, spin_steps // reorthonormalise))
        _, sums = jax.lax.scan(block, carry, None, length=blocks)
        return sums

    sums = np.asarray(run(jnp.asarray(x0, dtype=jnp.float64), q0))  # (blocks, m)
    block_time = per_block * reorthonormalise * dt
    times = block_time * np.arange(1, blocks + 1)
    running = np.cumsum(sums, axis=0) / times[:, None]
    # The QR columns come out ordered by growth asymptotically; sort so the order is guaranteed.
    order = np.argsort(-running[-1])
    return Spectrum(exponents=running[-1][order], times=times, running=running[:, order])
