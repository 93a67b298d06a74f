"""Analyses every k-th cycle only: a filter that uses only the analysis-time observations.

With ``analysis_every=k`` the cycle still forecasts and observes every
interval, but a filter analyses only at cycles k, 2k, 3k, ...; in between its
members are the forecast, and the observations of those cycles are not used.
On the same truths and observations, a window method that analyses every k
cycles with all of them (the IEnKS with ``shift=k``) can then be compared with
a filter that sees only the observation at each analysis time.

On a cycle without an analysis, the filter's info reports no Gauss-Newton
steps and no extra integrations, an inflation factor of 1 (nothing was
inflated) and the effective sample size of the weights it carries; the
analysis diagnostics are those of the forecast, and the Desroziers
statistics (which need an analysis) leave those cycles out.
"""

from typing import NamedTuple

import jax
import jax.numpy as jnp

from assimbench.filters.base import Filter


class SparseState(NamedTuple):
    """members (N, n); cycle: cycles done (int32); inner: the wrapped filter's state."""

    members: jax.Array
    cycle: jax.Array
    inner: tuple

    @property
    def log_weights(self):
        return self.inner.log_weights  # AttributeError for an unweighted filter, as getattr expects


def _no_analysis_info(shapes, inner):
    """What a cycle without an analysis reports, shaped as the analysis' info (``shapes``)."""
    info = jax.tree.map(lambda s: jnp.zeros(s.shape, s.dtype), shapes)
    if "inflation" in info:
        info["inflation"] = jnp.ones_like(info["inflation"])
    if "ess" in info:
        info["ess"] = (1.0 / jnp.sum(jnp.exp(2.0 * inner.log_weights))).astype(info["ess"].dtype)
    return info


def every_kth_analysis(filt: Filter, every: int) -> Filter:
    """``filt`` analysing at cycles every, 2 every, ... only (module docstring)."""
    if every < 1:
        raise ValueError(f"analyses every k >= 1 cycles, got {every}")

    def init(key, initial_ensemble, settings):
        inner = filt.init(key, initial_ensemble, settings)
        return SparseState(members=inner.members, cycle=jnp.asarray(0, jnp.int32), inner=inner)

    def analyse(key, state, y, settings):
        cycle = state.cycle + 1
        inner = state.inner._replace(members=state.members)
        run = lambda _: filt.analyse(key, inner, y, settings)
        shapes = jax.eval_shape(run, None)[1]
        skip = lambda _: (inner, _no_analysis_info(shapes, inner))
        analysing = cycle % every == 0
        analysed, info = jax.lax.cond(analysing, run, skip, None)
        # The diagnostics leave a cycle without an analysis out of the Desroziers statistics.
        info = {**info, "analysed": analysing.astype(jnp.float64)}
        return SparseState(members=analysed.members, cycle=cycle, inner=analysed), info

    return filt._replace(init=init, analyse=analyse, analyse_lagged=None)
