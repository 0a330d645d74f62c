"""Ctrl-C and SIGTERM while the command line writes a NetCDF file: the process ends promptly
with 130 or 143 and leaves neither a temporary file nor a half-written output."""

import signal
import subprocess
import sys
import time

import pytest

from conftest import RECORDS, ROOT


@pytest.mark.parametrize("sig, code", [(signal.SIGINT, 130), (signal.SIGTERM, 143)],
                         ids=["ctrl-c", "sigterm"])
def test_signal_during_a_netcdf_write(tmp_path, sig, code):
    out = tmp_path / "grid.nc"
    # about 900,000 cells: the write takes long enough to be caught in the middle
    process = subprocess.Popen([sys.executable, "-m", "align", "resample",
                                RECORDS / "hvd1_ice.nc", "--step", "0.002", "-o", out],
                               cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                               text=True)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and process.poll() is None:
        if any(p.name.endswith(".part") for p in tmp_path.iterdir()):
            break
        time.sleep(0.002)
    assert process.poll() is None, "the command ended before the write was caught"
    sent = time.monotonic()
    process.send_signal(sig)
    try:
        _, err = process.communicate(timeout=30)
    except subprocess.TimeoutExpired:
        process.kill()
        pytest.fail("the process hung after the signal")
    took = time.monotonic() - sent
    assert process.returncode == code, err
    assert list(tmp_path.iterdir()) == [], "a temporary or partial file was left"
    assert "Traceback" not in err
    assert took < 20, f"took {took:.1f} s to end"
