"""Localization: the Gaspari-Cohn taper and distances on the model grid.

Convention of the whole package: ``filter.radius`` is the Gaspari-Cohn
half-width c in grid units; the weight falls to zero at distance 2c.
"""

import jax.numpy as jnp
import numpy as np


def gaspari_cohn(r):
    """Gaspari & Cohn (1999, Q. J. R. Meteorol. Soc. 125, eq. 4.10) with r = |z| / c.

    0 <= r <= 1:  -r^5/4 + r^4/2 + 5 r^3/8 - 5 r^2/3 + 1
    1 <  r <  2:   r^5/12 - r^4/2 + 5 r^3/8 + 5 r^2/3 - 5 r + 4 - 2 / (3 r)
    r >= 2:        0
    Works elementwise on arrays of any shape.
    """
    r = jnp.abs(r)
    inner = (((-0.25 * r + 0.5) * r + 0.625) * r - 5.0 / 3.0) * r**2 + 1.0
    safe = jnp.where(r > 1.0, r, 2.0)  # keeps 2/(3r) finite where the branch is not used
    outer = ((((r / 12.0 - 0.5) * r + 0.625) * r + 5.0 / 3.0) * r - 5.0) * r + 4.0 - 2.0 / (3.0 * safe)
    return jnp.where(r <= 1.0, inner, jnp.where(r < 2.0, outer, 0.0))


def ring_distance(a, b, size: int):
    """Shortest distance between grid positions a and b on a ring of ``size`` points."""
    d = np.abs(np.asarray(a, dtype=np.float64) - np.asarray(b, dtype=np.float64)) % size
    return np.minimum(d, size - d)


def check_radius(c, model) -> None:
    """``radius``: a half-width > 0 in grid units, or null; a radius needs a model whose variables
    sit on a ring (``model``: the facts of the forecast model, :class:`assimbench.config.spec.ModelFacts`)."""
    if c.node.radius is None:
        return
    c.real("radius", "a finite half-width > 0 in grid units, or null for no localization", minimum=0.0)
    if not model.ring:
        c.fail("radius", c.node.radius, f"{model.name} has no distance between variables; use {c.name('radius')}=null")


def radius_of(node) -> float | None:
    """The configured radius as a float, or None when localization is off."""
    return None if node.radius is None else float(node.radius)


def with_radius_check(check):
    """A filter's check followed by the radius check (for localized filters)."""

    def both(c, model) -> None:
        check(c)
        check_radius(c, model)

    return both


def radius_setting(node) -> dict:
    """The traced radius (0 when localization is off: the filter is then built without a taper)."""
    return {"radius": 0.0 if node.radius is None else float(node.radius)}
