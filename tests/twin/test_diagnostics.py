"""Diagnostics against closed forms, textbook identities and scipy.stats."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy import stats

import assimbench
from assimbench.config.composition import compose_config
from assimbench.filters.base import EnsembleState
from assimbench.filters.kalman.etkf import etkf_analysis
from assimbench.observations.operators import every_kth
from assimbench.twin.diagnostics import ensemble_crps, make_cycle_diagnostics, rank_counts, rank_perturbations
from assimbench.twin.summaries import batch_means_interval, update_lost_runs


def _crps(members, truth, weights=None):
    members = jnp.asarray(members, dtype=jnp.float64)
    n = members.shape[0]
    weights = jnp.full(n, 1.0 / n) if weights is None else jnp.asarray(weights)
    return [float(v) for v in ensemble_crps(members, weights, jnp.asarray(truth, dtype=jnp.float64))]


def test_crps_worked_example():
    """Ensemble {0, 1, 2}, truth 0.5: the integral of the squared CDF difference is
    0.25 * 0.5 ... by hand = 7/18; the fair estimator gives 1/6 (Ferro 2014, eq. 4)."""
    crps, fair = _crps([[0.0], [1.0], [2.0]], [0.5])
    assert crps == pytest.approx(7 / 18, abs=1e-15)
    assert fair == pytest.approx(1 / 6, abs=1e-15)


def test_crps_sorted_and_pairwise_forms_agree():
    """Above PAIRWISE_LIMIT members the sorted form is used; both are the same sum."""
    rng = np.random.default_rng(1)
    members = rng.normal(size=(100, 5))
    truth = rng.normal(size=5)
    expected = np.mean(np.abs(members - truth).mean(0) - 0.5 * np.abs(members[:, None] - members[None]).mean((0, 1)))
    assert _crps(members, truth)[0] == pytest.approx(expected, rel=1e-12)
    assert _crps(members[:30], truth)[0] == pytest.approx(
        np.mean(np.abs(members[:30] - truth).mean(0) - 0.5 * np.abs(members[:30, None] - members[None, :30]).mean((0, 1))), rel=1e-12
    )


def test_weighted_crps_equals_the_ensemble_with_repeated_members():
    """A member of weight 2/N counts as two members of weight 1/N."""
    base = np.array([[0.3], [1.7], [-0.4]])
    repeated = np.array([[0.3], [0.3], [1.7], [-0.4]])
    weighted = _crps(base, [0.5], weights=[0.5, 0.25, 0.25])[0]
    assert weighted == pytest.approx(_crps(repeated, [0.5])[0], abs=1e-15)


@pytest.mark.parametrize("y", [0.0, 0.7, -2.0])
def test_large_gaussian_ensemble_crps_approaches_the_closed_form(y):
    """CRPS(N(mu, s^2), y) = s [z (2 Phi(z) - 1) + 2 phi(z) - 1 / sqrt(pi)], z = (y - mu) / s
    (Gneiting & Raftery 2007, JASA 102, eq. 5), with scipy.stats.norm; 20,000 members
    (fixed key): the fair estimator is unbiased, the sampling error is about 0.005."""
    mu, s = 0.4, 1.3
    members = mu + s * np.asarray(jax.random.normal(jax.random.PRNGKey(0), (20000, 1)))
    z = (y - mu) / s
    closed = s * (z * (2 * stats.norm.cdf(z) - 1) + 2 * stats.norm.pdf(z) - 1 / np.sqrt(np.pi))
    crps, fair = _crps(members, [y])
    assert fair == pytest.approx(closed, abs=0.02)
    assert crps == pytest.approx(closed, abs=0.02)


def test_standard_normal_crps_at_zero():
    """(sqrt 2 - 1) / sqrt(pi) = 0.2336950 for N(0, 1) and y = 0 (Gneiting & Raftery 2007)."""
    members = np.asarray(jax.random.normal(jax.random.PRNGKey(1), (40000, 1)))
    assert _crps(members, [0.0])[1] == pytest.approx((np.sqrt(2) - 1) / np.sqrt(np.pi), abs=0.01)


def test_rank_histogram_of_an_exchangeable_ensemble_is_flat():
    """Truth and members from one distribution: every rank equally likely (Hamill 2001, MWR 129);
    scipy.stats.chisquare, fixed key, p > 0.001. An under-dispersed ensemble must fail it."""
    key = jax.random.PRNGKey(2)
    members = jax.random.normal(key, (10, 20000))
    truth = jax.random.normal(jax.random.fold_in(key, 1), (20000,))
    counts = np.asarray(rank_counts(members, truth))
    assert counts.sum() == 20000 and counts.shape == (11,)
    assert stats.chisquare(counts).pvalue > 1e-3
    narrow = np.asarray(rank_counts(0.5 * members, truth))
    assert stats.chisquare(narrow).pvalue < 1e-12
    assert narrow[0] > 2 * narrow[5] and narrow[-1] > 2 * narrow[5]  # the U shape


def test_the_sixteen_bit_rank_perturbations_are_standard_normal():
    """Kolmogorov-Smirnov against scipy.stats.norm (fixed key, 100,000 draws, p > 0.001), the first
    four moments near 0, 1, 0, 3, and the tail cut where the 16-bit grid ends (|z| <= 4.33)."""
    z = np.asarray(rank_perturbations(jax.random.PRNGKey(9), (200, 500)), dtype=np.float64).ravel()
    assert stats.kstest(z, stats.norm.cdf).pvalue > 1e-3
    assert abs(z.mean()) < 0.01 and abs(z.std() - 1.0) < 0.01
    assert abs(stats.skew(z)) < 0.03 and abs(stats.kurtosis(z, fisher=False) - 3.0) < 0.06
    assert np.abs(z).max() <= stats.norm.ppf(1 - 0.5 / 65536) + 1e-5
    # Independent draws for neighbouring keys (cycles): no correlation between two cycles' noise.
    other = np.asarray(rank_perturbations(jax.random.PRNGKey(10), (200, 500)), dtype=np.float64).ravel()
    assert abs(np.corrcoef(z, other)[0, 1]) < 0.015


def test_desroziers_identities_and_innovation_ratio_with_the_optimal_gain():
    """With the optimal gain, E[d_oa d_ob] = R, E[d_ab d_ob] = H B H^T and
    E[d_ob^2] = H B H^T + R (Desroziers et al. 2005, QJRMS 131, eq. 1-3); the innovation
    ratio is then 1. Background ensembles have exactly the covariance B and a mean error drawn
    from N(0, B); the ETKF gives the optimal update. 4,000 trials: tolerance 5%."""
    n, members, trials = 6, 12, 4000
    rng = np.random.default_rng(3)
    root = rng.normal(size=(n, n)) * 0.4
    B = root @ root.T + 0.3 * np.eye(n)
    error_std = 0.8
    operator = every_kth(n, 2)
    chol = np.linalg.cholesky(B)
    # Anomalies with sample covariance exactly B: orthonormal columns scaled by sqrt(N - 1).
    basis, _ = np.linalg.qr(rng.normal(size=(members, n)))
    basis -= basis.mean(0)
    basis, _ = np.linalg.qr(basis)
    anomalies = np.sqrt(members - 1) * basis @ chol.T
    diagnose = make_cycle_diagnostics(("innovation", "desroziers"), operator, weighted=False)
    settings = {"observation": {"error_std": jnp.asarray(error_std)}}

    def trial(key):
        k1, k2, k3 = jax.random.split(key, 3)
        truth = jax.random.normal(k1, (n,))
        background = truth + jnp.asarray(chol) @ jax.random.normal(k2, (n,))
        y = operator(truth) + error_std * jax.random.normal(k3, (operator.size,))
        forecast = background + jnp.asarray(anomalies)
        analysis = etkf_analysis(forecast, operator(forecast), y, error_std**2)
        return diagnose(key, truth, y, EnsembleState(forecast), EnsembleState(analysis), {}, settings)

    out = jax.vmap(trial)(jax.random.split(jax.random.PRNGKey(4), trials))
    hbh = np.mean(np.diag(B)[::2])
    assert float(out["desroziers_r"].mean()) == pytest.approx(error_std**2, rel=0.05)
    assert float(out["desroziers_hbht"].mean()) == pytest.approx(hbh, rel=0.05)
    assert float(out["desroziers_total"].mean()) == pytest.approx(hbh + error_std**2, rel=0.05)
    assert float(out["innovation_ratio"].mean()) == pytest.approx(1.0, abs=0.05)
    assert abs(float(out["innovation_mean"].mean())) < 0.05


def test_batch_means_interval_covers_the_mean_of_an_ar1_series_95_percent_of_the_time():
    """AR(1) with phi = 0.9 (integrated autocorrelation time 19): 400 series of 4,000 values,
    fixed seed. Coverage must be 0.95 within 3.5 binomial standard deviations (+-0.038);
    the iid interval that ignores autocorrelation covers far less (direction check)."""
    rng = np.random.default_rng(5)
    phi, length, series_count = 0.9, 4000, 400
    noise = rng.normal(size=(series_count, length))
    x = np.zeros_like(noise)
    x[:, 0] = noise[:, 0] / np.sqrt(1 - phi**2)
    for t in range(1, length):  # test data generation, not package code
        x[:, t] = phi * x[:, t - 1] + noise[:, t]
    covered = naive = 0
    for series in x:
        _, low, high = batch_means_interval(series)
        covered += low <= 0.0 <= high
        half = 1.96 * series.std(ddof=1) / np.sqrt(length)
        naive += abs(series.mean()) <= half
    assert abs(covered / series_count - 0.95) < 0.038
    assert naive / series_count < 0.6


def test_a_brief_excursion_is_not_divergence_but_a_lost_filter_is():
    above = np.zeros((2, 200), dtype=bool)
    above[0, 50:58] = True  # 8 cycles lost, then recovered
    above[1, 120:] = True  # lost for good
    hit, start, _ = update_lost_runs(above, np.zeros(2, dtype=np.int64), 50)
    assert hit[0] == -1 and start[1] == 120


def test_a_forced_divergence_is_flagged_and_the_run_completes():
    """5 members and no inflation on L96 n=40 lose the truth (common practice)."""
    result = assimbench.run(["cycles=400", "burn_in=50", "filter.members=5", "filter.inflation=1.0", "divergence_patience=20"])
    assert result.diverged and 0 < result.first_bad_cycle[0] < 400


def test_a_blow_up_is_flagged_at_its_first_non_finite_cycle():
    result = assimbench.run(["cycles=60", "burn_in=10", "model.forcing=1e7", "model.size=12", "filter.members=5"])
    assert result.diverged
    assert np.isnan(result.summary["rmse_analysis"])
    first = result.first_bad_cycle[0]
    assert np.all(np.isfinite(result.series["rmse_analysis"][0, : first - 1]))
    assert not np.isfinite(result.series["rmse_analysis"][0, first - 1])


def test_streamed_summaries_do_not_depend_on_keeping_series_or_on_chunking():
    cfg = compose_config(["cycles=300", "burn_in=40", "model.size=12", "filter.members=6", "replicates=2"])
    kept = assimbench.run_experiment(cfg)
    cfg.chunk_cycles = 13
    streamed = assimbench.run_experiment(cfg, keep_series=False)
    assert streamed.series == {}
    for name, value in kept.summary.items():
        assert streamed.summary[name] == pytest.approx(value, rel=1e-12, abs=1e-14)
    np.testing.assert_array_equal(kept.totals["rank_truth_forecast"], streamed.totals["rank_truth_forecast"])
    # The plain time mean after burn-in, computed from the kept series.
    assert kept.summary["crps_analysis"] == pytest.approx(kept.series["crps_analysis"][:, 40:].mean(), rel=1e-12)


def test_stored_fields_have_their_dimensions_and_contents(tmp_path):
    path = tmp_path / "fields.h5"
    assimbench.run(
        ["cycles=50", "burn_in=5", "model.size=12", "filter.members=6", "observation.stride=3", "observation.error_std=0.5",
         "store.truth=true", "store.observations=true", "store.analysis_mean=true", "store.ensemble_every=10"],
        output=str(path),
    )
    import xarray as xr

    with xr.open_dataset(path, engine="h5netcdf") as ds:
        assert ds["truth"].dims == ("replicate", "cycle", "variable")
        assert ds["observations"].dims == ("replicate", "cycle", "station")
        np.testing.assert_array_equal(ds["station"].values, [0, 3, 6, 9])
        assert ds["analysis_ensemble"].dims == ("replicate", "snapshot", "member", "variable")
        np.testing.assert_array_equal(ds["snapshot"].values, [10, 20, 30, 40, 50])
        errors = ds["observations"].values - ds["truth"].values[..., ::3]
        assert errors.std() == pytest.approx(0.5, rel=0.15)
        rmse = np.sqrt(((ds["analysis_mean"] - ds["truth"]) ** 2).mean("variable"))
        np.testing.assert_allclose(rmse.values, ds["rmse_analysis"].values, rtol=1e-12)
        stored_mean = ds["analysis_ensemble"].mean("member").values[0, 0]
        np.testing.assert_allclose(stored_mean, ds["analysis_mean"].values[0, 9], rtol=1e-12)
