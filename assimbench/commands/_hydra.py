"""What the bench's Hydra commands share: reading their arguments, checking every job before
anything runs, and handing over to Hydra.

Hydra's public entry (``hydra.main``) reads ``sys.argv``. A console script
already has its arguments there; only a call with other arguments (the
Python entry ``main(argv)``, or ``assimbench --from FILE``, which expands to
the stored config's overrides) sets ``sys.argv`` for the duration of the
Hydra call, and restores it afterwards.

A user's own experiment file (``--config-path DIR --config-name NAME``, or
``--config-dir DIR --config-name NAME``) is handed to Hydra in one form that
the pre-flight composes too: ``--config-path`` the file's folder as an absolute
path (a relative one is taken from the current folder, not from this module as
Hydra would), ``--config-name`` its name, and ``hydra.searchpath`` the
package's ``configs/`` followed by the user's other folder, so the file can
start from the package's config and pick its groups.
"""

import argparse
import contextlib
import hashlib
import itertools
import os
import re
import sys
import traceback

import yaml
from hydra.core.override_parser.overrides_parser import OverridesParser
from hydra.errors import HydraException
from omegaconf import OmegaConf

from assimbench.config.checks import ConfigError
from assimbench.config.composition import compose_job, config_dir, register_schemas
from assimbench.io.atomic import unwritable

EXIT_BAD_INPUT = 2
MAX_FOLDER_NAME = 120


def argument_parser() -> argparse.ArgumentParser:
    """The arguments a Hydra app accepts (what the bench reads of them: overrides and --multirun)."""
    # No abbreviations: the config options are rewritten before Hydra reads them, so Hydra must never
    # take a shortened spelling that the rewrite did not see.
    parser = argparse.ArgumentParser(add_help=False, allow_abbrev=False)
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
    choices, hydra_settings = [], []
    for item in parsed:
        if item.is_hydra_override():
            hydra_settings.append(item.input_line)  # every job shares them; never swept here
            continue
        if item.is_sweep_override():
            if not multirun:
                raise ConfigError(f"{item.input_line}: a list of values is a sweep; add --multirun (-m)")
            key = item.get_key_element()
            choices.append([f"{key}={value}" for value in item.sweep_string_iterator()])
        else:
            choices.append([item.input_line])
    return [hydra_settings + list(job) for job in itertools.product(*choices)]


def compose_jobs(argv: list[str], config_name: str = "config", with_hydra: bool = False) -> tuple:
    """(parsed arguments, composed and checked config of every job of ``argv``); ConfigError on the
    first bad one. Shared by the package's Hydra commands; ``argv`` is in the form handed to Hydra
    (:func:`user_config_arguments`). With ``with_hydra`` every job is a (config, Hydra's node) pair."""
    args, unknown = argument_parser().parse_known_args(argv)
    if unknown:
        raise ConfigError(f"{unknown[0]} is not an option of this command (see --help)")
    jobs = [compose_job(job, config_name=args.config_name or config_name, config_path=args.config_path,
                        base=config_name)
            for job in expand_jobs(list(args.overrides), args.multirun)]
    return args, jobs if with_hydra else [cfg for cfg, _ in jobs]


def job_folder_of(hydra_node, multirun: bool) -> str:
    """The folder Hydra makes for a job: ``hydra.run.dir``, or ``hydra.sweep.dir``/its subdir."""
    if multirun:
        return os.path.join(str(hydra_node.sweep.dir), str(hydra_node.sweep.subdir))
    return str(hydra_node.run.dir)


def check_folders(args, jobs) -> None:
    """ConfigError (one line) when a job's folder or its output's folder cannot be written: asked
    before Hydra makes any folder, so a refused command leaves nothing behind (no ``.hydra``, no
    log). Missing folders are fine when they can be made; an output's missing parents are made."""
    setting = "hydra.sweep.dir" if args.multirun else "hydra.run.dir"
    for cfg, hydra_node in jobs:
        folder = job_folder_of(hydra_node, args.multirun)
        problem = unwritable(folder)
        if problem:
            raise ConfigError(f"{problem}; choose another {setting}")
        output = cfg.get("output")
        if output is None:
            continue
        path = os.path.join(folder, str(output))  # an absolute output is taken as given
        if os.path.isdir(path):
            raise ConfigError(f"output={output}: {os.path.abspath(path)} is a folder; give the path of a file")
        problem = unwritable(os.path.dirname(path))
        if problem:
            raise ConfigError(f"{problem}; choose another output")


def preflight_jobs(argv: list[str], config_name: str = "config") -> tuple:
    """(parsed arguments, (config, Hydra's node) of every job): composed, checked, and their folders
    found writable, unless the call only prints."""
    args, jobs = compose_jobs(argv, config_name, with_hydra=True)
    if not informational(args):
        check_folders(args, jobs)
    return args, jobs


# The config options as typed -> where user_config_arguments keeps them.
CONFIG_OPTIONS = {"--config-path": "path", "-cp": "path", "--config-name": "name", "-cn": "name",
                  "--config-dir": "dir", "-cd": "dir"}


def _take_config_options(argv: list[str]) -> tuple:
    """(``argv`` without the config options, {"path"|"name"|"dir": value as typed})."""
    rest, found = [], {}
    at = 0
    while at < len(argv):
        option, equals, value = argv[at].partition("=")
        if option in CONFIG_OPTIONS:
            if not equals:
                if at + 1 >= len(argv):
                    raise ConfigError(f"{option} needs a value")
                at += 1
                value = argv[at]
            found[CONFIG_OPTIONS[option]] = value
        else:
            rest.append(argv[at])
        at += 1
    return rest, found


def _quoted(text: str) -> str:
    """``text`` as a quoted string of Hydra's override grammar."""
    return "'" + text.replace("\\", "\\\\").replace("'", "\\'") + "'"


def _check_user_file(path: str, base: str) -> None:
    """A user's experiment file must be a YAML mapping whose defaults list names the package's
    ``base`` config before ``_self_`` (else its keys would have no schema, or be overwritten)."""
    try:
        with open(path, encoding="utf-8") as stream:
            content = yaml.safe_load(stream)
    except OSError as err:
        raise ConfigError(f"cannot read {path}: {err.strerror}") from None
    except yaml.YAMLError as err:
        raise ConfigError(f"{path} is not valid YAML: {' '.join(str(err).split())}") from None
    defaults = content.get("defaults") if isinstance(content, dict) else None
    names = [entry.lstrip("/") if isinstance(entry, str) else None for entry in defaults or []]
    if not isinstance(defaults, list) or base not in names or names.index(base) > (
            names.index("_self_") if "_self_" in names else len(names)):
        raise ConfigError(f"{path} must start from the package's config: begin it with "
                          f"'defaults: [{base}, _self_]' (group choices as '- override filter: letkf')")


def user_config_arguments(argv: list[str], base: str) -> list[str]:
    """``argv`` in the form handed to Hydra and composed by the pre-flight.

    A user's file NAME is looked for in ``--config-path`` then ``--config-dir`` (relative paths are
    from the current folder); it becomes the primary config and the package's ``configs/`` plus the
    other folder go on ``hydra.searchpath``. ``--config-dir`` alone only adds its folder to the
    search path. ConfigError (one line) for a missing folder or file, a name that is the
    package's own, a file that does not start from the package's config, or a ``hydra.searchpath``
    of the user's (the command sets it)."""
    rest, found = _take_config_options(argv)
    if any(item.partition("=")[0].lstrip("+") == "hydra.searchpath" for item in rest):
        raise ConfigError("hydra.searchpath is set by the command; add a folder with --config-dir")
    name = found.get("name", base).removesuffix(".yaml")
    folders = [(option, os.path.abspath(found[key])) for option, key in
               (("--config-path", "path"), ("--config-dir", "dir")) if key in found]
    for option, folder in folders:
        if not os.path.isdir(folder):
            raise ConfigError(f"{option} {found[CONFIG_OPTIONS[option]]}: no such folder ({folder})")
    package_names = sorted(p[:-5] for p in os.listdir(config_dir()) if p.endswith(".yaml"))
    for option, folder in folders:
        # Hydra looks in the user's folder first: a file there named as one of the package's configs
        # would replace it (and a file that starts from it would then include itself).
        shadowing = [n for n in package_names if os.path.isfile(os.path.join(folder, n + ".yaml"))]
        if shadowing:
            raise ConfigError(f"{option} {found[CONFIG_OPTIONS[option]]}: {shadowing[0]}.yaml there would replace the "
                              f"package's own {shadowing[0]}.yaml; rename it")
    if "path" in found and "name" not in found:
        raise ConfigError(f"--config-path {found['path']}: name your file with --config-name NAME (NAME.yaml)")
    if name == base and "path" not in found:
        # The package's own config; --config-dir only adds a folder to look in.
        return _with_override(rest, _search_path(f for _, f in folders)) if folders else rest
    if name in package_names:
        raise ConfigError(f"--config-name {name}: {name}.yaml is the package's own config; "
                          "give your file another name")
    if not folders:
        raise ConfigError(f"--config-name {name}: give the folder of {name}.yaml with --config-path")
    primary = next((f for _, f in folders if os.path.isfile(os.path.join(f, name + ".yaml"))), None)
    if primary is None:
        raise ConfigError(f"--config-name {name}: no file {name}.yaml in " + " or ".join(f for _, f in folders))
    _check_user_file(os.path.join(primary, name + ".yaml"), base)
    search = [config_dir()] + [f for _, f in folders if f != primary]
    return ["--config-path", primary, "--config-name", name] + _with_override(rest, _search_path(search))


def _search_path(folders) -> str:
    """The ``hydra.searchpath`` override listing ``folders``."""
    return f"hydra.searchpath=[{','.join(_quoted('file://' + f) for f in folders)}]"


def _with_override(argv: list[str], override: str) -> list[str]:
    """``argv`` with ``override`` placed just before its first override: the overrides must stay
    one unbroken run of arguments, or Hydra's parser takes the later ones for unknown options."""
    overrides = argument_parser().parse_known_args(argv)[0].overrides
    at = argv.index(overrides[0]) if overrides else len(argv)
    return argv[:at] + [override] + argv[at:]


# A job's folder name: its overrides sorted, each as key-value, joined by "__"; a list's items
# joined by "_" (lanes.filter.inflation=[1.0,1.02] -> lanes.filter.inflation-1.0_1.02). Only
# [A-Za-z0-9._+-] appear, so a name needs no quoting in a shell or a file system.
PAIR_SEPARATOR = "__"
KEY_SEPARATOR = "-"
ITEM_SEPARATOR = "_"
UNSAFE = re.compile(r"[^A-Za-z0-9._+-]")
# Overrides that read back from their folder name without doubt; any other (quotes, spaces, nested
# lists, ...) loses characters in the name, so a hash of the overrides is added to keep it unique.
PLAIN_KEY = re.compile(r"\+?[A-Za-z0-9.]+(?:_[A-Za-z0-9.]+)*")
PLAIN_VALUE = re.compile(r"[A-Za-z0-9.+-]+(?:_[A-Za-z0-9.+-]+)*|\[(?:[A-Za-z0-9.+-]+(?:,[A-Za-z0-9.+-]+)*)?\]")
HASH_LENGTH = 12


def _folder_pair(override: str) -> tuple:
    """(``override`` as key-value with only safe characters, whether that spelling is exact)."""
    key, equals, value = override.partition("=")
    exact = bool(equals) and bool(PLAIN_KEY.fullmatch(key)) and bool(PLAIN_VALUE.fullmatch(value))
    if value.startswith("[") and value.endswith("]"):
        value = ITEM_SEPARATOR.join(item.strip() for item in value[1:-1].split(","))
    pair = UNSAFE.sub("_", key) + (KEY_SEPARATOR + UNSAFE.sub("_", value.strip("'\"")) if equals else "")
    return pair, exact


def job_folder(overrides, exclude_keys=()) -> str:
    """A job's folder inside a sweep, named by its own overrides (Hydra's ``hydra.overrides.task``,
    without ``exclude_keys``): readable, safe characters only, the same for the same overrides.

    When the name would pass MAX_FOLDER_NAME it is cut after a whole key-value pair, and when it is
    cut or some characters could not be kept, a hash of the full overrides ends it
    (``...__hash-<12 hex>``), so different overrides never share a folder."""
    excluded = set(exclude_keys or ())
    kept = sorted(str(o) for o in overrides or () if str(o).partition("=")[0].lstrip("+~") not in excluded)
    if not kept:
        return "defaults"
    pairs, exact = zip(*(_folder_pair(o) for o in kept))
    name = PAIR_SEPARATOR.join(pairs)
    if all(exact) and len(name) <= MAX_FOLDER_NAME:
        return name
    suffix = f"hash{KEY_SEPARATOR}{hashlib.sha256(chr(10).join(kept).encode()).hexdigest()[:HASH_LENGTH]}"
    head = []
    for pair in pairs:
        if len(PAIR_SEPARATOR.join(head + [pair, suffix])) > MAX_FOLDER_NAME:
            break
        head.append(pair)
    return PAIR_SEPARATOR.join(head + [suffix])


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


def run_command(command: str, argv, app, check, expand=lambda argv: argv, base: str = "config",
                finish=None) -> int:
    """The body of a Hydra console script: prepare Hydra, expand and check the arguments (one line and
    exit status 2 on bad input, before anything runs), then hand over to the Hydra ``app``, whose
    primary config is the package's ``base``. ``finish(status) -> status``, when given, runs after
    the app has ended, however it ended (a launcher that gave up on a failed job included)."""
    argv = list(sys.argv[1:] if argv is None else argv)
    prepare_hydra()
    try:
        argv = user_config_arguments(expand(argv), base)
        check(argv)
    except ConfigError as err:
        return fail(command, str(err))
    status = 0
    with hydra_arguments(argv):
        try:
            app()
        except SystemExit as stop:  # Hydra's report of a failed job, or a job's own exit
            if finish is None:
                raise
            status = stop.code if isinstance(stop.code, int) else 1
        except Exception:
            if finish is None:
                raise
            traceback.print_exc()
            status = 1
    return status if finish is None else finish(status)


def fail(command: str, message: str) -> int:
    """One line on stderr; the exit status of bad input."""
    print(f"{command}: error: {message}", file=sys.stderr)
    return EXIT_BAD_INPUT
