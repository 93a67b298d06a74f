"""The package's own registry of models and filters.

A config names a component by a key of these tables; it can never make the
tool import a module or call a dotted path. Each builder turns a validated
config node into the static component and its dynamic settings (a dict of
floats that is traced, so sweeps over them need no recompile).
"""

from assimbench.filters.etkf import make_etkf
from assimbench.models import make_lorenz63, make_lorenz96


def _lorenz63(node):
    return make_lorenz63(sigma=node.sigma, rho=node.rho, beta=node.beta, dt=node.dt)


def _lorenz96(node):
    return make_lorenz96(size=node.size, forcing=node.forcing, dt=node.dt)


MODELS = {"lorenz63": _lorenz63, "lorenz96": _lorenz96}

# State size from a config node without building the model (validation needs it).
STATE_SIZE = {"lorenz63": lambda node: 3, "lorenz96": lambda node: int(node.size)}


def _etkf(node, model, operator):
    return make_etkf(operator, members=int(node.members)), {"inflation": float(node.inflation)}


FILTERS = {"etkf": _etkf}
