"""Helpers for the benchmarks: paired interleaved timing, peak memory, one report line.

A shared machine's load changes from second to second. Timing a measurement and its baseline
in separate blocks (best of N of one, then of the other) lets a burst of load fall on one side
only and flip the verdict. Here the two are timed in interleaved rounds (A B A B ...; which
goes first alternates) and the ratio is taken per round; the median of those paired ratios is
what is reported, so load common to a round cancels.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time

import numpy as np


def _once(fn, clock):
    start = clock()
    fn()
    return clock() - start


def paired(fn, baseline, rounds=5, warmup=1, clock=time.perf_counter):
    """Time ``fn`` and ``baseline`` in interleaved rounds.

    Parameters
    ----------
    fn, baseline : callable
        Called without arguments.
    rounds : int
        Paired rounds timed (after ``warmup`` untimed calls of each).
    warmup : int
        Untimed calls of each first (compilation, caches, page faults).
    clock : callable
        ``time.perf_counter`` (wall) or ``time.process_time`` (CPU of this process).

    Returns
    -------
    ratios : numpy.ndarray (rounds,)
        ``time(fn) / time(baseline)`` per round.
    measured, base : float
        Median times of each (seconds), for the report line.
    """
    for _ in range(warmup):
        fn()
        baseline()
    ours, theirs = [], []
    for k in range(rounds):
        if k % 2 == 0:
            ours.append(_once(fn, clock))
            theirs.append(_once(baseline, clock))
        else:
            theirs.append(_once(baseline, clock))
            ours.append(_once(fn, clock))
    ours, theirs = np.array(ours), np.array(theirs)
    return ours / theirs, float(np.median(ours)), float(np.median(theirs))


def report_paired(name, fn, baseline, limit=None, better="lower", rounds=5, warmup=1,
                  clock=time.perf_counter):
    """Time ``fn`` against ``baseline`` with :func:`paired` and print one line.

    ``better="higher"`` reports the speed-up ``time(baseline) / time(fn)`` (median of the
    paired ratios) against a lower limit; ``"lower"`` the slow-down ``time(fn) /
    time(baseline)`` against an upper limit.
    """
    ratios, ours, base = paired(fn, baseline, rounds, warmup, clock)
    ratio = float(np.median(1.0 / ratios if better == "higher" else ratios))
    return report_ratio(name, ratio, ours, base, limit, better)


def report_ratio(name, ratio, measured, baseline, limit=None, better="lower", unit="s"):
    """Print one benchmark line: median times, the median paired ratio and the requirement."""
    ok = "" if limit is None else (" ok" if (ratio <= limit if better == "lower"
                                             else ratio >= limit) else " NOT MET")
    need = ("" if limit is None
            else f" (requirement: {'<=' if better == 'lower' else '>='} {limit:g})")
    what = "slow-down" if better == "lower" else "speed-up"
    print(f"{name}: {measured:.4g} {unit} vs baseline {baseline:.4g} {unit} (medians) -> "
          f"{what} {ratio:.3g} (median of paired ratios){need}{ok}", flush=True)
    return ratio


def machine():
    """One line naming the machine and its load, printed at the top of every benchmark."""
    load = os.getloadavg()
    return (f"machine: {os.cpu_count()} cores, load average {load[0]:.2f} / {load[1]:.2f} / "
            f"{load[2]:.2f} (1 / 5 / 15 min), python {sys.version.split()[0]}, numpy "
            f"{np.__version__}")


def peak_rss_mb(code):
    """Peak resident memory (MB) of a fresh Python process running ``code``."""
    script = ("import resource, json\n" + code +
              "\nprint(json.dumps(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024))")
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                         check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def peak_extra_mb(fn):
    """Peak resident memory (MB) above the level before ``fn()`` runs, sampled every ms."""
    import threading

    import psutil

    process = psutil.Process()
    start = process.memory_info().rss
    peak = [start]
    done = threading.Event()

    def watch():
        while not done.is_set():
            peak[0] = max(peak[0], process.memory_info().rss)
            done.wait(0.001)

    watcher = threading.Thread(target=watch)
    watcher.start()
    try:
        fn()
    finally:
        done.set()
        watcher.join()
    return (max(peak[0], process.memory_info().rss) - start) / 2**20
