"""The two-scale Lorenz-96 and Kuramoto-Sivashinsky models against exact identities,
published behaviour and convergence orders; the stable-step check of Lorenz-96."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest

from assimbench.integrators import RK4, make_model_flow, rk_step
from assimbench.lyapunov import lyapunov_spectrum
from assimbench.models.kuramoto_sivashinsky import (
    kuramoto_sivashinsky_tendency_factory,
    make_kuramoto_sivashinsky,
    make_kuramoto_sivashinsky_step,
)
from assimbench.models.lorenz96 import lorenz96_tendency, make_lorenz96, make_lorenz96_two_scale, two_scale_exchange

TWO_SCALE = make_lorenz96_two_scale()  # K = 36, J = 10, F = 10, h = 1, c = 10, b = 10 (Lorenz 1996)
K, J = 36, 10


def _params(model, **changes):
    return {k: jnp.asarray(v) for k, v in {**model.params, **changes}.items()}


def _random_states(count=8, seed=0):
    rng = np.random.default_rng(seed)
    slow = 10.0 * rng.standard_normal((count, K))
    fast = rng.standard_normal((count, K * J))
    return jnp.asarray(np.concatenate([slow, fast], axis=1))


def test_two_scale_exchange_terms_conserve_energy_exactly():
    """Lorenz (1996): without damping and forcing, E = (sum X^2 + sum Y^2) / 2 is invariant, since
    both advection terms vanish against x on a ring and the coupling terms cancel between scales:
    sum(x * exchange(x)) = 0 for every state (to rounding)."""
    x = _random_states()
    power = jnp.sum(x * two_scale_exchange(x, _params(TWO_SCALE), K), axis=-1)
    scale = jnp.sum(jnp.abs(x * two_scale_exchange(x, _params(TWO_SCALE), K)), axis=-1)
    assert np.all(np.abs(power) <= 1e-13 * scale)


def test_two_scale_energy_budget_and_an_integrated_invariant():
    """Exact budget of the full model: dE/dt = sum x f(x) = -sum X^2 - c sum Y^2 + F sum X (the
    exchange terms contribute nothing). And RK4 on the exchange part alone keeps E up to an error
    that vanishes at least as fast as dt^4 (the invariant is the model's; the loss the scheme's)."""
    x = _random_states(seed=1)
    params = _params(TWO_SCALE)
    budget = -jnp.sum(x[:, :K] ** 2, -1) - 10.0 * jnp.sum(x[:, K:] ** 2, -1) + 10.0 * jnp.sum(x[:, :K], -1)
    np.testing.assert_allclose(jnp.sum(x * TWO_SCALE.tendency(x, params), -1), budget, rtol=1e-12)

    exchange = lambda state, p: two_scale_exchange(state, p, K)
    rng = np.random.default_rng(1)
    state = jnp.asarray(np.concatenate([rng.standard_normal(K), 0.1 * rng.standard_normal(K * J)]))
    energy0 = 0.5 * jnp.sum(state**2)

    def drift(steps):
        flow = jax.jit(lambda s: jax.lax.fori_loop(
            0, steps, lambda _, v: rk_step(RK4, exchange, v, params, 1.0 / steps), s))
        return abs(float(0.5 * jnp.sum(flow(state) ** 2) / energy0 - 1.0))

    # Over one time unit: measured 1.5e-4 at dt = 1/400 and 5.6e-6 at 1/800 (order about 4.7).
    coarse, fine = drift(400), drift(800)
    assert fine < 1e-5
    assert coarse / fine > 12.0  # at least about fourth order: the loss is the scheme's, not the model's


def test_uncoupled_two_scale_slow_variables_follow_single_scale_lorenz96():
    """With h = 0 the slow equation is exactly the single-scale Lorenz-96 ring (Lorenz 1996, eq. 3.2)."""
    x = _random_states(seed=2)
    params = _params(TWO_SCALE, coupling=0.0)
    np.testing.assert_allclose(TWO_SCALE.tendency(x, params)[:, :K],
                               lorenz96_tendency(x[:, :K], {"forcing": 10.0}), rtol=1e-14, atol=1e-12)


def test_two_scale_climate_and_scale_separation():
    """Published behaviour of K=36, J=10, F=10, h=1, c=b=10 (Lorenz 1996; from memory): the slow
    variables have a standard deviation of a few units (about 3.5-4) and the fast ones are about
    ten times smaller; a stable free run stays finite with the default step 0.005."""
    from assimbench.models.climatology import attractor_samples

    states = attractor_samples(TWO_SCALE, 4000)
    assert np.all(np.isfinite(states))
    slow_std, fast_std = states[:, :K].std(), states[:, K:].std()
    assert 2.5 < slow_std < 5.0
    assert 5.0 < slow_std / fast_std < 30.0


# Kuramoto-Sivashinsky ---------------------------------------------------------------

KT_LENGTH, KT_SIZE = 32 * np.pi, 128  # the example of Kassam & Trefethen (2005, Sec. 6)


def _kt_initial():
    x = np.arange(KT_SIZE) * KT_LENGTH / KT_SIZE
    return jnp.asarray(np.cos(x / 16) * (1 + np.sin(x / 16)))


def _kt_solve(h, time):
    step = make_kuramoto_sivashinsky_step(KT_SIZE, KT_LENGTH, h)
    steps = round(time / h)
    return np.asarray(jax.jit(lambda u: jax.lax.fori_loop(0, steps, lambda _, v: step(v, {}), u))(_kt_initial()))


def test_kuramoto_sivashinsky_tendency_of_a_sine_is_the_textbook_derivative():
    """For u = sin(qx): u_x = q cos, u_xx = -q^2 sin, u_xxxx = q^4 sin, so
    -u u_x - u_xx - u_xxxx = -q sin cos + (q^2 - q^4) sin (textbook calculus)."""
    length, size, mode = 22.0, 64, 3
    x = np.arange(size) * length / size
    q = 2 * np.pi * mode / length
    u = np.sin(q * x)
    expected = -q * np.sin(q * x) * np.cos(q * x) + (q**2 - q**4) * np.sin(q * x)
    tendency = kuramoto_sivashinsky_tendency_factory(size, length)
    np.testing.assert_allclose(tendency(jnp.asarray(u), {}), expected, atol=1e-11)


def test_etdrk4_converges_with_order_four():
    """Kassam & Trefethen (2005, SIAM J. Sci. Comput. 26, Fig. 5.1-5.3): ETDRK4 is fourth order in
    time on Kuramoto-Sivashinsky. Halving h from 5/80 divides the error (against h = 5/10240) by
    about 2^4; the observed order approaches 4 from below as h shrinks (3.76, 3.88 measured)."""
    time = 5.0
    reference = _kt_solve(time / 10240, time)
    steps = [time / 80, time / 160, time / 320]
    errors = [np.max(np.abs(_kt_solve(h, time) - reference)) for h in steps]
    orders = np.log2(np.array(errors[:-1]) / np.array(errors[1:]))
    assert np.all((orders > 3.6) & (orders < 4.4)), orders


def test_etdrk4_agrees_with_small_step_rk4_on_the_same_equation():
    """Two different schemes on the same right-hand side must meet as their steps shrink: ETDRK4
    at h = 1/16 against RK4 at h = 1/400 (explicitly stable there: h k_max^4 < 2.78)."""
    time = 2.0
    tendency = kuramoto_sivashinsky_tendency_factory(KT_SIZE, KT_LENGTH)
    rk = jax.jit(lambda u: jax.lax.fori_loop(0, 800, lambda _, v: rk_step(RK4, tendency, v, {}, 1.0 / 400), u))
    np.testing.assert_allclose(_kt_solve(1.0 / 16, time), np.asarray(rk(_kt_initial())), atol=1e-7)


def test_kuramoto_sivashinsky_keeps_its_mean_and_is_chaotic_at_length_22():
    """The spatial mean is an exact invariant (the k = 0 mode has no linear or nonlinear term). At
    L = 22 the spectrum begins about 0.048, 0, 0, -0.003, -0.19 (Cvitanovic, Davidchack & Siminos
    2010, SIAM J. Appl. Dyn. Syst. 9, for zero-mean fields; from memory); the model here also keeps
    the mean as a neutral direction, so three exponents are exactly zero (flow direction,
    translation, mean) besides the small -0.003. Measured over 2,000 time units: 0.042, 0.003,
    0.001, -0.003, -0.003, -0.185."""
    model = make_kuramoto_sivashinsky()
    u0 = model.first_guess(jax.random.PRNGKey(1), {})
    after = make_model_flow(model, 400)(u0, {})
    assert abs(float(jnp.mean(u0))) < 1e-14 and abs(float(jnp.mean(after))) < 1e-12
    spectrum = lyapunov_spectrum(model, {}, u0, count=6, spinup_time=200.0, time=2000.0, blocks=20)
    assert 0.03 < spectrum.exponents[0] < 0.07
    assert np.all(np.abs(spectrum.exponents[1:5]) < 0.01)
    assert -0.25 < spectrum.exponents[5] < -0.13


def test_a_known_stable_step_keeps_lorenz96_chaotic():
    """Lorenz (2006, Tellus 58A) warns that numerical solutions of chaotic systems can turn periodic
    at some step sizes. RK4 with dt = 0.05 (the step of Lorenz & Emanuel 1998) is known to be stable
    for n=40, F=8: the leading exponent stays positive and within 10% of the dt = 0.01 value."""
    x0 = 8.0 + 0.01 * np.arange(40)
    leads = []
    for dt in (0.01, 0.05):
        model = make_lorenz96(40, dt=dt)
        leads.append(lyapunov_spectrum(model, model.params, x0, count=2, reorthonormalise=max(1, round(0.1 / dt)),
                                       time=200.0, blocks=10).exponents[0])
    assert leads[1] > 1.0
    assert leads[1] == pytest.approx(leads[0], rel=0.1)
