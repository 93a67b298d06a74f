"""Demo studies: one truth, several arms (forecast models, treatments, methods), paired by seed.

Every arm of a study file (experiments/model_error/, experiments/iterative/,
experiments/hybrid/)
runs on the same truth and observations (same seeds), so differences between
arms are paired; the table gives each arm's time-mean analysis RMSE with its
95% interval over replicates, its paired difference to the study's reference
arm, and what a cycle cost: forecast-model integrations in member-intervals
(one member over one analysis interval; reported by iterative methods, N for
the others' forecast) and microseconds.

    python experiments/paired_study.py                                  # every study
    python experiments/paired_study.py experiments/model_error/weak_forcing.yaml --replicates 4
"""

import argparse
import glob
import os

import numpy as np
import yaml
from scipy import stats

import assimbench

HERE = os.path.dirname(os.path.abspath(__file__))
FOLDERS = (os.path.join(HERE, "model_error"), os.path.join(HERE, "iterative"), os.path.join(HERE, "hybrid"))


def load_study(path: str) -> dict:
    with open(path) as f:
        study = yaml.safe_load(f)
    missing = {"title", "common", "reference", "arms"} - set(study)
    if missing:
        raise SystemExit(f"{path}: missing keys {sorted(missing)}")
    if study["reference"] not in study["arms"]:
        raise SystemExit(f"{path}: reference {study['reference']!r} is not one of the arms")
    return study


def paired_interval(differences: np.ndarray) -> tuple:
    """Mean and 95% Student-t half-width of paired differences (nan half-width for one replicate)."""
    if differences.size < 2:
        return float(differences.mean()), float("nan")
    half = stats.t.ppf(0.975, differences.size - 1) * differences.std(ddof=1) / np.sqrt(differences.size)
    return float(differences.mean()), float(half)


def cycle_cost(result) -> float:
    """Member-intervals integrated per cycle: the iterative methods' own count; the 4DEnVar's forecast
    and its N + 1 trajectories over the window; else the forecast's N (1 for the 3D-Var). NaN for the
    4D-Var, whose tangent-linear and adjoint sweeps are not member-intervals (its microseconds tell)."""
    node = result.config["filter"]
    if "model_integrations" in result.summary:
        return float(result.summary["model_integrations"])
    if node["name"] == "4dvar":
        return float("nan")
    members = float(node.get("members", 1))
    if node["name"] == "4denvar":
        return members + (members + 1.0) * node["window"]
    return members


def run_study(study: dict, replicates: int, cycles: int, burn_in: int) -> list:
    """Rows (arm, mean RMSE, half-width, paired difference, its half-width, member-intervals per
    cycle, microseconds per cycle)."""
    length = [f"replicates={replicates}", f"cycles={cycles}", f"burn_in={burn_in}"]
    per_replicate, costs = {}, {}
    for arm, overrides in study["arms"].items():
        result = assimbench.run(list(study["common"]) + list(overrides) + length)
        per_replicate[arm] = np.asarray(result.per_replicate["rmse_analysis"])
        costs[arm] = (cycle_cost(result), result.microseconds_per_cycle)
    reference = per_replicate[study["reference"]]
    rows = []
    for arm, values in per_replicate.items():
        mean, half = paired_interval(values)
        difference, difference_half = paired_interval(values - reference)
        rows.append((arm, mean, half, difference, difference_half, *costs[arm]))
    return rows


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("studies", nargs="*", help="study files (default: every file of the study folders)")
    parser.add_argument("--replicates", type=int, default=3)
    parser.add_argument("--cycles", type=int, default=3000)
    parser.add_argument("--burn-in", type=int, default=500)
    args = parser.parse_args()
    every = sorted(path for folder in FOLDERS for path in glob.glob(os.path.join(folder, "*.yaml")))
    for path in args.studies or every:
        study = load_study(path)
        rows = run_study(study, args.replicates, args.cycles, args.burn_in)
        print(f"\n{study['title']}  ({args.replicates} replicates x {args.cycles} cycles, burn-in {args.burn_in})")
        print(f"  {'arm':<26}{'analysis RMSE (95%)':>22}{'minus ' + study['reference']:>30}"
              f"{'member-intervals':>18}{'us':>8}   (per cycle)")
        for arm, mean, half, difference, difference_half, cost, micro in rows:
            cost_text = "-" if np.isnan(cost) else f"{cost:.1f}"
            print(f"  {arm:<26}{mean:>12.3f} +- {half:<6.3f}{difference:>+20.3f} +- {difference_half:<6.3f}"
                  f"{cost_text:>15}{micro:>8.0f}")


if __name__ == "__main__":
    main()
