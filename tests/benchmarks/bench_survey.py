"""Survey benchmark and scaling (issue: speed where it still lags).

A survey of 128 pairs (onsets of Ca against d18O at the Greenland transitions of Rasmussen
et al. 2014 in the NGRIP decadal data of Erhardt et al. 2019, the table's rows cycled),
timed in interleaved rounds (median of paired ratios, see ``_timing.py``):

- 2 worker processes (the default on 2 cores) against 1 (in-process, serial): at least 1.7x;
  the same answer;
- start cost of the worker pool (first use in a process), reported on its own;
- a ``dask.distributed`` local cluster with 1 and 2 worker processes: the cluster's start cost
  on its own, then speed-up and efficiency of the reused client against 1 worker.

Run on an otherwise idle machine: ``python tests/benchmarks/bench_survey.py [pairs]``
"""

from __future__ import annotations

import sys
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from _timing import machine, paired, report_ratio  # noqa: E402
from align.survey import survey, survey_spec, table_pairs  # noqa: E402
from align.lag import Sources  # noqa: E402
from conftest import reference_data_dir  # noqa: E402


def spec(pairs):
    greenland = reference_data_dir() / "greenland"
    csv = str(greenland / "NGRIP_10yr.csv")
    mapping = {"age_column": "Age_BP", "age_reference": "BP"}
    body = {"table": {"path": str(greenland / "GIS_table.txt"), "label_column": "Event",
                      "age_column": "Age", "age_reference": "b2k", "window": [-250, 250]},
            "a": {"kind": "onset", "record": csv, "variable": "Ca", "mapping": mapping,
                  "draws": 400},
            "b": {"kind": "onset", "record": csv, "variable": "d18O", "mapping": mapping,
                  "draws": 400},
            "draws": 4000, "seed": 7}
    parsed = survey_spec(body)
    rows = table_pairs(parsed, Sources())
    cycled = [rows[k % len(rows)].model_copy(update={"label": f"{rows[k % len(rows)].label} #{k}"})
              for k in range(pairs)]
    return {"pairs": [p.model_dump() for p in cycled], "draws": 4000, "seed": 7}


def strip(result):
    return {k: v for k, v in result.to_dict().items() if k != "provenance"}


def main():
    warnings.simplefilter("ignore")
    pairs = int(sys.argv[1]) if len(sys.argv) > 1 else 128
    print(machine())
    body = spec(pairs)
    start = time.perf_counter()
    survey({**body, "pairs": body["pairs"][:2]}, workers=2)
    print(f"worker pool start (first survey in this process, 2 pairs): "
          f"{time.perf_counter() - start:.2f} s (not in the ratios below)", flush=True)
    results = {}

    def run(workers):
        return lambda: results.__setitem__(workers, survey(body, workers=workers))

    ratios, t2, t1 = paired(run(2), run(1), rounds=2, warmup=0)
    report_ratio(f"survey of {pairs} pairs: 2 worker processes vs serial (speed-up)",
                 float(np.median(1.0 / ratios)), t2, t1,
                 limit=1.7, better="higher")
    print(f"same answer as serial: {strip(results[1]) == strip(results[2])}", flush=True)
    cluster_case(body, pairs)


def cluster_case(body, pairs):
    from distributed import LocalCluster

    from align.survey import cluster_client

    times = {}
    for workers in (1, 2):
        start = time.perf_counter()
        cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                               dashboard_address=None)
        cluster_client(cluster.scheduler_address)
        started = time.perf_counter() - start
        survey({**body, "pairs": body["pairs"][:2]}, scheduler=cluster.scheduler_address)
        begin = time.perf_counter()
        survey(body, scheduler=cluster.scheduler_address)
        times[workers] = time.perf_counter() - begin
        print(f"dask.distributed, {workers} worker(s): cluster and client start {started:.2f} s "
              f"(apart), survey of {pairs} pairs {times[workers]:.2f} s", flush=True)
        cluster_client(cluster.scheduler_address).close()
        cluster.close()
    speedup = times[1] / times[2]
    print(f"dask.distributed scaling: speed-up {speedup:.2f} at 2 workers, efficiency "
          f"{speedup / 2:.2f} (one run each, not interleaved: clusters cannot share the cores)",
          flush=True)


if __name__ == "__main__":
    main()
