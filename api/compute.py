"""Computations off the request thread, in worker processes that can be stopped.

A computation that runs past its time limit is stopped by terminating its worker process
(pebble replaces it), so no request ever leaves a hung worker behind; a worker that dies (the
kernel's out-of-memory killer, a signal) is replaced the same way and its request answered
503 with a retry hint. Workers end with the server: each asks the kernel for SIGTERM when its
parent dies (Linux), and the pools are stopped when the server exits. Tasks are plain
functions of plain data: paths of stored objects in, JSON-ready dicts out.
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


def _start_worker(memory):
    """In each worker: end with the parent (``PR_SET_PDEATHSIG``, Linux) and hold at most
    ``memory`` bytes of data (``RLIMIT_DATA``) when set."""
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
    """
    if workers == 0:
        return function(*args)
    future = pool(workers, memory).schedule(function, args=args, timeout=timeout)
    try:
        return future.result()
    except FutureTimeout:
        raise ComputationTimeout(timeout) from None
    except ProcessExpired as exc:
        raise WorkerLost(f"ended (exit code {exc.exitcode})") from None
    except MemoryError:
        raise WorkerLost("ran out of memory (the service's worker memory limit)") from None


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
