"""Throughput of lanes: 8 inflations x 4 seeds as one lane batch, in one process and split over worker
processes, against the same 32 runs one after another.

    python benchmarks/lane_speed.py [--cycles 2000] [--repeats 3] [--workers 2]

L96 n=40, 20-member ETKF, diagnostics off (all ways alike). Prints the summed
cycles per second of each way and its ratio to the runs one after another,
medians of repeats. "cycling" excludes compiling; "wall" is the whole call,
start-up included (a worker imports JAX, plans and compiles for itself, in
parallel with the others).
"""

import argparse
import os
import statistics
import sys
import time

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

import assimbench  # noqa: E402

INFLATIONS = [1.0, 1.01, 1.02, 1.03, 1.04, 1.05, 1.07, 1.1]


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cycles", type=int, default=2000)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args()
    common = [f"cycles={args.cycles}", "burn_in=100", f"chunk_cycles={args.cycles}", "diagnostics=[]"]
    lanes_list = "[" + ",".join(map(str, INFLATIONS)) + "]"
    lanes = common + [f"lanes.filter.inflation={lanes_list}", "replicates=4"]
    ways = {"32 lanes, one process": lanes + ["workers=1"],
            f"32 lanes, {args.workers} worker processes": lanes + [f"workers={args.workers}"]}
    cycling = {name: [] for name in [*ways, "32 runs one after another"]}
    wall = {name: [] for name in cycling}
    for _ in range(args.repeats):
        for name, overrides in ways.items():
            tic = time.perf_counter()
            result = assimbench.run(overrides)
            wall[name].append(32 * args.cycles / (time.perf_counter() - tic))
            cycling[name].append(32 * args.cycles / result.run_seconds)
        seconds, tic = 0.0, time.perf_counter()
        for inflation in INFLATIONS:
            for seed in range(4):
                # seed s, one replicate = replicate 0 of seed s: the same amount of work per run.
                one = assimbench.run(common + [f"filter.inflation={inflation}", f"seed={seed}", "workers=1"])
                seconds += one.run_seconds
        wall["32 runs one after another"].append(32 * args.cycles / (time.perf_counter() - tic))
        cycling["32 runs one after another"].append(32 * args.cycles / seconds)
    base_cycling = statistics.median(cycling["32 runs one after another"])
    base_wall = statistics.median(wall["32 runs one after another"])
    print(f"{args.cycles} cycles per run; run-cycles per second of all 32 runs (ratio to one after another)")
    print(f"{'way':<36}{'cycling':>18}{'wall':>18}")
    for name in cycling:
        c, w = statistics.median(cycling[name]), statistics.median(wall[name])
        print(f"{name:<36}{c:>10.0f} ({c / base_cycling:4.2f}x){w:>10.0f} ({w / base_wall:4.2f}x)")


if __name__ == "__main__":
    main()
