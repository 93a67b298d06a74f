"""Typed schemas of the whole experiment and of the Lyapunov command (dataclasses only).

A component's schema lives with its spec (its module under models/,
observations/ or filters/); the schemas here hold the top-level keys. Every
default lives in a dataclass and nowhere else: the YAML files of ``configs/``
choose components and set Hydra's folders, and an observation preset sets
only what differs. The lane schemas are derived from the catalogue's traced
keys, so a lane key exists exactly when some component traces it.
"""

from dataclasses import dataclass, field, make_dataclass
from typing import Any

from omegaconf import MISSING

from assimbench.estimation.section import EstimateConfig
from assimbench.observations.networks import AssumedErrorsConfig, ObservationConfig


@dataclass
class StoreConfig:
    """Optional fields stored per cycle (chunked, compressed); ensemble_every: store the
    analysis ensemble every k-th cycle (0 = never)."""

    truth: bool = False
    observations: bool = False
    forecast_mean: bool = False
    analysis_mean: bool = False
    ensemble_every: int = 0


@dataclass
class SmootherConfig:
    """A fixed-lag ensemble smoother beside the filter: lag K smooths the ensembles of the last K
    cycles with every analysis (0 = off)."""

    lag: int = 0


@dataclass
class ExperimentBase:
    """A whole twin experiment (the lanes are added from the catalogue: :func:`experiment_schema`).

    cycles: analyses to run; burn_in: leading cycles left out of time means;
    seed: base seed of truth, observations and ensembles; replicates:
    independent seeds run as one vectorised batch; initial_spread: standard
    deviation of the noise added to the truth to make the initial members;
    chunk_cycles: cycles per compiled chunk (streaming and progress);
    lane_combination: how several lane lists make lanes, "all" (every
    combination) or "matched" (the lists side by side, lane i taking the
    i-th value of each);
    workers: processes the batch (lanes x replicates) is split over, "auto"
    (one per core for a run of at least 2 batch elements and 200,000
    run-cycles) or an integer >= 1 (1: this process only); the values do
    not depend on it;
    output: HDF5 file to write (relative paths go in the job's run folder);
    diagnostics: optional diagnostic groups to compute (null: every group the
    filter can give); store: optional stored fields; a run has diverged when
    a value is not finite, or when its analysis RMSE stays above
    divergence_factor x the climatological standard deviation for
    divergence_patience consecutive cycles; forecast_model: the model the
    filter forecasts with (same: the truth model); truth_noise_std: standard
    deviation of additive model error added to every truth variable after
    each analysis interval (0: none), a model error the forecast model does
    not know; analysis_every: the filter analyses at every k-th cycle only,
    forecasting in between (the other cycles' observations unused; a window
    method uses them all and refuses it); assumed: the observation errors the filter assumes where
    they differ from the truth's (null keys: the truth's); estimate: forecast-model parameters the
    filter estimates with the state (assimbench/estimation/section.py). The defaults are the built-in demo (configs/config.yaml picks
    its components).
    """

    model: Any = MISSING
    forecast_model: Any = MISSING
    truth_noise_std: float = 0.0
    analysis_every: int = 1
    observation: ObservationConfig = field(default_factory=ObservationConfig)
    assumed: AssumedErrorsConfig = field(default_factory=AssumedErrorsConfig)
    filter: Any = MISSING
    cycles: int = 3000
    burn_in: int = 500
    seed: int = 2026
    replicates: int = 1
    initial_spread: float = 1.0
    chunk_cycles: int = 1000
    lane_combination: str = "all"
    workers: Any = "auto"
    output: str | None = "result.h5"
    diagnostics: list[str] | None = None
    store: StoreConfig = field(default_factory=StoreConfig)
    smoother: SmootherConfig = field(default_factory=SmootherConfig)
    estimate: EstimateConfig = field(default_factory=EstimateConfig)
    divergence_factor: float = 1.0
    divergence_patience: int = 50


@dataclass
class LyapunovConfig:
    """assimbench-lyapunov: the spectrum of ``model`` (see assimbench/lyapunov.py).

    count: exponents to compute (null: all); reorthonormalise: RK4 steps between QR
    factorisations; spinup_time: model time for the state, then again for the
    tangent vectors; time: averaging window (model time); blocks: points of the
    convergence record; observation.interval: the analysis interval the doubling
    time is also expressed in; seed: of the first state and tangent vectors.
    """

    model: Any = MISSING
    observation: ObservationConfig = field(default_factory=ObservationConfig)
    count: int | None = None
    reorthonormalise: int = 10
    spinup_time: float = 20.0
    time: float = 500.0
    blocks: int = 100
    seed: int = 0
    output: str | None = "lyapunov.h5"


# Lane values are lists of floats; a null list is not a lane.
LaneValues = list[float] | None
TOP_LANE_KEYS = ("initial_spread",)


def _lane_section(name: str, keys) -> type:
    return make_dataclass(name, [(key, LaneValues, field(default=None)) for key in keys])


def lanes_schema(lane_keys: dict) -> type:
    """The ``lanes`` schema: one section per component group with every traced key of that group
    (``lane_keys``: section -> keys), and the top-level lane keys. Every non-null list is one lane
    axis; the lanes are all combinations of the lists, each crossed with every replicate
    (see assimbench/config/lanes.py)."""
    fields = [(section, _section, field(default_factory=_section))
              for section, _section in ((s, _lane_section(f"{s.title().replace('_', '')}Lanes", keys))
                                        for s, keys in lane_keys.items())]
    fields += [(key, LaneValues, field(default=None)) for key in TOP_LANE_KEYS]
    return make_dataclass("LanesConfig", fields)


def experiment_schema(lanes: type) -> type:
    """ExperimentBase with its ``lanes`` section typed by ``lanes`` (from :func:`lanes_schema`)."""
    return make_dataclass("ExperimentConfig", [("lanes", lanes, field(default_factory=lanes))], bases=(ExperimentBase,))
