"""The speed suite: the package against hand-written NumPy twins of the same experiments, in one run.

    python benchmarks/speed_suite.py [--repeats 3] [--json speed.json] [--quick] [--growth]

For every case: microseconds per cycle of the package (compile excluded) and of
the NumPy twin (benchmarks/numpy_twin.py, started from the package's own
initial truth and ensemble and fed the package's observation noise), their
ratio, the package's compile seconds, the largest difference of the two
analysis-RMSE series over a short run (the same computation, to rounding;
SIR draws its own random numbers, so only its speed is compared), an estimate
of the floating-point work per cycle and the rate it implies against this
machine's single-core matrix-multiply rate. Medians of ``--repeats`` runs;
these machines are noisy, so read the ratios, measured side by side.
"""

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # one core for the NumPy side, as for XLA's CPU ops
os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("ASSIMBENCH_COMPILE_CACHE", "off")  # report real compile times (benchmarks/startup.py: the cache)

import argparse  # noqa: E402
import json  # noqa: E402
import statistics  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

import assimbench  # noqa: E402
from assimbench.config.plan import resolve  # noqa: E402
from assimbench.models.climatology import climatology  # noqa: E402
from assimbench.twin.cycling import make_start, replicate_keys  # noqa: E402
from benchmarks import numpy_letkf, numpy_twin  # noqa: E402

L63 = ["model=lorenz63", "observation.interval=0.25", "observation.error_std=1.4142135623730951"]
CASES = {
    "L63 ETKF N=10": (L63 + ["filter.members=10", "filter.inflation=1.04"], 4000),
    "L96 n=40 ETKF N=20": (["filter.members=20", "filter.inflation=1.03"], 4000),
    "L96 n=40 ETKF N=40": (["filter.members=40", "filter.inflation=1.02"], 3000),
    "L96 n=40 LETKF N=20": (["filter=letkf", "filter.members=20", "filter.radius=4", "filter.inflation=1.02"], 1000),
    "L96 n=400 LETKF N=20": (["filter=letkf", "filter.members=20", "filter.radius=4", "filter.inflation=1.02",
                              "model.size=400"], 200),
    "L96 n=2000 LETKF N=20": (["filter=letkf", "filter.members=20", "filter.radius=4", "filter.inflation=1.02",
                               "model.size=2000"], 50),
    "L96 n=40 3D-Var": (["filter=3dvar", "filter.b_scale=0.05"], 4000),
    # The same filters with A^-1 and A^(-1/2) by matrix products only (filter.transform_solver).
    "L96 n=40 ETKF N=20 NS": (["filter.members=20", "filter.inflation=1.03", "filter.transform_solver=newton_schulz"],
                              4000),
    "L96 n=40 LETKF N=20 NS": (["filter=letkf", "filter.members=20", "filter.radius=4", "filter.inflation=1.02",
                                "filter.transform_solver=newton_schulz"], 1000),
    "L96 n=2000 LETKF N=20 NS": (["filter=letkf", "filter.members=20", "filter.radius=4", "filter.inflation=1.02",
                                  "model.size=2000", "filter.transform_solver=newton_schulz"], 50),
    "L63 SIR N=1000": (L63 + ["filter=sir", "filter.members=1000", "filter.jitter=0.1"], 1000),
}


def package_start(overrides: list) -> dict:
    """The package's initial truth and ensemble, settings and config for ``overrides``."""
    cfg = assimbench.compose_config(overrides)
    plan = resolve(cfg)
    setup, settings = plan.setup, plan.settings
    carry = make_start(setup)(replicate_keys(int(cfg.seed), 1), settings)
    start = {"cfg": cfg, "setup": setup, "truth": np.asarray(carry.truth[0]),
             "ensemble": np.asarray(carry.filter_state.members[0])}
    if cfg.filter.name == "3dvar":
        start["climate_cov"] = np.asarray(climatology(setup.model)[1])
    return start


def package_series(overrides: list, cycles: int) -> dict:
    """A short package run with its truth and observations stored: RMSE series and noise."""
    common = overrides + [f"cycles={cycles}", "burn_in=0", f"chunk_cycles={cycles}", "diagnostics=[]",
                          "store.truth=true", "store.observations=true"]
    with tempfile.TemporaryDirectory() as folder:
        path = os.path.join(folder, "short.h5")
        assimbench.run(common, output=path)
        stored = assimbench.read_result(path)
    cfg = assimbench.compose_config(common)
    noise = (stored.series["observations"][0] - stored.series["truth"][0]) / float(cfg.observation.error_std)
    return {"rmse": stored.series["rmse_analysis"][0], "noise": noise}


def numpy_run(start: dict, noise: np.ndarray) -> np.ndarray:
    """The NumPy twin of a :func:`package_start` over the cycles of ``noise`` (K, n); its analysis RMSE."""
    cfg, setup = start["cfg"], start["setup"]
    dt, steps = float(cfg.model.dt), setup.steps_per_cycle
    error_std = float(cfg.observation.error_std)
    name = cfg.filter.name
    if name == "etkf":
        return numpy_twin.run_etkf(cfg.model.name, start["ensemble"], start["truth"], noise, dt, steps, error_std,
                                   float(cfg.filter.inflation))
    if name == "letkf":
        index, weight = numpy_letkf.windows(int(cfg.model.size), float(cfg.filter.radius))
        return numpy_twin.run_letkf(start["ensemble"], start["truth"], noise, dt, steps, error_std,
                                    float(cfg.filter.inflation), index, weight)
    if name == "3dvar":
        return numpy_twin.run_3dvar(cfg.model.name, start["ensemble"].mean(0), start["truth"], noise, dt, steps,
                                    error_std, float(cfg.filter.b_scale) * start["climate_cov"])
    if name == "sir":
        return numpy_twin.run_sir(start["ensemble"], start["truth"], noise, dt, steps, error_std,
                                  float(cfg.filter.ess_threshold), float(cfg.filter.jitter))
    raise ValueError(f"no NumPy twin for filter {name}")


def flops_per_cycle(cfg, setup) -> float:
    """Rough floating-point work of one cycle: forecast (about 10 flops per variable per RK4
    stage for L96, 15 for L63) plus the analysis (Gram matrix 2 N^2 p, symmetric eigen-
    decomposition about 9 N^3, transforms 4 N^2 n); LETKF per grid point; 3D-Var one
    gain-vector product; SIR the weights only."""
    n, members = setup.model.size, setup.filter.members
    per_variable = 15.0 if cfg.model.name == "lorenz63" else 10.0
    forecast = (members + 1) * n * setup.steps_per_cycle * 4 * per_variable
    name = cfg.filter.name
    if name == "etkf":
        p = setup.operator.size
        return forecast + 2 * members**2 * p + 9 * members**3 + 4 * members**2 * n
    if name == "letkf":
        local = 2 * int(np.ceil(4 * float(cfg.filter.radius))) - 1
        return forecast + n * (2 * members**2 * local + 9 * members**3 + 4 * members**2)
    if name == "3dvar":
        return forecast + 2 * n * n
    return forecast + 4 * members * n


def matmul_rate(size: int = 1000, repeats: int = 5) -> float:
    """Single-core double-precision matrix-multiply rate of this machine, flop/s (NumPy, one thread)."""
    a = np.random.default_rng(0).normal(size=(size, size))
    b = a.T.copy()
    a @ b
    best = min(_timed(lambda: a @ b) for _ in range(repeats))
    return 2.0 * size**3 / best


def _timed(f) -> float:
    tic = time.perf_counter()
    f()
    return time.perf_counter() - tic


def measure(name: str, overrides: list, cycles: int, repeats: int) -> dict:
    short = 20
    series = package_series(overrides, short)
    start = package_start(overrides)
    agree = float(np.max(np.abs(numpy_run(start, series["noise"]) - series["rmse"])))
    common = overrides + [f"cycles={cycles}", "burn_in=0", f"chunk_cycles={cycles}", "diagnostics=[]", "output=null"]
    package, compile_s = [], []
    for _ in range(repeats):
        result = assimbench.run(common)
        package.append(result.microseconds_per_cycle)
        compile_s.append(result.compile_seconds)
    numpy_cycles = max(10, min(cycles // 4, 400))
    noise = np.random.default_rng(1).normal(size=(numpy_cycles, series["noise"].shape[1]))
    baseline = [1e6 * _timed(lambda: numpy_run(start, noise)) / numpy_cycles for _ in range(repeats)]
    work = flops_per_cycle(start["cfg"], start["setup"])
    p, b = statistics.median(package), statistics.median(baseline)
    return {"case": name, "package_us_per_cycle": p, "compile_seconds": statistics.median(compile_s),
            "numpy_us_per_cycle": b, "ratio": b / p, "max_rmse_difference_short_run": agree,
            "flops_per_cycle": work, "package_gflops": work / p / 1e3}


def lanes_case(cycles: int, repeats: int, solver: str = "eigh") -> dict:
    """32 lanes (8 inflations x 4 seeds) of the L96 n=40, 20-member ETKF in one program: microseconds
    per lane-cycle, against the NumPy twin's cycle (32 NumPy runs cost 32 of them)."""
    overrides = ["filter.members=20", f"filter.transform_solver={solver}",
                 "lanes.filter.inflation=[1.0,1.01,1.02,1.03,1.04,1.05,1.07,1.1]",
                 "replicates=4", f"cycles={cycles}", "burn_in=0", f"chunk_cycles={cycles}", "diagnostics=[]",
                 "output=null", "workers=1"]  # one process: benchmarks/lane_speed.py measures workers
    package = statistics.median(assimbench.run(overrides).microseconds_per_cycle / 32 for _ in range(repeats))
    start = package_start(["filter.members=20", "filter.inflation=1.03"])
    noise = np.random.default_rng(1).normal(size=(200, 40))
    baseline = statistics.median(1e6 * _timed(lambda: numpy_run(start, noise)) / 200 for _ in range(repeats))
    name = "L96 ETKF N=20, 32 lanes" + (" NS" if solver == "newton_schulz" else "")
    return {"case": name, "package_us_per_cycle": package, "numpy_us_per_cycle": baseline, "ratio": baseline / package}


def exponent(sizes, times) -> float:
    """Least-squares slope of log(time) against log(size)."""
    return float(np.polyfit(np.log(sizes), np.log(times), 1)[0])


def growth(repeats: int, quick: bool) -> dict:
    """How the per-cycle cost grows with cycles, LETKF state size and ETKF members."""
    def us(overrides, cycles):
        common = overrides + [f"cycles={cycles}", "burn_in=0", f"chunk_cycles={min(cycles, 2000)}",
                              "diagnostics=[]", "output=null"]
        return statistics.median(assimbench.run(common).microseconds_per_cycle for _ in range(repeats))

    cycles = [500, 2000, 8000] if quick else [1000, 4000, 16000]
    per_cycle = [us(["filter.members=20"], k) for k in cycles]
    sizes = [40, 400, 2000]
    letkf = [us(["filter=letkf", "filter.members=20", f"model.size={n}"], max(20, 20000 // n // (4 if quick else 1)))
             for n in sizes]
    members = [10, 20, 40, 80]
    etkf = [us([f"filter.members={m}", "filter.inflation=1.02"], 500 if quick else 2000) for m in members]
    return {
        "cycles": cycles, "us_per_cycle_by_cycles": per_cycle, "exponent_total_time_vs_cycles":
            exponent(cycles, [c * t for c, t in zip(cycles, per_cycle)]),
        "letkf_sizes": sizes, "letkf_us_per_cycle": letkf, "exponent_letkf_vs_size": exponent(sizes, letkf),
        "etkf_members": members, "etkf_us_per_cycle": etkf, "exponent_etkf_vs_members": exponent(members, etkf),
    }


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--json", default=None, help="also write the table as JSON here")
    parser.add_argument("--quick", action="store_true", help="one repeat, a tenth of the cycles")
    parser.add_argument("--cases", nargs="*", default=None, help="a subset of the case names")
    parser.add_argument("--growth", action="store_true", help="also measure how cost grows (cycles, n, N)")
    args = parser.parse_args()
    repeats = 1 if args.quick else args.repeats
    peak = matmul_rate()
    rows = []
    head = f"{'case':<24}{'package us':>12}{'compile s':>11}{'numpy us':>11}{'ratio':>8}{'max dRMSE':>11}" \
           f"{'GFLOP/s':>9}{'of peak':>9}"
    print(f"single-core matmul rate: {peak / 1e9:.1f} GFLOP/s")
    print(head)
    for name, (overrides, cycles) in CASES.items():
        if args.cases and name not in args.cases:
            continue
        row = measure(name, overrides, max(20, cycles // 10) if args.quick else cycles, repeats)
        row["fraction_of_matmul_rate"] = row["package_gflops"] * 1e9 / peak
        rows.append(row)
        agree = "(own RNG)" if "SIR" in name else f"{row['max_rmse_difference_short_run']:.1e}"
        print(f"{name:<24}{row['package_us_per_cycle']:>12.1f}{row['compile_seconds']:>11.2f}"
              f"{row['numpy_us_per_cycle']:>11.1f}{row['ratio']:>8.1f}{agree:>11}"
              f"{row['package_gflops']:>9.2f}{row['fraction_of_matmul_rate']:>9.1%}", flush=True)
    for solver in ("eigh", "newton_schulz") if not args.cases else ():
        row = lanes_case(400 if args.quick else 2000, repeats, solver)
        rows.append(row)
        print(f"{row['case']:<24}{row['package_us_per_cycle']:>12.1f}{'':>11}{row['numpy_us_per_cycle']:>11.1f}"
              f"{row['ratio']:>8.1f}   (per lane-cycle)", flush=True)
    grown = growth(repeats, args.quick) if args.growth else None
    if grown:
        print(f"per-cycle us at {grown['cycles']} cycles: " + ", ".join(f"{t:.1f}" for t in grown["us_per_cycle_by_cycles"])
              + f"; total time ~ cycles^{grown['exponent_total_time_vs_cycles']:.2f}")
        print("LETKF us/cycle at n = 40, 400, 2000: " + ", ".join(f"{t:.0f}" for t in grown["letkf_us_per_cycle"])
              + f"; ~ n^{grown['exponent_letkf_vs_size']:.2f}")
        print("ETKF us/cycle at N = 10, 20, 40, 80: " + ", ".join(f"{t:.0f}" for t in grown["etkf_us_per_cycle"])
              + f"; ~ N^{grown['exponent_etkf_vs_members']:.2f}")
    if args.json:
        with open(args.json + ".partial", "w") as handle:
            json.dump({"matmul_flops_per_second": peak, "cases": rows, "growth": grown}, handle, indent=2)
        os.replace(args.json + ".partial", args.json)


if __name__ == "__main__":
    main()
