"""Peak memory of long streamed runs against runs one tenth as long, and the cost of diagnostics.

    python benchmarks/streaming_memory.py [--scale 1.0]

Each run is a fresh process (peak resident memory from getrusage of the child),
writing its HDF5 file with the analysis means stored. Prints the ratio of
peak memory, long over short; the design target is at most 1.3. Then prints
microseconds per cycle of the L96 n=40 20-member ETKF with no optional
diagnostics and with all of them (median of repeated in-process runs).
"""

import argparse
import os
import resource
import statistics
import subprocess
import sys
import tempfile

CASES = {
    "lorenz63 ETKF N=10": ["model=lorenz63", "observation.interval=0.25", "observation.error_std=1.4142135623730951",
                           "filter.members=10", "filter.inflation=1.05"],
    "lorenz96 ETKF N=20": ["filter.members=20", "filter.inflation=1.03"],
}
LONG = {"lorenz63 ETKF N=10": 1_000_000, "lorenz96 ETKF N=20": 200_000}


def peak_rss_mb(args):
    """Run one job in a child process; return its peak resident memory in MB."""
    with tempfile.TemporaryDirectory() as folder:
        code = "import sys, assimbench; from assimbench.config.composition import compose_config; " \
               "assimbench.run_experiment(compose_config(sys.argv[1:-1]), output=sys.argv[-1], keep_series=False)"
        before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
        subprocess.run([sys.executable, "-c", code, *args, os.path.join(folder, "r.h5")], check=True)
        after = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
        # ru_maxrss of children is the maximum over all children so far: run the long job last.
        return max(before, after) / 1024.0


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scale", type=float, default=1.0, help="multiply the run lengths (e.g. 0.1 to try it out)")
    args = parser.parse_args()
    print(f"{'case':<22}{'cycles':>10}{'peak MB':>10}{'cycles':>10}{'peak MB':>10}{'ratio':>8}")
    for name, overrides in CASES.items():
        cycles = int(LONG[name] * args.scale)
        common = overrides + ["store.analysis_mean=true", "chunk_cycles=1000", "burn_in=1000"]
        short = peak_rss_mb(common + [f"cycles={cycles // 10}"])
        # getrusage of children is a running maximum, so measure the long run in a fresh parent.
        code = ("import sys; sys.path.insert(0, %r); from benchmarks.streaming_memory import peak_rss_mb; "
                "print(peak_rss_mb(sys.argv[1:]))") % os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
        out = subprocess.run([sys.executable, "-c", code, *common, f"cycles={cycles}"], check=True, capture_output=True, text=True)
        long = float(out.stdout.strip().splitlines()[-1])
        print(f"{name:<22}{cycles // 10:>10}{short:>10.0f}{cycles:>10}{long:>10.0f}{long / short:>8.2f}", flush=True)

    import assimbench

    timings = {}
    for label, diagnostics in (("no optional diagnostics", "[]"), ("all diagnostics", "null")):
        runs = [assimbench.run(["cycles=5000", "burn_in=100", "chunk_cycles=5000", f"diagnostics={diagnostics}"])
                for _ in range(5)]
        timings[label] = statistics.median(r.microseconds_per_cycle for r in runs)
        print(f"L96 ETKF N=20, {label}: {timings[label]:.1f} us per cycle")
    print(f"diagnostics add {100 * (timings['all diagnostics'] / timings['no optional diagnostics'] - 1):.0f}%")


if __name__ == "__main__":
    main()
