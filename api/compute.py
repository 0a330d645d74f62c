"""Computations off the request thread, in worker processes that can be stopped.

A computation that runs past its time limit is stopped by terminating its worker process
(pebble replaces it), so no request ever leaves a hung worker behind; a worker that dies (the
kernel's out-of-memory killer, a signal) is replaced the same way and its request answered
503 with a retry hint. Workers end with the server: each asks the kernel for SIGTERM when its
parent dies (Linux), and the pools are stopped when the server exits. Tasks are plain
functions of plain data: paths of stored objects in, JSON-ready dicts out.

Each worker may hold at most the service's worker memory limit (``WORKER_MEMORY``) of data:
``RLIMIT_DATA``, which counts the memory a process has written or may write (heap, anonymous
maps, thread stacks), not ``RLIMIT_AS``, which also counts address space that is only reserved.
numba's compiler and the thread pools reserve far more than they use: measured on the demo's
lag, cross-correlation, onset and report, a worker peaking at 370 MB resident mapped 1.05 GB
of address space, so ``RLIMIT_AS`` at 1 GiB failed (``std::bad_alloc`` in the compiler) where
``RLIMIT_DATA`` at 600 MB passed. A computation that reaches the limit gets ``MemoryError``
(numpy refuses the allocation) and is answered 413 naming the limit; the worker stays.
"""

from __future__ import annotations

import atexit
import multiprocessing
import threading
from concurrent.futures import TimeoutError as FutureTimeout

from pebble import ProcessExpired, ProcessPool

_POOLS = {}
_LOCK = threading.Lock()


class ComputationTimeout(Exception):
    """A computation ran past its time limit and was stopped."""

    def __init__(self, seconds):
        super().__init__(f"the computation took longer than {seconds:g} s and was stopped")
        self.seconds = seconds


class WorkerLost(Exception):
    """The worker process running a computation ended before it answered."""

    def __init__(self, reason):
        super().__init__(f"the worker running this computation {reason}; it was replaced: "
                         "try again")


class OutOfMemory(Exception):
    """A computation needed more memory than the worker memory limit (``memory`` bytes, or
    None when there is no limit and the machine refused)."""

    def __init__(self, memory):
        what = (f"the worker memory limit of {mebibytes(memory)} on this service" if memory
                else "this service could give it")
        super().__init__(f"the computation needed more memory than {what}; ask for less (a "
                         "coarser step, a shorter lag range, fewer draws or surrogates, a "
                         "smaller file)")
        self.memory = memory


def mebibytes(size):
    """``size`` bytes as text in MiB (``600 MiB``)."""
    return f"{size / 2**20:,.0f} MiB"


def _start_worker(memory):
    """In each worker: end with the parent (``PR_SET_PDEATHSIG``, Linux) and hold at most
    ``memory`` bytes of data (``RLIMIT_DATA``, see the module notes) when set."""
    import ctypes
    import resource
    import signal
    import sys

    if sys.platform.startswith("linux"):
        ctypes.CDLL(None).prctl(1, signal.SIGTERM)  # PR_SET_PDEATHSIG
    if memory:
        resource.setrlimit(resource.RLIMIT_DATA, (int(memory), int(memory)))


def pool(workers, memory=None):
    """The process pool with ``workers`` workers (one per process, made on first use)."""
    with _LOCK:
        if (workers, memory) not in _POOLS:
            _POOLS[workers, memory] = ProcessPool(
                max_workers=workers, context=multiprocessing.get_context("spawn"),
                initializer=_start_worker, initargs=(memory,))
        return _POOLS[workers, memory]


def run(function, *args, workers=2, timeout=120.0, memory=None):
    """Run ``function(*args)`` in a worker process; stop it after ``timeout`` seconds.

    With ``workers == 0`` the function runs in this process (tests of the routes' logic),
    without a time limit. ``memory`` caps each worker's data (bytes).

    Raises
    ------
    ComputationTimeout
        Past ``timeout`` (the worker is replaced).
    OutOfMemory
        The computation reached the memory limit (the worker stays).
    WorkerLost
        The worker ended (a signal, or a library that aborts when an allocation fails).
    """
    if workers == 0:
        return function(*args)
    future = pool(workers, memory).schedule(function, args=args, timeout=timeout)
    try:
        return future.result()
    except FutureTimeout:
        raise ComputationTimeout(timeout) from None
    except ProcessExpired as exc:
        limit = (f" (it may have reached the worker memory limit of {mebibytes(memory)})"
                 if memory else "")
        raise WorkerLost(f"ended (exit code {exc.exitcode}){limit}") from None
    except MemoryError:
        raise OutOfMemory(memory) from None


def shutdown():
    """Stop every pool's workers (at server exit)."""
    with _LOCK:
        pools = list(_POOLS.values())
        _POOLS.clear()
    for each in pools:
        each.stop()
    for each in pools:
        each.join(timeout=5)


atexit.register(shutdown)
