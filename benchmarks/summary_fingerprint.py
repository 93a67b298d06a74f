"""Summaries of the demo, every published card (short form) and one run of every code path, as JSON.

A change that should not move the numbers (a restructure, a speed-up that keeps the arithmetic)
is checked by running this before and after and comparing the files:

    python benchmarks/summary_fingerprint.py before.json      # on the old commit
    python benchmarks/summary_fingerprint.py after.json       # on the new one
    python benchmarks/summary_fingerprint.py --compare before.json after.json

Floats are stored with their exact repr, so "identical" means bit for bit. About 5 minutes on 2 cores.
"""

import argparse
import json
import os
import sys

import numpy as np

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
SHORT = ["cycles=300", "burn_in=50", "replicates=2", "chunk_cycles=128"]
PATHS = {
    "etkf_rtps_additive_rtpp": ["filter.rtps=0.5", "filter.additive_std=0.05", "filter.rtpp=0.1"],
    "etkf_adaptive": ["filter.adaptive=true", "filter.inflation=1.05"],
    "letkf_adaptive": ["filter=letkf", "filter.adaptive=true"],
    "letkf_lanes": ["filter=letkf", "lanes.filter.radius=[2,4]", "lanes.filter.inflation=[1.02,1.06]"],
    "ensrf": ["filter=ensrf", "observation=every_other_station"],
    "enkf": ["filter=enkf"],
    "enkfn": ["filter=enkfn"],
    "3dvar": ["filter=3dvar"],
    "4dvar": ["filter=4dvar", "cycles=120", "burn_in=20"],
    "sir_l63": ["model=lorenz63", "filter=sir", "filter.members=200", "observation.interval=0.1"],
    "free": ["filter=free"],
    "climatology": ["filter=climatology"],
    "imperfect_forcing_lanes": ["forecast_model=lorenz96", "forecast_model.forcing=7.5",
                                "lanes.forecast_model.forcing=[7.5,8]"],
    "two_scale_closure": ["model=lorenz96_two_scale", "forecast_model=lorenz96_closure", "cycles=150", "burn_in=20"],
    "kuramoto_sivashinsky": ["model=kuramoto_sivashinsky", "observation.interval=1.0", "filter=letkf",
                             "observation.stride=2", "cycles=150", "burn_in=20"],
    "truth_noise_error_lanes": ["truth_noise_std=0.1", "lanes.observation.error_std=[0.5,1.0]",
                                "lanes.initial_spread=[1,2]"],
    "transform": ["observation.transform=absolute", "filter.inflation=1.1"],
}


def cases() -> dict:
    from assimbench.reproduction import load_cards

    out = {"demo": []}
    for name, card in load_cards(os.path.join(ROOT, "experiments", "published")).items():
        spec = card.lengths["short"]
        out["card_" + name] = card.overrides + [f"cycles={spec['cycles']}", f"burn_in={spec['burn_in']}",
                                                f"replicates={spec['replicates']}"]
    out.update({name: SHORT + overrides for name, overrides in PATHS.items()})
    return out


def fingerprint() -> dict:
    import assimbench

    out = {}
    for name, overrides in cases().items():
        result = assimbench.run(overrides + ["output=null"])
        out[name] = {"summary": {k: np.asarray(v).tolist() for k, v in result.summary.items()},
                     "first_bad_cycle": np.asarray(result.first_bad_cycle).tolist()}
        print(f"{name:<28} analysis RMSE {out[name]['summary']['rmse_analysis']}", flush=True)
    return out


def compare(before: str, after: str) -> int:
    with open(before) as a, open(after) as b:
        old, new = json.load(a), json.load(b)
    moved = [name for name in old if old[name] != new.get(name)]
    print(f"{len(old) - len(moved)} of {len(old)} cases identical" + (f"; moved: {', '.join(moved)}" if moved else ""))
    return 1 if moved else 0


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("files", nargs="+", help="the JSON file to write, or two files with --compare")
    parser.add_argument("--compare", action="store_true", help="compare two fingerprints")
    args = parser.parse_args()
    if args.compare:
        return compare(*args.files)
    result = fingerprint()
    with open(args.files[0], "w") as handle:
        json.dump(result, handle, indent=1, sort_keys=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
