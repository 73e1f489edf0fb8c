"""Photos measured in parallel processes, for `measure --jobs` and `watch --jobs`.

Each photo is measured in a worker process of its own (a measurement is CPU-bound
numpy and scipy work, so threads would share one core's worth of the interpreter).
The caller gets each result as it finishes, with the photo's place in the input, and
decides when to log and when to print; ctrl+c stops the workers at once and leaves
every finished result with the caller.
"""

from __future__ import annotations

import os
import signal
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any

__all__ = ["Finished", "available_cores", "interrupts_held", "jobs_type",
           "measure_in_parallel"]

#: the environment variable the analysis reads for its FFT threads (analysis/extension.py)
FFT_THREADS_ENV = "FLATSIGHT_FFT_THREADS"
#: what a worker process reads for its threads when it starts: the FFTs', and those of
#: the BLAS and OpenMP libraries numpy and scipy use (read once, when they load)
THREAD_ENV = (FFT_THREADS_ENV, "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


@contextmanager
def interrupts_held() -> Iterator[None]:
    """Hold ctrl+c while a finished result is logged and queued to be shown.

    A ctrl+c between the record's commit and its place in the queue would leave a
    logged result that is never shown. Within the block, SIGINT is only noted. On
    leaving the block the usual handler is back, and ``KeyboardInterrupt`` is raised if
    one came. Python runs signal handlers in the main thread only, so this holds
    whichever thread the system delivers the signal to. Elsewhere (not the main
    thread) the block runs as it is.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    came: list[int] = []
    previous = signal.signal(signal.SIGINT, lambda signum, frame: came.append(signum))
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)
    if came:
        raise KeyboardInterrupt


def available_cores() -> int:
    """The cores this process may run on (its CPU affinity, where the system tells)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def jobs_type(text: str) -> int:
    """``--jobs N``: a whole number from 1 to 256."""
    import argparse

    try:
        n = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"--jobs takes a whole number, not {text!r}") from None
    if not 1 <= n <= 256:
        raise argparse.ArgumentTypeError(f"--jobs {n} is out of range (1 to 256)")
    return n


@dataclass(frozen=True)
class Finished:
    """One photo's outcome: its place in the input, and a Measurement or the error."""

    index: int
    photo: str
    outcome: Any  # Measurement, or a FlatsightError raised while measuring it


def _start_worker() -> None:
    # ctrl+c reaches the whole foreground process group: the parent alone answers it
    # (it stops the workers and reports what finished)
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _measure_one(photo: str, settings) -> Any:
    from flatsight.analysis.errors import FlatsightError
    from flatsight.analysis.pipeline import measure

    try:
        return measure(photo, settings)
    except FlatsightError as exc:  # returned, so its kind reaches the parent as it is
        return exc


def measure_in_parallel(jobs: list[tuple[str, Any]], workers: int) -> Iterator[Finished]:
    """Measure ``(photo, settings)`` pairs in ``workers`` processes, yielding each as it ends.

    Results come in the order they finish (``Finished.index`` gives the input order).
    Closing the iterator (as a ``KeyboardInterrupt`` in the caller's loop does) cancels
    the photos not started and ends the workers at once.
    """
    # imported here: `flatsight --help` and one-photo runs need none of it
    import multiprocessing
    from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
    from concurrent.futures.process import BrokenProcessPool

    workers = max(1, min(workers, len(jobs)))
    # each worker's FFTs and linear algebra get their share of the cores, not all of
    # them: N processes each running N threads only fight over the cores
    threads = str(max(1, available_cores() // workers))
    previous = {name: os.environ.get(name) for name in THREAD_ENV}
    os.environ.update(dict.fromkeys(THREAD_ENV, threads))
    # forkserver: workers start from a clean process, not a copy of this one's threads
    method = "forkserver" if "forkserver" in multiprocessing.get_all_start_methods() else None
    pool = ProcessPoolExecutor(max_workers=workers, initializer=_start_worker,
                               mp_context=multiprocessing.get_context(method))
    futures: dict[Future, int] = {}
    finished = False
    try:
        for i, (photo, settings) in enumerate(jobs):
            futures[pool.submit(_measure_one, photo, settings)] = i
        pending = set(futures)
        while pending:
            done, pending = wait(pending, return_when=FIRST_COMPLETED)
            for fut in sorted(done, key=futures.__getitem__):
                i = futures[fut]
                try:
                    outcome = fut.result()
                except BrokenProcessPool:
                    from flatsight.analysis.errors import UnanalysablePhotoError

                    outcome = UnanalysablePhotoError(
                        f"the process measuring {jobs[i][0]} ended unexpectedly (out of "
                        "memory?); measure it alone, or with fewer --jobs")
                yield Finished(i, jobs[i][0], outcome)
        finished = True
    finally:
        if finished:
            pool.shutdown(wait=True)
        else:
            # interrupted: drop what has not started and stop what has, now (the
            # executor has no public way to end a running task; its processes do)
            procs = list((getattr(pool, "_processes", None) or {}).values())
            results = getattr(pool, "_result_queue", None)
            manager = getattr(pool, "_executor_manager_thread", None)
            pool.shutdown(wait=False, cancel_futures=True)
            for proc in procs:
                proc.terminate()
            for proc in procs:
                proc.join(timeout=5)
            # a worker stopped while sending its result leaves the executor's thread
            # waiting for the rest of it, for ever, and the interpreter waits for that
            # thread at exit; this process holds the results pipe's last open write end,
            # so closing it ends that wait (the thread then winds the executor up)
            writer = getattr(results, "_writer", None)
            if writer is not None:
                writer.close()
            if manager is not None:
                manager.join(timeout=5)
        for name, value in previous.items():
            if value is None:
                os.environ.pop(name, None)
            else:
                os.environ[name] = value
