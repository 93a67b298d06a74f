"""How often the tuner's reported 95% range holds the true minimiser, on analytic landscapes.

    python benchmarks/tuner_coverage.py [--trials 40]

The landscape is the one of tests/tuning/test_search.py: f(x) = 0.2 + 3 (x - 1.0731)^2 per cycle,
plus noise shared by every candidate (as paired runs share the truth's weather), a rough offset per
candidate (as a chaotic filter's error has) and per-cycle noise. Prints the coverage, the median and
largest width of the range, and the mean number of passes.
"""

import argparse
import os
import sys

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "tests", "tuning"))

from test_search import landscape  # noqa: E402

from assimbench.tuning.search import Axis, search  # noqa: E402

TRUTH = 1.0731


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--trials", type=int, default=40)
    args = parser.parse_args()
    axis = Axis("filter.inflation", 1.0, 1.3)
    hits, widths, passes = 0, [], []
    for seed in range(args.trials):
        outcome = search((axis,), landscape(lambda v: 0.2 + 3.0 * (v[:, 0] - TRUTH) ** 2, seed=seed))
        low, high = outcome.ranges[axis.key]
        hits += low <= TRUTH <= high
        widths.append(high - low)
        passes.append(outcome.passes)
    print(f"range holds the minimiser in {hits} of {args.trials} trials; width median {np.median(widths):.4f}, "
          f"largest {max(widths):.4f}; passes mean {np.mean(passes):.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
