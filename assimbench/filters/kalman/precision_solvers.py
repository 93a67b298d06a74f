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
through: gradients through the cycle need ``eigh``, whose derivative is that of
the matrix functions (:func:`spectral_functions`), exact where eigenvalues repeat.
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


def _spectral_products(evecs, evals, v, factor):
    """(A^-1 v, factor A^(-1/2), A^-1) from A = V diag(evals) V^T; one matrix is written with the same
    products as the package always used, so its results stay bit for bit what they were."""
    if evecs.ndim == 2:
        return (evecs @ ((evecs.T @ v) / evals), factor * (evecs / jnp.sqrt(evals)) @ evecs.T,
                (evecs / evals) @ evecs.T)
    applied = jnp.einsum("...ij,...j->...i", evecs, jnp.einsum("...ji,...j->...i", evecs, v) / evals)
    root = jnp.einsum("...ij,...kj->...ik", factor * evecs / jnp.sqrt(evals)[..., None, :], evecs)
    inverse = jnp.einsum("...ij,...kj->...ik", evecs / evals[..., None, :], evecs)
    return applied, root, inverse


def _in_eigenbasis(evecs, tangent):
    """V^T E V for a symmetric tangent E (..., N, N)."""
    return jnp.einsum("...ji,...jk,...kl->...il", evecs, tangent, evecs)


def _from_eigenbasis(evecs, inner):
    """V M V^T (..., N, N)."""
    return jnp.einsum("...ij,...jk,...lk->...il", evecs, inner, evecs)


@jax.custom_jvp
def spectral_functions(matrix, evecs, evals, v, factor):
    """(A^-1 v, factor A^(-1/2), A^-1) of symmetric positive definite ``matrix`` A (..., N, N), given its
    eigen-decomposition (``evecs``, ``evals``, which carry no derivative of their own: pass them
    through ``lax.stop_gradient``), for v (..., N) and a scalar ``factor``.

    The derivative is that of the matrix functions, not of the eigenvectors: with E = V^T dA V,

        d(A^-1) = -A^-1 dA A^-1,
        d(A^(-1/2)) = V (F o E) V^T,  F_ij = -1 / (s_i s_j (s_i + s_j)),  s = evals^(1/2),

    the Daleckii-Krein formula with the divided difference of lambda^(-1/2) in a form without the
    eigenvalue gap (Higham 2008, Functions of Matrices, SIAM, Thm. 3.11; from memory). It stays exact
    where eigenvalues repeat, which they do in the ensemble space: A = (N - 1) I + G has the eigenvalue
    N - 1 once for every direction G does not see (more members than observations in a local
    analysis). Differentiating the eigenvectors instead divides by the gaps, which are round-off
    there, and gives wrong or non-finite gradients."""
    return _spectral_products(evecs, evals, v, factor)


@spectral_functions.defjvp
def _spectral_functions_jvp(primals, tangents):
    matrix, evecs, evals, v, factor = primals
    d_matrix, _, _, d_v, d_factor = tangents
    applied, root, inverse = _spectral_products(evecs, evals, v, factor)
    d_matrix = 0.5 * (d_matrix + jnp.swapaxes(d_matrix, -1, -2))
    d_inverse = -inverse @ d_matrix @ inverse
    d_applied = jnp.einsum("...ij,...j->...i", d_inverse, v) + jnp.einsum("...ij,...j->...i", inverse, d_v)
    roots = jnp.sqrt(evals)
    divided = -1.0 / (roots[..., :, None] * roots[..., None, :] * (roots[..., :, None] + roots[..., None, :]))
    unit_root = _from_eigenbasis(evecs, jnp.eye(evals.shape[-1]) / roots[..., None, :])
    d_root = factor * _from_eigenbasis(evecs, divided * _in_eigenbasis(evecs, d_matrix)) + d_factor * unit_root
    return (applied, root, inverse), (d_applied, d_root, d_inverse)


@jax.custom_jvp
def spectral_apply(matrix, evecs, evals, v, u):
    """(A^-1 v, A^(-1/2) u) for a batch of symmetric positive definite ``matrix`` (g, N, N) with its
    eigen-decomposition (``evecs``, ``evals``, through ``lax.stop_gradient``) and v, u (g, N), without
    forming the matrices; the derivative is that of the matrix functions (:func:`spectral_functions`)."""
    applied = jnp.einsum("gij,gj->gi", evecs, jnp.einsum("gji,gj->gi", evecs, v) / evals)
    rotated = jnp.einsum("gji,gj->gi", evecs, u) / jnp.sqrt(evals)
    return applied, jnp.einsum("gij,gj->gi", evecs, rotated)


@spectral_apply.defjvp
def _spectral_apply_jvp(primals, tangents):
    matrix, evecs, evals, v, u = primals
    d_matrix, _, _, d_v, d_u = tangents
    applied, rooted = spectral_apply(matrix, evecs, evals, v, u)
    d_matrix = 0.5 * (d_matrix + jnp.swapaxes(d_matrix, -1, -2))
    inverse = _from_eigenbasis(evecs, jnp.eye(evals.shape[-1]) / evals[..., None, :])
    root = _from_eigenbasis(evecs, jnp.eye(evals.shape[-1]) / jnp.sqrt(evals)[..., None, :])
    d_applied = (-jnp.einsum("gij,gj->gi", inverse, jnp.einsum("gij,gj->gi", d_matrix, applied))
                 + jnp.einsum("gij,gj->gi", inverse, d_v))
    roots = jnp.sqrt(evals)
    divided = -1.0 / (roots[..., :, None] * roots[..., None, :] * (roots[..., :, None] + roots[..., None, :]))
    d_root = _from_eigenbasis(evecs, divided * _in_eigenbasis(evecs, d_matrix))
    d_rooted = jnp.einsum("gij,gj->gi", d_root, u) + jnp.einsum("gij,gj->gi", root, d_u)
    return (applied, rooted), (d_applied, d_rooted)


def solve_eigh(matrix: jax.Array) -> Solved:
    """A^-1 and A^(-1/2) of symmetric positive definite ``matrix`` (..., N, N) by eigen-decomposition;
    differentiable with repeated eigenvalues (:func:`spectral_functions`)."""
    evals, evecs = jax.lax.stop_gradient(jnp.linalg.eigh(matrix))
    size = matrix.shape[-1]
    zero_v = jnp.zeros(matrix.shape[:-1], matrix.dtype)

    def apply_inverse(v):
        return spectral_functions(matrix, evecs, evals, v, jnp.asarray(1.0, matrix.dtype))[0]

    def inverse_root(factor=1.0):
        return spectral_functions(matrix, evecs, evals, zero_v, jnp.asarray(factor, matrix.dtype))[1]

    def inverse():
        return spectral_functions(matrix, evecs, evals, zero_v, jnp.asarray(1.0, matrix.dtype))[2]

    return Solved(apply_inverse, inverse_root, inverse, size)


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
