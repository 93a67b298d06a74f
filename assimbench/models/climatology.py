"""Climatological mean and covariance of a model from one long free run.

Used by 3D-Var and 4D-Var (B = b_scale x climatological covariance), by the
climatology reference run, by the divergence rule and by fitted closures. One
draw per model setting: SAMPLES states SPACING apart after the model's spin-up
from its first guess, kept in memory for the process. The sampling program
takes the model's parameters as traced arguments, so it is compiled once per
model's static parts (name, size, step, resolved variables, static choices)
and serves every parameter setting and every lane (a fraction of a second of
sampling for Lorenz-96 n=40).
"""

from collections import OrderedDict

import jax
import jax.numpy as jnp
import numpy as np

from assimbench.integrators import make_model_flow
from assimbench.models.base import Model

SAMPLES = 20000
SPACING = 0.1  # nearly independent on Lorenz-96: its decorrelation time is a few tenths (from memory)
SEED = 0



class BoundedCache:
    """A dict that keeps its ``limit`` most recently used entries (a long sweep over model settings in
    one process must not hold every setting's draw: a two-scale draw is about 60 MB)."""

    def __init__(self, limit: int):
        self.limit = limit
        self._entries = OrderedDict()

    def get(self, key, make):
        """The entry of ``key``, made by ``make()`` when missing."""
        if key in self._entries:
            self._entries.move_to_end(key)
        else:
            self._entries[key] = make()
            while len(self._entries) > self.limit:
                self._entries.popitem(last=False)
        return self._entries[key]


_PROGRAMS = BoundedCache(16)
_SAMPLES = BoundedCache(8)
_MOMENTS = BoundedCache(32)


def static_key(model: Model) -> tuple:
    """A hashable key of the parts of a model that fix its compiled programs."""
    return (model.name, model.size, model.dt, model.resolved, model.static)


def model_key(model: Model) -> tuple:
    """A hashable key of a model's static parts and its default parameters (array parameters too)."""
    params = tuple(sorted((k, tuple(np.ravel(v).tolist())) for k, v in model.params.items()))
    return (*static_key(model), params)


def _sampler(model: Model):
    """The jitted ``trajectory(key, params) -> (SAMPLES, n)`` of models with this static key."""

    def make():
        spin = make_model_flow(model, max(1, round(model.spinup_time / model.dt)))
        step = make_model_flow(model, max(1, round(SPACING / model.dt)))

        @jax.jit
        def trajectory(rng, params):
            x0 = spin(model.first_guess(rng, params), params)
            return jax.lax.scan(lambda x, _: (step(x, params),) * 2, x0, None, length=SAMPLES)[1]

        return trajectory

    return _PROGRAMS.get(static_key(model), make)


def attractor_samples(model: Model) -> np.ndarray:
    """(SAMPLES, n) states SPACING apart on the attractor, with the model's default parameters (cached)."""
    def make():
        params = {k: jnp.asarray(v, dtype=jnp.float64) for k, v in model.params.items()}
        return np.asarray(_sampler(model)(jax.random.PRNGKey(SEED), params))

    return _SAMPLES.get(model_key(model), make)


def climatology(model: Model):
    """(mean (n,), covariance (n, n)) of :func:`attractor_samples`."""
    def make():
        states = attractor_samples(model)
        return states.mean(axis=0), np.cov(states, rowvar=False).reshape(model.size, model.size)

    return _MOMENTS.get(model_key(model), make)


def climate_std(model: Model) -> float:
    """Climatological standard deviation of one resolved variable (mean over them): the divergence rule's scale."""
    _, covariance = climatology(model)
    return float(np.sqrt(np.mean(np.diag(covariance)[: model.resolved_size])))
