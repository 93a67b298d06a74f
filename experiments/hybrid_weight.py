"""Demo study: how much ensemble weight in the hybrid covariance, at which ensemble size?

Our scenario: the coastal ring (Lorenz-96, 40 sites) read at every second
site every 0.05 time units, R = I. For 5, 10 and 20 members, one run per
ensemble size sweeps the ensemble weight beta of the 3DEnVar's hybrid
covariance from 0 (static 3D-Var covariance) to 1 (localized ensemble only)
as lanes, each at the static scales listed, on the same truths (same seeds).
For every beta the table keeps its best static scale; the last columns give
the best hybrid's paired difference to the best pure static and to the pure
ensemble analysis, with 95% intervals over the replicates. A figure of
RMSE against beta, one line per ensemble size, goes to --out.

    python experiments/hybrid_weight.py --replicates 3 --cycles 1000 --out hybrid_weight
"""

import argparse
import os

import matplotlib
import matplotlib.ticker

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from scipy import stats  # noqa: E402

import assimbench  # noqa: E402

WEIGHTS = (0.0, 0.5, 0.8, 0.9, 1.0)
SCALES = (0.005, 0.02)
COMMON = ["observation=every_other_station", "filter=3denvar", "filter.inflation=1.05", "filter.radius=4",
          "diagnostics=[]", "output=null"]


def interval(values: np.ndarray) -> tuple:
    """Mean and 95% Student-t half-width over replicates."""
    half = stats.t.ppf(0.975, values.size - 1) * values.std(ddof=1) / np.sqrt(values.size)
    return float(values.mean()), float(half)


def sweep(members: int, replicates: int, cycles: int, burn_in: int) -> tuple:
    """(beta -> per-replicate analysis RMSE at that beta's best static scale (best by the mean),
    beta -> that static scale)."""
    result = assimbench.run(COMMON + [
        f"filter.members={members}", f"replicates={replicates}", f"cycles={cycles}", f"burn_in={burn_in}",
        f"lanes.filter.ensemble_weight=[{','.join(map(str, WEIGHTS))}]",
        f"lanes.filter.static_scale=[{','.join(map(str, SCALES))}]"])
    per_replicate = np.asarray(result.per_replicate["rmse_analysis"])  # (lanes, replicates)
    weights = np.asarray(result.lanes["filter.ensemble_weight"])
    scales = np.asarray(result.lanes["filter.static_scale"])
    best, chosen = {}, {}
    for beta in WEIGHTS:
        lanes = np.flatnonzero(np.isclose(weights, beta))
        lane = lanes[np.argmin(per_replicate[lanes].mean(axis=1))]
        best[beta], chosen[beta] = per_replicate[lane], float(scales[lane])
    return best, chosen


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--members", type=int, nargs="+", default=[5, 10, 20], help="ensemble sizes, one run each")
    parser.add_argument("--replicates", type=int, default=3, help="truths per setting (>= 2: the intervals)")
    parser.add_argument("--cycles", type=int, default=1000, help="analysis cycles per run")
    parser.add_argument("--burn-in", type=int, default=200, help="cycles left out of the time means")
    parser.add_argument("--out", default="hybrid_weight", help="folder for the figure")
    args = parser.parse_args()
    if args.replicates < 2:
        raise SystemExit("--replicates must be at least 2 (the intervals are over replicates)")
    curves = {}
    print("analysis RMSE, mean +- 95% Student-t half-width over replicates; each beta at its best static scale s")
    print(f"{'members':>7}  " + "".join(f"{'beta ' + str(b):>18}" for b in WEIGHTS)
          + f"{'best hybrid':>14}{'minus static':>20}{'minus ensemble':>20}")
    for members in args.members:
        best, chosen_scale = sweep(members, args.replicates, args.cycles, args.burn_in)
        curves[members] = {beta: interval(values) for beta, values in best.items()}
        hybrids = [b for b in WEIGHTS if 0.0 < b < 1.0]
        chosen = min(hybrids, key=lambda b: best[b].mean())
        versus_static = interval(best[chosen] - best[0.0])
        versus_ensemble = interval(best[chosen] - best[1.0])
        print(f"{members:>7}  " + "".join(f"{m:>9.3f} +- {h:<5.3f}" for m, h in curves[members].values())
              + f"{'beta ' + str(chosen):>14}{versus_static[0]:>+12.3f} +-{versus_static[1]:5.3f}"
              f"{versus_ensemble[0]:>+12.3f} +-{versus_ensemble[1]:5.3f}")
        # At beta = 1 the static scale plays no part.
        print(f"{'':>7}  " + "".join(f"{'s ' + str(chosen_scale[b]) if b < 1.0 else '-':>18}" for b in WEIGHTS))
    os.makedirs(args.out, exist_ok=True)
    figure, axes = plt.subplots(figsize=(6.5, 4))
    clipped = False
    for offset, (members, points) in zip(np.linspace(-0.012, 0.012, len(curves)), curves.items()):
        means = np.array([points[b][0] for b in WEIGHTS])
        halves = np.array([points[b][1] for b in WEIGHTS])
        # A log axis cannot show a bar reaching zero or below: such lower bars stop at 10% of the mean.
        lower = np.minimum(halves, 0.9 * means)
        clipped |= bool(np.any(lower < halves))
        axes.errorbar(np.asarray(WEIGHTS) + offset, means, yerr=[lower, halves], marker="o", capsize=3,
                      label=f"{members} members")
    axes.set_yscale("log")
    # Plain numbers at 1, 2 and 5 of each decade, not powers of ten, on the log axis.
    axes.yaxis.set_major_locator(matplotlib.ticker.LogLocator(subs=(1.0, 2.0, 5.0)))
    axes.yaxis.set_major_formatter(matplotlib.ticker.FormatStrFormatter("%.2g"))
    axes.yaxis.set_minor_formatter(matplotlib.ticker.NullFormatter())
    axes.set_xlabel("ensemble weight β (0: static covariance, 1: localized ensemble)")
    axes.set_ylabel("analysis RMSE (95% interval)")
    if clipped:
        axes.text(0.01, 0.02, "lower bars reaching zero stop at 10% of the mean", transform=axes.transAxes, fontsize=8)
    axes.set_title("3DEnVar on the coastal ring, every second site")
    axes.legend()
    figure.tight_layout()
    path = os.path.join(args.out, "rmse_by_ensemble_weight.png")
    partial = path + ".partial.png"
    figure.savefig(partial, dpi=120)
    os.replace(partial, path)  # never a half-written figure
    print(f"figure: {path}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
