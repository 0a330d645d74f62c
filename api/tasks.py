"""The service's computations, run in worker processes (:mod:`api.compute`).

Each task reads stored objects by path, calls the library, and returns its ``to_dict()`` --
the same the library and the CLI give -- as JSON text (cheaper to send back from a worker
than the nested dict).
"""

from __future__ import annotations

import json
import warnings
from pathlib import Path

from align.describe import describe_grid
from align.io import open_record, save_grid
from align.lag import Sources, estimate_lag


def _json(result):
    return json.dumps(result.to_dict())


class StoreSources(Sources):
    """Records and ties named by their store ids (mapped to paths by the route)."""

    def __init__(self, paths):
        super().__init__()
        self.paths = dict(paths)

    def path(self, name):
        return Path(self.paths[name])

    def record(self, spec):
        return open_record(self.paths[spec.record])

    def ties(self, name):
        from align.ties import read_ties

        return read_ties(self.paths[name])


def limited(limits, task, *args):
    """``task(*args)`` under the service's resource limits (:mod:`align.limits`)."""
    from align.limits import use_limits

    with use_limits(**limits):
        return task(*args)


def ingest(root, path, name, mapping, upload_id):
    """Read and validate an upload, store it; returns (catalogue entry, RecordInfo dict)."""
    from align.describe import describe_record
    from align.errors import InputError
    from api.store import Store

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            record = open_record(path, **mapping)
    except InputError as exc:
        raise exc.with_source(name) from None
    record.attrs["source"] = name
    info = describe_record(record)
    entry, _ = Store(root).add_record(upload_id, record, info)
    return entry, info.to_dict()


def lag(request, paths):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return _json(estimate_lag(request, sources=StoreSources(paths)))


def detect(body, path):
    """Any marker kind (``body`` is a ``POST /detect/{kind}`` request)."""
    from align.detect import detect_marker

    spec = {k: v for k, v in body.items() if k not in ("seed", "age_reference")}
    return _json(detect_marker(open_record(path), spec, seed=body.get("seed"),
                               age_reference=body.get("age_reference")))


def xcorr(body, path_a, path_b):
    from align.xcorr import cross_correlate

    options = {k: v for k, v in body.items() if k not in ("a", "b", "max_lag")}
    return _json(cross_correlate((open_record(path_a), body["a"]["variable"]),
                                 (open_record(path_b), body["b"]["variable"]), body["max_lag"],
                                 **options))


def resample(body, path, out_path):
    from align.resample import resample as run

    options = {k: v for k, v in body.items() if k not in ("record", "step")}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        grid = run(open_record(path), body.get("step"), **options)
    save_grid(grid, out_path, history="written by the corealign service")
    return _json(describe_grid(grid))


def survey(spec, paths):
    from align.survey import survey as run

    return _json(run(spec, sources=StoreSources(paths)))


def synchrony(body, paths):
    from align.synchrony import Sources as SiteSources
    from align.synchrony import test_synchrony

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return _json(test_synchrony(body, sources=SiteSources(StoreSources(paths))))


def render_report(result_path, folder):
    """Render a stored result's report into ``folder`` (a new folder, renamed into place)."""
    import shutil
    import tempfile

    from align.report import load_result, write_report

    folder = Path(folder)
    staging = Path(tempfile.mkdtemp(prefix=".report-", dir=folder.parent))
    try:
        write_report(load_result(result_path), staging)
        staging.rename(folder)
    except OSError:
        if not (folder / "report.html").exists():
            raise
        # rendered meanwhile by another request or process (rename onto a full folder fails
        # with ENOTEMPTY or EEXIST): theirs is as good as ours
    finally:
        shutil.rmtree(staging, ignore_errors=True)
