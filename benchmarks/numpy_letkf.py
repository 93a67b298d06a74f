"""A vectorised NumPy LETKF analysis (batched numpy.linalg over grid points), the speed baseline.

Same equations as assimbench.filters.letkf: R-localization with the Gaspari-Cohn weight,
the symmetric square root from a batched eigen-decomposition.
"""

import numpy as np


def gaspari_cohn(r):
    r = np.abs(r)
    inner = (((-0.25 * r + 0.5) * r + 0.625) * r - 5.0 / 3.0) * r**2 + 1.0
    safe = np.where(r > 1.0, r, 2.0)
    outer = ((((r / 12.0 - 0.5) * r + 0.625) * r + 5.0 / 3.0) * r - 5.0) * r + 4.0 - 2.0 / (3.0 * safe)
    return np.where(r <= 1.0, inner, np.where(r < 2.0, outer, 0.0))


def windows(size, radius):
    """Local observation indices (n, K) and weights for an all-observed ring."""
    offsets = np.arange(-int(np.ceil(2 * radius)) + 1, int(np.ceil(2 * radius)))
    index = (np.arange(size)[:, None] + offsets[None, :]) % size
    return index, gaspari_cohn(np.abs(offsets)[None, :] / radius) * np.ones((size, 1))


def letkf(members, y, error_var, index, weight):
    n_members = members.shape[0]
    mean = members.mean(0)
    anomalies = members - mean
    local_y = np.moveaxis(anomalies[:, index], 1, 0)  # all observed: Y = X
    scaled = local_y * (weight / error_var)[:, None, :]
    precision = (n_members - 1) * np.eye(n_members) + scaled @ np.swapaxes(local_y, 1, 2)
    evals, evecs = np.linalg.eigh(precision)
    rhs = np.einsum("gik,gk->gi", scaled, (y - mean)[index])
    weights_mean = np.einsum("gij,gj->gi", evecs, np.einsum("gji,gj->gi", evecs, rhs) / evals)
    column = anomalies.T
    rotated = np.einsum("gji,gj->gi", evecs, column) / np.sqrt(evals)
    transformed = np.sqrt(n_members - 1.0) * np.einsum("gij,gj->gi", evecs, rotated)
    return mean + np.sum(weights_mean * column, axis=1)[None, :] + transformed.T
