"""How a cluster sweep spends its time: compiling or cycling. Prints figures for the README's sizing advice.

Runs the same study (the demo ring, a 20-member ETKF, four inflation values) through SLURM
(``hydra/launcher=submitit_slurm``) two ways, each with a cold and then a warm compile cache:

    one job per value      -m filter.inflation=1.0,1.05,1.1,1.15        4 jobs, 4 compiles
    one job, four lanes    lanes.filter.inflation=[1.0,1.05,1.1,1.15]   1 job, 1 compile

and prints, per way: the sweep's wall time, and summed over its jobs the seconds compiling and
cycling (from each result file's ``compile_seconds`` and ``run_seconds``). Needs a cluster:
``bash .ci/slurm-cluster start`` and the SLURM_CONF it prints.

    python benchmarks/cluster_sizing.py [--cycles 5000]
"""

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time

import h5py

VALUES = "1.0,1.05,1.1,1.15"


def sweep(args: list, folder: str, cache: str) -> tuple:
    """(wall seconds, summed compile seconds, summed cycling seconds, jobs) of one sweep."""
    env = {**os.environ, "ASSIMBENCH_COMPILE_CACHE": cache}
    command = [os.path.join(os.path.dirname(sys.executable), "assimbench"), "-m", *args, "hydra/launcher=submitit_slurm",
               f"hydra.sweep.dir={folder}", "hydra.launcher.cpus_per_task=1", "workers=1"]
    started = time.perf_counter()
    done = subprocess.run(command, env=env, capture_output=True, text=True)
    wall = time.perf_counter() - started
    if done.returncode != 0:
        sys.exit(f"cluster_sizing: the sweep failed:\n{done.stderr[-2000:]}")
    compile_seconds = cycling = 0.0
    jobs = 0
    for job in os.listdir(folder):
        path = os.path.join(folder, job, "result.h5")
        if os.path.isfile(path):
            with h5py.File(path, "r") as f:
                compile_seconds += float(f.attrs["compile_seconds"])
                cycling += float(f.attrs["run_seconds"])
            jobs += 1
    return wall, compile_seconds, cycling, jobs


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--cycles", type=int, default=5000)
    options = parser.parse_args()
    if "SLURM_CONF" not in os.environ and shutil.which("sinfo") is None:
        sys.exit("cluster_sizing: no SLURM cluster: run bash .ci/slurm-cluster start and export the SLURM_CONF it prints")
    common = [f"cycles={options.cycles}", "burn_in=500"]
    ways = {"one job per value": [f"filter.inflation={VALUES}"],
            "one job, four lanes": [f"lanes.filter.inflation=[{VALUES}]"]}
    print(f"demo ring, ETKF 20 members, {options.cycles} cycles per setting, 4 settings, 2-core one-node SLURM cluster")
    print(f"{'way':<22}{'cache':<7}{'jobs':>5}{'wall s':>9}{'compile s':>11}{'cycling s':>11}  (summed over jobs)")
    with tempfile.TemporaryDirectory(prefix="assimbench-sizing-", dir=os.getcwd()) as scratch:
        for name, args in ways.items():
            cache = os.path.join(scratch, f"cache-{len(args[0])}")
            for state in ("cold", "warm"):
                folder = os.path.join(scratch, f"{name.replace(' ', '_').replace(',', '')}_{state}")
                wall, compiling, cycling, jobs = sweep(common + args, folder, cache)
                print(f"{name:<22}{state:<7}{jobs:>5}{wall:>9.1f}{compiling:>11.1f}{cycling:>11.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
