"""Command line ``assimbench``: a Hydra app over the ``configs/`` groups.

Before Hydra starts, every job of the command (every point of a ``-m`` sweep)
is composed and validated, so a bad value stops the whole command with one
line on stderr and exit status 2, before anything is written.
"""

import itertools
import os
import sys

import hydra
from hydra.core.hydra_config import HydraConfig
from hydra.core.override_parser.overrides_parser import OverridesParser
from hydra.errors import HydraException
from omegaconf import DictConfig

from assimbench.api import run_experiment
from assimbench.composition import compose_config, config_dir
from assimbench.validation import ConfigError

EXIT_BAD_INPUT = 2


def _fail(message: str) -> int:
    print(f"assimbench: error: {message}", file=sys.stderr)
    return EXIT_BAD_INPUT


def expand_jobs(overrides: list[str], multirun: bool) -> list[list[str]]:
    """The override list of every job the command would run (sweeps expanded)."""
    parser = OverridesParser.create()
    parsed = []
    for override in overrides:
        try:
            parsed.extend(parser.parse_overrides([override]))
        except HydraException as err:
            lines = [ln.strip() for ln in str(err).strip().splitlines()]
            details = [ln for ln in lines[1:] if ln and not ln.startswith("See ")]
            reason = details[0] if details else lines[0]
            raise ConfigError(f"{override} cannot be read as key=value ({reason})") from None
    choices = []
    for item in parsed:
        if item.is_hydra_override():
            continue
        if item.is_sweep_override():
            if not multirun:
                raise ConfigError(f"{item.input_line}: a list of values is a sweep; add --multirun (-m)")
            key = item.get_key_element()
            choices.append([f"{key}={value}" for value in item.sweep_string_iterator()])
        else:
            choices.append([item.input_line])
    return [list(job) for job in itertools.product(*choices)]


def preflight(argv: list[str]) -> None:
    """Compose and validate every job of ``argv``; raise ConfigError on the first bad one."""
    from hydra._internal.utils import get_args_parser

    args = get_args_parser().parse_args(argv)
    if args.config_name not in (None, "config") or args.config_path or args.config_dir:
        raise ConfigError("--config-name/--config-path/--config-dir are not supported; use overrides")
    for job in expand_jobs(list(args.overrides), bool(args.multirun)):
        compose_config(job)


def _cell(summary, name):
    if name not in summary:
        return f"{'-':>22}"
    mean, low, high = summary[name], summary.get(name + "_low"), summary.get(name + "_high")
    if low is None or not (low == low):  # no interval (nan)
        return f"{mean:>22.4f}"
    return f"{mean:.4f} +- {(high - low) / 2:.4f}".rjust(22)


def format_summary(result, path) -> str:
    """The short table printed at the end of a run: time means after burn-in with 95% intervals."""
    cfg = result.config
    model = cfg.model
    size = model.size if model.name == "lorenz96" else 3
    reps = result.replicates
    members = f", {cfg.filter.members} members" if "members" in cfg.filter else ""
    head = (
        f"assimbench  {model.name} (n={size})  {cfg.filter.name}{members}  "
        f"{reps} replicate{'s' if reps > 1 else ''} x {cfg.cycles} cycles (burn-in {cfg.burn_in})"
    )
    s = result.summary
    lines = [head, f"  {'time mean (95%)':<20}{'forecast':>22}{'analysis':>22}"]
    for label, stem in (("RMSE", "rmse"), ("spread", "spread"), ("spread / RMSE", "spread_skill"),
                        ("CRPS", "crps"), ("CRPS (fair)", "crps_fair")):
        if f"{stem}_analysis" in s:
            lines.append(f"  {label:<20}{_cell(s, stem + '_forecast')}{_cell(s, stem + '_analysis')}")
    for label, name in (("innovation ratio", "innovation_ratio"), ("Desroziers R", "desroziers_r"),
                        ("Desroziers HBH^T", "desroziers_hbht"), ("ESS", "ess")):
        if name in s:
            lines.append(f"  {label:<20}{_cell(s, name)}")
    if result.diverged:
        where = ", ".join(f"replicate {r} at cycle {c}" for r, c in enumerate(result.first_bad_cycle) if c >= 0)
        lines.append(f"  DIVERGED: {where}")
    lines.append(
        f"  compile {result.compile_seconds:.1f} s, cycling {result.run_seconds:.2f} s "
        f"({result.microseconds_per_cycle:.0f} us per cycle for {reps} replicate{'s' if reps > 1 else ''})"
    )
    if path is not None:
        lines.append(f"  result: {path}")
    return "\n".join(lines)


class _ChunkProgress:
    """A progress bar per chunk on a terminal (tqdm on stderr); silent otherwise.

    The bar appears with the first finished chunk, so its rate excludes compilation.
    """

    def __init__(self, total: int):
        self._total = total
        self._bar = None

    def __call__(self, done: int, total: int) -> None:
        if self._bar is None and sys.stderr.isatty():
            from tqdm import tqdm

            self._bar = tqdm(total=total, unit="cycle", desc="assimbench", leave=False, file=sys.stderr)
        if self._bar is not None:
            self._bar.update(done - self._bar.n)

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()


@hydra.main(config_path=config_dir(), config_name="config", version_base="1.3")
def _hydra_app(cfg: DictConfig) -> None:
    output = cfg.output
    if output is not None and not os.path.isabs(output):
        output = os.path.join(HydraConfig.get().runtime.output_dir, output)
    progress = _ChunkProgress(int(cfg.cycles))
    try:
        result = run_experiment(cfg, output=output, progress=progress, keep_series=False)
    except ConfigError as err:
        sys.exit(_fail(str(err)))
    finally:
        progress.close()
    print(format_summary(result, result.path), flush=True)


def main(argv=None) -> int:
    """Entry point of the ``assimbench`` console script."""
    argv = list(sys.argv[1:] if argv is None else argv)
    informational = {"--help", "-h", "--hydra-help", "--info", "-i", "--cfg", "-c", "--shell-completion", "-sc"}
    if not informational.intersection(argv):
        try:
            preflight(argv)
        except ConfigError as err:
            return _fail(str(err))
    sys.argv = [sys.argv[0]] + argv
    _hydra_app()
    return 0


if __name__ == "__main__":
    sys.exit(main())
