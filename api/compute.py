"""Computations off the request thread, in worker processes that can be stopped.

A computation that runs past its time limit is stopped by terminating its worker process
(pebble replaces it), so no request ever leaves a hung worker behind. Tasks are plain
functions of plain data: paths of stored objects in, JSON-ready dicts out.
"""

from __future__ import annotations

import atexit
import multiprocessing
import threading
from concurrent.futures import TimeoutError as FutureTimeout

from pebble import ProcessPool

_POOLS = {}
_LOCK = threading.Lock()


class ComputationTimeout(Exception):
    """A computation ran past its time limit and was stopped."""

    def __init__(self, seconds):
        super().__init__(f"the computation took longer than {seconds:g} s and was stopped")
        self.seconds = seconds


def pool(workers):
    """The process pool with ``workers`` workers (one per process, made on first use)."""
    with _LOCK:
        if workers not in _POOLS:
            _POOLS[workers] = ProcessPool(max_workers=workers,
                                          context=multiprocessing.get_context("spawn"))
        return _POOLS[workers]


def run(function, *args, workers=2, timeout=120.0):
    """Run ``function(*args)`` in a worker process; stop it after ``timeout`` seconds.

    With ``workers == 0`` the function runs in this process (tests of the routes' logic),
    without a time limit.
    """
    if workers == 0:
        return function(*args)
    future = pool(workers).schedule(function, args=args, timeout=timeout)
    try:
        return future.result()
    except FutureTimeout:
        raise ComputationTimeout(timeout) from None


@atexit.register
def _shutdown():
    for each in _POOLS.values():
        each.stop()
        each.join(timeout=5)
