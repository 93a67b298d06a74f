"""Per-cycle cost of the methods beyond the baselines, each against the baseline it extends.

4D-Var against 3D-Var (same static B) for several windows, and the finite-size
EnKF, the adaptive-inflation ETKF and the IEnKS (windows 1 and 3) against the
plain ETKF, the 3DEnVar against the LETKF whose perturbation update it uses, the
4DEnVar against the 3DEnVar and hybrid 4D-Var against 4D-Var, and the ETKF,
LETKF and 4D-Var with correlated observation errors (whitening; the LETKF's
local blocks) or station outages (masks) against the same filter on the plain
network, on the demo ring (Lorenz-96 n=40, all observed every 0.05, 20
members). Median of repeated runs, compile time excluded; ratios are measured
in the same run. The IEnKS rows also give the mean Gauss-Newton steps and the
forecast-model integrations per cycle in member-intervals (an ETKF cycle: 20).

    python benchmarks/method_cost.py [--repeats 3] [--cycles 400]
"""

import argparse
import statistics

import assimbench


def microseconds(overrides, cycles, repeats):
    """(median us per cycle, compile seconds, 'steps, member-intervals' or '') of repeated runs."""
    diagnostics = "diagnostics=[iterations]" if "filter=ienks" in overrides else "diagnostics=[]"
    runs = [assimbench.run(list(overrides) + [f"cycles={cycles}", "burn_in=10", diagnostics]) for _ in range(repeats)]
    s = runs[0].summary
    work = f"{s['iterations']:.2f}, {s['model_integrations']:.0f}" if "iterations" in s else ""
    return statistics.median(r.microseconds_per_cycle for r in runs), runs[0].compile_seconds, work


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--cycles", type=int, default=400)
    args = parser.parse_args()
    pairs = [
        ("3dvar", ["filter=3dvar"], None),
        ("4dvar window 1", ["filter=4dvar", "filter.window=1"], "3dvar"),
        ("4dvar window 3", ["filter=4dvar", "filter.window=3"], "3dvar"),
        ("4dvar window 5", ["filter=4dvar", "filter.window=5"], "3dvar"),
        ("etkf", ["filter=etkf"], None),
        ("enkfn", ["filter=enkfn"], "etkf"),
        ("etkf adaptive", ["filter=etkf", "filter.adaptive=true"], "etkf"),
        ("ienks window 1", ["filter=ienks"], "etkf"),
        ("ienks window 3", ["filter=ienks", "filter.window=3", "filter.inflation=1.02"], "etkf"),
        ("letkf", ["filter=letkf", "filter.radius=4"], None),
        ("3denvar", ["filter=3denvar", "filter.members=20", "filter.radius=4"], "letkf"),
        ("4denvar window 3", ["filter=4denvar", "filter.members=20", "filter.window=3"], "3denvar"),
        ("4dvar hybrid w3", ["filter=4dvar", "filter.members=20", "filter.ensemble_weight=0.5", "filter.radius=4",
                             "filter.window=3"], "4dvar window 3"),
        ("etkf correlated R", ["filter=etkf", "observation.correlation_length=2"], "etkf"),
        ("etkf outages", ["filter=etkf", "observation.outage_probability=0.2"], "etkf"),
        ("letkf correlated R", ["filter=letkf", "filter.radius=4", "observation.correlation_length=2"], "letkf"),
        ("letkf outages", ["filter=letkf", "filter.radius=4", "observation.outage_probability=0.2"], "letkf"),
        ("4dvar w3 corr. R", ["filter=4dvar", "filter.window=3", "observation.correlation_length=2"], "4dvar window 3"),
    ]
    measured = {}
    print(f"{'method':<18}{'us/cycle':>10}{'compile s':>11}{'x baseline':>12}   steps, member-intervals")
    for name, overrides, baseline in pairs:
        cycles = args.cycles // 4 if name.startswith("4dvar") else args.cycles
        measured[name], compile_seconds, work = microseconds(overrides, cycles, args.repeats)
        ratio = f"{measured[name] / measured[baseline]:.1f}" if baseline else "-"
        print(f"{name:<18}{measured[name]:>10.0f}{compile_seconds:>11.1f}{ratio:>12}   {work}", flush=True)


if __name__ == "__main__":
    main()
