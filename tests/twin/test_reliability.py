"""Reliability: a stopped or killed run never leaves a file at the final name, its re-run equals
an uninterrupted run bit for bit, the same seed gives the same bits whatever the chunk length,
and random valid small configs either finish with finite summaries or are flagged as diverged."""

import os
import pty
import signal
import subprocess
import sys
import threading
import time
import weakref

import h5py
import numpy as np
import pytest

import assimbench

# Long enough (several seconds of cycling even with every program already in the compilation
# cache) that a signal sent half a second after the partial file appears lands mid-run.
LONG_RUN = ["cycles=250000", "burn_in=100", "chunk_cycles=2500", "model.size=12", "filter.members=6",
            "filter.inflation=1.1", "diagnostics=[]"]


def _command():
    script = os.path.join(os.path.dirname(sys.executable), "assimbench")
    return [script] if os.path.exists(script) else [sys.executable, "-m", "assimbench"]


def _datasets(path):
    """Every dataset of a result file (values only; timings and creation time live in attributes)."""
    out = {}
    with h5py.File(path, "r") as f:
        f.visititems(lambda name, obj: out.__setitem__(name, obj[...]) if isinstance(obj, h5py.Dataset) else None)
    return out


def _assert_same_bits(a, b):
    da, db = _datasets(a), _datasets(b)
    assert da.keys() == db.keys()
    for name in da:
        np.testing.assert_array_equal(da[name], db[name], err_msg=name)


def _start_and_stop(tmp_path, how):
    target = tmp_path / "stopped.h5"
    process = subprocess.Popen(_command() + LONG_RUN + [f"output={target}"], cwd=tmp_path,
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    partial = tmp_path / "stopped.h5.partial"
    deadline = time.time() + 300
    while not partial.exists() and process.poll() is None and time.time() < deadline:
        time.sleep(0.05)
    time.sleep(0.5)  # a few chunks into the run
    assert process.poll() is None, "the run ended before it could be stopped; make LONG_RUN longer"
    process.send_signal(how)
    out, err = process.communicate(timeout=120)
    return process.returncode, err, target, partial


@pytest.fixture(scope="module")
def uninterrupted(tmp_path_factory):
    folder = tmp_path_factory.mktemp("whole")
    whole = folder / "whole.h5"
    done = subprocess.run(_command() + LONG_RUN + [f"output={whole}"], cwd=folder, capture_output=True,
                          text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    return whole


@pytest.mark.parametrize("how", [signal.SIGTERM, signal.SIGKILL], ids=["SIGTERM", "SIGKILL"])
def test_a_stopped_run_leaves_no_final_file_and_its_rerun_equals_an_uninterrupted_run(how, tmp_path, uninterrupted):
    code, err, target, partial = _start_and_stop(tmp_path, how)
    assert not target.exists()
    assert partial.exists()
    if how == signal.SIGTERM:
        assert code == 128 + signal.SIGTERM
        lines = err.strip().splitlines()
        assert len(lines) == 1 and "stopped by SIGTERM" in lines[0] and "marked incomplete" in lines[0], err
        with h5py.File(partial, "r") as f:
            assert not f.attrs["complete"] and 0 < f.attrs["cycles_done"] < 250000
    else:
        assert code == -signal.SIGKILL
    with pytest.raises(assimbench.io.results.ResultFileError, match="incomplete|not a readable"):
        assimbench.read_result(str(partial))
    again = subprocess.run(_command() + LONG_RUN + [f"output={target}"], cwd=tmp_path, capture_output=True,
                           text=True, timeout=600)
    assert again.returncode == 0, again.stderr
    assert target.exists() and not partial.exists()
    _assert_same_bits(target, uninterrupted)


SMALL = ["cycles=120", "burn_in=20", "model.size=12", "filter.members=6", "filter.inflation=1.1", "replicates=2"]


def test_the_same_seed_gives_the_same_bits_whatever_the_chunk_length(tmp_path):
    for name, extra in (("a", ["chunk_cycles=1000"]), ("b", ["chunk_cycles=1000"]), ("c", ["chunk_cycles=7"]),
                        ("d", ["chunk_cycles=1000", "seed=7"])):
        assimbench.run(SMALL + extra, output=str(tmp_path / f"{name}.h5"))
    _assert_same_bits(tmp_path / "a.h5", tmp_path / "b.h5")
    _assert_same_bits(tmp_path / "a.h5", tmp_path / "c.h5")
    other = _datasets(tmp_path / "d.h5")["rmse_analysis"]
    assert not np.array_equal(_datasets(tmp_path / "a.h5")["rmse_analysis"], other)


def test_a_lane_run_repeats_bit_for_bit(tmp_path):
    lanes = SMALL + ["lanes.filter.inflation=[1.05,1.2]"]
    assimbench.run(lanes + ["chunk_cycles=1000"], output=str(tmp_path / "a.h5"))
    assimbench.run(lanes + ["chunk_cycles=11"], output=str(tmp_path / "b.h5"))
    _assert_same_bits(tmp_path / "a.h5", tmp_path / "b.h5")


def test_a_diverging_lane_is_flagged_and_its_sweep_completes(tmp_path):
    """5 members, no inflation on Lorenz-96 n=40 lose the truth (common practice: the ensemble
    cannot span the unstable directions); the inflated lane beside it runs on."""
    path = tmp_path / "sweep.h5"
    result = assimbench.run(["cycles=600", "burn_in=100", "filter.members=5", "lanes.filter.inflation=[1.0,1.1]",
                             "diagnostics=[]"], output=str(path))
    stored = assimbench.read_result(str(path))
    assert stored.attrs["complete"] and stored.attrs["diverged"]
    assert result.first_bad_cycle[0, 0] > 0  # the uninflated lane is flagged with its first bad cycle
    assert np.isfinite(stored.summary["rmse_analysis"]).all()


hypothesis = pytest.importorskip("hypothesis")
from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402


@st.composite
def small_configs(draw):
    name = draw(st.sampled_from(["etkf", "enkf", "letkf", "ensrf", "3dvar", "sir", "free"]))
    size = draw(st.integers(8, 14))
    overrides = [f"filter={name}", f"model.size={size}", f"cycles={draw(st.integers(20, 50))}", "burn_in=5",
                 f"observation.stride={draw(st.integers(1, 2))}",
                 f"observation.error_std={draw(st.floats(0.3, 2.0)):.3f}",
                 f"observation.transform={draw(st.sampled_from(['identity', 'absolute']))}",
                 f"seed={draw(st.integers(0, 2**32 - 1))}", "replicates=2"]
    if name in ("etkf", "enkf", "letkf", "ensrf"):
        overrides += [f"filter.members={draw(st.integers(3, 8))}", f"filter.inflation={draw(st.floats(1.0, 1.3)):.3f}"]
    if name in ("letkf", "ensrf"):
        overrides.append(f"filter.radius={draw(st.floats(0.5, 6.0)):.3f}")
    if name == "sir":
        overrides += [f"filter.members={draw(st.integers(10, 60))}", f"filter.jitter={draw(st.floats(0.0, 0.5)):.3f}"]
    if name == "free":
        overrides.append(f"filter.members={draw(st.integers(2, 6))}")
    return overrides


# Three random configurations in CI (five with ASSIMBENCH_LONG=1): each costs a compile of its own.
@settings(max_examples=5 if os.environ.get("ASSIMBENCH_LONG", "") == "1" else 3, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
@given(small_configs())
def test_random_valid_small_configs_finish_or_are_flagged(overrides):
    result = assimbench.run(overrides)
    values = np.array([np.asarray(v, dtype=float) for k, v in result.summary.items() if not k.endswith(("_low", "_high"))])
    assert np.isfinite(values).all() or result.diverged, overrides


def _repeated_from_its_file(tmp_path, overrides):
    """Run ``overrides`` into a file, then ``assimbench --from`` that file into another; both paths."""
    first, again = tmp_path / "first.h5", tmp_path / "again.h5"
    assimbench.run(overrides, output=str(first))
    done = subprocess.run(_command() + ["--from", str(first), f"output={again}"], cwd=tmp_path,
                          capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    return first, again


def test_a_run_can_be_repeated_from_the_config_stored_in_its_file(tmp_path):
    first, again = _repeated_from_its_file(
        tmp_path, SMALL + ["filter=letkf", "filter.radius=2.5", "lanes.filter.inflation=[1.05,1.1]"])
    _assert_same_bits(first, again)
    with h5py.File(first, "r") as a, h5py.File(again, "r") as b:
        assert a.attrs["config_hash"] == b.attrs["config_hash"]
    missing = subprocess.run(_command() + ["--from", str(tmp_path / "none.h5")], cwd=tmp_path,
                             capture_output=True, text=True, timeout=600)
    assert missing.returncode == 2 and missing.stderr.count("\n") == 1 and "none.h5" in missing.stderr


def test_a_run_with_an_imperfect_forecast_model_is_repeated_from_its_file(tmp_path):
    """--from rebuilds every group choice (model, forecast_model, filter), not only model and filter."""
    first, again = _repeated_from_its_file(
        tmp_path, SMALL + ["forecast_model=lorenz96", "forecast_model.size=12", "forecast_model.forcing=7"])
    _assert_same_bits(first, again)


def _type_ctrl_c(tmp_path, name, delay, extra=()):
    """Run in a pseudo-terminal, type Ctrl-C ``delay`` s after the partial file appears; (exit code,
    what the terminal showed, final file, partial file)."""
    target, partial = tmp_path / f"{name}.h5", tmp_path / f"{name}.h5.partial"
    command = _command() + LONG_RUN + list(extra) + [f"output={target}"]
    pid, fd = pty.fork()
    if pid == 0:  # the child: a session of its own with the pty as its controlling terminal
        os.chdir(tmp_path)
        os.execv(command[0], command)
    shown = []
    reader = threading.Thread(target=_drain, args=(fd, shown), daemon=True)
    reader.start()
    deadline = time.time() + 300
    while not partial.exists() and time.time() < deadline:
        time.sleep(0.05)
    time.sleep(delay)
    os.write(fd, b"\x03")  # the terminal's interrupt character: the line discipline sends SIGINT
    _, status = os.waitpid(pid, 0)
    reader.join(timeout=10)
    os.close(fd)
    return os.waitstatus_to_exitcode(status), b"".join(shown).decode(errors="replace"), target, partial


def _drain(fd, shown):
    """Keep reading the terminal so the child never blocks on a full pty buffer."""
    while True:
        try:
            data = os.read(fd, 4096)
        except OSError:  # the child closed the terminal
            return
        if not data:
            return
        shown.append(data)


# pty.fork warns that JAX's threads may deadlock a forked child; the child here only calls exec.
@pytest.mark.filterwarnings("ignore:os.fork:RuntimeWarning")
@pytest.mark.parametrize("delay", [0.2, 0.8])
def test_ctrl_c_typed_in_a_terminal_always_stops_the_run(tmp_path, delay):
    """Ctrl-C from a terminal stops the run whenever it lands: exit 130, only the .partial file
    (marked incomplete), and a line saying so; never a finished file."""
    code, shown, target, partial = _type_ctrl_c(tmp_path, "typed", delay)
    assert code == 130, shown
    assert not target.exists() and partial.exists(), shown
    assert "stopped by SIGINT" in shown and "Exception ignored" not in shown, shown
    with h5py.File(partial, "r") as f:
        assert not f.attrs["complete"]


@pytest.mark.filterwarnings("ignore:os.fork:RuntimeWarning")
def test_ctrl_c_stops_a_run_split_over_workers_as_it_stops_one_process(tmp_path):
    """The workers share the terminal's process group, so they get the SIGINT too; they leave the stop
    to the parent, which keeps the completed chunks and says so, as without workers."""
    code, shown, target, partial = _type_ctrl_c(tmp_path, "split", 0.5, ["replicates=2", "workers=2"])
    assert code == 130, shown
    assert not target.exists() and partial.exists(), shown
    lines = [line for line in shown.splitlines() if "assimbench:" in line]
    assert any("stopped by SIGINT" in line for line in lines) and "worker" not in shown, shown
    with h5py.File(partial, "r") as f:
        assert not f.attrs["complete"]


def test_a_stop_that_lands_in_a_finaliser_is_not_lost():
    """Python runs a signal handler wherever the main thread is; when that is a finaliser (a weak-reference
    callback of a cache), an exception raised there is only printed ("Exception ignored") and the run goes
    on. The handler therefore only records the stop, and the run raises it between chunks."""
    from assimbench.commands import run as command

    class Thing:
        pass

    thing = Thing()
    weakref.finalize(thing, command._record_stop, signal.SIGINT, None)
    command._STOP["signum"] = None
    del thing  # the finaliser runs here, as the handler would inside a cache's callback
    with pytest.raises(command.Stopped) as stop:
        command._raise_if_stopped()
    assert stop.value.signum == signal.SIGINT
    command._STOP["signum"] = None
