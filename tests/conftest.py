"""Shared fixtures: paths to the bundled demo records and to the outside reference data."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
RECORDS = ROOT / "records"


def reference_data_dir():
    """The published reference data: the copy in ``tests/data`` (see its README for sources and
    licence), or ``$COREALIGN_REFERENCE_DATA``. Its absence is a failure, not a skip: the
    outside checks are part of the suite."""
    path = Path(os.environ.get("COREALIGN_REFERENCE_DATA", ROOT / "tests" / "data"))
    if not (path / "greenland" / "GIS_table.txt").exists():
        pytest.fail(f"reference data not found at {path}; set COREALIGN_REFERENCE_DATA to the "
                    "folder holding greenland/ (see tests/data/README.md)")
    return path


@pytest.fixture(scope="session")
def greenland():
    """Folder of the Greenland reference data (Erhardt et al. 2019; Rasmussen et al. 2014)."""
    return reference_data_dir() / "greenland"


@pytest.fixture(scope="session")
def ngrip_csv(greenland):
    return greenland / "NGRIP_10yr.csv"


def run_cli(*args, cwd=None, timeout=600):
    """Run ``corealign`` in a subprocess; return the CompletedProcess (text mode)."""
    return subprocess.run([sys.executable, "-m", "align", *map(str, args)], capture_output=True,
                          text=True, cwd=cwd or ROOT, timeout=timeout)


@pytest.fixture
def app(tmp_path):
    """A fresh service with its own store; computations in the request thread."""
    from api import create_app

    return create_app({"DATA_DIR": str(tmp_path / "store"), "WORKERS": 0})


@pytest.fixture
def client(app):
    return app.test_client()


def upload(client, path, mapping=None, name=None, headers=None):
    """POST a file to /records (multipart), returning the response."""
    import json

    data = {"file": (open(path, "rb"), name or Path(path).name)}
    if mapping is not None:
        data["mapping"] = json.dumps(mapping)
    return client.post("/records", data=data, content_type="multipart/form-data",
                       headers=headers or {})


def free_port():
    import socket

    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


class Server:
    """A real ``corealign serve`` process on 127.0.0.1."""

    def __init__(self, data_dir, *options):
        import time

        import requests

        self.port = free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        self.args = [sys.executable, "-m", "align", "serve", "--port", str(self.port),
                     "--data-dir", str(data_dir), *map(str, options)]
        self.process = subprocess.Popen(self.args, cwd=ROOT, stdout=subprocess.PIPE,
                                        stderr=subprocess.STDOUT, text=True)
        deadline = time.time() + 60
        while time.time() < deadline:
            try:
                if requests.get(self.url + "/health", timeout=2).status_code == 200:
                    return
            except requests.ConnectionError:
                time.sleep(0.2)
        self.stop()
        raise RuntimeError("the server did not start: " + (self.process.stdout.read() or ""))

    def stop(self):
        if self.process.poll() is None:
            self.process.terminate()
            try:
                self.process.wait(timeout=15)
            except subprocess.TimeoutExpired:
                self.process.kill()
                self.process.wait()

    def kill(self):
        self.process.kill()
        self.process.wait()
