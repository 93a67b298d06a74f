"""What the bench's Hydra commands share: reading their arguments, checking every job before
anything runs, and handing over to Hydra.

Hydra's public entry (``hydra.main``) reads ``sys.argv``. A console script
already has its arguments there; only a call with other arguments (the
Python entry ``main(argv)``, or ``assimbench --from FILE``, which expands to
the stored config's overrides) sets ``sys.argv`` for the duration of the
Hydra call, and restores it afterwards.
"""

import argparse
import contextlib
import hashlib
import itertools
import sys

from hydra.core.override_parser.overrides_parser import OverridesParser
from hydra.errors import HydraException
from omegaconf import OmegaConf

from assimbench.config.checks import ConfigError
from assimbench.config.composition import compose_config, register_schemas

EXIT_BAD_INPUT = 2
MAX_FOLDER_NAME = 120


def argument_parser() -> argparse.ArgumentParser:
    """The arguments a Hydra app accepts (what the bench reads of them: overrides and --multirun)."""
    parser = argparse.ArgumentParser(add_help=False)
    parser.add_argument("overrides", nargs="*")
    parser.add_argument("--multirun", "-m", action="store_true")
    parser.add_argument("--help", "-h", action="store_true")
    parser.add_argument("--hydra-help", action="store_true")
    parser.add_argument("--version", action="store_true")
    parser.add_argument("--cfg", "-c")
    parser.add_argument("--resolve", action="store_true")
    parser.add_argument("--package", "-p")
    parser.add_argument("--info", "-i", nargs="?", const="all")
    parser.add_argument("--run", "-r", action="store_true")
    parser.add_argument("--shell-completion", "-sc", action="store_true")
    parser.add_argument("--config-path", "-cp")
    parser.add_argument("--config-name", "-cn")
    parser.add_argument("--config-dir", "-cd")
    parser.add_argument("--experimental-rerun")
    return parser


def informational(args) -> bool:
    """True for a call that only prints (help, the config, information): no job runs."""
    return bool(args.help or args.hydra_help or args.version or args.cfg or args.info or args.shell_completion)


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


def compose_jobs(argv: list[str], config_name: str = "config") -> tuple:
    """(parsed arguments, composed and checked config of every job of ``argv``); ConfigError on the
    first bad one. Shared by the package's Hydra commands."""
    args, unknown = argument_parser().parse_known_args(argv)
    if unknown:
        raise ConfigError(f"{unknown[0]} is not an option of this command (see --help)")
    if args.config_name not in (None, config_name) or args.config_path or args.config_dir:
        raise ConfigError("--config-name/--config-path/--config-dir are not supported; use overrides")
    jobs = [compose_config(job, config_name=config_name) for job in expand_jobs(list(args.overrides), args.multirun)]
    return args, jobs


def job_folder(override_dirname: str) -> str:
    """A job's folder inside a sweep: its overrides, shortened with a hash when too long for a path."""
    name = override_dirname or "defaults"
    if len(name) <= MAX_FOLDER_NAME:
        return name
    digest = hashlib.sha256(name.encode()).hexdigest()[:12]
    return f"{name[:MAX_FOLDER_NAME - 13]}-{digest}"


def prepare_hydra() -> None:
    """What Hydra needs before it composes: our schemas and options, and the folder-name resolver."""
    register_schemas()
    if not OmegaConf.has_resolver("job_folder"):
        OmegaConf.register_new_resolver("job_folder", job_folder)


@contextlib.contextmanager
def hydra_arguments(argv: list[str]):
    """``sys.argv`` as Hydra must read it for ``argv``, for the duration of the block only."""
    if list(sys.argv[1:]) == list(argv):
        yield
        return
    saved = sys.argv
    sys.argv = [saved[0] if saved else "assimbench"] + list(argv)
    try:
        yield
    finally:
        sys.argv = saved


def run_command(command: str, argv, app, check, expand=lambda argv: argv) -> int:
    """The body of a Hydra console script: prepare Hydra, expand and check the arguments (one line and
    exit status 2 on bad input, before anything runs), then hand over to the Hydra ``app``."""
    argv = list(sys.argv[1:] if argv is None else argv)
    prepare_hydra()
    try:
        argv = expand(argv)
        check(argv)
    except ConfigError as err:
        return fail(command, str(err))
    with hydra_arguments(argv):
        app()
    return 0


def fail(command: str, message: str) -> int:
    """One line on stderr; the exit status of bad input."""
    print(f"{command}: error: {message}", file=sys.stderr)
    return EXIT_BAD_INPUT
