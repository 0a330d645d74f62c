"""Events in skewed, autocorrelated backgrounds (issue 13, item 2): false alarms per 1000 yr
at the rate asked for, and the detection power that leaves.

Generators are documented in each test; tolerance: the observed false-alarm rate within a
factor of 2 of the nominal rate (the issue's criterion), on enough record for about 80
expected false events (Poisson sd 11 %).
"""

import numpy as np
import pytest
from scipy.stats import multivariate_normal, norm

from align.anomaly import upcrossing_probability
from align.markers.event import detect_event
from align.record import build_record
from synthetic import ar1


def regular(values, step=2.0, start=1_000.0):
    edges = start + np.arange(values.size + 1) * step
    return build_record(age=0.5 * (edges[1:] + edges[:-1]),
                        age_bounds=np.column_stack([edges[:-1], edges[1:]]),
                        age_reference="b2k", proxies={"x": (values, {"units": "ng/g"})})


def test_upcrossing_probability_is_the_bivariate_normal_one():
    """Reference: scipy's bivariate normal cdf, P(X0 <= c < X1) = Phi(c) - Phi2(c, c; phi)."""
    for c, phi in [(2.0, 0.5), (3.5, 0.8), (1.0, -0.3), (4.0, 0.0)]:
        ref = norm.cdf(c) - multivariate_normal([0, 0], [[1, phi], [phi, 1]]).cdf([c, c])
        assert upcrossing_probability(c, phi) == pytest.approx(ref, rel=1e-6, abs=1e-12)


def lognormal_windows(rng, phi, windows, samples=100):
    """Generator: ``exp(AR(1))`` with lag-1 coefficient ``phi`` and log-sd 1, 2-yr samples,
    in independent 200-yr windows: a skewed, autocorrelated background with no event."""
    return [regular(np.exp(ar1(rng, samples, phi))) for _ in range(windows)]


@pytest.mark.slow
@pytest.mark.parametrize("phi", [0.5, 0.8])
def test_false_alarms_on_lognormal_red_noise_match_the_nominal_rate(phi):
    rng = np.random.default_rng(int(phi * 10))
    records = lognormal_windows(rng, phi, 200)
    years = 200 * 200.0
    nominal = 2.0
    alarms = sum(len(detect_event(r, "x", false_alarms=nominal).candidates) for r in records)
    rate = alarms / years * 1000
    windows_hit = np.mean([detect_event(r, "x").found for r in records])
    print(f"lognormal AR(1) {phi}: {rate:.2f} false events per 1000 yr at nominal {nominal}; "
          f"default rate: false event in {windows_hit:.3f} of 200-yr windows")
    assert nominal / 2 <= rate <= nominal * 2
    assert windows_hit <= 0.02  # default 0.01 per 1000 yr: 0.002 expected per window


@pytest.mark.slow
def test_detection_power_on_lognormal_red_noise_is_reported():
    """Generator: as above (phi 0.5), with a 3-sample spike of ``k`` log-sd added at a random
    sample; power = an event found in one of the spike's samples, at the default false-alarm
    rate (the pick is its oldest anomalous sample, which may be the spike's second)."""
    rng = np.random.default_rng(7)
    power = {}
    for k in (4.0, 6.0, 10.0):
        right = 0
        for _ in range(100):
            log = ar1(rng, 100, 0.5)
            hold = int(rng.integers(30, 70))
            log[hold:hold + 3] += k * np.array([0.6, 1.0, 0.5])
            result = detect_event(regular(np.exp(log)), "x")
            right += result.found and hold <= result.sample.index <= hold + 2
        power[k] = right / 100
    print("detection power (spike peak in log-sd: found in the spike):", power)
    assert power[4.0] <= power[6.0] <= power[10.0]
    assert power[10.0] >= 0.9


def stadial_segments(greenland):
    """NGRIP Ca and Na, 20-250 yr before each tabulated transition (stadial ice, about 2-yr
    samples; Erhardt et al. 2019, doi:10.5194/cp-15-811-2019; transitions after Rasmussen et
    al. 2014, doi:10.1016/j.quascirev.2014.09.007). The files hold ln(ng/g); the records get
    the concentrations back, as a user would give them."""
    out = []
    for path in sorted((greenland / "transitions").glob("NGRIP_*_[CN]a.csv")):
        t, v = np.genfromtxt(path, delimiter=",", unpack=True)
        keep = (t <= -20) & np.isfinite(v)
        age = 10_000.0 - t[keep]  # time after the event is younger; any offset will do
        order = np.argsort(age)
        out.append(build_record(age=age[order], age_reference="b2k",
                                proxies={"x": (np.exp(v[keep][order]), {"units": "ng/g"})}))
    return out


@pytest.mark.slow
def test_false_alarms_on_ngrip_stadial_ice_match_the_nominal_rate(greenland):
    records = stadial_segments(greenland)
    assert len(records) >= 30
    years = sum(float(r["age"].values[-1] - r["age"].values[0]) for r in records)
    nominal = 5.0
    alarms = sum(len(detect_event(r, "x", false_alarms=nominal).candidates) for r in records)
    rate = alarms / years * 1000
    hit = np.mean([detect_event(r, "x").found for r in records])
    print(f"NGRIP stadial Ca/Na ({years:.0f} yr): {rate:.2f} false events per 1000 yr at "
          f"nominal {nominal}; at the default rate a false event in {hit:.3f} of segments")
    assert nominal / 2 <= rate <= nominal * 2
    assert hit <= 0.15  # before: 0.73 (Ca) and 0.31 (Na) of windows (issue 13)


# --------------------------------------------------------------------------------------------
# the event's age (issue 13, item 3)


def event_trials(step, amplitude, trials, seed):
    """Generator ``synthetic.spike_in_samples`` (a spike beginning at a uniformly random
    moment, ``step``-yr means of an annual series, ``amplitude`` sample sd): per trial in which
    an event was found, (truth inside the 95 % interval, truth inside the picked sample)."""
    from synthetic import spike_in_samples

    rng = np.random.default_rng(seed)
    out = []
    for _ in range(trials):
        record, onset = spike_in_samples(rng, step, amplitude, years=240)
        result = detect_event(record, "s")
        if result.found:
            lo, hi = result.event.ci95
            s_lo, s_hi = result.sample.age_interval
            out.append((lo <= onset <= hi, s_lo + 0.025 * (s_hi - s_lo) <= onset
                        <= s_hi - 0.025 * (s_hi - s_lo)))
    return np.array(out)


@pytest.mark.slow
@pytest.mark.parametrize("step, amplitude, seed", [(1, 12.0, 31), (2, 20.0, 32), (5, 20.0, 33)])
def test_event_interval_covers_where_the_deposit_begins(step, amplitude, seed):
    """Nominal 95 %; tolerance 0.90-0.99 over 160 trials (binomial sd 1.7 %). Before the fix
    the interval was uniform over the first anomalous sample, which covered the beginning in
    0.35-0.78 of trials: a deposit beginning late in a sample (in forward time) dilutes it
    below the threshold, and the next younger sample is the first anomalous one. That old
    interval is computed here too and must visibly under-cover."""
    hits = event_trials(step, amplitude, 160, seed)
    cover, old = hits.mean(axis=0)
    print(f"{step}-yr samples, spike {amplitude:g} sd: found {hits.shape[0]} of 160, coverage "
          f"{cover:.3f} (uniform over the first anomalous sample: {old:.3f})")
    assert hits.shape[0] >= 150
    assert 0.90 <= cover <= 0.99
    assert old <= 0.85


def test_onset_spread_matches_direct_integration():
    """Reference: the posterior of the beginning integrated directly with scipy.integrate.quad
    (uniform prior per year, likelihood phi(z) younger than the older sample and
    phi(z - H u) inside it); the draws' sd against the estimate's."""
    from scipy.integrate import quad

    from align.markers.event import onset_spread

    lo, older_lo, older_hi, z, height = 100.0, 105.0, 110.0, 1.3, 9.0
    spread = onset_spread(lo, older_lo, older_hi, z, height)

    def density(t):
        u = max(t - older_lo, 0.0) / (older_hi - older_lo)
        return norm.pdf(z - height * u)

    total = quad(density, lo, older_hi, points=[older_lo])[0]
    assert spread.p == pytest.approx(quad(density, lo, older_lo)[0] / total, rel=1e-6)
    for q in (0.5, 0.9, 0.975):
        age = float(spread.ppf(q))
        assert quad(density, lo, age, points=[older_lo] if age > older_lo else None)[0] / total \
            == pytest.approx(q, abs=1e-6)
    est = spread.estimate()
    draws = spread.draws(np.random.default_rng(1), 200_000)
    assert est.sd == pytest.approx(np.std(draws), rel=0.01)
    assert est.ci95[1] > older_lo  # the beginning may lie in the older sample
