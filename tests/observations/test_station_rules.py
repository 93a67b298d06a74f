"""Networks given by a rule (a random subset, a contiguous block) or a station file, written out as
the explicit station list before anything reads the config."""

import numpy as np
import pytest
from refusals import assert_refused

import assimbench
from assimbench.config.composition import compose_config
from assimbench.config.plan import resolve

SHORT = ["cycles=30", "burn_in=5", "output=null"]


def _stations(overrides):
    plan = resolve(compose_config(["output=null"] + overrides))
    return list(plan.config.observation.stations), plan


def test_a_random_subset_is_drawn_once_from_its_own_seed_in_ring_order():
    first, plan = _stations(["observation.random_stations=8", "observation.subset_seed=3"])
    again, _ = _stations(["observation.random_stations=8", "observation.subset_seed=3", "seed=99"])
    other, _ = _stations(["observation.random_stations=8", "observation.subset_seed=4"])
    assert first == again and first != other
    assert len(set(first)) == 8 and first == sorted(first) and all(q == int(q) and 0 <= q < 40 for q in first)
    np.testing.assert_array_equal(plan.setup.operator.positions, first)
    assert plan.config.observation.random_stations is None  # the rule is replaced by what it made


def test_a_block_is_consecutive_grid_points_wrapping_round_the_ring():
    stations, _ = _stations(["observation.block=[36,8]"])
    assert stations == [36.0, 37.0, 38.0, 39.0, 0.0, 1.0, 2.0, 3.0]


@pytest.mark.parametrize("kind", ["csv", "yaml"])
def test_a_station_file_gives_positions_and_errors_as_the_explicit_lists_do(tmp_path, kind):
    """A file of (position, error_std) rows runs bit for bit as observation.stations and
    observation.error_factors with those values."""
    rows = [(0, 1.0), (5.5, 2.0), (13, 0.5), (27.25, 1.5)]
    path = tmp_path / f"stations.{kind}"
    if kind == "csv":
        path.write_text("position,error_std\n" + "".join(f"{q},{s}\n" for q, s in rows))
    else:
        path.write_text("".join(f"- {{position: {q}, error_std: {s}}}\n" for q, s in rows))
    from_file = assimbench.run(SHORT + [f"observation.station_file={path}"])
    listed = assimbench.run(SHORT + ["observation.stations=[0,5.5,13,27.25]", "observation.error_factors=[1,2,0.5,1.5]"])
    np.testing.assert_array_equal(from_file.series["rmse_analysis"], listed.series["rmse_analysis"])
    assert from_file.config["observation"]["stations"] == [0.0, 5.5, 13.0, 27.25]
    assert from_file.config["observation"]["error_factors"] == [1.0, 2.0, 0.5, 1.5]


@pytest.mark.parametrize("overrides, content, words", [
    (["observation.random_stations=41"], None, ["observation.random_stations=41", "from 1 to 40"]),
    (["observation.random_stations=4", "observation.stations=[1,2]"], None, ["observation.stations", "null when"]),
    (["observation.random_stations=4", "observation.block=[0,4]"], None, ["observation.block", "one way"]),
    (["observation.random_stations=4", "observation=every_other_station"], None, ["observation.stride=2"]),
    (["observation.block=[40,2]"], None, ["observation.block", "[first, count]"]),
    (["observation.block=[0,2,3]"], None, ["observation.block", "[first, count]"]),
    (["observation.station_file=FILE"], None, ["observation.station_file", "an existing file"]),
    (["observation.station_file=FILE"], "where,sigma\n1,1\n", ["row 1 has where, sigma"]),
    (["observation.station_file=FILE"], "position,error_std\n1,abc\n", ["row 1 is not two numbers"]),
    (["observation.station_file=FILE"], "position,error_std\n1,0\n", ["error_std > 0"]),
    (["observation.station_file=FILE"], "position,error_std\n40,1\n", ["below the observable state size 40"]),
    (["observation.station_file=FILE"], "position,error_std\n3,1\n3,2\n", ["repeated"]),
    (["observation.station_file=FILE", "observation.error_factors=[1]"], "position,error_std\n3,1\n",
     ["observation.error_factors", "station file"]),
])
def test_bad_rules_and_files_are_one_line(tmp_path, overrides, content, words):
    path = tmp_path / "stations.csv"
    if content is not None:
        path.write_text(content)
    overrides = [o.replace("FILE", str(path)) for o in overrides]
    assert_refused(["output=null"] + overrides, words)
