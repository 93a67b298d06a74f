"""Time to the first cycle of a first and of a repeated identical run (persistent compilation cache).

    python benchmarks/startup.py [--repeats 3]

Each run is a fresh process of the command ``assimbench`` (the demo, one
cycle, no file) with its own empty cache folder for the first run, which the
second run then finds. Prints medians: the whole command's wall time and the
in-run start-up (validation, building, climatology, compilation) that the
run itself reports.
"""

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time


def _command():
    script = os.path.join(os.path.dirname(sys.executable), "assimbench")
    return [script] if os.path.exists(script) else [sys.executable, "-m", "assimbench"]


def one_run(cache: str) -> tuple:
    env = dict(os.environ, ASSIMBENCH_COMPILE_CACHE=cache)
    tic = time.perf_counter()
    done = subprocess.run(_command() + ["cycles=1", "burn_in=0", "output=null"], env=env, capture_output=True,
                          text=True, check=True)
    wall = time.perf_counter() - tic
    startup = float(done.stdout.split("start-up ")[1].split()[0])
    return wall, startup


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    first, second = [], []
    for _ in range(args.repeats):
        cache = tempfile.mkdtemp(prefix="assimbench-cache-")
        try:
            first.append(one_run(cache))
            second.append(one_run(cache))
        finally:
            shutil.rmtree(cache, ignore_errors=True)
    print(f"{'run':<28}{'command wall s':>16}{'in-run start-up s':>20}")
    for name, values in (("first (empty cache)", first), ("second (same program)", second)):
        print(f"{name:<28}{statistics.median(v[0] for v in values):>16.2f}"
              f"{statistics.median(v[1] for v in values):>20.2f}")
    ratio_wall = statistics.median(v[0] for v in first) / statistics.median(v[0] for v in second)
    ratio_start = statistics.median(v[1] for v in first) / statistics.median(v[1] for v in second)
    print(f"ratio first / second: command {ratio_wall:.1f}x, start-up {ratio_start:.1f}x")


if __name__ == "__main__":
    main()
