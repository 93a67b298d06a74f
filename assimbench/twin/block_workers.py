"""Worker processes: a run's batch split in contiguous blocks, one process per block.

XLA on the CPU runs one compiled program on about one core, and two programs
dispatched at once from one process (from two threads, or on two host
devices) did not run side by side here: they deadlocked. So a run's flat
batch (lanes x replicates, lane-major) is cut into ``workers`` contiguous
blocks, and each block runs in its own Python process started as
``python -m assimbench.twin.worker_process``. A worker re-plans the run from
its resolved config (planning is deterministic), keeps its block's slice of
the replicate keys and traced settings, compiles its own program and sends
every chunk's outputs back through its stdout pipe (pickled numpy arrays).
The parent joins the blocks along the batch axis in order, so the sinks see
exactly the chunks a one-process run gives.

Every batch element's arithmetic is its own (the batch is a ``vmap``), and
the keys and settings of an element do not depend on the block it lands in,
so a block's values equal the same elements' values in a one-process run.
Tests check this per cycle (tests/twin/test_block_workers.py).

Protocol (pickle frames): parent -> worker stdin: ``(config, first, stop,
length)``; worker -> parent: ``("compiled", seconds)``, then
``("chunk", outputs)`` per chunk, or ``("error", one line)`` on failure.
The worker's own stdout is moved to its stderr, so a stray print cannot
corrupt the frames.
"""

import os
import pickle
import subprocess
import sys
import tempfile

import numpy as np

# A batch smaller than this many run-cycles (batch elements x cycles) runs in one process under
# workers=auto: a worker's start (importing JAX, planning, compiling) costs a few seconds, which only
# pays on a run long enough to gain them back (see the README's performance section).
AUTO_MIN_RUN_CYCLES = 200_000


def available_cores() -> int:
    """The cores this process may run on."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1


def worker_count(setting, batch: int, cycles: int) -> int:
    """The processes a run of ``batch`` elements x ``cycles`` uses for ``workers=setting``:
    ``auto`` is one per core when the run has at least 2 elements and AUTO_MIN_RUN_CYCLES run-cycles,
    else 1; an integer k is min(k, batch)."""
    if setting == "auto":
        return min(available_cores(), batch) if batch >= 2 and batch * cycles >= AUTO_MIN_RUN_CYCLES else 1
    return max(1, min(int(setting), batch))


def blocks(batch: int, workers: int) -> list:
    """(first, stop) of ``workers`` contiguous blocks covering ``range(batch)``, sizes differing by at most 1."""
    edges = np.linspace(0, batch, workers + 1).round().astype(int)
    return [(int(a), int(b)) for a, b in zip(edges[:-1], edges[1:])]


class WorkerFailed(RuntimeError):
    """A worker process stopped without finishing its block."""


class BlockWorkers:
    """The parent's side: starts one worker per block, then yields each chunk's outputs joined in batch order."""

    def __init__(self, config: dict, batch: int, workers: int, length: int):
        self.spans = blocks(batch, workers)
        self.processes, self.logs = [], []
        environment = dict(os.environ, PYTHONUNBUFFERED="1")
        try:
            for first, stop in self.spans:
                log = tempfile.TemporaryFile()
                process = subprocess.Popen([sys.executable, "-m", "assimbench.twin.worker_process"],
                                           stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=log, env=environment)
                self.processes.append(process)
                self.logs.append(log)
                pickle.dump((config, first, stop, length), process.stdin)
                process.stdin.close()
        except BaseException:
            self.close()
            raise

    def _receive(self, index: int, expected: str):
        process = self.processes[index]
        try:
            kind, payload = pickle.load(process.stdout)
        except (EOFError, pickle.UnpicklingError):
            process.wait()
            self.logs[index].seek(0)
            lines = self.logs[index].read().decode(errors="replace").strip().splitlines()
            tail = lines[-1] if lines else f"exit status {process.returncode}"
            raise WorkerFailed(f"worker {index + 1} of {len(self.processes)} stopped: {tail}") from None
        if kind == "error":
            raise WorkerFailed(f"worker {index + 1} of {len(self.processes)}: {payload}")
        if kind != expected:
            raise WorkerFailed(f"worker {index + 1} sent {kind!r} where {expected!r} was due")
        return payload

    def compiled(self) -> float:
        """Wait until every worker has compiled; the longest compile (seconds)."""
        return max(self._receive(i, "compiled") for i in range(len(self.processes)))

    def next_chunk(self) -> dict:
        """The next chunk's outputs of the whole batch: name -> (batch, ...) array."""
        parts = [self._receive(i, "chunk") for i in range(len(self.processes))]
        return {name: np.concatenate([part[name] for part in parts], axis=0) for name in parts[0]}

    def close(self) -> None:
        """Stop every worker still running (after an error or an interrupt) and release their logs."""
        for process in self.processes:
            if process.poll() is None:
                process.kill()
            process.wait()
            if process.stdout is not None:
                process.stdout.close()
        for log in self.logs:
            log.close()
