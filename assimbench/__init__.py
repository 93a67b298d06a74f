"""assimbench: twin experiments for data assimilation on chaotic low-order models.

Importing the package switches JAX to float64 on the CPU before any array is
created; every module of the package relies on that. It also switches on
JAX's persistent compilation cache (see :mod:`assimbench.compile_cache`).
"""

import jax

jax.config.update("jax_enable_x64", True)
jax.config.update("jax_platforms", "cpu")

__version__ = "0.1.0"

from assimbench.compile_cache import switch_on as _switch_on_compile_cache  # noqa: E402

_switch_on_compile_cache()

from assimbench.api import compose_config, run, run_experiment  # noqa: E402  (after the x64 switch)
from assimbench.results import read_result, write_result  # noqa: E402

__all__ = ["__version__", "compose_config", "read_result", "run", "run_experiment", "write_result"]
