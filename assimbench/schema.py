"""Typed configuration schemas, registered in Hydra's ConfigStore.

The YAML options in ``configs/`` extend these schemas, so every key has a type
and a mistyped key or a value of the wrong type is refused while composing.
Value ranges and cross-key rules are checked afterwards by
:mod:`assimbench.validation`.
"""

from dataclasses import dataclass, field
from typing import Any, Optional

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
class ObservationConfig:
    """Observe every ``stride``-th variable every ``interval`` model time units.

    y = h(truth) + N(0, error_std^2 I); ``interval`` must be a whole multiple
    of ``model.dt``.
    """

    interval: float = 0.05
    stride: int = 1
    error_std: float = 1.0


@dataclass
class ETKFConfig:
    """ETKF (Hunt et al. 2007); ``inflation`` multiplies the prior anomalies."""

    name: str = "etkf"
    members: int = 20
    inflation: float = 1.0


@dataclass
class ExperimentConfig:
    """A whole twin experiment.

    cycles: analyses to run; burn_in: leading cycles left out of time means;
    seed: base seed of truth, observations and ensembles; replicates:
    independent seeds run as one vectorised batch; initial_spread: standard
    deviation of the noise added to the truth to make the initial members;
    chunk_cycles: cycles per compiled chunk (streaming and progress);
    output: HDF5 file to write (relative paths go in the job's run folder).
    """

    model: Any = MISSING
    observation: ObservationConfig = field(default_factory=ObservationConfig)
    filter: Any = MISSING
    cycles: int = 2000
    burn_in: int = 500
    seed: int = 0
    replicates: int = 1
    initial_spread: float = 1.0
    chunk_cycles: int = 1000
    output: Optional[str] = "result.h5"


def register_schemas() -> None:
    """Store the schemas under names the YAML options extend (idempotent)."""
    store = ConfigStore.instance()
    store.store(name=SCHEMA_PREFIX + "experiment", node=ExperimentConfig)
    store.store(group="model", name=SCHEMA_PREFIX + "lorenz63", node=Lorenz63Config)
    store.store(group="model", name=SCHEMA_PREFIX + "lorenz96", node=Lorenz96Config)
    store.store(group="observation", name=SCHEMA_PREFIX + "observation", node=ObservationConfig)
    store.store(group="filter", name=SCHEMA_PREFIX + "etkf", node=ETKFConfig)
