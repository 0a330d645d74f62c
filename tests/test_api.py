"""The HTTP service through Flask's test client: routes, errors, auth, limits, the store."""

import json

import numpy as np
import pytest
import xarray as xr

from align import open_record
from conftest import RECORDS, upload
from corpus import CASES


def stored(client, name):
    response = upload(client, RECORDS / name)
    assert response.status_code in (200, 201), response.json
    return response.json["entry"]["id"]


def problem(response, status):
    assert response.status_code == status, (response.status_code, response.get_data(True))
    assert response.content_type == "application/problem+json"
    body = response.json
    assert body["status"] == status and body["title"] and body["detail"]
    return body


def test_health_and_openapi(client):
    assert client.get("/health").json["status"] == "ok"
    doc = client.get("/openapi.json").json
    assert doc["openapi"].startswith("3.1")
    assert {"/lag", "/records", "/records/{record_id}", "/reports/{report_id}.html"} <= set(
        doc["paths"])
    assert "LagResult" in doc["components"]["schemas"]


def test_upload_list_get_download_delete(client, tmp_path):
    first = upload(client, RECORDS / "hvd1_ice.nc")
    assert first.status_code == 201 and first.headers["Location"].startswith("/records/")
    record_id = first.json["entry"]["id"]
    again = upload(client, RECORDS / "hvd1_ice.nc")
    assert again.status_code == 200 and again.json["entry"]["id"] == record_id  # immutable
    listed = client.get("/records").json["records"]
    assert [r["id"] for r in listed] == [record_id]
    info = client.get(f"/records/{record_id}").json["info"]
    assert info["timescale_kind"] == "layer-counted" and info["n_samples"] > 1000
    data = client.get(f"/records/{record_id}/data?format=netcdf")
    assert data.status_code == 200
    (tmp_path / "back.nc").write_bytes(data.data)
    back, original = open_record(tmp_path / "back.nc"), open_record(RECORDS / "hvd1_ice.nc")
    for name in ("sulfate", "d18O", "age_mce", "age_bounds", "depth"):
        np.testing.assert_array_equal(back[name].values, original[name].values)
        assert back[name].attrs == original[name].attrs
    for key in ("archive", "site", "core", "timescale", "timescale_kind"):
        assert back.attrs[key] == original.attrs[key]
    csv = client.get(f"/records/{record_id}/data?format=csv")
    assert csv.status_code == 200 and b"sulfate" in csv.data
    problem(client.get(f"/records/{record_id}/data?format=xls"), 422)
    assert client.delete(f"/records/{record_id}").status_code == 204
    problem(client.get(f"/records/{record_id}"), 404)
    assert not list((tmp_path / "store" / "objects" / "records").iterdir())


def test_csv_upload_with_mapping(client, ngrip_csv):
    response = upload(client, ngrip_csv, {"age_column": "Age_BP", "age_reference": "BP"})
    assert response.status_code == 201, response.json
    assert response.json["info"]["age"]["interval"]["median"] == 10.0
    bad = upload(client, ngrip_csv, {"age_colum": "Age_BP"})
    assert problem(bad, 422)["pointer"] == "/mapping/age_colum"


@pytest.mark.parametrize("name, content, suffix, mapping, fragments", CASES,
                         ids=[c[0] for c in CASES])
def test_bad_input_corpus_is_refused_and_not_stored(client, app, tmp_path, name, content, suffix,
                                                    mapping, fragments):
    path = tmp_path / f"{name}{suffix}"
    path.write_bytes(content if isinstance(content, bytes) else content.encode())
    response = upload(client, path, mapping)
    body = problem(response, response.status_code)
    assert 400 <= response.status_code < 500
    assert f"{name}{suffix}" in body["detail"] and str(tmp_path) not in body["detail"]
    for fragment in fragments:
        assert fragment in body["detail"]
    assert client.get("/records").json["records"] == []
    store = tmp_path / "store"
    assert not list((store / "objects" / "records").iterdir())
    assert not list((store / "uploads").iterdir())


def test_ids_are_validated_and_never_reach_outside_the_store(client):
    for path in ("/records/../../etc/passwd", "/records/%2e%2e%2fcatalogue.sqlite3",
                 "/records/abc", "/records/" + "g" * 64, "/reports/..%2f..%2fx.html",
                 "/reports/" + "0" * 64 + "/figures/..%2f..%2fcatalogue.sqlite3"):
        response = client.get(path)
        assert 400 <= response.status_code < 500
        assert response.content_type == "application/problem+json"


def test_malformed_unsupported_and_invalid_bodies(client):
    problem(client.post("/lag", data="{not json", content_type="application/json"), 400)
    problem(client.post("/lag", data="a=b", content_type="application/x-www-form-urlencoded"),
            415)
    body = problem(client.post("/lag", json={"a": {"kind": "spike"}}), 422)
    assert body["pointer"].startswith("/a")
    problem(client.post("/records", json={"file": "x"}), 415)
    problem(client.put("/lag", json={}), 405)
    problem(client.get("/no/such/route"), 404)


def test_limits_are_problems_not_crashes(tmp_path):
    from api import create_app

    app = create_app({"DATA_DIR": str(tmp_path / "s"), "WORKERS": 0, "MAX_DRAWS": 5000,
                      "MAX_CONTENT_LENGTH": 50_000})
    client = app.test_client()
    big = tmp_path / "big.csv"
    big.write_text("depth,x\n" + "".join(f"{i},{i}\n" for i in range(20_000)))
    problem(upload(client, big), 413)
    request = json.loads((RECORDS / "demo_lag_request.json").read_text())
    request["draws"] = 6000
    body = problem(client.post("/lag", json=request), 422)
    assert body["pointer"] == "/draws"


def test_a_token_guards_every_route_but_health_and_the_document(tmp_path):
    from api import create_app

    app = create_app({"DATA_DIR": str(tmp_path / "s"), "WORKERS": 0, "TOKEN": "s3cret"})
    client, auth = app.test_client(), {"Authorization": "Bearer s3cret"}
    refused = problem(upload(client, RECORDS / "hvd1_ice.nc"), 401)
    assert "Bearer" in refused["detail"]
    assert upload(client, RECORDS / "hvd1_ice.nc").headers["WWW-Authenticate"].startswith(
        "Bearer")
    problem(upload(client, RECORDS / "hvd1_ice.nc", headers={"Authorization": "Bearer nope"}),
            403)
    ok = upload(client, RECORDS / "hvd1_ice.nc", headers=auth)
    assert ok.status_code == 201
    ice = ok.json["entry"]["id"]
    assert client.get("/health").status_code == 200
    assert client.get("/openapi.json").status_code == 200
    problem(client.get("/records"), 401)  # reads need it too, by default
    assert client.get("/records", headers=auth).status_code == 200
    for path, body in (("/resample", {"record": ice, "step": 10}),
                       ("/xcorr", {"a": {"record": ice, "variable": "d18O"},
                                   "b": {"record": ice, "variable": "sulfate"},
                                   "max_lag": 50}),
                       ("/lag", json.loads((RECORDS / "demo_lag_request.json").read_text())),
                       ("/detect/event", {"record": ice, "variable": "sulfate"})):
        problem(client.post(path, json=body), 401)  # computing routes need it
    app.config["TOKEN_READS"] = False
    assert client.get("/records").status_code == 200
    assert client.get(f"/records/{ice}").status_code == 200
    problem(client.post("/resample", json={"record": ice, "step": 10}), 401)
    doc = client.get("/openapi.json").json
    assert doc["paths"]["/lag"]["post"]["security"] == [{"bearer": []}]
    assert "security" not in doc["paths"]["/health"]["get"]


def test_host_and_origin_are_checked(tmp_path):
    from api import create_app

    app = create_app({"DATA_DIR": str(tmp_path / "s"), "WORKERS": 0,
                      "ALLOWED_HOSTS": ("127.0.0.1", "localhost")})
    client = app.test_client()
    assert client.get("/records").status_code == 200
    problem(client.get("/records", headers={"Host": "rebound.example:8750"}), 403)
    page = {"Origin": "http://attacker.example"}
    body = problem(upload(client, RECORDS / "hvd1_ice.nc", headers=page), 403)
    assert "another origin" in body["detail"]
    assert client.get("/records").json["records"] == []  # nothing was stored
    problem(client.get("/records", headers={"Origin": "null"}), 403)
    problem(client.get("/records", headers={"Sec-Fetch-Site": "cross-site"}), 403)
    same = upload(client, RECORDS / "hvd1_ice.nc", headers={"Origin": "http://localhost"})
    assert same.status_code == 201


def test_store_sweeps_old_temporaries_without_a_restart(client, app, tmp_path):
    import os
    import time

    root = tmp_path / "store"
    old = [root / "uploads" / "tmpdead.csv", root / "objects" / "records" / ".x.nc.1.part"]
    fresh = root / "uploads" / "tmpalive.csv"
    for path in (*old, fresh):
        path.write_bytes(b"left by a stopped worker")
    staging = root / "reports" / ".report-dead"
    staging.mkdir()
    long_ago = time.time() - app.config["TIME_LIMIT"] - 120
    for path in (*old, staging):
        os.utime(path, (long_ago, long_ago))
    assert client.get("/health").status_code == 200  # any request may sweep (once a minute)
    assert not any(p.exists() for p in (*old, staging))
    assert fresh.exists()  # an upload still being read is left alone


def test_analyses_and_reports(client):
    ice, lake = stored(client, "hvd1_ice.nc"), stored(client, "trv3_lake.nc")
    ties = client.post("/ties", data={"file": (open(RECORDS / "hvd1_trv3_ties.csv", "rb"),
                                               "ties.csv")}, content_type="multipart/form-data")
    assert ties.status_code == 201 and ties.json["labels"][0] == "tephra V0"
    onset = client.post("/detect/onset", json={"record": lake, "variable": "d18O",
                                               "window": [11900, 12500], "age_reference": "b2k",
                                               "draws": 500, "seed": 1})
    assert onset.status_code == 200 and onset.json["kind"] == "onset"
    grid = client.post("/resample", json={"record": ice, "step": 10})
    assert grid.status_code == 201 and grid.json["cells"] > 100
    netcdf = client.get(grid.headers["Location"])
    assert netcdf.status_code == 200 and netcdf.mimetype == "application/x-netcdf"
    assert netcdf.data[:4] in (b"CDF\x01", b"\x89HDF")
    xcorr = client.post("/xcorr", json={"a": {"record": ice, "variable": "d18O"},
                                        "b": {"record": lake, "variable": "d18O"},
                                        "max_lag": 200, "surrogates": 50, "seed": 1})
    assert xcorr.status_code == 201 and "peak_lag" in xcorr.json
    stored_xcorr = client.get(xcorr.headers["Location"]).json
    assert stored_xcorr == {k: v for k, v in xcorr.json.items() if k not in ("id", "links")}
    assert xcorr.json["links"] == {"result": xcorr.headers["Location"],
                                   "report": f"/reports/{xcorr.json['id']}.html"}
    xcorr_page = client.get(xcorr.json["links"]["report"])
    assert xcorr_page.status_code == 200 and b"<svg" in xcorr_page.data
    request = json.loads((RECORDS / "demo_lag_request.json").read_text())
    request["a"]["record"], request["b"]["record"] = ice, lake
    request.update(ties=ties.json["id"], draws=4000)
    lag = client.post("/lag", json=request)
    assert lag.status_code == 201, lag.json
    report = lag.headers["Location"]
    assert lag.json["links"] == {"result": report, "report": report + ".html"}
    assert report == f"/reports/{lag.json['id']}"
    assert client.get(report).json["lag"] == lag.json["lag"]
    page = client.get(report + ".html")
    assert page.status_code == 200 and b"<svg" in page.data
    figure = client.get(report + "/figures/lag.svg")
    assert figure.status_code == 200 and figure.mimetype == "image/svg+xml"
    problem(client.get(report + "/figures/nope.svg"), 404)
    unknown = dict(request, ties="f" * 64)
    assert problem(client.post("/lag", json=unknown), 422)["pointer"] == "/ties"
    survey = client.post("/survey", json={"pairs": [{"label": "X1", "a": dict(
        request["a"], kind="onset", variable="d18O", window=[11900, 12400]), "b": dict(
        request["b"], kind="onset", variable="d18O", window=[11900, 12400])}],
        "ties": ties.json["id"], "draws": 2000, "seed": 1})
    assert survey.status_code == 201 and survey.json["pairs"][0]["label"] == "X1"
    assert survey.headers["Location"] == survey.json["links"]["result"]
    table = client.post("/tables", data={"file": (open(RECORDS / "demo_transitions.csv", "rb"),
                                                  "transitions.csv")},
                        content_type="multipart/form-data")
    assert table.status_code == 201 and table.json["columns"] == ["label", "age"]
    spec = json.loads((RECORDS / "demo_survey.json").read_text())
    spec["table"]["path"], spec["ties"] = table.json["id"], ties.json["id"]
    spec["a"]["record"], spec["b"]["record"], spec["draws"] = ice, lake, 2000
    from_table = client.post("/survey", json=spec)
    assert from_table.status_code == 201, from_table.json
    assert [p["label"] for p in from_table.json["pairs"]] == ["X1 cooling", "X2 warming"]
    unknown = dict(spec, table=dict(spec["table"], path="e" * 64))
    assert problem(client.post("/survey", json=unknown), 422)["pointer"] == "/table/path"


def test_computation_over_its_time_limit_is_stopped(tmp_path):
    """Independent of machine speed: the worker is warmed (uploads) under a generous limit, then
    a computation that is slow by construction (100,000 MCMC draws) meets a 1-s limit."""
    from api import create_app

    app = create_app({"DATA_DIR": str(tmp_path / "s"), "WORKERS": 1, "TIME_LIMIT": 600.0})
    client = app.test_client()
    lake, ice = stored(client, "trv3_lake.nc"), stored(client, "hvd1_ice.nc")
    app.config["TIME_LIMIT"] = 1.0
    body = problem(client.post("/detect/onset", json={
        "record": lake, "variable": "d18O", "window": [11900, 12500], "age_reference": "b2k",
        "method": "bayes", "draws": 100_000, "seed": 1}), 503)
    assert "stopped" in body["detail"]
    # the worker was replaced: the next computation runs
    app.config["TIME_LIMIT"] = 600.0
    ok = client.post("/detect/event", json={"record": ice, "variable": "sulfate",
                                            "window": [12150, 12350]})
    assert ok.status_code == 200 and ok.json["found"]


def test_kill_leftovers_are_cleaned_when_the_store_opens(tmp_path):
    """What a crash can leave (a temporary file, a file without a row, an unfinished upload)
    is removed when the store is opened by a starting server."""
    from api import create_app

    data = tmp_path / "s"
    client = create_app({"DATA_DIR": str(data), "WORKERS": 0}).test_client()
    kept = stored(client, "hvd1_ice.nc")
    objects = data / "objects" / "records"
    (objects / ".half.nc.123.part").write_bytes(b"half")
    (objects / ("a" * 64 + ".nc")).write_bytes(b"no row")
    (data / "uploads" / "tmp123.csv").write_bytes(b"unfinished")
    client = create_app({"DATA_DIR": str(data), "WORKERS": 0}).test_client()
    assert sorted(p.name for p in objects.iterdir()) == [f"{kept}.nc"]
    assert not list((data / "uploads").iterdir())
    assert [r["id"] for r in client.get("/records").json["records"]] == [kept]
    assert xr.open_dataset(objects / f"{kept}.nc").attrs["core"] == "HVD-1"


def test_concurrent_first_views_render_once(client, app, monkeypatch, tmp_path):
    """Four clients open a new report at the same moment: all get the page, it is rendered
    once; and two renderings racing in separate workers both end well (one folder wins)."""
    import threading

    from api import tasks

    ice, lake = stored(client, "hvd1_ice.nc"), stored(client, "trv3_lake.nc")
    lag = client.post("/lag", json={
        "a": {"kind": "event", "record": ice, "variable": "sulfate", "window": [12150, 12350]},
        "b": {"kind": "event", "record": lake, "variable": "tephra", "window": [11850, 12000]},
        "draws": 1000, "seed": 3})
    assert lag.status_code == 201, lag.json
    page = lag.json["links"]["report"]
    renders, real = [], tasks.render_report
    gate = threading.Barrier(4)

    def counted(*args):
        renders.append(args)
        return real(*args)

    monkeypatch.setattr(tasks, "render_report", counted)
    answers = []

    def view():
        own = app.test_client()
        gate.wait()
        answers.append(own.get(page))

    threads = [threading.Thread(target=view) for _ in range(4)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert [a.status_code for a in answers] == [200] * 4
    assert len({a.data for a in answers}) == 1 and b"<svg" in answers[0].data
    assert len(renders) == 1
    # the same race between processes (no shared lock): both renderings end without error
    result, folder = renders[0][0], tmp_path / "store" / "reports" / "raced"
    errors = []

    def render():
        try:
            real(result, str(folder))
        except Exception as exc:  # noqa: BLE001 - collected for the assertion
            errors.append(exc)

    racers = [threading.Thread(target=render) for _ in range(2)]
    for thread in racers:
        thread.start()
    for thread in racers:
        thread.join()
    assert errors == [] and (folder / "report.html").exists()
    assert not [p for p in folder.parent.iterdir() if p.name.startswith(".")]


def test_survey_pairs_of_tabulated_sites_are_not_looked_up_as_records(client):
    """A pair's marker of the sites kind has no record: the route must not look one up
    (found by schemathesis: AttributeError, 500)."""
    sites = {"kind": "sites", "sites": [{"label": "s1", "age": 12200, "sd": 30},
                                        {"label": "s2", "age": 12240, "sd": 40}]}
    response = client.post("/survey", json={"pairs": [{"label": "P", "a": sites, "b": sites}],
                                            "draws": 2000, "seed": 1})
    assert response.status_code < 500, response.get_data(True)
    assert response.status_code in (201, 422), response.json
