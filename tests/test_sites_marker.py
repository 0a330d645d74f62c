"""The combined age of a horizon dated at many sites as a lag marker (``kind: sites``)."""

import json

import numpy as np
import pytest

from align import InputError, estimate_lag, read_request
from align.record import build_record
from conftest import RECORDS, run_cli

SITES = [{"label": "north", "age": 5010.0, "sd": 12.0},
         {"label": "south", "age": 4995.0, "sd": 15.0},
         {"label": "east", "age": 5003.0, "lower": 4980.0, "upper": 5040.0}]


def spike_record(event_age, rng, step=2.0, span=(4700.0, 5300.0)):
    """Annual-ish samples on an exact timescale (no age error) with a spike whose first
    anomalous sample holds ``event_age``."""
    edges = np.arange(span[0], span[1] + step, step)
    mid = 0.5 * (edges[1:] + edges[:-1])
    values = rng.normal(0.0, 1.0, mid.size)
    first = int(np.searchsorted(edges, event_age) - 1)
    values[first - 2:first + 1] += 40.0  # the run's oldest sample holds the event age
    return build_record(age=mid, age_bounds=np.column_stack([edges[:-1], edges[1:]]),
                        age_reference="b2k", proxies={"s": (values, {"units": "1"})},
                        attrs={"core": "spike", "timescale": "exact"})


def lag_with_sites(sites, record, window, seed, **options):
    return estimate_lag({"kind": "sites", "sites": sites, "draws": 4000, **options},
                        {"kind": "event", "record": record, "variable": "s", "window": window},
                        draws=4000, seed=seed)


def test_sites_marker_is_one_budget_source_and_the_lag_is_right():
    rng = np.random.default_rng(1)
    record = spike_record(4940.5, rng)
    result = lag_with_sites(SITES, record, [4900, 5000], 2)
    combination = [b for b in result.budget if b.kind == "combination"]
    assert len(combination) == 1 and combination[0].owner == "a"
    # the combined age (GLS of the three dates) minus the event's sample centre
    assert result.a.kind == "sites" and result.a.n_sites == 3 and result.a.consistent
    expected = result.a.combined.median - float(np.mean(result.b.sample.age_interval))
    assert result.lag.median == pytest.approx(expected, abs=1.0)
    assert "precedes" in result.verdict and "3 sites" in result.verdict
    assert not any(w.key == "halve_resolution_a" for w in result.what_if)


def test_inconsistent_sites_are_refused_unless_allowed():
    rng = np.random.default_rng(2)
    record = spike_record(4940.5, rng)
    bad = SITES + [{"label": "far", "age": 5400.0, "sd": 10.0}]
    with pytest.raises(InputError, match="not consistent") as caught:
        lag_with_sites(bad, record, [4900, 5000], 3)
    assert caught.value.field == "a.sites"
    allowed = lag_with_sites(bad, record, [4900, 5000], 3, allow_inconsistent=True)
    assert not allowed.a.consistent
    assert any("not supported by the data" in a for a in allowed.assumptions)


@pytest.mark.slow
def test_sites_marker_lag_intervals_cover_the_true_lag():
    """Generator: a horizon at T = 5000 b2k dated at 3-5 sites with Gaussian errors (sd 8-25
    yr), an event at T - L in an exactly dated record (L uniform in 20-80 yr) whose spike
    begins at a known year inside a 2-yr sample. The 95 % lag interval must cover L in about
    95 % of trials (tolerance for 100 trials: 0.88-1.0)."""
    rng = np.random.default_rng(20261202)
    covered, trials = 0, 100
    for trial in range(trials):
        lag_true = rng.uniform(20.0, 80.0)
        sd = rng.uniform(8.0, 25.0, rng.integers(3, 6))
        sites = [{"label": f"s{k}", "age": float(5000.0 + rng.normal(0.0, s)), "sd": float(s)}
                 for k, s in enumerate(sd)]
        record = spike_record(5000.0 - lag_true, rng)
        result = lag_with_sites(sites, record, [4850, 5000], trial, allow_inconsistent=True)
        covered += result.lag.ci95[0] <= lag_true <= result.lag.ci95[1]
    assert 0.88 <= covered / trials <= 1.0, covered


def test_sites_marker_from_a_request_file_cli_and_library_agree(tmp_path):
    """A request names the demo's site file; the CLI's --json and the library's to_dict()
    are the same object."""
    request = {"a": {"kind": "sites", "sites": "demo_sites.json", "allow_inconsistent": True,
                     "draws": 4000},
               "b": {"kind": "onset", "record": "hvd1_ice.nc", "variable": "d18O",
                     "window": [11900, 12500], "draws": 400},
               "draws": 4000, "seed": 5}
    path = RECORDS / "tmp_sites_request.json"
    path.write_text(json.dumps(request))
    try:
        library = estimate_lag(read_request(path)).to_dict()
        done = run_cli("lag", "--request", path, "--json")
    finally:
        path.unlink()
    assert done.returncode == 0, done.stderr
    cli = json.loads(done.stdout)
    for key in ("lag", "budget", "verdict", "what_if"):
        assert cli[key] == library[key], key
    assert library["a"]["n_sites"] == 7  # the tuned site is shown but never counted


def test_service_lag_with_tabulated_sites(client):
    from conftest import upload

    ice = upload(client, RECORDS / "hvd1_ice.nc").json["entry"]["id"]
    body = {"a": {"kind": "sites", "sites": SITES, "draws": 2000},
            "b": {"kind": "event", "record": ice, "variable": "sulfate",
                  "window": [12150, 12350]}, "draws": 2000, "seed": 1}
    answer = client.post("/lag", json=body)
    assert answer.status_code in (200, 201), answer.json
    assert answer.json["a"]["kind"] == "sites"
    named = client.post("/lag", json={**body, "a": {**body["a"], "sites": [
        *SITES, {"label": "file", "draws": "x.csv"}]}})
    assert named.status_code == 422 and named.json["pointer"] == "/a/sites/3/draws"
