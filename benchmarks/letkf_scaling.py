"""LETKF cost against state size, package against a vectorised NumPy LETKF, in one run.

    python benchmarks/letkf_scaling.py [--sizes 40 400 2000] [--repeats 3]

Lorenz-96 all observed every 0.05, R = I, 20 members, radius 4. The package figure is the
whole cycle (forecast + analysis + diagnostics); the NumPy figure is its analysis alone
plus a NumPy RK4 forecast, so the ratio is conservative.
"""

import argparse
import os
import statistics
import sys
import time

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

import assimbench  # noqa: E402
from benchmarks import numpy_etkf, numpy_letkf  # noqa: E402


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[40, 400, 2000])
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    print(f"{'n':>6}{'package us/cycle':>18}{'us per grid point':>19}{'numpy us/cycle':>16}{'ratio':>8}")
    for size in args.sizes:
        cycles = max(50, 40000 // size)
        common = ["filter=letkf", "filter.members=20", "filter.radius=4", f"model.size={size}",
                  f"cycles={cycles}", "burn_in=10", f"chunk_cycles={cycles}"]
        package = statistics.median(assimbench.run(common).microseconds_per_cycle for _ in range(args.repeats))
        rng = np.random.default_rng(0)
        members = 8.0 + rng.normal(size=(20, size))
        index, weight = numpy_letkf.windows(size, 4.0)
        times = []
        for _ in range(args.repeats):
            tic = time.perf_counter()
            for _ in range(20):
                members = numpy_etkf.rk4(members, 8.0, 0.01, 5)
                members = numpy_letkf.letkf(members, members.mean(0) + rng.normal(size=size), 1.0, index, weight)
            times.append(1e6 * (time.perf_counter() - tic) / 20)
        baseline = statistics.median(times)
        print(f"{size:>6}{package:>18.0f}{package / size:>19.1f}{baseline:>16.0f}{baseline / package:>8.2f}")


if __name__ == "__main__":
    main()
