"""The learning loop: gradient steps on the unconstrained values, one gradient pass per step.

Each iteration runs one gradient pass (:func:`assimbench.learning.windows.make_gradient_pass`) over
the whole twin at the current values: the objective is the mean window objective over replicates and
windows, the gradient the mean window gradient, and its standard error the windows' spread over the
square root of their number (windows treated as independent: an estimate of the noise, not a bound).
The optimizer is Adam by default (:class:`Optimizer`: its steps are of the rate's size in every
unconstrained coordinate whatever the gradient's scale, which differs by orders of magnitude between
an inflation and a forcing; Kingma & Ba 2015, ICLR; with less momentum than usual,
:data:`ADAM_MOMENTUM`), with the rate decaying along a cosine to 2% of itself so that the last steps
settle. It is written here, a few lines of NumPy, rather than taken from Optax: importing Optax
imports absl's logging, which broke pytest's output capture for every later test in the same
process (seen in the clean-clone CI). Every pass is the same compiled program: values are traced.
"""

import math
import time
from dataclasses import dataclass, field

import jax
import jax.numpy as jnp
import numpy as np
from omegaconf import OmegaConf

from assimbench.learning.learnables import free_values, values_of
from assimbench.learning.windows import make_gradient_pass, make_twin_data
from assimbench.twin.cycling import replicate_keys


@dataclass
class Step:
    """One gradient pass: the values it ran at, the objective's mean over the windows used, the mean
    gradient with respect to each value (dJ/dvalue) and its standard error, the windows used and not
    finite, and the first non-finite window (replicate, window) or None."""

    iteration: int
    values: np.ndarray
    objective: float
    gradient: np.ndarray
    gradient_error: np.ndarray
    used: int
    nonfinite: int
    first_nonfinite: tuple | None
    seconds: float


@dataclass
class History:
    """Every step of a fit, and how it ended: ``finished`` (all iterations), or ``stopped`` with why."""

    steps: list = field(default_factory=list)
    stopped: str | None = None


def value_slopes(learnables: tuple, free: np.ndarray) -> np.ndarray:
    """(q,) d value / d u at ``free``: the chain rule from the unconstrained gradient to the value's."""
    return np.array([float(jax.grad(item.from_free)(jnp.asarray(free[j], jnp.float64)))
                     for j, item in enumerate(learnables)])


def summarise(iteration: int, learnables: tuple, free, losses, grads, seconds: float, keep_finite: bool) -> tuple:
    """(Step, mean unconstrained gradient or None) of one pass's (R, W) losses and (R, W, q) gradients.
    With ``keep_finite`` the non-finite windows are left out of the means; otherwise a non-finite
    window makes the gradient None."""
    losses, grads = np.asarray(losses), np.asarray(grads)
    finite = np.isfinite(losses) & np.all(np.isfinite(grads), axis=-1)
    bad = np.argwhere(~finite)
    first = tuple(int(i) for i in bad[0]) if bad.size else None
    used = int(finite.sum())
    free = np.asarray(free)
    slopes = value_slopes(learnables, free)
    if used == 0 or (bad.size and not keep_finite):
        nan = np.full(len(learnables), np.nan)
        step = Step(iteration, values_of(learnables, free), float("nan"), nan, nan, used, int(bad.shape[0]), first,
                    seconds)
        return step, None
    kept = grads[finite]  # (used, q), unconstrained
    mean_free = kept.mean(axis=0)
    error_free = kept.std(axis=0, ddof=1) / np.sqrt(used) if used > 1 else np.full(len(learnables), np.nan)
    step = Step(iteration, values_of(learnables, free), float(losses[finite].mean()), mean_free / slopes,
                error_free / np.abs(slopes), used, int(bad.shape[0]), first, seconds)
    return step, mean_free


# Adam's first-moment decay: 0.5 instead of the usual 0.9. The gradients here are averages over every
# window, precise rather than noisy, and with 0.9 the momentum overshot: learning the forcing from 7,
# 0.9 went past 8.3 (where the filter loses the truth) and back, ending at 7.91 after 40 steps; 0.5
# reached 7.987 with the gradient 0 (measured on the demo ring, 600 cycles x 2 replicates).
ADAM_MOMENTUM = 0.5


ADAM_DECAY, ADAM_EPSILON = 0.999, 1e-8  # Kingma & Ba (2015)'s defaults for the second moment
FINAL_RATE = 0.02  # the cosine decay ends at this fraction of the rate


def cosine_rate(rate: float, step: int, steps: int) -> float:
    """The step size of step ``step`` (0, 1, ...): rate ((1 - a) (1 + cos(pi min(step, steps) / steps)) / 2 + a),
    a = :data:`FINAL_RATE` (cosine annealing, Loshchilov & Hutter 2017, ICLR; from memory)."""
    steps = max(steps, 1)
    return rate * ((1.0 - FINAL_RATE) * 0.5 * (1.0 + math.cos(math.pi * min(step, steps) / steps)) + FINAL_RATE)


class Optimizer:
    """Adam (Kingma & Ba 2015, ICLR, Algorithm 1) or plain gradient descent on a vector, with the
    cosine-decaying rate; ``step(gradient, values) -> values``. Adam: m <- b1 m + (1 - b1) g,
    v <- b2 v + (1 - b2) g^2, u <- u - rate_t (m / (1 - b1^t)) / (sqrt(v / (1 - b2^t)) + eps)."""

    def __init__(self, name: str, rate: float, steps: int):
        self.name, self.rate, self.steps = name, rate, steps
        self.count, self.first, self.second = 0, None, None

    def step(self, gradient: np.ndarray, values: np.ndarray) -> np.ndarray:
        gradient = np.asarray(gradient, dtype=np.float64)
        rate = cosine_rate(self.rate, self.count, self.steps)
        self.count += 1
        if self.name == "sgd":
            return values - rate * gradient
        if self.first is None:
            self.first, self.second = np.zeros_like(gradient), np.zeros_like(gradient)
        self.first = (1.0 - ADAM_MOMENTUM) * gradient + ADAM_MOMENTUM * self.first
        self.second = (1.0 - ADAM_DECAY) * gradient**2 + ADAM_DECAY * self.second
        first = self.first / (1.0 - ADAM_MOMENTUM**self.count)
        second = self.second / (1.0 - ADAM_DECAY**self.count)
        return values - rate * first / (np.sqrt(second) + ADAM_EPSILON)


def fit(gradient_pass, free, data, settings, learnables: tuple, options, report=lambda step: None) -> tuple:
    """(final unconstrained values, History): ``options.iterations`` optimizer steps from ``free``, then
    one more pass at the final values (the last Step: what the written values give). ``report(step)``
    after every pass."""
    optimizer = Optimizer(options.optimizer, options.rate, options.iterations)
    history = History()
    keep_finite = options.nonfinite == "skip"
    for iteration in range(options.iterations + 1):
        started = time.perf_counter()
        losses, grads = jax.block_until_ready(gradient_pass(free, data, settings))
        step, mean = summarise(iteration, learnables, free, losses, grads, time.perf_counter() - started, keep_finite)
        history.steps.append(step)
        report(step)
        if mean is None:
            history.stopped = (f"iteration {iteration}: {step.nonfinite} window"
                               f"{'s' if step.nonfinite != 1 else ''} with a non-finite objective or gradient")
            break
        if iteration == options.iterations:
            break
        free = jnp.asarray(optimizer.step(mean, np.asarray(free)))
    return free, history


def learn(cfg, plan, learnables: tuple, options, report=lambda step: None, compiled=None) -> tuple:
    """(final unconstrained values, History) of a whole fit of checked ``cfg`` (:func:`check_experiment`
    gives ``plan`` and ``learnables``): the twin's data, the compiled gradient pass (``compiled(program,
    free, data)`` may check and compile it first, returning the executable to call), then :func:`fit` from the configured values."""
    data = make_twin_data(plan.setup, plan.settings, replicate_keys(plan.seed, plan.replicates), plan.cycles)
    free = free_values(learnables, [float(OmegaConf.select(cfg, item.key)) for item in learnables])
    windows = (plan.cycles - plan.burn_in) // options.window
    program = make_gradient_pass(plan.setup, learnables, options.objective, options.window, windows, plan.burn_in)
    if compiled is not None:
        program = compiled(program, free, data)
    return fit(program, free, data, plan.settings, learnables, options, report)
