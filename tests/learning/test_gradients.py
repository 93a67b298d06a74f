"""Gradients through the cycle: the learning pass is the run, and its gradients are those of the objective.

The finite-difference checks compare reverse-mode gradients of one window's objective, from a fixed
start, with central differences of the same objective (common practice: error O(h^2)); the spectral
check compares the derivative of A^(-1/2) with central differences of scipy's matrix square root.
"""

import jax
import jax.numpy as jnp
import numpy as np
import pytest
import scipy.linalg
from scipy.stats import multivariate_normal

from assimbench.api import run_experiment
from assimbench.config.checks import ConfigError
from assimbench.config.composition import compose_config
from assimbench.filters.kalman.precision_solvers import solve_eigh
from assimbench.learning.learnables import free_values, learnable
from assimbench.learning.loop import Optimizer, cosine_rate
from assimbench.learning.objectives import innovation_loss
from assimbench.learning.study import LearnOptions, check_experiment
from assimbench.learning.windows import make_gradient_pass, make_twin_data, make_window_loss
from assimbench.observations.operators import every_kth
from assimbench.twin.cycling import replicate_keys


def _options(parameters, objective="innovation", window=5):
    return LearnOptions(parameters=tuple(parameters), objective=objective, window=window, iterations=1, rate=0.1,
                        optimizer="adam", nonfinite="stop", mode="fit", windows=(window,), study="unused")


def test_the_learning_pass_cycles_exactly_as_a_run():
    """At fixed settings, the analysis RMSE of every cycle of the learning program (its forward pass)
    equals the main command's stored series for 300 cycles of both replicates: the same forecasts,
    analyses and random numbers (agreement to round-off; a chaotic run would drift apart otherwise)."""
    overrides = ["filter=enkf", "filter.members=10", "filter.inflation=1.05", "cycles=300", "burn_in=0",
                 "replicates=2"]
    cfg = compose_config(overrides)
    plan, learnables = check_experiment(cfg, _options(["filter.inflation"], "truth"))
    data = make_twin_data(plan.setup, plan.settings, replicate_keys(plan.seed, plan.replicates), plan.cycles)
    window_loss = make_window_loss(plan.setup, learnables, "truth")
    free = free_values(learnables, [1.05])
    cycles = jnp.arange(1, plan.cycles + 1)
    stored = run_experiment(cfg).series["rmse_analysis"]
    for replicate in range(2):
        filter_key = jax.random.fold_in(data.keys[replicate], 3)
        start = jax.tree.map(lambda a, r=replicate: a[r], data.start)
        _, (_, losses) = jax.jit(window_loss)(free, start, cycles, data.truths[replicate], data.ys[replicate],
                                             plan.settings, filter_key)
        np.testing.assert_allclose(np.asarray(losses), stored[replicate], rtol=1e-9, atol=1e-12)


CASES = {
    # ETKF inflation from the innovation likelihood
    "etkf inflation": (["filter.inflation=1.04"], ["filter.inflation"], "innovation"),
    # LETKF radius and inflation from the analysis error; at radius 2 a local analysis sees 9
    # observations with 10 members, so A's eigenvalue N - 1 repeats (the spectral derivative's case)
    "letkf radius": (["filter=letkf", "filter.members=10", "filter.radius=2.0", "filter.inflation=1.05"],
                     ["filter.radius", "filter.inflation"], "truth"),
    # a wrong forecast model's forcing from the innovation likelihood
    "forcing": (["forecast_model=lorenz96", "forecast_model.forcing=7.5", "filter.inflation=1.03"],
                ["forecast_model.forcing"], "innovation"),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_window_gradients_equal_central_differences(case):
    """The reverse-mode gradient of one window's objective (8 cycles after a 40-cycle spin-up, from the
    spun-up state held fixed) equals the central difference (J(u + h) - J(u - h)) / 2h of the same
    objective, h = 1e-5 in the unconstrained value, to 1e-6 relative (the difference's own error
    here is about 1e-8)."""
    overrides, parameters, objective = CASES[case]
    cfg = compose_config(overrides + ["cycles=48", "burn_in=0", "replicates=1"])
    plan, learnables = check_experiment(cfg, _options(parameters, objective))
    data = make_twin_data(plan.setup, plan.settings, replicate_keys(plan.seed, 1), plan.cycles)
    window_loss = jax.jit(make_window_loss(plan.setup, learnables, objective))
    free = free_values(learnables, [float(cfg_value) for cfg_value in (_select(cfg, p) for p in parameters)])
    filter_key = jax.random.fold_in(data.keys[0], 3)
    start = jax.tree.map(lambda a: a[0], data.start)
    spin = slice(0, 40)
    _, (state, _) = window_loss(free, start, jnp.arange(1, 41), data.truths[0, spin], data.ys[0, spin],
                                plan.settings, filter_key)
    window = (jnp.arange(41, 49), data.truths[0, 40:48], data.ys[0, 40:48])
    objective_at = lambda u: window_loss(u, state, *window, plan.settings, filter_key)[0]
    gradient = np.asarray(jax.jit(jax.grad(objective_at))(free))
    assert np.all(gradient != 0.0)
    h = 1e-5
    for j in range(len(learnables)):
        step = jnp.zeros_like(free).at[j].set(h)
        difference = (float(objective_at(free + step)) - float(objective_at(free - step))) / (2 * h)
        np.testing.assert_allclose(gradient[j], difference, rtol=1e-6, err_msg=learnables[j].key)


def _select(cfg, key):
    node = cfg
    for part in key.split("."):
        node = node[part]
    return node


def test_the_matrix_function_derivative_holds_where_eigenvalues_repeat():
    """A = 7 I + Y Y^T with Y (8, 3): the eigenvalue 7 repeats five times. The derivative of
    A^(-1/2) along a symmetric E equals central differences of scipy.linalg.sqrtm(inv(A + tE))
    (scipy as the outside reference) to 1e-8, where differentiating the eigenvectors (JAX's own
    eigh derivative) is not finite."""
    rng = np.random.default_rng(4)
    y = rng.normal(size=(8, 3))
    y -= y.mean(axis=0)
    a = 7.0 * np.eye(8) + y @ y.T
    e = rng.normal(size=(8, 8))
    e = e + e.T
    root = lambda t: solve_eigh(jnp.asarray(a) + t * e).inverse_root()
    _, tangent = jax.jvp(root, (0.0,), (1.0,))
    h = 1e-5
    reference = lambda t: np.real(scipy.linalg.sqrtm(np.linalg.inv(a + t * e)))
    difference = (reference(h) - reference(-h)) / (2 * h)
    np.testing.assert_allclose(np.asarray(tangent), difference, atol=1e-8)

    def through_eigenvectors(t):
        w, v = jnp.linalg.eigh(jnp.asarray(a) + t * e)
        return (v / jnp.sqrt(w)) @ v.T

    assert not np.all(np.isfinite(np.asarray(jax.jvp(through_eigenvectors, (0.0,), (1.0,))[1])))


def test_the_innovation_loss_is_the_gaussian_predictive_density():
    """-log N(y; mean h(x_i), Y^T Y / (N - 1) + R) / p from scipy.stats.multivariate_normal (the outside
    reference) for an ensemble of 6 members, 40 variables, every other one observed with error 0.7."""
    rng = np.random.default_rng(2)
    members = rng.normal(size=(6, 40))
    operator = every_kth(40, 2)
    y = rng.normal(size=20)
    settings = {"filter": {}, "observation": {"error_std": 0.7}}
    value = float(innovation_loss(jnp.asarray(members), jnp.asarray(y), operator, settings))
    observed = members[:, ::2]
    covariance = np.cov(observed, rowvar=False) + 0.49 * np.eye(20)
    expected = -multivariate_normal(observed.mean(axis=0), covariance).logpdf(y) / 20
    np.testing.assert_allclose(value, expected, rtol=1e-12)


def test_a_second_pass_does_not_compile_again():
    """Every step of a fit calls the same compiled program: the values are traced."""
    cfg = compose_config(["filter.inflation=1.05", "cycles=40", "burn_in=10", "replicates=1"])
    plan, learnables = check_experiment(cfg, _options(["filter.inflation"]))
    data = make_twin_data(plan.setup, plan.settings, replicate_keys(plan.seed, 1), plan.cycles)
    program = make_gradient_pass(plan.setup, learnables, "innovation", 5, 6, plan.burn_in)
    for value in (1.05, 1.02, 1.1):
        program(free_values(learnables, [value]), data, plan.settings)
    assert program._cache_size() == 1


def test_a_learnable_refuses_what_makes_the_data():
    """The truth's own model and the observations' errors are refused, in one line."""
    with pytest.raises(ConfigError, match="makes the truth"):
        learnable("model.forcing", {}, {}, 8.0)


def test_a_learned_radius_beyond_the_configured_one_is_the_run_at_that_radius():
    """The LETKF's observation window is built for the largest radius a fit may reach (a quarter of
    the ring), so the forward pass at radius 6, configured 2, is a run at radius 6 (its own window):
    the analysis RMSE of every cycle agrees for 100 cycles (to rounding: the wider window only adds
    observations of zero weight)."""
    cfg = compose_config(["filter=letkf", "filter.members=10", "filter.radius=2.0", "cycles=100", "burn_in=0",
                          "replicates=1"])
    plan, learnables = check_experiment(cfg, _options(["filter.radius"], "truth"))
    assert learnables[0].map == "logistic" and learnables[0].high == 10.0
    data = make_twin_data(plan.setup, plan.settings, replicate_keys(plan.seed, 1), plan.cycles)
    window_loss = jax.jit(make_window_loss(plan.setup, learnables, "truth"))
    start = jax.tree.map(lambda a: a[0], data.start)
    _, (_, losses) = window_loss(free_values(learnables, [6.0]), start, jnp.arange(1, 101), data.truths[0],
                                 data.ys[0], plan.settings, jax.random.fold_in(data.keys[0], 3))
    wide = run_experiment(compose_config(["filter=letkf", "filter.members=10", "filter.radius=6.0", "cycles=100",
                                          "burn_in=0", "replicates=1"]))
    np.testing.assert_allclose(np.asarray(losses), wide.series["rmse_analysis"][0], rtol=1e-8)


@pytest.mark.parametrize("key, value", [("filter.inflation", 1.03), ("filter.additive_std", 0.2),
                                        ("filter.rtps", 0.6), ("forecast_model.forcing", -3.5)])
def test_the_unconstrained_maps_invert_and_keep_values_in_range(key, value):
    """value -> u -> value is the identity, and any u gives a value the config allows."""
    section, _, name = key.partition(".")
    traced = {"filter": ("inflation", "additive_std", "rtps"), "forecast_model": ("forcing",)}
    item = learnable(key, {section: {name: value}}, traced, value)
    assert float(item.from_free(item.to_free(value))) == pytest.approx(value, rel=1e-14)
    for u in (-30.0, -1.0, 0.0, 2.0, 30.0):
        mapped = float(item.from_free(u))
        assert item.low <= mapped <= item.high


def test_at_the_truths_forcing_the_likelihood_gradient_is_zero_on_average():
    """The score has mean zero at the true parameter (a textbook identity of maximum likelihood; here
    for the ensemble's Gaussian approximation, so checked, not assumed): a forecast model with the
    truth's own forcing 8 gets a mean window gradient within 3 standard errors of 0 (70 windows of 10
    cycles x 2 replicates), while at 7.5 the same gradient is far from 0 and says to raise it."""
    for forcing, centred in ((8.0, True), (7.5, False)):
        cfg = compose_config(["forecast_model=lorenz96", f"forecast_model.forcing={forcing}", "cycles=800",
                              "burn_in=100", "replicates=2"])
        plan, learnables = check_experiment(cfg, _options(["forecast_model.forcing"]))
        data = make_twin_data(plan.setup, plan.settings, replicate_keys(plan.seed, 2), plan.cycles)
        program = make_gradient_pass(plan.setup, learnables, "innovation", 10, 70, plan.burn_in)
        _, grads = program(free_values(learnables, [forcing]), data, plan.settings)
        grads = np.asarray(grads).reshape(-1)
        mean, error = grads.mean(), grads.std(ddof=1) / np.sqrt(grads.size)
        assert (abs(mean) < 3 * error) if centred else (mean < -10 * error), (forcing, mean, error)


def test_the_optimizer_takes_adams_steps():
    """Adam's first step is rate g / (|g| + eps) per coordinate whatever the gradient's scale (its
    bias corrections make m = g and v = g^2 at step 1; Kingma & Ba 2015, ICLR, Algorithm 1), the
    rate follows the cosine from rate to 2% of it, and plain descent steps rate g."""
    adam = Optimizer("adam", 0.2, 10)
    gradient = np.array([3e-4, -50.0])
    step = adam.step(gradient, np.zeros(2))
    np.testing.assert_allclose(step, -0.2 * gradient / (np.abs(gradient) + 1e-8), rtol=1e-12)
    assert cosine_rate(0.2, 0, 10) == pytest.approx(0.2) and cosine_rate(0.2, 10, 10) == pytest.approx(0.004)
    assert cosine_rate(0.2, 5, 10) == pytest.approx(0.2 * (0.98 * 0.5 + 0.02))
    np.testing.assert_allclose(Optimizer("sgd", 0.2, 10).step(gradient, np.ones(2)), 1.0 - 0.2 * gradient)
