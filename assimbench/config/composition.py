"""Compose a configuration from the ``configs/`` groups and overrides.

Used by the Python API and by the command line's check of every job before
any work starts. The options of the ``model``, ``forecast_model`` and
``filter`` groups are the catalogue's specs, stored in Hydra's ConfigStore
under their names (their schemas hold the only defaults); ``configs/`` holds
the experiment's and the Lyapunov command's choices and Hydra's folders, and
the observation presets. Hydra's and OmegaConf's composition errors come back
as a :class:`~assimbench.config.checks.ConfigError` with one line naming the
override (or the key of a user's file) and what is allowed (with a "did you
mean" for a mistyped key).

A user's own experiment file is composed the way the command line hands it to
Hydra: its folder is the primary folder (``config_path``), its name the
``config_name``, and the package's ``configs/`` stays on the search path
through a ``hydra.searchpath`` override, so the file can start from the
package's config (``defaults: [config, _self_]``) and its group choices.
"""

import copy
import dataclasses
import difflib
import re
from importlib import resources
from pathlib import Path

from hydra import compose, initialize_config_dir
from hydra.core.config_store import ConfigStore
from hydra.core.global_hydra import GlobalHydra
from hydra.errors import HydraException
from omegaconf import DictConfig, OmegaConf, open_dict
from omegaconf.errors import OmegaConfBaseException

from assimbench.config.catalogue import catalogue
from assimbench.config.checks import ConfigError
from assimbench.config.choice import check, check_lyapunov
from assimbench.config.schema import LyapunovConfig, experiment_schema, lanes_schema

GROUPS = ("model", "forecast_model", "observation", "filter")
SCHEMA_PREFIX = "schema_"


def _config_root():
    # A source checkout (installed editable or not) has configs/ next to the package folder;
    # an installed copy ships it inside the package as assimbench.configs.
    beside = Path(__file__).resolve().parents[2] / "configs"
    if (beside / "config.yaml").is_file():
        return beside
    return resources.files("assimbench.configs")


def config_dir() -> str:
    """Absolute path of the configuration folder (packaged as assimbench.configs)."""
    return str(_config_root())


def register_schemas() -> None:
    """Store the schemas and the catalogue's options in Hydra's ConfigStore (idempotent)."""
    cat = catalogue()
    store = ConfigStore.instance()
    store.store(name=SCHEMA_PREFIX + "experiment", node=experiment_schema(lanes_schema(cat.lane_keys())))
    store.store(name=SCHEMA_PREFIX + "lyapunov", node=LyapunovConfig)
    store.store(group="observation", name=SCHEMA_PREFIX + "observation", node=cat.network.schema)
    for group in ("model", "forecast_model", "filter"):
        for name, spec in cat.group(group).items():
            store.store(group=group, name=name, node=spec.schema)


def group_options(group: str) -> list[str]:
    """The selectable options of a config group: the catalogue's names, or the observation presets."""
    if group != "observation":
        return sorted(catalogue().group(group))
    folder = _config_root().joinpath(group)
    return sorted(p.name[:-5] for p in folder.iterdir() if p.name.endswith(".yaml"))


def _split(override: str):
    key, sep, value = override.partition("=")
    return key.strip().lstrip("+~"), value.strip(), bool(sep)


def _check_group_choices(overrides) -> None:
    for override in overrides:
        key, value, has_value = _split(override)
        if has_value and key in GROUPS:
            options = group_options(key)
            if value not in options:
                allowed = ", ".join(options)
                raise ConfigError(f"{key}={value} is not allowed: unknown option; the options are {allowed}")


def _all_keys(cfg: DictConfig, prefix: str = "") -> list[str]:
    keys = []
    for key in cfg:
        full = f"{prefix}{key}"
        value = cfg._get_node(key)
        if isinstance(value, DictConfig):
            keys.extend(_all_keys(value, full + "."))
        else:
            keys.append(full)
    return keys


def _compose(overrides, config_name: str = "config", config_path=None) -> DictConfig:
    """The composed config, Hydra's node included (``hydra``), from ``config_name`` in
    ``config_path`` (default: the package's configs)."""
    register_schemas()
    if GlobalHydra.instance().is_initialized():
        GlobalHydra.instance().clear()
    with initialize_config_dir(config_dir=config_path or config_dir(), version_base="1.3", job_name="assimbench"):
        return compose(config_name=config_name, overrides=list(overrides), return_hydra_config=True)


def _source(overrides) -> list:
    """The overrides that decide which keys exist: group choices and the search path."""
    return [o for o in overrides if _split(o)[0] in GROUPS or _split(o)[0] == "hydra.searchpath"]


def _reference(overrides, config_name: str, config_path, base) -> DictConfig:
    """The config whose keys a bad key is compared with: the job's own without its other values,
    or, when the fault is in the user's file itself, the package's ``base`` with the group choices."""
    try:
        return _compose(_source(overrides), config_name, config_path)
    except (HydraException, OmegaConfBaseException):
        return _compose([o for o in overrides if _split(o)[0] in GROUPS], base or "config")


def _options_with(key: str) -> list:
    """The options of a component group whose schema has the key (``filter.radius`` -> letkf, ensrf)."""
    section, _, name = key.partition(".")
    if section not in ("model", "forecast_model", "filter") or "." in name:
        return []
    return sorted(option for option, spec in catalogue().group(section).items()
                  if name in {f.name for f in dataclasses.fields(spec.schema)})


def _first_line(err: BaseException) -> str:
    text = [ln.strip() for ln in str(err).strip().splitlines()]
    # An error in a config file is headed "In 'name': SomeError raised while composing config:";
    # the reason is the line after it.
    if len(text) > 1 and text[0].startswith("In '") and text[0].endswith(":"):
        return text[1]
    return text[0] if text else err.__class__.__name__


def _translate(err: BaseException, overrides, config_name: str = "config", config_path=None,
               base=None) -> ConfigError:
    message = str(err)
    in_file = re.search(r"full_key: (\S+)", message) if message.startswith("In '") else None
    unknown = re.search(r"Could not override '([^']+)'", message) or re.search(
        r"Key '([^']+)' (?:is )?not in", message
    )
    if unknown:
        key = in_file.group(1) if in_file else unknown.group(1)
        composed = _reference(overrides, config_name, config_path, base)
        known = [k for k in _all_keys(composed) if not k.startswith("hydra.")]
        if key.startswith("lanes."):
            given = next((_split(o)[1] for o in overrides if _split(o)[0] == key), "")
            return _lane_key_error(key[len("lanes."):], known, given.strip("[]") or "a,b")
        if "." not in key and not in_file and not message.startswith("Could not override"):
            parent = next((_split(o)[0] for o in overrides if _split(o)[0].endswith("." + key)), key)
            key = parent
        owners = _options_with(key)
        if owners:
            chosen = composed[key.partition(".")[0]].name
            section = key.partition(".")[0]
            return ConfigError(f"{key} is not a key of {section} {chosen}; it is a key of {section}="
                               + "|".join(owners))
        plain = [k for k in known if not k.startswith("lanes.")]  # a lane key is never what a plain key meant
        close = difflib.get_close_matches(key, plain, n=1, cutoff=0.6)
        hint = f"; did you mean {close[0]}?" if close else "; the keys are listed by assimbench --cfg job"
        return ConfigError(f"{key} is not a key of this configuration{hint}")
    if "Ambiguous value for argument" in message:
        arg = re.search(r"argument '([^']+)'", message)
        return ConfigError(f"{arg.group(1) if arg else 'override'}: a list of values is a sweep; add --multirun (-m)")
    cause = err.__cause__ if err.__cause__ is not None else err
    failing = re.search(r"override (\S+)", message)
    where = failing.group(1) if failing else in_file.group(1) if in_file else "configuration"
    if "is not a ListConfig" in str(cause):  # a list key given one bare value
        key = where.partition("=")[0]
        return ConfigError(f"{where} is not allowed: a list in brackets, e.g. {key}=[{where.partition('=')[2]}]")
    return ConfigError(f"{where} is not allowed: {_first_line(cause)}")


def _lane_key_error(key: str, known: list, values: str) -> ConfigError:
    """A lane over a key that is not a traced setting: point to multirun, or to the close name."""
    lane_keys = [k[len("lanes."):] for k in known if k.startswith("lanes.")]
    if key in known:
        return ConfigError(
            f"lanes.{key} is not allowed: {key} changes array shapes or code paths, so it cannot be a lane; "
            f"run its values as separate jobs with --multirun, e.g. -m {key}={values}"
        )
    close = difflib.get_close_matches(key, lane_keys, n=1, cutoff=0.6)
    hint = f"; did you mean lanes.{close[0]}?" if close else "; lane keys: " + ", ".join(lane_keys)
    return ConfigError(f"lanes.{key} is not a lane key{hint}")


def lane_key_error(cfg, key: str, values: str) -> ConfigError:
    """The refusal of ``lanes.<key>`` for a composed ``cfg`` whose lanes have no such key."""
    return _lane_key_error(key, [k for k in _all_keys(cfg) if not k.startswith("hydra.")], values)


def compose_job(overrides=(), validate: bool = True, config_name: str = "config", config_path=None,
                base=None) -> tuple:
    """(config, Hydra's node) of one job, composed as Hydra composes it: ``config_name`` from
    ``config_path`` (default: the package's configs) with Hydra-style ``overrides``
    (e.g. "filter.members=10"; ``hydra.*`` overrides shape Hydra's node).

    ``base`` is the package config the job is checked as (``config`` or ``lyapunov``; default
    ``config_name``). The config is the typed DictConfig without the ``hydra`` node, as the
    command's job receives it; with ``validate`` every node is checked through its spec too.
    Raises ConfigError with a one-line message.
    """
    overrides = list(overrides)
    _check_group_choices(overrides)
    try:
        full = _compose(overrides, config_name, config_path)
        cfg = copy.deepcopy(full)  # Hydra's node stays in ``full``, where its interpolations resolve
        with open_dict(cfg):
            del cfg["hydra"]
        OmegaConf.to_container(cfg, resolve=True, throw_on_missing=True)
    except (HydraException, OmegaConfBaseException) as err:
        raise _translate(err, overrides, config_name, config_path, base) from None
    if validate:
        if (base or config_name) == "lyapunov":
            check_lyapunov(cfg)
        else:
            check(cfg)
    return cfg, full.hydra


def compose_config(overrides=(), validate: bool = True, config_name: str = "config") -> DictConfig:
    """Compose ``configs/config.yaml`` (or ``configs/<config_name>.yaml``) with Hydra-style
    ``overrides`` (e.g. "filter.members=10").

    Returns the typed DictConfig; with ``validate`` every node is checked
    through its spec too. Raises ConfigError with a one-line message.
    """
    return compose_job(overrides, validate, config_name)[0]


__all__ = ["GROUPS", "SCHEMA_PREFIX", "compose_config", "compose_job", "config_dir", "group_options", "register_schemas"]
