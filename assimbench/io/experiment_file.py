"""A config with some values changed, as an experiment file the main command runs as it is.

    assimbench --config-path FOLDER --config-name NAME

The file names the package's config and the chosen components (``defaults``),
then holds every value of the config, with the given values in.
"""

import yaml
from omegaconf import OmegaConf

# The config groups whose choice the file repeats (their keys come with the rest of the config).
CHOSEN_GROUPS = ("model", "forecast_model", "filter")


def experiment_file(config, values: dict, head: str) -> str:
    """The text of the experiment file of ``config`` with ``values`` (config path -> number) set;
    ``head``: comment lines (each starting with "# ") put before it."""
    cfg = OmegaConf.to_container(config, resolve=True)
    cfg.pop("lanes", None)
    for key, value in values.items():
        node = cfg
        *parents, leaf = key.split(".")
        for part in parents:
            node = node[part]
        node[leaf] = float(value)
    defaults = ["config"] + [{f"override {group}": cfg[group]["name"]} for group in CHOSEN_GROUPS] + ["_self_"]
    return head + yaml.safe_dump({"defaults": defaults, **cfg}, sort_keys=False)
