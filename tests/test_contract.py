"""One schema: the CLI's --json, the library's to_dict() and the service agree."""

import json

import jsonschema

from align import open_record, read_request
from align import detect_onset
from align.lag import estimate_lag
from align.schema import LagResult, OnsetResult
from api.spec import openapi_document
from conftest import RECORDS, run_cli, upload


def without_origin(result):
    """Drop what names where the inputs were read from and when: paths, checksums of the
    files as stored, creation times. Everything else must agree."""
    if isinstance(result, dict):
        return {k: without_origin(v) for k, v in result.items()
                if k not in ("created", "source", "sha256", "record", "ties")}
    if isinstance(result, list):
        return [without_origin(v) for v in result]
    return result


def validator(model):
    doc = openapi_document("test")
    schema = {"$ref": f"#/components/schemas/{model.__name__}", **doc}
    return jsonschema.Draft202012Validator(schema)


def test_onset_cli_library_and_service_agree(client):
    window = [11900, 12500]
    library = detect_onset(open_record(RECORDS / "trv3_lake.nc"), "d18O", window, seed=5,
                           draws=500, age_reference="b2k").to_dict()
    done = run_cli("detect", "onset", f"{RECORDS / 'trv3_lake.nc'}:d18O", "--window",
                   "11900,12500", "--seed", "5", "--draws", "500", "--to", "b2k", "--json")
    assert done.returncode == 0, done.stderr
    cli = json.loads(done.stdout)
    record_id = upload(client, RECORDS / "trv3_lake.nc").json["entry"]["id"]
    served = client.post("/detect/onset", json={"record": record_id, "variable": "d18O",
                                                "window": window, "seed": 5, "draws": 500,
                                                "age_reference": "b2k"}).json
    assert without_origin(cli) == without_origin(library) == without_origin(served)
    check = validator(OnsetResult)
    for body in (cli, library, served):
        check.validate(body)


def test_lag_cli_library_and_service_agree(client):
    request = json.loads((RECORDS / "demo_lag_request.json").read_text())
    request["draws"] = 4000
    path = RECORDS / "demo_lag_request.json"
    library = estimate_lag(read_request(path), draws=4000).to_dict()
    done = run_cli("lag", "--request", path, "--draws", "4000", "--json")
    assert done.returncode == 0, done.stderr
    cli = json.loads(done.stdout)
    ice = upload(client, RECORDS / "hvd1_ice.nc").json["entry"]["id"]
    lake = upload(client, RECORDS / "trv3_lake.nc").json["entry"]["id"]
    ties = client.post("/ties", data={"file": (open(RECORDS / "hvd1_trv3_ties.csv", "rb"),
                                               "hvd1_trv3_ties.csv")},
                       content_type="multipart/form-data").json["id"]
    request["a"]["record"], request["b"]["record"], request["ties"] = ice, lake, ties
    served = client.post("/lag", json=request).json
    stored = {key: served.pop(key) for key in ("id", "links")}  # what only the service adds
    assert stored["links"]["result"] == f"/reports/{stored['id']}"
    assert without_origin(cli) == without_origin(library) == without_origin(served)
    check = validator(LagResult)
    for body in (cli, library, served):
        check.validate(body)
    assert LagResult.model_validate(served).to_dict() == served  # the class round-trips
