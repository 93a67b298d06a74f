"""Shared test set-up: float64 JAX on the CPU before any array exists."""

import os

os.environ.setdefault("JAX_PLATFORMS", "cpu")

import jax  # noqa: E402

jax.config.update("jax_enable_x64", True)

import pytest  # noqa: E402

import assimbench  # noqa: E402,F401  (its import also switches x64 on; kept explicit here)

# ASSIMBENCH_LONG=1 runs the long reproductions in full; CI runs the short forms.
LONG = os.environ.get("ASSIMBENCH_LONG", "") == "1"


@pytest.fixture(scope="session")
def long_run():
    return LONG
