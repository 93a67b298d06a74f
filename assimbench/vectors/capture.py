"""The filter's state and inputs at chosen cycles of a run, exactly as the twin experiment meets them.

One jitted program: the truth run and its observations over cycles 1 .. last chosen
(:func:`assimbench.twin.cycling.make_truth_chunk`), then one ``lax.scan`` that forecasts and
analyses every cycle as :func:`assimbench.twin.cycling.make_cycle` does (the same forecast, the
same filter key fold_in(fold_in(r, 3), k)), keeping the forecast state of each chosen cycle in a
fixed-size buffer. Replicate 0 of the run's seed is used.
"""

from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from assimbench.twin.cycling import make_forecast, make_start, make_truth_chunk, replicate_keys


class Captured(NamedTuple):
    """At each chosen cycle (K of them): the filter's forecast state (its leaves (K, ...)), the
    observations (K, p), the resolved truth (K, r) and the filter's random key (K, 2)."""

    cycles: np.ndarray
    states: tuple
    observations: jax.Array
    truths: jax.Array
    keys: jax.Array


def capture(setup, settings, seed: int, cycles) -> Captured:
    """The forecast states of replicate 0 at ``cycles`` (increasing, >= 1) of the run of ``setup``
    with the traced ``settings`` (one setting, no lanes)."""
    cycles = np.asarray(cycles, dtype=np.int64)
    rkeys = replicate_keys(seed, 1)
    carry = make_start(setup)(rkeys, settings)
    run = jax.jit(_capture_program(setup, int(cycles[-1]), cycles))
    states, observations, truths, keys = run(jax.tree.map(lambda leaf: leaf[0], carry), rkeys[0], settings)
    return Captured(cycles, states, observations, truths, keys)


def _capture_program(setup, length: int, chosen: np.ndarray):
    """``run(carry, rkey, settings) -> (states, observations, truths, keys)`` over cycles 1 .. length."""
    truth_chunk = make_truth_chunk(setup.model, setup.operator, setup.steps_per_cycle, length, setup.truth_noise)
    forecast = make_forecast(setup)
    filt = setup.filter
    slots = jnp.asarray(chosen)
    count = chosen.size

    def run(carry, rkey, settings):
        _, _, truths, observations = truth_chunk(carry.truth, carry.outages, rkey, 1, settings)
        filter_key = jax.random.fold_in(rkey, 3)
        buffer = jax.tree.map(lambda leaf: jnp.zeros((count,) + leaf.shape, leaf.dtype), carry.filter_state)

        def step(state_and_buffer, inputs):
            state, buffer = state_and_buffer
            k, y = inputs
            if filt.runs_model:
                state = state._replace(members=forecast(state, settings["forecast_model"]))
            # The buffer slot of cycle k, written only when k is a chosen cycle (a fixed-shape carry).
            slot = jnp.clip(jnp.searchsorted(slots, k), 0, count - 1)
            hit = slots[slot] == k
            buffer = jax.tree.map(lambda kept, now: kept.at[slot].set(jnp.where(hit, now, kept[slot])), buffer, state)
            state, _ = filt.analyse(jax.random.fold_in(filter_key, k), state, y, settings)
            return (state, buffer), None

        cycles = 1 + jnp.arange(length)
        (_, buffer), _ = jax.lax.scan(step, (carry.filter_state, buffer), (cycles, observations))
        keys = jax.vmap(lambda k: jax.random.fold_in(filter_key, k))(slots)
        return buffer, observations[slots - 1], truths[slots - 1], keys

    return run
