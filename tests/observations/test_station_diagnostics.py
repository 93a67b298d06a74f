"""Per-station innovation statistics (diagnostics=[by_station]): the Desroziers estimate of each
station's error variance, consistent with the global diagnostics and the stored series, and able to
show a user that the R they assumed is wrong."""

import h5py
import numpy as np

import assimbench

FACTORS = "[" + ",".join(["0.5,2"] * 10) + "]"
ONES = "[" + ",".join(["1"] * 20) + "]"
COMMON = ["observation.stride=2", f"observation.error_factors={FACTORS}", "filter=etkf", "filter.inflation=1.08",
          "cycles=3000", "burn_in=300", "replicates=2", "output=null"]


def test_per_station_estimates_reveal_the_wrongly_assumed_errors_and_recover_the_right_ones():
    """Stations alternate error std 0.5 and 2 (variances 0.25 and 4). A filter assuming std 1 everywhere
    gets Desroziers estimates E[d_oa d_ob] far from its assumed 1 and on the side of the truth at every
    station; a filter with the true R gets estimates near the true variances (Desroziers, Berre,
    Chapnik & Poli 2005, Q. J. R. Meteorol. Soc. 131: E[d_oa d_ob^T] = R for the optimal gain; from
    memory; the ensemble gain with inflation is near, not at, the optimal one). Bands from this bench's
    runs (2 x 2,700 cycles): measured 0.37-0.44 and 3.5-3.9 with the wrong R; with the right one
    0.218-0.234 and 3.87-4.03, within 13% of the truth."""
    wrong = assimbench.run(COMMON + [f"assumed.error_factors={ONES}", "diagnostics=[by_station]"])
    right = assimbench.run(COMMON + ["diagnostics=[by_station]"])
    true_variance = np.tile([0.25, 4.0], 10)
    for result, band in ((wrong, None), (right, 0.15)):
        estimate = np.asarray(result.per_replicate["station_desroziers_r"]).mean(axis=0)
        assert estimate.shape == (20,)
        if band is None:
            assert np.all(estimate[0::2] < 0.6) and np.all(estimate[1::2] > 2.5), estimate
        else:
            np.testing.assert_allclose(estimate, true_variance, rtol=band)


def test_station_means_agree_with_the_global_diagnostics_and_the_stored_sums(tmp_path):
    """Without outages every station reports every cycle: the mean over stations of the per-station
    means is the global time mean (the same sums in another order), and each per-station mean is the
    stored per-cycle sums after burn-in over the cycles reported."""
    path = tmp_path / "run.h5"
    result = assimbench.run(["model.size=12", "observation.stride=2", "cycles=200", "burn_in=50",
                             "diagnostics=[by_station,desroziers,innovation]"], output=str(path))
    for station, whole in (("station_desroziers_r", "desroziers_r"), ("station_desroziers_total", "desroziers_total"),
                           ("station_innovation_mean", "innovation_mean")):
        per_station = np.asarray(result.per_replicate[station])[0]
        np.testing.assert_allclose(per_station.mean(), result.summary[whole], rtol=1e-12, err_msg=station)
    with h5py.File(path) as f:
        sums, reports = f["station_desroziers_r"][0, 50:], f["station_reports"][0, 50:]
        np.testing.assert_allclose(f["summary/station_desroziers_r"][0], sums.sum(axis=0) / reports.sum(axis=0),
                                   rtol=1e-12)
        assert f["summary/station_desroziers_r"].shape == (1, 6)


def test_with_outages_each_station_is_averaged_over_the_cycles_it_reported():
    """Outage probability 0.4: each station reports about 60% of the cycles (2,000 cycles; band 0.1), and
    its means count only those cycles (the estimates stay near R = 1)."""
    result = assimbench.run(["model.size=12", "observation.stride=2", "cycles=2000", "burn_in=200",
                             "filter.inflation=1.1", "observation.outage_probability=0.4",
                             "diagnostics=[by_station]", "output=null"])
    reports = np.asarray(result.per_replicate["station_reports"])[0]
    np.testing.assert_allclose(reports, 0.6, atol=0.1)
    np.testing.assert_allclose(np.asarray(result.per_replicate["station_desroziers_r"])[0], 1.0, atol=0.25)


def test_the_station_group_is_computed_only_when_asked_for():
    default = assimbench.run(["model.size=12", "cycles=20", "burn_in=5", "output=null"])
    assert not any(name.startswith("station_") for name in default.per_replicate)
