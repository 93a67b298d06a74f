"""A reduced forecast model: single-scale Lorenz-96 with a fitted polynomial closure.

The forecast model is

    dX_k/dt = X_{k-1} (X_{k+1} - X_{k-2}) - X_k + F + g(X_k),
    g(X) = a_0 + a_1 X + ... + a_d X^d,

where g stands for everything the truth does to its resolved (slow) variables
that the single-scale equation leaves out: for the two-scale Lorenz-96 truth
that is the coupling -(h c / b) sum_j Y_{j,k}. The coefficients are fitted by
least squares to the instantaneous tendency error over a long truth run,

    r_k(t) = [f_truth(x(t))]_k - f_L96(X(t))_k,  minimise sum_{t,k} (r_k - g(X_k))^2,

the deterministic parameterisation of Wilks (2005, Q. J. R. Meteorol. Soc.
131, eq. 5-6, a quartic; Arnold, Moroz & Palmer 2013 use a cubic), fitted to
the tendency itself rather than its finite-difference estimate. Samples all
variables k alike, since the ring is homogeneous. Cached per truth setting.
"""

from dataclasses import dataclass

import jax.numpy as jnp
import numpy as np

from assimbench.config.spec import DerivedModelSpec, ModelFacts, NodeChecks
from assimbench.models.base import Model
from assimbench.models.climatology import BLOCK, BoundedCache, attractor_samples, model_key
from assimbench.models.lorenz96 import lorenz96_tendency, make_lorenz96

# States of the truth's climatological trajectory the fit uses: a least-squares fit of a few
# coefficients to 4,000 states x all ring variables is converged (its first block).
FIT_SAMPLES = BLOCK

_FITS = BoundedCache(32)


def closure_tendency(x, params):
    """Single-scale Lorenz-96 plus g(x) with g's coefficients ``params["closure"]`` (d + 1,), lowest first."""
    coefficients = params["closure"]
    correction = sum(coefficients[i] * x**i for i in range(coefficients.shape[0]))
    return lorenz96_tendency(x, params) + correction


def fit_closure(truth: Model, forcing: float, degree: int) -> np.ndarray:
    """(degree + 1,) least-squares coefficients of g, lowest power first (see the module docstring).

    ``truth`` must have a Lorenz-96 ring as its resolved variables;
    ``forcing`` is the forecast model's F (the closure absorbs any difference).
    """
    def fit():
        states = attractor_samples(truth, FIT_SAMPLES)
        resolved = truth.resolved_size
        params = {k: jnp.asarray(v) for k, v in truth.params.items()}
        truth_rate = np.asarray(truth.tendency(jnp.asarray(states), params))[:, :resolved]
        slow = states[:, :resolved]
        reduced_rate = np.asarray(lorenz96_tendency(jnp.asarray(slow), {"forcing": jnp.asarray(forcing)}))
        residual = (truth_rate - reduced_rate).ravel()
        design = np.vander(slow.ravel(), degree + 1, increasing=True)
        return np.linalg.lstsq(design, residual, rcond=None)[0]

    return _FITS.get((model_key(truth), float(forcing), degree), fit)


def make_lorenz96_closure(truth: Model, forcing: float, degree: int, dt: float) -> Model:
    """The reduced forecast model for ``truth``: Lorenz-96 of the truth's resolved size with g fitted."""
    base = make_lorenz96(size=truth.resolved_size, forcing=forcing, dt=dt)
    coefficients = fit_closure(truth, forcing, degree)
    return base._replace(
        name="lorenz96_closure",
        tendency=closure_tendency,
        params={"forcing": float(forcing), "closure": np.asarray(coefficients, dtype=np.float64)},
    )


@dataclass
class Lorenz96ClosureConfig:
    """Forecast with single-scale Lorenz-96 of the truth's resolved size plus a polynomial
    closure g(X) of ``degree``, fitted by least squares to a truth run (see the module docstring)."""

    name: str = "lorenz96_closure"
    forcing: float = 10.0
    degree: int = 3
    dt: float = 0.005


def _check(c: NodeChecks, truth: ModelFacts) -> None:
    if not truth.lorenz96_ring:
        c.fail("", "lorenz96_closure", f"a truth model whose resolved variables are a Lorenz-96 ring, not {truth.name}")
    c.real("forcing", "a finite number")
    c.integer("degree", 0, "an integer from 0 to 6", maximum=6)


SPEC = DerivedModelSpec(
    name="lorenz96_closure",
    schema=Lorenz96ClosureConfig,
    build=lambda node, truth: make_lorenz96_closure(truth, float(node.forcing), int(node.degree), float(node.dt)),
    sizes=lambda node, truth: (truth.resolved, truth.resolved),
    ring=lambda truth: True,
    check=_check,
    traced=("forcing",),
    estimable=lambda node: ("forcing",) + tuple(f"closure_{i}" for i in range(int(node.degree) + 1)),
)
