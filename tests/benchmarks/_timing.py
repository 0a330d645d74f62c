"""Helpers for the benchmarks: best-of-N wall time, peak memory of a fresh process, reports."""

from __future__ import annotations

import json
import subprocess
import sys
import time


def best_time(fn, repeat=5):
    """Best wall time of ``repeat`` calls (seconds), after one warm-up call."""
    fn()
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


def peak_rss_mb(code):
    """Peak resident memory (MB) of a fresh Python process running ``code``, and of the same
    process after its imports only (the first line of ``code`` must do the imports)."""
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


def report(name, measured, baseline, unit="s", limit=None, better="lower"):
    """Print one benchmark line: measured, baseline, their ratio and the requirement."""
    ratio = measured / baseline
    met = limit is None or (ratio <= limit if better == "lower" else ratio >= limit)
    ok = "" if limit is None else (" ok" if met else " NOT MET")
    sign = "<=" if better == "lower" else ">="
    need = "" if limit is None else f" (requirement: {sign} {limit:g})"
    print(f"{name}: {measured:.4g} {unit} vs baseline {baseline:.4g} {unit} -> ratio "
          f"{ratio:.3g}{need}{ok}")
    return ratio
