"""The service as a real server process on 127.0.0.1: requests, fuzzing, load, crashes."""

import json
import subprocess
import sys
import threading
import time

import pytest
import requests

from align.lag import estimate_lag
from conftest import RECORDS, ROOT, Server

pytestmark = pytest.mark.server


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    running = Server(tmp_path_factory.mktemp("store"), "--workers", "2")
    yield running
    running.stop()


def post_file(url, path, mapping=None):
    with open(path, "rb") as handle:
        data = {"mapping": json.dumps(mapping)} if mapping else None
        return requests.post(url, files={"file": (path.name, handle)}, data=data, timeout=120)


def small_lag(ice_id, lake_id):
    """Two events (no onset bootstrap): a fast request for the load test."""
    return {"a": {"kind": "event", "record": ice_id, "variable": "sulfate",
                  "window": [12150, 12350]},
            "b": {"kind": "event", "record": lake_id, "variable": "tephra",
                  "window": [11850, 12000]},
            "age_reference": "b2k", "draws": 5000, "seed": 11}


def comparable(result):
    """A result without what legitimately differs between routes: when and from which path."""
    out = json.loads(json.dumps(result))
    out["provenance"].pop("created")
    for item in out["provenance"]["inputs"]:
        item.pop("source")
        item.pop("sha256")
    for side in ("a", "b"):
        out[side]["provenance"].pop("created")
        for item in out[side]["provenance"]["inputs"]:
            item.pop("source")
            item.pop("sha256")
        out["request"][side].pop("record")
    out["request"].pop("ties")
    out["provenance"]["parameters"]["a"].pop("record")
    out["provenance"]["parameters"]["b"].pop("record")
    out["provenance"]["parameters"].pop("ties")
    return out


def test_round_trip_on_a_real_server(server):
    ice = post_file(server.url + "/records", RECORDS / "hvd1_ice.nc")
    assert ice.status_code in (200, 201) and ice.headers["Content-Type"] == "application/json"
    lake = post_file(server.url + "/records", RECORDS / "trv3_lake.nc")
    ties = post_file(server.url + "/ties", RECORDS / "hvd1_trv3_ties.csv")
    request = json.loads((RECORDS / "demo_lag_request.json").read_text())
    request["a"]["record"] = ice.json()["entry"]["id"]
    request["b"]["record"] = lake.json()["entry"]["id"]
    request["ties"] = ties.json()["id"]
    lag = requests.post(server.url + "/lag", json=request, timeout=300)
    assert lag.status_code == 200, lag.text
    truth = json.loads((RECORDS / "truth.json").read_text())
    lo, hi = lag.json()["lag"]["ci95"]
    assert lo <= truth["lag_on_ice_timescale"] <= hi
    page = requests.get(server.url + lag.headers["Location"] + ".html", timeout=300)
    assert page.status_code == 200 and page.text.count("<svg") == 5
    missing = requests.get(server.url + "/records/" + "0" * 64, timeout=10)
    assert missing.status_code == 404
    assert missing.headers["Content-Type"] == "application/problem+json"


def test_schemathesis_finds_no_server_error(server):
    """Property-based requests generated from /openapi.json: no 5xx, every response (status,
    content type, body) as the document says."""
    done = subprocess.run(
        [sys.executable, "-m", "schemathesis.cli", "run", server.url + "/openapi.json",
         "--checks", "not_a_server_error,status_code_conformance,content_type_conformance,"
                     "response_schema_conformance",
         "--phases", "coverage,fuzzing", "--max-examples", "10", "--workers", "1",
         "--max-time", "60", "--seed", "1"],
        capture_output=True, text=True, timeout=600, cwd=ROOT)
    assert done.returncode == 0, done.stdout[-4000:]


def test_concurrent_load_matches_the_library(server):
    ice = post_file(server.url + "/records", RECORDS / "hvd1_ice.nc").json()["entry"]["id"]
    lake = post_file(server.url + "/records", RECORDS / "trv3_lake.nc").json()["entry"]["id"]
    body = small_lag(ice, lake)
    expected = comparable(estimate_lag({
        **body, "a": {**body["a"], "record": str(RECORDS / "hvd1_ice.nc")},
        "b": {**body["b"], "record": str(RECORDS / "trv3_lake.nc")}}).to_dict())
    failures, times = [], []

    def client():
        with requests.Session() as session:
            for _ in range(50):
                start = time.perf_counter()
                response = session.post(server.url + "/lag", json=body, timeout=120)
                times.append(time.perf_counter() - start)
                if response.status_code != 200:
                    failures.append(response.text)
                elif comparable(response.json()) != expected:
                    failures.append("result differs from the library's")

    threads = [threading.Thread(target=client) for _ in range(8)]
    start = time.perf_counter()
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    elapsed = time.perf_counter() - start
    times.sort()
    print(f"load: 8 clients x 50 lag requests in {elapsed:.1f} s ({400 / elapsed:.1f} req/s); "
          f"latency median {times[200] * 1000:.0f} ms, 95th percentile "
          f"{times[380] * 1000:.0f} ms; failures {len(failures)}")
    assert failures == []


def test_kill_mid_upload_leaves_no_partial_record(tmp_path):
    data = tmp_path / "store"
    big = tmp_path / "big.csv"
    with open(big, "w") as handle:
        handle.write("depth,age,x\n")
        for start in range(0, 1_500_000, 100_000):
            handle.write("".join(f"{(i + 1) * 0.001:.3f},{i + 1},{i % 97}\n"
                                 for i in range(start, start + 100_000)))
    killed = 0
    for _ in range(3):
        server = Server(data, "--workers", "1")
        thread = threading.Thread(target=_quietly, args=(
            post_file, server.url + "/records", big, {"age_reference": "b2k"}))
        thread.start()
        objects = data / "objects" / "records"
        deadline = time.time() + 120
        while time.time() < deadline and thread.is_alive():
            if any(p.name.startswith(".") for p in objects.iterdir()):
                server.kill()  # mid-write: a temporary file exists
                killed += 1
                break
            time.sleep(0.001)
        thread.join(timeout=120)
        server.stop()
        restarted = Server(data, "--workers", "1")
        try:
            rows = {r["id"] for r in requests.get(restarted.url + "/records",
                                                  timeout=10).json()["records"]}
            files = {p.stem for p in objects.iterdir()}
            assert rows == files
            assert not any(p.name.startswith(".") for p in objects.iterdir())
            assert not list((data / "uploads").iterdir())
            for record_id in rows:  # whatever is catalogued is whole
                info = requests.get(f"{restarted.url}/records/{record_id}", timeout=30)
                assert info.json()["info"]["n_samples"] == 1_500_000
        finally:
            restarted.stop()
        if killed:
            break
    assert killed, "never caught the server mid-write"


def _quietly(function, *args):
    try:
        function(*args)
    except requests.RequestException:
        pass  # the server was killed under the request
