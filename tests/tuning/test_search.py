"""The tuner's search on analytic landscapes with a known minimiser: cheap objectives with the noise
a chaotic filter has (a share common to every candidate, as paired runs have, a rough offset per
candidate, and per-cycle noise), so every property of the search is checked in milliseconds."""

import numpy as np
import pytest

from assimbench.tuning.search import Axis, Evaluation, fit_minimiser, retreat_path, search

REPLICATES, CYCLES, BURN_IN = 2, 400, 50


def landscape(objective, lost=lambda values: np.zeros(len(values), bool), rough=0.002, seed=0):
    """evaluate(values) -> Evaluation for a per-cycle objective f(values) plus noise."""
    rng = np.random.default_rng(seed)
    common = 0.05 * rng.standard_normal((REPLICATES, CYCLES))  # the same for every candidate: paired

    def evaluate(values):
        mean = objective(values)  # (lanes,)
        offset = rough * rng.standard_normal(len(values))  # a chaotic run's roughness, per candidate
        noise = 0.02 * rng.standard_normal((len(values), REPLICATES, CYCLES))
        series = (mean + offset)[:, None, None] + common[None] + noise
        gone = lost(values)
        series[gone] = np.nan
        return Evaluation(series, BURN_IN, gone, len(values) * REPLICATES * CYCLES)

    return evaluate


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_one_setting_the_minimiser_lies_inside_the_reported_range(seed):
    truth = 1.0731
    axis = Axis("filter.inflation", 1.0, 1.3)
    outcome = search((axis,), landscape(lambda v: 0.2 + 3.0 * (v[:, 0] - truth) ** 2, seed=seed))
    low, high = outcome.ranges["filter.inflation"]
    assert low <= truth <= high, (low, high, outcome.minimiser)
    assert abs(outcome.minimiser[0] - truth) < 0.02
    assert high - low < 0.1  # the range says something: far narrower than the bounds
    assert outcome.stopped in ("resolved", "tolerance") and outcome.passes >= 2
    assert outcome.spent == outcome.passes * 7 * REPLICATES * CYCLES


def test_two_settings_one_on_a_log_scale_are_refined_together():
    a, b = 1.08, 1.7
    axes = (Axis("filter.inflation", 1.0, 1.3), Axis("filter.radius", 0.1, 10.0, "log"))
    outcome = search(axes, landscape(lambda v: 0.2 + 3.0 * (v[:, 0] - a) ** 2 + 0.05 * np.log(v[:, 1] / b) ** 2,
                                     rough=0.001), points=5)
    for axis, truth in zip(axes, (a, b)):
        low, high = outcome.ranges[axis.key]
        assert low <= truth <= high, (axis.key, low, high, outcome.minimiser)
    radii = {c.values[1] for c in outcome.candidates if c.pass_number == 1}
    assert np.allclose(np.diff(np.log(sorted(radii))), np.log(100) / 4)  # even in log


def test_lost_candidates_count_as_infinitely_bad_never_as_missing():
    """The objective keeps falling into a region where the filter is lost: the minimiser stays among
    the kept candidates and is never moved into the lost region."""
    axis = Axis("filter.inflation", 1.0, 1.3)
    outcome = search((axis,), landscape(lambda v: 0.2 + 3.0 * (v[:, 0] - 1.0) ** 2,
                                        lost=lambda v: v[:, 0] < 1.06))
    assert outcome.minimiser[0] >= 1.06 - 1e-9
    assert any(c.lost for c in outcome.candidates)
    assert all(c.mean == np.inf for c in outcome.candidates if c.lost)


def test_every_candidate_lost_stops_with_no_minimiser():
    axis = Axis("filter.inflation", 1.0, 1.3)
    outcome = search((axis,), landscape(lambda v: v[:, 0], lost=lambda v: np.ones(len(v), bool)))
    assert outcome.minimiser is None and outcome.stopped == "lost" and outcome.passes == 1


def test_the_budget_stops_the_search_before_a_pass_it_cannot_pay_for():
    axis = Axis("filter.inflation", 1.0, 1.3)
    cost = 7 * REPLICATES * CYCLES
    outcome = search((axis,), landscape(lambda v: 0.2 + 3.0 * (v[:, 0] - 1.0731) ** 2, rough=0.0),
                     budget_cycles=int(2.5 * cost), pass_cost=cost, tolerance=1e-9)
    assert outcome.passes == 2 and outcome.stopped == "budget" and outcome.spent == 2 * cost


def test_the_response_surface_of_an_exact_quadratic_is_its_vertex():
    """Least squares through exact quadratic values recovers the vertex -b/(2c) (textbook identity),
    to the resolution of the region it is minimised over (401 points), with a range of that width."""
    units = np.linspace(0, 1, 7)[:, None]
    means = 0.3 + 2.0 * (units[:, 0] - 0.4321) ** 2
    centre, low, high = fit_minimiser(units, means, np.inf)
    assert centre[0] == pytest.approx(0.4321, abs=1.25e-3) and high[0] - low[0] <= 2 / 400 + 1e-12


def test_a_minimum_on_the_edge_of_the_kept_region_is_found_with_a_one_sided_range():
    """The error falls towards the edge where the filter is lost: the fitted minimum sits on the
    edge of the fitted region, not beyond it, and its range reaches into the region only."""
    units = np.linspace(0.2, 1, 5)[:, None]
    means = 0.2 + 0.3 * units[:, 0] + 0.1 * units[:, 0] ** 2 + 1e-4 * np.array([1, -1, 1, -1, 1])
    centre, low, high = fit_minimiser(units, means, np.inf)
    assert centre[0] == pytest.approx(0.2) and low[0] == pytest.approx(0.2) and high[0] < 0.3


def test_the_way_out_of_the_lost_region_steps_away_from_the_nearest_lost_candidate():
    """From the minimiser found beside the lost region (inflation below 1.06), the path goes up in
    inflation, in steps that double from the minimiser's 95% range (never less than the last grid
    step), and stops at the bound; with nothing lost there is nowhere to move away from."""
    axis = Axis("filter.inflation", 1.0, 1.3)
    outcome = search((axis,), landscape(lambda v: 0.2 + 3.0 * (v[:, 0] - 1.0) ** 2,
                                        lost=lambda v: v[:, 0] < 1.06))
    start = outcome.minimiser
    path = retreat_path(outcome, start, 6)[:, 0]
    low, high = outcome.ranges["filter.inflation"]
    step = max(high - low, outcome.step * 0.3)
    assert path[0] == start[0] and np.allclose(np.diff(path), step * 2.0 ** np.arange(5))
    near_bound = retreat_path(outcome, (1.3 - step / 2,), 6)[:, 0]
    assert near_bound[-1] == pytest.approx(1.3) and len(near_bound) == 2
    kept = search((axis,), landscape(lambda v: 0.2 + 3.0 * (v[:, 0] - 1.1) ** 2))
    assert retreat_path(kept, kept.minimiser, 6).shape == (1, 1)


def test_the_way_out_on_two_settings_points_from_the_lost_candidate_to_the_start():
    axes = (Axis("filter.inflation", 1.0, 1.3), Axis("filter.radius", 0.1, 10.0, "log"))
    outcome = search(axes, landscape(lambda v: 0.2 + 3.0 * (v[:, 0] - 1.0) ** 2 + 0.05 * np.log(v[:, 1]) ** 2,
                                     lost=lambda v: v[:, 0] + 0.01 * np.log(v[:, 1]) < 1.05, rough=0.001), points=5)
    path = np.array([outcome.units(values) for values in retreat_path(outcome, outcome.minimiser, 4)])
    lost = np.array([c.unit for c in outcome.candidates if c.lost])
    nearest = lost[np.argmin(np.linalg.norm(lost - path[0], axis=1))]
    steps = np.diff(path, axis=0)
    direction = (path[0] - nearest) / np.linalg.norm(path[0] - nearest)
    inside = np.all((path > 1e-12) & (path < 1 - 1e-12), axis=1)
    for i in np.flatnonzero(inside[1:]):  # steps not cut by a bound lie along the direction, doubling
        assert np.allclose(steps[i] / np.linalg.norm(steps[i]), direction)
        assert i == 0 or np.isclose(np.linalg.norm(steps[i]), 2 * np.linalg.norm(steps[i - 1]))
