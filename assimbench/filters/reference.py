"""Reference runs that every comparison needs, stored like any other filter.

- ``free``: the ensemble is forecast and never analysed (what the model does
  without data).
- ``climatology``: the model's climatological mean, the same at every cycle,
  used as both forecast and analysis (what knowing nothing but the climate gives).
"""

from dataclasses import dataclass

import jax.numpy as jnp

from assimbench.config.spec import FilterSpec
from assimbench.filters.base import EnsembleState, Filter, keep_ensemble
from assimbench.models.climatology import climatology


def make_free_run(members: int) -> Filter:
    def analyse(key, state, y, settings):
        del key, y, settings
        return state, {}

    return Filter(name="free", members=members, init=keep_ensemble, analyse=analyse, assimilates=False)


def make_climatology(climate_mean) -> Filter:
    climate_mean = jnp.asarray(climate_mean)[None, :]

    def init(key, initial_ensemble, settings):
        del key, initial_ensemble, settings
        return EnsembleState(members=climate_mean)

    def analyse(key, state, y, settings):
        del key, y, settings
        return EnsembleState(members=climate_mean), {}

    return Filter(name="climatology", members=1, init=init, analyse=analyse, runs_model=False, assimilates=False)


@dataclass
class FreeRunConfig:
    """Reference: the ensemble forecast with no analysis."""

    name: str = "free"
    members: int = 20


@dataclass
class ClimatologyConfig:
    """Reference: the climatological mean as forecast and analysis."""

    name: str = "climatology"


FREE_SPEC = FilterSpec(
    name="free",
    schema=FreeRunConfig,
    build=lambda node, ctx: make_free_run(int(node.members)),
    check=lambda c, model: c.integer("members", 2, "an integer >= 2"),
    assimilates=False,
)

CLIMATOLOGY_SPEC = FilterSpec(
    name="climatology",
    schema=ClimatologyConfig,
    build=lambda node, ctx: make_climatology(climatology(ctx.model)[0]),
    members=lambda node: 1,
    climatology=True,
    assimilates=False,
)
