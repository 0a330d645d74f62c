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
    """The published reference data (``../shared/data`` beside the project, or
    ``$COREALIGN_REFERENCE_DATA``). Its absence is a failure, not a skip: the outside checks
    are part of the suite."""
    path = Path(os.environ.get("COREALIGN_REFERENCE_DATA", ROOT.parent / "shared" / "data"))
    if not (path / "greenland" / "GIS_table.txt").exists():
        pytest.fail(f"reference data not found at {path}; set COREALIGN_REFERENCE_DATA to the "
                    "folder holding greenland/ (see tests/README.md)")
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
