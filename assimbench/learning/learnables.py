"""The quantities a learning run may change, and their unconstrained forms.

A learnable is a config path of a traced setting the filter uses
(``filter.inflation``, ``filter.radius``, ``assumed.error_std``...) or of a
scalar parameter of the forecast model (``forecast_model.forcing``). The
truth's model (``model.*``) and the observations' own errors
(``observation.*``, ``truth_noise_std``) make the data and are refused: a
filter learns what it assumes, not what it is given.

The optimizer works on an unconstrained value u of each quantity:

    a scale > 0 (standard deviations, spreads)           value = exp(u)
    a factor >= 1 (multiplicative inflation)             value = 1 + exp(u)
    a coefficient in [low, high] (rtpp [0, 1], rtps [0, 2], hybrid weights [0, 1], the
    localization radius [0, n / 4]: see :mod:`.study`)
                                                          value = low + (high - low) / (1 + exp(-u))
    anything else (model parameters such as the forcing)  value = u

so every step stays inside what the config allows (common practice for
constrained gradient descent).
"""

import math
from dataclasses import dataclass

import jax.numpy as jnp
import numpy as np

from assimbench.config.checks import ConfigError

# The sections a learning run may change: what the filter assumes and the model it forecasts with.
LEARNABLE_SECTIONS = ("filter", "assumed", "forecast_model")
# Maps by the key's own name (the last part of its path); any other key is unbounded.
SCALE_KEYS = ("radius", "additive_std", "error_std", "correlation_length", "static_scale", "b_scale",
              "bundle_scale", "jitter", "adaptive_std")
FACTOR_KEYS = ("inflation",)
COEFFICIENT_KEYS = {"rtpp": (0.0, 1.0), "rtps": (0.0, 2.0), "ensemble_weight": (0.0, 1.0)}
MAPS = ("log", "shifted_log", "logistic", "identity")


@dataclass(frozen=True)
class Learnable:
    """One learned quantity: its config path, the place of its value in the traced settings, its map
    (one of :data:`MAPS`) and the bounds of a logistic map."""

    key: str
    path: tuple
    map: str
    low: float = -math.inf
    high: float = math.inf

    def to_free(self, value):
        """u from the value (numpy or jax scalars)."""
        if self.map == "log":
            return jnp.log(value)
        if self.map == "shifted_log":
            return jnp.log(value - 1.0)
        if self.map == "logistic":
            share = (value - self.low) / (self.high - self.low)
            return jnp.log(share) - jnp.log1p(-share)
        return jnp.asarray(value, dtype=jnp.float64)

    def from_free(self, free):
        """The value from u (traced or not)."""
        if self.map == "log":
            return jnp.exp(free)
        if self.map == "shifted_log":
            return 1.0 + jnp.exp(free)
        if self.map == "logistic":
            return self.low + (self.high - self.low) / (1.0 + jnp.exp(-free))
        return free

    @property
    def described(self) -> str:
        return {"log": "log", "shifted_log": "log(value - 1)",
                "logistic": f"logistic on [{self.low:g}, {self.high:g}]", "identity": "as is"}[self.map]


def map_of(name: str) -> tuple:
    """(map, low, high) of a key by its own name."""
    if name in FACTOR_KEYS:
        return "shifted_log", 1.0, math.inf
    if name in SCALE_KEYS:
        return "log", 0.0, math.inf
    if name in COEFFICIENT_KEYS:
        return ("logistic",) + COEFFICIENT_KEYS[name]
    return "identity", -math.inf, math.inf


def learnable(key: str, settings: dict, traced: dict, value: float, bounds: dict | None = None) -> Learnable:
    """The :class:`Learnable` of config path ``key``; ``settings``: the run's traced settings (one
    lane), ``traced``: section -> the chosen component's traced keys, ``value``: its configured value.
    ConfigError (one line) when ``key`` cannot be learned, or its value is outside what its map allows
    (an unconstrained form needs a value strictly inside). ``bounds``: key -> (low, high) for a key
    whose range the experiment fixes (the localization radius: below a quarter of the ring), mapped
    by the logistic map on it."""
    section, _, name = key.rpartition(".")
    allowed = ", ".join(f"{s}.{k}" for s in LEARNABLE_SECTIONS for k in traced.get(s, ()))
    if section in ("model", "observation") or key == "truth_noise_std":
        raise ConfigError(f"learn.parameters: {key} is not allowed: it makes the truth or its observations; "
                          f"learn what the filter assumes or forecasts with ({allowed})")
    if section not in LEARNABLE_SECTIONS or name not in traced.get(section, ()):
        raise ConfigError(f"learn.parameters: {key} is not allowed: a traced setting of the chosen filter or "
                          f"forecast model ({allowed or 'none'})")
    node = settings[section]
    if name not in node:
        raise ConfigError(f"learn.parameters: {key} is not allowed here: the filter as configured does not use it "
                          f"(switch on the piece it belongs to, e.g. filter.adaptive=true for filter.adaptive_std)")
    if np.ndim(node[name]) != 0:
        raise ConfigError(f"learn.parameters: {key} is not allowed: a scalar ({allowed})")
    chosen, low, high = ("logistic",) + tuple(bounds[key]) if bounds and key in bounds else map_of(name)
    inside = {"log": value > 0, "shifted_log": value > 1, "logistic": low < value < high, "identity": True}[chosen]
    if not (math.isfinite(value) and inside):
        need = {"log": "> 0", "shifted_log": "> 1", "logistic": f"strictly between {low:g} and {high:g}",
                "identity": "finite"}[chosen]
        raise ConfigError(f"{key}={value:g} is not allowed as a starting value to learn from: {need} (the "
                          f"optimizer works on its {Learnable(key, (), chosen, low, high).described})")
    return Learnable(key, (section, name), chosen, low, high)


def with_learned(settings: dict, learnables: tuple, free) -> dict:
    """A copy of the traced ``settings`` with every learnable's value set from ``free`` (q,)."""
    out = dict(settings)
    for j, item in enumerate(learnables):
        section, name = item.path
        out[section] = dict(out[section])
        out[section][name] = item.from_free(free[j])
    return out


def free_values(learnables: tuple, values) -> jnp.ndarray:
    """(q,) unconstrained values of the given values."""
    return jnp.stack([item.to_free(jnp.asarray(v, dtype=jnp.float64)) for item, v in zip(learnables, values)])


def values_of(learnables: tuple, free) -> np.ndarray:
    """(q,) values of unconstrained ``free``."""
    return np.array([float(item.from_free(free[j])) for j, item in enumerate(learnables)])
