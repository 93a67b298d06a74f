"""Compose a configuration from the ``configs/`` groups and overrides.

Used by the Python API and by the command line's check of every job before
any work starts. The options of the ``model``, ``forecast_model`` and
``filter`` groups are the catalogue's specs, stored in Hydra's ConfigStore
under their names (their schemas hold the only defaults); ``configs/`` holds
the experiment's and the Lyapunov command's choices and Hydra's folders, and
the observation presets. Hydra's and OmegaConf's composition errors come back
as a :class:`~assimbench.config.checks.ConfigError` with one line naming the
override and what is allowed (with a "did you mean" for a mistyped key).
"""

import dataclasses
import difflib
import re
from importlib import resources
from pathlib import Path

from hydra import compose, initialize_config_dir
from hydra.core.config_store import ConfigStore
from hydra.core.global_hydra import GlobalHydra
from hydra.errors import HydraException
from omegaconf import DictConfig, OmegaConf
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


def _compose(overrides, config_name: str = "config") -> DictConfig:
    register_schemas()
    if GlobalHydra.instance().is_initialized():
        GlobalHydra.instance().clear()
    with initialize_config_dir(config_dir=config_dir(), version_base="1.3", job_name="assimbench"):
        return compose(config_name=config_name, overrides=list(overrides))


def _options_with(key: str) -> list:
    """The options of a component group whose schema has the key (``filter.radius`` -> letkf, ensrf)."""
    section, _, name = key.partition(".")
    if section not in ("model", "forecast_model", "filter") or "." in name:
        return []
    return sorted(option for option, spec in catalogue().group(section).items()
                  if name in {f.name for f in dataclasses.fields(spec.schema)})


def _first_line(err: BaseException) -> str:
    text = str(err).strip().splitlines()
    return text[0].strip() if text else err.__class__.__name__


def _translate(err: BaseException, overrides) -> ConfigError:
    message = str(err)
    unknown = re.search(r"Could not override '([^']+)'", message) or re.search(
        r"Key '([^']+)' (?:is )?not in", message
    )
    if unknown:
        key = unknown.group(1)
        group_choices = [o for o in overrides if _split(o)[0] in GROUPS]
        known = _all_keys(_compose(group_choices))
        if key.startswith("lanes."):
            given = next((_split(o)[1] for o in overrides if _split(o)[0] == key), "")
            return _lane_key_error(key[len("lanes."):], known, given.strip("[]") or "a,b")
        if "." not in key and not message.startswith("Could not override"):
            parent = next((_split(o)[0] for o in overrides if _split(o)[0].endswith("." + key)), key)
            key = parent
        owners = _options_with(key)
        if owners:
            chosen = _compose(group_choices)[key.partition(".")[0]].name
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
    where = failing.group(1) if failing else "configuration"
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


def compose_config(overrides=(), validate: bool = True, config_name: str = "config") -> DictConfig:
    """Compose ``configs/config.yaml`` (or ``configs/<config_name>.yaml``) with Hydra-style
    ``overrides`` (e.g. "filter.members=10").

    Returns the typed DictConfig; with ``validate`` every node is checked
    through its spec too. Raises ConfigError with a one-line message.
    """
    overrides = list(overrides)
    _check_group_choices(overrides)
    try:
        cfg = _compose(overrides, config_name)
        OmegaConf.to_container(cfg, resolve=True, throw_on_missing=True)
    except (HydraException, OmegaConfBaseException) as err:
        raise _translate(err, overrides) from None
    if validate:
        if config_name == "config":
            check(cfg)
        else:
            check_lyapunov(cfg)
    return cfg


__all__ = ["GROUPS", "SCHEMA_PREFIX", "compose_config", "config_dir", "group_options", "register_schemas"]
