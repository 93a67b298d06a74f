"""Station outages (observation.outage_probability, outage_spell, outage_schedule): the outage
process, its pairing across filters, missing stations masked inside the compiled cycle, and the
one-line refusals."""

import h5py
import jax
import jax.numpy as jnp
import numpy as np
import pytest

import assimbench
from assimbench.config.catalogue import catalogue
from assimbench.config.checks import ConfigError
from assimbench.config.composition import compose_config
from assimbench.config.plan import resolve

SMALL = ["model.size=12", "observation.stride=2", "cycles=60", "burn_in=5", "output=null"]
TAKING = sorted(name for name, spec in catalogue().filters.items() if spec.takes_outages)


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


@pytest.mark.parametrize("name", TAKING)
def test_outage_probability_zero_is_todays_network_bit_for_bit(name):
    """A network with outages switched on (a scheduled block after the run's last cycle) and probability
    0 runs the masked program with no station out: its analyses are those of the network without
    outages, bit for bit. In a lane sweep, lane 0 of outage_probability=[0,0.3] follows it to round-off
    (a batched program sums in another order) and lane 1 differs."""
    common = SMALL + [f"filter={name}"]
    plain = assimbench.run(common)
    masked = assimbench.run(common + [LATER])
    for metric in ("rmse_analysis", "rmse_forecast"):
        if name in ROUND_OFF:
            np.testing.assert_allclose(masked.series[metric], plain.series[metric], rtol=1e-12, err_msg=metric)
        else:
            np.testing.assert_array_equal(masked.series[metric], plain.series[metric], err_msg=metric)
    np.testing.assert_array_equal(masked.series["stations_seen"], 6.0)
    laned = assimbench.run(common + ["lanes.observation.outage_probability=[0,0.3]"])
    np.testing.assert_allclose(laned.series["rmse_analysis"][0, 0], plain.series["rmse_analysis"][0], rtol=1e-9)
    if catalogue().filters[name].assimilates:
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


def _analysis(overrides, y):
    """One analysis of a fixed Gaussian 20-member ensemble on 8 variables with observations ``y``."""
    plan = resolve(compose_config(["model.size=8", "observation.error_std=0.5", "output=null"] + overrides))
    rng = np.random.default_rng(4)
    ensemble = rng.normal(size=(20, 8)) @ np.linalg.cholesky(np.eye(8) + 0.5).T + 2.0
    filt, key = plan.setup.filter, jax.random.PRNGKey(0)
    state = filt.init(key, jnp.asarray(ensemble), plan.settings)
    return np.asarray(filt.analyse(key, state, jnp.asarray(y), plan.settings)[0].members)


DETERMINISTIC = [["filter=etkf"], ["filter=letkf", "filter.radius=2"], ["filter=ensrf", "filter.radius=2"],
                 ["filter=denkf"], ["filter=enkfn"], ["filter=3dvar"], ["filter=3denvar", "filter.radius=2"],
                 ["filter=etkf", "filter.adaptive=true"], ["filter=letkf", "filter.adaptive=true"]]


@pytest.mark.parametrize("correlated", [False, True])
@pytest.mark.parametrize("chosen", DETERMINISTIC, ids=lambda o: " ".join(o))
def test_a_missing_station_is_a_station_the_network_does_not_have(chosen, correlated):
    """Stations at 0, 2, 4, 6 with station 1 missing (NaN) analyse as the network of stations 0, 4, 6:
    the masked program leaves no trace of the missing one; with correlated errors R's block of the
    stations seen is used (the marginal of a Gaussian: common practice)."""
    errors = ["observation.correlation_length=1.5"] if correlated else []
    y = np.array([0.3, -0.2, 1.1, 0.4])
    masked = _analysis(chosen + errors + ["observation.stride=2", "observation.outage_probability=0.1"],
                       np.where([True, False, True, True], y, np.nan))
    absent = _analysis(chosen + errors + ["observation.stations=[0,4,6]"], y[[0, 2, 3]])
    np.testing.assert_allclose(masked, absent, rtol=0, atol=1e-11)


@pytest.mark.parametrize("overrides, words", [
    (["observation.outage_probability=1.5"], ["observation.outage_probability=1.5", "from 0 to 1"]),
    (["observation.outage_probability=-0.1"], ["observation.outage_probability=-0.1", "from 0 to 1"]),
    (["observation.outage_spell=0.5"], ["observation.outage_spell=0.5", "at least 1"]),
    (["observation.outage_probability=0.9", "observation.outage_spell=5"],
     ["observation.outage_spell=5", "at least 9"]),
    (["observation.outage_schedule=[{first_cycle:10,stations:[0]}]"], ["observation.outage_schedule", "blocks"]),
    (["observation.outage_schedule=[{first_cycle:10,last_cycle:5,stations:[0]}]"], ["k1 <= k2"]),
    (["observation.outage_schedule=[{first_cycle:1,last_cycle:5,stations:[6]}]"], ["from 0 to 5"]),
    (["observation.outage_schedule=[{first_cycle:1,last_cycle:5,stations:[]}]"], ["station numbers"]),
    (["filter=4dvar", "observation.outage_probability=0.2"], ["no outages with filter 4dvar", "etkf"]),
    (["filter=ienks", "lanes.observation.outage_probability=[0,0.2]"], ["no outages with filter ienks"]),
    (["filter=4denvar", "observation.outage_schedule=[{first_cycle:1,last_cycle:5,stations:[0]}]"],
     ["observation.outage_schedule", "no outages with filter 4denvar"]),
])
def test_bad_outages_are_one_line(overrides, words):
    with pytest.raises(ConfigError) as caught:
        resolve(compose_config(SMALL + overrides))
    message = str(caught.value)
    assert "\n" not in message and all(word in message for word in words), message
