"""One-line configuration errors and the value checks every spec uses.

Each failure is a :class:`ConfigError` whose message is one line naming the
key, the value given and what is allowed, e.g.
``filter.members=1 is not allowed: an integer >= 2``.
"""

import math


class ConfigError(ValueError):
    """A configuration value that is not allowed; the message is one line."""


def fail(key: str, value, allowed: str):
    raise ConfigError(f"{key}={value!r} is not allowed: {allowed}")


class NodeChecks:
    """Checks of the keys of one config node, named in errors as ``prefix.key``."""

    def __init__(self, node, prefix: str):
        self.node = node
        self.prefix = prefix

    def name(self, key: str) -> str:
        """The full key; an empty ``key`` names the node itself."""
        return f"{self.prefix}.{key}" if self.prefix and key else (key or self.prefix)

    def fail(self, key: str, value, allowed: str):
        fail(self.name(key), value, allowed)

    def integer(self, key: str, minimum: int, allowed: str, maximum: int | None = None) -> int:
        """An int (not a bool) in [minimum, maximum]."""
        value = self.node[key]
        if isinstance(value, bool) or not isinstance(value, int) or value < minimum:
            self.fail(key, value, allowed)
        if maximum is not None and value > maximum:
            self.fail(key, value, allowed)
        return value

    def real(self, key: str, allowed: str, minimum=None, strict: bool = True, maximum=None) -> float:
        """A finite number above ``minimum`` (at or above it unless ``strict``), at most ``maximum``."""
        value = self.node[key]
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            self.fail(key, value, allowed)
        if minimum is not None and (value <= minimum if strict else value < minimum):
            self.fail(key, value, allowed)
        if maximum is not None and value > maximum:
            self.fail(key, value, allowed)
        return float(value)

    def in_range(self, key: str, low: float, high: float, allowed: str) -> float:
        return self.real(key, allowed, minimum=low, strict=False, maximum=high)

    def fraction(self, key: str, allowed: str = "a fraction in (0, 1]") -> float:
        return self.real(key, allowed, minimum=0.0, maximum=1.0)

    def seed(self, key: str = "seed") -> int:
        return self.integer(key, 0, "an integer from 0 to 2**32 - 1", maximum=2**32 - 1)
