"""Service benchmark (issue: HTTP service).

The overhead of the service on a small lag request -- HTTP round trip on loopback, request
validation, the computation in a worker process, storage of the result -- against the same
computation in-process: at most 1.3x. Two requests are timed: the demo request (an event and
an onset, tied timescales) and a smaller one (two events, 5,000 draws).

Run: ``python tests/benchmarks/bench_service.py``
"""

from __future__ import annotations

import json
import sys
import tempfile
import warnings
from pathlib import Path

import requests

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from _timing import machine, report_paired  # noqa: E402
from align.lag import estimate_lag  # noqa: E402
from conftest import RECORDS, Server  # noqa: E402


def main():
    warnings.simplefilter("ignore")
    print(machine())
    server = Server(tempfile.mkdtemp(), "--workers", "1")
    try:
        ids = {}
        for name in ("hvd1_ice.nc", "trv3_lake.nc", "hvd1_trv3_ties.csv"):
            route = "/ties" if name.endswith(".csv") else "/records"
            with open(RECORDS / name, "rb") as handle:
                body = requests.post(server.url + route, files={"file": (name, handle)}).json()
            ids[name] = body["id"] if route == "/ties" else body["entry"]["id"]
        demo = json.loads((RECORDS / "demo_lag_request.json").read_text())
        small = {"a": {"kind": "event", "record": "hvd1_ice.nc", "variable": "sulfate",
                       "window": [12150, 12350]},
                 "b": {"kind": "event", "record": "trv3_lake.nc", "variable": "tephra",
                       "window": [11850, 12000]}, "draws": 5000, "seed": 3}
        for label, request in (("demo request", demo), ("two events, 5000 draws", small)):
            local = {**request,
                     "a": {**request["a"], "record": str(RECORDS / request["a"]["record"])},
                     "b": {**request["b"], "record": str(RECORDS / request["b"]["record"])}}
            if request.get("ties"):
                local["ties"] = str(RECORDS / request["ties"])
            served = {**request, "a": {**request["a"], "record": ids[request["a"]["record"]]},
                      "b": {**request["b"], "record": ids[request["b"]["record"]]}}
            if request.get("ties"):
                served["ties"] = ids[request["ties"]]
            with requests.Session() as session:  # a client that keeps its connection
                def post(served=served, session=session):
                    session.post(server.url + "/lag", json=served,
                                 timeout=120).raise_for_status()

                report_paired(f"service vs in-process, {label}", post,
                              lambda local=local: estimate_lag(local), limit=1.3, rounds=5)
    finally:
        server.stop()


if __name__ == "__main__":
    main()
