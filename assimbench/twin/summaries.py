"""Time means after burn-in with 95% intervals that respect autocorrelation in time.

Method: non-overlapping batch means (e.g. Flegal & Jones 2010, Ann. Stat. 38;
common practice for MCMC output). The T = cycles - burn_in cycles after
burn-in are cut into B contiguous batches; the batch means are close to
independent when a batch is much longer than the autocorrelation time, so the
standard error of the time mean of replicate r is SE_r = sd(batch means) / sqrt(B),
and its interval is mean_r +- t(0.975, B - 1) SE_r. Over R independent
replicates the mean of the replicate means has SE = sqrt(sum_r SE_r^2) / R and
R (B - 1) degrees of freedom.

The accumulator is streamed chunk by chunk, so memory does not grow with the
number of cycles; its sums run strictly in cycle order, so they do not depend
on where the chunks were cut.
"""

import numpy as np
from scipy.special import stdtrit  # Student t quantile; importing scipy.stats costs 0.5 s

DEFAULT_BATCHES = 20


class TimeMeans:
    """Stream (replicates, L) chunks of per-cycle series into batch sums after burn-in."""

    def __init__(self, replicates: int, cycles: int, burn_in: int, batches: int = DEFAULT_BATCHES,
                 gapped=frozenset()):
        """``gapped``: series undefined (NaN) on some cycles, e.g. the innovation statistics of a cycle
        without a reporting station; their means are over the cycles where they are defined (for any
        other series a NaN stays NaN, the mark of a run that blew up)."""
        self.gapped = frozenset(gapped)
        self.counts: dict = {}
        self.replicates = replicates
        self.burn_in = burn_in
        length = cycles - burn_in
        self.batches = max(1, min(batches, length))
        self.edges = np.linspace(0, length, self.batches + 1).round().astype(np.int64)
        self.sizes = np.diff(self.edges)
        self.sums: dict = {}

    def add(self, name: str, values: np.ndarray, first_cycle: int) -> None:
        """values: (replicates, L) for cycles first_cycle .. first_cycle + L - 1, or
        (replicates, L, k) for counts, which are summed per replicate (no batches)."""
        position = first_cycle + np.arange(values.shape[1]) - 1 - self.burn_in  # 0-based after burn-in
        keep = position >= 0
        if not keep.any():
            return
        if values.ndim == 3:
            total = values[:, keep].sum(axis=1)
            self.sums[name] = self.sums.get(name, 0) + total
            return
        batch = np.searchsorted(self.edges, position[keep], side="right") - 1
        sums = self.sums.setdefault(name, np.zeros((self.replicates, self.batches)))
        kept = values[:, keep]
        if name in self.gapped:
            defined = np.isfinite(kept)
            counts = self.counts.setdefault(name, np.zeros((self.replicates, self.batches)))
            for b in np.unique(batch):
                counts[:, b] += defined[:, batch == b].sum(axis=1)
            kept = np.where(defined, kept, 0.0)
        # Strictly sequential sums in cycle order (cumsum continues from the running sum),
        # so the result is the same to the bit however the cycles were cut into chunks.
        for b in np.unique(batch):
            segment = kept[:, batch == b]
            sums[:, b] = np.cumsum(np.concatenate([sums[:, b : b + 1], segment], axis=1), axis=1)[:, -1]

    def totals(self, name: str) -> np.ndarray:
        """Summed counts after burn-in, (replicates, k)."""
        return self.sums[name]

    def summarise(self, name: str) -> dict:
        """Per-replicate means and half-widths, and the overall mean with its interval."""
        out = self.summarise_groups(name, 1)
        return {**out, "mean": float(out["mean"][0]), "low": float(out["low"][0]), "high": float(out["high"][0])}

    def summarise_groups(self, name: str, groups: int) -> dict:
        """As :meth:`summarise`, with the replicates split into ``groups`` equal
        consecutive groups (lanes): mean, low, high are (groups,) arrays, each
        over the replicates of its group."""
        if name in self.counts:  # a gapped series: over the cycles where it is defined
            with np.errstate(invalid="ignore", divide="ignore"):
                batch_means = self.sums[name] / self.counts[name]  # (R, B)
                per_replicate = self.sums[name].sum(axis=1) / self.counts[name].sum(axis=1)
        else:
            batch_means = self.sums[name] / self.sizes  # (R, B)
            per_replicate = self.sums[name].sum(axis=1) / self.sizes.sum()
        size = self.replicates // groups
        if self.batches > 1:
            se = batch_means.std(axis=1, ddof=1) / np.sqrt(self.batches)
            half = stdtrit(self.batches - 1, 0.975) * se
            overall_se = np.sqrt(np.sum(se.reshape(groups, size) ** 2, axis=1)) / size
            overall_half = stdtrit(size * (self.batches - 1), 0.975) * overall_se
        else:
            half = np.full(self.replicates, np.nan)
            overall_half = np.full(groups, np.nan)
        mean = per_replicate.reshape(groups, size).mean(axis=1)
        return {
            "per_replicate": per_replicate,
            "per_replicate_halfwidth": half,
            "mean": mean,
            "low": mean - overall_half,
            "high": mean + overall_half,
        }


def batch_count(cycles: int, burn_in: int, batches: int = DEFAULT_BATCHES) -> int:
    """The number of batches :class:`TimeMeans` cuts ``cycles - burn_in`` cycles into."""
    return max(1, min(batches, cycles - burn_in))


def pooled_interval(means: np.ndarray, halfwidths: np.ndarray, batches: int) -> tuple:
    """(mean, low, high) over independent replicates from their time means and half-widths.

    The same rule as :meth:`TimeMeans.summarise`, recovered from what a result
    file stores: SE_r = halfwidth_r / t(0.975, B - 1), SE = sqrt(sum_r SE_r^2) / R,
    interval mean +- t(0.975, R (B - 1)) SE. Used to pool replicates of
    several runs (seeds) that share everything but the truth's draw.
    """
    means, halfwidths = np.asarray(means, float), np.asarray(halfwidths, float)
    mean = float(means.mean())
    if batches < 2:
        return mean, float("nan"), float("nan")
    se = halfwidths / stdtrit(batches - 1, 0.975)
    half = float(stdtrit(means.size * (batches - 1), 0.975) * np.sqrt(np.sum(se**2)) / means.size)
    return mean, mean - half, mean + half


def batch_means_interval(series: np.ndarray, batches: int = DEFAULT_BATCHES):
    """(mean, low, high) of one 1-D series by batch means; the same rule as TimeMeans."""
    acc = TimeMeans(1, series.shape[0], 0, batches)
    acc.add("x", series[None, :], 1)
    out = acc.summarise("x")
    return out["mean"], out["low"], out["high"]


def update_lost_runs(above: np.ndarray, previous: np.ndarray, patience: int):
    """Consecutive-cycle counts of a condition, streamed over chunks.

    above: (R, L) bool for the chunk's cycles; previous: (R,) length of the run
    still open at the end of the last chunk. Returns (first index in the chunk
    at which a run reaches ``patience`` or -1, the index where that run
    started, possibly negative = in an earlier chunk; open run lengths (R,)).
    """
    n = np.arange(above.shape[1])
    last_false = np.maximum.accumulate(np.where(~above, n[None, :], -1), axis=1)
    run = np.where(last_false < 0, n[None, :] + 1 + previous[:, None], n[None, :] - last_false)
    run = np.where(above, run, 0)
    reached = run >= patience
    hit = np.where(reached.any(axis=1), np.argmax(reached, axis=1), -1)
    start = np.where(hit >= 0, hit - patience + 1, -1)
    return hit, start, run[:, -1]
