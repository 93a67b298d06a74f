"""Reference runs that every comparison needs, stored like any other filter.

- ``free``: the ensemble is forecast and never analysed (what the model does
  without data).
- ``climatology``: the model's climatological mean, the same at every cycle,
  used as both forecast and analysis (what knowing nothing but the climate gives).
"""

import jax.numpy as jnp

from assimbench.filters import EnsembleState, Filter, keep_ensemble


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
