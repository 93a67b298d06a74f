"""Reference vectors: written for every filter that has them, replayed from the file's inputs and
draws alone, checked against an independent NumPy ETKF, and perturbed ports caught at the right
quantity and cycle."""

import importlib.util
import os

import h5py
import jax.numpy as jnp
import numpy as np
import pytest
import xarray as xr
from scipy.linalg import sqrtm

from assimbench.api import run_experiment
from assimbench.commands import vectors as command
from assimbench.config.catalogue import catalogue
from assimbench.config.composition import compose_config
from assimbench.filters.kalman.enkf import enkf_analysis
from assimbench.filters.kalman.ensrf import ensrf_analysis
from assimbench.filters.kalman.etkf import etkf_analysis
from assimbench.filters.kalman.letkf import letkf_analysis, local_windows
from assimbench.filters.particle.sir import systematic_indices
from assimbench.filters.variational.threedvar import gauss_newton_3dvar
from assimbench.localization import gaspari_cohn, ring_distance
from assimbench.vectors.comparison import compare
from assimbench.vectors.quantities import QUANTITIES, path_of
from assimbench.vectors.vector_file import read_port, read_vectors
from assimbench.vectors.writing import vector_filters, write

SHORT = ["cycles=40", "burn_in=0", "seed=7"]

# One experiment per filter with vectors, each with the pieces its record must carry.
CONFIGS = {
    "etkf": ["filter=etkf", "filter.inflation=1.08", "filter.additive_std=0.05", "filter.rtps=0.3"],
    "letkf": ["filter=letkf", "filter.radius=3", "observation.stride=2", "filter.inflation=1.05"],
    "ensrf": ["filter=ensrf", "filter.radius=4", "observation.stride=2", "filter.rtpp=0.2"],
    "enkf": ["filter=enkf", "filter.members=16"],
    "3dvar": ["filter=3dvar"],
    # ess_threshold=1 resamples at every analysis, so the stored resampling numbers are used.
    "sir": ["filter=sir", "model=lorenz63", "filter.members=200", "observation.interval=0.1",
            "filter.ess_threshold=1.0", "filter.jitter=0.2"],
}


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    """Every filter's vectors file (3 cycles of a 40-cycle run)."""
    folder = tmp_path_factory.mktemp("vectors")
    return {name: write(compose_config(SHORT + overrides), str(folder / f"{name}.h5"), count=3)[0]
            for name, overrides in CONFIGS.items()}


def test_every_filter_with_vectors_is_covered():
    assert set(vector_filters()) == set(CONFIGS)


def _setting(path: str, name: str) -> float:
    with h5py.File(path, "r") as f:
        return float(f[f"settings/{name}"][()])


def _inflated(forecast, factor):
    mean = forecast.mean(axis=0)
    return mean + factor * (forecast - mean)


def _relax_spread(prior, posterior, alpha):
    """RTPS (Whitaker & Hamill 2012, Mon. Wea. Rev. 140, eq. 3), written out here."""
    sigma_a, sigma_b = posterior.std(axis=0, ddof=1), prior.std(axis=0, ddof=1)
    mean = posterior.mean(axis=0)
    return mean + (posterior - mean) * (alpha * (sigma_b - sigma_a) / sigma_a + 1.0)


def _relax_perturbations(prior, posterior, alpha):
    """RTPP (Zhang, Snyder & Sun 2004, Mon. Wea. Rev. 132), written out here."""
    mean = posterior.mean(axis=0)
    return mean + (1 - alpha) * (posterior - mean) + alpha * (prior - prior.mean(axis=0))


def replay(name: str, path: str, k: int) -> np.ndarray:
    """The analysis of cycle index ``k`` recomputed from the file's inputs, draws and settings alone (the
    bench's public analysis functions, no random key): what a port is given is enough."""
    v = read_vectors(path)
    a = v.arrays
    forecast, y, var, h = (a["forecast_ensemble"][k], a["observations"][k], a["observation_error_variance"][k],
                           a["observation_matrix"])
    s = lambda key: _setting(path, key)
    if name == "3dvar":
        return np.asarray(gauss_newton_3dvar(forecast[0], y, a["background_covariance"], var, lambda x: h @ x, 1)[-1])[None]
    if name == "sir":
        misfit = np.sum((y - forecast @ h.T) ** 2 / var, axis=1)
        log_w = a["prior_log_weights"][k] - 0.5 * misfit
        weights = np.exp(log_w - np.logaddexp.reduce(log_w))
        chosen = np.asarray(systematic_indices(a["resampling_offset"][k], jnp.asarray(weights)))
        return forecast[chosen] + s("filter.jitter") * a["jitter_draws"][k]
    prior = _inflated(forecast, s("filter.inflation"))
    if "additive_draws" in a:
        draws = a["additive_draws"][k]
        prior = prior + s("filter.additive_std") * (draws - draws.mean(axis=0))
    n = forecast.shape[1]
    positions = a["observation_positions"]
    if name == "etkf":
        posterior = np.asarray(etkf_analysis(prior, prior @ h.T, y, var))
    elif name == "letkf":
        index, distance, mask = local_windows(n, positions, s("filter.radius"))
        weight = np.where(mask, gaspari_cohn(distance / s("filter.radius")), 0.0)
        posterior = np.asarray(letkf_analysis(prior, prior @ h.T, y, var, index, weight))
    elif name == "ensrf":
        grid = np.concatenate([np.arange(n, dtype=float), positions])
        taper = gaspari_cohn(ring_distance(positions[:, None], grid[None, :], n) / s("filter.radius"))
        posterior = np.asarray(ensrf_analysis(prior, prior @ h.T, y, var, taper))
    elif name == "enkf":
        draws = a["observation_perturbation_draws"][k]
        perturbed = y + np.sqrt(var) * (draws - draws.mean(axis=0))
        posterior = np.asarray(enkf_analysis(prior, prior @ h.T, perturbed, var))
    if _setting(path, "filter.rtps"):
        posterior = _relax_spread(prior, posterior, s("filter.rtps"))
    if _setting(path, "filter.rtpp"):
        posterior = _relax_perturbations(prior, posterior, s("filter.rtpp"))
    return posterior


@pytest.mark.parametrize("name", sorted(CONFIGS))
def test_the_file_alone_replays_every_analysis(written, name, tmp_path):
    """Round trip: from the stored inputs, settings and draws (EnKF perturbations, SIR resampling offset
    and jitter, additive inflation) the bench's analysis functions give the stored analyses; fed back
    as a port, they pass the check with round-off errors only."""
    path = written[name]
    vectors = read_vectors(path)
    replayed = np.stack([replay(name, path, k) for k in range(len(vectors.cycles))])
    stored = vectors.arrays["analysis_ensemble"]
    assert np.max(np.abs(replayed - stored)) <= 1e-11 * np.max(np.abs(stored))
    port = tmp_path / "port.h5"
    with h5py.File(port, "w") as f:
        f.create_dataset(path_of("analysis_ensemble"), data=replayed)
        if name == "sir":  # resampled at every analysis: equal weights
            f.create_dataset(path_of("analysis_log_weights"), data=np.full(replayed.shape[:2], -np.log(replayed.shape[1])))
    report = compare(vectors, read_port(str(port), vectors)[0])
    assert report.passed and max(row.relative for row in report.rows) < 1e-12
    assert {"analysis_mean"} <= {row.name for row in report.rows if row.derived}


@pytest.mark.parametrize("name", ["etkf", "enkf", "sir"])
def test_the_vectors_are_the_runs_own_analyses(written, name, tmp_path):
    """The recorded analysis means equal those the main command stores for the same run (replicate 0),
    at the chosen cycles: the capture forecasts and draws exactly as a run does (the EnKF and SIR
    draw from the cycle's key)."""
    vectors = read_vectors(written[name])
    run_experiment(compose_config(SHORT + CONFIGS[name] + ["store.analysis_mean=true"]), output=str(tmp_path / "r.h5"))
    with h5py.File(tmp_path / "r.h5", "r") as f:
        means = f["analysis_mean"][0, vectors.cycles - 1]
    stored = vectors.arrays["analysis_mean"]
    assert np.max(np.abs(means - stored)) <= 1e-9 * np.max(np.abs(stored))


def test_the_file_describes_itself(written):
    """Named dimensions (HDF5 dimension scales, read by xarray), units, formula and the conventions."""
    path = written["letkf"]
    with h5py.File(path, "r") as f:
        for group in ("inputs", "intermediates", "outputs"):
            for name, dataset in f[group].items():
                assert {"units", "formula", "dimensions"} <= set(dataset.attrs), name
        assert "N - 1" in f.attrs["convention_covariance"] and "before the update" in f.attrs["convention_inflation"]
    outputs = xr.open_dataset(path, group="outputs", engine="h5netcdf")
    assert outputs["analysis_ensemble"].dims == ("cycle", "member", "state")
    intermediates = xr.open_dataset(path, group="intermediates", engine="h5netcdf")
    assert intermediates["local_transform"].dims == ("cycle", "state", "ensemble_row", "ensemble_column")


def test_the_recorded_steps_give_the_analysis(written):
    """The intermediates are the ones behind the analysis: T applied to the prior anomalies gives the
    ETKF's analysis, and every LETKF grid point's wbar_g, W_g give its column (Hunt et al. 2007, eq. 22-24)."""
    etkf = read_vectors(written["etkf"]).arrays
    prior = etkf["prior_ensemble"]
    anomalies = prior - prior.mean(axis=1, keepdims=True)
    update = prior.mean(axis=1, keepdims=True) + np.einsum("kij,kjn->kin", etkf["analysis_weights"], anomalies)
    mean = update.mean(axis=1, keepdims=True)
    sigma_a, sigma_b = update.std(axis=1, ddof=1, keepdims=True), prior.std(axis=1, ddof=1, keepdims=True)
    relaxed = mean + (update - mean) * (0.3 * (sigma_b - sigma_a) / sigma_a + 1)  # rtps=0.3 of CONFIGS
    assert np.allclose(relaxed, etkf["analysis_ensemble"], rtol=0, atol=1e-12)
    letkf = read_vectors(written["letkf"]).arrays
    prior = letkf["prior_ensemble"]
    anomalies = prior - prior.mean(axis=1, keepdims=True)
    weights = letkf["local_mean_weights"][:, :, None, :] + letkf["local_transform"]  # (K, n, N, N)
    columns = prior.mean(axis=1, keepdims=True) + np.einsum("kgij,kjg->kig", weights, anomalies)
    assert np.allclose(columns, letkf["analysis_ensemble"], rtol=0, atol=1e-12)


def independent_etkf(forecast, y, variance, h, inflation, mistake=None):
    """An ETKF written for this test from Hunt, Kostelich & Szunyogh (2007, Physica D 230, 112-126),
    eq. 12-24 (from memory), by another route than the bench's: A^(-1/2) from scipy.linalg.sqrtm,
    A^-1 from numpy.linalg.inv. ``mistake`` brings in one convention error."""
    n_members = forecast.shape[0]
    dof = n_members if mistake == "ensemble-size" else n_members - 1
    mean = forecast.mean(axis=0)
    prior = forecast if mistake == "inflate-analysis" else mean + inflation * (forecast - mean)
    x_anom = prior - mean
    y_members = prior @ h.T
    y_anom = y_members - y_members.mean(axis=0)
    c = y_anom @ np.diag(1.0 / variance)  # rows: Y R^-1
    a = dof * np.eye(n_members) + c @ y_anom.T
    a_inv = np.linalg.inv(a)
    w_bar = a_inv @ c @ (y - y_members.mean(axis=0))
    w = np.real(sqrtm(dof * a_inv))
    t = w_bar[None, :] + w
    if mistake == "transposed-transform":
        t = t.T
    analysis = mean + t @ x_anom
    if mistake == "inflate-analysis":
        analysis = analysis.mean(axis=0) + inflation * (analysis - analysis.mean(axis=0))
    return {"ensemble_precision": a, "mean_weights": w_bar, "transform": w, "analysis_weights": t,
            "analysis_ensemble": analysis}


@pytest.fixture(scope="module")
def plain_etkf(tmp_path_factory):
    path = tmp_path_factory.mktemp("plain") / "etkf.h5"
    return write(compose_config(SHORT + ["filter.inflation=1.1", "observation.stride=2"]), str(path), count=4)[0]


def _port_of(vectors, tmp_path, mistake=None, from_index=0, names=None):
    """The independent ETKF over the vectors' inputs, with ``mistake`` from cycle index ``from_index`` on,
    written as a port file holding ``names`` (all it computes by default)."""
    a = vectors.arrays
    inflation = _setting(vectors.attrs["path"], "filter.inflation")
    results = [independent_etkf(a["forecast_ensemble"][k], a["observations"][k], a["observation_error_variance"][k],
                                a["observation_matrix"], inflation, mistake if k >= from_index else None)
               for k in range(len(vectors.cycles))]
    path = tmp_path / f"port_{mistake}.h5"
    with h5py.File(path, "w") as f:
        f.create_dataset("cycle", data=vectors.cycles)
        for name in names or results[0]:
            f.create_dataset(path_of(name), data=np.stack([r[name] for r in results]))
    return str(path)


def _vectors(path):
    vectors = read_vectors(path)
    vectors.attrs["path"] = path
    return vectors


def test_an_independent_numpy_etkf_passes(plain_etkf, tmp_path):
    vectors = _vectors(plain_etkf)
    report = compare(vectors, read_port(_port_of(vectors, tmp_path), vectors)[0])
    assert report.passed, report.first_failure
    assert {"ensemble_precision", "transform", "analysis_weights", "analysis_ensemble", "analysis_covariance"} <= set(
        report.compared)


@pytest.mark.parametrize("mistake, first", [("ensemble-size", "ensemble_precision"),
                                            ("inflate-analysis", "ensemble_precision"),
                                            ("transposed-transform", "analysis_weights")])
def test_a_convention_error_is_named_at_its_quantity_and_cycle(plain_etkf, tmp_path, mistake, first):
    """The mistake starts at the second recorded cycle: the check names that cycle and the earliest
    quantity the mistake touches; with the analysis ensemble alone, it names the ensemble."""
    vectors = _vectors(plain_etkf)
    report = compare(vectors, read_port(_port_of(vectors, tmp_path, mistake, from_index=1), vectors)[0])
    failure = report.first_failure
    assert (failure.cycle, failure.name) == (vectors.cycles[1], first)
    assert failure.relative > 1e-4  # far outside any round-off
    only = compare(vectors, read_port(_port_of(vectors, tmp_path, mistake, 1, ["analysis_ensemble"]), vectors)[0])
    assert (only.first_failure.cycle, only.first_failure.name) == (vectors.cycles[1], "analysis_ensemble")


def test_tolerances_are_per_quantity(plain_etkf, tmp_path):
    """N in place of N - 1 departs by a few per cent (20 members): a tolerance of 0.5 on every float
    quantity lets it pass, a tolerance on one quantity moves the first failure to the next."""
    vectors = _vectors(plain_etkf)
    port = read_port(_port_of(vectors, tmp_path, "ensemble-size"), vectors)[0]
    assert compare(vectors, port, {"all": 0.5}).passed
    assert compare(vectors, port, {"ensemble_precision": 0.5}).first_failure.name == "mean_weights"
    with pytest.raises(ValueError, match="no quantity gain"):
        compare(vectors, port, {"gain": 1e-3})


def test_any_member_order_compares_the_moments(plain_etkf, tmp_path):
    """Members in another order fail member by member, and pass on the mean and covariance when the port
    declares its order arbitrary."""
    vectors = _vectors(plain_etkf)
    shuffled = vectors.arrays["analysis_ensemble"][:, ::-1]
    path = tmp_path / "shuffled.h5"
    with h5py.File(path, "w") as f:
        f.create_dataset(path_of("analysis_ensemble"), data=shuffled)
    port = read_port(str(path), vectors)[0]
    assert compare(vectors, port).first_failure.name == "analysis_ensemble"
    report = compare(vectors, port, any_member_order=True)
    assert report.passed and set(report.compared) == {"analysis_mean", "analysis_covariance"}


def _example():
    here = os.path.dirname(__file__)
    spec = importlib.util.spec_from_file_location("numpy_etkf_port", os.path.join(here, "..", "..", "examples",
                                                                                    "numpy_etkf_port.py"))
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_the_worked_example_passes_and_its_mistake_fails(plain_etkf, tmp_path, capsys):
    """examples/numpy_etkf_port.py through the command: exit 0, then exit 1 naming the quantity."""
    example = _example()
    port = str(tmp_path / "port.h5")
    assert example.main([plain_etkf, port]) == 0
    assert command.main(["check", plain_etkf, port]) == 0
    assert "PASSED" in capsys.readouterr().out
    assert example.main([plain_etkf, port, "--mistake", "ensemble-size"]) == 0
    table = tmp_path / "rows.csv"
    assert command.main(["check", plain_etkf, port, "--table", str(table)]) == 1
    out = capsys.readouterr().out
    assert f"first departs at cycle {read_vectors(plain_etkf).cycles[0]} in intermediates/ensemble_precision" in out
    assert table.read_text().count("\n") == 1 + 4 * 10  # header, 4 cycles x (8 given + mean and covariance derived)


def test_the_command_writes_from_overrides(tmp_path, capsys):
    out = tmp_path / "ring.h5"
    assert command.main(["write", "cycles=20", "filter.members=8", "vectors.at=[5,20]", f"output={out}"]) == 0
    assert "cycles 5, 20" in capsys.readouterr().out
    assert read_vectors(str(out)).cycles.tolist() == [5, 20]


def _one_line_exit_2(argv, words, capsys):
    assert command.main(argv) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and all(word in err for word in words), err


@pytest.mark.parametrize("overrides, words", [
    (["filter=4dvar"], ["filter=4dvar", ", ".join(vector_filters())]),
    (["lanes.filter.inflation=[1.0,1.1]"], ["lanes", "one setting"]),
    (["filter.adaptive=true"], ["filter.adaptive"]),
    (["smoother.lag=2"], ["smoother.lag"]),
    (["observation.correlation_length=2", "observation.correlation_shape=gaussian"], ["diagonal R"]),
    (["observation.outage_probability=0.1"], ["outages"]),
    (["vectors.count=0"], ["vectors.count=0", "from 1 to cycles=20"]),
    (["vectors.at=[5,50]"], ["vectors.at", "cycles=20"]),
    (["vectors.every=3"], ["vectors.every", "vectors.count, vectors.at"]),
    (["-m", "filter.members=4,8"], ["one experiment"]),
])
def test_write_refuses_in_one_line(overrides, words, tmp_path, capsys):
    out = tmp_path / "v.h5"
    _one_line_exit_2(["write", "cycles=20"] + overrides + [f"output={out}"], words, capsys)
    assert os.listdir(tmp_path) == []


def test_write_never_overwrites_another_file(tmp_path, capsys):
    other = tmp_path / "result.h5"
    other.write_text("a result")
    _one_line_exit_2(["write", "cycles=20", f"output={other}"], ["exists", "not a vectors file"], capsys)
    assert other.read_text() == "a result"


def test_every_filter_without_vectors_is_refused_by_name():
    """Every filter of the catalogue either writes vectors or is refused naming the ones that do."""
    without = sorted(set(catalogue().filters) - set(vector_filters()))
    assert without  # the variational window methods, for instance, have none yet
    for name in without:
        with pytest.raises(Exception, match="has no reference vectors yet"):
            write(compose_config(["cycles=10", "burn_in=0", f"filter={name}"]), "/nonexistent/never.h5")


@pytest.fixture
def damaged(plain_etkf, tmp_path):
    """Files that are not what they claim."""
    text = tmp_path / "text.h5"
    text.write_text("not hdf5")
    truncated = tmp_path / "truncated.h5"
    truncated.write_bytes(open(plain_etkf, "rb").read()[:2000])
    foreign = tmp_path / "foreign.h5"
    with h5py.File(foreign, "w") as f:
        f.attrs["file_kind"] = "something else"
    unfinished = tmp_path / "unfinished.h5"
    unfinished.write_bytes(open(plain_etkf, "rb").read())
    with h5py.File(unfinished, "a") as f:
        f.attrs["complete"] = 0
    empty = tmp_path / "empty.h5"
    with h5py.File(empty, "w") as f:
        f.create_dataset("outputs/nothing_known", data=np.zeros(3))
    wrong_shape = tmp_path / "wrong_shape.h5"
    with h5py.File(wrong_shape, "w") as f:
        f.create_dataset(path_of("analysis_ensemble"), data=np.zeros((4, 19, 40)))
    wrong_cycles = tmp_path / "wrong_cycles.h5"
    with h5py.File(wrong_cycles, "w") as f:
        f.create_dataset("cycle", data=[1, 2, 3, 4])
        f.create_dataset(path_of("analysis_ensemble"), data=read_vectors(plain_etkf).arrays["analysis_ensemble"])
    return {p.stem: str(p) for p in (text, truncated, foreign, unfinished, empty, wrong_shape, wrong_cycles)}


def test_check_refuses_foreign_and_corrupt_files(plain_etkf, damaged, tmp_path, capsys):
    _one_line_exit_2(["check", str(tmp_path / "missing.h5"), plain_etkf], ["does not exist"], capsys)
    _one_line_exit_2(["check", damaged["text"], plain_etkf], ["not an HDF5 file"], capsys)
    _one_line_exit_2(["check", damaged["truncated"], plain_etkf], ["not an HDF5 file"], capsys)
    _one_line_exit_2(["check", damaged["foreign"], plain_etkf], ["not a reference-vectors file"], capsys)
    _one_line_exit_2(["check", damaged["unfinished"], plain_etkf], ["incomplete"], capsys)
    _one_line_exit_2(["check", plain_etkf, damaged["text"]], ["port file", "not an HDF5 file"], capsys)
    _one_line_exit_2(["check", plain_etkf, damaged["empty"]], ["none of the quantities", "outputs/analysis_ensemble"],
                     capsys)
    _one_line_exit_2(["check", plain_etkf, damaged["wrong_shape"]], ["outputs/analysis_ensemble", "(4, 19, 40)"],
                     capsys)
    _one_line_exit_2(["check", plain_etkf, damaged["wrong_cycles"]], ["covers cycles [1,2,3,4]"], capsys)
    _one_line_exit_2(["check", plain_etkf, plain_etkf, "--tolerance", "all=-1"], ["--tolerance"], capsys)


def test_every_quantity_is_described():
    for name, quantity in QUANTITIES.items():
        assert quantity.formula and quantity.units and quantity.group in ("inputs", "draws", "intermediates",
                                                                         "outputs"), name


def test_check_names_what_it_ignores_and_refuses_a_bad_table(plain_etkf, tmp_path, capsys):
    """A misspelt quantity is named as ignored; a table into a folder, a damaged reference (values not
    finite) and a tolerance on an integer quantity are bad input (exit 2), and nothing is written."""
    port = tmp_path / "port.h5"
    with h5py.File(port, "w") as f:
        f.create_dataset(path_of("analysis_ensemble"), data=read_vectors(plain_etkf).arrays["analysis_ensemble"])
        f.create_dataset("intermediates/transfrom", data=np.zeros(3))
    assert command.main(["check", plain_etkf, str(port), "--tolerance", "outputs/analysis_ensemble=1e-12"]) == 0
    assert "ignored; misspelt or misplaced?): intermediates/transfrom" in capsys.readouterr().out
    folder = tmp_path / "folder"
    folder.mkdir()
    _one_line_exit_2(["check", plain_etkf, str(port), "--table", str(folder)], ["is a folder"], capsys)
    assert os.listdir(folder) == []
    _one_line_exit_2(["check", plain_etkf, str(port), "--tolerance", "resampled=0.5"], ["compared exactly"], capsys)
    damaged = tmp_path / "damaged.h5"
    damaged.write_bytes(open(plain_etkf, "rb").read())
    with h5py.File(damaged, "a") as f:
        f[path_of("transform")][0, 0, 0] = np.nan
    _one_line_exit_2(["check", str(damaged), str(port)], ["corrupt", "intermediates/transform", "not finite"], capsys)


def test_the_filters_untraced_keys_are_stored(written):
    """What a port needs besides the traced settings, e.g. whether the EnKF centres its perturbations."""
    with h5py.File(written["enkf"], "r") as f:
        assert bool(f["settings"].attrs["filter.centre_perturbations"]) and f["settings"].attrs["filter.members"] == 16
