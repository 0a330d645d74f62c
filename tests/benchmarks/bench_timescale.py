"""Timescale benchmarks (issue: timescales).

- transfer of a 10^6-sample record through 1,000 ties, against one ``numpy.interp`` call that
  maps the same depths (every mid-point and bound) through the same ties;
- a 1,000-member x 10^5-sample ensemble produced and reduced to per-sample percentiles, peak
  memory of the whole process against the same process after its imports.

Run: ``python tests/benchmarks/bench_timescale.py``
"""

from __future__ import annotations

import warnings

import numpy as np

from _timing import machine, peak_rss_mb, report_paired
from align.record import build_record
from align.ties import TieTable, transfer


def transfer_case(n=1_000_000, n_ties=1000):
    rng = np.random.default_rng(0)
    edges = np.cumsum(rng.uniform(0.5, 1.5, n + 1)) * 1e-3
    record = build_record(depth=0.5 * (edges[1:] + edges[:-1]),
                          depth_bounds=np.column_stack([edges[:-1], edges[1:]]),
                          proxies={"x": (rng.normal(size=n), {})})
    ref_age = np.linspace(0.0, 2e5, 100_001)
    reference = build_record(age=0.5 * (ref_age[1:] + ref_age[:-1]), age_reference="b2k",
                             age_bounds=np.column_stack([ref_age[:-1], ref_age[1:]]),
                             age_sd=np.linspace(1, 500, 100_000),
                             proxies={"y": (np.zeros(100_000), {})})
    tie_depth = np.linspace(edges[0], edges[-1], n_ties)
    tie_age = np.sort(rng.uniform(1e3, 1.9e5, n_ties))
    ties = TieTable(labels=tuple(map(str, range(n_ties))), position=tie_depth, ref=tie_age,
                    ref_kind="age", sd=np.full(n_ties, 3.0))
    every_depth = np.concatenate([record.depth.values, edges])

    def ours():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            transfer(record, ties, reference, bridge_rate=5.0)

    report_paired("transfer 1e6 samples through 1000 ties vs one numpy.interp", ours,
                  lambda: np.interp(every_depth, tie_depth, tie_age), limit=3.0, rounds=7)


ENSEMBLE = """
import numpy as np
from align.record import build_record
from align.timescale import age_ensemble
n = 100_000
age = np.arange(n, dtype=float) * 2.0 + 1.0
rec = build_record(age=age, age_reference="b2k", age_mce=0.02 * age + 5,
                   age_bounds=np.column_stack([age - 1, age + 1]),
                   proxies={{"x": (np.zeros(n), {{}})}})
"""
REDUCE = ENSEMBLE + """
ens = age_ensemble(rec, 1000, seed=1, model="{model}")
q = ens.data.map_blocks(lambda b: np.percentile(b, [2.5, 50, 97.5], axis=1).T,
                        chunks=(ens.data.chunks[0], (3,)), dtype=float).compute()
assert q.shape == (n, 3)
"""


def ensemble_case():
    imports = peak_rss_mb(ENSEMBLE.format())
    for model in ("correlated", "random-walk"):
        peak = peak_rss_mb(REDUCE.format(model=model))
        print(f"ensemble 1000 members x 1e5 samples ({model}), reduced to percentiles: peak "
              f"{peak:.0f} MB (process after imports and record: {imports:.0f} MB; ensemble "
              f"array would be 800 MB whole) -> {'ok' if peak < 2048 else 'NOT MET'} "
              "(requirement: < 2048 MB)")


if __name__ == "__main__":
    print(machine())
    transfer_case()
    ensemble_case()
