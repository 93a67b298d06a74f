"""One worker process of a run split in blocks (the other side of twin/block_workers.py).

Started as ``python -m assimbench.twin.worker_process`` (which imports the
package, and so switches on float64, before anything else). It reads
``(config, first, stop, length)`` pickled on stdin, plans the run from the
resolved config, compiles the programs for the batch elements first..stop-1
and sends ``("compiled", seconds)``, then ``("chunk", outputs)`` per chunk,
or ``("error", one line)``, as pickle frames on its original stdout.
"""

import os
import pickle
import signal
import sys
import time

from omegaconf import OmegaConf

from assimbench.compile_cache import switch_on
from assimbench.config.plan import resolve
from assimbench.twin.runner import block_programs, run_block


def _send(stream, kind: str, payload) -> None:
    pickle.dump((kind, payload), stream, protocol=pickle.HIGHEST_PROTOCOL)
    stream.flush()


def _work(config: dict, first: int, stop: int, length: int, stream) -> None:
    """Plan the run, keep the batch elements first..stop-1, compile, and send every chunk."""
    switch_on()
    plan = resolve(OmegaConf.create(config))
    tic = time.perf_counter()
    carry, chunk, keys, settings = block_programs(plan, first, stop, length)
    _send(stream, "compiled", time.perf_counter() - tic)
    for outputs in run_block(plan, carry, chunk, keys, settings, length):
        _send(stream, "chunk", outputs)


def main() -> None:
    """A worker's life: read its job from stdin, send frames on the original stdout.

    Ctrl-C and a scheduler's SIGTERM reach the whole process group: the parent handles them (it
    stops between chunks and keeps what is done) and then stops its workers; a worker whose parent
    is gone stops at its next frame (broken pipe)."""
    for signum in (signal.SIGINT, signal.SIGTERM):
        signal.signal(signum, signal.SIG_IGN)
    stream = os.fdopen(os.dup(sys.stdout.fileno()), "wb")
    os.dup2(sys.stderr.fileno(), sys.stdout.fileno())  # stray prints go to the log, not into the frames
    job = pickle.load(sys.stdin.buffer)
    try:
        _work(*job, stream)
    except BaseException as err:  # the parent shows this one line and stops the run
        _send(stream, "error", f"{type(err).__name__}: {str(err).splitlines()[0] if str(err) else ''}")
        raise SystemExit(1) from None


if __name__ == "__main__":  # run as ``python -m``, which imports the package (float64 on) first
    main()
