"""The service's routes: thin views that check, look up, compute (in a worker) and answer."""

from __future__ import annotations

import json
import re
import tempfile
import threading
from contextlib import contextmanager
from pathlib import Path

from flask import Blueprint, current_app, jsonify, request, send_file

from align.errors import InputError
from align.provenance import sha256_bytes, version
from align.schema import (DETECT_REQUESTS, RECORD_KINDS, GridSummary, LagRequest, RecordInfo,
                          ResampleRequest, SurveySpec, SynchronyRequest, SynchronyResult,
                          XcorrRequest)
from api.bodies import (Health, RecordList, StoredLagResult, StoredRecord, StoredSurveyResult,
                        StoredTable, StoredTies, StoredXcorrResult)
from align.ties import read_ties
from api import locate, tasks
from api.compute import ComputationTimeout, WorkerLost, run
from api.locate import Where
from api.problems import Problem
from api.spec import endpoint, openapi_text

meta = Blueprint("meta", __name__)
records = Blueprint("records", __name__)
analysis = Blueprint("analysis", __name__)
reports = Blueprint("reports", __name__)
BLUEPRINTS = (meta, records, analysis, reports)

#: Keywords a CSV upload's ``mapping`` may use (those of :func:`align.open_record`).
MAPPING_KEYS = {"age_reference", "age_column", "depth_column", "age_sd_column", "mce_column",
                "depth_top_column", "depth_bottom_column", "age_top_column",
                "age_bottom_column", "age_units", "depth_units", "variables", "units",
                "archive", "site", "core", "timescale", "timescale_kind", "missing_values",
                "relative_to", "relative_sign", "sheet", "names", "decimal"}
UPLOAD_SCHEMA = {"type": "object", "required": ["file"], "properties": {
    "file": {"type": "string", "format": "binary",
             "description": "NetCDF, or CSV/TSV with a mapping"},
    "mapping": {"type": "string", "description": "JSON object of open_record keywords "
                                                  "(age_column, age_reference, ...)"}}}
SITES_SCHEMA = {"type": "object", "required": ["file"], "properties": {
    "file": {"type": "string", "format": "binary",
             "description": "CSV site table: label,age,sd[,lower,upper,age_reference,"
                            "chronology,shared_sd,independent]"},
    "options": {"type": "string", "description": "JSON object: age_reference, draws, seed, "
                                                 "outlier_prior"}}}
#: Result kinds with a rendered report.
RESULT_KINDS = ("lag", "survey", "synchrony", "xcorr")
TABLE_SCHEMA = {"type": "object", "required": ["file"], "properties": {
    "file": {"type": "string", "format": "binary",
             "description": "an event table (CSV/TSV with a header line) for surveys"}}}
TIES_SCHEMA = {"type": "object", "required": ["file"], "properties": {
    "file": {"type": "string", "format": "binary",
             "description": "label,depth,ref_depth|ref_age,sd"}}}


#: What a stored result links to (OpenAPI links: stateful tests follow them).
RESULT_LINKS = {"result": ("report_json", {"report_id": "$response.body#/id"})}


def store():
    return current_app.extensions["corealign.store"]


def compute(task, *args, where=None):
    """Run a task in a worker under the configured time and resource limits; a library error
    is answered with a pointer into the request (``where``, :class:`api.locate.Where`)."""
    config = current_app.config
    try:
        return run(tasks.limited, config["LIMITS"], task, *args, workers=config["WORKERS"],
                   timeout=config["TIME_LIMIT"], memory=config["WORKER_MEMORY"])
    except ComputationTimeout as exc:
        raise Problem(503, str(exc), title="Computation stopped",
                      headers={"Retry-After": "60"}) from None
    except WorkerLost as exc:
        raise Problem(503, str(exc), title="Computation stopped",
                      headers={"Retry-After": "5"}) from None
    except InputError as exc:
        raise locate.problem(exc, where or Where(), store().root) from None


def answer(body, status=200, location=None):
    """A JSON response (``body`` a dict, or JSON text already made)."""
    response = (current_app.response_class(body, mimetype="application/json")
                if isinstance(body, str) else jsonify(body))
    response.status_code = status
    if location:
        response.headers["Location"] = location
    return response


def record_path(record_id, pointer):
    """The stored file of a record named in a body; 422 (with a pointer) when unknown."""
    path = store().path("records", record_id)
    if path is None or not store().has("records", record_id):
        raise Problem(422, f"no stored record with id {record_id!r}", pointer=pointer)
    return str(path)


def limit(value, name, pointer):
    ceiling = current_app.config[name]
    if value is not None and value > ceiling:
        raise Problem(422, f"{pointer.strip('/')} may be at most {ceiling} on this service",
                      pointer=pointer)


# --------------------------------------------------------------------------------------------
# meta


@endpoint(meta, "/health", "GET", summary="Is the service up?", response=Health, public=True)
def health():
    return answer(Health(status="ok", version=version()).to_dict())


@endpoint(meta, "/openapi.json", "GET", summary="This API's OpenAPI document",
          produces=("application/json",), public=True)
def openapi():
    return answer(openapi_text(version()))


# --------------------------------------------------------------------------------------------
# records and ties


@endpoint(records, "/records", "POST", summary="Upload a record (NetCDF, or CSV with a mapping)",
          multipart=UPLOAD_SCHEMA, response=StoredRecord, status=201, write=True, computes=True,
          links={"record": ("get_record", {"record_id": "$response.body#/entry/id"})})
def upload_record():
    raw, name = _upload()
    mapping = _mapping()
    upload_id = sha256_bytes(raw + json.dumps(mapping, sort_keys=True).encode())
    existing = store().record_entry(upload_id)
    if existing is not None:
        info = store().record_info(upload_id)
        return answer({"entry": existing, "info": info}, 200, f"/records/{upload_id}")
    folder = store().root / "uploads"
    with tempfile.NamedTemporaryFile(dir=folder, suffix=_suffix(name),
                                     delete=False) as handle:
        handle.write(raw)
    try:
        entry, info = compute(tasks.ingest, str(store().root), handle.name, name, mapping,
                              upload_id, where=Where(
                                  fields={k: f"/mapping/{k}" for k in MAPPING_KEYS},
                                  default="/file"))
    finally:
        Path(handle.name).unlink(missing_ok=True)
    return answer({"entry": entry, "info": info}, 201, f"/records/{upload_id}")


def _upload():
    if request.mimetype != "multipart/form-data":
        raise Problem(415, "upload as multipart/form-data with the file in the field 'file'")
    upload = request.files.get("file")
    if upload is None:
        raise Problem(422, "the form has no field 'file'", pointer="/file")
    raw = upload.read()
    if not raw:
        raise Problem(422, "the uploaded file is empty", pointer="/file")
    return raw, upload_name(upload.filename)


def upload_name(filename):
    """An upload's file name made safe to show and to take a suffix from: the last path part,
    without control characters, at most 120 characters (the suffix kept when it is short)."""
    name = re.sub(r"[\x00-\x1f\x7f]", "", (filename or "").replace("\\", "/"))
    name = name.rsplit("/", 1)[-1].strip() or "upload"
    if len(name) > 120:
        suffix = _suffix(name)
        name = name[:120 - len(suffix)] + "..." + suffix
    return name


def _suffix(name):
    """The file name's suffix when it is a plausible one (``.nc``, ``.csv``), else ``.dat``."""
    match = re.search(r"\.[A-Za-z0-9]{1,12}$", name)
    return match[0] if match else ".dat"


def _mapping():
    text = request.form.get("mapping")
    if not text:
        return {}
    try:
        mapping = json.loads(text)
    except (json.JSONDecodeError, RecursionError):
        raise Problem(422, "mapping is not valid JSON (or nested too deeply)",
                      pointer="/mapping") from None
    if not isinstance(mapping, dict):
        raise Problem(422, "mapping must be a JSON object", pointer="/mapping")
    unknown = sorted(set(mapping) - MAPPING_KEYS)
    if unknown:
        raise Problem(422, f"unknown mapping key {unknown[0]!r}", pointer=f"/mapping/{unknown[0]}")
    return mapping


@endpoint(records, "/records", "GET", summary="The catalogue", response=RecordList)
def list_records():
    return answer({"records": store().records()})


def _entry_or_404(record_id):
    entry = store().record_entry(record_id)
    if entry is None:
        raise Problem(404, f"no stored record with id {record_id!r}")
    return entry


@endpoint(records, "/records/<record_id>", "GET", summary="One record: catalogue entry and "
          "contents", response=StoredRecord)
def get_record(record_id):
    entry = _entry_or_404(record_id)
    return answer({"entry": entry, "info": RecordInfo.model_validate(
        store().record_info(record_id)).to_dict()})


@endpoint(records, "/records/<record_id>", "DELETE", summary="Remove a record", status=204,
          write=True)
def delete_record(record_id):
    _entry_or_404(record_id)
    store().delete_record(record_id)
    return "", 204


@endpoint(records, "/records/<record_id>/data", "GET", summary="Download a record",
          produces=("application/x-netcdf", "text/csv"),
          query=({"name": "format", "schema": {"type": "string", "enum": ["netcdf", "csv"]}},))
def record_data(record_id):
    _entry_or_404(record_id)
    kind = request.args.get("format", "netcdf")
    path = store().path("records", record_id)
    if kind == "netcdf":
        return send_file(path, mimetype="application/x-netcdf", as_attachment=True,
                         download_name=f"{record_id[:12]}.nc")
    if kind == "csv":
        from align.io import open_record, record_to_csv

        response = current_app.response_class(record_to_csv(open_record(path)),
                                              mimetype="text/csv")
        response.headers["Content-Disposition"] = f"attachment; filename={record_id[:12]}.csv"
        return response
    raise Problem(422, "format is netcdf or csv", pointer="/format")


@endpoint(records, "/tables", "POST", summary="Upload an event table (for surveys)",
          multipart=TABLE_SCHEMA, response=StoredTable, status=201, write=True)
def upload_table():
    from align.tables import read_table

    with uploaded() as (raw, name, path):
        try:
            with limits_of_service():
                frame = read_table(path).frame
        except InputError as exc:
            raise locate.problem(exc.with_source(name), Where(default="/file"),
                                 store().root) from None
    if frame.empty:
        raise Problem(422, f"{name}: the event table has no rows", pointer="/file")
    object_id = store().add_table(raw, list(frame.columns), len(frame))
    return answer({"id": object_id, "columns": list(frame.columns), "rows": len(frame),
                   "checksum": object_id}, 201, f"/tables/{object_id}")


def limits_of_service():
    """The service's resource limits, for work done in the request thread."""
    from align.limits import use_limits

    return use_limits(**current_app.config["LIMITS"])


@contextmanager
def uploaded(suffix=".csv"):
    """The upload's bytes, its name and a temporary copy in the store's uploads folder (a
    path for the readers), removed when the block ends."""
    raw, name = _upload()
    with tempfile.NamedTemporaryFile(dir=store().root / "uploads", suffix=suffix,
                                     delete=False) as handle:
        handle.write(raw)
    try:
        yield raw, name, Path(handle.name)
    finally:
        Path(handle.name).unlink(missing_ok=True)


@endpoint(records, "/ties", "POST", summary="Upload a tie table", multipart=TIES_SCHEMA,
          response=StoredTies, status=201, write=True)
def upload_ties():
    with uploaded() as (raw, name, path):
        try:
            ties = read_ties(path)
        except InputError as exc:
            raise exc.with_source(name) from None
    object_id = store().add_ties(raw, ties)
    return answer({"id": object_id, "labels": list(ties.labels), "ref_kind": ties.ref_kind,
                   "checksum": object_id}, 201, f"/ties/{object_id}")


# --------------------------------------------------------------------------------------------
# analyses


def _tabulated_sites_only(spec, pointer):
    """A sites marker in a lag takes tabulated dates (draws given as numbers); sites on stored
    records are combined by POST /synchrony."""
    for k, site in enumerate(spec.sites):
        for key in ("record", "draws"):
            if isinstance(site.get(key), str):
                raise Problem(422, f"in a lag, a site gives its date (age with sd or an "
                                   f"interval, or draws as numbers); {key} by name is taken by "
                                   "POST /synchrony", pointer=f"{pointer}/sites/{k}/{key}")


def marker_paths(spec, pointer, paths):
    """Check a marker spec's limits and add the stored file it names (if it is on a record)
    to ``paths``."""
    marker_limits(spec, pointer)
    if RECORD_KINDS.get(spec.kind) is None:
        _tabulated_sites_only(spec, pointer)
    else:
        paths[spec.record] = record_path(spec.record, f"{pointer}/record")


def marker_limits(spec, pointer):
    """The limits on a marker spec's own sizes (kinds that draw)."""
    if getattr(spec, "draws", None) is not None:
        limit(spec.draws, "MAX_DRAWS", f"{pointer}/draws")


def _detect_view(name):
    def view(body):
        marker_limits(body, "")
        path = record_path(body.record, "/record")
        return answer(compute(tasks.detect, body.model_dump(), path,
                              where=Where(sides={path: ("", body.variable)})))

    view.__name__ = f"detect_{name}"
    return view


for _name, _kind in RECORD_KINDS.items():  # one route per marker kind: POST /detect/{kind}
    endpoint(analysis, f"/detect/{_name}", "POST", summary=f"Find {_kind.summary}",
             body=DETECT_REQUESTS[_name], response=_kind.result, computes=True)(
        _detect_view(_name))


@endpoint(analysis, "/xcorr", "POST", summary="Cross-correlate two records",
          body=XcorrRequest, response=StoredXcorrResult, status=201, computes=True,
          links=RESULT_LINKS)
def xcorr(body):
    limit(body.surrogates, "MAX_SURROGATES", "/surrogates")
    limit(body.bootstrap, "MAX_SURROGATES", "/bootstrap")
    path_a = record_path(body.a.record, "/a/record")
    path_b = record_path(body.b.record, "/b/record")
    sides = {path_b: ("/b", body.b.variable), path_a: ("/a", body.a.variable)}
    text = compute(tasks.xcorr, body.model_dump(), path_a, path_b, where=Where(sides=sides))
    return stored_result("xcorr", text)


@endpoint(analysis, "/resample", "POST", summary="Resample a record onto a regular grid",
          body=ResampleRequest, response=GridSummary, status=201, computes=True)
def resample(body):
    path = record_path(body.record, "/record")
    entry = store().record_entry(body.record)
    span = entry["age_range"] if body.along == "age" else entry["depth_range"]
    if span is None:
        raise Problem(422, f"the record has no {body.along}", pointer="/along")
    grid_file = store().root / "uploads" / f"{sha256_bytes(body.model_dump_json().encode())}.nc"
    try:
        summary = compute(tasks.resample, body.model_dump(), path, str(grid_file),
                          where=Where(sides={path: ("", None)},
                                      fields={"records": "/record", "step": "/step",
                                              "start": "/start", "stop": "/stop"}))
        grid_id = store().add_grid(grid_file)
    finally:
        grid_file.unlink(missing_ok=True)
    return answer(summary, 201, location=f"/grids/{grid_id}")


@endpoint(analysis, "/grids/<grid_id>", "GET", summary="Download a grid made by /resample "
          "(CF NetCDF)", produces=("application/x-netcdf",))
def grid_data(grid_id):
    if not store().has("grids", grid_id):
        raise Problem(404, f"no stored grid with id {grid_id!r}")
    return send_file(store().path("grids", grid_id), mimetype="application/x-netcdf",
                     as_attachment=True, download_name=f"grid-{grid_id[:12]}.nc")


@endpoint(analysis, "/lag", "POST", summary="The lag between two markers, with its budget",
          body=LagRequest, response=StoredLagResult, status=201, computes=True,
          links=RESULT_LINKS)
def lag(body):
    limit(body.draws, "MAX_DRAWS", "/draws")
    paths = {}
    for side in ("a", "b"):
        marker_paths(getattr(body, side), f"/{side}", paths)
    if body.ties is not None:
        paths[body.ties] = _ties_path(body.ties, "/ties")
    sides = {paths[spec.record]: (f"/{side}", spec.variable)
             for side, spec in (("b", body.b), ("a", body.a))
             if getattr(spec, "record", None) in paths}
    text = compute(tasks.lag, body.model_dump(), paths, where=Where(sides=sides))
    return stored_result("lag", text)


@endpoint(analysis, "/survey", "POST", summary="Lags of many marker pairs, combined",
          body=SurveySpec, response=StoredSurveyResult, status=201, computes=True,
          links=RESULT_LINKS)
def survey(body):
    limit(body.draws, "MAX_DRAWS", "/draws")
    paths = {}
    if body.pairs:
        limit(len(body.pairs), "MAX_PAIRS", "/pairs")
        markers = [(f"/pairs/{k}/{side}", getattr(pair, side))
                   for k, pair in enumerate(body.pairs) for side in ("a", "b")]
    elif body.table is not None and body.a is not None and body.b is not None:
        paths[body.table.path] = _table_path(body.table.path)
        markers = [("/a", body.a), ("/b", body.b)]
    else:
        raise Problem(422, "a survey needs pairs, or a table (a stored event table's id) with "
                           "a and b", pointer="/pairs")
    for pointer, spec in markers:
        marker_paths(spec, pointer, paths)
    if body.ties is not None:
        paths[body.ties] = _ties_path(body.ties, "/ties")
    text = compute(tasks.survey, body.model_dump(), paths,
                   where=Where(fields={"pairs": "/pairs", "label_column": "/table/label_column",
                                       "age_column": "/table/age_column"}))
    return stored_result("survey", text)


def _table_path(table_id):
    """The stored event table a survey names; 422 (pointer ``/table/path``) when unknown."""
    if not store().has("tables", table_id):
        raise Problem(422, f"no stored event table with id {table_id!r} (upload it to "
                           "/tables)", pointer="/table/path")
    return str(store().path("tables", table_id))


def stored_result(kind, text):
    """Store a result (the library's JSON text) and answer 201 with its id and links in the
    body and its address in ``Location``."""
    result_id = store().add_result(kind, text)
    links = {"result": f"/reports/{result_id}"}
    if kind in RESULT_KINDS:
        links["report"] = f"/reports/{result_id}.html"
    extra = json.dumps({"id": result_id, "links": links})
    return answer(text[:-1] + ", " + extra[1:], 201, links["result"])


@endpoint(analysis, "/synchrony", "POST", summary="Is one horizon the same age at many sites? "
          "(sites tabulated or on stored records)", body=SynchronyRequest,
          response=SynchronyResult, computes=True)
def synchrony(body):
    return _synchrony(body.model_dump(exclude_unset=True), body)


@endpoint(analysis, "/synchrony/table", "POST", summary="Synchrony of the sites in an uploaded "
          "CSV site table", multipart=SITES_SCHEMA, response=SynchronyResult,
          computes=True)
def synchrony_table():
    from align.sites import read_site_table

    with uploaded() as (raw, name, path):
        try:
            sites = read_site_table(path)
        except InputError as exc:
            raise exc.with_source(name) from None
    options = _json_form("options")
    data = {**options, "sites": sites}
    return _synchrony(data, SynchronyRequest.model_validate(data))


def _json_form(field):
    text = request.form.get(field)
    try:
        value = json.loads(text) if text else {}
    except json.JSONDecodeError:
        raise Problem(422, f"{field} is not valid JSON", pointer=f"/{field}") from None
    if not isinstance(value, dict):
        raise Problem(422, f"{field} must be a JSON object", pointer=f"/{field}")
    return value


def _synchrony(data, body):
    limit(body.draws, "MAX_DRAWS", "/draws")
    paths = {}
    for k, site in enumerate(body.sites):
        if isinstance(site.draws, str):
            raise Problem(422, f"site {site.label!r}: the service takes draws as a list of "
                               "numbers, not a file name", pointer=f"/sites/{k}/draws")
        if site.record is not None:
            paths[site.record] = record_path(site.record, f"/sites/{k}/record")
    text = compute(tasks.synchrony, data, paths)
    report_id = store().add_result("synchrony", text)
    return answer(text, location=f"/reports/{report_id}")


def _ties_path(ties_id, pointer):
    if not store().has("ties", ties_id):
        raise Problem(422, f"no stored tie table with id {ties_id!r}", pointer=pointer)
    return str(store().path("ties", ties_id))


# --------------------------------------------------------------------------------------------
# reports


_RENDERING = {}
_RENDERING_LOCK = threading.Lock()


def _report_folder(report_id):
    """The rendered report folder, rendered once on first view: concurrent first views wait
    for the one rendering (and a folder is only ever renamed into place whole)."""
    if store().result_kind(report_id) not in RESULT_KINDS:
        raise Problem(404, f"no stored result with id {report_id!r}")
    folder = store().report_folder(report_id)
    if (folder / "report.html").exists():
        return folder
    with _RENDERING_LOCK:
        lock = _RENDERING.setdefault(report_id, threading.Lock())
    with lock:
        if not (folder / "report.html").exists():
            compute(tasks.render_report, str(store().path("results", report_id)), str(folder))
    with _RENDERING_LOCK:
        _RENDERING.pop(report_id, None)
    return folder


@endpoint(reports, "/reports/<report_id>", "GET", summary="A stored result (report.json)",
          produces=("application/json",))
def report_json(report_id):
    if store().result_kind(report_id) is None:
        raise Problem(404, f"no stored result with id {report_id!r}")
    return send_file(store().path("results", report_id), mimetype="application/json")


@endpoint(reports, "/reports/<report_id>.html", "GET", summary="The report as one HTML page",
          produces=("text/html",), computes=True)
def report_html(report_id):
    return send_file(_report_folder(report_id) / "report.html", mimetype="text/html")


@endpoint(reports, "/reports/<report_id>/figures/<name>", "GET", summary="A report figure",
          produces=("image/svg+xml", "image/png"), computes=True)
def report_figure(report_id, name):
    folder = _report_folder(report_id)
    path = folder / name
    if "/" in name or path.suffix not in (".svg", ".png") or not path.is_file():
        raise Problem(404, f"no figure {name!r} in this report")
    return send_file(path, mimetype="image/svg+xml" if path.suffix == ".svg" else "image/png")
