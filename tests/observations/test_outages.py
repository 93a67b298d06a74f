"""Station outages (observation.outage_probability, outage_spell, outage_schedule): the outage
process, its pairing across filters, missing stations masked inside the compiled cycle, and the
one-line refusals."""

import h5py
import jax
import jax.numpy as jnp
import numpy as np
import pytest
from refusals import assert_refused

import assimbench
from assimbench.config.catalogue import catalogue
from assimbench.config.composition import compose_config
from assimbench.config.plan import resolve

SMALL = ["model.size=12", "observation.stride=2", "cycles=60", "burn_in=5", "output=null"]
EVERY = sorted(catalogue().filters)


def _stored(tmp_path, overrides, name="run.h5"):
    """(observations (cycles, p), truth (cycles, n)) of replicate 0 of a run storing both."""
    path = tmp_path / name
    assimbench.run(["store.observations=true", "store.truth=true", "diagnostics=[]"] + overrides, output=str(path))
    with h5py.File(path) as f:
        return f["observations"][0], f["truth"][0]


LATER = "observation.outage_schedule=[{first_cycle:1000,last_cycle:1000,stations:[0]}]"
# The 3DEnVar's B depends on the ensemble: without outages XLA folds the constant selection H into
# B H^T and sums the gain's product in another order than with the masked (runtime) H. Every masked
# entry is exact, but the sums' order differs: measured 6e-15 over these 60 cycles.
ROUND_OFF = {"3denvar"}


@pytest.mark.parametrize("name", EVERY)
def test_outage_probability_zero_is_todays_network_bit_for_bit(name):
    """A network with outages switched on (a scheduled block after the run's last cycle) and probability
    0 runs the masked program with no station out: its analyses are those of the network without
    outages, bit for bit."""
    common = SMALL + [f"filter={name}"]
    plain = assimbench.run(common)
    masked = assimbench.run(common + [LATER])
    for metric in ("rmse_analysis", "rmse_forecast"):
        if name in ROUND_OFF:
            np.testing.assert_allclose(masked.series[metric], plain.series[metric], rtol=1e-12, err_msg=metric)
        else:
            np.testing.assert_array_equal(masked.series[metric], plain.series[metric], err_msg=metric)
    np.testing.assert_array_equal(masked.series["stations_seen"], 6.0)


def test_a_lane_of_outage_probability_zero_follows_the_network_without_outages():
    """Lane 0 of outage_probability=[0,0.3] follows the plain run to round-off (a batched program sums in
    another order) and lane 1 differs."""
    common = SMALL + ["filter=letkf"]
    plain = assimbench.run(common)
    laned = assimbench.run(common + ["lanes.observation.outage_probability=[0,0.3]"])
    np.testing.assert_allclose(laned.series["rmse_analysis"][0, 0], plain.series["rmse_analysis"][0], rtol=1e-9)
    assert np.max(np.abs(laned.series["rmse_analysis"][1, 0] - plain.series["rmse_analysis"][0])) > 1e-3


def test_outages_come_at_the_configured_rate_in_spells_of_the_configured_length(tmp_path):
    """Two-state Markov chain, q = 0.3, mean spell D = 8 cycles, 20 stations x 6,000 cycles: the share of
    missing observations is q (its standard error here is about 0.009 from the spells' correlation;
    band 0.03) and out-spells last D cycles on average (about 1,500 spells: standard error ~0.2; band 1)
    (the stationary law and geometric spells of a two-state chain: common practice)."""
    observations, _ = _stored(tmp_path, ["model.size=40", "observation.stride=2", "cycles=6000", "burn_in=0",
                                         "filter=free", "observation.outage_probability=0.3",
                                         "observation.outage_spell=8"])
    out = np.isnan(observations)
    assert out.mean() == pytest.approx(0.3, abs=0.03)
    spells = []
    for station in out.T:
        edges = np.diff(np.concatenate([[0], station.astype(int), [0]]))
        spells += list(np.flatnonzero(edges == -1) - np.flatnonzero(edges == 1))
    assert np.mean(spells) == pytest.approx(8.0, abs=1.0)
    independent, _ = _stored(tmp_path, ["model.size=40", "observation.stride=2", "cycles=6000", "burn_in=0",
                                        "filter=free", "observation.outage_probability=0.3"], "independent.h5")
    gone = np.isnan(independent)
    # Drawn afresh: out at k and at k + 1 together with probability q^2 = 0.09.
    assert np.mean(gone[1:] & gone[:-1]) == pytest.approx(0.09, abs=0.01)


def test_outages_are_the_same_for_every_filter_on_a_seed_and_differ_between_seeds(tmp_path):
    outages = ["observation.outage_probability=0.2", "observation.outage_spell=5"]
    a, _ = _stored(tmp_path, SMALL + outages + ["filter=etkf"], "a.h5")
    b, _ = _stored(tmp_path, SMALL + outages + ["filter=3dvar"], "b.h5")
    c, _ = _stored(tmp_path, SMALL + outages + ["filter=etkf", "seed=7"], "c.h5")
    np.testing.assert_array_equal(np.isnan(a), np.isnan(b))
    np.testing.assert_array_equal(a, b)
    assert not np.array_equal(np.isnan(a), np.isnan(c))


def test_a_schedule_puts_its_stations_out_over_its_cycles_and_no_others(tmp_path):
    observations, truth = _stored(tmp_path, SMALL + [
        "filter=etkf", "observation.outage_schedule=[{first_cycle:10,last_cycle:19,stations:[0,1,2]},"
                       "{first_cycle:15,last_cycle:30,stations:[5]}]"])
    expected = np.zeros(observations.shape, dtype=bool)
    expected[9:19, 0:3] = True  # cycles are counted from 1
    expected[14:30, 5] = True
    np.testing.assert_array_equal(np.isnan(observations), expected)
    assert np.all(np.isfinite(observations[~expected]))


def test_results_do_not_depend_on_the_chunk_length_with_outages():
    """The outage state is carried from chunk to chunk and keyed by the absolute cycle."""
    common = SMALL + ["filter=etkf", "observation.outage_probability=0.3", "observation.outage_spell=4"]
    one, many = assimbench.run(common + ["chunk_cycles=60"]), assimbench.run(common + ["chunk_cycles=7"])
    np.testing.assert_array_equal(one.series["rmse_analysis"], many.series["rmse_analysis"])
    np.testing.assert_array_equal(one.series["stations_seen"], many.series["stations_seen"])


# The perturbed-observation EnKF and the particle filter draw (members, stations) numbers: a network
# with another station count draws other numbers, so they are left out of the whole-run comparison.
SAME_DRAWS = sorted(name for name, spec in catalogue().filters.items() if name not in ("enkf", "sir"))
ALWAYS_OUT = "observation.outage_schedule=[{first_cycle:1,last_cycle:40,stations:[1]}]"


@pytest.mark.parametrize("name", ["etkf", "4dvar", "ienks"])
def test_a_station_out_for_the_whole_run_is_a_station_the_network_does_not_have(name):
    """A filter, and the window methods, cycled for 40 cycles (the window methods keep
    the missing station in their window's earlier times too): the network of stations 0, 2, 4, ...
    with station 1 (at 2) always out runs as the network without it, on the same truths and noise,
    to round-off (two programs, sums in other orders). Independent errors only: with correlated
    ones the truth's noise at the others mixes in the missing station's draw."""
    common = ["model.size=12", "cycles=40", "burn_in=5", "output=null", f"filter={name}"]
    masked = assimbench.run(common + ["observation.stride=2", ALWAYS_OUT])
    absent = assimbench.run(common + ["observation.stations=[0,4,6,8,10]"])
    np.testing.assert_allclose(masked.series["rmse_analysis"], absent.series["rmse_analysis"], rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("correlated", [False, True])
@pytest.mark.parametrize("name, extra", [(name, []) for name in SAME_DRAWS]
                         + [("etkf", ["filter.adaptive=true"]), ("letkf", ["filter.adaptive=true"])])
def test_every_filter_fed_a_missing_station_analyses_as_without_it(name, extra, correlated):
    """Eight analyses on the same inputs, the filter's own state carried (the window methods hold the
    missing station at every time of their window): with station 1 NaN in every y, the filter of the
    stride-2 network with outages analyses as the filter of the network without station 1, also with
    correlated errors (R's block of the stations seen, per time in a window)."""
    errors = ["observation.correlation_length=1.5"] if correlated else []
    common = ["model.size=12", "output=null", f"filter={name}"] + extra + errors
    masked = resolve(compose_config(common + ["observation.stride=2", "observation.outage_probability=0.1"]))
    absent = resolve(compose_config(common + ["observation.stations=[0,4,6,8,10]"]))
    rng = np.random.default_rng(8)
    ensemble = jnp.asarray(rng.normal(size=(masked.setup.filter.members, 12)) + 2.0)
    ys = rng.normal(size=(8, 6)) + 2.0
    key = jax.random.PRNGKey(1)
    states = [plan.setup.filter.init(key, ensemble, plan.settings) for plan in (masked, absent)]
    analyse = [jax.jit(plan.setup.filter.analyse) for plan in (masked, absent)]
    for y in ys:
        states[0] = analyse[0](key, states[0], jnp.asarray(np.where(np.arange(6) == 1, np.nan, y)), masked.settings)[0]
        states[1] = analyse[1](key, states[1], jnp.asarray(y[[0, 2, 3, 4, 5]]), absent.settings)[0]
    # 4D-Var's conjugate gradients, stopped after a fixed count, carry the round-off further (measured 6e-10).
    atol = 1e-9 if name == "4dvar" else 1e-11
    np.testing.assert_allclose(np.asarray(states[0].members), np.asarray(states[1].members), rtol=1e-9, atol=atol)


@pytest.mark.parametrize("overrides, words", [
    (["observation.outage_probability=1.5"], ["observation.outage_probability=1.5", "from 0 to 1"]),
    (["observation.outage_probability=-0.1"], ["observation.outage_probability=-0.1", "from 0 to 1"]),
    (["observation.outage_spell=0.5"], ["observation.outage_spell=0.5", "at least 1"]),
    (["observation.outage_probability=0.9", "observation.outage_spell=5"],
     ["observation.outage_spell=5", "at least 9"]),
    (["observation.outage_schedule=[{first_cycle:10,stations:[0]}]"], ["observation.outage_schedule", "blocks"]),
    (["observation.outage_schedule=[{first_cycle:10,last_cycle:5,stations:[0]}]"], ["k1 <= k2"]),
    (["observation.outage_schedule=[{first_cycle:1,last_cycle:5,stations:[6]}]"], ["from 0 to 5"]),
    (["observation.outage_schedule=[{first_cycle:1,last_cycle:5,stations:[]}]"], ["lists no station"]),
    (["observation.outage_schedule=[{first_cycle:1,last_cycle:5,stations:[2,2]}]"], ["lists a station twice"]),
    (["observation.outage_schedule=[{first_cycle:10,last_cycle:5,stations:[0]}]"], ["ends (cycle 5) before"]),
])
def test_bad_outages_are_one_line(overrides, words):
    assert_refused(SMALL + overrides, words)


def test_a_cycle_with_no_station_reporting_is_not_a_divergence():
    """The whole network out for 6 cycles: the innovation statistics of those cycles are undefined (NaN in
    the series), their time means are over the other cycles, and the run is not marked diverged."""
    every = ",".join(str(i) for i in range(6))
    result = assimbench.run(SMALL + ["filter=etkf", "diagnostics=[innovation,desroziers]",
                                     f"observation.outage_schedule=[{{first_cycle:20,last_cycle:25,stations:[{every}]}}]"])
    assert np.all(np.asarray(result.first_bad_cycle) == -1)
    ratio = result.series["innovation_ratio"][0]
    assert np.all(np.isnan(ratio[19:25])) and np.all(np.isfinite(np.delete(ratio, np.arange(19, 25))))
    kept = np.delete(ratio, np.arange(19, 25))[5:]  # after the 5 burn-in cycles
    assert result.summary["innovation_ratio"] == pytest.approx(kept.mean(), rel=1e-12)
    assert np.all(result.series["stations_seen"][0, 19:25] == 0)


def test_gapped_time_means_skip_undefined_cycles_and_others_keep_their_nan():
    """TimeMeans: a gapped series averages the cycles where it is defined, chunk by chunk as at once; any
    other series with a NaN stays NaN (a run that blew up is never averaged into a number)."""
    from assimbench.twin.summaries import TimeMeans

    values = np.arange(40.0)[None, :].repeat(2, axis=0)
    values[0, 7] = values[1, 30] = np.nan
    means = TimeMeans(2, 40, 0, batches=4, gapped={"gapped"})
    for start in range(0, 40, 9):
        means.add("gapped", values[:, start:start + 9], start + 1)
        means.add("plain", values[:, start:start + 9], start + 1)
    gapped, plain = means.summarise_groups("gapped", 1), means.summarise_groups("plain", 1)
    np.testing.assert_allclose(gapped["per_replicate"], np.nanmean(values, axis=1), rtol=1e-14)
    assert np.all(np.isnan(plain["per_replicate"]))
