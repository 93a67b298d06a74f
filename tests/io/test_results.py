"""The result file contract: layout, named dimensions, provenance, atomic writing, refusal
of files that are not complete assimbench results."""

import os

import h5py
import numpy as np
import pytest
import xarray as xr
import yaml

import assimbench
from assimbench.config.composition import compose_config
from assimbench.io.atomic import PARTIAL_SUFFIX
from assimbench.io.results import ResultFileError, read_result

SHORT = ["cycles=40", "burn_in=10", "filter.members=6", "model.size=10", "replicates=2"]


@pytest.fixture(scope="module")
def stored(tmp_path_factory):
    path = tmp_path_factory.mktemp("result") / "run.h5"
    result = assimbench.run(SHORT, output=str(path))
    return result, path


def test_summary_attributes_are_time_means_after_burn_in_over_replicates(stored):
    result, path = stored
    with h5py.File(path, "r") as f:
        for name in ("rmse_analysis", "rmse_forecast", "spread_analysis", "spread_forecast"):
            expected = f[name][:, 10:].mean(axis=1).mean()
            assert f["summary"].attrs[name] == pytest.approx(expected, rel=1e-14)
            np.testing.assert_allclose(f["summary"][name][...], f[name][:, 10:].mean(axis=1), rtol=1e-14)
            np.testing.assert_array_equal(f[name][...], result.series[name])


def test_xarray_opens_the_file_with_named_dimensions(stored):
    _, path = stored
    with xr.open_dataset(path, engine="h5netcdf") as ds:
        assert ds["rmse_analysis"].dims == ("replicate", "cycle")
        assert ds.sizes == {"replicate": 2, "cycle": 40, "rank": 7}  # 6 members: ranks 0..6
        assert ds["rank_truth_forecast"].dims == ("replicate", "cycle", "rank")
        np.testing.assert_array_equal(ds["rank_truth_forecast"].sum("rank").values, 10)  # one rank per variable
        np.testing.assert_array_equal(ds["cycle"].values, np.arange(1, 41))
        np.testing.assert_allclose(ds["time"].values, 0.05 * np.arange(1, 41))
        assert "time" in ds.coords
        for name in ("rmse_analysis", "spread_forecast", "cycle", "replicate"):
            assert ds[name].attrs["long_name"] and ds[name].attrs["units"]


def test_the_summary_group_reads_alone_with_coordinates_labels_units_and_integer_flags(stored):
    """netCDF readers open the summary group by itself: it needs its own coordinates; the flags
    complete/diverged are integers (netCDF libraries drop HDF5's boolean enum)."""
    _, path = stored
    with xr.open_dataset(path, engine="h5netcdf", group="summary") as ds:
        assert ds["rmse_analysis"].dims == ("replicate",) and list(ds["replicate"].values) == [0, 1]
        assert "replicate" in ds.coords and "rank" in ds.coords
        assert ds["rmse_analysis"].attrs["units"] == "state units"
        assert ds["rmse_analysis_halfwidth"].attrs["long_name"].startswith("half-width of the 95% interval")
        assert ds["rmse_analysis_halfwidth"].attrs["units"] == "state units"
    with h5py.File(path, "r") as f:
        for flag in ("complete", "diverged"):
            assert f.attrs[flag].dtype.kind == "i" and f.attrs[flag] in (0, 1)
    assert set(read_result(str(path)).per_replicate) == {n for n in stored[0].per_replicate}


def test_provenance_is_enough_to_rerun_the_experiment(stored):
    """The stored YAML config composes back to the same experiment and gives the same numbers."""
    result, path = stored
    back = read_result(str(path))
    assert back.attrs["complete"] and not back.attrs["diverged"]
    assert back.attrs["seed"] == 2026 and back.attrs["replicates"] == 2
    assert "jax=" in back.attrs["library_versions"] and back.attrs["assimbench_version"] == assimbench.__version__
    config = back.config
    overrides = [
        f"model.size={config['model']['size']}",
        f"filter.members={config['filter']['members']}",
        f"cycles={config['cycles']}",
        f"burn_in={config['burn_in']}",
        f"replicates={config['replicates']}",
    ]
    rerun = assimbench.run(overrides)
    np.testing.assert_array_equal(rerun.series["rmse_analysis"], back.series["rmse_analysis"])
    np.testing.assert_array_equal(back.first_bad_cycle, [-1, -1])


def test_a_run_that_fails_midway_leaves_nothing_at_the_final_name(tmp_path):
    """The file lives under a temporary name until it is complete."""
    path = tmp_path / "killed.h5"
    cfg = compose_config(SHORT + ["chunk_cycles=10"])

    def stop_after_two_chunks(done, total):
        if done >= 20:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        assimbench.run_experiment(cfg, output=str(path), progress=stop_after_two_chunks)
    assert not path.exists()
    partial = str(path) + PARTIAL_SUFFIX
    with h5py.File(partial, "r") as f:
        assert not f.attrs["complete"]
        assert f.attrs["cycles_done"] == 20
        assert f["rmse_analysis"].shape == (2, 20)
    with pytest.raises(ResultFileError, match="incomplete"):
        read_result(partial)


def test_write_result_after_the_fact(tmp_path):
    result = assimbench.run(SHORT)
    path = assimbench.write_result(result, str(tmp_path / "later.h5"))
    np.testing.assert_array_equal(read_result(path).series["spread_analysis"], result.series["spread_analysis"])
    assert not os.path.exists(path + PARTIAL_SUFFIX)


def test_foreign_and_broken_files_are_refused_in_one_line(tmp_path):
    foreign = tmp_path / "foreign.h5"
    with h5py.File(foreign, "w") as f:
        f["data"] = np.arange(3)
    text = tmp_path / "text.h5"
    text.write_text("not hdf5 at all\n")
    truncated = tmp_path / "truncated.h5"
    good = tmp_path / "good.h5"
    assimbench.run(SHORT, output=str(good))
    truncated.write_bytes(good.read_bytes()[:2000])
    for path, reason in [(foreign, "not an assimbench result"), (text, "not a readable HDF5"),
                         (truncated, "not a readable HDF5"), (tmp_path / "missing.h5", "not a readable HDF5")]:
        with pytest.raises(ResultFileError) as err:
            read_result(str(path))
        message = str(err.value)
        assert reason in message and str(path) in message and "\n" not in message


def test_stored_config_is_plain_yaml(stored):
    """Nothing in the file needs unpickling: the config is safe-loadable YAML."""
    _, path = stored
    with h5py.File(path, "r") as f:
        config = yaml.safe_load(f.attrs["config"])
    assert config["filter"]["name"] == "etkf" and config["model"]["name"] == "lorenz96"
