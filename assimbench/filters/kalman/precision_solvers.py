"""Two ways to apply A^-1 and form A^(-1/2) for the ensemble-space precision A.

For the square-root filters, A = a0 I + G with a0 = N - 1 and G = Y R^-1 Y^T
symmetric positive semi-definite (N, N), so A's eigenvalues lie in
[a0, a0 + lambda_max(G)], and a0 is one of them: G 1 = 0 because the anomalies
Y sum to zero over members (Hunt, Kostelich & Szunyogh 2007, Physica D 230).

- ``eigh``: A = V diag(lambda) V^T by LAPACK; A^-1 v = V (V^T v / lambda),
  A^(-1/2) = V diag(lambda^-1/2) V^T. One LAPACK call per matrix: a batch of
  matrices (lanes, grid points) is a loop of LAPACK calls.
- ``newton_schulz``: matrix products only, so a batch is one batched product.
  With c = a0 + ||G||_F (>= lambda_max(A), since ||G||_2 <= ||G||_F) the
  scaled M = A / c has its eigenvalues in [a0 / c, 1]. The coupled
  Newton-Schulz iteration (Higham 2008, Functions of Matrices, SIAM, Sec.
  6.7; from memory)

      T_k = (3 I - Z_k Y_k) / 2,   Y_(k+1) = Y_k T_k,   Z_(k+1) = T_k Z_k,
      Y_0 = M, Z_0 = I,

  gives Z_k -> M^(-1/2) and Y_k -> M^(1/2). Every iterate is a polynomial in
  M, so it acts on each eigenvalue m alone as the scalar z <- z (3 - m z^2)/2
  from z = 1, whose residual e = 1 - m z^2 obeys e <- e^2 (3 + e) / 4: it
  falls monotonically, slowest for the smallest m. The iteration count is
  therefore the one the known smallest eigenvalue a0 / c needs to bring e
  below ``TOLERANCE`` (the scalar recurrence is run beside the matrices), and
  at most ``MOST_ITERATIONS``: about 6 for a spread comparable to the
  observation error, about 14 for a first cycle with climatological spread.
  Then A^(-1/2) = Z / sqrt(c) and A^-1 v = Z (Z v) / c.

Both give the same matrices to round-off; ``eigh`` stays for verification
(``filter.transform_solver``). The Newton-Schulz loop is a ``while_loop`` (its
count depends on the data), which reverse-mode differentiation does not go
through: gradients through the cycle need ``eigh``.
"""

from typing import Callable, NamedTuple

import jax
import jax.numpy as jnp

SOLVERS = ("eigh", "newton_schulz")
TOLERANCE = 1e-15
MOST_ITERATIONS = 60


class Solved(NamedTuple):
    """``apply_inverse(v)``: A^-1 v for v (..., N); ``inverse_root(factor)``: factor A^(-1/2), (..., N, N);
    ``inverse()``: A^-1 as a matrix (..., N, N); the matrices are formed only when called; size: N."""

    apply_inverse: Callable
    inverse_root: Callable
    inverse: Callable
    size: int


def solve_eigh(matrix: jax.Array) -> Solved:
    """A^-1 and A^(-1/2) of symmetric positive definite ``matrix`` (..., N, N) by eigen-decomposition.
    One matrix is written with the same products as the package always used, so its results stay
    bit for bit what they were."""
    evals, evecs = jnp.linalg.eigh(matrix)
    if matrix.ndim == 2:
        return Solved(lambda v: evecs @ ((evecs.T @ v) / evals),
                      lambda factor=1.0: factor * (evecs / jnp.sqrt(evals)) @ evecs.T,
                      lambda: (evecs / evals) @ evecs.T, matrix.shape[-1])

    def apply_inverse(v):
        return jnp.einsum("...ij,...j->...i", evecs, jnp.einsum("...ji,...j->...i", evecs, v) / evals)

    def inverse():
        return jnp.einsum("...ij,...kj->...ik", evecs / evals[..., None, :], evecs)

    def inverse_root(factor=1.0):
        return jnp.einsum("...ij,...kj->...ik", factor * evecs / jnp.sqrt(evals)[..., None, :], evecs)

    return Solved(apply_inverse, inverse_root, inverse, matrix.shape[-1])


def newton_schulz_inverse_root(matrix: jax.Array, floor) -> tuple:
    """(Z, c): Z = (A / c)^(-1/2) by the coupled Newton-Schulz iteration (module text) for
    ``matrix`` A (..., N, N) = floor I + G, G symmetric positive semi-definite, floor > 0 its smallest
    eigenvalue (or a lower bound of it); c (...) the scale."""
    size = matrix.shape[-1]
    eye = jnp.eye(size, dtype=matrix.dtype)
    floor = jnp.asarray(floor, matrix.dtype)
    excess = jnp.sqrt(jnp.sum((matrix - floor[..., None, None] * eye) ** 2, axis=(-2, -1)))
    scale = floor + excess
    smallest = floor / scale  # the smallest eigenvalue of M = A / c (a lower bound of it)

    def unfinished(carry):
        _, _, z_small, count = carry
        return (count < MOST_ITERATIONS) & jnp.any(1.0 - smallest * z_small**2 > TOLERANCE)

    def step(carry):
        y, z, z_small, count = carry
        t = 1.5 * eye - 0.5 * (z @ y)
        return y @ t, t @ z, 0.5 * z_small * (3.0 - smallest * z_small**2), count + 1

    start = (matrix / scale[..., None, None], jnp.broadcast_to(eye, matrix.shape), jnp.ones_like(smallest), 0)
    _, z, _, _ = jax.lax.while_loop(unfinished, step, start)
    return 0.5 * (z + jnp.swapaxes(z, -1, -2)), scale  # symmetric to round-off; made exactly so


def solve_newton_schulz(matrix: jax.Array, floor) -> Solved:
    """A^-1 and A^(-1/2) of ``matrix`` (..., N, N) = floor I + G by matrix products only (module text)."""
    z, scale = newton_schulz_inverse_root(matrix, floor)

    def apply_inverse(v):
        return jnp.einsum("...ij,...j->...i", z, jnp.einsum("...ij,...j->...i", z, v)) / scale[..., None]

    def inverse():
        return (z @ z) / scale[..., None, None]

    def inverse_root(factor=1.0):
        return z * (factor / jnp.sqrt(scale))[..., None, None]

    return Solved(apply_inverse, inverse_root, inverse, matrix.shape[-1])


def solve_precision(matrix: jax.Array, floor, solver: str) -> Solved:
    """A^-1 and A^(-1/2) of the ensemble-space precision ``matrix`` (..., N, N), whose smallest eigenvalue
    is ``floor`` (N - 1 for the square-root filters), by ``solver`` (one of :data:`SOLVERS`)."""
    if solver == "eigh":
        return solve_eigh(matrix)
    if solver == "newton_schulz":
        return solve_newton_schulz(matrix, floor)
    raise ValueError(f"unknown transform solver {solver!r}; known: {SOLVERS}")


def check_transform_solver(c) -> str:
    """``filter.transform_solver``: one of :data:`SOLVERS` (a NodeChecks of the filter's node)."""
    value = c.node.transform_solver
    if value not in SOLVERS:
        c.fail("transform_solver", value, f"one of {', '.join(SOLVERS)}")
    return str(value)
