"""Resource limits at and just past their values, on the library, the CLI and the service; and
bad values that once ended as internal errors, refused as bad input on every surface."""

import json

import netCDF4
import numpy as np
import pytest

from align import limits, open_record
from align.errors import InputError
from align.limits import LimitError, use_limits
from align.resample import resample
from align.xcorr import cross_correlate
from conftest import RECORDS, run_cli, upload
from corpus import MAPPING_CASES, wide_table

ICE, LAKE = RECORDS / "hvd1_ice.nc", RECORDS / "trv3_lake.nc"
# hvd1 on a 10-yr grid: its age bounds 11283.6 to 13070.3 snap outward to 11280..13080
ICE_CELLS_10 = 180
# the cross-correlation below: window 11900-12500 b2k by 10 yr, lags -100..100 by 10
XCORR = dict(step=10.0, window=[11900, 12500], surrogates=50, bootstrap=10, seed=1)
XCORR_SIZES = {"lag_steps": 21, "cells": 60, "lags_x_length": 21 * 60,
               "surrogates_x_length": 50 * 60}


def refused(call, limit, field):
    with pytest.raises(LimitError) as caught:
        call()
    assert caught.value.limit == limit and caught.value.field == field, str(caught.value)
    assert f"limit {limit!r}" in str(caught.value)
    return caught.value


def netcdf_columns(path, n, columns=2):
    """A generic NetCDF (no record schema) of ``columns`` float64 variables of length ``n``."""
    with netCDF4.Dataset(path, "w") as ds:
        ds.createDimension("row", n)
        ds.createVariable("age", "f8", ("row",))[:] = np.arange(1.0, n + 1)
        for k in range(columns - 1):
            ds.createVariable(f"v{k}", "f8", ("row",))[:] = np.arange(n) % 7.0
    return path


def test_defaults_are_documented_in_the_readme():
    from api import DEFAULTS as SERVICE
    from conftest import ROOT

    readme = (ROOT / "README.md").read_text()
    section = readme.split("## Limits", 1)[1].split("\n## ", 1)[0]
    for name in limits.names():
        row = (f"| `{name}` | {limits.WHAT[name]} | {getattr(limits.DEFAULTS, name):,} | "
               f"{SERVICE['LIMITS'][name]:,} |")
        assert row in section, row
    from api.server import MIN_WORKER_MEMORY, SERVER_MEMORY, WORKER_CODE, peak_memory

    memory = SERVICE["WORKER_MEMORY"]
    assert (f"| `WORKER_MEMORY` | bytes of data a worker may hold (`RLIMIT_DATA`); more is "
            f"answered 413 | none | {memory:,} (`serve --worker-memory {memory // 2**20}`, in "
            f"MiB, at least {MIN_WORKER_MEMORY}) |") in section
    assert (f"| peak resident memory | bytes, server process and workers together | none | "
            f"{SERVER_MEMORY} MiB + workers x (`WORKER_MEMORY` + {WORKER_CODE} MiB): "
            f"{peak_memory(SERVICE['WORKERS'], memory) / 2**30:g} GiB by default; "
            f"{peak_memory(2, 600 * 2**20) / 2**20:,.0f} MiB with 2 workers at 600 MiB") in section


def test_use_limits_is_scoped_and_checked():
    before = limits.current()
    with use_limits(cells="1e3") as inside:
        assert inside.cells == 1000 and limits.current().cells == 1000
    assert limits.current() == before
    for bad in ({"cellz": 5}, {"cells": 0}, {"cells": 1.5}, {"cells": "many"}):
        with pytest.raises(InputError), use_limits(**bad):
            pass


# --------------------------------------------------------------------------------------------
# library


def test_grid_cells_at_and_past_the_limit():
    record = open_record(ICE)
    with use_limits(cells=ICE_CELLS_10):
        assert resample(record, 10.0).sizes["age"] == ICE_CELLS_10
    with use_limits(cells=ICE_CELLS_10 - 1):
        refused(lambda: resample(record, 10.0), "cells", "step")
    error = refused(lambda: resample(record, 1e-6), "cells", "step")  # the 13-GiB request
    assert error.status == 422 and "1,786,721,824 grid cells" in str(error)


def test_cross_correlation_sizes_at_and_past_their_limits():
    a, b = (open_record(ICE), "d18O"), (open_record(LAKE), "d18O")
    with use_limits(**XCORR_SIZES):  # every size exactly at its limit
        result = cross_correlate(a, b, 100.0, **XCORR)
    assert len(result.curve.lags) == XCORR_SIZES["lag_steps"]
    for name, at in XCORR_SIZES.items():
        field = {"lag_steps": "max_lag", "cells": "step", "lags_x_length": "max_lag",
                 "surrogates_x_length": "surrogates"}[name]
        with use_limits(**{name: at - 1}):
            refused(lambda: cross_correlate(a, b, 100.0, **XCORR), name, field)
    refused(lambda: cross_correlate(a, b, 1e12), "lag_steps", "max_lag")  # the 745-GiB one


def test_draws_times_samples_at_and_past_the_limit():
    from align.markers.onset import detect_onset

    lake = open_record(LAKE)
    age_b2k = lake["age"].values + 50.0  # BP to b2k (PRODUCT: b2k = BP + 50)
    samples = int(np.sum((age_b2k >= 11900) & (age_b2k <= 12500)
                         & np.isfinite(lake["d18O"].values)))
    args = (lake, "d18O", [11900, 12500])
    options = dict(draws=100, seed=1, age_reference="b2k")
    with use_limits(draws_x_samples=100 * samples):
        assert detect_onset(*args, **options).kind == "onset"
    with use_limits(draws_x_samples=100 * samples - 1):
        refused(lambda: detect_onset(*args, **options), "draws_x_samples", "draws")
    refused(lambda: detect_onset(*args, **dict(options, draws=10**9)), "draws_x_samples",
            "draws")


def test_declared_variable_bytes_at_and_past_the_limit(tmp_path):
    path = netcdf_columns(tmp_path / "small.nc", 10)  # each variable 10 x 8 bytes
    with use_limits(variable_bytes=80):
        assert open_record(path, age_reference="b2k").sizes["sample"] == 10
    with use_limits(variable_bytes=79):
        error = refused(lambda: open_record(path, age_reference="b2k"), "variable_bytes",
                        "age")
    assert error.status == 413


def test_columns_at_and_past_the_limit(tmp_path):
    text, nc = tmp_path / "five.csv", netcdf_columns(tmp_path / "five.nc", 4, columns=5)
    text.write_text(wide_table(5))
    with use_limits(columns=5):
        assert len(open_record(text, age_reference="b2k").data_vars) >= 4
        assert open_record(nc, age_reference="b2k").sizes["sample"] == 4
    with use_limits(columns=4):
        refused(lambda: open_record(text, age_reference="b2k"), "columns", "header")
        refused(lambda: open_record(nc, age_reference="b2k"), "columns", "variables")


def test_name_length_at_and_past_the_limit(tmp_path):
    at, past = tmp_path / "at.csv", tmp_path / "past.csv"
    at.write_text(f"age,{'n' * 256}\n1,2\n2,3\n")
    past.write_text(f"age,{'n' * 257}\n1,2\n2,3\n")
    assert "n" * 256 in open_record(at, age_reference="b2k")
    refused(lambda: open_record(past, age_reference="b2k"), "name_length", "header")


@pytest.mark.parametrize("name, mapping, field, fragment", MAPPING_CASES,
                         ids=[c[0] for c in MAPPING_CASES])
def test_reading_keywords_of_the_wrong_type(tmp_path, name, mapping, field, fragment):
    path = tmp_path / "good.csv"
    path.write_text("depth,age,x\n1,100,1\n2,110,2\n")
    with pytest.raises(InputError) as caught:
        open_record(path, **mapping)
    assert caught.value.field == field and fragment in str(caught.value)


def test_bad_values_are_input_errors():
    from align.ages import convert_age
    from align.detect import detect_marker
    from align.lag import estimate_lag
    from align.markers.event import detect_event
    from align.requests import read_request
    from align.survey import survey
    from align.ties import read_ties, transfer

    ice, lake = open_record(ICE), open_record(LAKE)
    cases = [
        (lambda: convert_age(float("nan"), "b2k", "BP"), "value"),
        (lambda: convert_age(float("inf"), "b2k", "BP"), "value"),
        (lambda: detect_marker(ice, {"kind": "event", "variable": "sulfate",
                                     "window": [12350, 12150]}), "window"),
        (lambda: detect_marker(ice, {"kind": "event", "variable": "age_bounds",
                                     "window": [12150, 12350]}), "age_bounds"),
        (lambda: detect_marker(ice, {"kind": "event", "variable": "sulfate",
                                     "window": [12150, 12350], "baseline_years": 1e30}),
         "baseline_years"),
        (lambda: detect_marker(ice, {"kind": "event", "variable": "sulfate",
                                     "window": [12150, 12350], "baseline_years": 1e-9}),
         "baseline_years"),
        (lambda: detect_marker(lake, {"kind": "onset", "variable": "d18O", "draws": 100,
                                      "window": [11850, 12450]}, seed=-1), "seed"),
        (lambda: cross_correlate((ice, "d18O"), (lake, "d18O"), 100, surrogates=-5),
         "surrogates"),
        (lambda: cross_correlate((ice, "age_bounds"), (lake, "d18O"), 100), "age_bounds"),
        (lambda: resample(ice, 10.0, stop=float("nan")), "stop"),
        (lambda: resample(ice, 10.0, start=50_000, stop=60_000), "start"),
        (lambda: transfer(lake, read_ties(RECORDS / "hvd1_trv3_ties.csv"), ice,
                          bridge_rate=1e308), "bridge_rate"),
        (lambda: estimate_lag(read_request(RECORDS / "demo_lag_request.json"), sync_sd=1e308),
         "sync_sd"),
        (lambda: survey({**json.loads((RECORDS / "demo_survey.json").read_text()),
                         "sync_sd": 1e308}), "sync_sd"),
        (lambda: survey({**json.loads((RECORDS / "demo_survey.json").read_text()),
                         "bridge_rate": 1e300}), "bridge_rate"),
        (lambda: detect_event(ice, "sulfate", [12150, 12350], baseline_years="x"),
         "baseline_years"),
    ]
    for call, field in cases:
        with pytest.raises(InputError) as caught:
            call()
        assert caught.value.field == field, str(caught.value)


def test_latin1_table_is_read_with_a_warning(tmp_path):
    path = tmp_path / "latin1.csv"
    path.write_bytes("age,Temp\u00e9rature [\u00b0C]\n1,2\n2,3\n".encode("latin-1"))
    with pytest.warns(UserWarning, match=r"not UTF-8 \(byte 8 is 0xe9\); read as Latin-1"):
        record = open_record(path, age_reference="b2k")
    assert record["Temp\u00e9rature"].attrs["units"] == "\u00b0C"


def test_atomic_write_refuses_a_folder_and_an_unwritable_place(tmp_path):
    from align.io import atomic_write

    with pytest.raises(InputError, match="is a folder"):
        atomic_write(tmp_path, lambda tmp: None)
    with pytest.raises(InputError, match="cannot write here"):  # no files in /proc, even root
        atomic_write("/proc/corealign-test.nc", lambda tmp: None)


# --------------------------------------------------------------------------------------------
# command line


def test_cli_limit_at_and_past_with_the_override(tmp_path):
    at = run_cli("resample", ICE, "--step", "10", "-o", tmp_path / "at.nc", "--limit",
                 f"cells={ICE_CELLS_10}")
    assert at.returncode == 0, at.stderr
    past = run_cli("resample", ICE, "--step", "10", "-o", tmp_path / "past.nc", "--limit",
                   f"cells={ICE_CELLS_10 - 1}")
    assert past.returncode == 2 and not (tmp_path / "past.nc").exists()
    line = past.stderr.strip().splitlines()[-1]
    assert "'step'" in line and "limit 'cells'" in line and "--limit cells=N" in line


@pytest.mark.parametrize("args, fragments", [
    (("xcorr", f"{ICE}:d18O", f"{LAKE}:d18O", "--max-lag", "1e12"),
     ["'max_lag'", "limit 'lag_steps'"]),
    (("detect", "onset", f"{LAKE}:d18O", "--window", "11900,12500", "--draws", "1000000000"),
     ["'draws'", "limit 'draws_x_samples'"]),
    (("age", "1e309", "--from", "b2k", "--to", "BP"), ["finite"]),
    (("resample", ICE, "--step", "10", "-o", RECORDS), ["is a folder"]),
], ids=["max-lag", "draws", "age-1e309", "output-folder"])
def test_cli_refuses_with_exit_2(args, fragments):
    done = run_cli(*args)
    assert done.returncode == 2, done.stderr
    last = done.stderr.strip().splitlines()[-1]
    assert "internal error" not in done.stderr and all(f in last for f in fragments), last


# --------------------------------------------------------------------------------------------
# service


@pytest.fixture
def tight(tmp_path):
    """A service whose limits are those of the tests above."""
    from api import create_app

    return create_app({"DATA_DIR": str(tmp_path / "store"), "WORKERS": 0,
                       "LIMITS": {"cells": ICE_CELLS_10, "columns": 8, **{
                           k: v for k, v in XCORR_SIZES.items() if k != "cells"}}})


def stored(client, path):
    response = upload(client, path)
    assert response.status_code in (200, 201), response.get_json()
    return response.get_json()["entry"]["id"]


def problem(response, status, pointer):
    body = response.get_json()
    assert response.status_code == status, body
    assert response.content_type == "application/problem+json"
    assert body["pointer"] == pointer, body
    return body


def test_service_limits_at_and_past(tight, tmp_path):
    client = tight.test_client()
    ice = stored(client, ICE)
    assert client.post("/resample", json={"record": ice, "step": 10}).status_code == 201
    tight.config["LIMITS"]["cells"] = ICE_CELLS_10 - 1
    body = problem(client.post("/resample", json={"record": ice, "step": 10}), 422, "/step")
    assert "limit 'cells'" in body["detail"] and str(tmp_path) not in body["detail"]
    at, past = tmp_path / "eight.csv", tmp_path / "nine.csv"
    at.write_text(wide_table(8))
    past.write_text(wide_table(9))
    assert upload(client, at, {"age_reference": "b2k"}).status_code == 201
    body = problem(upload(client, past, {"age_reference": "b2k"}), 413, "/file")
    assert "nine.csv" in body["detail"] and "limit 'columns'" in body["detail"]


def test_service_xcorr_limits_and_pointers(tight):
    client = tight.test_client()
    ice, lake = stored(client, ICE), stored(client, LAKE)
    request = {"a": {"record": ice, "variable": "d18O"}, "b": {"record": lake,
                                                                "variable": "d18O"},
               "max_lag": 100, "age_reference": "b2k", **XCORR}
    tight.config["LIMITS"]["cells"] = 60
    assert client.post("/xcorr", json=request).status_code in (200, 201)
    tight.config["LIMITS"]["lag_steps"] = 20
    body = problem(client.post("/xcorr", json=request), 422, "/max_lag")
    assert "limit 'lag_steps'" in body["detail"]
    tight.config["LIMITS"]["lag_steps"] = 21
    bad = dict(request, a={"record": ice, "variable": "age_bounds"})
    body = problem(client.post("/xcorr", json=bad), 422, "/a/variable")
    assert f"record {ice}" in body["detail"] and "/objects/" not in body["detail"]
    missing = dict(request, b={"record": lake, "variable": "calcium"})
    problem(client.post("/xcorr", json=missing), 422, "/b/variable")
    reversed_window = dict(request, window=[12500, 11900])
    problem(client.post("/xcorr", json=reversed_window), 422, "/window")


def test_service_declared_sizes_and_bad_bodies(client, tmp_path):
    from corpus import _declared_netcdf_bytes

    big = tmp_path / "declares.nc"
    big.write_bytes(_declared_netcdf_bytes(2**26))  # 512 MiB declared, a few kB sent
    body = problem(upload(client, big), 413, "/file")
    assert "limit 'variable_bytes'" in body["detail"]
    good = tmp_path / "good.csv"
    good.write_text("depth,age,x\n1,100,1\n2,110,2\n")
    for name, mapping, field, fragment in MAPPING_CASES:
        body = problem(upload(client, good, mapping), 422, f"/mapping/{field}")
        assert fragment in body["detail"], name
    deep = "[" * 100_000 + "]" * 100_000
    response = client.post("/lag", data=deep, content_type="application/json")
    assert response.status_code == 400
    for odd in ("x" * 10 + "." + "c" * 300, "a\x00b.csv", "../../etc/passwd.csv", ""):
        response = upload(client, good, {"age_reference": "b2k"}, name=odd or None)
        assert response.status_code in (200, 201, 422), (odd, response.get_json())


def test_service_onset_draws_limit_points_at_draws(tight):
    client = tight.test_client()
    lake = stored(client, LAKE)
    tight.config["LIMITS"]["draws_x_samples"] = 1000
    body = problem(client.post("/detect/onset", json={
        "record": lake, "variable": "d18O", "window": [11900, 12500], "age_reference": "b2k",
        "draws": 100, "seed": 1}), 422, "/draws")
    assert "limit 'draws_x_samples'" in body["detail"]
    body = problem(client.post("/detect/onset", json={
        "record": lake, "variable": "d18O", "window": [12500, 11900], "age_reference": "b2k",
        "draws": 100, "seed": 1}), 422, "/window")
    assert json.dumps(body)  # plain JSON problem


def test_reading_does_no_per_column_work_over_all_columns(tmp_path, monkeypatch):
    """Reading is linear in columns: making an xarray DataArray scans every variable of its
    Dataset, so reading, describing and re-reading a record make a fixed number of them,
    however many columns (once one per proxy: 5,000 columns took a minute); and the cells
    of all text columns are parsed in one pass (tests/benchmarks/bench_columns.py times it)."""
    import xarray as xr

    from align import columns
    from align.describe import describe_record
    from align.io import save_record

    counts = {"dataarrays": 0, "parses": 0}
    make, parse = xr.Dataset._construct_dataarray, columns._parse_cells

    def counted(name, function):
        def call(*args, **kwargs):
            counts[name] += 1
            return function(*args, **kwargs)
        return call

    monkeypatch.setattr(xr.Dataset, "_construct_dataarray", counted("dataarrays", make))
    monkeypatch.setattr(columns, "_parse_cells", counted("parses", parse))
    seen = {}
    for n in (20, 200):
        text = tmp_path / f"wide{n}.csv"
        text.write_text(wide_table(n))
        counts.update(dataarrays=0, parses=0)
        record = open_record(text, age_reference="b2k")
        assert len(record.data_vars) == n  # n - 1 proxies and the age bounds
        describe_record(record)
        save_record(record, tmp_path / f"wide{n}.nc")
        counts["saved"] = counts["dataarrays"]
        open_record(tmp_path / f"wide{n}.nc")
        seen[n] = dict(counts)
    assert seen[20] == seen[200], seen
    assert seen[200]["parses"] == 1
