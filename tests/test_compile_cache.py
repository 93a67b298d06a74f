"""The persistent compilation cache: where it lives, and a repeated identical run compiles nothing new."""

import os
import subprocess
import sys

from assimbench import compile_cache

RUN = ["cycles=2", "burn_in=0", "output=null", "model.size=8", "filter.members=4"]


def _command():
    script = os.path.join(os.path.dirname(sys.executable), "assimbench")
    return [script] if os.path.exists(script) else [sys.executable, "-m", "assimbench"]


def _run(cache, tmp_path):
    env = dict(os.environ, ASSIMBENCH_COMPILE_CACHE=str(cache))
    return subprocess.run(_command() + RUN, cwd=tmp_path, env=env, capture_output=True, text=True, timeout=600)


def test_the_cache_folder_follows_the_environment(monkeypatch, tmp_path):
    monkeypatch.setenv(compile_cache.ENVIRONMENT_VARIABLE, str(tmp_path / "mine"))
    assert compile_cache.cache_dir() == str(tmp_path / "mine")
    monkeypatch.setenv(compile_cache.ENVIRONMENT_VARIABLE, "off")
    assert compile_cache.cache_dir() is None
    monkeypatch.delenv(compile_cache.ENVIRONMENT_VARIABLE)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    assert compile_cache.cache_dir() == str(tmp_path / "xdg" / "assimbench" / "jax")


def test_a_repeated_identical_run_finds_every_program_in_the_cache(tmp_path):
    cache = tmp_path / "cache"
    first = _run(cache, tmp_path)
    assert first.returncode == 0, first.stderr
    entries = sorted(os.listdir(cache))
    assert entries, "the first run stored its compiled programs"
    second = _run(cache, tmp_path)
    assert second.returncode == 0, second.stderr
    assert sorted(os.listdir(cache)) == entries  # nothing compiled anew


def test_the_cache_can_be_switched_off(tmp_path):
    done = subprocess.run(_command() + RUN, cwd=tmp_path, capture_output=True, text=True, timeout=600,
                          env=dict(os.environ, ASSIMBENCH_COMPILE_CACHE="off", HOME=str(tmp_path / "home"),
                                   XDG_CACHE_HOME=str(tmp_path / "xdg")))
    assert done.returncode == 0, done.stderr
    assert not (tmp_path / "xdg").exists() and not (tmp_path / "home" / ".cache" / "assimbench").exists()
