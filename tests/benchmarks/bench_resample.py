"""Resampling benchmark (issues: common grids; speed where it still lags).

``align.resample`` of 10^6 and 10^7 irregular, contiguous samples onto regular grids of 0.01x
to 2x as many cells as samples, each timed in interleaved rounds against its same-run
baselines (median of paired ratios of CPU time, ``time.process_time``: the merge runs on
threads for large grids, so wall time would flatter it on an idle machine and punish it on a
busy one; see ``_timing.py``):

- one ``numpy.cumsum`` pass over ``max(samples, cells)`` values (the memory-bound floor):
  at most 4x, for the merge on one thread (cumsum runs on one core: this is the cost per
  core; two threads on the 2-core development machine cost 17-30 % more CPU in all while
  cutting the wall time 1.35-1.75x, printed as a line of its own for grids large enough to
  be split);
- ``pandas.cut(labels=False)`` + ``groupby().mean()`` of the mid-points on the same grid (a
  mid-point binning that does not weight by overlap, keeps no coverage): never slower
  (ratio <= 1);
- xarray ``groupby_bins(...).mean()`` on the coarse grid (1e7 samples onto 1e5 cells), the
  speed-up only;
- peak memory while resampling (resident set sampled every ms): at most 3x the input arrays
  plus the output arrays.

Run: ``python tests/benchmarks/bench_resample.py [--quick]`` (``--quick``: 10^6 samples only)
"""

from __future__ import annotations

import importlib
import sys
import time
from contextlib import contextmanager

import numpy as np
import pandas as pd
import xarray as xr

from _timing import machine, paired, peak_extra_mb, report_paired, report_ratio
from align.record import build_record
from align.resample import resample

START = 1000.0
CPU = time.process_time
FACTORS = (0.01, 0.1, 0.5, 1.0, 2.0)


@contextmanager
def threads(count):
    """The compiled merges run on ``count`` threads inside the block."""
    kernel_threads = importlib.import_module("align._threads")
    before = kernel_threads.THREADS
    kernel_threads.THREADS = count
    try:
        yield
    finally:
        kernel_threads.THREADS = before


def make_record(n):
    rng = np.random.default_rng(0)
    edges = START + np.cumsum(rng.uniform(0.005, 0.015, n + 1))
    bounds = np.empty((n, 2))
    bounds[:, 0], bounds[:, 1] = edges[:-1], edges[1:]
    return build_record(age=0.5 * (edges[1:] + edges[:-1]), age_bounds=bounds,
                        age_reference="b2k", proxies={"x": (rng.normal(size=n), {})})


def case(record, cells, rounds):
    n = record.sizes["sample"]
    step = (record.age_bounds.values[-1, 1] - START) / cells
    stop = START + step * cells
    values, mid = record.x.values, record.age.values
    edges = START + step * np.arange(cells + 1)
    scratch = np.ones(max(n, cells))

    def ours():
        return resample(record, step, start=START, stop=stop)

    def by_pandas():
        return pd.Series(values).groupby(pd.cut(mid, edges, labels=False)).mean()

    label = f"{n:.0e} samples onto {cells:.0e} cells"
    with threads(1):
        report_paired(f"resample {label} (one thread) vs one numpy.cumsum pass over "
                      f"{max(n, cells):.0e} (CPU)", ours, lambda: np.cumsum(scratch),
                      limit=4.0, rounds=rounds, clock=CPU)
    if cells >= 2 * importlib.import_module("align.resample").CELLS_PER_THREAD:
        def on_one_thread():
            with threads(1):
                return ours()

        count = importlib.import_module("align._threads").THREADS
        report_paired(f"resample {label} on {count} threads vs one (wall, speed-up)", ours,
                      on_one_thread, limit=1.0, better="higher", rounds=rounds,
                      clock=time.perf_counter)
    report_paired(f"resample {label} vs pandas cut + groupby mean (CPU)", ours, by_pandas,
                  limit=1.0, rounds=rounds, clock=CPU)
    if cells == 100_000 and n == 10_000_000:
        da = xr.DataArray(values, dims="sample", coords={"age": ("sample", mid)})
        ratios, t_ours, t_xr = paired(ours, lambda: da.groupby_bins("age", edges).mean(),
                                      rounds=1, warmup=0, clock=CPU)
        report_ratio(f"xarray groupby_bins mean vs resample, {label} (speed-up)",
                     float(1.0 / ratios[0]), t_ours, t_xr, limit=10.0, better="higher")
    input_mb = sum(record[v].nbytes for v in ("age", "age_bounds", "x")) / 2**20
    output_mb = ours().nbytes / 2**20
    extra = peak_extra_mb(ours)
    print(f"peak memory, {label}: +{extra:.0f} MB while resampling, inputs {input_mb:.0f} MB, "
          f"output {output_mb:.0f} MB -> inputs + extra = "
          f"{(input_mb + extra) / (3 * input_mb + output_mb):.2f}x (3 x inputs + output) "
          f"(requirement: <= 1) "
          f"{'ok' if input_mb + extra <= 3 * input_mb + output_mb else 'NOT MET'}",
          flush=True)


def main():
    print(machine())
    sizes = (1_000_000,) if "--quick" in sys.argv else (1_000_000, 10_000_000)
    for n in sizes:
        record = make_record(n)
        for factor in FACTORS:
            case(record, int(n * factor), rounds=7 if n <= 1_000_000 else 3)


if __name__ == "__main__":
    main()
