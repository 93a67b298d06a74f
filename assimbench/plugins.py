"""Third-party filters and models, added by Python entry points of installed packages.

A config can only name components of the package's registry; it never
imports a module or calls a dotted path. An installed package extends the
registry by declaring entry points in one of two groups:

    [project.entry-points."assimbench.filters"]
    nudging = "mypackage.nudging:PLUGIN"      # an assimbench.plugins.FilterPlugin

    [project.entry-points."assimbench.models"]
    ring_advection = "mypackage.models:PLUGIN"  # an assimbench.plugins.ModelPlugin

The entry point's name is the option users select (``filter=nudging``); its
``schema`` is a dataclass whose ``name`` field defaults to that name (the
config keys and their types); ``build`` is called as the built-in builders
are (see registry.py). A plugin cannot replace a built-in name; a plugin that
fails to load is reported in one line on stderr and left out.
"""

import sys
from dataclasses import dataclass
from importlib import metadata
from typing import Callable

FILTER_GROUP = "assimbench.filters"
MODEL_GROUP = "assimbench.models"


@dataclass(frozen=True)
class FilterPlugin:
    """schema: dataclass of the filter's keys; build(node, model, operator) -> (Filter, settings dict
    of traced floats); weighted: a weighted ensemble (ESS diagnostics); localized: has a radius."""

    schema: type
    build: Callable
    weighted: bool = False
    localized: bool = False


@dataclass(frozen=True)
class ModelPlugin:
    """schema: dataclass of the model's keys (with ``dt``); build(node) -> Model; state_size(node) -> int."""

    schema: type
    build: Callable
    state_size: Callable


_installed = False


def _entry_points(group: str):
    return sorted(metadata.entry_points(group=group), key=lambda ep: ep.name)


def install() -> list[str]:
    """Add every plugin to the registry and the schemas (once per process); returns their names."""
    global _installed
    from assimbench import registry, schema

    if _installed:
        return []
    _installed = True
    added = []
    for group, kind, table in ((FILTER_GROUP, FilterPlugin, registry.FILTERS), (MODEL_GROUP, ModelPlugin, registry.MODELS)):
        for entry in _entry_points(group):
            try:
                plugin = entry.load()
            except Exception as err:  # a broken third-party package must not stop the tool
                print(f"assimbench: plugin {entry.name} ({group}) not loaded: {err.__class__.__name__}: {err}",
                      file=sys.stderr)
                continue
            if not isinstance(plugin, kind):
                print(f"assimbench: plugin {entry.name} ({group}) not loaded: not an assimbench.plugins.{kind.__name__}",
                      file=sys.stderr)
                continue
            if entry.name in table:
                print(f"assimbench: plugin {entry.name} ({group}) not loaded: the name is taken by a built-in",
                      file=sys.stderr)
                continue
            if kind is FilterPlugin:
                table[entry.name] = plugin.build
                schema.FILTER_SCHEMAS[entry.name] = plugin.schema
                if plugin.weighted:
                    registry.WEIGHTED.append(entry.name)
                if plugin.localized:
                    registry.LOCALIZED.append(entry.name)
            else:
                table[entry.name] = plugin.build
                registry.STATE_SIZE[entry.name] = plugin.state_size
                schema.MODEL_SCHEMAS[entry.name] = plugin.schema
            registry.PLUGINS.append(entry.name)
            added.append(entry.name)
    return added
