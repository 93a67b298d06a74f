"""Reproduction cards: a published benchmark set-up, its expected band and its source.

A card is a YAML file (see ``experiments/published/``) with keys
``title``, ``source``, ``overrides`` (a list), ``metric`` (a summary name),
``full`` and ``short`` (each ``cycles``, ``burn_in``, ``replicates``,
``band: [low, high]``), and optionally ``better_than`` / ``worse_than``
naming another card (or a list of cards) whose measured metric this one must
beat / trail, and
``tuned`` (setting -> [low, high]): where tuning that setting should land.

A card with ``learn`` (the keys of ``assimbench-learn`` without their ``learn.`` prefix, e.g.
``{parameters: [forecast_model.forcing], iterations: 40}``) is a learning study: its metric is a
learned key, and its measure the value learned by gradients through the cycle
(:mod:`assimbench.learning`).
"""

import math
import os
from dataclasses import dataclass

import yaml

from assimbench.api import run
from assimbench.config.composition import compose_config
from assimbench.learning.loop import learn
from assimbench.learning.study import DEFAULTS, LearnOptions, check_experiment


@dataclass
class Card:
    name: str
    title: str
    source: str
    overrides: list
    metric: str
    lengths: dict
    better_than: tuple = ()
    worse_than: tuple = ()
    tuned: dict | None = None
    learn: dict | None = None


def _names(value) -> tuple:
    """A card name or a list of them, as a tuple (empty when absent)."""
    if value is None:
        return ()
    return (value,) if isinstance(value, str) else tuple(value)


def load_cards(folder: str) -> dict:
    """All cards of a folder by name (file name without .yaml), in name order."""
    cards = {}
    for file in sorted(os.listdir(folder)):
        if file.endswith(".yaml"):
            with open(os.path.join(folder, file)) as handle:
                raw = yaml.safe_load(handle)
            name = file[:-5]
            cards[name] = Card(
                name=name,
                title=raw["title"],
                source=raw["source"],
                overrides=list(raw["overrides"]),
                metric=raw["metric"],
                lengths={"full": raw["full"], "short": raw["short"]},
                better_than=_names(raw.get("better_than")),
                worse_than=_names(raw.get("worse_than")),
                tuned=raw.get("tuned"),
                learn=raw.get("learn"),
            )
    return cards


def measure(card: Card, length: str = "short") -> float:
    """Run a card at the given length and return its metric (time mean over replicates)."""
    spec = card.lengths[length]
    overrides = card.overrides + [
        f"cycles={spec['cycles']}",
        f"burn_in={spec['burn_in']}",
        f"replicates={spec['replicates']}",
    ]
    if card.learn is not None:
        return learned_value(card, overrides)
    return run(overrides).summary[card.metric]


def learned_value(card: Card, overrides: list) -> float:
    """The value of ``card.metric`` (a learned key) that a learning study of the card learns; NaN when
    the fit stopped on a non-finite gradient."""
    options = LearnOptions(**(DEFAULTS | {k: tuple(v) if isinstance(v, list) else v for k, v in card.learn.items()}),
                           study="unused")
    cfg = compose_config(overrides)
    plan, learnables = check_experiment(cfg, options)
    _, history = learn(cfg, plan, learnables, options)
    if history.stopped is not None:
        return math.nan
    return float(history.steps[-1].values[[item.key for item in learnables].index(card.metric)])


def verdicts(cards: dict, measured: dict, length: str = "short") -> dict:
    """name -> (passed, reason) for every measured card."""
    out = {}
    for name, value in measured.items():
        card = cards[name]
        low, high = card.lengths[length]["band"]
        ok, reason = low <= value <= high, f"band [{low}, {high}]"
        for other in card.better_than:
            if other in measured:
                ok = ok and value < measured[other]
                reason += f", below {other}"
        for other in card.worse_than:
            if other in measured:
                ok = ok and value > measured[other]
                reason += f", above {other}"
        out[name] = (ok, reason)
    return out
