"""assimbench: twin experiments for data assimilation on chaotic low-order models.

Importing the package switches JAX to float64 on the CPU before any array is
created; every module of the package relies on that. Nothing else happens at
import: the compilation cache is switched on when a run starts, configuration
schemas are registered when a config is composed.
"""

import jax

jax.config.update("jax_enable_x64", True)
jax.config.update("jax_platforms", "cpu")

from assimbench._version import __version__  # noqa: E402
from assimbench.api import compose_config, run, run_experiment  # noqa: E402  (after the x64 switch)
from assimbench.io.results import Result, read_result, write_result  # noqa: E402

__all__ = ["Result", "__version__", "compose_config", "read_result", "run", "run_experiment", "write_result"]
