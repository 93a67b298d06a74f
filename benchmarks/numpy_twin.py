"""Hand-written NumPy twin experiments, the speed baselines of the speed suite.

Kept apart from the package: written the way a careful researcher would by
hand (vectorised over members and grid points, a Python loop over cycles), and
driven by the package's own start (initial truth and ensemble) and
observation noise, so that the numbers agree with the package's to rounding
on a short run (checked by ``tests/test_baselines.py``). The SIR baseline
draws its own random numbers, so it agrees in distribution only.
"""

import numpy as np

from benchmarks.numpy_etkf import etkf
from benchmarks.numpy_letkf import letkf


def l96(x, forcing):
    padded = np.concatenate([x[..., -2:], x, x[..., :1]], axis=-1)
    return (padded[..., 3:] - padded[..., :-3]) * padded[..., 1:-2] - x + forcing


def l63(x, sigma=10.0, rho=28.0, beta=8.0 / 3.0):
    u, v, w = x[..., 0], x[..., 1], x[..., 2]
    return np.stack([sigma * (v - u), u * (rho - w) - v, u * v - beta * w], axis=-1)


def rk4(tendency, x, dt, steps):
    for _ in range(steps):
        k1 = tendency(x)
        k2 = tendency(x + 0.5 * dt * k1)
        k3 = tendency(x + 0.5 * dt * k2)
        k4 = tendency(x + dt * k3)
        x = x + dt / 6.0 * (k1 + 2 * k2 + 2 * k3 + k4)
    return x


def tendency_of(model: str, forcing: float = 8.0):
    return (lambda x: l96(x, forcing)) if model == "lorenz96" else l63


def run_etkf(model, ensemble, truth, noise, dt, steps, error_std, inflation):
    """Analysis RMSE per cycle; ensemble (N, n), truth (n,), noise (K, n) standard normal draws."""
    f = tendency_of(model)
    errors = np.empty(noise.shape[0])
    for k in range(noise.shape[0]):
        truth = rk4(f, truth, dt, steps)
        y = truth + error_std * noise[k]
        ensemble = etkf(rk4(f, ensemble, dt, steps), y, error_std**2, inflation)
        errors[k] = np.sqrt(np.mean((ensemble.mean(0) - truth) ** 2))
    return errors


def run_letkf(ensemble, truth, noise, dt, steps, error_std, inflation, index, weight):
    f = tendency_of("lorenz96")
    errors = np.empty(noise.shape[0])
    for k in range(noise.shape[0]):
        truth = rk4(f, truth, dt, steps)
        y = truth + error_std * noise[k]
        prior = rk4(f, ensemble, dt, steps)
        mean = prior.mean(0)
        ensemble = letkf(mean + inflation * (prior - mean), y, error_std**2, index, weight)
        errors[k] = np.sqrt(np.mean((ensemble.mean(0) - truth) ** 2))
    return errors


def run_3dvar(model, state, truth, noise, dt, steps, error_std, b_cov):
    """All observed, linear: x_a = x_b + B (B + R)^-1 (y - x_b), with the gain factored once."""
    f = tendency_of(model)
    gain = np.linalg.solve(b_cov + error_std**2 * np.eye(b_cov.shape[0]), b_cov).T  # B (B + R)^-1
    errors = np.empty(noise.shape[0])
    for k in range(noise.shape[0]):
        truth = rk4(f, truth, dt, steps)
        y = truth + error_std * noise[k]
        state = rk4(f, state, dt, steps)
        state = state + gain @ (y - state)
        errors[k] = np.sqrt(np.mean((state - truth) ** 2))
    return errors


def systematic_resample(rng, weights):
    n = weights.size
    positions = (rng.random() + np.arange(n)) / n
    return np.minimum(np.searchsorted(np.cumsum(weights), positions), n - 1)


def run_sir(particles, truth, noise, dt, steps, error_std, ess_threshold, jitter, seed=0):
    """SIR on Lorenz-63 with systematic resampling and jitter; its own random numbers."""
    rng = np.random.default_rng(seed)
    n = particles.shape[0]
    log_w = np.full(n, -np.log(n))
    errors = np.empty(noise.shape[0])
    for k in range(noise.shape[0]):
        truth = rk4(l63, truth, dt, steps)
        y = truth + error_std * noise[k]
        particles = rk4(l63, particles, dt, steps)
        log_w = log_w - 0.5 * np.sum((y - particles) ** 2, axis=1) / error_std**2
        log_w -= np.logaddexp.reduce(log_w)
        w = np.exp(log_w)
        if 1.0 / np.sum(w**2) < ess_threshold * n:
            particles = particles[systematic_resample(rng, w)] + jitter * rng.normal(size=particles.shape)
            log_w = np.full(n, -np.log(n))
            w = np.exp(log_w)
        errors[k] = np.sqrt(np.mean((w @ particles - truth) ** 2))
    return errors
