"""The bundled demo: an invented scenario with synthetic records and a known truth."""

from __future__ import annotations

import json
from pathlib import Path

from align.errors import InputError

_REQUEST = "demo_lag_request.json"


def demo_records_dir():
    """Folder of the demo records: installed with the package, or ``records/`` in a checkout."""
    here = Path(__file__).resolve().parent
    for candidate in (here / "demo_records", here.parent / "records"):
        if (candidate / _REQUEST).exists():
            return candidate
    raise InputError("the demo records are not installed (reinstall corealign)",
                     source=str(here / "demo_records"))


def demo_truth():
    """The demo's truth as documented in ``records/README.md`` (``truth.json``)."""
    return json.loads((demo_records_dir() / "truth.json").read_text())


def demo_sites_path():
    """Path of the synchrony demo's site file (one invented eruption at eight sites)."""
    return demo_records_dir() / "demo_sites.json"


def demo_sites_truth():
    """The synchrony demo's truth as documented in ``records/README.md``."""
    return json.loads((demo_records_dir() / "demo_sites_truth.json").read_text())


def demo_request_path():
    """Path of the demo lag request."""
    return demo_records_dir() / _REQUEST
