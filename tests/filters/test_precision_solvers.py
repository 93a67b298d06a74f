"""The matrix-products-only route to A^-1 and A^(-1/2) against LAPACK and scipy, and every filter that
offers it against its eigh route: per cycle over a few hundred cycles, and in the long run over
independent seeds, statistically."""

import dataclasses

import jax.numpy as jnp
import numpy as np
import pytest
import scipy.linalg

import assimbench
from assimbench.config.catalogue import catalogue
from assimbench.config.checks import ConfigError
from assimbench.config.composition import compose_config
from assimbench.filters.kalman.precision_solvers import SOLVERS, solve_precision

OFFERING = sorted(spec.name for spec in catalogue().filters.values()
                  if "transform_solver" in {f.name for f in dataclasses.fields(spec.schema)})


def _precision(members, observed, spread, seed=0, batch=()):
    """A = (N - 1) I + Y Y^T for anomalies Y (N, p) of the given spread in units of the observation
    error (R = I), as the square-root filters form it; Y sums to zero over members."""
    rng = np.random.default_rng(seed)
    y = spread * rng.standard_normal(batch + (members, observed))
    y -= y.mean(axis=-2, keepdims=True)
    return (members - 1) * np.eye(members) + y @ np.swapaxes(y, -1, -2)


@pytest.mark.parametrize("members, observed, spread", [
    (20, 40, 0.3),   # a tuned filter's forecast spread: condition number about 2
    (20, 40, 3.6),   # a first cycle with climatological spread: condition number about 500
    (5, 40, 0.5),
    (40, 2000, 0.3),
])
def test_newton_schulz_gives_scipys_inverse_square_root_and_inverse(members, observed, spread):
    """A^(-1/2) against scipy.linalg.fractional_matrix_power (Higham & Lin 2011's Schur-Pade method, a
    general-purpose reference) and A^-1 v against scipy.linalg.solve."""
    a = _precision(members, observed, spread)
    solved = solve_precision(jnp.asarray(a), members - 1.0, "newton_schulz")
    reference = np.real(scipy.linalg.fractional_matrix_power(a, -0.5))
    scale = np.abs(reference).max()
    np.testing.assert_allclose(np.asarray(solved.inverse_root()), reference, rtol=0, atol=1e-12 * scale)
    v = np.random.default_rng(1).standard_normal(members)
    expected = scipy.linalg.solve(a, v, assume_a="pos")
    np.testing.assert_allclose(np.asarray(solved.apply_inverse(jnp.asarray(v))), expected, rtol=1e-12,
                               atol=1e-14 * np.abs(expected).max())
    np.testing.assert_allclose(np.asarray(solved.inverse()), scipy.linalg.inv(a), rtol=0,
                               atol=1e-12 * np.abs(scipy.linalg.inv(a)).max())


def test_a_batch_of_matrices_is_solved_as_one_and_agrees_with_eigh_matrix_by_matrix():
    a = _precision(20, 30, 1.0, seed=2, batch=(7,))
    a[3] = _precision(20, 30, 3.6, seed=3)  # one badly conditioned member of the batch sets the count
    fast = solve_precision(jnp.asarray(a), 19.0, "newton_schulz")
    rhs = np.random.default_rng(4).standard_normal((7, 20))
    for g in range(7):
        exact = solve_precision(jnp.asarray(a[g]), 19.0, "eigh")
        np.testing.assert_allclose(np.asarray(fast.inverse_root()[g]), np.asarray(exact.inverse_root()), atol=1e-14)
        np.testing.assert_allclose(np.asarray(fast.apply_inverse(jnp.asarray(rhs))[g]),
                                   np.asarray(exact.apply_inverse(jnp.asarray(rhs[g]))), atol=1e-14)


def test_the_symmetric_square_root_keeps_the_ensemble_mean():
    """A 1 = (N - 1) 1 since the anomalies sum to zero, so W 1 = sqrt(N - 1) A^(-1/2) 1 = 1: the
    transformed anomalies still sum to zero (Wang, Bishop & Julier 2004, Mon. Wea. Rev. 132; from
    memory)."""
    a = _precision(20, 40, 1.0)
    for solver in SOLVERS:
        w = np.asarray(solve_precision(jnp.asarray(a), 19.0, solver).inverse_root(np.sqrt(19.0)))
        np.testing.assert_allclose(w @ np.ones(20), np.ones(20), atol=1e-13)
        np.testing.assert_allclose(w, w.T, rtol=0, atol=1e-15)  # symmetric (eigh's to round-off)


SHORT = ["cycles=300", "burn_in=50", "replicates=2", "output=null"]


@pytest.mark.parametrize("name", OFFERING)
def test_every_filter_offering_it_follows_its_eigh_route_cycle_by_cycle(name):
    """Over 300 cycles of the demo ring the per-cycle analysis RMSE of the two routes agree to 1e-10:
    the same filter, computed two ways."""
    runs = {s: assimbench.run(SHORT + [f"filter={name}", f"filter.transform_solver={s}"]) for s in SOLVERS}
    eigh, fast = (np.asarray(runs[s].series["rmse_analysis"]) for s in SOLVERS)
    assert np.all(np.isfinite(eigh)) and eigh.shape[-1] == 300
    np.testing.assert_allclose(fast, eigh, rtol=0, atol=1e-10)


@pytest.mark.parametrize("name", ["etkf", "letkf"])
def test_in_the_long_run_the_two_routes_give_the_same_error_within_its_interval(name, long_run):
    """The two routes' time-mean analysis RMSEs, each over 4 replicates of its own truths (other seeds:
    a filter kept stable by its observations lets round-off differences grow only slowly, 1e-4 after
    2,500 cycles here, so runs on the same seeds would say nothing more than the per-cycle check),
    agree within the 95% interval of their difference, sqrt(h1^2 + h2^2) for independent means."""
    cycles = 10000 if long_run else 2000
    common = [f"cycles={cycles}", "burn_in=500", "replicates=4", "output=null", f"filter={name}"]
    summaries = [assimbench.run(common + [f"seed={seed}", f"filter.transform_solver={s}"]).summary
                 for seed, s in zip((1, 2), SOLVERS)]
    means = [s["rmse_analysis"] for s in summaries]
    halves = [(s["rmse_analysis_high"] - s["rmse_analysis_low"]) / 2 for s in summaries]
    assert means[0] != means[1]  # independent runs
    assert abs(means[0] - means[1]) <= np.hypot(*halves), (means, halves)


def test_an_unknown_solver_is_refused_in_one_line():
    with pytest.raises(ConfigError) as err:
        compose_config(["filter.transform_solver=cholesky"])
    assert str(err.value) == "filter.transform_solver='cholesky' is not allowed: one of eigh, newton_schulz"
