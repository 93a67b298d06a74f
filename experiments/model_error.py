"""Demo model-error study: one truth, several forecast models or treatments, paired by seed.

Every arm of a study file in experiments/model_error/ runs on the same truth and
observations (same seeds), so differences between arms are paired; the table
gives each arm's time-mean analysis RMSE with its 95% interval over replicates
and its paired difference to the study's reference arm.

    python experiments/model_error.py                                   # both studies
    python experiments/model_error.py experiments/model_error/weak_forcing.yaml --replicates 4
"""

import argparse
import glob
import os

import numpy as np
import yaml
from scipy import stats

import assimbench

FOLDER = os.path.join(os.path.dirname(os.path.abspath(__file__)), "model_error")


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


def run_study(study: dict, replicates: int, cycles: int, burn_in: int) -> list:
    """Rows (arm, mean RMSE, half-width, paired difference, its half-width)."""
    length = [f"replicates={replicates}", f"cycles={cycles}", f"burn_in={burn_in}"]
    per_replicate = {}
    for arm, overrides in study["arms"].items():
        result = assimbench.run(list(study["common"]) + list(overrides) + length)
        per_replicate[arm] = np.asarray(result.per_replicate["rmse_analysis"])
    reference = per_replicate[study["reference"]]
    rows = []
    for arm, values in per_replicate.items():
        mean, half = paired_interval(values)
        difference, difference_half = paired_interval(values - reference)
        rows.append((arm, mean, half, difference, difference_half))
    return rows


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("studies", nargs="*", help="study files (default: every file of experiments/model_error)")
    parser.add_argument("--replicates", type=int, default=3)
    parser.add_argument("--cycles", type=int, default=3000)
    parser.add_argument("--burn-in", type=int, default=500)
    args = parser.parse_args()
    for path in args.studies or sorted(glob.glob(os.path.join(FOLDER, "*.yaml"))):
        study = load_study(path)
        rows = run_study(study, args.replicates, args.cycles, args.burn_in)
        print(f"\n{study['title']}  ({args.replicates} replicates x {args.cycles} cycles, burn-in {args.burn_in})")
        print(f"  {'arm':<26}{'analysis RMSE (95%)':>22}{'minus ' + study['reference']:>30}")
        for arm, mean, half, difference, difference_half in rows:
            print(f"  {arm:<26}{mean:>12.3f} +- {half:<6.3f}{difference:>+20.3f} +- {difference_half:.3f}")


if __name__ == "__main__":
    main()
