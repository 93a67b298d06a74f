"""Demo study: what does it cost when half the coastal ring fails for days at a time?

Our scenario: the ring of 40 coastal stations (Lorenz-96, n=40, F=8) read
every six hours (0.05 time units), R = I, a 20-member LETKF. Three networks on
the same truths and observation draws (same seeds, so differences are paired):

  all reporting     every station, every cycle;
  half ring down    stations 0-19 all out together for --spell cycles, every
                    --period cycles (a scheduled outage: by default 3 days of
                    every 10);
  same share,       every station out at random, each on its own, in spells
  scattered         of --spell cycles on average (a two-state Markov chain),
                    with the same share of missing observations as above.

The table gives the time-mean analysis RMSE per network with 95% intervals
over replicates, the paired difference to "all reporting", and for the half
ring the RMSE inside and outside its outage blocks. A figure of the analysis
error through a few outage blocks and of the stations reporting goes to --out.

    python experiments/failed_stations.py --replicates 4 --cycles 4000 --out failed_stations
"""

import argparse
import os

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from scipy import stats  # noqa: E402

import assimbench  # noqa: E402
from assimbench.report.figures import OKABE_ITO  # noqa: E402

FILTER = ["filter=letkf", "filter.members=20", "filter.radius=4", "filter.inflation=1.04"]
HALF = list(range(20))


def interval(values: np.ndarray) -> tuple:
    """Mean and 95% Student-t half-width over replicates."""
    half = stats.t.ppf(0.975, values.size - 1) * values.std(ddof=1) / np.sqrt(values.size)
    return float(values.mean()), float(half)


def blocks(cycles: int, period: int, spell: int, first: int) -> list:
    """The half ring's outage blocks: ``spell`` cycles out of every ``period``, from cycle ``first``."""
    return [(k, min(k + spell - 1, cycles)) for k in range(first, cycles + 1, period)]


def schedule_override(outages: list) -> str:
    stations = "[" + ",".join(map(str, HALF)) + "]"
    entries = ",".join(f"{{first_cycle:{a},last_cycle:{b},stations:{stations}}}" for a, b in outages)
    return f"observation.outage_schedule=[{entries}]"


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replicates", type=int, default=4)
    parser.add_argument("--cycles", type=int, default=4000)
    parser.add_argument("--burn-in", type=int, default=500)
    parser.add_argument("--period", type=int, default=40, help="cycles from the start of one outage to the next")
    parser.add_argument("--spell", type=int, default=12, help="cycles each outage lasts")
    parser.add_argument("--out", default="failed_stations", help="folder for the figure")
    args = parser.parse_args()
    if args.replicates < 2 or not 0 < args.spell < args.period or args.burn_in >= args.cycles:
        parser.error("need --replicates >= 2, 0 < --spell < --period and --burn-in < --cycles")
    common = FILTER + [f"replicates={args.replicates}", f"cycles={args.cycles}", f"burn_in={args.burn_in}",
                       "diagnostics=[]", "output=null"]
    outages = blocks(args.cycles, args.period, args.spell, first=args.period // 2)
    share = 0.5 * args.spell / args.period
    networks = {
        "all reporting": [],
        "half ring down": [schedule_override(outages)],
        "same share, scattered": [f"observation.outage_probability={share}", f"observation.outage_spell={args.spell}"],
    }
    runs = {name: assimbench.run(common + extra) for name, extra in networks.items()}
    series = {name: np.asarray(run.series["rmse_analysis"]) for name, run in runs.items()}  # (replicates, cycles)
    kept = slice(args.burn_in, None)
    means = {name: s[:, kept].mean(axis=1) for name, s in series.items()}
    inside = np.zeros(args.cycles, dtype=bool)
    for a, b in outages:
        inside[a - 1:b] = True

    print(f"coastal ring, 40 stations, LETKF 20 members; half ring out {args.spell} of every {args.period} cycles "
          f"(share of missing observations {share:.0%}); {args.replicates} replicates x {args.cycles} cycles, "
          f"burn-in {args.burn_in}")
    print(f"{'network':<24}{'analysis RMSE (95%)':>22}{'minus all reporting':>24}")
    for name in networks:
        mean, half = interval(means[name])
        diff = "" if name == "all reporting" else "{:+.4f} +- {:.4f}".format(*interval(means[name] - means["all reporting"]))
        print(f"{name:<24}{mean:>13.4f} +- {half:.4f}{diff:>24}")
    down = series["half ring down"]
    during = down[:, kept][:, inside[kept]].mean(axis=1)
    between = down[:, kept][:, ~inside[kept]].mean(axis=1)
    print("half ring down: RMSE {:.4f} +- {:.4f} during its outages, {:.4f} +- {:.4f} between them".format(
        *interval(during), *interval(between)))

    os.makedirs(args.out, exist_ok=True)
    shown = slice(args.burn_in, min(args.cycles, args.burn_in + 4 * args.period))
    cycles = np.arange(1, args.cycles + 1)[shown]
    figure, (top, bottom) = plt.subplots(2, 1, figsize=(9, 6), sharex=True, height_ratios=(2, 1))
    for axis in (top, bottom):
        for a, b in outages:
            if a <= cycles[-1] and b >= cycles[0]:
                axis.axvspan(a - 0.5, b + 0.5, color="0.88", lw=0)
    colours = (OKABE_ITO["blue"], OKABE_ITO["vermillion"], OKABE_ITO["bluish green"])
    for name, colour in zip(networks, colours):
        top.plot(cycles, series[name][0, shown], color=colour, lw=1.2, label=name)
        seen = (np.asarray(runs[name].series["stations_seen"])[0, shown] if name != "all reporting"
                else np.full(cycles.size, 40.0))
        # Whole stations per cycle: steps; the full ring dashed so the half ring's 40 shows beneath it.
        bottom.plot(cycles, seen, color=colour, lw=1.2, drawstyle="steps-mid",
                    ls="--" if name == "all reporting" else "-", zorder=3 if name == "all reporting" else 2)
    top.set_ylabel("analysis RMSE")
    top.set_xlim(cycles[0] - 0.5, cycles[-1] + 0.5)
    top.set_ylim(0, None)
    figure.suptitle("Coastal ring, the first replicate: grey bands are the half ring's scheduled outages",
                    fontsize=10)
    figure.legend(*top.get_legend_handles_labels(), loc="upper center", ncol=3, fontsize=8, frameon=False,
                  bbox_to_anchor=(0.5, 0.955))
    bottom.set_ylabel("stations reporting")
    bottom.set_ylim(0, 44)
    bottom.set_xlabel("cycle (6 hours each)")
    figure.tight_layout(rect=(0, 0, 1, 0.93))
    path = os.path.join(args.out, "failed_stations.png")
    figure.savefig(path + ".tmp.png", dpi=110)
    os.replace(path + ".tmp.png", path)  # never a half-written figure under the final name
    print(f"figure: {path}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
