"""Networks given by a rule or a file, written out as the explicit station list they make.

Three ways to name stations besides ``observation.stations``:

- ``random_stations=k``: k distinct grid points drawn once with NumPy's
  default generator seeded by ``subset_seed`` (independent of the
  experiment's seed, so every seed and replicate of a study sees one
  network), listed in ring order;
- ``block=[first, count]``: ``count`` consecutive grid points from ``first``,
  wrapping round the ring;
- ``station_file=PATH``: a CSV file with a header ``position,error_std`` or a
  YAML list of ``{position: q, error_std: s}``, one row per station; each
  station's error standard deviation becomes its error factor (so
  ``observation.error_std``, default 1, scales them all).

:func:`expand_station_rules` replaces the rule by ``stations`` (and, for a
file, ``error_factors``) in the config before anything else reads it, so the
result file's config, its experiment key and the ``station`` coordinate hold
the stations themselves, not a rule or a file that may change.
"""

import csv
import math
import os

import numpy as np
import yaml
from omegaconf import OmegaConf

from assimbench.config.checks import fail

RULE_KEYS = ("random_stations", "block", "station_file")


def _given(node) -> list:
    return [key for key in RULE_KEYS if node.get(key) is not None]


def _whole(value) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def _read_station_file(path: str) -> tuple:
    """(positions, error stds) of a CSV or YAML station file; ConfigError on anything else."""
    key = "observation.station_file"
    form = "a CSV file with the header position,error_std or a YAML list of {position: q, error_std: s}"
    if not os.path.isfile(path):
        fail(key, path, f"an existing file ({form})")
    try:
        with open(path, newline="") as f:
            if path.lower().endswith((".yaml", ".yml")):
                rows = yaml.safe_load(f)
            else:
                rows = list(csv.DictReader(f))
    except (OSError, UnicodeDecodeError, yaml.YAMLError, csv.Error) as err:
        fail(key, path, f"a readable file ({err.__class__.__name__}): {form}")
    if not isinstance(rows, list) or not rows or not all(isinstance(r, dict) for r in rows):
        fail(key, path, form)
    positions, stds = [], []
    for number, row in enumerate(rows, start=1):
        if set(row) != {"position", "error_std"}:
            fail(key, path, f"{form}; row {number} has {', '.join(map(str, row)) or 'nothing'}")
        try:
            q, s = float(row["position"]), float(row["error_std"])
        except (TypeError, ValueError):
            fail(key, path, f"{form}; row {number} is not two numbers")
        if not (math.isfinite(s) and s > 0):
            fail(key, path, f"error_std > 0 in every row; row {number} has {row['error_std']}")
        positions.append(q)
        stds.append(s)
    return positions, stds


def expand_station_rules(cfg, resolved: int) -> None:
    """Replace ``observation``'s station rule (if any) by the stations it makes, in place;
    ConfigError (one line) for a bad rule or two ways of naming the stations."""
    node = cfg.observation
    given = _given(node)
    if not given:
        return
    others = given[1:] + (["stations"] if node.stations is not None else [])
    if others:
        fail(f"observation.{others[0]}", node[others[0]],
             f"null when observation.{given[0]} is given (one way of naming the stations)")
    if int(node.stride) != 1:
        fail("observation.stride", node.stride, f"1 when observation.{given[0]} is given (it replaces the stride)")
    rule = given[0]
    factors = None
    if rule == "random_stations":
        count = node.random_stations
        if not _whole(count) or not 1 <= count <= resolved:
            fail("observation.random_stations", count, f"a whole number of stations from 1 to {resolved}")
        seed = node.subset_seed
        if not _whole(seed) or seed < 0:
            fail("observation.subset_seed", seed, "a whole number >= 0")
        positions = sorted(np.random.default_rng(seed).choice(resolved, size=count, replace=False).tolist())
    elif rule == "block":
        block = OmegaConf.to_container(node.block) if OmegaConf.is_config(node.block) else node.block
        if (not isinstance(block, list) or len(block) != 2 or not all(_whole(v) for v in block)
                or not 0 <= block[0] < resolved or not 1 <= block[1] <= resolved):
            fail("observation.block", block, f"[first, count]: a grid point 0..{resolved - 1} and 1..{resolved} stations")
        positions = [(block[0] + i) % resolved for i in range(block[1])]
    else:
        positions, factors = _read_station_file(str(node.station_file))
        bad = [q for q in positions if not (math.isfinite(q) and 0 <= q < resolved)]
        if bad or len(set(positions)) != len(positions):
            what = f"{bad[0]:g} is not" if bad else "a position is repeated"
            fail("observation.station_file", str(node.station_file),
                 f"each position once, from 0 to below the observable state size {resolved}; {what}")
        if node.error_factors is not None:
            fail("observation.error_factors", "[...]", "null with a station file (its error_std column sets them)")
    OmegaConf.update(cfg, "observation.stations", [float(q) for q in positions])
    if factors is not None:
        OmegaConf.update(cfg, "observation.error_factors", factors)
    for key in RULE_KEYS:
        OmegaConf.update(cfg, f"observation.{key}", None)
