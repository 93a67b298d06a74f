"""Climatological mean and covariance of a model from one long free run.

Used by 3D-Var (B = b_scale x climatological covariance), by the climatology
reference run, by the divergence rule and by fitted closures. Computed once
per model setting in a process and kept in memory (a fraction of a second
for Lorenz-96 n=40).
"""

import jax
import jax.numpy as jnp
import numpy as np

from assimbench.integrators import make_model_flow
from assimbench.models import Model

_SAMPLES: dict = {}
_MOMENTS: dict = {}


def model_key(model: Model) -> tuple:
    """A hashable key of a model's static parts and default parameters (array parameters too)."""
    params = tuple(sorted((k, tuple(np.ravel(v).tolist())) for k, v in model.params.items()))
    return (model.name, model.size, model.dt, params)


def attractor_samples(model: Model, samples: int = 20000, spacing: float = 0.1, seed: int = 0) -> np.ndarray:
    """(samples, n) states ``spacing`` apart on the attractor, after the model's spin-up from its
    first guess, with the model's default parameters (one jitted scan; cached).

    Samples 0.1 time units apart on Lorenz-96 are nearly independent (its
    decorrelation time is a few tenths; from memory).
    """
    key = (model_key(model), samples, spacing, seed)
    if key not in _SAMPLES:
        spin = make_model_flow(model, max(1, round(model.spinup_time / model.dt)))
        step = make_model_flow(model, max(1, round(spacing / model.dt)))
        params = {k: jnp.asarray(v) for k, v in model.params.items()}

        @jax.jit
        def trajectory(key):
            x0 = spin(model.first_guess(key, params), params)
            return jax.lax.scan(lambda x, _: (step(x, params),) * 2, x0, None, length=samples)[1]

        _SAMPLES[key] = np.asarray(trajectory(jax.random.PRNGKey(seed)))
    return _SAMPLES[key]


def climatology(model: Model, samples: int = 20000, spacing: float = 0.1, seed: int = 0):
    """(mean (n,), covariance (n, n)) of :func:`attractor_samples`."""
    key = (model_key(model), samples, spacing, seed)
    if key not in _MOMENTS:
        states = attractor_samples(model, samples, spacing, seed)
        _MOMENTS[key] = (states.mean(axis=0), np.cov(states, rowvar=False).reshape(model.size, model.size))
    return _MOMENTS[key]
