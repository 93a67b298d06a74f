"""A run's batch split over worker processes (assimbench/twin/block_workers.py).

The check the design asks of any second way to compute the same run: the
per-cycle values of a split run agree with the one-process run to round-off
over a few hundred cycles (a batch of a different size may vectorise the same
arithmetic in another order, so bit equality across worker counts is not
promised), and a given split is bit-reproducible.
"""

import numpy as np
import pytest

import assimbench
from assimbench.twin.block_workers import AUTO_MIN_RUN_CYCLES, BlockWorkers, WorkerFailed, blocks, worker_count

# 3 lanes x 3 replicates = 9 batch elements; 2 workers take 5 and 4; chunks of 70 do not divide 300.
SPLIT = ["cycles=300", "burn_in=50", "chunk_cycles=70", "lanes.filter.inflation=[1.0,1.02,1.05]", "replicates=3",
         "model.size=20", "filter.members=10", "store.ensemble_every=100"]


def test_blocks_cover_the_batch_in_order_with_sizes_differing_by_at_most_one():
    for batch in range(1, 40):
        for workers in range(1, min(batch, 6) + 1):
            spans = blocks(batch, workers)
            assert len(spans) == workers and spans[0][0] == 0 and spans[-1][1] == batch
            assert all(a[1] == b[0] for a, b in zip(spans[:-1], spans[1:]))
            sizes = [stop - first for first, stop in spans]
            assert min(sizes) >= 1 and max(sizes) - min(sizes) <= 1


def test_worker_count_auto_splits_only_long_batches_and_a_given_count_never_exceeds_the_batch(monkeypatch):
    monkeypatch.setattr("assimbench.twin.block_workers.available_cores", lambda: 4)
    assert worker_count("auto", 1, 10**7) == 1  # one run: nothing to split
    assert worker_count("auto", 8, AUTO_MIN_RUN_CYCLES // 8 - 1) == 1  # too short to repay the start-up
    assert worker_count("auto", 8, AUTO_MIN_RUN_CYCLES // 8) == 4
    assert worker_count("auto", 3, AUTO_MIN_RUN_CYCLES) == 3
    assert worker_count(1, 64, 10**6) == 1
    assert worker_count(8, 5, 10) == 5


@pytest.fixture(scope="module")
def split_runs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("blocks")
    one = assimbench.run(SPLIT + ["workers=1"], output=str(folder / "one.h5"))
    two = assimbench.run(SPLIT + ["workers=2"], output=str(folder / "two.h5"))
    return one, two, folder


def test_a_run_split_over_two_workers_agrees_per_cycle_with_one_process(split_runs):
    one, two, _ = split_runs
    assert one.attrs["workers"] == 1 and two.attrs["workers"] == 2
    assert set(one.series) == set(two.series)
    for name, values in one.series.items():
        if values.dtype.kind in "iu":  # rank counts: integers, equal unless a tie moved by round-off
            assert np.abs(values.astype(np.int64) - two.series[name]).sum() <= 2, name
        else:
            np.testing.assert_allclose(two.series[name], values, rtol=0, atol=1e-11, err_msg=name)
    np.testing.assert_array_equal(two.first_bad_cycle, one.first_bad_cycle)
    for name in one.summary:
        np.testing.assert_allclose(two.summary[name], one.summary[name], rtol=1e-10, err_msg=name)


def test_the_split_run_writes_the_same_file_layout_and_ensembles(split_runs):
    one, two, folder = split_runs
    a, b = assimbench.read_result(str(folder / "one.h5")), assimbench.read_result(str(folder / "two.h5"))
    assert set(a.series) == set(b.series)
    for name in a.series:
        assert a.series[name].shape == b.series[name].shape, name
    np.testing.assert_allclose(b.series["analysis_ensemble"], a.series["analysis_ensemble"], rtol=0, atol=1e-10)
    assert a.series["analysis_ensemble"].shape[2] == 3  # cycles 100, 200, 300


def test_a_given_split_is_bit_reproducible(split_runs):
    _, two, _ = split_runs
    again = assimbench.run(SPLIT + ["workers=2", "output=null"])
    for name, values in two.series.items():
        np.testing.assert_array_equal(again.series[name], values, err_msg=name)


def test_a_failing_worker_stops_the_run_with_its_one_line_reason():
    pool = BlockWorkers({"cycles": 10}, batch=2, workers=2, length=5)  # not a plannable config
    try:
        with pytest.raises(WorkerFailed, match=r"worker 1 of 2: .*"):
            pool.compiled()
    finally:
        pool.close()
    assert all(process.poll() is not None for process in pool.processes)
