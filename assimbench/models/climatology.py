"""Climatological mean and covariance of a model from one long free run.

Used by the variational and hybrid filters (B = a scale x climatological covariance), by the
climatology reference run, by the divergence rule and by fitted closures. One
trajectory per model setting: states SPACING apart after the model's spin-up
from its first guess, drawn in blocks of BLOCK states and extended only as far
as a user needs (the divergence rule and the closure fit use the first block,
the covariance of B all SAMPLES), so every user sees a prefix of the same
draw. The programs take the model's parameters as traced arguments, so they
are compiled once per model's static parts (name, size, step, resolved
variables, static choices) and serve every parameter setting and every lane.
The trajectories are kept for the most recent settings only (bounded caches).
"""

from collections import OrderedDict

import jax
import jax.numpy as jnp
import numpy as np

from assimbench.integrators import make_model_flow
from assimbench.models.base import Model

BLOCK = 4000
SAMPLES = 5 * BLOCK
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
_TRAJECTORIES = BoundedCache(8)
_MOMENTS = BoundedCache(32)


def static_key(model: Model) -> tuple:
    """A hashable key of the parts of a model that fix its compiled programs."""
    return (model.name, model.size, model.dt, model.resolved, model.static)


def model_key(model: Model) -> tuple:
    """A hashable key of a model's static parts and its default parameters (array parameters too)."""
    params = tuple(sorted((k, tuple(np.ravel(v).tolist())) for k, v in model.params.items()))
    return (*static_key(model), params)


def _programs(model: Model) -> tuple:
    """The jitted ``start(rng, params) -> x0`` (spin-up from the first guess) and ``block(x, params) ->
    (x_end, (BLOCK, n) states)`` of models with this static key."""

    def make():
        spin = make_model_flow(model, max(1, round(model.spinup_time / model.dt)))
        step = make_model_flow(model, max(1, round(SPACING / model.dt)))
        start = jax.jit(lambda rng, params: spin(model.first_guess(rng, params), params))
        block = jax.jit(lambda x, params: jax.lax.scan(lambda y, _: (step(y, params),) * 2, x, None, length=BLOCK))
        return start, block

    return _PROGRAMS.get(static_key(model), make)


def attractor_samples(model: Model, samples: int = SAMPLES) -> np.ndarray:
    """(samples, n) states SPACING apart on the attractor, with the model's default parameters: the first
    ``samples`` (a multiple of BLOCK, at most SAMPLES) of the model's one trajectory (cached, extended
    block by block when more are asked for)."""
    if samples % BLOCK or not 0 < samples <= SAMPLES:
        raise ValueError(f"samples must be a multiple of {BLOCK} up to {SAMPLES}, got {samples}")
    params = {k: jnp.asarray(v, dtype=jnp.float64) for k, v in model.params.items()}
    start, block = _programs(model)
    trajectory = _TRAJECTORIES.get(model_key(model), lambda: {"end": start(jax.random.PRNGKey(SEED), params),
                                                                "blocks": []})
    while len(trajectory["blocks"]) * BLOCK < samples:
        trajectory["end"], states = block(trajectory["end"], params)
        trajectory["blocks"].append(np.asarray(states))
    return np.concatenate(trajectory["blocks"][: samples // BLOCK])


def climatology(model: Model):
    """(mean (n,), covariance (n, n)) of :func:`attractor_samples`."""
    def make():
        states = attractor_samples(model)
        return states.mean(axis=0), np.cov(states, rowvar=False).reshape(model.size, model.size)

    return _MOMENTS.get(model_key(model), make)


def climate_std(model: Model) -> float:
    """Climatological standard deviation of one resolved variable (mean over them) from the first block:
    the divergence rule's scale, which needs no more."""
    states = attractor_samples(model, BLOCK)
    covariance = np.cov(states, rowvar=False).reshape(model.size, model.size)
    return float(np.sqrt(np.mean(np.diag(covariance)[: model.resolved_size])))
