"""Console script ``assimbench-lyapunov``: the Lyapunov spectrum of a configured model.

A Hydra app over the same ``model`` options (primary config
``configs/lyapunov.yaml``), e.g. ``assimbench-lyapunov model=lorenz63 time=2000
output=l63.h5``. Writes the spectrum file (:mod:`assimbench.io.spectrum`)
and prints a short table. Bad input: one line, exit status 2, nothing written.
A user's own file runs as for ``assimbench`` (``--config-path DIR
--config-name NAME``), starting from ``defaults: [lyapunov, _self_]``.
"""

import os
import sys

import hydra
import jax
import numpy as np
from hydra.core.hydra_config import HydraConfig
from omegaconf import DictConfig

from assimbench.commands._hydra import preflight_jobs, run_command
from assimbench.compile_cache import switch_on as switch_on_compile_cache
from assimbench.config.catalogue import catalogue
from assimbench.config.composition import config_dir
from assimbench.io.spectrum import write_spectrum
from assimbench.lyapunov import lyapunov_spectrum

COMMAND = "assimbench-lyapunov"


def format_spectrum(spectrum, cfg: DictConfig, size: int, path) -> str:
    n = spectrum.exponents.size
    shown = spectrum.exponents if n <= 8 else np.concatenate([spectrum.exponents[:5], spectrum.exponents[-2:]])
    labels = [str(i + 1) for i in range(n)] if n <= 8 else [str(i + 1) for i in range(5)] + [str(n - 1), str(n)]
    change = spectrum.drift.max()
    lines = [
        f"assimbench-lyapunov  {cfg.model.name} (n={size}), {n} exponents "
        f"averaged over {cfg.time:g} model time units",
        "  " + "  ".join(f"l{label}={value:+.4f}" for label, value in zip(labels, shown)),
        f"  sum {spectrum.exponents.sum():+.4f}   positive {spectrum.positive_count}   "
        f"Kaplan-Yorke dimension {spectrum.kaplan_yorke_dimension:.3f}",
        f"  doubling time {spectrum.doubling_time:.4f} model time units = "
        f"{spectrum.doubling_time / float(cfg.observation.interval):.2f} analysis intervals of {cfg.observation.interval:g}",
        f"  convergence: largest change over the second half of the window {change:.2e}",
    ]
    if path is not None:
        lines.append(f"  result: {path}")
    return "\n".join(lines)


@hydra.main(config_path=config_dir(), config_name="lyapunov", version_base="1.3")
def _app(cfg: DictConfig) -> None:
    switch_on_compile_cache()
    model = catalogue().models[cfg.model.name].build(cfg.model)
    x0 = model.first_guess(jax.random.PRNGKey(int(cfg.seed)), model.params)
    spectrum = lyapunov_spectrum(model, model.params, x0, count=cfg.count, reorthonormalise=int(cfg.reorthonormalise),
                                 spinup_time=float(cfg.spinup_time), time=float(cfg.time), blocks=int(cfg.blocks),
                                 key=jax.random.PRNGKey(int(cfg.seed) + 1))
    path = None
    if cfg.output is not None:
        output = cfg.output if os.path.isabs(cfg.output) else os.path.join(HydraConfig.get().runtime.output_dir, cfg.output)
        path = write_spectrum(output, spectrum, cfg)
    print(format_spectrum(spectrum, cfg, model.size, path), flush=True)


def main(argv=None) -> int:
    """Entry point of the ``assimbench-lyapunov`` console script."""
    return run_command(COMMAND, argv, _app, lambda args: preflight_jobs(args, config_name="lyapunov"), base="lyapunov")


if __name__ == "__main__":
    sys.exit(main())
