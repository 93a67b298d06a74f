"""The package's own registry of models and filters.

A config names a component by a key of these tables; it can never make the
tool import a module or call a dotted path. Each builder turns a validated
config node into the static component and its dynamic settings (a dict of
floats that is traced, so sweeps over them need no recompile).
"""

from assimbench.climatology import climatology
from assimbench.filters.enkf import make_enkf
from assimbench.filters.ensrf import make_ensrf
from assimbench.filters.etkf import make_etkf
from assimbench.filters.letkf import make_letkf
from assimbench.filters.reference import make_climatology, make_free_run
from assimbench.filters.sir import make_sir
from assimbench.filters.threedvar import make_3dvar
from assimbench.models import make_lorenz63, make_lorenz96


def _lorenz63(node):
    return make_lorenz63(sigma=node.sigma, rho=node.rho, beta=node.beta, dt=node.dt)


def _lorenz96(node):
    return make_lorenz96(size=node.size, forcing=node.forcing, dt=node.dt)


MODELS = {"lorenz63": _lorenz63, "lorenz96": _lorenz96}

# State size from a config node without building the model (validation needs it).
STATE_SIZE = {"lorenz63": lambda node: 3, "lorenz96": lambda node: int(node.size)}


def _inflation(node):
    """Traced strengths and the static set of pieces switched on for this job."""
    values = {key: float(node[key]) for key in ("inflation", "additive_std", "rtpp", "rtps")}
    pieces = frozenset(
        piece for piece, key in (("additive", "additive_std"), ("rtpp", "rtpp"), ("rtps", "rtps")) if values[key] != 0.0
    )
    return values, pieces


def _radius(node):
    return None if node.radius is None else float(node.radius)


def _etkf(node, model, operator):
    values, pieces = _inflation(node)
    return make_etkf(operator, int(node.members), pieces), values


def _enkf(node, model, operator):
    values, pieces = _inflation(node)
    return make_enkf(operator, int(node.members), bool(node.centre_perturbations), pieces), values


def _localized(make):
    """Builder for a filter with inflation pieces and a Gaspari-Cohn radius (null = off)."""

    def build(node, model, operator):
        values, pieces = _inflation(node)
        radius = _radius(node)
        filt = make(model, operator, int(node.members), radius, pieces)
        return filt, {**values, "radius": radius if radius is not None else 0.0}

    return build


def _3dvar(node, model, operator):
    _, covariance = climatology(model)
    return make_3dvar(operator, covariance, int(node.iterations)), {"b_scale": float(node.b_scale)}


def _sir(node, model, operator):
    settings = {"ess_threshold": float(node.ess_threshold), "jitter": float(node.jitter)}
    return make_sir(operator, int(node.members)), settings


def _free(node, model, operator):
    return make_free_run(int(node.members)), {}


def _climatology(node, model, operator):
    mean, _ = climatology(model)
    return make_climatology(mean), {}


FILTERS = {
    "etkf": _etkf,
    "enkf": _enkf,
    "letkf": _localized(make_letkf),
    "ensrf": _localized(make_ensrf),
    "3dvar": _3dvar,
    "sir": _sir,
    "free": _free,
    "climatology": _climatology,
}

# Static traits validation needs before anything is built (the built Filter
# carries the same facts: ``weighted``).
LOCALIZED = ["letkf", "ensrf"]  # their radius needs a distance between grid points and observations
WEIGHTED = ["sir"]  # weighted ensembles
PLUGINS = []  # names added by installed packages' entry points (assimbench/plugins.py)
