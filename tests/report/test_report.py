"""assimbench-report over a small sweep: tables, tuned curve, paired differences, figures,
and bad or incompatible files named and skipped."""

import csv
import shutil

import h5py
import numpy as np
import pytest

import assimbench
from assimbench.commands import report as command

BASE = ["cycles=150", "burn_in=30", "model.size=12", "filter.members=8", "replicates=2", "diagnostics=null"]
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="module")
def sweep(tmp_path_factory):
    folder = tmp_path_factory.mktemp("sweep")
    runs = {
        "etkf": BASE + ["lanes.filter.inflation=[1.0,1.1]"],
        "letkf": BASE + ["filter=letkf", "lanes.filter.inflation=[1.02,1.1]", "lanes.filter.radius=[2.0,4.0]"],
        # A setting made to count as lost (threshold far below any RMSE): never the tuned choice.
        "etkf_lost": BASE + ["filter.inflation=1.05", "divergence_factor=0.001", "divergence_patience=1"],
    }
    for name, overrides in runs.items():
        assimbench.run(overrides, output=str(folder / name / "result.h5"))
    return folder


def _read_csv(path):
    with open(path, newline="") as handle:
        return list(csv.DictReader(handle))


def test_the_report_writes_tables_and_figures_and_tunes_to_the_lowest_rmse(sweep, tmp_path, capsys):
    out = tmp_path / "report"
    assert command.main([str(sweep), "--out", str(out)]) == 0
    table = _read_csv(out / "summary.csv")
    assert len(table) == 2 + 4 + 1  # one row per lane of each file
    assert {r["filter"] for r in table} == {"etkf", "letkf"}
    tuned = {r["filter"]: r for r in _read_csv(out / "tuned.csv")}
    for name in ("etkf", "letkf"):
        kept = [r for r in table if r["filter"] == name and r["lost_replicates"] == "0"]
        best = min(kept, key=lambda r: float(r["rmse_analysis"]))
        assert tuned[name]["rmse_analysis (95%)"].startswith(f"{float(best['rmse_analysis']):.4f}")
        if name == "letkf":
            assert float(tuned[name]["filter.radius"]) == float(best["filter.radius"])
    lost = [r for r in table if r["lost_replicates"] != "0"]
    assert len(lost) == 1 and lost[0]["filter.inflation"] == "1.05"
    markdown = (out / "report.md").read_text()
    assert "## Tuned" in markdown and "## Paired differences" in markdown and "| letkf |" in markdown
    for name in ("errors_over_cycles_e1", "tuned_curve_e1", "rank_histograms_e1", "spread_against_error_e1",
                 "heat_map_letkf_N8_e1"):
        assert (out / f"{name}.png").read_bytes()[:8] == PNG_MAGIC, name
    assert not list(out.glob("*.partial*"))
    assert "paired e1" in capsys.readouterr().out


def test_the_paired_difference_is_the_difference_of_the_tuned_time_means(sweep, tmp_path):
    """The mean of the per-cycle differences after burn-in equals the difference of the two time means
    (same cycles, same replicates): an identity that checks the pairing reads the right lanes."""
    out = tmp_path / "report"
    command.main([str(sweep), "--out", str(out)])
    tuned = {r["filter"]: r for r in _read_csv(out / "tuned.csv")}
    (pair,) = _read_csv(out / "paired.csv")
    mean = {name: float(tuned[name]["rmse_analysis (95%)"].split()[0]) for name in tuned}
    assert float(pair["difference"]) == pytest.approx(mean[pair["a"]] - mean[pair["b"]], abs=2e-4)
    assert float(pair["low"]) < float(pair["difference"]) < float(pair["high"])


def test_bad_files_are_named_in_one_line_and_skipped(sweep, tmp_path, capsys):
    folder = tmp_path / "mixed"
    shutil.copytree(sweep, folder)
    with h5py.File(folder / "foreign.h5", "w") as f:
        f["x"] = np.arange(3)
    good = (folder / "etkf" / "result.h5").read_bytes()
    (folder / "truncated.h5").write_bytes(good[: len(good) // 2])
    shutil.copy(folder / "etkf" / "result.h5", folder / "unfinished.h5")
    with h5py.File(folder / "unfinished.h5", "r+") as f:
        f.attrs["complete"] = False
    out = tmp_path / "report"
    assert command.main([str(folder), "--out", str(out)]) == 0
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 3 and all(line.endswith("skipped") for line in err)
    for name, words in (("foreign", "not an assimbench result"), ("truncated", "not a readable HDF5"),
                        ("unfinished", "incomplete")):
        assert any(name in line and words in line for line in err), (name, err)
    assert "Traceback" not in "".join(err)
    assert len(_read_csv(out / "summary.csv")) == 7


def test_incompatible_experiments_are_reported_apart(sweep, tmp_path):
    other = tmp_path / "other.h5"
    assimbench.run(BASE + ["model.forcing=10.0"], output=str(other))
    out = tmp_path / "report"
    assert command.main([str(sweep), str(other), "--out", str(out)]) == 0
    table = _read_csv(out / "summary.csv")
    assert {r["experiment"] for r in table} == {"1", "2"}
    assert "Experiments differ in model.forcing" in (out / "report.md").read_text()
    pairs = _read_csv(out / "paired.csv")
    assert all(p["experiment"] == "1" for p in pairs)  # never compared across experiments
    assert (out / "tuned_curve_e2.png").is_file()


def test_nothing_readable_is_one_line_and_exit_two(tmp_path, capsys):
    assert command.main([str(tmp_path / "missing"), "--out", str(tmp_path / "r")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert err[-1].startswith("assimbench-report: error:") and "no complete result files" in err[-1]
    assert not (tmp_path / "r").exists()


def test_runs_are_paired_only_by_their_stored_experiment_key(sweep, tmp_path, capsys):
    """A different truth (model error of the truth) is another experiment, although no model.* or
    observation.* key differs; a file without an experiment key is named and never paired."""
    noisy = tmp_path / "noisy.h5"
    assimbench.run(BASE + ["truth_noise_std=0.1"], output=str(noisy))
    unkeyed = tmp_path / "unkeyed.h5"
    shutil.copy(sweep / "etkf" / "result.h5", unkeyed)
    with h5py.File(unkeyed, "r+") as f:
        del f.attrs["experiment_key"]
    out = tmp_path / "report"
    assert command.main([str(sweep), str(noisy), str(unkeyed), "--out", str(out)]) == 0
    table = _read_csv(out / "summary.csv")
    assert {r["experiment"] for r in table if r["file"] == str(noisy)} == {"2"}
    assert {r["experiment"] for r in table if r["file"] != str(noisy)} == {"1"}
    assert str(unkeyed) not in {r["file"] for r in table}
    assert "unkeyed.h5: no experiment key" in capsys.readouterr().err


def test_only_bad_files_are_refused_in_one_line_that_gives_each_reason(tmp_path, capsys):
    foreign = tmp_path / "foreign.h5"
    with h5py.File(foreign, "w") as f:
        f["x"] = np.zeros(3)
    (tmp_path / "notes.h5").write_text("not HDF5")
    assert command.main([str(tmp_path), "--out", str(tmp_path / "r")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("assimbench-report: error: no complete result files"), err
    assert "foreign.h5: not an assimbench result file" in err[0] and "notes.h5: not a readable HDF5 file" in err[0]
    assert not (tmp_path / "r").exists()
