"""Gradients of a learning objective through the cycle, over truncated windows of K cycles.

The twin's truth and observations are drawn once, exactly as a run draws them
(:func:`make_twin_data`). A learning pass then cycles the filter over them
with the current values of the learned quantities (:mod:`.learnables`):

    cycles 1 .. B (the burn-in): forecast and analyse, no gradient;
    then W windows of K cycles: in window w the objective J_w is the mean of
    the per-cycle losses (:mod:`.objectives`) over its K cycles, and its
    gradient dJ_w/du is taken through the K forecasts and analyses, starting
    from the analysis that ended window w - 1 held fixed.

So each window's gradient is exact for its own window (what central finite
differences of the same window from the same start check), and the chain of
windows is one forward run of the filter: truncated back-propagation through
time. The window is a trade-off (measure it with ``learn.mode=windows``): a
setting acts on later cycles through the forecasts (an inflation that is too
small shows as an error several cycles on), which a window shorter than that
memory misses (bias); over a window much longer than the predictability time
the tangent dynamics of a chaotic model grow, and so do the gradient's size
and variance, until a window's gradient says more about that window's
trajectory than about the setting.

One program runs every replicate (vmapped) and every window (a ``lax.scan``
whose body is a ``value_and_grad`` over a ``lax.scan`` of K cycles), jitted
once per (setup, learned keys, objective, K, W); the values are traced.
"""

from typing import NamedTuple

import jax
import jax.numpy as jnp

from assimbench.learning.learnables import with_learned
from assimbench.learning.objectives import analysis_rmse, innovation_loss
from assimbench.twin.cycling import TwinSetup, make_forecast, make_start, make_truth_chunk


class TwinData(NamedTuple):
    """One twin's data, per replicate: truths (R, C, r) of cycles 1 .. C, observations ys (R, C, p), the
    filter's first state (its members from the spun-up truth plus noise) and the replicate keys (R, 2)."""

    truths: jax.Array
    ys: jax.Array
    start: tuple
    keys: jax.Array


def make_twin_data(setup: TwinSetup, settings: dict, keys: jax.Array, cycles: int) -> TwinData:
    """The truth, the observations and the filter's first state of every replicate key, drawn as a run
    of the main command draws them (assimbench/twin/cycling.py: same keys, same cycle numbers)."""
    carry = make_start(setup)(keys, settings)
    chunk = make_truth_chunk(setup.model, setup.operator, setup.steps_per_cycle, cycles, setup.truth_noise)
    truth_all = jax.jit(jax.vmap(chunk, in_axes=(0, 0, 0, None, None)))
    _, _, truths, ys = truth_all(carry.truth, carry.outages, keys, 1, settings)
    return TwinData(truths, ys, carry.filter_state, keys)


def make_cycle_loss(setup: TwinSetup, objective: str):
    """``cycle(state, k, truth, y, settings, filter_key) -> (analysed, loss)``: one forecast and analysis
    of cycle k as a run does them, and the cycle's loss (:mod:`.objectives`)."""
    filt, forecast = setup.filter, make_forecast(setup)
    operator = setup.assimilated_operator

    def cycle(state, k, truth, y, settings, filter_key):
        if filt.runs_model:
            state = state._replace(members=forecast(state, settings["forecast_model"]))
        analysed, _ = filt.analyse(jax.random.fold_in(filter_key, k), state, y, settings)
        if objective == "innovation":
            loss = innovation_loss(state.members, y, operator, settings)
        else:
            loss = analysis_rmse(analysed.members, truth)
        return analysed, loss

    return cycle


def make_window_loss(setup: TwinSetup, learnables: tuple, objective: str):
    """``window_loss(free, state, cycles, truths, ys, settings, filter_key) -> (J, (state_end, losses))``:
    the mean loss over the window's cycles (K,) with truths (K, r) and ys (K, p), from filter state
    ``state``, with the learned quantities at unconstrained ``free`` (q,); differentiable in ``free``."""
    cycle = make_cycle_loss(setup, objective)

    def window_loss(free, state, cycles, truths, ys, settings, filter_key):
        learned = with_learned(settings, learnables, free)
        step = lambda s, inputs: cycle(s, *inputs, learned, filter_key)
        end, losses = jax.lax.scan(step, state, (cycles, truths, ys))
        return losses.mean(), (end, losses)

    return window_loss


def make_gradient_pass(setup: TwinSetup, learnables: tuple, objective: str, window: int, windows: int,
                       burn_in: int):
    """Jitted ``gradient_pass(free, data, settings) -> (losses (R, W), gradients (R, W, q))``: the burn-in
    without gradient, then ``windows`` windows of ``window`` cycles, each window's objective and its
    gradient with respect to ``free`` (module text). Cycles after burn_in + windows x window are not used."""
    cycle = make_cycle_loss(setup, objective)
    gradient = jax.value_and_grad(make_window_loss(setup, learnables, objective), has_aux=True)

    def one_replicate(free, start, truths, ys, rkey, settings):
        filter_key = jax.random.fold_in(rkey, 3)
        learned = with_learned(settings, learnables, free)
        cycles = jnp.arange(1, burn_in + 1)
        state, _ = jax.lax.scan(lambda s, inputs: cycle(s, *inputs, learned, filter_key), start,
                                (cycles, truths[:burn_in], ys[:burn_in]))
        used = slice(burn_in, burn_in + window * windows)
        shaped = lambda a: a[used].reshape((windows, window) + a.shape[1:])
        numbers = shaped(jnp.arange(1, truths.shape[0] + 1))

        def one_window(state, inputs):
            (value, (end, _)), grad = gradient(free, state, *inputs, settings, filter_key)
            return jax.lax.stop_gradient(end), (value, grad)

        _, (values, grads) = jax.lax.scan(one_window, jax.lax.stop_gradient(state),
                                          (numbers, shaped(truths), shaped(ys)))
        return values, grads

    batched = jax.vmap(one_replicate, in_axes=(None, 0, 0, 0, 0, None))
    return jax.jit(lambda free, data, settings: batched(free, data.start, data.truths, data.ys, data.keys, settings))
