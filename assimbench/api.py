"""Run a twin experiment from Python: config in, diagnostics out.

    >>> import assimbench
    >>> result = assimbench.run(["filter.members=10", "cycles=500", "burn_in=100"])
    >>> result.summary["rmse_analysis"], result.series["rmse_analysis"].shape

The command line is a thin layer over :func:`run_experiment`.
"""

import time
from collections.abc import Callable

from omegaconf import DictConfig

from assimbench.compile_cache import switch_on as switch_on_compile_cache
from assimbench.config.composition import compose_config
from assimbench.config.plan import Plan, resolve
from assimbench.io.results import Result
from assimbench.twin.runner import run_plan


def run_experiment(
    cfg: DictConfig | Plan,
    output: str | None = None,
    progress: Callable[[int, int], None] | None = None,
    keep_series: bool = True,
) -> Result:
    """Check and plan ``cfg`` (or take a ready :class:`Plan`), run it, and write ``output`` (HDF5) if given.

    The cycles run in compiled chunks of ``chunk_cycles``; each chunk is
    appended to the file as it completes and folded into the time means, so
    memory does not grow with the number of cycles when ``keep_series`` is
    False. ``progress(done, total)`` is called after every chunk. Compiled
    programs are kept in JAX's persistent cache (:mod:`assimbench.compile_cache`).
    """
    started = time.perf_counter()
    switch_on_compile_cache()
    plan = cfg if isinstance(cfg, Plan) else resolve(cfg)
    return run_plan(plan, output=output, progress=progress, keep_series=keep_series, started=started)


def run(overrides=(), output: str | None = None) -> Result:
    """Compose the config from ``overrides`` and run it; see :func:`run_experiment` (which checks it, once)."""
    return run_experiment(compose_config(overrides, validate=False), output=output)


__all__ = ["Result", "compose_config", "run", "run_experiment"]
