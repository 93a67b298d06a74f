"""Microseconds per cycle of the Lorenz-96 ETKF twin, package against NumPy, in one run.

    python benchmarks/cycle_speed.py [--repeats 5] [--cycles 5000]

Prints medians of repeated runs (these machines are noisy), compile seconds,
and the ratio measured in the same process.
"""

import argparse
import os
import statistics
import sys
import time

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

import assimbench  # noqa: E402
from benchmarks import numpy_etkf  # noqa: E402


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--cycles", type=int, default=5000)
    args = parser.parse_args()

    cases = [("L96 n=40 ETKF N=20", ["filter.members=20"], 20), ("L96 n=40 ETKF N=40", ["filter.members=40"], 40)]
    print(f"{'case':<22}{'package us/cycle':>18}{'compile s':>11}{'numpy us/cycle':>16}{'ratio':>8}")
    for name, overrides, members in cases:
        # diagnostics=[]: the NumPy baseline computes the RMSE only, so compare like with like.
        common = overrides + [f"cycles={args.cycles}", "burn_in=100", f"chunk_cycles={args.cycles}", "diagnostics=[]"]
        package, compile_s = [], []
        for _ in range(args.repeats):
            result = assimbench.run(common)
            package.append(result.microseconds_per_cycle)
            compile_s.append(result.compile_seconds)
        numpy_cycles = max(200, args.cycles // 10)
        baseline = []
        for _ in range(args.repeats):
            tic = time.perf_counter()
            numpy_etkf.run(numpy_cycles, members=members)
            baseline.append(1e6 * (time.perf_counter() - tic) / numpy_cycles)
        p, c, b = statistics.median(package), statistics.median(compile_s), statistics.median(baseline)
        print(f"{name:<22}{p:>18.1f}{c:>11.2f}{b:>16.1f}{b / p:>8.1f}")


if __name__ == "__main__":
    main()
