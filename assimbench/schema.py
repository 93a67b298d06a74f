"""Typed configuration schemas, registered in Hydra's ConfigStore.

The YAML options in ``configs/`` extend these schemas, so every key has a type
and a mistyped key or a value of the wrong type is refused while composing.
Value ranges and cross-key rules are checked afterwards by
:mod:`assimbench.validation`.
"""

from dataclasses import dataclass, field
from typing import Any

from hydra.core.config_store import ConfigStore
from omegaconf import MISSING

SCHEMA_PREFIX = "schema_"


@dataclass
class Lorenz63Config:
    """Lorenz-63: dx/dt = sigma (y - x), dy/dt = x (rho - z) - y, dz/dt = x y - beta z."""

    name: str = "lorenz63"
    sigma: float = 10.0
    rho: float = 28.0
    beta: float = 8.0 / 3.0
    dt: float = 0.01


@dataclass
class Lorenz96Config:
    """Lorenz-96 ring of ``size`` variables with forcing F, RK4 step ``dt``."""

    name: str = "lorenz96"
    size: int = 40
    forcing: float = 8.0
    dt: float = 0.01


@dataclass
class Lorenz96TwoScaleConfig:
    """Two-scale Lorenz-96 (Lorenz 1996): ``slow`` variables X_k, each coupled to ``fast_per_slow``
    fast Y_{j,k}; coupling h, time_scale c, space_scale b; only the slow variables are observed."""

    name: str = "lorenz96_two_scale"
    slow: int = 36
    fast_per_slow: int = 10
    forcing: float = 10.0
    coupling: float = 1.0
    time_scale: float = 10.0
    space_scale: float = 10.0
    dt: float = 0.005


@dataclass
class KuramotoSivashinskyConfig:
    """Kuramoto-Sivashinsky u_t = -u u_x - u_xx - u_xxxx on a periodic domain of ``length``,
    ``size`` grid points, ETDRK4 step ``dt``."""

    name: str = "kuramoto_sivashinsky"
    size: int = 64
    length: float = 22.0
    dt: float = 0.25


@dataclass
class SameModelConfig:
    """Forecast with the truth model itself (a perfect-model experiment)."""

    name: str = "same"


@dataclass
class Lorenz96ClosureConfig:
    """Forecast with single-scale Lorenz-96 of the truth's resolved size plus a polynomial
    closure g(X) of ``degree``, fitted by least squares to a truth run (assimbench/closure.py)."""

    name: str = "lorenz96_closure"
    forcing: float = 10.0
    degree: int = 3
    dt: float = 0.005


@dataclass
class ObservationConfig:
    """Observe every ``stride``-th variable every ``interval`` model time units.

    y = f(H truth) + N(0, error_std^2 I) with f given by ``transform``
    (identity, absolute or square); ``interval`` must be a whole multiple of
    ``model.dt``.
    """

    interval: float = 0.05
    stride: int = 1
    error_std: float = 1.0
    transform: str = "identity"


@dataclass
class InflationConfig:
    """Inflation pieces shared by every ensemble filter (see filters/inflation.py).

    inflation multiplies the prior anomalies; additive_std is the standard
    deviation of centred additive noise (state units); rtpp and rtps are the
    relaxation coefficients to prior perturbations and to prior spread.
    """

    members: int = 20
    inflation: float = 1.0
    additive_std: float = 0.0
    rtpp: float = 0.0
    rtps: float = 0.0


@dataclass
class AdaptiveInflationConfig(InflationConfig):
    """Adaptive multiplicative inflation (assimbench/filters/adaptive.py): with adaptive=true the
    anomaly factor is estimated every cycle from the innovations, starting at ``inflation``;
    adaptive_std is the standard deviation of the prior of the covariance factor; the anomaly
    factor is kept within [adaptive_min, adaptive_max]. The default 0.1 adapts within a few hundred
    cycles on the demo ring (measured: 0.05 needs thousands, 0.5 is noisy)."""

    adaptive: bool = False
    adaptive_std: float = 0.1
    adaptive_min: float = 1.0
    adaptive_max: float = 2.0


@dataclass
class ETKFConfig(AdaptiveInflationConfig):
    """ETKF (Hunt et al. 2007)."""

    name: str = "etkf"


@dataclass
class EnKFNConfig(InflationConfig):
    """Finite-size EnKF (Bocquet 2011): the inflation is implied by the prior, none to tune;
    the prior's count is members + prior_extra_count (1: Bocquet et al. 2015; 0: Bocquet 2011)."""

    name: str = "enkfn"
    prior_extra_count: int = 1


@dataclass
class EnKFConfig(InflationConfig):
    """Perturbed-observation EnKF; centre_perturbations removes their ensemble mean."""

    name: str = "enkf"
    centre_perturbations: bool = True


@dataclass
class LETKFConfig(AdaptiveInflationConfig):
    """LETKF; radius is the Gaspari-Cohn half-width c in grid units (null: no localization)."""

    name: str = "letkf"
    radius: float | None = 4.0


@dataclass
class EnSRFConfig(InflationConfig):
    """Serial EnSRF; radius as for the LETKF (null: no localization)."""

    name: str = "ensrf"
    radius: float | None = 4.0


@dataclass
class ThreeDVarConfig:
    """3D-Var; B = b_scale x climatological covariance; iterations of Gauss-Newton for nonlinear h."""

    name: str = "3dvar"
    b_scale: float = 0.1
    iterations: int = 3


@dataclass
class FourDVarConfig:
    """Strong-constraint 4D-Var over a sliding window of ``window`` analysis intervals; B as for
    3D-Var; ``iterations`` Gauss-Newton steps of ``inner_iterations`` conjugate gradients each."""

    name: str = "4dvar"
    b_scale: float = 0.1
    window: int = 5
    iterations: int = 3
    inner_iterations: int = 10


@dataclass
class SIRConfig:
    """SIR particle filter: resample when ESS < ess_threshold x members; jitter in state units."""

    name: str = "sir"
    members: int = 1000
    ess_threshold: float = 0.5
    jitter: float = 0.1


@dataclass
class FreeRunConfig:
    """Reference: the ensemble forecast with no analysis."""

    name: str = "free"
    members: int = 20


@dataclass
class ClimatologyConfig:
    """Reference: the climatological mean as forecast and analysis."""

    name: str = "climatology"


FILTER_SCHEMAS = {
    "etkf": ETKFConfig,
    "enkf": EnKFConfig,
    "letkf": LETKFConfig,
    "ensrf": EnSRFConfig,
    "3dvar": ThreeDVarConfig,
    "4dvar": FourDVarConfig,
    "enkfn": EnKFNConfig,
    "sir": SIRConfig,
    "free": FreeRunConfig,
    "climatology": ClimatologyConfig,
}


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
class ModelLanes:
    """Lane values of the model's dynamic parameters (null: not a lane)."""

    forcing: list[float] | None = None
    sigma: list[float] | None = None
    rho: list[float] | None = None
    beta: list[float] | None = None
    coupling: list[float] | None = None
    time_scale: list[float] | None = None
    space_scale: list[float] | None = None


@dataclass
class ObservationLanes:
    """Lane values of the observation error standard deviation (null: not a lane)."""

    error_std: list[float] | None = None


@dataclass
class FilterLanes:
    """Lane values of the filter's traced settings (null: not a lane)."""

    inflation: list[float] | None = None
    additive_std: list[float] | None = None
    rtpp: list[float] | None = None
    rtps: list[float] | None = None
    radius: list[float] | None = None
    b_scale: list[float] | None = None
    jitter: list[float] | None = None
    ess_threshold: list[float] | None = None
    adaptive_std: list[float] | None = None


@dataclass
class LanesConfig:
    """Settings run side by side in one compiled program (see assimbench/lanes.py).

    Every non-null list is one lane axis; the lanes are all combinations of
    the lists, each crossed with every replicate. Only settings that are
    traced floats can be lanes; keys that change shapes or code (members,
    state size, filter kind, ...) are swept with --multirun instead.
    """

    model: ModelLanes = field(default_factory=ModelLanes)
    forecast_model: ModelLanes = field(default_factory=ModelLanes)
    observation: ObservationLanes = field(default_factory=ObservationLanes)
    filter: FilterLanes = field(default_factory=FilterLanes)
    initial_spread: list[float] | None = None


@dataclass
class ExperimentConfig:
    """A whole twin experiment.

    cycles: analyses to run; burn_in: leading cycles left out of time means;
    seed: base seed of truth, observations and ensembles; replicates:
    independent seeds run as one vectorised batch; initial_spread: standard
    deviation of the noise added to the truth to make the initial members;
    chunk_cycles: cycles per compiled chunk (streaming and progress);
    output: HDF5 file to write (relative paths go in the job's run folder);
    diagnostics: optional diagnostic groups to compute (null: every group the
    filter can give); store: optional stored fields; a run has diverged when
    a value is not finite, or when its analysis RMSE stays above
    divergence_factor x the climatological standard deviation for
    divergence_patience consecutive cycles; lanes: settings run side by
    side as one vectorised batch (LanesConfig); forecast_model: the model the
    filter forecasts with (same: the truth model); truth_noise_std: standard
    deviation of additive model error added to every truth variable after
    each analysis interval (0: none), a model error the forecast model does
    not know.
    """

    model: Any = MISSING
    forecast_model: Any = MISSING
    truth_noise_std: float = 0.0
    observation: ObservationConfig = field(default_factory=ObservationConfig)
    filter: Any = MISSING
    cycles: int = 2000
    burn_in: int = 500
    seed: int = 0
    replicates: int = 1
    initial_spread: float = 1.0
    chunk_cycles: int = 1000
    output: str | None = "result.h5"
    diagnostics: list[str] | None = None
    store: StoreConfig = field(default_factory=StoreConfig)
    divergence_factor: float = 1.0
    divergence_patience: int = 50
    lanes: LanesConfig = field(default_factory=LanesConfig)


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


MODEL_SCHEMAS = {
    "lorenz63": Lorenz63Config,
    "lorenz96": Lorenz96Config,
    "lorenz96_two_scale": Lorenz96TwoScaleConfig,
    "kuramoto_sivashinsky": KuramotoSivashinskyConfig,
}
# Forecast models: any model, the truth itself, or a reduced model fitted to the truth.
FORECAST_ONLY_SCHEMAS = {"same": SameModelConfig, "lorenz96_closure": Lorenz96ClosureConfig}


def register_schemas() -> None:
    """Store the schemas under names the YAML options extend (idempotent). Plugins
    (assimbench/plugins.py) have no YAML option: their schema is the option itself."""
    from assimbench.plugins import install
    from assimbench.registry import PLUGINS

    install()
    store = ConfigStore.instance()
    store.store(name=SCHEMA_PREFIX + "experiment", node=ExperimentConfig)
    store.store(name=SCHEMA_PREFIX + "lyapunov", node=LyapunovConfig)
    for name, schema in MODEL_SCHEMAS.items():
        for group in ("model", "forecast_model"):
            store.store(group=group, name=SCHEMA_PREFIX + name, node=schema)
            if name in PLUGINS:
                store.store(group=group, name=name, node=schema)
    for name, schema in FORECAST_ONLY_SCHEMAS.items():
        store.store(group="forecast_model", name=SCHEMA_PREFIX + name, node=schema)
    store.store(group="observation", name=SCHEMA_PREFIX + "observation", node=ObservationConfig)
    for name, schema in FILTER_SCHEMAS.items():
        store.store(group="filter", name=SCHEMA_PREFIX + name, node=schema)
        if name in PLUGINS:
            store.store(group="filter", name=name, node=schema)
