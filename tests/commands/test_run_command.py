"""The command line: the demo end to end, a multirun, and bad input refused in one line."""

import os
import re
import subprocess
import sys

import h5py
import pytest

from assimbench.commands import run as cli
from assimbench.commands._hydra import MAX_FOLDER_NAME, job_folder, preflight_jobs, prepare_hydra
from assimbench.config.catalogue import catalogue

SMALL = ["cycles=30", "burn_in=5", "model.size=10", "filter.members=6"]


def _command():
    script = os.path.join(os.path.dirname(sys.executable), "assimbench")
    return [script] if os.path.exists(script) else [sys.executable, "-m", "assimbench"]


def _run(args, cwd):
    return subprocess.run(_command() + list(args), cwd=cwd, capture_output=True, text=True, timeout=600)


# (override, words the one-line message must contain)
BAD_INPUT = [
    (["model=lorenz99"], ["model=lorenz99", "lorenz63, lorenz96"]),
    (["filter=kalman"], ["filter=kalman", ", ".join(sorted(catalogue().filters))]),  # every filter is offered
    (["+filter.foo=1"], ["filter.foo is not a key", "filter etkf has", "inflation"]),
    (["+foo=1"], ["foo is not a key", "the experiment has", "cycles"]),
    (["filter.radius=6"], ["filter.radius is not a key of filter etkf", "filter=3denvar|4denvar|4dvar|ensrf|letkf"]),
    (["observation=nowhere"], ["observation=nowhere", "every_station"]),
    (["cycles=abc"], ["cycles", "Integer"]),
    (["filter.members=ten"], ["filter.members", "Integer"]),
    (["filter.inflation=large"], ["filter.inflation", "Float"]),
    (["filter.members=1"], ["filter.members=1", ">= 2"]),
    (["filter.inflation=0.9"], ["filter.inflation=0.9", ">= 1"]),
    (["observation.error_std=0"], ["observation.error_std", "> 0"]),
    (["observation.error_std=-1"], ["observation.error_std", "> 0"]),
    (["observation.stations=[0,2.5,41]"], ["observation.stations", "41 is not"]),
    (["observation.interval=0.055"], ["observation.interval", "multiple", "model.dt"]),
    (["observation.interval=0"], ["observation.interval", "> 0"]),
    (["burn_in=3000"], ["burn_in=3000", "cycles - 1"]),
    (["cycles=0"], ["cycles=0", ">= 1"]),
    (["observation.stride=41"], ["observation.stride=41", "40"]),
    (["model=lorenz63", "observation.stride=4"], ["observation.stride=4", "3"]),
    (["model.size=3"], ["model.size=3", ">= 4"]),
    (["model.dt=-0.01"], ["model.dt", "> 0"]),
    (["model.forcing=nan"], ["model.forcing", "finite"]),
    (["replicates=0"], ["replicates=0", ">= 1"]),
    (["seed=-1"], ["seed=-1", "2**32"]),
    (["lane_combination=zip"], ["lane_combination", "'zip'", "all", "matched"]),
    (["workers=0"], ["workers=0", "auto", "integer >= 1"]),
    (["workers=many"], ["workers", "'many'", "auto", "integer >= 1"]),
    (["initial_spread=-1"], ["initial_spread", ">= 0"]),
    (["model.sise=50"], ["model.sise", "did you mean model.size"]),
    (["filter.inflaton=1.1"], ["filter.inflaton", "did you mean filter.inflation"]),
    (["cylces=10"], ["cylces", "did you mean cycles"]),
    (["filter.members=10,20"], ["filter.members=10,20", "--multirun"]),
    (["cycles=["], ["cycles=[", "key=value"]),
    (["-m", "filter.members=10,1"], ["filter.members=1", ">= 2"]),
    (["filter=letkf", "filter.radius=0"], ["filter.radius", "> 0"]),
    (["filter=ensrf", "filter.radius=-2"], ["filter.radius", "> 0"]),
    (["model=lorenz63", "filter=letkf"], ["filter.radius", "null", "lorenz63"]),
    (["filter=sir", "filter.jitter=-0.1"], ["filter.jitter", ">= 0"]),
    (["filter=sir", "filter.ess_threshold=0"], ["filter.ess_threshold", "(0, 1]"]),
    (["filter=sir", "filter.ess_threshold=1.5"], ["filter.ess_threshold", "(0, 1]"]),
    (["filter=3dvar", "filter.b_scale=0"], ["filter.b_scale", "> 0"]),
    (["filter=3dvar", "filter.iterations=0"], ["filter.iterations", ">= 1"]),
    (["filter.rtpp=1.5"], ["filter.rtpp", "0 (off) to 1"]),
    (["filter.rtps=-1"], ["filter.rtps", "0 (off) to 2"]),
    (["filter.additive_std=-0.1"], ["filter.additive_std", ">= 0"]),
    (["observation.transform=cube"], ["observation.transform", "identity, absolute, square"]),
    (["filter=3dvar", "filter.members=5"], ["filter.members", "not a key"]),
    (["filter=3dvar", "diagnostics=[rank_histogram]"], ["diagnostics", "rank_histogram", "3dvar can give only"]),
    (["diagnostics=[brier]"], ["diagnostics", "brier", "crps"]),
    (["filter=etkf", "diagnostics=[ess]"], ["diagnostics", "ess", "etkf can give only"]),
    (["store.ensemble_every=-1"], ["store.ensemble_every", ">= 0"]),
    (["divergence_patience=0"], ["divergence_patience", ">= 1"]),
    (["divergence_factor=0"], ["divergence_factor", "> 0"]),
    (["lanes.filter.members=[10,20]"], ["lanes.filter.members", "--multirun", "filter.members=10,20"]),
    (["lanes.filter.inflation=[1.1,0.5]"], ["lanes.filter.inflation=0.5", ">= 1"]),
    (["lanes.filter.radius=[2.0]"], ["lanes.filter.radius", "no setting radius"]),
    (["forecast_model=nowhere"], ["forecast_model=nowhere", "lorenz96_closure", "same"]),
    (["forecast_model=lorenz96", "forecast_model.size=30"], ["forecast_model", "truth's 40 resolved", "30"]),
    (["forecast_model=lorenz63"], ["forecast_model", "truth's 40 resolved", "3 variables"]),
    (["model=lorenz96_two_scale", "forecast_model=lorenz96"], ["forecast_model", "36 resolved", "or all its 396"]),
    (["model=lorenz63", "forecast_model=lorenz96_closure"], ["forecast_model", "Lorenz-96 ring", "lorenz63"]),
    (["forecast_model=lorenz96", "forecast_model.dt=0.02"], ["observation.interval", "forecast_model.dt=0.02"]),
    (["model=lorenz96_two_scale", "forecast_model=lorenz96_closure", "forecast_model.degree=9"],
     ["forecast_model.degree=9", "0 to 6"]),
    (["model=lorenz96_two_scale", "filter=letkf"], ["filter.radius", "null", "lorenz96_two_scale"]),
    (["model=lorenz96_two_scale", "model.slow=3"], ["model.slow=3", ">= 4"]),
    (["model=kuramoto_sivashinsky", "model.length=0"], ["model.length", "> 0"]),
    (["truth_noise_std=-1"], ["truth_noise_std", ">= 0"]),
    (["filter=4dvar", "filter.window=0"], ["filter.window=0", ">= 1"]),
    (["filter=4dvar", "filter.iterations=0"], ["filter.iterations=0", ">= 1"]),
    (["filter=4dvar", "filter.inner_iterations=0"], ["filter.inner_iterations=0", ">= 1"]),
    (["filter.adaptive=true", "filter.adaptive_min=1.5", "filter.adaptive_max=1.2"],
     ["filter.adaptive_max=1.2", "bounds reversed"]),
    (["filter.adaptive=true", "filter.adaptive_std=0"], ["filter.adaptive_std", "> 0"]),
    (["filter.adaptive=true", "filter.inflation=2.5"], ["filter.inflation=2.5", "[adaptive_min, adaptive_max]"]),
    (["filter=enkfn", "filter.prior_extra_count=2"], ["filter.prior_extra_count=2", "Bocquet"]),
    (["lanes.forecast_model.forcing=[7,8]"], ["lanes.forecast_model.forcing", "forecast_model same", "none"]),
    (["forecast_model=lorenz96", "filter=3dvar", "lanes.forecast_model.forcing=[7,8]"],
     ["lanes.forecast_model.forcing", "3dvar", "climatology"]),
]


def _refused_in_one_line(status: int, words, capsys):
    """Exit status 2 and one line on stderr holding every word; returns what was captured."""
    captured = capsys.readouterr()
    assert status == 2
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("assimbench: error: "), captured.err
    for word in words:
        assert word in lines[0], (word, lines[0])
    return captured


@pytest.mark.parametrize("args, words", BAD_INPUT, ids=[" ".join(a) for a, _ in BAD_INPUT])
def test_bad_input_is_one_line_exit_two_and_nothing_written(args, words, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    captured = _refused_in_one_line(cli.main(args), words, capsys)
    assert captured.out == ""
    assert list(tmp_path.iterdir()) == []


def test_bad_input_from_the_console_script_exits_two_without_traceback(tmp_path):
    done = _run(["filter.members=1"], tmp_path)
    assert done.returncode == 2
    assert done.stderr.strip().count("\n") == 0 and "Traceback" not in done.stderr
    assert list(tmp_path.iterdir()) == []


def test_the_demo_runs_end_to_end_with_no_arguments(tmp_path):
    """`assimbench` alone: the 40-station ring, 20-member ETKF; prints a summary and the file path."""
    done = _run([], tmp_path)
    assert done.returncode == 0, done.stderr
    out = done.stdout
    assert "RMSE" in out and "spread" in out and "result:" in out
    # What a reader needs to judge the numbers: the settings in force and the reference levels.
    assert "settings            inflation 1.03" in out and "error std 1" in out
    assert "references          observation error 1.0000, climatology" in out
    assert "x the observation error" in out and "better than both" in out
    assert "spread / RMSE" in out and "(ratio of the time means)" in out
    path = out.split("result:")[1].split()[0]
    assert os.path.isfile(path) and path.startswith(str(tmp_path))
    with h5py.File(path, "r") as f:
        assert f.attrs["complete"]
        assert 0.15 < f["summary"].attrs["rmse_analysis"] < 0.22  # published band, see test_cycling
        assert f["rmse_analysis"].shape == (1, 3000)


def test_an_absolute_output_path_is_used_as_given(tmp_path):
    target = tmp_path / "here" / "mine.h5"
    done = _run(SMALL + [f"output={target}"], tmp_path)
    assert done.returncode == 0, done.stderr
    assert target.is_file()


def _members_of(path):
    with h5py.File(path, "r") as f:
        assert f.attrs["complete"]
        return f.attrs["config"].split("members: ")[1].split()[0]


SWEEP = ["-m", "filter.members=5,7", "filter.inflation=1.02,1.1"] + SMALL[:-1] + ["hydra.sweep.dir=sweeps/study"]


def test_a_multirun_writes_one_file_per_job_and_a_rerun_resumes(tmp_path):
    """Basic launcher; the second identical command skips finished jobs and redoes the others."""
    done = _run(SWEEP, tmp_path)
    assert done.returncode == 0, done.stderr
    files = sorted((tmp_path / "sweeps" / "study").glob("*/result.h5"))
    assert len(files) == 4
    assert {_members_of(p) for p in files} == {"5", "7"}
    assert files[0].parent.name == ("burn_in-5__cycles-30__filter.inflation-1.02__filter.members-5__"
                                    "model.size-10")  # a job's folder names its overrides
    missing, incomplete, kept = files[0], files[1], files[2:]
    # A complete result under another folder name (as an older naming scheme left it) is not the job's:
    # the job runs again, and the resume count does not claim it.
    stray = tmp_path / "sweeps" / "study" / "older-name" / "result.h5"
    stray.parent.mkdir()
    missing.rename(stray)
    with h5py.File(incomplete, "r+") as f:
        f.attrs["complete"] = False
    stamps = [p.stat().st_mtime_ns for p in kept]
    again = _run(SWEEP, tmp_path)
    assert again.returncode == 0, again.stderr
    assert "2 of 4 jobs already have a complete result" in again.stderr
    assert again.stdout.count("skipped:") == 2
    assert [p.stat().st_mtime_ns for p in kept] == stamps
    assert missing.is_file() and _members_of(incomplete) in {"5", "7"}


def test_a_complete_result_of_another_config_is_never_overwritten(tmp_path):
    target = tmp_path / "mine.h5"
    assert _run(SMALL + [f"output={target}"], tmp_path).returncode == 0
    before = target.read_bytes()
    done = _run(SMALL + ["filter.inflation=1.2", f"output={target}"], tmp_path)
    assert done.returncode == 2 and "another config" in done.stderr and "not overwritten" in done.stderr
    assert target.read_bytes() == before


def test_the_joblib_launcher_runs_jobs_in_parallel_processes(tmp_path):
    pytest.importorskip("hydra_plugins.hydra_joblib_launcher")
    done = _run(["-m", "filter.members=5,7"] + SMALL[:-1] + ["hydra/launcher=joblib", "hydra.sweep.dir=sweeps/j"], tmp_path)
    assert done.returncode == 0, done.stderr
    files = sorted((tmp_path / "sweeps" / "j").glob("*/result.h5"))
    assert {_members_of(p) for p in files} == {"5", "7"}


def test_the_submitit_launcher_in_local_mode_runs_a_job_end_to_end(tmp_path):
    pytest.importorskip("hydra_plugins.hydra_submitit_launcher")
    done = _run(["-m", "filter.members=5"] + SMALL[:-1] + ["hydra/launcher=submitit_local", "hydra.sweep.dir=sweeps/s"],
                tmp_path)
    assert done.returncode == 0, done.stderr
    files = sorted((tmp_path / "sweeps" / "s").glob("*/result.h5"))
    assert len(files) == 1 and _members_of(files[0]) == "5"


def test_a_sweep_ends_with_a_summary_naming_every_job_that_is_not_complete(tmp_path):
    """A job that refuses its folder (a complete result of another config there, never overwritten) and
    a job stopped part-way (its .partial kept) are named with their reason; the exit status is not 0."""
    args = ["-m", "filter.members=5,6,7"] + SMALL[:-1] + ["hydra.sweep.dir=sweeps/s"]
    assert _run(args, tmp_path).returncode == 0
    folders = sorted(p for p in (tmp_path / "sweeps" / "s").iterdir() if p.is_dir() and p.name.startswith("burn"))
    other = (folders[0] / "result.h5").read_bytes()
    (folders[1] / "result.h5").write_bytes(other)
    (folders[2] / "result.h5").rename(folders[2] / "result.h5.partial")
    with h5py.File(folders[2] / "result.h5.partial", "a") as f:
        f.attrs["complete"] = 0
    again = _run(args, tmp_path)
    assert again.returncode != 0
    # The basic launcher stops at the refused job, so the stopped one after it is still not complete.
    assert "sweep sweeps/s: 1 of 3 jobs complete; run the same command again" in again.stderr, again.stderr
    assert f"{folders[1].name}: its folder holds a complete result of another config" in again.stderr
    assert f"{folders[2].name}: started, did not finish" in again.stderr
    assert (folders[1] / "result.h5").read_bytes() == other


def test_the_progress_bar_stays_quiet_when_stderr_is_not_a_terminal(tmp_path):
    done = _run(SMALL + ["chunk_cycles=10"], tmp_path)
    assert done.returncode == 0 and done.stderr == ""


@pytest.mark.parametrize("args", [["--help"], ["--cfg", "job", "filter=letkf"], ["--hydra-help"]])
def test_the_informational_calls_print_and_exit_zero(args, tmp_path):
    done = subprocess.run(_command() + args, cwd=tmp_path, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0 and "Traceback" not in done.stderr, done.stderr
    assert done.stdout.strip()
    assert not (tmp_path / "runs").exists()  # nothing is run, nothing is written


def test_the_lyapunov_command_help_prints_and_exits_zero(tmp_path):
    script = os.path.join(os.path.dirname(sys.executable), "assimbench-lyapunov")
    command = [script] if os.path.exists(script) else [sys.executable, "-m", "assimbench.commands.lyapunov"]
    done = subprocess.run(command + ["--help"], cwd=tmp_path, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0 and "assimbench-lyapunov" in done.stdout, done.stdout + done.stderr


@pytest.mark.parametrize("rmse, verdict", [(0.2, "better than both"), (2.0, "better than climatology; NOT better than the observation error"),
                                           (4.6, "NOT better than the observation error or climatology")])
def test_the_printed_summary_places_the_analysis_error_against_its_reference_levels(rmse, verdict):
    from assimbench.commands.run import reference_lines

    config = {"observation": {"error_std": 1.0, "transform": "identity"}}
    lines = reference_lines({"rmse_analysis": rmse}, config, 3.6)
    assert lines[0].split(None, 1)[1] == "observation error 1.0000, climatology 3.6000 (RMSE of the climatological mean)"
    assert lines[1].endswith(f"{rmse:.2f} x the observation error, {rmse / 3.6:.2f} x climatology: {verdict}")


def test_a_diverged_run_says_why_it_has_no_verdict():
    from assimbench.commands.run import reference_lines

    lines = reference_lines({"rmse_analysis": float("nan")}, {"observation": {"error_std": 1.0}}, 3.6)
    assert len(lines) == 2 and "diverged" in lines[1] and "no verdict" in lines[1]


RING_STUDY = """\
defaults:
  - config
  - override model: lorenz63
  - _self_
filter:
  members: 6
cycles: 20
burn_in: 5
"""


def _study(tmp_path, text, name="ring"):
    folder = tmp_path / "studies"
    folder.mkdir(exist_ok=True)
    (folder / f"{name}.yaml").write_text(text)
    return folder


def test_a_users_config_file_runs_end_to_end_and_its_rerun_is_found_complete(tmp_path):
    """A relative --config-path is taken from the current folder; the file starts from the package's
    config and picks a group; the pre-flight composes the same config as the job (same config_hash)."""
    _study(tmp_path, RING_STUDY)
    command = ["-m", "--config-path", "studies", "--config-name", "ring", "seed=3", "hydra.sweep.dir=sweeps/ring"]
    done = _run(command, tmp_path)
    assert done.returncode == 0, done.stderr
    files = list((tmp_path / "sweeps" / "ring").glob("*/result.h5"))
    assert len(files) == 1
    with h5py.File(files[0], "r") as f:
        assert f.attrs["complete"]
        assert f["rmse_analysis"].shape == (1, 20)
        config = f.attrs["config"]
    assert "name: lorenz63" in config and "members: 6" in config and "seed: 3" in config
    again = _run(command, tmp_path)
    assert again.returncode == 0, again.stderr
    assert "1 of 1 jobs already have a complete result" in again.stderr  # the pre-flight's hash
    assert again.stdout.count("skipped:") == 1  # the job's hash: the same config


USER_FILE_FAULTS = [
    ("defaults: [config, _self_]\ncycles: abc\n", ["cycles", "Integer"]),
    ("defaults: [config, _self_]\nfilter:\n  members: 1\n", ["filter.members=1", ">= 2"]),
    ("defaults: [config, _self_]\nfilter:\n  membres: 3\n", ["filter.membres", "did you mean filter.members"]),
    ("defaults: [config, _self_]\ncylces: 3\n", ["cylces", "did you mean cycles"]),
    ("defaults:\n  - config\n  - override filter: kalman\n  - _self_\n", ["kalman"]),
    ("cycles: 20\n", ["ring.yaml", "defaults: [config, _self_]"]),
    ("defaults: [_self_, config]\ncycles: 20\n", ["ring.yaml", "defaults: [config, _self_]"]),
    ("defaults: [config\n", ["ring.yaml", "not valid YAML"]),
]


@pytest.mark.parametrize("text, words", USER_FILE_FAULTS, ids=[t.splitlines()[-1] for t, _ in USER_FILE_FAULTS])
def test_a_bad_value_in_a_users_file_is_one_line_naming_the_key(text, words, tmp_path, monkeypatch, capsys):
    _study(tmp_path, text)
    monkeypatch.chdir(tmp_path)
    _refused_in_one_line(cli.main(["--config-path", "studies", "--config-name", "ring"]), words, capsys)
    assert [p.name for p in tmp_path.iterdir()] == ["studies"]  # nothing written


@pytest.mark.parametrize("args, words", [
    (["--config-path", "studies", "--config-name", "missing"], ["missing.yaml", "studies"]),
    (["--config-path", "nowhere", "--config-name", "ring"], ["--config-path nowhere", "no such folder"]),
    (["--config-path", "studies"], ["--config-name NAME", "NAME.yaml"]),
    (["--config-path", "studies", "--config-name", "config"], ["config.yaml", "package's own"]),
    (["--config-name", "ring"], ["folder of ring.yaml", "--config-path"]),
    (["--config-path", "studies", "--config-name", "ring", "hydra.searchpath=[x]"], ["set by the command", "--config-dir"]),
])
def test_a_missing_users_file_or_folder_is_one_line(args, words, tmp_path, monkeypatch, capsys):
    _study(tmp_path, RING_STUDY)
    monkeypatch.chdir(tmp_path)
    status = cli.main(args)
    captured = capsys.readouterr()
    lines = captured.err.strip().splitlines()
    assert status == 2 and len(lines) == 1 and lines[0].startswith("assimbench: error: "), captured.err
    for word in words:
        assert word in lines[0], (word, lines[0])
    assert [p.name for p in tmp_path.iterdir()] == ["studies"]


def test_a_users_file_found_through_config_dir_can_be_overridden(tmp_path, monkeypatch, capsys):
    """--config-dir: the file is looked for there too; command-line overrides come after the file."""
    _study(tmp_path, RING_STUDY)
    monkeypatch.chdir(tmp_path)
    status = cli.main(["--config-dir", "studies", "--config-name", "ring", "--cfg", "job", "filter.members=7"])
    out = capsys.readouterr().out
    assert status == 0
    assert "name: lorenz63" in out and "members: 7" in out and "cycles: 20" in out


def test_the_lyapunov_command_runs_a_users_file(tmp_path):
    _study(tmp_path, "defaults:\n  - lyapunov\n  - override model: lorenz63\n  - _self_\ntime: 5\nblocks: 10\noutput: l63.h5\n",
           name="short")
    script = os.path.join(os.path.dirname(sys.executable), "assimbench-lyapunov")
    command = [script] if os.path.exists(script) else [sys.executable, "-m", "assimbench.commands.lyapunov"]
    done = subprocess.run(command + ["--config-path", "studies", "--config-name", "short"], cwd=tmp_path,
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert "lorenz63 (n=3), 3 exponents averaged over 5 model time units" in done.stdout
    bad = subprocess.run(command + ["--config-path", "studies", "--config-name", "short", "time=-1"], cwd=tmp_path,
                         capture_output=True, text=True, timeout=300)
    assert bad.returncode == 2 and bad.stderr.strip().count("\n") == 0 and "time" in bad.stderr, bad.stderr


needs_permissions = pytest.mark.skipif(os.geteuid() == 0, reason="root writes into read-only folders")


def _read_only_folder(tmp_path):
    folder = tmp_path / "ro"
    folder.mkdir()
    folder.chmod(0o500)
    return folder


def _file(tmp_path):
    path = tmp_path / "afile"
    path.write_text("not a folder")
    return path


# (arguments given the tmp folder, the read-only folder and a plain file; words of the one line)
FOLDER_FAULTS = [
    (lambda t, ro, f: [f"output={ro}/r.h5"], lambda t, ro, f: [f"cannot write to {ro} (read-only", "output"], True),
    (lambda t, ro, f: [f"output={ro}/missing/r.h5"], lambda t, ro, f: [f"{ro}/missing", f"{ro} is a read-only",
                                                                       "output"], True),
    (lambda t, ro, f: [f"hydra.run.dir={ro}/run"], lambda t, ro, f: [f"{ro}/run", "read-only", "hydra.run.dir"], True),
    (lambda t, ro, f: ["-m", "filter.members=5,6", f"hydra.sweep.dir={ro}/sweep"],
     lambda t, ro, f: [f"{ro}/sweep", "read-only", "hydra.sweep.dir"], True),
    (lambda t, ro, f: [f"output={f}/r.h5"], lambda t, ro, f: [f"{f} is not a folder", "output"], False),
    (lambda t, ro, f: [f"output={t}"], lambda t, ro, f: [f"output={t}", "is a folder"], False),
    (lambda t, ro, f: [f"hydra.run.dir={f}/run"], lambda t, ro, f: [f"{f} is not a folder", "hydra.run.dir"], False),
    (lambda t, ro, f: ["-m", "filter.members=5,6", f"hydra.sweep.dir={f}"],
     lambda t, ro, f: [f"{f} is not a folder", "hydra.sweep.dir"], False),
]


@pytest.mark.parametrize("args, words, read_only", FOLDER_FAULTS,
                         ids=["output read-only", "output parent under read-only", "run dir read-only",
                              "sweep dir read-only", "output under a file", "output is a folder",
                              "run dir under a file", "sweep dir is a file"])
def test_an_unwritable_folder_is_one_line_exit_two_and_nothing_left_behind(args, words, read_only, tmp_path,
                                                                           monkeypatch, capsys):
    if read_only and os.geteuid() == 0:
        pytest.skip("root writes into read-only folders")
    ro, afile = _read_only_folder(tmp_path), _file(tmp_path)
    monkeypatch.chdir(tmp_path)
    status = cli.main(args(tmp_path, ro, afile) + SMALL)
    captured = capsys.readouterr()
    lines = captured.err.strip().splitlines()
    assert status == 2 and len(lines) == 1 and lines[0].startswith("assimbench: error: "), captured.err
    for word in words(tmp_path, ro, afile):
        assert word in lines[0], (word, lines[0])
    assert sorted(p.name for p in tmp_path.iterdir()) == ["afile", "ro"]  # no runs/<date>/.hydra, no log
    assert list(ro.iterdir()) == []


@pytest.mark.parametrize("read_only", [pytest.param(True, marks=needs_permissions), False])
def test_the_lyapunov_command_refuses_an_unwritable_output_folder(read_only, tmp_path, monkeypatch, capsys):
    from assimbench.commands import lyapunov
    folder = _read_only_folder(tmp_path) if read_only else _file(tmp_path)
    monkeypatch.chdir(tmp_path)
    status = lyapunov.main(["model=lorenz63", f"output={folder}/l63.h5"])
    lines = capsys.readouterr().err.strip().splitlines()
    assert status == 2 and len(lines) == 1 and str(folder) in lines[0] and "output" in lines[0], lines
    assert [p.name for p in tmp_path.iterdir()] == [folder.name]


@pytest.mark.parametrize("read_only", [pytest.param(True, marks=needs_permissions), False])
def test_the_report_refuses_an_unwritable_out_folder(read_only, tmp_path, monkeypatch, capsys):
    from assimbench.commands import report
    folder = _read_only_folder(tmp_path) if read_only else _file(tmp_path)
    monkeypatch.chdir(tmp_path)
    status = report.main([str(tmp_path), "--out", str(folder / "report")])
    captured = capsys.readouterr()
    lines = captured.err.strip().splitlines()
    assert status == 2 and len(lines) == 1, captured.err
    assert lines[0].startswith("assimbench-report: error: ") and str(folder) in lines[0] and "--out" in lines[0]
    assert [p.name for p in tmp_path.iterdir()] == [folder.name] and captured.out == ""


def _long_overrides(last: str) -> list:
    return [f"lanes.filter.inflation=[{','.join(f'{1 + i / 100:.2f}' for i in range(20))}]",
            "lanes.filter.rtps=[0.0,0.1,0.2,0.3,0.4,0.5,0.6]", "observation.error_std=0.5", "filter.members=12",
            f"seed={last}"]


def test_job_folder_names_are_safe_unique_and_cut_between_whole_pairs():
    names = {job_folder(_long_overrides(str(seed))) for seed in range(50)}
    assert len(names) == 50  # the overrides differ only after the cut: the hash keeps them apart
    for seed in range(50):
        name = job_folder(_long_overrides(str(seed)))
        assert len(name) <= MAX_FOLDER_NAME and re.fullmatch(r"[A-Za-z0-9._+-]+", name), name
        pairs = name.split("__")
        assert pairs[-1].startswith("hash-")
        whole = {job_folder([o]) for o in _long_overrides(str(seed))}  # every pair spelled alone
        assert set(pairs[:-1]) <= whole, (pairs, whole)  # no value cut in the middle
    assert job_folder(list(reversed(_long_overrides("1")))) == job_folder(_long_overrides("1"))


def test_job_folder_names_spell_lists_readably_and_hash_what_they_cannot_spell():
    assert job_folder(["filter.members=5", "lanes.filter.inflation=[1.0,1.02]", "output=x.h5"], ["output"]) == \
        "filter.members-5__lanes.filter.inflation-1.0_1.02"
    assert job_folder([]) == "defaults"
    spaced, joined = job_folder(["observation.transform='a b'"]), job_folder(["observation.transform=a_b"])
    assert joined == "observation.transform-a_b" and spaced.startswith("observation.transform-a_b__hash-")
    assert not set("[],='\" ") & set(spaced + joined)


def test_a_sweep_job_folder_is_named_as_hydra_will_name_it(tmp_path, monkeypatch):
    """The pre-flight's folder of each job (resume, writability) is the one Hydra makes."""
    monkeypatch.chdir(tmp_path)
    prepare_hydra()
    _, jobs = preflight_jobs(["-m", "filter.members=5,6", "lanes.filter.inflation=[1.0,1.02]", "output=r.h5",
                              "hydra.sweep.dir=sweeps/s"])
    assert [str(h.sweep.subdir) for _, h in jobs] == [
        "filter.members-5__lanes.filter.inflation-1.0_1.02", "filter.members-6__lanes.filter.inflation-1.0_1.02"]
    assert list(tmp_path.iterdir()) == []


def test_a_file_named_as_the_packages_config_in_the_users_folder_is_refused(tmp_path, monkeypatch, capsys):
    """Hydra reads the user's folder first: a config.yaml there would replace the package's (and one
    that starts from config would include itself)."""
    _study(tmp_path, RING_STUDY)
    (tmp_path / "studies" / "config.yaml").write_text("defaults:\n  - config\n  - _self_\n")
    monkeypatch.chdir(tmp_path)
    _refused_in_one_line(cli.main(["--config-path", "studies", "--config-name", "ring"]),
                         ["config.yaml there would replace the package's own config.yaml"], capsys)


@pytest.mark.skipif(not os.path.isdir("/proc/self"), reason="no /proc file system here")
def test_a_folder_that_refuses_new_files_is_refused_before_the_run_even_for_root(tmp_path, monkeypatch, capsys):
    """/proc accepts no new files although access() says yes to root: the check makes a probe file."""
    monkeypatch.chdir(tmp_path)
    _refused_in_one_line(cli.main(SMALL + ["output=/proc/assimbench/r.h5"]), ["cannot create /proc/assimbench"],
                         capsys)
    assert list(tmp_path.iterdir()) == []
