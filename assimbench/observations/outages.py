"""Station outages: which stations of a network report in a cycle.

A station is out with the stationary probability q = ``outage_probability``
(traced). With ``outage_spell`` D > 0 (traced, cycles) its outages come in
spells of mean length D, a two-state Markov chain (common practice):

    P(out at k | out at k-1) = s = 1 - 1/D,
    P(out at k | up at k-1)  = a = q (1 - s) / (1 - q),

whose stationary probability of being out is a / (a + 1 - s) = q; D = 0
draws every cycle afresh (s = a = q). A ``schedule`` of blocks puts listed
stations out over listed cycles on top of the random outages.

The draws come from the replicate key alone (stream 6: fold_in(fold_in(r, 6),
k) at cycle k, k = 0 for the state before the first cycle, drawn from the
stationary law), so every filter and setting on a seed sees the same
outages. A missing observation is stored as NaN in y: the cycle's shapes
never change, and the filters mask it out (:meth:`ObservationOperator.whiten`).
"""

from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np


class OutageSchedule(NamedTuple):
    """Blocks of scheduled outages: first and last cycle of each block (E,), inclusive, and the
    stations it puts out (E, p) bool."""

    first: np.ndarray
    last: np.ndarray
    stations: np.ndarray


def outage_schedule(blocks, station_count: int) -> OutageSchedule | None:
    """The schedule of config blocks, each {first_cycle, last_cycle, stations: [station numbers]}
    (station numbers count the network's stations from 0); None for no blocks."""
    if not blocks:
        return None
    stations = np.zeros((len(blocks), station_count), dtype=bool)
    for e, block in enumerate(blocks):
        stations[e, [int(i) for i in block["stations"]]] = True
    return OutageSchedule(first=np.array([int(b["first_cycle"]) for b in blocks]),
                          last=np.array([int(b["last_cycle"]) for b in blocks]), stations=stations)


def persistence(probability, spell):
    """(s, a): the chance a station that is out stays out, and that a station that is up fails."""
    stay = jnp.where(spell > 0, 1.0 - 1.0 / jnp.maximum(spell, 1.0), probability)
    fail = jnp.where(probability < 1.0, probability * (1.0 - stay) / jnp.maximum(1.0 - probability, 1e-300), 1.0)
    return stay, fail


def first_outages(key, settings, station_count: int) -> jax.Array:
    """(p,) bool: the stations out before the first cycle, from the stationary law."""
    return jax.random.uniform(key, (station_count,)) < settings["outage_probability"]


def next_outages(out, key, settings) -> jax.Array:
    """(p,) bool: the random outages at this cycle from those of the last (module docstring)."""
    stay, fail = persistence(settings["outage_probability"], settings["outage_spell"])
    u = jax.random.uniform(key, out.shape)
    return jnp.where(out, u < stay, u < fail)


def scheduled(schedule: OutageSchedule | None, cycle, station_count: int) -> jax.Array:
    """(p,) bool: the stations the schedule puts out at ``cycle``."""
    if schedule is None:
        return jnp.zeros(station_count, dtype=bool)
    active = (jnp.asarray(schedule.first) <= cycle) & (cycle <= jnp.asarray(schedule.last))
    return jnp.any(active[:, None] & jnp.asarray(schedule.stations), axis=0)
