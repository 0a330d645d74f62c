"""POST /synchrony through Flask's test client (fresh app per test, computations inline)."""

from conftest import RECORDS, upload

from align.synchrony import test_synchrony as run_synchrony

SITES = [{"label": "A", "age": 1000, "sd": 10}, {"label": "B", "age": 1012, "sd": 12},
         {"label": "C", "age": 995, "lower": 970, "upper": 1015},
         {"label": "T", "age": 1100, "sd": 3, "independent": False}]


def problem(response, status):
    assert response.status_code == status, (response.status_code, response.get_data(True))
    assert response.content_type == "application/problem+json"
    return response.json


def test_tabulated_sites_give_the_library_result_and_a_report(client):
    body = {"sites": SITES, "seed": 4, "draws": 4000}
    response = client.post("/synchrony", json=body)
    assert response.status_code == 200, response.json
    served, library = response.json, run_synchrony(body).to_dict()
    for data in (served, library):
        data["provenance"].pop("created")
    assert served == library
    html = client.get(response.headers["Location"] + ".html")
    assert html.status_code == 200 and b"Synchrony report" in html.data
    doc = client.get("/openapi.json").json
    assert "/synchrony" in doc["paths"] and "SynchronyResult" in doc["components"]["schemas"]


def test_sites_on_stored_records(client):
    record = upload(client, RECORDS / "hvd1_ice.nc").json["entry"]["id"]
    sites = [{"label": "ice", "kind": "event", "record": record, "variable": "sulfate",
              "window": [12110, 12410]}, {"label": "lake", "age": 12250, "sd": 40}]
    response = client.post("/synchrony", json={"sites": sites, "seed": 1, "draws": 2000})
    assert response.status_code == 200, response.json
    assert response.json["sites"][0]["source"] == "record"
    missing = client.post("/synchrony", json={"sites": [{**sites[0], "record": "0" * 64},
                                                        sites[1]]})
    assert problem(missing, 422)["pointer"] == "/sites/0/record"


def test_bad_sites_are_problem_details_naming_label_and_field(client):
    bad = client.post("/synchrony", json={"sites": [{"label": "L4", "age": 5, "sd": 0},
                                                     SITES[0]]})
    body = problem(bad, 422)
    assert body["pointer"] == "/sites/0/sd" and "'L4'" in body["detail"]
    dup = client.post("/synchrony", json={"sites": [SITES[0], SITES[1], SITES[0]]})
    assert problem(dup, 422)["pointer"] == "/sites/2/label"
    named = client.post("/synchrony", json={"sites": [{"label": "M", "draws": "x.csv"},
                                                      SITES[0]]})
    assert problem(named, 422)["pointer"] == "/sites/0/draws"


def test_csv_site_table_upload(client, tmp_path):
    table = tmp_path / "sites.csv"
    table.write_text("label,age,sd,independent\nA,1000,10,true\nB,1012,12,true\n"
                     "T,1100,3,false\n")
    with open(table, "rb") as handle:
        response = client.post("/synchrony/table", data={
            "file": (handle, "sites.csv"), "options": '{"seed": 2, "draws": 2000}'},
            content_type="multipart/form-data")
    assert response.status_code == 200, response.json
    assert response.json["n_independent"] == 2
    table.write_text("label,age,sd\nA,1000,-1\nB,1,1\n")
    with open(table, "rb") as handle:
        bad = client.post("/synchrony/table", data={"file": (handle, "sites.csv")},
                          content_type="multipart/form-data")
    assert problem(bad, 422)["pointer"] == "/sites/0/sd"
