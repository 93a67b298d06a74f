"""Check runs: the main command at the starting and at the learned values, on the study's seeds and
on fresh ones.

A gradient through truncated windows sees a filter losing the truth only in the windows where it
happens, so a setting that is cheap in most windows (little inflation) can be learned right at the
edge of divergence. The check runs say so: the analysis RMSE with its 95% interval, the innovation
ratio (mean squared innovation over the predicted variance: about 1 for a consistent filter) and the
replicates lost (blown up, or no better than the observations, as the tuner counts them), at the
start and at the learned values, each on the study's seeds and on fresh truths and observations (the
seed + 1), with warnings where the learned values did worse than the start on fresh seeds or lost a
replicate the start kept.
"""

import math

from assimbench.tuning.study import standalone_run

CHECKS = (("start", "start", 0), ("start, fresh seeds", "start", 1), ("learned", "learned", 0),
          ("learned, fresh seeds", "learned", 1))


def check_run(cfg, values: dict, seed_shift: int = 0) -> dict:
    """One run of ``cfg`` with ``values`` (config path -> number) and the seed moved by ``seed_shift``:
    its analysis RMSE (mean, low, high), innovation ratio and lost replicates."""
    result, one, lost = standalone_run(cfg, values, seed_shift)
    summary = result.summary
    return {"seed": int(one.seed), "rmse_analysis": summary["rmse_analysis"],
            "rmse_analysis_low": summary.get("rmse_analysis_low", math.nan),
            "rmse_analysis_high": summary.get("rmse_analysis_high", math.nan),
            "innovation_ratio": summary.get("innovation_ratio", math.nan), "lost": lost,
            "replicates": int(one.replicates)}


def check_runs(cfg, keys: list, start, learned) -> list:
    """The check runs of :data:`CHECKS`, each a dict with its label and values."""
    rows = []
    for label, which, shift in CHECKS:
        values = dict(zip(keys, start if which == "start" else learned))
        rows.append({"check": label, **{k: float(v) for k, v in values.items()}, **check_run(cfg, values, shift)})
    return rows


def check_warnings(checks: list) -> list:
    """Warnings from the check runs of :func:`check_runs` (by label): the learned values lose replicates
    the start kept (at the edge of divergence), or analyse worse than the start on fresh seeds beyond
    both intervals (the truncated gradient pointed the wrong way, or fitted the study's seeds)."""
    rows = {row["check"]: row for row in checks}
    out = []
    start_lost = rows["start"]["lost"] + rows["start, fresh seeds"]["lost"]
    learned_lost = rows["learned"]["lost"] + rows["learned, fresh seeds"]["lost"]
    if learned_lost and not start_lost:
        out.append("WARNING: the learned values lose the truth in replicates the start kept: the gradient went to "
                   "the edge of divergence, which truncated windows see only where it happens; a safer value lies "
                   "between the start and the learned one (assimbench-tune keeps every replicate)")
    elif learned_lost:
        out.append("WARNING: the learned values still lose the truth in some replicate (the start did too): the fit "
                   "has not reached values where the filter keeps the truth; more steps, or start nearer")
    fresh_start, fresh_learned = rows["start, fresh seeds"], rows["learned, fresh seeds"]
    if fresh_learned["rmse_analysis_low"] > fresh_start["rmse_analysis_high"]:
        out.append("WARNING: on fresh seeds the learned values analyse worse than the start (analysis RMSE "
                   f"{fresh_learned['rmse_analysis']:.4f} against {fresh_start['rmse_analysis']:.4f}): the truncated "
                   "gradient pointed the wrong way here, or the fit followed the study's own seeds; keep the start, "
                   "or try another learn.window (learn.mode=windows) and more cycles")
    return out
