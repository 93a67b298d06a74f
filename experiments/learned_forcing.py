"""Demo study: can the filter learn what the forecast model gets wrong?

Our scenario, two cases on the coastal ring (Lorenz-96, every station read every
0.05 time units with unit error, ETKF with 20 members):

1. Weak forcing. The forecast office's model drives the ring with forcing 7
   where the truth has 8. Arms: the right forcing; the wrong one, kept; the
   wrong one learned with the state (``estimate.parameters=[forcing]`` from 7,
   prior spread 1, spread floor 0.1).
2. Gusty coast. The truth is the two-scale ring (40 stations, 10 fast gusts
   each, F = 10); the forecast model is single-scale Lorenz-96 plus a closure
   polynomial g(X) for the missing gusts. Arms, for a linear and a cubic g: the
   coefficients of the offline least-squares fit the bench makes
   (``forecast_model=lorenz96_closure``), and the same coefficients learned with
   the state from zero.

Prints each arm's analysis RMSE and its paired difference to the case's
reference arm (same truths and observations), and every estimate against
its reference value, with 95% intervals over the replicates (Student t);
draws the forcing's trajectories and the closures (offline against learned)
into --out.

    python experiments/learned_forcing.py --replicates 4 --cycles 3000 --out learned_forcing
"""

import argparse
import os

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from scipy import stats  # noqa: E402

import assimbench  # noqa: E402
from assimbench.config.composition import compose_config  # noqa: E402
from assimbench.config.plan import resolve  # noqa: E402

RING = ["filter=etkf", "filter.members=20", "output=null", "diagnostics=[]"]
WEAK = ["forecast_model=lorenz96", "forecast_model.forcing=7", "filter.inflation=1.05"]
LEARN_FORCING = ["estimate.parameters=[forcing]", "estimate.initial_mean=7", "estimate.initial_std=1",
                 "estimate.spread_floor=0.1"]
GUSTY = ["model=lorenz96_two_scale", "model.slow=40", "forecast_model=lorenz96_closure", "filter.inflation=1.05"]
# Prior spread of each closure coefficient learned from zero: a few tenths of the tendency over the
# ring's range of X (|X| up to about 15), so that no power dominates the first analyses.
CLOSURE_STD = (0.5, 0.1, 0.01, 0.001)


def interval(values) -> tuple:
    """Mean and 95% Student-t half-width over replicates."""
    values = np.asarray(values, float)
    half = stats.t.ppf(0.975, values.size - 1) * values.std(ddof=1) / np.sqrt(values.size)
    return float(values.mean()), float(half)


def text(values) -> str:
    mean, half = interval(values)
    return f"{mean:9.4f} +- {half:.4f}"


def closure_learning(degree: int) -> list:
    """Overrides that learn the coefficients of a degree-``degree`` closure from zero."""
    names = ",".join(f"closure_{i}" for i in range(degree + 1))
    zeros = ",".join("0" for _ in range(degree + 1))
    spreads = ",".join(str(s) for s in CLOSURE_STD[: degree + 1])
    return [f"estimate.parameters=[{names}]", f"estimate.initial_mean=[{zeros}]", f"estimate.initial_std=[{spreads}]",
            "estimate.spread_floor=0.1"]


def offline_closure(degree: int, length: list) -> np.ndarray:
    """The bench's offline least-squares fit of the closure (lowest power first)."""
    plan = resolve(compose_config(RING + GUSTY + length + [f"forecast_model.degree={degree}"]))
    return np.asarray(plan.settings["forecast_model"]["closure"])


def run_arms(arms: dict, common: list) -> dict:
    """name -> the run's result (every arm on the same seeds, so on the same truths)."""
    results = {}
    for name, overrides in arms.items():
        results[name] = assimbench.run(common + overrides)
        print(f"  ran {name}", flush=True)
    return results


def print_rmse(results: dict, reference: str) -> None:
    base = np.asarray(results[reference].per_replicate["rmse_analysis"])
    print(f"{'arm':<28}{'analysis RMSE':>22}{'minus ' + reference:>30}")
    for name, result in results.items():
        rmse = np.asarray(result.per_replicate["rmse_analysis"])
        paired = "0" if name == reference else text(rmse - base)
        print(f"{name:<28}{text(rmse):>22}{paired:>30}")


def forcing_figure(result, truth: float, ax) -> None:
    means = np.asarray(result.series["parameter_mean"])[..., 0]  # (replicates, cycles)
    spread = np.asarray(result.series["parameter_spread"])[..., 0]
    time = result.interval * np.arange(1, means.shape[1] + 1)
    for replicate in means:
        ax.plot(time, replicate, color="#0072B2", lw=0.6, alpha=0.5)
    centre = means.mean(axis=0)
    ax.plot(time, centre, color="#0072B2", lw=1.6, label=f"estimate, mean of {len(means)} replicates")
    ax.plot(time, centre + spread.mean(axis=0), color="#0072B2", lw=0.8, ls=":", label="± parameter spread")
    ax.plot(time, centre - spread.mean(axis=0), color="#0072B2", lw=0.8, ls=":")
    ax.axhline(truth, color="black", lw=1.0, ls="--", label=f"the truth's forcing ({truth:g})")
    ax.axhline(7.0, color="#D55E00", lw=1.0, ls="-.", label="the forecast model's forcing (7)")
    ax.set_xlabel("time (model time units)")
    ax.set_ylabel("forcing")
    ax.set_title("Weak forcing: the forcing learned with the state")
    ax.legend(fontsize=8, loc="lower right")


def closure_figure(offline: dict, learned: dict, ax) -> None:
    x = np.linspace(-8.0, 14.0, 200)  # about the range of the slow variables
    colours = {1: "#009E73", 3: "#CC79A7"}
    for degree in offline:
        ax.plot(x, np.polynomial.polynomial.polyval(x, offline[degree]), color=colours[degree], lw=1.6,
                label=f"degree {degree}, offline fit")
        ax.plot(x, np.polynomial.polynomial.polyval(x, learned[degree]), color=colours[degree], lw=1.6, ls="--",
                label=f"degree {degree}, learned (time mean, replicate mean)")
    ax.set_xlabel("slow variable X (state units)")
    ax.set_ylabel("closure g(X) (state units per time unit)")
    ax.set_title("Gusty coast: the closure for the missing gusts")
    ax.legend(fontsize=8)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replicates", type=int, default=4, help="truths per arm (>= 2: the intervals)")
    parser.add_argument("--cycles", type=int, default=3000, help="analysis cycles per run")
    parser.add_argument("--burn-in", type=int, default=None, help="cycles left out of the time means (default: half)")
    parser.add_argument("--out", default="learned_forcing", help="folder for the figure")
    args = parser.parse_args()
    if args.replicates < 2:
        raise SystemExit("--replicates must be at least 2 (the intervals are over replicates)")
    burn_in = args.cycles // 2 if args.burn_in is None else args.burn_in
    if not 0 <= burn_in < args.cycles:
        raise SystemExit(f"--burn-in must be in 0 .. {args.cycles - 1} (below --cycles)")
    length = [f"replicates={args.replicates}", f"cycles={args.cycles}", f"burn_in={burn_in}"]

    print("Case 1, weak forcing: the ring forecast with forcing 7 (the truth has 8)")
    weak = run_arms({"right forcing": ["filter.inflation=1.05"], "weak forcing, kept": WEAK,
                     "weak forcing, learned": WEAK + LEARN_FORCING}, RING + length)
    print_rmse(weak, "right forcing")
    learned = weak["weak forcing, learned"]
    print(f"forcing learned (time mean after burn-in): {text(learned.per_replicate['estimate_forcing_mean'])} "
          f"(truth 8; minus truth {text(np.asarray(learned.per_replicate['estimate_forcing_mean']) - 8.0)})")

    print("\nCase 2, gusty coast: single-scale forecast model with a closure for the missing gusts")
    offline, learned_coefficients, arms = {}, {}, {}
    for degree in (1, 3):
        offline[degree] = offline_closure(degree, length)
        arms[f"degree {degree}, offline fit"] = [f"forecast_model.degree={degree}"]
        arms[f"degree {degree}, learned"] = [f"forecast_model.degree={degree}"] + closure_learning(degree)
    gusty = run_arms(arms, RING + GUSTY + length)
    print_rmse(gusty, "degree 3, offline fit")
    print(f"\n{'coefficient':<14}{'offline fit':>14}{'learned (time mean)':>24}{'learned minus offline':>26}")
    for degree in (1, 3):
        result = gusty[f"degree {degree}, learned"]
        means = [np.asarray(result.per_replicate[f"estimate_closure_{i}_mean"]) for i in range(degree + 1)]
        learned_coefficients[degree] = np.array([m.mean() for m in means])
        print(f"degree {degree}")
        for i, values in enumerate(means):
            print(f"  a_{i:<10}{offline[degree][i]:>14.5f}{text(values):>24}{text(values - offline[degree][i]):>26}")

    os.makedirs(args.out, exist_ok=True)
    fig, axes = plt.subplots(1, 2, figsize=(12.5, 4.2), layout="constrained")
    forcing_figure(learned, 8.0, axes[0])
    closure_figure(offline, learned_coefficients, axes[1])
    path = os.path.join(args.out, "learned_forcing.png")
    fig.savefig(path, dpi=120)
    print(f"\nfigure: {path}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
