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
