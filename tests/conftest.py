"""Shared test set-up: float64 JAX on the CPU before any array exists, and a
compilation cache of this test session only (hermetic: nothing from earlier
runs is reused; the suite's many identical programs compile once)."""

import atexit
import os
import shutil
import tempfile

os.environ.setdefault("JAX_PLATFORMS", "cpu")
if "ASSIMBENCH_COMPILE_CACHE" not in os.environ:
    _CACHE = tempfile.mkdtemp(prefix="assimbench-test-cache-")
    os.environ["ASSIMBENCH_COMPILE_CACHE"] = _CACHE  # subprocesses of the tests share it
    atexit.register(shutil.rmtree, _CACHE, True)

import jax  # noqa: E402

jax.config.update("jax_enable_x64", True)

import pytest  # noqa: E402

import assimbench  # noqa: E402,F401  (its import also switches x64 on; kept explicit here)

# ASSIMBENCH_LONG=1 runs the long reproductions in full; CI runs the short forms.
LONG = os.environ.get("ASSIMBENCH_LONG", "") == "1"


@pytest.fixture(scope="session")
def long_run():
    return LONG


def _asked_for(config, name: str) -> bool:
    """Whether the command line asks for tests of ``name`` by -k or -m."""
    return name in (config.option.keyword or "") or name in (config.option.markexpr or "")


def pytest_collection_modifyitems(config, items):
    """The SLURM cluster test starts daemons and may install packages: it runs only when asked
    (``pytest -k slurm``, as .ci/run does after the main suite), and says so otherwise."""
    if _asked_for(config, "slurm"):
        return
    skip = pytest.mark.skip(reason="the SLURM cluster test runs with: pytest -k slurm (.ci/run runs it after the suite)")
    for item in items:
        if "slurm" in item.keywords:
            item.add_marker(skip)
