"""The catalogue: every component the bench can run, by group and name. It is the only registry.

Built-in specs live in their components' modules and are listed here once;
installed plugins add theirs through entry points (:mod:`assimbench.config.plugins`).
Tests that cover "every filter" or "every model" iterate this catalogue.
"""

import functools
from typing import NamedTuple

from assimbench.config.plugins import FILTER_GROUP, MODEL_GROUP, plugin_specs
from assimbench.config.spec import FilterSpec, NetworkSpec
from assimbench.estimation.section import ESTIMATE_TRACED
from assimbench.filters import reference
from assimbench.filters.kalman import denkf, enkf, enkfn, ensrf, etkf, ienks, letkf
from assimbench.filters.particle import sir
from assimbench.filters.variational import envar, fourdenvar, fourdvar, threedvar
from assimbench.models import base, closure, kuramoto_sivashinsky, lorenz63, lorenz96
from assimbench.observations import networks

# Order matters only for the order of lane keys (the union of the specs' traced keys, in this order).
BUILT_IN_MODELS = (lorenz96.SPEC, lorenz63.SPEC, lorenz96.TWO_SCALE_SPEC, kuramoto_sivashinsky.SPEC)
BUILT_IN_DERIVED_MODELS = (base.SAME_SPEC, closure.SPEC)
BUILT_IN_FILTERS = (etkf.SPEC, enkf.SPEC, letkf.SPEC, ensrf.SPEC, threedvar.SPEC, fourdvar.SPEC, enkfn.SPEC,
                    sir.SPEC, reference.FREE_SPEC, reference.CLIMATOLOGY_SPEC, denkf.SPEC, ienks.SPEC,
                    envar.SPEC, fourdenvar.SPEC)


class Catalogue(NamedTuple):
    """models: name -> ModelSpec (truth models, also forecast models); derived: name ->
    DerivedModelSpec (forecast models made from the truth); network: the NetworkSpec; filters:
    name -> FilterSpec; plugins: names added by installed packages."""

    models: dict
    derived: dict
    network: NetworkSpec
    filters: dict
    plugins: tuple

    @property
    def forecast_models(self) -> dict:
        return {**self.models, **self.derived}

    def group(self, name: str) -> dict:
        """The specs selectable in config group ``name`` (model, forecast_model, filter)."""
        return {"model": self.models, "forecast_model": self.forecast_models, "filter": self.filters}[name]

    def lane_keys(self) -> dict:
        """section -> traced keys of every spec of that section (lane keys), in catalogue order."""
        def union(specs):
            return tuple(dict.fromkeys(key for spec in specs for key in spec.traced))

        return {
            "model": union(self.models.values()),
            "forecast_model": union(self.forecast_models.values()),
            "observation": self.network.traced,
            "assumed": networks.ASSUMED_TRACED,
            "filter": union(self.filters.values()),
            "estimate": ESTIMATE_TRACED,
        }


@functools.cache
def catalogue() -> Catalogue:
    """The built-in specs plus the installed plugins' (loaded once per process)."""
    models = {spec.name: spec for spec in BUILT_IN_MODELS}
    derived = {spec.name: spec for spec in BUILT_IN_DERIVED_MODELS}
    filters = {spec.name: spec for spec in BUILT_IN_FILTERS}
    added_models = plugin_specs(MODEL_GROUP, set(models) | set(derived))
    added_filters = plugin_specs(FILTER_GROUP, set(filters))
    models.update({spec.name: spec for spec in added_models})
    filters.update({spec.name: spec for spec in added_filters})
    plugins = tuple(spec.name for spec in added_models + added_filters)
    return Catalogue(models, derived, networks.SPEC, filters, plugins)


def filter_specs() -> list[FilterSpec]:
    """Every filter spec of the catalogue (for tests and documentation)."""
    return list(catalogue().filters.values())
