"""A port of the ETKF written from the equations alone, in NumPy: the worked example of checking a port.

It reads the inputs of a vectors file (assimbench-vectors write filter=etkf ...), computes every
analysis the way a team re-implementing the method in its own system would, and writes its
results to a port file of the same layout, for ``assimbench-vectors check``:

    python examples/numpy_etkf_port.py ring_etkf.h5 ring_port.h5
    assimbench-vectors check ring_etkf.h5 ring_port.h5                      # passes

``--mistake`` brings in one of the convention errors that make a port look right and be wrong:

    ensemble-size       (N) I in the ensemble-space precision and sqrt(N) in the transform, in
                        place of N - 1
    inflate-analysis    multiplicative inflation applied to the analysis anomalies, not the forecast's
    transposed-weights  the weight matrix applied transposed (w_i,j in place of w_j,i)

Equations (Hunt, Kostelich & Szunyogh 2007, Physica D 230, 112-126, eq. 12-24), members as rows:
X = anomalies of the inflated forecast, Y = anomalies of H x_i,
A = (N - 1) I + Y R^-1 Y^T, wbar = A^-1 Y R^-1 (y - ybar), W = sqrt(N - 1) A^(-1/2),
x_a,i = xbar + sum_j (wbar_j + W_ji) X_j. Needs numpy and h5py only.
"""

import argparse
import sys

import h5py
import numpy as np

MISTAKES = ("ensemble-size", "inflate-analysis", "transposed-weights")


def etkf(forecast, y, variance, h_matrix, inflation, mistake=None):
    """One analysis; forecast (N, n), y (p,), variance (p,), h_matrix (p, n). Returns a dict of the
    quantities the port compares."""
    n_members = forecast.shape[0]
    size = n_members if mistake == "ensemble-size" else n_members - 1
    mean = forecast.mean(axis=0)
    factor = 1.0 if mistake == "inflate-analysis" else inflation
    prior = mean + factor * (forecast - mean)
    anomalies = prior - mean
    predicted = prior @ h_matrix.T
    obs_mean = predicted.mean(axis=0)
    obs_anomalies = predicted - obs_mean
    innovation = y - obs_mean
    precision = size * np.eye(n_members) + (obs_anomalies / variance) @ obs_anomalies.T
    values, vectors = np.linalg.eigh(precision)
    weights_mean = vectors @ ((vectors.T @ ((obs_anomalies / variance) @ innovation)) / values)
    transform = np.sqrt(size) * (vectors / np.sqrt(values)) @ vectors.T
    weights = weights_mean[None, :] + transform  # row i: the weights of member i's analysis
    if mistake == "transposed-weights":
        weights = weights.T
    analysis = mean + weights @ anomalies
    if mistake == "inflate-analysis":
        analysis_mean = analysis.mean(axis=0)
        analysis = analysis_mean + inflation * (analysis - analysis_mean)
    return {"intermediates/prior_ensemble": prior, "intermediates/predicted_observations": predicted,
            "intermediates/innovation": innovation, "intermediates/ensemble_precision": precision,
            "intermediates/mean_weights": weights_mean, "intermediates/transform": transform,
            "intermediates/analysis_weights": weights, "outputs/analysis_ensemble": analysis}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("vectors", help="a vectors file of an ETKF")
    parser.add_argument("port", help="the port file to write")
    parser.add_argument("--mistake", choices=MISTAKES, help="bring in one convention error")
    args = parser.parse_args(argv)
    with h5py.File(args.vectors, "r") as f:
        if f.attrs.get("filter") != "etkf" or f.attrs.get("observation_transform") != "identity":
            print("numpy_etkf_port: the vectors must be of an ETKF with a linear network", file=sys.stderr)
            return 2
        if any(f"settings/filter.{piece}" in f and f[f"settings/filter.{piece}"][()] != 0
               for piece in ("additive_std", "rtpp", "rtps")):
            print("numpy_etkf_port: this port does multiplicative inflation only", file=sys.stderr)
            return 2
        forecast = f["inputs/forecast_ensemble"][()]
        observations = f["inputs/observations"][()]
        variances = f["inputs/observation_error_variance"][()]
        h_matrix = f["inputs/observation_matrix"][()]
        inflation = float(f["settings/filter.inflation"][()])
        cycles = f["cycle"][()]
    results = [etkf(forecast[k], observations[k], variances[k], h_matrix, inflation, args.mistake)
               for k in range(len(cycles))]
    with h5py.File(args.port, "w") as f:
        f.create_dataset("cycle", data=cycles)
        for path in results[0]:
            f.create_dataset(path, data=np.stack([result[path] for result in results]))
    print(f"numpy_etkf_port: wrote {args.port} ({len(cycles)} analyses"
          + (f", with the mistake {args.mistake})" if args.mistake else ")"))
    return 0


if __name__ == "__main__":
    sys.exit(main())
