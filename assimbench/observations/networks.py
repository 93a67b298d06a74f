"""Observation networks: which variables are observed, how often, through what and with what error.

Today one network family: every ``stride``-th resolved variable, every
``interval`` model time units, through an elementwise ``transform``, with
independent errors of standard deviation ``error_std`` (R = error_std^2 I,
a traced setting). The group's options (``every_station``,
``every_other_station``) are presets of this one spec.
"""

from dataclasses import dataclass

from assimbench.config.spec import NetworkSpec, NodeChecks
from assimbench.observations.operators import TRANSFORMS, every_kth


@dataclass
class ObservationConfig:
    """Observe every ``stride``-th variable every ``interval`` model time units.

    y = f(H truth) + N(0, error_std^2 I) with f given by ``transform``
    (identity, absolute or square); ``interval`` must be a whole multiple of
    ``model.dt``. The default is the demo's: every station of the ring every
    six hours (0.05 model time units) with unit error.
    """

    interval: float = 0.05
    stride: int = 1
    error_std: float = 1.0
    transform: str = "identity"


def _check(c: NodeChecks, resolved: int) -> None:
    allowed = f"an integer from 1 to the observable state size {resolved}"
    c.integer("stride", 1, allowed, maximum=resolved)
    c.real("error_std", "a finite standard deviation > 0", minimum=0.0)
    if c.node.transform not in TRANSFORMS:
        c.fail("transform", c.node.transform, "one of " + ", ".join(TRANSFORMS))


SPEC = NetworkSpec(
    name="stride",
    schema=ObservationConfig,
    build=lambda node, resolved: every_kth(resolved, int(node.stride), str(node.transform)),
    check=_check,
    traced=("error_std",),
)
