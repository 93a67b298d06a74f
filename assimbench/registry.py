"""The package's own registry of models and filters.

A config names a component by a key of these tables; it can never make the
tool import a module or call a dotted path. Each builder turns a validated
config node into the static component and its dynamic settings (a dict of
floats that is traced, so sweeps over them need no recompile).
"""

from assimbench.climatology import climatology
from assimbench.filters.enkf import make_enkf
from assimbench.filters.enkfn import make_enkfn
from assimbench.filters.ensrf import make_ensrf
from assimbench.filters.etkf import make_etkf
from assimbench.filters.fourdvar import make_4dvar
from assimbench.filters.letkf import make_letkf
from assimbench.filters.reference import make_climatology, make_free_run
from assimbench.filters.sir import make_sir
from assimbench.filters.threedvar import make_3dvar
from assimbench.models import make_kuramoto_sivashinsky, make_lorenz63, make_lorenz96, make_lorenz96_two_scale


def _lorenz63(node):
    return make_lorenz63(sigma=node.sigma, rho=node.rho, beta=node.beta, dt=node.dt)


def _lorenz96(node):
    return make_lorenz96(size=node.size, forcing=node.forcing, dt=node.dt)


def _lorenz96_two_scale(node):
    return make_lorenz96_two_scale(
        slow=int(node.slow), fast_per_slow=int(node.fast_per_slow), forcing=node.forcing, coupling=node.coupling,
        time_scale=node.time_scale, space_scale=node.space_scale, dt=node.dt,
    )


def _kuramoto_sivashinsky(node):
    return make_kuramoto_sivashinsky(size=int(node.size), length=float(node.length), dt=float(node.dt))


MODELS = {
    "lorenz63": _lorenz63,
    "lorenz96": _lorenz96,
    "lorenz96_two_scale": _lorenz96_two_scale,
    "kuramoto_sivashinsky": _kuramoto_sivashinsky,
}

# State size from a config node without building the model (validation needs it).
STATE_SIZE = {
    "lorenz63": lambda node: 3,
    "lorenz96": lambda node: int(node.size),
    "lorenz96_two_scale": lambda node: int(node.slow) * (int(node.fast_per_slow) + 1),
    "kuramoto_sivashinsky": lambda node: int(node.size),
}
# Resolved (observed and scored) size where it is not the whole state.
RESOLVED_SIZE = {"lorenz96_two_scale": lambda node: int(node.slow)}


def model_sizes(node) -> tuple:
    """(state size, resolved size) of a model config node, without building the model."""
    size = STATE_SIZE[node.name](node)
    return size, RESOLVED_SIZE[node.name](node) if node.name in RESOLVED_SIZE else size


def _closure(node, truth):
    from assimbench.closure import make_lorenz96_closure

    return make_lorenz96_closure(truth, float(node.forcing), int(node.degree), float(node.dt))


def forecast_model(node, truth):
    """The forecast model of config node ``forecast_model`` for the truth model ``truth``."""
    if node.name == "same":
        return truth
    if node.name in FORECAST_ONLY:
        return FORECAST_ONLY[node.name](node, truth)
    return MODELS[node.name](node)


# Forecast models that are not models of their own: built from the truth.
FORECAST_ONLY = {"same": None, "lorenz96_closure": _closure}
# Truth models whose resolved variables are a Lorenz-96 ring (a closure can be fitted to them).
LORENZ96_RINGS = ("lorenz96", "lorenz96_two_scale")


def _inflation(node):
    """Traced strengths and the static set of pieces switched on for this job."""
    values = {key: float(node[key]) for key in ("inflation", "additive_std", "rtpp", "rtps")}
    pieces = frozenset(
        piece for piece, key in (("additive", "additive_std"), ("rtpp", "rtpp"), ("rtps", "rtps")) if values[key] != 0.0
    )
    return values, pieces


def _radius(node):
    return None if node.radius is None else float(node.radius)


def _adaptive(node, values):
    """Whether the adaptive factor is on, with its traced settings added to ``values``."""
    adaptive = bool(node.get("adaptive", False))
    if adaptive:
        values.update({key: float(node[key]) for key in ("adaptive_std", "adaptive_min", "adaptive_max")})
    return adaptive


def _etkf(node, model, operator):
    values, pieces = _inflation(node)
    return make_etkf(operator, int(node.members), pieces, _adaptive(node, values)), values


def _enkfn(node, model, operator):
    values, pieces = _inflation(node)
    return make_enkfn(operator, int(node.members), pieces, int(node.prior_extra_count)), values


def _enkf(node, model, operator):
    values, pieces = _inflation(node)
    return make_enkf(operator, int(node.members), bool(node.centre_perturbations), pieces), values


def _localized(make):
    """Builder for a filter with inflation pieces and a Gaspari-Cohn radius (null = off)."""

    def build(node, model, operator):
        values, pieces = _inflation(node)
        radius = _radius(node)
        extra = {"adaptive": _adaptive(node, values)} if "adaptive" in node else {}
        filt = make(model, operator, int(node.members), radius, pieces, **extra)
        return filt, {**values, "radius": radius if radius is not None else 0.0}

    return build


def _3dvar(node, model, operator):
    _, covariance = climatology(model)
    return make_3dvar(operator, covariance, int(node.iterations)), {"b_scale": float(node.b_scale)}


def _4dvar(node, model, operator, steps_per_interval):
    _, covariance = climatology(model)
    filt = make_4dvar(model, operator, covariance, int(node.window), int(node.iterations),
                      int(node.inner_iterations), steps_per_interval)
    return filt, {"b_scale": float(node.b_scale)}


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
    "4dvar": _4dvar,
    "enkfn": _enkfn,
    "sir": _sir,
    "free": _free,
    "climatology": _climatology,
}

# Static traits validation needs before anything is built (the built Filter
# carries the same facts: ``weighted``).
LOCALIZED = ["letkf", "ensrf"]  # their radius needs a distance between grid points and observations
WEIGHTED = ["sir"]  # weighted ensembles
INFLATION_REPORTING = ["enkfn"]  # report an inflation series (adaptive ETKF / LETKF too)
# Builders that also take the forecast model's steps per analysis interval (keyword steps_per_interval).
NEEDS_INTERVAL = ["4dvar"]
PLUGINS = []  # names added by installed packages' entry points (assimbench/plugins.py)
