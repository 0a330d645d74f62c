"""Resampling benchmark (issue: common grids).

10^7 irregular, contiguous samples onto 10^5 cells, against
- xarray's ``groupby_bins(...).mean()`` on the same data (which does not weight by overlap):
  at least 10x faster;
- one ``numpy.cumsum`` pass over the values (the memory-bound floor): within 4x;
- peak memory while resampling (the input arrays plus everything the call allocates, sampled
  from the resident set): at most 3x the input arrays.

Run: ``python tests/benchmarks/bench_resample.py``
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from _timing import best_time, peak_extra_mb, report

SETUP = """
import numpy as np
from align.record import build_record
from align.resample import resample
n = 10_000_000
rng = np.random.default_rng(0)
edges = 1000.0 + np.cumsum(rng.uniform(0.005, 0.015, n + 1))
bounds = np.empty((n, 2)); bounds[:, 0] = edges[:-1]; bounds[:, 1] = edges[1:]
del edges
values = rng.normal(size=n)
record = build_record(age=bounds.mean(axis=1), age_bounds=bounds, age_reference="b2k",
                      proxies={"x": (values, {})})
del bounds, values
input_mb = sum(record[v].nbytes for v in ("age", "age_bounds", "x")) / 2**20
"""


def main():
    ns = {}
    exec(SETUP, ns)
    record, resample = ns["record"], ns["resample"]
    step = (record.age_bounds.values[-1, 1] - 1000.0) / 100_000
    stop = 1000.0 + step * 100_000

    ours = best_time(lambda: resample(record, step, start=1000.0, stop=stop), repeat=3)
    values = record.x.values
    floor = best_time(lambda: np.cumsum(values), repeat=5)
    edges = 1000.0 + step * np.arange(100_001)
    da = xr.DataArray(values, dims="sample", coords={"age": ("sample", record.age.values)})
    grouped = best_time(lambda: da.groupby_bins("age", edges).mean(), repeat=1)
    report("resample 1e7 samples to 1e5 cells vs one numpy.cumsum pass", ours, floor, limit=4.0)
    report("xarray groupby_bins mean vs resample (speed-up)", grouped, ours, limit=10.0,
           better="higher")
    input_mb = ns["input_mb"]
    extra = peak_extra_mb(lambda: resample(record, step, start=1000.0, stop=stop))
    peak = input_mb + extra
    print(f"peak memory: inputs {input_mb:.0f} MB + {extra:.0f} MB while resampling = "
          f"{peak / input_mb:.2f}x the input arrays (requirement: <= 3x) "
          f"{'ok' if peak <= 3 * input_mb else 'NOT MET'}")


if __name__ == "__main__":
    main()
