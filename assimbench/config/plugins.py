"""Third-party filters and models, added as specs by Python entry points of installed packages.

A config can only name components of the catalogue; it never imports a
module or calls a dotted path. An installed package adds components by
declaring entry points in one of two groups, each naming a spec:

    [project.entry-points."assimbench.filters"]
    nudging = "mypackage.nudging:SPEC"          # an assimbench.config.spec.FilterSpec

    [project.entry-points."assimbench.models"]
    ring_advection = "mypackage.models:SPEC"    # an assimbench.config.spec.ModelSpec

The entry point's name is the option users select (``filter=nudging``) and
must be the spec's name; the spec's schema is a dataclass whose ``name``
field defaults to it. A plugin cannot replace a built-in name; a plugin that
fails to load is reported in one line on stderr and left out.
"""

import sys
from importlib import metadata

from assimbench.config.spec import FilterSpec, ModelSpec

FILTER_GROUP = "assimbench.filters"
MODEL_GROUP = "assimbench.models"
GROUPS = {FILTER_GROUP: FilterSpec, MODEL_GROUP: ModelSpec}


def _refuse(name: str, group: str, reason: str) -> None:
    print(f"assimbench: plugin {name} ({group}) not loaded: {reason}", file=sys.stderr)


def plugin_specs(group: str, taken) -> list:
    """The specs of the installed entry points of ``group`` (in name order), without those whose
    name is in ``taken`` (the built-ins); each refused one is named in one line on stderr."""
    kind = GROUPS[group]
    specs = []
    for entry in sorted(metadata.entry_points(group=group), key=lambda ep: ep.name):
        try:
            spec = entry.load()
        except Exception as err:  # a broken third-party package must not stop the tool
            _refuse(entry.name, group, f"{err.__class__.__name__}: {err}")
            continue
        if not isinstance(spec, kind):
            _refuse(entry.name, group, f"not an assimbench.config.spec.{kind.__name__}")
        elif entry.name in taken:
            _refuse(entry.name, group, "the name is taken by a built-in")
        elif spec.name != entry.name:
            _refuse(entry.name, group, f"the spec is named {spec.name!r}, not {entry.name!r}")
        else:
            specs.append(spec)
    return specs
