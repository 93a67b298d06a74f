"""A hand-written NumPy ETKF analysis, the way a careful researcher would write it.

Kept apart from the package: it is part of the speed baseline
(benchmarks/numpy_twin.py), not a component. The symmetric square-root ETKF
(Hunt, Kostelich & Szunyogh 2007) with multiplicative inflation of the anomalies.
"""

import numpy as np


def etkf(members, y, error_var, inflation):
    n_members = members.shape[0]
    mean = members.mean(0)
    anomalies = inflation * (members - mean)
    members = mean + anomalies
    obs_mean = members.mean(0)
    obs_anomalies = members - obs_mean
    scaled = obs_anomalies / error_var
    precision = (n_members - 1) * np.eye(n_members) + scaled @ obs_anomalies.T
    evals, evecs = np.linalg.eigh(precision)
    weights = evecs @ ((evecs.T @ (scaled @ (y - obs_mean))) / evals)
    transform = np.sqrt(n_members - 1.0) * (evecs / np.sqrt(evals)) @ evecs.T
    return mean + (weights[None, :] + transform) @ anomalies
