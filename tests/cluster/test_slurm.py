"""A sweep through a real SLURM scheduler (a one-node cluster on this machine, started by
.ci/slurm-cluster): Hydra's submitit launcher submits the jobs with sbatch, SLURM runs them, and
the results equal those of the same sweep run locally, number for number. A job cancelled mid-run
(scancel) and one requeued as after a preemption (scontrol requeue) are finished by running the
same command again, which runs only what is missing.

Runs only when asked (``pytest -k slurm``; .ci/run does, after the main suite): the fixture starts
the cluster through the script, installing its Debian packages if it must, and skips with the
script's one-line reason where that cannot be done.
"""

import os
import subprocess
import sys
import time

import h5py
import numpy as np
import pytest

pytestmark = pytest.mark.slurm

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
SCRIPT = os.path.join(ROOT, ".ci", "slurm-cluster")
BIN = os.path.dirname(sys.executable)


@pytest.fixture(scope="module")
def cluster_env():
    """The environment of a process that talks to the cluster (SLURM_CONF set)."""
    done = subprocess.run(["bash", SCRIPT, "start"], capture_output=True, text=True, timeout=900)
    if done.returncode != 0:
        pytest.skip(done.stderr.strip().splitlines()[-1] if done.stderr.strip() else "the SLURM cluster did not start")
    conf = done.stdout.strip().rsplit("=", 1)[-1]
    return {**os.environ, "SLURM_CONF": conf}


def _assimbench(args, env, cwd, **kwargs):
    return subprocess.run([os.path.join(BIN, "assimbench")] + args, env=env, cwd=cwd, capture_output=True, text=True,
                          timeout=900, **kwargs)


def _slurm_sweep(overrides, folder):
    return (["-m"] + overrides + ["hydra/launcher=submitit_slurm", f"hydra.sweep.dir={folder}",
                                  "hydra.launcher.timeout_min=20", "hydra.launcher.cpus_per_task=1",
                                  # Each job one process: the node's two cores run two jobs at a time.
                                  "workers=1"])


def _local_sweep(overrides, folder):
    return ["-m"] + overrides + [f"hydra.sweep.dir={folder}", "workers=1"]


def _datasets(path: str) -> tuple:
    """({dataset path: values} of every dataset, the summary's attributes) of one result file."""
    data = {}

    def keep(name, item):
        if isinstance(item, h5py.Dataset):
            data[name] = item[()]

    with h5py.File(path, "r") as f:
        f.visititems(keep)
        return data, dict(f["summary"].attrs)


def _results(folder) -> dict:
    """job folder -> {dataset: values} of every result file under ``folder``."""
    out = {}
    for job in sorted(os.listdir(folder)):
        path = os.path.join(folder, job, "result.h5")
        if os.path.isfile(path):
            out[job] = _datasets(path)
    return out


def _assert_same_results(cluster, local):
    assert sorted(cluster) == sorted(local) and cluster
    for job in local:
        data, summary = cluster[job]
        local_data, local_summary = local[job]
        assert sorted(data) == sorted(local_data), job
        for name in local_data:
            np.testing.assert_array_equal(data[name], local_data[name], err_msg=f"{job}/{name}")
        assert sorted(summary) == sorted(local_summary)
        for name in local_summary:
            np.testing.assert_array_equal(summary[name], local_summary[name], err_msg=f"{job} summary {name}")


def test_a_lane_sweep_through_slurm_equals_the_same_sweep_run_locally(cluster_env, tmp_path):
    overrides = ["filter.members=5,6", "lanes.filter.inflation=[1.0,1.05]", "cycles=300", "burn_in=50",
                 "model.size=12", "replicates=2"]
    on_cluster = _assimbench(_slurm_sweep(overrides, tmp_path / "cluster"), cluster_env, tmp_path)
    assert on_cluster.returncode == 0, on_cluster.stderr[-2000:]
    assert "all 2 jobs complete" in on_cluster.stderr
    # The jobs went through the scheduler, as one job array: its tasks' logs are in submitit's folder
    # under their SLURM ids, and SLURM's accounting has them completed.
    tasks = sorted(name for name in os.listdir(tmp_path / "cluster" / ".submitit") if name[0].isdigit() and "_" in name)
    assert len(tasks) == 2, tasks
    expected = sorted(f"{task}|COMPLETED" for task in tasks)
    for _ in range(60):  # the accounting lags the result files by the jobs' epilogue: seconds
        accounted = subprocess.run(["sacct", "-n", "-X", "-P", "-o", "JobID,State", "-j", tasks[0].split("_")[0]],
                                   env=cluster_env, capture_output=True, text=True, timeout=60).stdout.split()
        if sorted(accounted) == expected:
            break
        time.sleep(1)
    assert sorted(accounted) == expected, accounted
    local = _assimbench(_local_sweep(overrides, tmp_path / "local"), cluster_env, tmp_path)
    assert local.returncode == 0, local.stderr[-2000:]
    _assert_same_results(_results(tmp_path / "cluster"), _results(tmp_path / "local"))
    tables = []
    for name in ("cluster", "local"):
        report = subprocess.run([os.path.join(BIN, "assimbench-report"), str(tmp_path / name), "--out",
                                 str(tmp_path / f"report_{name}")], capture_output=True, text=True, timeout=600)
        assert report.returncode == 0, report.stderr
        tables.append([(tmp_path / f"report_{name}" / table).read_text() for table in ("summary.csv", "paired.csv",
                                                                                     "tuned.csv")])
    assert tables[0] == tables[1]


def _squeue(env) -> dict:
    """SLURM job id -> (state, job name) of the jobs in the queue."""
    out = subprocess.run(["squeue", "-h", "-o", "%i %T"], env=env, capture_output=True, text=True, timeout=60).stdout
    return dict(line.split() for line in out.splitlines() if line.strip())


def test_a_cancelled_and_a_preempted_job_are_finished_by_running_again(cluster_env, tmp_path):
    """Two jobs run at once on the node's two cores; one is requeued mid-run (what a preemption with
    requeue does), the other cancelled mid-run. The requeued one runs again and completes; the
    sweep ends saying which job is not complete (exit 1, no hang); the same command run again
    runs only that job; the folder then equals an uninterrupted sweep's."""
    # Long enough (about 10 s of cycling each, compile cache warm or not) to be caught mid-run.
    overrides = ["filter.members=8,10", "cycles=400000", "burn_in=100", "model.size=20", "chunk_cycles=5000"]
    args = _slurm_sweep(overrides, tmp_path / "cluster")
    command = subprocess.Popen([os.path.join(BIN, "assimbench")] + args, env=cluster_env, cwd=tmp_path,
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.time() + 300
    running = {}
    while time.time() < deadline:
        running = {job: state for job, state in _squeue(cluster_env).items() if state == "RUNNING"}
        if len(running) == 2:
            break
        time.sleep(1)
    assert len(running) == 2, f"two jobs did not start: {_squeue(cluster_env)}"
    # Mid-run: both jobs past compilation, their first chunks written to their .partial files.
    partials = lambda: list((tmp_path / "cluster").glob("*/result.h5.partial"))
    while time.time() < deadline and len(partials()) < 2:
        time.sleep(0.5)
    assert len(partials()) == 2 and not list((tmp_path / "cluster").glob("*/result.h5"))
    first, second = sorted(running, key=int)
    subprocess.run(["scontrol", "requeue", first], env=cluster_env, check=True, timeout=60)
    subprocess.run(["scancel", second], env=cluster_env, check=True, timeout=60)
    out, err = command.communicate(timeout=900)
    assert command.returncode != 0
    assert "1 of 2 jobs complete" in err and "did not finish" in err, err[-3000:]
    again = _assimbench(args, cluster_env, tmp_path)
    assert again.returncode == 0, again.stderr[-2000:]
    assert "1 of 2 jobs already have a complete result" in again.stderr
    local = _assimbench(_local_sweep(overrides, tmp_path / "local"), cluster_env, tmp_path)
    assert local.returncode == 0
    _assert_same_results(_results(tmp_path / "cluster"), _results(tmp_path / "local"))


def test_a_job_that_fails_on_bad_input_is_reported_not_waited_for(cluster_env, tmp_path):
    """A job whose folder holds a complete result of another config refuses to overwrite it (exit 2 on
    the node, FAILED in SLURM's accounting): the sweep ends at once, its summary names the job and why."""
    overrides = ["filter.members=5,6", "cycles=40", "burn_in=5", "model.size=10"]
    args = _slurm_sweep(overrides, tmp_path / "cluster")
    first = _assimbench(args, cluster_env, tmp_path)
    assert first.returncode == 0, first.stderr[-2000:]
    jobs = sorted(os.listdir(tmp_path / "cluster"))
    jobs = [job for job in jobs if job.startswith("burn_in")]
    # The second job's folder now holds the first job's complete result: another config.
    other = (tmp_path / "cluster" / jobs[0] / "result.h5").read_bytes()
    (tmp_path / "cluster" / jobs[1] / "result.h5").write_bytes(other)
    started = time.time()
    again = _assimbench(args, cluster_env, tmp_path)
    assert again.returncode != 0 and time.time() - started < 300
    assert "1 of 2 jobs complete" in again.stderr
    assert f"{jobs[1]}: its folder holds a complete result of another config" in again.stderr, again.stderr[-3000:]
    assert (tmp_path / "cluster" / jobs[1] / "result.h5").read_bytes() == other  # never overwritten
