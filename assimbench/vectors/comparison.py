"""Check a port's quantities against reference vectors, cycle by cycle and quantity by quantity.

For each compared quantity the port gives (assimbench/vectors/quantities.py) and each cycle:

    absolute error  e = max |port - reference|          over the cycle's entries
    relative error      e / max |reference|              over every cycle (1 when all are zero)

It passes when the relative error is at most the quantity's tolerance (integer quantities: exactly
equal); a non-finite entry fails. The port departs first at the earliest failing cycle, and there
at the earliest quantity in the order the step computes them.

Member order: every filter with vectors fixes it (the symmetric square root keeps member i next to
forecast member i), so member-wise quantities are compared as they are. A port whose members come
out in another order (a random rotation of the square root, another resampling order) declares it
(``any_member_order``): the quantities that depend on member order are then left out, and the
analysis mean and covariance, derived from the port's analysis ensemble when it does not give
them, pin the analysis down. No stored quantity depends on the sign of an eigenvector.
"""

from typing import NamedTuple

import numpy as np

from assimbench.vectors.quantities import QUANTITIES, path_of
from assimbench.vectors.vector_file import Vectors
from assimbench.vectors.writing import ensemble_moments


class Row(NamedTuple):
    """One quantity at one cycle."""

    cycle: int
    name: str
    absolute: float
    relative: float
    tolerance: float
    passed: bool
    derived: bool = False

    @property
    def path(self) -> str:
        return path_of(self.name)


class CheckReport(NamedTuple):
    """Every row (by cycle, then in the order computed), the quantities compared, those the port did not
    give, and those left out for member order."""

    rows: list
    compared: tuple
    missing: tuple
    unordered: tuple

    @property
    def failures(self) -> list:
        return [row for row in self.rows if not row.passed]

    @property
    def first_failure(self) -> Row | None:
        failures = self.failures
        return failures[0] if failures else None

    @property
    def passed(self) -> bool:
        return not self.failures


def tolerances_of(vectors: Vectors, given: dict) -> dict:
    """Each compared quantity's tolerance: its default, or ``given[name]``, or ``given["all"]`` for
    every float quantity without its own (integer quantities stay exact unless named)."""
    unknown = sorted(set(given) - set(vectors.order) - {"all"})
    if unknown:
        raise ValueError(f"no quantity {unknown[0]} in these vectors; tolerances apply to: all, "
                         f"{', '.join(vectors.order)}")
    out = {}
    for name in vectors.order:
        quantity = QUANTITIES[name]
        default = given.get("all", quantity.tolerance) if not quantity.integer else quantity.tolerance
        out[name] = float(given.get(name, default))
    return out


def derived_moments(vectors: Vectors, port: dict) -> dict:
    """The analysis mean and covariance of the port's analysis ensemble, where the port gives the
    ensemble but not them (a weighted ensemble: only with the port's own weights)."""
    members = port.get("analysis_ensemble")
    if members is None:
        return {}
    weighted = bool(vectors.attrs.get("weighted"))
    if weighted and "analysis_log_weights" not in port:
        return {}
    mean, covariance = ensemble_moments(members, port.get("analysis_log_weights") if weighted else None)
    derived = {"analysis_mean": np.asarray(mean)}
    if "analysis_covariance" in vectors.arrays:
        derived["analysis_covariance"] = np.asarray(covariance)
    return {name: values for name, values in derived.items() if name not in port and name in vectors.arrays}


def compare(vectors: Vectors, port: dict, tolerances: dict | None = None, any_member_order: bool = False) -> CheckReport:
    """The check of ``port`` (name -> array, from :func:`assimbench.vectors.vector_file.read_port`)
    against ``vectors``; ``tolerances`` as for :func:`tolerances_of`."""
    limits = tolerances_of(vectors, tolerances or {})
    derived = derived_moments(vectors, port)
    given = {**port, **derived}
    unordered = tuple(name for name in vectors.order if any_member_order and QUANTITIES[name].member_ordered)
    names = tuple(name for name in vectors.order if name in given and name not in unordered)
    missing = tuple(name for name in vectors.order if name not in given and name not in unordered)
    rows = []
    for index, cycle in enumerate(vectors.cycles):
        for name in names:
            reference = np.asarray(vectors.arrays[name], dtype=np.float64)
            scale = float(np.max(np.abs(reference))) or 1.0
            gap = np.abs(np.asarray(given[name], dtype=np.float64)[index] - reference[index])
            absolute = float(np.max(gap)) if np.all(np.isfinite(gap)) else float("inf")
            relative = absolute / scale
            rows.append(Row(int(cycle), name, absolute, relative, limits[name], relative <= limits[name],
                            name in derived))
    return CheckReport(rows, names, missing, unordered)
