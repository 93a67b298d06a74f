"""Throughput of lanes: 8 inflations x 4 seeds as one lane batch against the same 32 runs one after another.

    python benchmarks/lane_speed.py [--cycles 2000] [--repeats 3]

L96 n=40, 20-member ETKF, diagnostics off (both sides alike). Prints the
summed cycles per second of both ways and their ratio, medians of repeats,
compile excluded; both are measured in this one process.
"""

import argparse
import os
import statistics
import sys

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

import assimbench  # noqa: E402

INFLATIONS = [1.0, 1.01, 1.02, 1.03, 1.04, 1.05, 1.07, 1.1]


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cycles", type=int, default=2000)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    common = [f"cycles={args.cycles}", "burn_in=100", f"chunk_cycles={args.cycles}", "diagnostics=[]"]
    lanes_list = "[" + ",".join(map(str, INFLATIONS)) + "]"
    batch, alone = [], []
    for _ in range(args.repeats):
        result = assimbench.run(common + [f"lanes.filter.inflation={lanes_list}", "replicates=4"])
        batch.append(32 * args.cycles / result.run_seconds)
        seconds = 0.0
        for inflation in INFLATIONS:
            for seed in range(4):
                # seed s, one replicate = replicate 0 of seed s: the same amount of work per run.
                one = assimbench.run(common + [f"filter.inflation={inflation}", f"seed={seed}"])
                seconds += one.run_seconds
        alone.append(32 * args.cycles / seconds)
    b, a = statistics.median(batch), statistics.median(alone)
    print(f"{'way':<34}{'cycles per second (all 32)':>28}")
    print(f"{'32 lanes in one program':<34}{b:>28.0f}")
    print(f"{'32 runs one after another':<34}{a:>28.0f}")
    print(f"ratio {b / a:.2f}")


if __name__ == "__main__":
    main()
