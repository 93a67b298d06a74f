"""The twin experiment as jitted programs: start-up and one chunk of cycles.

Cycle k (k = 1, 2, ...) ends at model time k * interval. In one chunk of L
cycles the truth is integrated and observed first (one scan), then the filter
cycles over those observations (a second scan): forecast every member from the
previous analysis with the forecast model (by default the truth model), then
analyse with y_k. Scores compare the truth's resolved variables (all of a
single-scale model; the slow ones of a two-scale truth) with the same
variables of the members.

Randomness is keyed by the replicate key and the absolute cycle number only,
never by the chunk, so results do not depend on the chunk length:

    replicate key  r = fold_in(PRNGKey(seed), replicate)
    first guess    fold_in(r, 0)   truth start, before spin-up
    observations   fold_in(fold_in(r, 1), k)   noise of y_k
    ensemble       fold_in(r, 2)   initial ensemble
    filter         fold_in(fold_in(r, 3), k)   filter randomness at cycle k (0 for init)
    diagnostics    fold_in(fold_in(r, 4), k)   noise of the observation rank histogram
    model error    fold_in(fold_in(r, 5), k)   additive noise of the truth (when switched on)
    outages        fold_in(fold_in(r, 6), k)   stations out at cycle k (k = 0: before the first)

Truth and observations depend on (seed, replicate, model, observation
settings, truth model error) alone, so every filter and every setting run on a
seed sees the same data: differences between them are paired. The
:func:`experiment_key` of a run is a hash of exactly those inputs; result
files store it and the report pairs runs by it only.

The initial ensemble is the spun-up truth at time 0 plus independent
N(0, initial_spread^2) noise on every variable of every member (scaled per
variable by the forecast model's spread_scale where it has one).
"""

from typing import NamedTuple

import jax
import jax.numpy as jnp

from assimbench.estimation.parameters import make_member_forecast
from assimbench.filters.base import Filter
from assimbench.integrators import make_model_flow
from assimbench.io.provenance import content_hash
from assimbench.models.base import Model
from assimbench.observations.operators import ObservationOperator
from assimbench.observations.outages import first_outages, next_outages, scheduled
from assimbench.twin.diagnostics import (
    ensemble_mean_and_spread,
    make_cycle_diagnostics,
    rank_perturbations,
    series_catalogue,
)

# The version of the way truth and observations are drawn from their inputs: part of every
# experiment key, so files made by a changed scheme are never paired with older ones.
TRUTH_SCHEME = 1


class TwinSetup(NamedTuple):
    """The static parts of an experiment (they fix shapes and code paths).

    model: the truth model; steps_per_cycle: its steps per analysis interval;
    diagnostics: optional diagnostic groups (see diagnostics.OPTIONAL);
    fields: optional stored fields, a subset of FIELDS; forecast_model: the
    model the filter forecasts with (None: the truth model, a perfect-model
    experiment) and forecast_steps its steps per interval; truth_noise: the
    truth gets additive model error, N(0, truth_noise_std^2 I) per interval;
    smoother_lag: K > 0 when the filter carries a fixed-lag smoother
    (:mod:`assimbench.filters.smoother`), whose errors at lags 1 .. K are scored;
    filter_operator: the network as the filter sees it when its assumed
    errors differ from the truth's (None: ``operator``), for the diagnostics;
    estimated: the forecast model's parameters the filter estimates
    (assimbench/estimation): each member is forecast with its own values.
    """

    model: Model
    operator: ObservationOperator
    filter: Filter
    steps_per_cycle: int
    diagnostics: tuple = ()
    fields: tuple = ()
    forecast_model: Model | None = None
    forecast_steps: int = 0
    truth_noise: bool = False
    smoother_lag: int = 0
    filter_operator: ObservationOperator | None = None
    estimated: tuple = ()

    @property
    def assimilated_operator(self) -> ObservationOperator:
        return self.operator if self.filter_operator is None else self.filter_operator

    @property
    def forecaster(self) -> Model:
        return self.model if self.forecast_model is None else self.forecast_model

    @property
    def forecaster_steps(self) -> int:
        return self.steps_per_cycle if self.forecast_model is None else self.forecast_steps


# Optional per-cycle fields a run can store besides the diagnostics.
FIELDS = ("truth", "observations", "forecast_mean", "analysis_mean", "analysis_ensemble")


class CycleCarry(NamedTuple):
    """What one chunk hands to the next, per replicate."""

    truth: jax.Array  # (n,) every variable of the truth model
    filter_state: tuple  # the filter's NamedTuple state
    recent_truth: jax.Array  # (K, r) the resolved truth of the K cycles before, newest first (K = smoother lag)
    outages: jax.Array | None = None  # (p,) bool, the stations out at the last cycle (None: a network without outages)


def replicate_keys(seed: int, replicates: int) -> jax.Array:
    """(replicates, 2) uint32 keys: fold_in(PRNGKey(seed), r) for r = 0..replicates-1."""
    base = jax.random.PRNGKey(seed)
    return jax.vmap(lambda r: jax.random.fold_in(base, r))(jnp.arange(replicates))


def experiment_key(model: dict, observation: dict, truth_noise_std: float, seed: int, replicates: int,
                   cycles: int) -> str:
    """SHA-256 of everything that fixes the truth and the observations of a run: the truth model's
    config, the observation network's, the truth's model error, the seed, the replicates (each
    replicate's data depend on the seed and its number) and the cycles, with :data:`TRUTH_SCHEME`."""
    return content_hash({"scheme": TRUTH_SCHEME, "model": model, "observation": observation,
                         "truth_noise_std": float(truth_noise_std), "seed": int(seed), "replicates": int(replicates),
                         "cycles": int(cycles)})


def make_start(setup: TwinSetup, batched_settings: bool = False):
    """Return jitted ``start(keys, settings) -> CycleCarry`` batched over replicates.

    With ``batched_settings`` every leaf of ``settings`` has a leading batch
    axis matching ``keys`` (lanes x replicates flattened); otherwise one
    setting serves the whole batch."""
    model, forecaster = setup.model, setup.forecaster
    spinup = make_model_flow(model, max(1, round(model.spinup_time / model.dt)))

    def start_one(rkey, settings):
        truth = spinup(model.first_guess(jax.random.fold_in(rkey, 0), settings["model"]), settings["model"])
        noise = jax.random.normal(jax.random.fold_in(rkey, 2), (setup.filter.members, forecaster.size))
        if forecaster.spread_scale is not None:
            noise = noise * jnp.asarray(forecaster.spread_scale)
        # A reduced forecast model starts from the truth's resolved variables.
        ensemble = truth[: forecaster.size] + settings["initial_spread"] * noise
        filter_key = jax.random.fold_in(jax.random.fold_in(rkey, 3), 0)
        # Before cycle K + 1 the smoother's missing earlier states are the initial time's.
        recent = jnp.broadcast_to(truth[: model.resolved_size], (setup.smoother_lag, model.resolved_size))
        outages = None
        if setup.operator.outages:
            key = jax.random.fold_in(jax.random.fold_in(rkey, 6), 0)
            outages = first_outages(key, settings["observation"], setup.operator.size)
        return CycleCarry(truth=truth, filter_state=setup.filter.init(filter_key, ensemble, settings),
                          recent_truth=recent, outages=outages)

    return jax.jit(jax.vmap(start_one, in_axes=(0, 0 if batched_settings else None)))


def make_truth_chunk(model: Model, operator: ObservationOperator, steps_per_cycle: int, length: int,
                     truth_noise: bool = False):
    """Return ``truth_chunk(truth, outages, rkey, first_cycle, settings) -> (truth_end, outages_end, truths, ys)``.

    Integrates the truth over ``length`` cycles from ``truth`` (n,) and
    observes it: y_k = h(x_k) + error_std * e_k, e_k ~ N(0, I) drawn from
    fold_in(fold_in(rkey, 1), k), one draw per resolved grid point (so nested
    networks share the noise of their common stations). With ``truth_noise``
    the truth carries additive model error, x_k = M(x_{k-1}) + q eta_k with
    q = settings["truth_noise_std"] and eta_k ~ N(0, I) from
    fold_in(fold_in(rkey, 5), k). On a network with outages, ``outages`` (p,)
    are the stations out before the chunk; at cycle k the next draw from
    fold_in(fold_in(rkey, 6), k), with the scheduled ones, puts NaN in y_k
    (:mod:`assimbench.observations.outages`; None passes through otherwise).
    truths: (length, r), the r resolved variables (the ones scored); ys:
    (length, p). Depends on nothing of the filter.
    """
    flow = make_model_flow(model, steps_per_cycle)
    resolved = model.resolved_size

    def truth_chunk(truth, outages, rkey, first_cycle, settings):
        obs_key, noise_key = jax.random.fold_in(rkey, 1), jax.random.fold_in(rkey, 5)
        outage_key = jax.random.fold_in(rkey, 6)

        def step(carry, k):
            x, out = carry
            x = flow(x, settings["model"])
            if truth_noise:
                x = x + settings["truth_noise_std"] * jax.random.normal(jax.random.fold_in(noise_key, k), x.shape)
            noise = operator.standard_noise(jax.random.fold_in(obs_key, k), resolved)
            y = operator(x) + operator.noise(noise, settings)
            if operator.outages:
                out = next_outages(out, jax.random.fold_in(outage_key, k), settings["observation"])
                y = jnp.where(out | scheduled(operator.schedule, k, operator.size), jnp.nan, y)
            return (x, out), (x[:resolved], y)

        (truth_end, outages_end), (truths, ys) = jax.lax.scan(step, (truth, outages), first_cycle + jnp.arange(length))
        return truth_end, outages_end, truths, ys

    return truth_chunk


def make_forecast(setup: TwinSetup):
    """Return ``forecast(state, params) -> members``: every member of the filter's state forecast over
    one interval with the forecast model (``params`` its traced parameters), each with its own
    estimated parameter values when the filter estimates some (assimbench/estimation)."""
    if setup.estimated:
        member_forecast = make_member_forecast(setup.forecaster, setup.forecaster_steps, setup.estimated)
        return lambda state, params: member_forecast(state.members, state.parameters, params)
    flow = make_model_flow(setup.forecaster, setup.forecaster_steps, ensemble=True)
    return lambda state, params: flow(state.members, params)


def make_cycle(setup: TwinSetup, scalar_names: list):
    """Return ``cycle(carry, inputs, settings, filter_key) -> (carry, outputs)``: one forecast of
    every member with the forecast model and one analysis, with the cycle's diagnostics and stored
    fields. ``carry`` = (filter state, recent truth (K, r)); ``inputs`` = ((k, rank_noise), truth, y)
    of cycle k; the scalar diagnostics come out as one packed vector ``_scalars`` in the order of
    ``scalar_names``; with a smoother, ``rmse_smoothed`` and ``spread_smoothed`` (K,) score the
    smoothed ensembles of lags 1 .. K against the truth of cycles k - 1 .. k - K."""
    model, filt, forecaster = setup.model, setup.filter, setup.forecaster
    forecast = make_forecast(setup)
    resolved = model.resolved_size
    if forecaster.size == resolved:
        scored = lambda state: state
    else:  # a forecast model with unresolved variables of its own: score the resolved ones
        scored = lambda state: state._replace(members=state.members[..., :resolved])
    diagnose = make_cycle_diagnostics(setup.diagnostics, setup.assimilated_operator, filt.weighted)
    fields = setup.fields

    def cycle(carry, inputs, settings, filter_key):
        state, recent_truth = carry
        (k, rank_noise), truth, y = inputs
        if filt.runs_model:
            state = state._replace(members=forecast(state, settings["forecast_model"]))
        analysed, info = filt.analyse(jax.random.fold_in(filter_key, k), state, y, settings)
        out = diagnose(rank_noise, truth, y, scored(state), scored(analysed), info, settings)
        # One packed vector per cycle instead of one stacked output per series:
        # each scan output costs a small update op per cycle.
        out = {"_scalars": jnp.stack([out.pop(name).astype(jnp.float64) for name in scalar_names]), **out}
        if "rank_truth_forecast" in out:
            out["_ranks"] = jnp.stack([out.pop("rank_truth_forecast"), out.pop("rank_observation_forecast")])
        if "forecast_mean" in fields:
            out["forecast_mean"] = ensemble_mean_and_spread(scored(state))[0]
        if "analysis_mean" in fields:
            out["analysis_mean"] = ensemble_mean_and_spread(scored(analysed))[0]
        if "analysis_ensemble" in fields:
            out["analysis_ensemble"] = scored(analysed).members
        if setup.estimated:
            out["parameter_mean"] = analysed.parameters.mean(axis=0)
            out["parameter_spread"] = jnp.std(analysed.parameters, axis=0, ddof=1)
        if setup.smoother_lag:
            smoothed = analysed.lagged[..., :resolved]  # (K, N, r)
            errors = smoothed.mean(axis=1) - recent_truth
            out["rmse_smoothed"] = jnp.sqrt(jnp.mean(errors**2, axis=-1))
            out["spread_smoothed"] = jnp.sqrt(jnp.mean(jnp.var(smoothed, axis=1, ddof=1), axis=-1))
            recent_truth = jnp.concatenate([truth[None], recent_truth[:-1]], axis=0)
        return (analysed, recent_truth), out

    return cycle


def _unpack(series: dict, scalar_names: list) -> dict:
    """The packed per-cycle outputs of a scan as one (length,) series per name."""
    packed = series.pop("_scalars")
    series.update({name: packed[:, i] for i, name in enumerate(scalar_names)})
    if "_ranks" in series:
        ranks = series.pop("_ranks")
        series["rank_truth_forecast"], series["rank_observation_forecast"] = ranks[:, 0], ranks[:, 1]
    return series


def make_chunk(setup: TwinSetup, length: int, batched_settings: bool = False):
    """Return jitted ``chunk(carry, keys, first_cycle, settings) -> (carry, series)``.

    Runs cycles first_cycle .. first_cycle + length - 1 for every replicate
    (vmapped); ``series`` maps each diagnostic name to a (replicates, length)
    array. ``first_cycle`` and ``settings`` are traced, so one compiled
    program serves every chunk and every value of the swept floats. With
    ``batched_settings`` the settings carry a leading batch axis like ``keys``
    (lanes; see :func:`make_start`).
    """
    filt = setup.filter
    truth_chunk = make_truth_chunk(setup.model, setup.operator, setup.steps_per_cycle, length, setup.truth_noise)
    catalogue = series_catalogue(setup.diagnostics, filt.members, setup.smoother_lag, setup.operator.outages,
                                 bool(setup.estimated))
    scalar_names = sorted(name for name, series in catalogue.items() if series.extra_dim is None)
    cycle = make_cycle(setup, scalar_names)

    def chunk_one(carry, rkey, first_cycle, settings):
        filter_key = jax.random.fold_in(rkey, 3)
        diagnostic_key = jax.random.fold_in(rkey, 4)
        truth_end, outages_end, truths, observations = truth_chunk(carry.truth, carry.outages, rkey, first_cycle,
                                                                   settings)
        cycles = first_cycle + jnp.arange(length)
        if "rank_histogram" in setup.diagnostics:
            # One batched draw per chunk is cheaper than a small draw per cycle; still keyed by
            # cycle. These perturbations only decide ranks: 16 random bits each suffice.
            shape = (filt.members, setup.operator.size)
            draw = lambda k: rank_perturbations(jax.random.fold_in(diagnostic_key, k), shape)
            rank_noise = jax.vmap(draw)(cycles).astype(jnp.float64)
        else:
            rank_noise = None
        (state_end, recent_end), series = jax.lax.scan(lambda c, inputs: cycle(c, inputs, settings, filter_key),
                                                       (carry.filter_state, carry.recent_truth),
                                                       ((cycles, rank_noise), truths, observations))
        series = _unpack(series, scalar_names)
        if "truth" in setup.fields:
            series["truth"] = truths
        if "observations" in setup.fields:
            series["observations"] = observations
        return CycleCarry(truth=truth_end, filter_state=state_end, recent_truth=recent_end, outages=outages_end), series

    return jax.jit(jax.vmap(chunk_one, in_axes=(0, 0, None, 0 if batched_settings else None)))
