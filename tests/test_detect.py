"""Markers: events and onsets against published ages, synthetic truth and scipy."""

import numpy as np
import pytest
from scipy.optimize import least_squares

from align import InputError, detect_event, detect_onset, open_record
from align.noise import simulate_ar1
from align.ramp import bootstrap_ramps, fit_ramp, ramp
from align.record import build_record
from conftest import RECORDS, run_cli
from synthetic import ar1


def interval_record(edges, values, name="x"):
    return build_record(age=0.5 * (edges[1:] + edges[:-1]), age_reference="b2k",
                        age_bounds=np.column_stack([edges[:-1], edges[1:]]),
                        proxies={name: (values, {"units": "1"})})


def synthetic_ramp(rng, phi, n=100):
    """Irregular 5-15 yr samples; a ramp of known onset; AR(1) noise with coefficient ``phi``
    per sample (sd 1); step 3-5 sd. Returns (edges, values, true onset age)."""
    edges = 10_000.0 + np.concatenate([[0.0], np.cumsum(rng.uniform(5, 15, n))])
    age = 0.5 * (edges[1:] + edges[:-1])
    onset = age[0] + (age[-1] - age[0]) * rng.uniform(0.4, 0.6)
    step = rng.choice([-1, 1]) * rng.uniform(3, 5)
    values = step * np.clip((onset - age) / rng.uniform(30, 150), 0, 1) + ar1(rng, n, phi)
    return edges, values, onset


# --------------------------------------------------------------------------------------------
# published ages


@pytest.mark.parametrize("event, age", [("Holocene", 11703), ("GI-1e", 14692)])
def test_published_onsets_on_ngrip_decadal_d18o(ngrip_csv, event, age):
    # NGRIP decadal d18O on GICC05 (data: Erhardt et al. 2019, doi:10.5194/cp-15-811-2019);
    # onset ages from Rasmussen et al. (2014, doi:10.1016/j.quascirev.2014.09.007), in the
    # GIS_table.txt of tests/data/greenland: 11,703 and 14,692 b2k. Window +-250 yr.
    record = open_record(ngrip_csv, age_column="Age_BP", age_reference="BP")
    result = detect_onset(record, "d18O", [age - 250, age + 250], age_reference="b2k", seed=3)
    print(f"{event}: onset {result.onset.median:.1f} b2k, published {age}, deviation "
          f"{result.onset.median - age:+.1f} yr, 95 % {result.onset.ci95}")
    assert abs(result.onset.median - age) <= 30
    assert result.onset.ci95[0] <= age <= result.onset.ci95[1]
    assert result.clear_transition and result.direction == "up"


# --------------------------------------------------------------------------------------------
# onsets: calibration and reference library


@pytest.mark.slow
@pytest.mark.parametrize("phi", [0.0, 0.4, 0.8])
def test_onset_intervals_cover_the_truth(phi):
    rng = np.random.default_rng(11)
    hits = 0
    trials = 200  # binomial sd 0.015 at 0.95
    for _ in range(trials):
        edges, values, onset = synthetic_ramp(rng, phi)
        result = detect_onset(interval_record(edges, values), "x", [edges[0], edges[-1]],
                              draws=400, seed=int(rng.integers(2**31)))
        hits += result.onset.ci95[0] <= onset <= result.onset.ci95[1]
    coverage = hits / trials
    print(f"AR(1) {phi}: 95 % onset intervals cover the truth in {coverage:.3f} of {trials}")
    assert 0.90 <= coverage <= 0.99


@pytest.mark.slow
def test_white_noise_bootstrap_undercovers_red_noise():
    """Why AR(1) is the default: treating AR(1) 0.8 noise as white gives intervals that
    miss the truth far more often than 5 %."""
    rng = np.random.default_rng(12)
    hits = 0
    trials = 200
    for _ in range(trials):
        edges, values, onset = synthetic_ramp(rng, 0.8)
        t, x = -0.5 * (edges[1:] + edges[:-1])[::-1], values[::-1]
        width = np.diff(edges)[::-1]
        w = width / width.mean()
        fit = fit_ramp(t, x, w)
        fitted = ramp(t, fit.t1, fit.t2, fit.x1, fit.x2)
        sd = np.std(x - fitted)
        samples = bootstrap_ramps(t, w, fitted, simulate_ar1(t, 0.0, sd, 400, rng))
        draws = samples[:, 0] + rng.uniform(-0.5, 0.5, len(samples)) * np.interp(
            samples[:, 0], t, width)
        lo, hi = np.percentile(-draws, [2.5, 97.5])
        hits += lo <= onset <= hi
    coverage = hits / trials
    print(f"white-noise bootstrap at AR(1) 0.8: coverage {coverage:.3f}")
    assert coverage < 0.85


def test_noise_free_ramp_matches_scipy_least_squares():
    rng = np.random.default_rng(4)
    t = np.sort(rng.uniform(0, 1000, 300))
    w = rng.uniform(0.5, 1.5, 300)
    x = ramp(t, 412.3, 517.9, 2.0, -1.5)
    fit = fit_ramp(t, x, w)
    reference = least_squares(lambda p: np.sqrt(w) * (ramp(t, *p) - x), [400, 530, 1.8, -1.2],
                              xtol=1e-15, ftol=1e-15, gtol=1e-15)
    np.testing.assert_allclose([fit.t1, fit.t2, fit.x1, fit.x2], reference.x, rtol=0,
                               atol=1e-6)


def test_ar1_profile_likelihood_matches_scipy():
    """The profiled AR(1) log-likelihood behind the transition test against the exact
    Gaussian density (scipy.stats.multivariate_normal, covariance sd^2 a^(|t_i - t_j| / d)),
    maximised over the same grid of coefficients: equal up to the constants n/2 ln(2 pi) +
    n/2."""
    from scipy.stats import multivariate_normal

    from align.noise import ar1_profile_loglik

    rng = np.random.default_rng(14)
    t = np.cumsum(rng.uniform(1.0, 3.0, 20))
    z = simulate_ar1(t, 8.0, 2.0, 1, rng)[0]
    d = np.diff(t).mean()
    best = -np.inf
    for a in np.linspace(0.0, 0.999, 200):
        corr = a ** (np.abs(t[:, None] - t[None, :]) / d)
        var = z @ np.linalg.solve(corr, z) / t.size
        best = max(best, multivariate_normal(np.zeros(t.size), var * corr).logpdf(z))
    expected = best + 0.5 * t.size * (np.log(2 * np.pi) + 1.0)
    assert ar1_profile_loglik(t, z)[0] == pytest.approx(expected, abs=1e-6)


def test_resolution_floor_of_an_abrupt_step():
    """A noise-free step between two 20-year samples: the onset can be anywhere in them."""
    edges = np.arange(10_000.0, 11_001.0, 20.0)
    age = 0.5 * (edges[1:] + edges[:-1])
    values = np.where(age < 10_500, 1.0, 0.0)
    result = detect_onset(interval_record(edges, values), "x", [10_000, 11_000], seed=1)
    assert result.onset.sd >= 20 / np.sqrt(12) * 0.9
    assert result.onset.ci95[1] - result.onset.ci95[0] >= 0.9 * 20


def test_pure_noise_is_no_clear_transition():
    rng = np.random.default_rng(5)
    edges = 10_000.0 + np.arange(201) * 10.0
    result = detect_onset(interval_record(edges, rng.normal(size=200)), "x",
                          [10_000, 12_000], seed=2)
    assert result.clear_transition is False
    assert "no clear transition" in result.reason


def test_bayesian_ramp_covers_a_clear_onset():
    rng = np.random.default_rng(6)
    hits = 0
    for _ in range(12):
        edges, values, onset = synthetic_ramp(rng, 0.4)
        result = detect_onset(interval_record(edges, values), "x", [edges[0], edges[-1]],
                              method="bayes", draws=400, seed=int(rng.integers(2**31)))
        hits += result.onset.ci95[0] <= onset <= result.onset.ci95[1]
        assert "Erhardt" in result.method and result.draws_used == 400
    assert hits >= 10  # 95 % intervals: 10 or more of 12 expected (binomial, p > 0.98)


# --------------------------------------------------------------------------------------------
# events


def test_event_found_in_the_right_sample():
    rng = np.random.default_rng(8)
    right = 0
    trials = 200
    for _ in range(trials):
        edges = 5_000.0 + np.concatenate([[0.0], np.cumsum(rng.uniform(0.8, 3.0, 400))])
        values = 20.0 + ar1(rng, 400, 0.3, 2.0)
        hold = int(rng.integers(150, 250))
        values[hold: hold + 3] += rng.uniform(30, 80) * np.array([0.6, 1.0, 0.4])
        result = detect_event(interval_record(edges, values), "x")
        right += result.found and result.sample.index == hold + 2  # oldest sample of the run
    print(f"spikes found in the right sample: {right / trials:.3f}")
    assert right / trials >= 0.95


def test_false_events_on_red_noise_are_rare():
    rng = np.random.default_rng(9)
    false = 0
    windows = 400
    edges = 1_000.0 + np.arange(1001) * 2.0
    for _ in range(windows):
        result = detect_event(interval_record(edges, ar1(rng, 1000, 0.5)), "x")
        false += result.found
    print(f"false events at the default threshold on AR(1) 0.5 noise: {false / windows:.3f}")
    assert false / windows <= 0.05


def test_event_age_is_uniform_over_its_sample():
    # handbook value: the sd of a uniform distribution of width h is h / sqrt(12); a spike
    # 10^4 noise sd high can reach into the older sample by only ~1e-4 of its width
    edges = np.arange(100.0, 200.1, 2.5)
    values = np.random.default_rng(0).normal(0.0, 0.01, 40)
    values[20] = 100.0
    result = detect_event(interval_record(edges, values), "x")
    assert result.found and result.sample.age_interval == [150.0, 152.5]
    assert result.p_in_sample > 0.99
    assert result.event.sd == pytest.approx(2.5 / np.sqrt(12), rel=0.01)
    assert result.event.median == pytest.approx(151.25, abs=0.01)


def test_no_event_is_a_normal_result():
    rng = np.random.default_rng(10)
    edges = np.arange(0.0, 1000.1, 5.0)
    result = detect_event(interval_record(edges + 1000, rng.normal(size=200)), "x")
    assert result.found is False and result.event is None and "no event" in result.message


def test_window_outside_record_is_refused():
    record = open_record(RECORDS / "hvd1_ice.nc")
    with pytest.raises(InputError, match="outside the record"):
        detect_event(record, "sulfate", [20_000, 21_000])


# --------------------------------------------------------------------------------------------
# command line


def test_cli_detect_on_demo_and_ngrip(ngrip_csv):
    import json

    done = run_cli("detect", "event", f"{RECORDS / 'hvd1_ice.nc'}:sulfate", "--window",
                   "12150,12350", "--json")
    assert done.returncode == 0, done.stderr
    event = json.loads(done.stdout)
    assert event["kind"] == "event" and event["age_reference"] == "b2k" and event["found"]
    done = run_cli("detect", "onset", f"{ngrip_csv}:d18O", "--age-column", "Age_BP",
                   "--age-reference", "BP", "--to", "b2k", "--window", "11450,11950",
                   "--seed", "1", "--json")
    assert done.returncode == 0, done.stderr
    onset = json.loads(done.stdout)
    for key in ("kind", "age_reference", "onset", "midpoint", "end", "duration", "levels",
                "noise", "clear_transition", "method", "draws_used", "provenance"):
        assert key in onset
    assert onset["age_reference"] == "b2k" and onset["provenance"]["seed"] == 1
    bad = run_cli("detect", "onset", f"{RECORDS / 'trv3_lake.nc'}:d18O", "--window", "1,2")
    assert bad.returncode == 2 and "outside the record" in bad.stderr
