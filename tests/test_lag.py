"""Lags: calibration on synthetic truth in three settings, the budget, and the demo."""

import json

import numpy as np
import pytest

from align import InputError, open_record
from align.lag import estimate_lag
from align.record import build_record
from conftest import RECORDS, run_cli
from synthetic import ar1, smooth_noise

SPAN = (10_000.0, 11_000.0)


def counted_core(rng, z, event, onset, lag_noise=0.5, name="A"):
    """A layer-counted core (2-yr samples) holding a spike beginning at true age ``event``
    (variable ``s``) and a ramp beginning at true age ``onset`` (variable ``x``). Its
    timescale is the truth plus ``z * MCE / 2`` (the correlated counting-error model).
    Depth is proportional to true age."""
    edges_true = SPAN[0] + np.concatenate([[0.0], np.cumsum(rng.uniform(1.5, 2.5, 520))])
    edges_true = edges_true[edges_true <= SPAN[1]]
    mce = lambda t: 50.0 + 0.05 * (t - SPAN[0])  # noqa: E731
    counted = edges_true + z * mce(edges_true) / 2.0
    mid = 0.5 * (edges_true[1:] + edges_true[:-1])
    n = mid.size
    spike = np.full(n, 10.0) + ar1(rng, n, 0.3, 1.0)
    holding = np.searchsorted(edges_true, event) - 1
    spike[holding: holding + 3] += 40.0
    ramp = 4.0 * np.clip((onset - mid) / 40.0, 0, 1) + ar1(rng, n, lag_noise)
    depth = 100.0 + 0.02 * (edges_true - SPAN[0])
    return build_record(
        depth=0.5 * (depth[1:] + depth[:-1]), depth_bounds=np.column_stack([depth[:-1], depth[1:]]),
        age=0.5 * (counted[1:] + counted[:-1]), age_bounds=np.column_stack([counted[:-1],
                                                                              counted[1:]]),
        age_reference="b2k", age_mce=mce(mid),
        proxies={"s": (spike, {"units": "1"}), "x": (ramp, {"units": "1"})},
        attrs={"core": name, "timescale": f"{name}-count", "timescale_kind": "layer-counted"}), \
        (lambda t: t + z * mce(t) / 2.0), (lambda t: 100.0 + 0.02 * (t - SPAN[0]))


def sediment_core(rng, onset, offset_sd=None, name="B"):
    """A sediment core (5-15 yr slices) whose accumulation wanders smoothly, holding a ramp
    beginning at true age ``onset``. With ``offset_sd``, it has its own modelled timescale:
    the truth shifted by one N(0, offset_sd) error, stated as ``age_sd``."""
    t = np.linspace(SPAN[0] - 50, SPAN[1] + 50, 4001)
    rate = 0.001 * np.exp(smooth_noise(rng, t, 0.2, 150.0))
    depth_of_t = 5.0 + np.concatenate([[0.0], np.cumsum(rate[:-1] * np.diff(t))])
    edges = np.arange(depth_of_t[0], depth_of_t[-1], 0.01)
    true_edges = np.interp(edges, depth_of_t, t)
    mid_true = 0.5 * (true_edges[1:] + true_edges[:-1])
    values = 4.0 * np.clip((onset - mid_true) / 40.0, 0, 1) + ar1(rng, mid_true.size, 0.5)
    kwargs = {}
    if offset_sd is not None:
        shift = rng.normal(0.0, offset_sd)
        kwargs = dict(age=mid_true + shift, age_reference="b2k",
                      age_bounds=np.column_stack([true_edges[:-1], true_edges[1:]]) + shift,
                      age_sd=np.full(mid_true.size, offset_sd))
    record = build_record(depth=0.5 * (edges[1:] + edges[:-1]),
                          depth_bounds=np.column_stack([edges[:-1], edges[1:]]),
                          proxies={"x": (values, {"units": "1"})},
                          attrs={"core": name, "timescale": f"{name}-model"}, **kwargs)
    return record, (lambda age: np.interp(age, t, depth_of_t))


def trial(rng, setting, tmp_path):
    event = rng.uniform(10_350, 10_550)
    onset = event - rng.uniform(-120, 180)
    z = rng.normal()
    core, counted, depth_a = counted_core(rng, z, event, onset)
    a = {"kind": "event", "record": core, "variable": "s",
         "window": [counted(event) - 120, counted(event) + 120]}
    options = {"draws": 4000, "seed": int(rng.integers(2**31))}
    if setting == "one core":
        b = {"kind": "onset", "record": core, "variable": "x", "draws": 300,
             "window": [counted(onset) - 250, counted(onset) + 250]}
    elif setting == "tied cores":
        sed, depth_b = sediment_core(rng, onset)
        horizons = np.sort(rng.choice(np.arange(10_100, 10_950, 25.0), 5, replace=False))
        sd = rng.uniform(2, 6, horizons.size)
        ref = depth_a(horizons + rng.normal(0, sd))
        path = tmp_path / f"ties{rng.integers(1 << 30)}.csv"
        path.write_text("label,depth,ref_depth,sd\n" + "".join(
            f"h{k},{depth_b(h):.6f},{r:.6f},{s:.3f}\n"
            for k, (h, r, s) in enumerate(zip(horizons, ref, sd))))
        options["ties"] = str(path)
        b = {"kind": "onset", "record": sed, "variable": "x", "draws": 300,
             "window": [counted(onset) - 250, counted(onset) + 250]}
        if not (horizons[0] < onset - 260 and onset + 260 < horizons[-1]):
            return None
    else:
        sed, _ = sediment_core(rng, onset, offset_sd=30.0)
        b = {"kind": "onset", "record": sed, "variable": "x", "draws": 300,
             "window": [onset - 250, onset + 250]}
    result = estimate_lag(a, b, **options)
    truth = event - onset
    return result.lag.ci95[0] <= truth <= result.lag.ci95[1], result


@pytest.mark.slow
@pytest.mark.parametrize("setting", ["one core", "tied cores", "independent timescales"])
def test_lag_intervals_cover_the_truth(setting, tmp_path):
    import warnings

    rng = np.random.default_rng({"one core": 1, "tied cores": 2,
                                 "independent timescales": 3}[setting])
    hits = trials = 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        while trials < 300:
            outcome = trial(rng, setting, tmp_path)
            if outcome is None:
                continue
            hits += outcome[0]
            trials += 1
    coverage = hits / trials
    print(f"{setting}: 95 % lag intervals cover the true lag in {coverage:.3f} of {trials}")
    assert 0.90 <= coverage <= 0.99
    assert outcome[1].relation == {"one core": "same record", "tied cores": "tied",
                                   "independent timescales": "independent"}[setting]


def test_resolution_terms_equal_the_uniform_sd():
    # event versus event, uniform 2.5-yr and 4-yr samples: each event is uniform over its
    # sample (a spike 10^4 noise sd high reaches into the older sample by ~1e-4 of it), so
    # its resolution term has sd h / sqrt(12) (handbook value)
    edges_a = np.arange(1000.0, 1500.1, 2.5)
    edges_b = np.arange(1000.0, 1500.1, 4.0)
    noise = np.random.default_rng(0)
    records = []
    for edges, where in ((edges_a, 150), (edges_b, 80)):
        values = np.ones(edges.size - 1)
        values[where] = 100.0
        records.append(build_record(age=0.5 * (edges[1:] + edges[:-1]), age_reference="b2k",
                                    age_bounds=np.column_stack([edges[:-1], edges[1:]]),
                                    proxies={"s": (values + noise.normal(0, 1e-2, values.size),
                                                   {"units": "1"})},
                                    attrs={"core": f"C{where}"}))
    result = estimate_lag({"kind": "event", "record": records[0], "variable": "s",
                           "window": [1300, 1450]},
                          {"kind": "event", "record": records[1], "variable": "s",
                           "window": [1250, 1400]}, draws=200_000, seed=1)
    assert result.lag.median == pytest.approx(1376.25 - 1322.0, abs=0.05)
    resolution = sorted(item.sd for item in result.budget if item.kind == "resolution")
    np.testing.assert_allclose(resolution, sorted([2.5 / np.sqrt(12), 4.0 / np.sqrt(12)]),
                               rtol=0.01)
    assert result.resolution_floor == pytest.approx(np.hypot(2.5, 4.0) / np.sqrt(12), rel=0.01)
    assert sum(item.share for item in result.budget) == pytest.approx(1.0)
    assert result.budget_total_sd == pytest.approx(result.lag.sd, rel=0.02)


def test_one_core_lag_is_not_the_sum_of_absolute_errors():
    """Two markers ~200 yr apart near 40 ka in one layer-counted core whose MCE is ~1,500 yr:
    only the counting error between them counts. Treating the two absolute errors as
    independent would give an interval more than ten times wider."""
    rng = np.random.default_rng(21)
    edges = 39_700.0 + np.concatenate([[0.0], np.cumsum(rng.uniform(1.5, 2.5, 320))])
    mid = 0.5 * (edges[1:] + edges[:-1])
    spike = 10.0 + ar1(rng, mid.size, 0.3)
    spike[np.searchsorted(edges, 40_100.0) - 1:][:3] += 40
    ramp = 4.0 * np.clip((39_900.0 - mid) / 30.0, 0, 1) + ar1(rng, mid.size, 0.5)
    mce = 1500.0 + 0.04 * (mid - 40_000.0)
    core = build_record(age=mid, age_bounds=np.column_stack([edges[:-1], edges[1:]]),
                        age_reference="b2k", age_mce=mce,
                        proxies={"s": (spike, {"units": "1"}), "x": (ramp, {"units": "1"})},
                        attrs={"core": "deep", "timescale": "deep-count"})
    a = {"kind": "event", "record": core, "variable": "s", "window": [40_000, 40_200]}
    b = {"kind": "onset", "record": core, "variable": "x", "window": [39_750, 40_050]}
    same = estimate_lag(a, b, seed=4)
    assert same.relation == "same record"  # one in-memory record: one checksum
    copy = core.copy()
    copy.attrs.update(core="deep copy", timescale="another count", source_checksum="x")
    naive = estimate_lag(a, {**b, "record": copy}, seed=4)
    assert naive.relation == "independent"
    width = lambda r: r.lag.ci95[1] - r.lag.ci95[0]  # noqa: E731
    print(f"one core: 95 % width {width(same):.1f} yr; naive absolute errors: "
          f"{width(naive):.0f} yr")
    assert width(naive) >= 10 * width(same)
    kinds = {item.kind: item.share for item in same.budget}
    assert kinds["detection"] + kinds["timescale"] > 0.8  # detection and MCE difference


def test_demo_request_recovers_the_true_lag():
    truth = json.loads((RECORDS / "truth.json").read_text())
    done = run_cli("lag", "--request", RECORDS / "demo_lag_request.json", "--json")
    assert done.returncode == 0, done.stderr
    result = json.loads(done.stdout)
    lo, hi = result["lag"]["ci95"]
    assert lo <= truth["lag_on_ice_timescale"] <= hi
    assert result["relation"] == "tied" and result["age_reference"] == "b2k"
    assert abs(sum(b["share"] for b in result["budget"]) - 1) < 1e-9
    assert {"lag", "a", "b", "budget", "resolution_floor", "what_if", "verdict",
            "age_reference", "provenance"} <= set(result)


def test_provenance_states_the_values_used_and_reproduces_the_lag():
    """Where the request leaves a choice to the method (threshold, background, baseline,
    onset direction, bridge rate), the provenance states the value used, and a request
    made of those values and the recorded seed gives the same lag."""
    request = json.loads((RECORDS / "demo_lag_request.json").read_text())
    for side in ("a", "b"):
        request[side]["record"] = str(RECORDS / request[side]["record"])
    request["ties"] = str(RECORDS / request["ties"])
    request["draws"] = 4000
    first = estimate_lag(request)
    used = first.provenance.parameters
    assert used["bridge_rate"] > 0 and used["b"]["direction"] in ("up", "down")
    assert used["a"]["threshold"] > 0 and used["a"]["baseline_years"] > 0
    assert used["a"]["background"] in ("log", "linear")
    again = estimate_lag({**used, "seed": first.provenance.seed})
    assert again.lag == first.lag
    redone = again.provenance.parameters
    # a given threshold states the false-alarm rate it implies (to rounding)
    assert redone["a"].pop("false_alarms") == pytest.approx(used["a"].pop("false_alarms"))
    assert redone == used


def test_request_errors_are_located(tmp_path):
    request = json.loads((RECORDS / "demo_lag_request.json").read_text())
    request["draws"] = 5
    path = tmp_path / "bad.json"
    path.write_text(json.dumps(request))
    from align import read_request

    with pytest.raises(InputError, match="draws"):
        read_request(path)
    with pytest.raises(InputError, match="read_request"):  # files are read at the edges
        estimate_lag(path)
    done = run_cli("lag", "--request", path)
    assert done.returncode == 2 and "draws" in done.stderr
    done = run_cli("lag", "--a", "spike:x.nc:v", "--a-window", "1,2")
    assert done.returncode == 2 and "KIND:RECORD:VARIABLE" in done.stderr


def test_no_event_in_window_is_a_clear_error():
    ice = open_record(RECORDS / "hvd1_ice.nc")
    with pytest.raises(InputError, match="marker a: no event found"):
        estimate_lag({"kind": "event", "record": ice, "variable": "sulfate",
                      "window": [11_300, 11_400], "threshold": 50.0},
                     {"kind": "event", "record": ice, "variable": "sulfate",
                      "window": [12_150, 12_350]}, seed=1)
