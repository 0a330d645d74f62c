"""Onset markers at a transition's onset, midpoint or end (issue 13, item 4, first part).

Generator: one record (2-yr samples, white noise sd 0.3) holding two ramps of amplitude 4
whose midpoints share one true age but whose durations differ (100 yr and 20 yr), so the
onset lag is 40 yr and the midpoint lag 0 yr (both known exactly). Nominal: 95 % intervals.
"""

import functools

import numpy as np
import pytest

from align.lag import estimate_lag
from align.markers.onset import KIND
from align.record import build_record

MID = 10_500.0


def two_ramps(rng):
    edges = np.arange(10_200.0, 10_800.1, 2.0)
    mid = 0.5 * (edges[1:] + edges[:-1])
    ramp = lambda half: 4.0 * np.clip((MID + half - mid) / (2 * half), 0, 1)  # noqa: E731
    return build_record(age=mid, age_bounds=np.column_stack([edges[:-1], edges[1:]]),
                        age_reference="b2k", attrs={"core": "C"},
                        proxies={"slow": (ramp(50.0) + rng.normal(0, 0.3, mid.size), {}),
                                 "fast": (ramp(10.0) + rng.normal(0, 0.3, mid.size), {})})


def lag_at(record, position, seed):
    spec = lambda v: {"kind": "onset", "record": record, "variable": v,  # noqa: E731
                      "window": [10_300, 10_700], "draws": 200, "position": position}
    return estimate_lag(spec("slow"), spec("fast"), draws=4000, seed=seed)


@pytest.mark.slow
@pytest.mark.parametrize("position,truth", [("onset", 40.0), ("midpoint", 0.0),
                                            ("end", -40.0)])
def test_the_lag_is_taken_at_the_chosen_point_of_the_transition(position, truth):
    """Tolerance: 95 % intervals cover the known lag in at least 9 of 10 records (binomial,
    P >= 0.91 at the nominal rate)."""
    rng = np.random.default_rng({"onset": 1, "midpoint": 2, "end": 3}[position])
    hits = 0
    for _ in range(10):
        result = lag_at(two_ramps(rng), position, int(rng.integers(2**31)))
        hits += result.lag.ci95[0] <= truth <= result.lag.ci95[1]
    print(f"{position}: the 95 % interval covers the true lag {truth:g} yr in {hits} of 10")
    assert hits >= 9
    assert result.a.position == position
    assert position in result.verdict or position == "onset"
    assert any(position in line for line in result.assumptions)


@pytest.mark.slow
def test_the_report_names_the_point(tmp_path):
    from align.report import write_report

    result = lag_at(two_ramps(np.random.default_rng(4)), "midpoint", 1)
    assert result.a.age == result.a.midpoint
    md = (write_report(result, tmp_path, formats=("md",)) / "report.md").read_text()
    assert "marker a (onset: midpoint)" in md
    # the marker figure shades the point the lag is taken at, not the onset
    from align.figures import marker_figure

    ax = marker_figure(result.a, "a").axes[0]
    shaded = [p for p in ax.patches if p.get_label() == "midpoint 95 %"]
    assert len(shaded) == 1
    assert np.allclose(sorted(shaded[0].get_x() + np.array([0, shaded[0].get_width()])),
                       sorted(result.a.midpoint.ci95))


# --------------------------------------------------------------------------------------------
# 'clear transition' under red noise without a transition (issue 13, item 4)


def ar1_windows(dt, tau, replicates, rng, step=0.0, duration=50.0):
    """500-yr windows of Gaussian AR(1) noise (sd 1, persistence ``tau``) sampled every ``dt``
    yr (forward time), plus a ramp of ``step`` sd and ``duration`` yr whose onset is uniform
    in the window's middle fifth. Returns (t, series, onsets)."""
    from align.noise import simulate_ar1

    t = -(10_000.0 + np.arange(dt / 2, 500.0, dt))[::-1]
    onset = rng.uniform(t[0] + 200.0, t[0] + 300.0, (replicates, 1))
    ramp = step * np.clip((t - onset) / duration, 0.0, 1.0)
    return t, simulate_ar1(t, tau, 1.0, replicates, rng) + ramp, onset


@pytest.mark.slow
@pytest.mark.parametrize("dt", [10.0, 2.0])
def test_clear_transition_has_its_stated_false_positive_rate_under_red_noise(dt):
    """Generator: pure AR(1) noise, tau 50, 100 and 300 yr, 500-yr windows (``ar1_windows``).
    Nominal: ``CLEAR_TRANSITION_RATE`` (5 %). Tolerance: [nominal / 2, 2 x nominal] over 500
    windows (binomial sd 1.0 % at 5 %: -2.5 and +5 sd). Before (the rule 'step > 2 noise
    sd', 200 windows each through detect_onset): 0.20, 0.31, 0.39 at 10-yr and 0.20, 0.33,
    0.40 at 2-yr sampling."""
    from align.choices import CLEAR_TRANSITION_RATE
    from align.detect import transition_p

    rng = np.random.default_rng(int(dt))
    for tau in (50.0, 100.0, 300.0):
        t, series, _ = ar1_windows(dt, tau, 500, rng)
        rate = np.mean(transition_p(t, series, 0) <= CLEAR_TRANSITION_RATE)
        print(f"{dt:g}-yr samples, tau {tau:g} yr: 'clear' in {rate:.3f} of 500 windows "
              f"(nominal {CLEAR_TRANSITION_RATE:g})")
        assert CLEAR_TRANSITION_RATE / 2 <= rate <= 2 * CLEAR_TRANSITION_RATE


@pytest.mark.slow
def test_long_records_are_tested_on_means_of_consecutive_samples():
    """A 500-yr window sampled every 0.25 yr (2,000 samples) is tested on 500 means of four
    samples, so its surrogates cost what 500 samples cost (at 20,000 samples they took 27 s
    and 4 GB before). Generator and tolerance as above, tau 100 and 300 yr."""
    from align.choices import CLEAR_TRANSITION_RATE
    from align.detect import NULL_MAX_SAMPLES, _null_steps, transition_p

    rng = np.random.default_rng(25)
    _null_steps.cache_clear()
    for tau in (100.0, 300.0):
        t, series, _ = ar1_windows(0.25, tau, 500, rng)
        rate = np.mean(transition_p(t, series, 0) <= CLEAR_TRANSITION_RATE)
        print(f"0.25-yr samples, tau {tau:g} yr: 'clear' in {rate:.3f} of 500 windows")
        assert CLEAR_TRANSITION_RATE / 2 <= rate <= 2 * CLEAR_TRANSITION_RATE
    # one surrogate set, of NULL_MAX_SAMPLES samples, made once and used by both
    info = _null_steps.cache_info()
    assert t.size == 2000 and (info.currsize, info.misses, info.hits) == (1, 1, 1)
    _null_steps(NULL_MAX_SAMPLES, 0)
    assert _null_steps.cache_info().misses == 1


@pytest.mark.slow
def test_power_of_the_clear_transition_test():
    """Generator: ``ar1_windows`` with a 50-yr ramp, tau 100 yr, 10-yr samples; the power is
    printed at SNR 2, 4 and 8 (step in noise sd). Measured: 0.10, 0.43, 0.99. With tau known
    (an oracle test, same simulation) it would be about 0.3, 0.77 and 1: not knowing the
    persistence costs power, because a real step also makes the series look redder. The
    floors: above the nominal rate at SNR 4, at least 0.6 at SNR 8."""
    from align.choices import CLEAR_TRANSITION_RATE
    from align.detect import transition_p

    rng = np.random.default_rng(7)
    power = {}
    for snr in (2.0, 4.0, 8.0):
        t, series, _ = ar1_windows(10.0, 100.0, 100, rng, step=snr)
        power[snr] = np.mean(transition_p(t, series, 0) <= CLEAR_TRANSITION_RATE)
    print("power at tau 100 yr, 10-yr samples (SNR: share called clear):", power)
    assert power[2.0] <= power[4.0] <= power[8.0]
    assert power[4.0] > CLEAR_TRANSITION_RATE and power[8.0] >= 0.6


# --------------------------------------------------------------------------------------------
# a step inside coarse slices (issue 13, item 4)


def sliced_step(rng, slice_yr=50.0, snr=10.0):
    """An abrupt step (10 units, older level high) at a uniformly random age inside
    10,400-10,600 b2k, in an annual series (each year the exact mean over it), averaged into
    ``slice_yr``-yr slices by :func:`align.resample` (overlap means), plus white noise of sd
    10 / ``snr`` per slice. Returns (record, true step age)."""
    from align.resample import resample

    step = rng.uniform(10_400.0, 10_600.0)
    edges = np.arange(10_000.0, 11_000.1, 1.0)
    older = np.clip((edges[1:] - step) / 1.0, 0.0, 1.0)  # share of each year before the step
    annual = build_record(age=edges[:-1] + 0.5, age_bounds=np.column_stack([edges[:-1],
                                                                             edges[1:]]),
                          age_reference="b2k", proxies={"x": (10.0 * older, {"units": "1"})})
    sliced = resample(annual, slice_yr, start=10_000.0, stop=11_000.0)
    values = sliced["x"].values + rng.normal(0.0, 10.0 / snr, sliced["x"].size)
    return build_record(age=sliced["age"].values, age_bounds=sliced["age_bounds"].values,
                        age_reference="b2k", proxies={"x": (values, {"units": "1"})}), step


@pytest.mark.slow
def test_a_step_inside_coarse_slices_is_covered():
    """Generator: ``sliced_step`` (50-yr slices, SNR 10). Nominal: 95 % onset intervals.
    Tolerance: coverage 0.90-0.99 over 200 records (binomial sd 0.015). Before (each corner
    displaced by +-half a sample around the fitted corner): coverage 0.33, onset median 45 yr
    too old (one slice), and a resolution sd of 14 yr (now about 30 yr; a lag between two
    such steps then has a resolution floor of about 42 yr, was 20 yr)."""
    from align import detect_onset

    rng = np.random.default_rng(21)
    hits, errors, resolution = 0, [], []
    for _ in range(200):
        record, step = sliced_step(rng)
        result = detect_onset(record, "x", [10_000, 11_000], draws=100,
                              seed=int(rng.integers(2**31)))
        hits += result.onset.ci95[0] <= step <= result.onset.ci95[1]
        errors.append(result.onset.median - step)
        resolution.append(np.std(result.draws.age - result.draws.fit))
    coverage = hits / 200
    print(f"50-yr slices, SNR 10: coverage {coverage:.3f}, onset error median "
          f"{np.median(errors):+.1f} yr, resolution sd {np.median(resolution):.1f} yr, RMS "
          f"error {np.sqrt(np.mean(np.square(errors))):.1f} yr")
    assert 0.90 <= coverage <= 0.99
    # the lag's resolution floor is the sd of these displacements: a step that can sit
    # anywhere in two 50-yr slices, not +-25 yr around the corner (sd 14.4 yr before)
    assert np.median(resolution) >= 1.5 * 50.0 / np.sqrt(12.0)


# --------------------------------------------------------------------------------------------
# plausibility flags on published data (issue 13, item 4)


def ngrip_transition(greenland, event, variable):
    """NGRIP ``variable`` around ``event`` (about 2-yr samples; Erhardt et al. 2019,
    doi:10.5194/cp-15-811-2019), placed at the event's GICC05 age from the GIS table
    (Rasmussen et al. 2014, doi:10.1016/j.quascirev.2014.09.007; tests/data/greenland).
    The files count years after the event; Ca is in ln(ng/g). Returns (record, window)."""
    rows = [line.split("\t") for line in (greenland / "GIS_table.txt").read_text().splitlines()
            if not line.startswith("#")]
    age0 = next(float(row[1]) for row in rows if row[0] == event)
    t, v = np.genfromtxt(greenland / "transitions" / f"NGRIP_{event}_{variable}.csv",
                         delimiter=",", unpack=True)
    keep = np.isfinite(v)
    age = age0 - t[keep]
    order = np.argsort(age)
    record = build_record(age=age[order], age_reference="b2k",
                          attrs={"core": "NGRIP", "timescale": "GICC05"},
                          proxies={variable: (v[keep][order], {"units": "1"})})
    return record, [age0 - 250.0, age0 + 250.0]


def ngrip_lag(greenland, event):
    spec = {}
    for variable in ("Ca", "d18O"):
        record, window = ngrip_transition(greenland, event, variable)
        spec[variable] = {"kind": "onset", "record": record, "variable": variable,
                          "window": window, "draws": 200}
    return estimate_lag(spec["Ca"], spec["d18O"], draws=2000, seed=5)


@pytest.mark.slow
def test_gi11_onsets_are_flagged_and_a_clean_transition_is_not(greenland):
    """GI-11: the d18O ramp (about 155 yr) starts on a gradual pre-rise, 120 yr before the
    tabulated age, with its onset's interval running to the window's old edge; Ca changes
    in about 40 yr, so the onset lag Ca - d18O (about -100 yr, 'resolved') rests on where the
    long ramp is said to start. GI-12c: both ramps about 60 yr, well inside the window."""
    gi11 = ngrip_lag(greenland, "GI-11")
    print(f"GI-11 Ca - d18O onset lag {gi11.lag.median:.0f} yr {gi11.lag.ci95}; durations "
          f"{gi11.a.duration.median:.0f} and {gi11.b.duration.median:.0f} yr; flags "
          f"{gi11.a.flags} {gi11.b.flags}")
    assert "short_plateau" in gi11.b.flags and "short_plateau" not in gi11.a.flags
    assert "ramp_ratio" in gi11.a.flags and "ramp_ratio" in gi11.b.flags
    note = next(line for line in gi11.assumptions if "midpoints" in line)
    print(note)
    assert any("pre-rise" in line for line in gi11.assumptions)
    gi12 = ngrip_lag(greenland, "GI-12c")
    print(f"GI-12c Ca - d18O onset lag {gi12.lag.median:.0f} yr {gi12.lag.ci95}; durations "
          f"{gi12.a.duration.median:.0f} and {gi12.b.duration.median:.0f} yr")
    assert gi12.a.flags == [] and gi12.b.flags == []
    assert not any("midpoints" in line for line in gi12.assumptions)
    assert gi12.a.clear_transition and gi12.b.clear_transition


def test_gi11_calcium_in_decadal_ngrip_is_flagged(ngrip_csv):
    """NGRIP decadal Ca at GI-11 (43,340 b2k, Rasmussen et al. 2014; window +-250 yr): a
    ramp of about 165 yr starting about 120 yr before the tabulated age, on a gradual
    pre-rise."""
    from align import detect_onset, open_record

    record = open_record(ngrip_csv, age_column="Age_BP", age_reference="BP")
    result = detect_onset(record, "Ca", [43_090, 43_590], age_reference="b2k", draws=200,
                          seed=1)
    print(f"GI-11 decadal Ca: onset {result.onset.median:.0f} b2k, duration "
          f"{result.duration.median:.0f} yr, flags {result.flags}")
    assert "short_plateau" in result.flags
    assert any("pre-rise" in line for line in KIND.text(result))


# --------------------------------------------------------------------------------------------
# short ramps under red noise (issue 13, item 4)


def interval_record(t, values, dt):
    """A record of forward-time samples ``t`` (each ``dt`` yr long)."""
    age = -t[::-1]
    return build_record(age=age, age_bounds=np.column_stack([age - dt / 2, age + dt / 2]),
                        age_reference="b2k", proxies={"x": (values[::-1], {"units": "1"})})


def short_ramp_errors(rng, count, duration, tau=100.0, snr=2.0):
    """Onset errors (forward time: negative is too old), 95 % coverage and the share of
    markers carrying the short-ramp caution, over ``count`` records of ``ar1_windows`` (10-yr
    samples, AR(1) persistence ``tau``, a ramp of ``snr`` noise sd lasting ``duration`` yr)."""
    from align import detect_onset

    t, series, onset = ar1_windows(10.0, tau, count, rng, step=snr, duration=duration)
    errors, hits, cautioned = [], 0, 0
    for x, truth in zip(series, -onset[:, 0]):
        result = detect_onset(interval_record(t, x, 10.0), "x", [10_000, 10_500], draws=100,
                              seed=int(rng.integers(2**31)))
        errors.append(truth - result.onset.median)
        hits += result.onset.ci95[0] <= truth <= result.onset.ci95[1]
        cautioned += result.short_ramp_bias is not None
    return np.array(errors), hits / count, cautioned / count


#: Mean onset error (yr, negative: too old) of 20- and 50-yr ramps at 2 noise sd under AR(1)
#: noise of 100 yr before the generalised least-squares fit (400 records, measured below).
SHORT_RAMP_BIAS_BEFORE = {20.0: -48.0, 50.0: -42.0}


@functools.lru_cache
def short_ramp_case(duration):
    """``short_ramp_errors`` on the 60 records of the short-ramp tests (seed: the duration)."""
    return short_ramp_errors(np.random.default_rng(int(duration)), 60, duration)


@pytest.mark.slow
@pytest.mark.parametrize("duration", [20.0, 50.0])
def test_short_ramp_onsets_under_red_noise(duration):
    """Generator: ``ar1_windows`` (10-yr samples, 500-yr window, AR(1) tau 100 yr, sd 1) with
    a ramp of 2 sd (SNR 2) lasting ``duration`` yr. Nominal: 95 % intervals, coverage
    0.90-0.99 over 60 records (binomial sd 0.028); issue 13 asks to reduce the bias and say
    so: here at least halved from the measured one (``SHORT_RAMP_BIAS_BEFORE``) and the
    reader told in most records. The stricter target, within a third, is
    ``test_short_ramp_bias_within_a_third`` (not met for 50-yr ramps).

    Measured (400 records through detect_onset): mean error -48 and -42 yr (too old),
    median -15 and -9 yr, coverage 0.81 and 0.84. The cause: under red noise the
    least-squares ramp often takes a noise excursion beside the step into a much longer ramp
    (fitted durations median 69 and 80 yr, mean 112 and 122 yr; onset error 5 % quantile
    -240 yr; the midpoint is off by only -4 and -9 yr), and a bootstrap from that fit cannot
    reach the true ramp; neither bootstrap bias correction, the basic interval, nor
    re-generating from a duration matched by indirect inference fixed the mean or the
    coverage. The flags mark most of these records: 283 of 400 carry one (mean error -64
    and -56 yr), and those called a clear transition without a flag err by -9 and -12 yr on
    average (coverage 0.90 and 0.78).

    After (the ramp refitted by generalised least squares under AR(1) noise whose
    persistence is that of the least-squares fit's residuals bias-corrected by the pilot;
    replicates refitted under the record's persistence): here -12.9 and -16.6 yr (median -0.1
    and +1.4 yr), coverage 0.93 and 0.90; on 300 other records each -12.8 and -22.7 yr
    (seeds 1020, 2020) and -13.6, -15.9 and -13.4 yr (seeds 1050, 2050, 3050; standard
    errors 3.7-4.5 yr), coverage 0.90-0.92. All of the bias comes from the fits longer than
    100 yr (seed 1050: 70 of 300, mean error -56 yr; the others -2 yr).

    Tried since, on these records and seeds 1050 and 2050 (mean error, coverage, 50-yr):
    bootstrap bias correction of the onset (the replicates' mean onset minus the fitted one,
    subtracted from the estimate and its draws; Efron & Tibshirani 1993, ch. 10): -8.6, -10.7
    and -16.9 yr, coverage 0.87 (the replicates of a long fitted ramp come out shorter, so the
    correction moves the tail the wrong way); a prior ``1 / duration`` on the ramp's duration in
    the fit and the replicates: -4.4, +3.9 and -3.8 yr but coverage 0.90, 0.89 and 0.87 and
    median +7 to +9 yr, and it breaks the clearer ramps of ``tests/test_detect.py`` (coverage
    0.81 and 0.85 with AR(1) 0 and 0.4), the coarse slices (coverage 0.995) and the GI-11 flags;
    fitting under a persistence at least the demeaned series' or the fitted ramp's duration: -9
    to -2 yr, coverage 0.95-1.0, but the Holocene onset in NGRIP moves 40-185 yr and coverage of
    ``tests/test_detect.py`` rises to 0.995-1.0; the persistence by maximum likelihood jointly
    with the ramp: -33, -27 and -25 yr, or marginalised over the corners: -34 and -27 yr (both
    for the fit alone, without the bootstrap, where the fit now errs by -12.7, -14.6 and -20.0
    yr). With the true persistence the fit itself errs by -5.5 and -7.8 yr: the bias comes from
    persistence underestimated in the tail's fits, whose residuals look whiter than the noise.

    Grid (``python tests/test_calibration_onsets.py``, 300 records each): mean onset error
    at 2 noise sd -14.7 (20 yr, tau 100), -20.5 (50, 100), -13.0 (50, tau 50), -14.1 (50,
    tau 300) yr, coverage 0.91-0.94; at 4 noise sd -1.6 to -8.1 yr; at 8 noise sd -1.1 and
    +1.8 yr; white noise: +2.9 (50 yr, 2 sd) and -7.9 (20 yr, 2 sd). Markers of ramps at most
    ``LOW_SNR`` noise sd say so (``short_ramp_bias``)."""
    errors, coverage, cautioned = short_ramp_case(duration)
    print(f"ramp {duration:g} yr: onset error mean {errors.mean():+.1f} yr, median "
          f"{np.median(errors):+.1f} yr, coverage {coverage:.2f}, cautioned {cautioned:.2f}")
    assert cautioned >= 0.5  # at 2 noise sd the reader is told in most records
    assert abs(errors.mean()) <= abs(SHORT_RAMP_BIAS_BEFORE[duration]) / 2
    assert 0.90 <= coverage <= 0.99


@pytest.mark.slow
@pytest.mark.parametrize("duration", [20.0, pytest.param(50.0, marks=pytest.mark.xfail(
    strict=True, reason="not fixed: the mean onset error of 50-yr ramps is about -13 to -17 "
    "yr (target: within 14 yr); stated to the reader by OnsetResult.short_ramp_bias"))])
def test_short_ramp_bias_within_a_third(duration):
    """The stricter target: the mean onset error within a third of the measured one (the
    records of ``test_short_ramp_onsets_under_red_noise``)."""
    errors, _, _ = short_ramp_case(duration)
    assert abs(errors.mean()) < abs(SHORT_RAMP_BIAS_BEFORE[duration]) / 3


def test_low_signal_to_noise_onsets_carry_the_short_ramp_caution(tmp_path):
    """The caution of ``short_ramp_bias`` reaches the result, its text, the lag's
    assumptions and the report when the amplitude is at most ``LOW_SNR`` noise sd, and only
    then."""
    from align import detect_onset
    from align.choices import LOW_SNR
    from align.report import write_report

    t, series, _ = ar1_windows(10.0, 100.0, 1, np.random.default_rng(3), step=2.0)
    low = detect_onset(interval_record(t, series[0], 10.0), "x", [10_000, 10_500], draws=100,
                       seed=1)
    assert abs(low.amplitude.median) <= LOW_SNR * low.noise.sd
    assert "too old on average" in low.short_ramp_bias
    assert low.to_dict()["short_ramp_bias"] == low.short_ramp_bias
    assert f"caution: {low.short_ramp_bias}" in KIND.text(low)
    assert f"Caution, marker a: {low.short_ramp_bias}." in KIND.assumptions(low, "a")
    md = (write_report(low, tmp_path / "low", formats=("md",)) / "report.md").read_text()
    assert "too old on average" in md
    clear = detect_onset(interval_record(t, series[0] / 10.0 + 10.0 * (t > t[25]), 10.0), "x",
                         [10_000, 10_500], draws=100, seed=1)
    assert abs(clear.amplitude.median) > LOW_SNR * clear.noise.sd
    assert clear.short_ramp_bias is None
    assert not any("too old on average" in line for line in KIND.text(clear)
                   + KIND.assumptions(clear, "a"))
    bayes = detect_onset(interval_record(t, series[0], 10.0), "x", [10_000, 10_500],
                         method="bayes", draws=100, seed=1)
    assert bayes.short_ramp_bias is None  # measured for the ramp method only


if __name__ == "__main__":  # the grid of the short-ramp docstring
    for tau, snr, duration in [(100, 2, 20), (100, 4, 20), (100, 8, 20), (100, 2, 50),
                               (100, 4, 50), (100, 8, 50), (50, 2, 50), (300, 2, 50),
                               (0, 2, 50), (0, 2, 20)]:
        rng = np.random.default_rng(int(7000 + tau + 10 * snr + duration))
        errors, coverage, cautioned = short_ramp_errors(rng, 300, float(duration), tau, snr)
        print(f"tau {tau} yr, {snr} noise sd, {duration}-yr ramp: onset error mean "
              f"{errors.mean():+.1f} (se {errors.std() / np.sqrt(errors.size):.1f}) yr, median "
              f"{np.median(errors):+.1f} yr, coverage {coverage:.3f}, cautioned {cautioned:.2f}",
              flush=True)
