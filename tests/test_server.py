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
    out.pop("id", None)  # what the service adds: where it stored the result
    out.pop("links", None)
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
    assert lag.status_code == 201, lag.text
    assert lag.headers["Location"] == lag.json()["links"]["result"]
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
         "--phases", "coverage,fuzzing,stateful", "--max-examples", "10", "--workers", "1",
         "--max-time", "40", "--seed", "1"],
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
            for _ in range(25):
                start = time.perf_counter()
                response = session.post(server.url + "/lag", json=body, timeout=120)
                times.append(time.perf_counter() - start)
                if response.status_code != 201:
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
    print(f"load: 8 clients x 25 lag requests in {elapsed:.1f} s ({200 / elapsed:.1f} req/s); "
          f"latency median {times[100] * 1000:.0f} ms, 95th percentile "
          f"{times[190] * 1000:.0f} ms; failures {len(failures)}")
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


# --------------------------------------------------------------------------------------------
# settings, waitress's own errors, workers and signals


@pytest.mark.parametrize("option, value", [("--port", "70000"), ("--port", "0"),
                                           ("--workers", "-1"), ("--workers", "0"),
                                           ("--time-limit", "0"), ("--time-limit", "nan"),
                                           ("--worker-memory", "511"),
                                           ("--worker-memory", "inf")])
def test_serve_refuses_invalid_settings(tmp_path, option, value):
    from conftest import run_cli

    done = run_cli("serve", "--data-dir", tmp_path, option, value, timeout=60)
    assert done.returncode == 2, done.stderr
    assert f"'{option[2:]}'" in done.stderr and "must be" in done.stderr


def test_worker_memory_at_and_past_its_least_value():
    from align.errors import InputError
    from api.server import MIN_WORKER_MEMORY, check_settings

    check_settings(8750, 2, 300.0, 8, MIN_WORKER_MEMORY)
    check_settings(8750, 2, 300.0, 8, 2**20)
    for bad in (MIN_WORKER_MEMORY - 1, 2**20 + 1, float("nan")):
        with pytest.raises(InputError) as caught:
            check_settings(8750, 2, 300.0, 8, bad)
        assert caught.value.field == "worker-memory"


def test_a_body_over_the_limit_is_a_problem_even_before_the_app(server):
    """Waitress refuses a declared length over its limit without reading the body: the
    answer is problem details too."""
    import socket

    with socket.create_connection(("127.0.0.1", server.port), timeout=30) as sock:
        sock.sendall(b"POST /records HTTP/1.1\r\nHost: 127.0.0.1\r\n"
                     b"Content-Type: multipart/form-data; boundary=x\r\n"
                     b"Content-Length: 100000000000\r\n\r\n")
        reply = b""
        while b"\r\n\r\n" not in reply or not reply.rstrip().endswith(b"}"):
            chunk = sock.recv(65536)
            if not chunk:
                break
            reply += chunk
    head, _, body = reply.partition(b"\r\n\r\n")
    assert head.startswith(b"HTTP/1.1 413")
    assert b"content-type: application/problem+json" in head.lower()
    assert json.loads(body)["status"] == 413


def children(pid):
    """Processes whose parent is ``pid`` (from /proc)."""
    from pathlib import Path

    found = []
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[1]) == pid:
            found.append(int(stat.parent.name))
    return found


def workers_of(server):
    """The server's computation workers (spawned pebble processes)."""
    from pathlib import Path

    out = []
    for pid in children(server.process.pid):
        try:
            if b"spawn_main" in Path(f"/proc/{pid}/cmdline").read_bytes():
                out.append(pid)
        except OSError:
            continue
    return out


def alive(pid):
    from pathlib import Path

    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


SLOW = {"variable": "d18O", "window": [11900, 12500], "age_reference": "b2k",
        "method": "bayes", "draws": 100_000, "seed": 1}  # tens of seconds of MCMC


def _post_in_thread(url, body, into):
    def go():
        try:
            into.append(requests.post(url, json=body, timeout=300))
        except requests.RequestException as exc:
            into.append(exc)

    thread = threading.Thread(target=go)
    thread.start()
    return thread


def test_a_killed_worker_is_a_503_and_the_pool_is_whole_again(tmp_path):
    import os
    import signal

    server = Server(tmp_path / "store", "--workers", "1")
    try:
        lake = post_file(server.url + "/records", RECORDS / "trv3_lake.nc").json()["entry"]["id"]
        ice = post_file(server.url + "/records", RECORDS / "hvd1_ice.nc").json()["entry"]["id"]
        [worker] = workers_of(server)
        answers = []
        thread = _post_in_thread(server.url + "/detect/onset", {"record": lake, **SLOW},
                                 answers)
        time.sleep(3.0)  # the worker is inside the computation
        os.kill(worker, signal.SIGKILL)
        thread.join(timeout=60)
        [answer] = answers
        assert answer.status_code == 503, answer.text
        assert answer.headers["Content-Type"] == "application/problem+json"
        assert int(answer.headers["Retry-After"]) > 0 and "try again" in answer.json()["detail"]
        ok = requests.post(server.url + "/detect/event", json={
            "record": ice, "variable": "sulfate", "window": [12150, 12350]}, timeout=120)
        assert ok.status_code == 200 and ok.json()["found"]
        replaced = workers_of(server)
        assert len(replaced) == 1 and worker not in replaced
    finally:
        server.stop()


def test_sigterm_during_a_computation_ends_server_and_workers(tmp_path):
    """Within 15 s of SIGTERM the server has exited and no worker is left."""
    server = Server(tmp_path / "store", "--workers", "2")
    lake = post_file(server.url + "/records", RECORDS / "trv3_lake.nc").json()["entry"]["id"]
    answers = []
    _post_in_thread(server.url + "/detect/onset", {"record": lake, **SLOW}, answers)
    time.sleep(3.0)
    workers = workers_of(server)
    assert workers
    start = time.monotonic()
    server.process.terminate()
    code = server.process.wait(timeout=15)
    while any(alive(pid) for pid in workers) and time.monotonic() - start < 15:
        time.sleep(0.1)
    assert not [pid for pid in workers if alive(pid)], "workers outlived the server"
    print(f"server and workers ended {time.monotonic() - start:.1f} s after SIGTERM "
          f"(exit code {code})")
    assert code == 143


# --------------------------------------------------------------------------------------------
# memory: the worker memory limit and the service's peak resident memory

#: The worker memory limit of the tests below (MiB): low enough that a cross-correlation just
#: under the service's size limits (2.4 GB measured without a limit) cannot fit.
WORKER_MIB = 600


@pytest.fixture(scope="module")
def bounded(tmp_path_factory):
    running = Server(tmp_path_factory.mktemp("store"), "--workers", "2", "--worker-memory",
                     str(WORKER_MIB))
    yield running
    running.stop()


def high_water(pid):
    """A process's peak resident memory in bytes (``VmHWM``), or None once it has ended."""
    from pathlib import Path

    try:
        status = Path(f"/proc/{pid}/status").read_text()
    except OSError:
        return None
    line = next(row for row in status.splitlines() if row.startswith("VmHWM:"))
    return int(line.split()[1]) * 1024


class Peaks:
    """The peak resident memory of a server, of each of its workers and of its other child
    processes (multiprocessing's resource tracker), polled every 0.1 s (a worker replaced
    meanwhile keeps the peak it reached)."""

    def __init__(self, server):
        self.server, self.peaks, self.workers = server, {}, set()
        self.running = True
        self.thread = threading.Thread(target=self._poll)
        self.thread.start()

    def _poll(self):
        while self.running:
            self.read()
            time.sleep(0.1)

    def read(self):
        self.workers.update(workers_of(self.server))
        for pid in [self.server.process.pid, *children(self.server.process.pid)]:
            peak = high_water(pid)
            if peak is not None:
                self.peaks[pid] = max(peak, self.peaks.get(pid, 0))

    def stop(self):
        """Stop polling; return the peaks of the server with its other children (bytes)
        and of each worker (by process id)."""
        self.running = False
        self.thread.join()
        self.read()
        workers = {pid: peak for pid, peak in self.peaks.items() if pid in self.workers}
        return sum(self.peaks.values()) - sum(workers.values()), workers


def zlib_bomb(path, length=2**24):
    """A 1.5 MB NetCDF record whose two variables hold 128 MiB each (zeros and a ramp,
    compressed): each just under the service's ``variable_bytes`` limit."""
    import netCDF4
    import numpy as np

    with netCDF4.Dataset(path, "w") as ds:
        ds.createDimension("sample", length)
        age = ds.createVariable("age", "f8", ("sample",), zlib=True, shuffle=True,
                                complevel=1, chunksizes=(2**20,))
        age.units, age.age_reference = "yr", "b2k"
        age[:] = np.arange(1.0, length + 1.0)
        ca = ds.createVariable("Ca", "f8", ("sample",), zlib=True, complevel=1,
                               chunksizes=(2**20,))
        ca[:] = np.zeros(length)
    return path


def test_peak_memory_under_the_corpus_stays_below_the_bound(bounded, tmp_path):
    """Every bad-input case of the corpus uploaded (as the library and CLI read them), the
    reading keywords of the wrong type, requests whose sizes are over the limits, and a zlib
    bomb: none is an internal error, and the peak resident memory of the server and of each
    worker stays below the bound the service documents (api.server.peak_memory)."""
    from api.server import SERVER_MEMORY, WORKER_CODE, peak_memory
    from corpus import CASES, MAPPING_CASES

    peaks = Peaks(bounded)
    statuses = []
    try:
        for name, content, suffix, mapping, _ in CASES:
            path = tmp_path / f"{name}{suffix}"
            path.write_bytes(content if isinstance(content, bytes) else content.encode())
            statuses.append((name, post_file(bounded.url + "/records", path, mapping)))
        good = tmp_path / "good.csv"
        good.write_text("depth,age,x\n1,100,1\n2,110,2\n")
        for name, mapping, _, _ in MAPPING_CASES:
            statuses.append((name, post_file(bounded.url + "/records", good, mapping)))
        statuses.append(("zlib-bomb", post_file(bounded.url + "/records",
                                                zlib_bomb(tmp_path / "bomb.nc"))))
        ice = post_file(bounded.url + "/records", RECORDS / "hvd1_ice.nc").json()["entry"]["id"]
        lake = post_file(bounded.url + "/records",
                         RECORDS / "trv3_lake.nc").json()["entry"]["id"]
        pair = {"a": {"record": ice, "variable": "d18O"}, "b": {"record": lake,
                                                                 "variable": "d18O"}}
        for route, body in [
                ("/resample", {"record": ice, "step": 1e-6}),
                ("/xcorr", {**pair, "max_lag": 1e12}),
                ("/xcorr", {**pair, "max_lag": 100, "step": 1e-6}),
                ("/detect/onset", {"record": lake, "variable": "d18O", "draws": 10**9,
                                   "window": [11900, 12500], "age_reference": "b2k"}),
                ("/detect/onset", {"record": lake, "variable": "d18O", "seed": -1,
                                   "window": [11900, 12500], "age_reference": "b2k"}),
                ("/resample", {"record": ice, "step": 10, "stop": 1e308})]:
            statuses.append((route, requests.post(bounded.url + route, json=body, timeout=120)))
    finally:
        server, workers = peaks.stop()
    errors = [(name, r.status_code, r.text[:200]) for name, r in statuses
              if r.status_code >= 500 or (r.status_code >= 400 and r.headers["Content-Type"]
                                          != "application/problem+json")]
    assert errors == []
    assert all(400 <= r.status_code < 500 for name, r in statuses if name != "zlib-bomb")
    limit = WORKER_MIB * 2**20
    bound = peak_memory(len(workers), limit)
    total = server + sum(workers.values())
    print(f"peak resident memory under the corpus: server (with its resource tracker) "
          f"{server / 2**20:.0f} MiB, workers "
          + ", ".join(f"{w / 2**20:.0f}" for w in workers.values())
          + f" MiB; total {total / 2**20:.0f} MiB, bound {bound / 2**20:.0f} MiB "
          f"(zlib bomb answered {dict(statuses)['zlib-bomb'].status_code})")
    assert workers, "no worker was seen"
    assert server < SERVER_MEMORY * 2**20
    assert all(peak < limit + WORKER_CODE * 2**20 for peak in workers.values())
    assert total < bound


def test_a_computation_over_the_worker_memory_limit_is_a_413_and_the_pool_stays(bounded):
    """A cross-correlation just under the service's size limits (20 million lags x cells and
    surrogates x cells) needs more than a 600 MiB worker may hold: 413 naming the limit, the
    same workers, and the next request succeeds."""
    from api import DEFAULTS

    ice = post_file(bounded.url + "/records", RECORDS / "hvd1_ice.nc").json()["entry"]["id"]
    lake = post_file(bounded.url + "/records", RECORDS / "trv3_lake.nc").json()["entry"]["id"]
    # window 1000 yr by 0.3 yr: 3,334 cells; max_lag 899: 5,995 lags
    body = {"a": {"record": ice, "variable": "d18O"}, "b": {"record": lake, "variable": "d18O"},
            "max_lag": 899, "step": 0.3, "window": [11400, 12400], "surrogates": 5990,
            "bootstrap": 5990, "seed": 1, "age_reference": "b2k"}
    cells, lags = 3334, 5995
    assert lags * cells <= DEFAULTS["LIMITS"]["lags_x_length"]
    assert 5990 * cells <= DEFAULTS["LIMITS"]["surrogates_x_length"]
    before = set(workers_of(bounded))
    over = requests.post(bounded.url + "/xcorr", json=body, timeout=300)
    assert over.status_code == 413, over.text
    assert over.headers["Content-Type"] == "application/problem+json"
    assert f"worker memory limit of {WORKER_MIB} MiB" in over.json()["detail"]
    ok = requests.post(bounded.url + "/detect/event", json={
        "record": ice, "variable": "sulfate", "window": [12150, 12350]}, timeout=120)
    assert ok.status_code == 200 and ok.json()["found"]
    assert set(workers_of(bounded)) == before and len(before) == 2
