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

import jax.numpy as jnp
import numpy as np

from assimbench.climatology import attractor_samples, model_key
from assimbench.models import Model, lorenz96_tendency, make_lorenz96

_FITS: dict = {}


def closure_tendency(x, params):
    """Single-scale Lorenz-96 plus g(x) with g's coefficients ``params["closure"]`` (d + 1,), lowest first."""
    coefficients = params["closure"]
    correction = sum(coefficients[i] * x**i for i in range(coefficients.shape[0]))
    return lorenz96_tendency(x, params) + correction


def fit_closure(truth: Model, forcing: float, degree: int, samples: int = 4000) -> np.ndarray:
    """(degree + 1,) least-squares coefficients of g, lowest power first (see the module docstring).

    ``truth`` must have a Lorenz-96 ring as its resolved variables;
    ``forcing`` is the forecast model's F (the closure absorbs any difference).
    """
    key = (model_key(truth), float(forcing), degree, samples)
    if key not in _FITS:
        states = attractor_samples(truth, samples=samples)
        resolved = truth.resolved_size
        params = {k: jnp.asarray(v) for k, v in truth.params.items()}
        truth_rate = np.asarray(truth.tendency(jnp.asarray(states), params))[:, :resolved]
        slow = states[:, :resolved]
        reduced_rate = np.asarray(lorenz96_tendency(jnp.asarray(slow), {"forcing": jnp.asarray(forcing)}))
        residual = (truth_rate - reduced_rate).ravel()
        design = np.vander(slow.ravel(), degree + 1, increasing=True)
        coefficients, *_ = np.linalg.lstsq(design, residual, rcond=None)
        _FITS[key] = coefficients
    return _FITS[key]


def make_lorenz96_closure(truth: Model, forcing: float, degree: int, dt: float) -> Model:
    """The reduced forecast model for ``truth``: Lorenz-96 of the truth's resolved size with g fitted."""
    base = make_lorenz96(size=truth.resolved_size, forcing=forcing, dt=dt)
    coefficients = fit_closure(truth, forcing, degree)
    return base._replace(
        name="lorenz96_closure",
        tendency=closure_tendency,
        params={"forcing": float(forcing), "closure": np.asarray(coefficients, dtype=np.float64)},
    )
