"""assimbench-report over a small sweep (ensemble size x inflation x two seeds, plus an LETKF):
seeds pooled, best and runner-up with paired differences, lost settings, figures, and bad or
incompatible files named and skipped."""

import csv
import shutil

import h5py
import numpy as np
import pytest

import assimbench
from assimbench.commands import report as command
from assimbench.report import figures
from assimbench.report.collect import collect
from assimbench.report.pooling import pool
from assimbench.twin.summaries import TimeMeans

BASE = ["cycles=150", "burn_in=30", "model.size=12", "filter.members=8", "replicates=2", "diagnostics=null"]
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="module")
def sweep(tmp_path_factory):
    """Ensemble size x inflation x two seeds of the ETKF, one LETKF job, and a setting made lost."""
    folder = tmp_path_factory.mktemp("sweep")
    runs = {
        "letkf": BASE + ["filter=letkf", "seed=1", "lanes.filter.inflation=[1.02,1.1]", "lanes.filter.radius=[2.0,4.0]"],
        # A setting made to count as lost (threshold far below any RMSE): never the tuned choice.
        "etkf_lost": BASE + ["seed=1", "filter.inflation=1.05", "divergence_factor=0.001", "divergence_patience=1"],
    }
    for members in (6, 8):
        for seed in (1, 2):
            runs[f"etkf_n{members}_s{seed}"] = BASE + [f"filter.members={members}", f"seed={seed}",
                                                       "lanes.filter.inflation=[1.0,1.1,1.2]"]
    for name, overrides in runs.items():
        assimbench.run(overrides, output=str(folder / name / "result.h5"))
    return folder


@pytest.fixture(scope="module")
def report(sweep, tmp_path_factory):
    out = tmp_path_factory.mktemp("report") / "report"
    assert command.main([str(sweep), "--out", str(out)]) == 0
    return out


def _read_csv(path):
    with open(path, newline="") as handle:
        return list(csv.DictReader(handle))


def _runs(sweep):
    """Every run of the sweep, as the report reads them (one per lane of each file)."""
    rows, problems = collect([str(sweep)])
    assert not problems
    return rows


def test_seeds_are_pooled_into_one_setting_whose_mean_is_over_every_replicate(sweep, report):
    table = _read_csv(report / "summary.csv")
    etkf = [r for r in table if r["filter"] == "etkf" and r["members"] == "6"]
    assert len(etkf) == 3 and all(r["seeds"] == "1 2" and r["replicates"] == "4" for r in etkf)
    assert len(_read_csv(report / "runs.csv")) == 2 * 2 * 3 + 4 + 1  # every lane of every file
    runs = [r for r in _runs(sweep) if r.filter == "etkf" and r.members == 6 and r.config["filter.inflation"] == 1.1]
    replicate_means = np.concatenate([r.per_replicate["rmse_analysis"] for r in runs])
    (pooled,) = [r for r in etkf if float(r["filter.inflation"]) == 1.1]
    assert float(pooled["rmse_analysis"]) == pytest.approx(replicate_means.mean(), rel=1e-12)
    assert float(pooled["rmse_analysis_low"]) < float(pooled["rmse_analysis"]) < float(pooled["rmse_analysis_high"])


def test_the_pooled_interval_is_the_batch_means_interval_of_every_replicate_together(sweep):
    """Pooling from the stored per-replicate means and half-widths must give what TimeMeans gives on the
    per-cycle series of every replicate of both seeds at once (the same rule, two routes)."""
    runs = [r for r in _runs(sweep) if r.filter == "etkf" and r.members == 8 and r.config["filter.inflation"] == 1.2]
    (setting,) = pool(runs)[0]
    series = np.concatenate([r.series("rmse_analysis") for r in runs], axis=0)
    means = TimeMeans(series.shape[0], series.shape[1], int(runs[0].config["burn_in"]))
    means.add("x", series, 1)
    direct = means.summarise("x")
    assert setting.estimate("rmse_analysis") == pytest.approx((direct["mean"], direct["low"], direct["high"]), rel=1e-10)


def test_the_best_and_runner_up_are_the_two_lowest_kept_settings_with_their_paired_difference(report):
    table = _read_csv(report / "summary.csv")
    tuned = {(r["filter"], r["members"]): r for r in _read_csv(report / "tuned.csv")}
    for (name, members), decision in tuned.items():
        mine = [r for r in table if r["filter"] == name and r["members"] == members]
        kept = sorted((r for r in mine if r["lost_replicates"] == "0"), key=lambda r: float(r["rmse_analysis"]))
        assert int(decision["candidates"]) == len(kept) and int(decision["lost_settings"]) == len(mine) - len(kept)
        if not kept:
            assert decision["rmse_analysis"] == ""
            continue
        assert float(decision["rmse_analysis"]) == float(kept[0]["rmse_analysis"])  # numbers, not text
        assert float(decision["filter.inflation"]) == float(kept[0]["filter.inflation"])
        if len(kept) > 1:
            # Same replicates and cycles: the mean of the per-cycle differences is the difference of the means.
            assert float(decision["difference"]) == pytest.approx(
                float(kept[0]["rmse_analysis"]) - float(kept[1]["rmse_analysis"]), abs=1e-12)
            low, high = float(decision["difference_low"]), float(decision["difference_high"])
            assert low < float(decision["difference"]) < high
            assert decision["distinguishable"] == ("yes" if high < 0 or low > 0 else "no")


def test_a_size_by_inflation_sweep_compares_the_tuned_sizes_paired_by_seed(report):
    pairs = _read_csv(report / "paired.csv")
    sizes = [p for p in pairs if p["kind"] == "ensemble sizes" and "ETKF" in p["a"]]
    assert len(sizes) == 1 and "6 members" in sizes[0]["a"] and "8 members" in sizes[0]["b"]
    assert sizes[0]["seeds"] == "1 2"
    assert float(sizes[0]["low"]) < float(sizes[0]["difference"]) < float(sizes[0]["high"])
    assert {p["kind"] for p in pairs} >= {"runner-up", "ensemble sizes", "filters"}
    assert all(p["seeds"] for p in pairs)  # every comparison here shares a seed
    for p in pairs:
        low, high = float(p["low"]), float(p["high"])
        expected = "not distinguishable" if low <= 0 <= high else f"{p['b'] if low > 0 else p['a']} lower"
        assert p["verdict"] == expected


def test_a_run_that_lost_the_truth_without_blowing_up_is_marked_lost_by_the_failing_level(sweep, tmp_path):
    """With the failing level at a tenth of the observation error, settings that blow up nowhere are lost
    for their RMSE alone, and say so; with no level, only blow-ups count."""
    strict, lenient = tmp_path / "strict", tmp_path / "lenient"
    assert command.main([str(sweep), "--out", str(strict), "--fail-rmse", "0.01"]) == 0
    assert command.main([str(sweep), "--out", str(lenient), "--fail-ratio", "0"]) == 0
    strict_rows = _read_csv(strict / "summary.csv")
    assert all(r["lost_replicates"] == r["replicates"] for r in strict_rows)
    assert all("above the failing level 0.01" in r["lost_reasons"] for r in strict_rows if r["filter"] == "letkf")
    assert all(r["rmse_analysis"] == "" for r in _read_csv(strict / "tuned.csv"))
    blown_up = {(r["filter"], r["members"], r["filter.inflation"]) for r in _read_csv(lenient / "runs.csv")
                if r["blown_up_replicates"] != "0"}
    lenient_lost = {(r["filter"], r["members"], r["filter.inflation"]) for r in _read_csv(lenient / "summary.csv")
                    if r["lost_replicates"] != "0"}
    assert ("etkf", "8", "1.05") in blown_up and lenient_lost == blown_up  # only blow-ups count
    assert "blew up at cycle 1" in (lenient / "report.md").read_text()


def test_the_report_writes_its_tables_and_figures(report, sweep, capsys):
    markdown = (report / "report.md").read_text()
    for section in ("## Best setting at each static point", "## Paired comparisons", "## Lost settings"):
        assert section in markdown
    assert "ETKF, 8 members" in markdown and "inflation 1.05" in markdown  # plain words, not raw keys
    for name in ("errors_over_cycles_e1", "tuned_curve_e1", "rank_histograms_e1", "spread_against_error_e1",
                 "error_against_filter_inflation_e1", "heat_map_etkf_e1", "heat_map_letkf_N8_e1"):
        assert (report / f"{name}.png").read_bytes()[:8] == PNG_MAGIC, name
    assert not list(report.glob("*.partial*"))
    command.main([str(sweep), "--out", str(report)])
    out = capsys.readouterr().out
    assert "e1 ETKF, 8 members: best inflation" in out and "runner-up inflation" in out


@pytest.mark.parametrize("low, high", [(0.17, 0.3), (0.05, 4.0), (0.19, 0.21), (1e-3, 2e-3)])
def test_log_axes_always_get_at_least_two_readable_ticks_inside_the_range(low, high):
    ticks = figures.readable_log_ticks(low, high)
    assert len(ticks) >= 2 and all(low <= t <= high for t in ticks)
    assert len({f"{t:.3g}" for t in ticks}) == len(ticks)  # labels tell the ticks apart


def test_bad_files_are_named_in_one_line_and_skipped(sweep, tmp_path, capsys):
    folder = tmp_path / "mixed"
    shutil.copytree(sweep, folder)
    with h5py.File(folder / "foreign.h5", "w") as f:
        f["x"] = np.arange(3)
    good = (folder / "etkf_n8_s1" / "result.h5").read_bytes()
    (folder / "truncated.h5").write_bytes(good[: len(good) // 2])
    shutil.copy(folder / "etkf_n8_s1" / "result.h5", folder / "unfinished.h5")
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
    assert len(_read_csv(out / "runs.csv")) == 17


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
    shutil.copy(sweep / "etkf_n8_s1" / "result.h5", unkeyed)
    with h5py.File(unkeyed, "r+") as f:
        del f.attrs["experiment_key"]
    out = tmp_path / "report"
    assert command.main([str(sweep), str(noisy), str(unkeyed), "--out", str(out)]) == 0
    table = _read_csv(out / "runs.csv")
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


def test_a_sweep_of_a_smoother_and_an_iterative_filter_gets_its_figures_and_one_comparison(tmp_path, capsys):
    """ETKF with a fixed-lag smoother beside the IEnKS smoothing over its window, on one truth: each
    filter's own keys (window, adaptive inflation) do not split the filters into static points of
    their own, so the two are compared; the smoothed errors by lag and the accuracy-against-cost
    figures are drawn."""
    common = ["model=lorenz63", "filter.members=3", "observation.interval=0.25", "cycles=150", "burn_in=30",
              "seed=1", "replicates=2", "lanes.filter.inflation=[1.05,1.1]", "smoother.lag=1"]
    assimbench.run(common, output=str(tmp_path / "sweep" / "etkf" / "result.h5"))
    assimbench.run(common + ["filter=ienks"], output=str(tmp_path / "sweep" / "ienks" / "result.h5"))
    out = tmp_path / "report"
    assert command.main([str(tmp_path / "sweep"), "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "e1 ETKF, 3 members: best inflation" in printed and "e1 IEnKS, 3 members: best inflation" in printed
    assert "None" not in printed
    compared = _read_csv(out / "paired.csv")
    assert [(r["kind"], {r["a"], r["b"]}) for r in compared if r["kind"] == "filters"] == [
        ("filters", {"ETKF, 3 members (tuned)", "IEnKS, 3 members (tuned)"})]
    for name in ("error_by_lag_e1", "error_against_cost_e1"):
        assert (out / f"{name}.png").read_bytes()[:8] == PNG_MAGIC, name
    settings, _ = pool(collect([str(tmp_path / "sweep")])[0])
    lags = {s.filter: figures.smoothed_lags(s) for s in settings}
    assert lags == {"etkf": [1], "ienks": [1]}
    costs = {s.filter: figures.cycle_cost(s) for s in settings}
    assert costs["etkf"] == 3 and costs["ienks"] > 2 * 3  # at least one step and the final forecast


def test_estimated_parameters_get_their_pooled_estimate_and_a_figure_of_their_trajectories(tmp_path, capsys):
    """Two seeds of an ETKF estimating the ring's forcing under two spread floors: summary.csv holds
    the estimate pooled over every replicate of both seeds (the mean of the per-replicate time
    means), report.md shows it with its interval, and the trajectories figure is drawn."""
    common = BASE + ["forecast_model=lorenz96", "forecast_model.size=12", "estimate.parameters=[forcing]",
                     "estimate.initial_mean=7", "estimate.initial_std=1", "lanes.estimate.spread_floor=[0.1,0.3]"]
    for seed in (1, 2):
        assimbench.run(common + [f"seed={seed}"], output=str(tmp_path / "sweep" / f"s{seed}" / "result.h5"))
    out = tmp_path / "report"
    assert command.main([str(tmp_path / "sweep"), "--out", str(out)]) == 0
    table = _read_csv(out / "summary.csv")
    assert len(table) == 2 and all(r["seeds"] == "1 2" for r in table)
    rows = _runs(tmp_path / "sweep")
    for record in table:
        floor = float(record["estimate.spread_floor"])
        mine = [r for r in rows if r.config["estimate.spread_floor"] == floor]
        per_replicate = np.concatenate([r.per_replicate["estimate_forcing_mean"] for r in mine])
        assert float(record["estimate_forcing_mean"]) == pytest.approx(per_replicate.mean(), rel=1e-12)
        assert float(record["estimate_forcing_mean_low"]) < float(record["estimate_forcing_mean"])
        assert float(record["estimate_forcing_spread"]) >= floor - 1e-9  # the floor is a fraction of initial_std 1
    assert "forcing estimate (95%)" in (out / "report.md").read_text()
    assert (out / "parameter_trajectories_e1.png").read_bytes()[:8] == PNG_MAGIC
    settings, _ = pool(rows)
    assert [figures.estimated_parameters(s) for s in settings] == [["forcing"], ["forcing"]]
