"""Climatological mean and covariance of a model from one long free run.

Used by 3D-Var (B = b_scale x climatological covariance) and by the
climatology reference run. Computed once per model setting in a process and
kept in memory (the computation is a fraction of a second for Lorenz-96 n=40).
"""

import jax
import jax.numpy as jnp
import numpy as np

from assimbench.integrators import make_flow
from assimbench.models import Model

_CACHE: dict = {}


def climatology(model: Model, samples: int = 20000, spacing: float = 0.1, seed: int = 0):
    """(mean (n,), covariance (n, n)) from ``samples`` states ``spacing`` apart on the attractor.

    The run starts from the model's first guess, is spun up, and uses the
    model's default parameters. Samples 0.1 time units apart on Lorenz-96
    are nearly independent (its decorrelation time is a few tenths; from memory).
    """
    key = (model.name, model.size, model.dt, tuple(sorted(model.params.items())), samples, spacing, seed)
    if key not in _CACHE:
        spin = make_flow(model.tendency, model.dt, max(1, round(model.spinup_time / model.dt)))
        step = make_flow(model.tendency, model.dt, max(1, round(spacing / model.dt)))
        params = {k: jnp.asarray(v) for k, v in model.params.items()}

        @jax.jit
        def trajectory(key):
            x0 = spin(model.first_guess(key, params), params)
            return jax.lax.scan(lambda x, _: (step(x, params),) * 2, x0, None, length=samples)[1]

        states = np.asarray(trajectory(jax.random.PRNGKey(seed)))
        _CACHE[key] = (states.mean(axis=0), np.cov(states, rowvar=False).reshape(model.size, model.size))
    return _CACHE[key]
