"""Write reference vectors: the inputs, draws, intermediates and outputs of the analysis step at K
chosen cycles of a run, for a port to be checked against (``assimbench-vectors write``).

    config --resolve--> plan --capture--> forecast states at the chosen cycles
           --FilterSpec.steps (vmapped over the cycles)--> every quantity --> vectors file

The analysis each step record ends with is checked against the bench's own analysis of the same
state, key and observations (``Filter.analyse``) before anything is written: the file holds the
bench's analyses, and its intermediates are the ones that give them.
"""

import jax
import jax.numpy as jnp
import numpy as np
from omegaconf import OmegaConf

from assimbench.config.catalogue import catalogue
from assimbench.config.checks import ConfigError
from assimbench.config.plan import Plan, resolve
from assimbench.config.spec import FilterContext
from assimbench.vectors.capture import capture
from assimbench.vectors.quantities import QUANTITIES
from assimbench.vectors.vector_file import write_vectors

# The bench's analysis and the step record's come from the same operations in another jitted
# program; they agree to round-off (measured: below 1e-14 of the scale).
SELF_CHECK = 1e-10


def vector_filters() -> tuple:
    """The filters of the catalogue that can write vectors (their spec gives ``steps``)."""
    return tuple(name for name, spec in catalogue().filters.items() if spec.steps is not None)


def refusal(cfg, plan: Plan) -> str | None:
    """Why vectors cannot be written for this experiment (one line), or None."""
    spec = plan.choice.filter
    if spec.steps is None:
        return (f"filter={spec.name} has no reference vectors yet; filters with them: "
                f"{', '.join(vector_filters())}")
    if plan.batched:
        return ("vectors hold the analyses of one setting: remove the lanes.* keys and give the setting itself "
                f"(lanes given: {', '.join(plan.grid.keys)})")
    if bool(cfg.filter.get("adaptive", False)):
        return "filter.adaptive=true is not covered by vectors yet (its inflation estimate is state the file does not hold)"
    if int(cfg.smoother.lag) > 0:
        return "smoother.lag must be 0 for vectors (they record the filter's analysis only)"
    if int(cfg.analysis_every) != 1:
        return "analysis_every must be 1 for vectors (every chosen cycle must have an analysis)"
    if plan.setup.estimated:
        return "estimate.parameters must be [] for vectors (the augmented analysis is not recorded yet)"
    if plan.setup.assimilated_operator.correlated:
        return "vectors cover networks with a diagonal R: set observation.correlation_length=0 (or assumed.correlation_length=0)"
    if plan.setup.operator.outages:
        return "vectors cover networks without outages: set observation.outage_probability=0 and no outage_schedule"
    return None


def chosen_cycles(count: int, at, total: int) -> np.ndarray:
    """The cycles recorded: ``at`` (a list of cycles in 1..total) when given, else ``count`` cycles
    spread evenly over the run, the last at its end; ConfigError for a bad choice."""
    if at is not None:
        cycles = np.asarray(at)
        if cycles.ndim != 1 or cycles.size == 0 or not all(float(c).is_integer() for c in cycles):
            shown = ",".join(f"{float(c):g}" for c in np.ravel(at))
            raise ConfigError(f"vectors.at=[{shown}] is not allowed: a non-empty list of whole cycle numbers")
        cycles = cycles.astype(np.int64)
        if cycles.min() < 1 or cycles.max() > total or np.any(np.diff(cycles) <= 0):
            raise ConfigError(f"vectors.at={cycles.tolist()} is not allowed: increasing cycle numbers from 1 to "
                              f"cycles={total}")
        return cycles
    if not 1 <= count <= total:
        raise ConfigError(f"vectors.count={count} is not allowed: an integer from 1 to cycles={total}")
    return np.unique(np.round(np.linspace(total / count, total, count)).astype(np.int64))


def plan_vectors(cfg) -> Plan:
    """The checked plan of ``cfg`` (its burn_in set to 0: vectors keep no time means); ConfigError
    when it cannot give vectors."""
    cfg = cfg.copy()
    cfg.burn_in = 0
    plan = resolve(cfg)
    why = refusal(cfg, plan)
    if why is not None:
        raise ConfigError(why)
    return plan


def record(plan: Plan, cycles: np.ndarray) -> tuple:
    """(captured, every quantity in the order computed: name -> numpy array with a leading cycle axis
    where the quantity has one)."""
    setup, settings = plan.setup, plan.settings
    captured = capture(setup, settings, plan.seed, cycles)
    view = setup.assimilated_operator
    context = FilterContext(setup.forecaster, view, setup.forecaster_steps)
    steps = plan.choice.filter.steps(plan.config.filter, context)
    computed = []  # the step record's names in the order computed (a traced dict comes back sorted)

    def ordered_steps(*args):
        out = steps(*args)
        computed[:] = list(out)
        return out

    per_cycle = lambda function: jax.jit(jax.vmap(function, in_axes=(0, 0, 0, None)))
    records = per_cycle(ordered_steps)(captured.keys, captured.states, captured.observations, settings)
    # A quantity the same at every cycle (3D-Var's B, an input of the record) is stored once.
    records = {name: records[name] if QUANTITIES[name].per_cycle else records[name][0] for name in computed}
    analysed, _ = per_cycle(setup.filter.analyse)(captured.keys, captured.states, captured.observations, settings)
    _self_check(records, analysed)
    weighted = setup.filter.weighted
    log_weights = records.get("analysis_log_weights") if weighted else None
    mean, covariance = ensemble_moments(records["analysis_ensemble"], log_weights)
    white = view.whiten(settings, captured.observations[0])
    size = view.size
    inputs = {"forecast_ensemble": captured.states.members}
    if weighted:
        inputs["prior_log_weights"] = captured.states.log_weights
    inputs |= {
        "observations": captured.observations,
        "observation_error_variance": jnp.broadcast_to(white.variance, (len(cycles), size)),
        "observation_positions": np.asarray(view.positions, dtype=np.float64),
        "observation_matrix": observation_matrix(view, setup.forecaster.size),
    }
    # One member (3D-Var) has no sample covariance.
    moments = {"analysis_mean": mean} | ({"analysis_covariance": covariance} if setup.filter.members > 1 else {})
    arrays = {**inputs, **records, **moments}
    order = sorted(arrays, key=lambda name: ("inputs", "draws", "intermediates", "outputs").index(
        QUANTITIES[name].group))
    return captured, {name: np.asarray(arrays[name]) for name in order}


def ensemble_moments(members, log_weights=None) -> tuple:
    """(mean (..., n), covariance (..., n, n)) of ``members`` (..., N, n): sample moments dividing by
    N - 1, or with normalised ``log_weights`` (..., N) the weighted mean and the covariance
    sum_i w_i d_i d_i^T / (1 - sum_i w_i^2), which is the same for equal weights."""
    n_members = members.shape[-2]
    weights = (jnp.full(members.shape[:-1], 1.0 / n_members) if log_weights is None
               else jnp.exp(jnp.asarray(log_weights)))
    mean = jnp.einsum("...i,...ij->...j", weights, members)
    anomalies = members - mean[..., None, :]
    scale = 1.0 - jnp.sum(weights**2, axis=-1)
    covariance = jnp.einsum("...i,...ij,...ik->...jk", weights, anomalies, anomalies) / scale[..., None, None]
    return mean, covariance


def observation_matrix(operator, state_size: int) -> np.ndarray:
    """H (p, n): the linear part of h (selection or interpolation), h(x) = f(H x)."""
    linear = operator._replace(transform="identity")
    return np.asarray(linear(jnp.eye(state_size))).T


def _self_check(records: dict, analysed) -> None:
    recorded, bench = np.asarray(records["analysis_ensemble"]), np.asarray(analysed.members)
    scale = max(float(np.max(np.abs(bench))), 1.0)
    gap = float(np.max(np.abs(recorded - bench))) / scale
    if not gap <= SELF_CHECK:
        raise RuntimeError(f"internal error: the step record's analysis departs from the filter's own by {gap:.2e} "
                           "of its scale; no vectors written")


def flat_settings(settings: dict) -> dict:
    """The traced settings of the analysis step as ``section.key`` -> value: the filter's, and the
    observation errors (the truth's, and the filter's view of them under ``assumed``)."""
    return {f"{section}.{key}": np.asarray(value, dtype=np.float64)
            for section in ("filter", "observation", "assumed") for key, value in settings.get(section, {}).items()}


def write(cfg, output: str, count: int = 5, at=None) -> tuple:
    """Check ``cfg``, record the analyses at the chosen cycles and write them to ``output``; returns
    (absolute path, the cycles). ConfigError (nothing written) for a config that cannot give vectors.
    The filter's untraced keys (members, centre_perturbations, ...) are attributes of /settings."""
    plan = plan_vectors(cfg)
    cycles = chosen_cycles(count, at, plan.cycles)
    _, arrays = record(plan, cycles)
    operator = plan.setup.assimilated_operator
    attrs = {"filter": plan.choice.filter.name, "members": int(plan.setup.filter.members),
             "state_size": int(plan.setup.forecaster.size), "observation_count": int(operator.size),
             "observation_transform": operator.transform, "weighted": int(plan.setup.filter.weighted),
             "seed": plan.seed, "replicate": 0, "experiment_key": plan.experiment_keys[0],
             "config": OmegaConf.to_yaml(plan.config, resolve=True)}
    static = {f"filter.{key}": value for key, value in OmegaConf.to_container(plan.config.filter).items()
              if isinstance(value, (bool, int, str)) and key not in plan.settings["filter"]}
    return write_vectors(output, cycles, arrays, flat_settings(plan.settings), attrs, static), cycles
