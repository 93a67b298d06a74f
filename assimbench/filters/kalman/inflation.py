"""Inflation pieces, composable with every ensemble filter.

Conventions of the whole package:
- ``filter.inflation`` multiplies the prior anomalies (deviations from the
  ensemble mean), so the prior covariance grows by its square (Anderson &
  Anderson 1999, Mon. Wea. Rev. 127).
- ``filter.additive_std`` adds centred N(0, additive_std^2 I) perturbations to
  the prior members (the ensemble mean is unchanged; the expected prior
  covariance grows by additive_std^2 I).
- ``filter.rtpp`` relaxes the posterior anomalies to the prior ones (Zhang,
  Snyder & Sun 2004, Mon. Wea. Rev. 132): x'_a <- (1 - alpha) x'_a + alpha x'_b.
- ``filter.rtps`` relaxes the posterior spread to the prior spread (Whitaker &
  Hamill 2012, Mon. Wea. Rev. 140, eq. 3):
  x'_a <- x'_a [alpha (sigma_b - sigma_a) / sigma_a + 1], per variable.
Order in one analysis: multiplicative, additive, the filter's update, RTPP,
RTPS; "prior" means the ensemble after the prior-side pieces.
"""

from dataclasses import dataclass

import jax
import jax.numpy as jnp

from assimbench.config.spec import NodeChecks, floats
from assimbench.filters.base import EnsembleState, Filter, keep_ensemble


def inflate_anomalies(members: jax.Array, factor) -> jax.Array:
    """x_i <- xbar + factor (x_i - xbar); members (N, n)."""
    mean = members.mean(axis=0)
    return mean + factor * (members - mean)


def add_centred_noise(key, members: jax.Array, std, draws=None) -> jax.Array:
    """x_i <- x_i + std (e_i - ebar), e_i ~ N(0, I) drawn from ``key`` (or the given ``draws``);
    members (N, n)."""
    noise = jax.random.normal(key, members.shape) if draws is None else draws
    return members + std * (noise - noise.mean(axis=0))


def relax_to_prior_perturbations(prior: jax.Array, posterior: jax.Array, alpha) -> jax.Array:
    """RTPP: x'_a <- (1 - alpha) x'_a + alpha x'_b, mean unchanged; (N, n) each."""
    mean = posterior.mean(axis=0)
    return mean + (1.0 - alpha) * (posterior - mean) + alpha * (prior - prior.mean(axis=0))


def relax_to_prior_spread(prior: jax.Array, posterior: jax.Array, alpha) -> jax.Array:
    """RTPS: x'_a <- x'_a [alpha (sigma_b - sigma_a) / sigma_a + 1] per variable; (N, n) each."""
    mean = posterior.mean(axis=0)
    sigma_a = jnp.std(posterior, axis=0, ddof=1)
    sigma_b = jnp.std(prior, axis=0, ddof=1)
    # A variable with no posterior spread has nothing to scale; leave it.
    factor = jnp.where(sigma_a > 0, alpha * (sigma_b - sigma_a) / jnp.where(sigma_a > 0, sigma_a, 1.0) + 1.0, 1.0)
    return mean + factor * (posterior - mean)


PIECES = ("additive", "rtpp", "rtps")


def riding_along(update):
    """``global_update(key, prior, columns, y, settings) -> (posterior, columns, info)`` for a filter
    without localization: the columns (N, q) are appended to the state and transformed with it."""

    def global_update(key, prior, columns, y, settings):
        size = prior.shape[1]
        both, info = update(key, jnp.concatenate([prior, columns], axis=1), y, settings)
        return both[:, :size], both[:, size:], info

    return global_update


def with_inflation(update, pieces=frozenset(), global_update=None):
    """Wrap ``update(key, prior, y, settings) -> (posterior, info)`` with the inflation pieces.

    Multiplicative inflation (``settings["filter"]["inflation"]``) is always
    applied; ``pieces`` names the others switched on for this job (a subset of
    "additive", "rtpp", "rtps"). They are chosen when the job is built so a
    job that does not use them does not pay for them; their strengths are
    traced (``additive_std``, ``rtpp``, ``rtps``).

    The wrapped ``analyse(key, members, y, settings, lagged=None)`` returns
    (posterior, info), or with ``lagged`` (N, m), columns of earlier states
    that ``update`` transforms beside the members (a fixed-lag smoother),
    (posterior, lagged posterior, info): the pieces act on the members only,
    since inflation stands for the current forecast's missing spread. With ``parameters`` (N, q),
    global columns every analysis updates with the members' weights (``global_update``, by default
    :func:`riding_along`), it returns (posterior, parameters posterior, info); again no piece acts on
    them (their spread is kept by assimbench/estimation).
    """
    unknown = set(pieces) - set(PIECES)
    if unknown:
        raise ValueError(f"unknown inflation pieces {sorted(unknown)}; known: {PIECES}")

    global_update = riding_along(update) if global_update is None else global_update

    def analyse(key, members, y, settings, lagged=None, parameters=None):
        f = settings["filter"]
        prior = inflate_anomalies(members, f["inflation"])
        update_key = key
        if "additive" in pieces:  # split only when needed: a split costs a threefry call per cycle
            noise_key, update_key = jax.random.split(key)
            prior = add_centred_noise(noise_key, prior, f["additive_std"])
        if parameters is not None:
            posterior, lagged, info = global_update(update_key, prior, parameters, y, settings)
        elif lagged is None:
            posterior, info = update(update_key, prior, y, settings)
        else:
            size = members.shape[1]
            both, info = update(update_key, jnp.concatenate([prior, lagged], axis=1), y, settings)
            posterior, lagged = both[:, :size], both[:, size:]
        if "rtpp" in pieces:
            posterior = relax_to_prior_perturbations(prior, posterior, f["rtpp"])
        if "rtps" in pieces:
            posterior = relax_to_prior_spread(prior, posterior, f["rtps"])
        return (posterior, info) if lagged is None else (posterior, lagged, info)

    return analyse


def steps_with_inflation(update_steps, pieces=frozenset()):
    """The step record (reference vectors: assimbench/vectors) of :func:`with_inflation` around an
    update: ``steps(key, state, y, settings) -> dict`` with the additive draws when that piece is on,
    the prior ensemble the update sees, ``update_steps(key, prior, y, settings)``'s record, the
    update's analysis before relaxation when RTPP or RTPS is on, and the analysis ensemble. The same
    random keys as :func:`with_inflation`, so the record is the filter's own analysis."""

    def steps(key, state, y, settings):
        f = settings["filter"]
        prior = inflate_anomalies(state.members, f["inflation"])
        record = {}
        update_key = key
        if "additive" in pieces:
            noise_key, update_key = jax.random.split(key)
            record["additive_draws"] = jax.random.normal(noise_key, prior.shape)
            prior = add_centred_noise(noise_key, prior, f["additive_std"], record["additive_draws"])
        record["prior_ensemble"] = prior
        record.update(update_steps(update_key, prior, y, settings))
        posterior = record.pop("analysis_ensemble")
        if "rtpp" in pieces or "rtps" in pieces:
            record["update_ensemble"] = posterior
        if "rtpp" in pieces:
            posterior = relax_to_prior_perturbations(prior, posterior, f["rtpp"])
        if "rtps" in pieces:
            posterior = relax_to_prior_spread(prior, posterior, f["rtps"])
        record["analysis_ensemble"] = posterior
        return record

    return steps


def ensemble_filter(name: str, members: int, update, pieces=frozenset(), reports_inflation: bool = False,
                    global_update=None) -> Filter:
    """A Filter from ``update(key, prior, y, settings) -> (posterior, info)`` on (N, n) arrays,
    with every inflation piece of this module composed around it. ``update`` must take states of
    any width whose first n columns are the model state (the observation operator reads only
    those): the lagged columns of a fixed-lag smoother ride along (``Filter.analyse_lagged``), and
    so do estimated parameters (``Filter.analyse_augmented``) unless the filter localizes and gives
    its own ``global_update`` (see :func:`with_inflation`)."""
    analyse_members = with_inflation(update, pieces, global_update)

    def analyse(key, state, y, settings):
        posterior, info = analyse_members(key, state.members, y, settings)
        return EnsembleState(members=posterior), info

    def analyse_lagged(key, state, lagged, y, settings):
        posterior, lagged, info = analyse_members(key, state.members, y, settings, lagged)
        return EnsembleState(members=posterior), lagged, info

    def analyse_augmented(key, state, parameters, y, settings):
        posterior, parameters, info = analyse_members(key, state.members, y, settings, parameters=parameters)
        return EnsembleState(members=posterior), parameters, info

    return Filter(name=name, members=members, init=keep_ensemble, analyse=analyse,
                  reports_inflation=reports_inflation, analyse_lagged=analyse_lagged,
                  analyse_augmented=analyse_augmented)


@dataclass
class InflationConfig:
    """Ensemble size and the inflation pieces shared by every ensemble Kalman filter.

    inflation multiplies the prior anomalies; additive_std is the standard
    deviation of centred additive noise (state units); rtpp and rtps are the
    relaxation coefficients to prior perturbations and to prior spread (0: off).
    """

    members: int = 20
    inflation: float = 1.03
    additive_std: float = 0.0
    rtpp: float = 0.0
    rtps: float = 0.0


# The traced keys of the pieces (lane keys); the last three are built from their largest lane
# value, so a piece is switched on when any lane uses it.
INFLATION_KEYS = ("inflation", "additive_std", "rtpp", "rtps")
WIDEST = ("additive_std", "rtpp", "rtps")


def check_inflation(c: NodeChecks) -> None:
    """Ranges of the members and the inflation pieces."""
    c.integer("members", 2, "an integer >= 2")
    c.real("inflation", "a finite factor >= 1 (1 = no inflation)", minimum=1.0, strict=False)
    c.real("additive_std", "a finite standard deviation >= 0 (0 = off)", minimum=0.0, strict=False)
    c.in_range("rtpp", 0.0, 1.0, "a coefficient from 0 (off) to 1")
    c.in_range("rtps", 0.0, 2.0, "a coefficient from 0 (off) to 2")


def inflation_pieces(node) -> frozenset:
    """The optional pieces switched on for this job: those whose strength is not 0."""
    return frozenset(piece for piece, key in (("additive", "additive_std"), ("rtpp", "rtpp"), ("rtps", "rtps"))
                     if float(node[key]) != 0.0)


def inflation_settings(node) -> dict:
    return floats(node, INFLATION_KEYS)


# The spec fields of an ensemble filter whose only settings are the inflation pieces.
INFLATION_SPEC_FIELDS = {"settings": inflation_settings, "check": lambda c, model: check_inflation(c),
                         "traced": INFLATION_KEYS, "widest": WIDEST, "smoothable": lambda node: True,
                         "estimates": True}
