"""Cross-correlation against scipy and statsmodels, and on the published Greenland data."""

import json

import numpy as np
import pytest
from scipy import signal
from statsmodels.tsa.stattools import acf
from statsmodels.tsa.stattools import ccf as sm_ccf

from align import open_record
from align.record import build_record
from align.xcorr import ccf, cross_correlate, effective_sample_size
from conftest import RECORDS, run_cli
from synthetic import ar1


def test_curve_equals_scipy_correlate_and_statsmodels_ccf():
    rng = np.random.default_rng(0)
    n, k = 600, 40
    a = ar1(rng, n, 0.6)
    b = np.roll(a, 7) + 0.5 * rng.normal(size=n)
    r, pairs = ccf(a, b, k)
    # written out with scipy.signal.correlate: sum_i (a_i - abar)(b_{i-k} - bbar) / (n - |k|)
    da, db = a - a.mean(), b - b.mean()
    full = signal.correlate(da, db, mode="full", method="direct")  # index n-1 is lag 0
    lags = np.arange(-k, k + 1)
    expected = full[n - 1 + lags] / (n - np.abs(lags)) / (a.std() * b.std())
    np.testing.assert_allclose(r, expected, rtol=0, atol=1e-10)
    # statsmodels: ccf(a, b)[k] correlates a[t + k] with b[t] -- our positive lags
    np.testing.assert_allclose(r[k:], sm_ccf(a, b, adjusted=True, fft=False)[: k + 1],
                               rtol=0, atol=1e-10)
    # b[i] = a[i - 7]: each feature of a shows in b seven steps further along the (age) axis,
    # i.e. older in b, which is a negative lag in the convention age(a) - age(b)
    assert np.argmax(r) - k == -7
    np.testing.assert_array_equal(pairs, n - np.abs(lags))


def test_effective_sample_size_is_bretherton_with_statsmodels_acf():
    rng = np.random.default_rng(1)
    a, b = ar1(rng, 800, 0.7), ar1(rng, 800, 0.4)
    ice = build_record(age=np.arange(800.0) * 10 + 1005, age_reference="b2k",
                       proxies={"a": (a, {"units": "1"}), "b": (b, {"units": "1"})})
    result = cross_correlate((ice, "a"), (ice, "b"), 100, step=10, surrogates=0, seed=1,
                             bootstrap=50)
    r1, r2 = acf(a, nlags=1, fft=False)[1], acf(b, nlags=1, fft=False)[1]
    # Bretherton et al. (1999), Eq. 31
    assert result.n_eff == pytest.approx(800 * (1 - r1 * r2) / (1 + r1 * r2), rel=1e-10)
    assert effective_sample_size(100, 0.0, 0.9) == 100


def test_sign_convention_positive_means_older_in_a():
    rng = np.random.default_rng(2)
    age = np.arange(0.0, 5000.0, 10.0) + 5.0
    signal_ = ar1(rng, age.size + 20, 0.8)
    # b(age) = a(age + 50): b shows each feature 50 years younger, so it is older in a
    a = build_record(age=age + 10_000, age_reference="b2k",
                     proxies={"v": (signal_[10:10 + age.size], {"units": "1"})},
                     attrs={"core": "A"})
    b = build_record(age=age + 10_000, age_reference="b2k",
                     proxies={"v": (signal_[15:15 + age.size], {"units": "1"})},
                     attrs={"core": "B"})
    result = cross_correlate((a, "v"), (b, "v"), 200, surrogates=200, seed=1)
    assert result.peak_lag.median == pytest.approx(50.0, abs=2.0)
    assert result.p_value < 0.01


def test_published_ngrip_neem_calcium_lag_is_zero(greenland):
    # NGRIP and NEEM decadal Ca (Erhardt et al. 2019, doi:10.5194/cp-15-811-2019), both on
    # GICC05 through volcanic synchronisation (Rasmussen et al. 2013,
    # doi:10.5194/cp-9-2713-2013): their cross-correlation over 15-60 ka peaks at zero lag
    ngrip = open_record(greenland / "NGRIP_10yr.csv", age_column="Age_BP", age_reference="BP")
    neem = open_record(greenland / "NEEM_10yr.csv", age_column="Age_BP", age_reference="BP")
    result = cross_correlate((ngrip, "Ca"), (neem, "Ca"), 200, window=[15_000, 60_000],
                             age_reference="b2k", seed=1)
    print(f"NGRIP-NEEM Ca: peak lag {result.peak_lag.median:+.2f} yr, 95 % "
          f"{result.peak_lag.ci95}, r {result.peak_correlation:.3f}, p {result.p_value}")
    assert abs(result.peak_lag.median) <= 10
    assert result.peak_lag.ci95[0] <= 0 <= result.peak_lag.ci95[1]
    assert result.peak_correlation > 0.5 and result.p_value < 0.01


def test_ensemble_interval_on_the_demo():
    ice, lake = open_record(RECORDS / "hvd1_ice.nc"), open_record(RECORDS / "trv3_lake.nc")
    result = cross_correlate((ice, "d18O"), (lake, "d18O"), 300, seed=2, surrogates=200)
    assert "ensemble" in result.peak_lag.source
    lo, hi = result.peak_lag.ci95
    assert lo < result.peak_lag.median < hi and hi - lo > 50  # the lake's age model is loose


def test_kernel_method_agrees_with_pearson_on_regular_data():
    rng = np.random.default_rng(3)
    age = np.arange(0.0, 3000.0, 5.0) + 2.5
    x = ar1(rng, age.size + 10, 0.8)
    a = build_record(age=age + 1000, age_reference="b2k", proxies={"v": (x[:-10], {})},
                     attrs={"core": "A"})
    b = build_record(age=age + 1000, age_reference="b2k", proxies={"v": (x[4:-6], {})},
                     attrs={"core": "B"})
    kernel = cross_correlate((a, "v"), (b, "v"), 60, method="kernel", surrogates=50, seed=1,
                             bootstrap=100)
    pearson = cross_correlate((a, "v"), (b, "v"), 60, surrogates=50, seed=1, bootstrap=100)
    assert kernel.peak_lag.median == pytest.approx(pearson.peak_lag.median, abs=2.5)
    assert kernel.peak_lag.median == pytest.approx(20.0, abs=2.5)  # b(age - 20) = a(age)


def test_cli_xcorr_json():
    done = run_cli("xcorr", f"{RECORDS / 'hvd1_ice.nc'}:d18O", f"{RECORDS / 'trv3_lake.nc'}:d18O",
                   "--max-lag", "200", "--surrogates", "100", "--seed", "1", "--json")
    assert done.returncode == 0, done.stderr
    out = json.loads(done.stdout)
    for key in ("peak_lag", "peak_correlation", "p_value", "n_eff", "curve", "grid_step",
                "age_reference", "provenance"):
        assert key in out
    assert len(out["curve"]["lags"]) == len(out["curve"]["r"])


@pytest.mark.parametrize("n, k", [(64, 63), (257, 40), (1000, 999), (1000, 200), (1000, 201),
                                  (4096, 300)])
def test_batched_ccf_equals_the_direct_sum_at_every_lag_range(n, k):
    # the direct formula (numpy.correlate of standardised series over the N_k pairs) for a
    # batch, up to the longest lag range; both routes (wrap-around subtracted up to
    # n / CIRCULAR_LAGS = 200 lags here, zero padding beyond)
    rng = np.random.default_rng(n)
    a = rng.standard_normal((3, n))
    b = rng.standard_normal((3, n))
    r, _ = ccf(a, b, k)
    for row in range(3):
        za = (a[row] - a[row].mean()) / a[row].std()
        zb = (b[row] - b[row].mean()) / b[row].std()
        full = np.correlate(za, zb, mode="full")  # index n - 1 + lag: sum_i za[i + lag] zb[i]
        lags = np.arange(-k, k + 1)
        np.testing.assert_allclose(r[row], full[n - 1 + lags] / (n - np.abs(lags)),
                                   rtol=1e-9, atol=1e-12)


def test_block_bootstrap_equals_gathering_each_replicates_blocks():
    # the replicate loop that the count x block-sum product replaced: the same blocks (same
    # seed), gathered and summed one replicate at a time
    from align.xcorr import block_bootstrap_peaks, lagged_products, refine_peak

    rng = np.random.default_rng(11)
    xa = ar1(rng, 3000, 0.6)
    xb = np.roll(xa, 4) + 0.8 * rng.standard_normal(3000)
    xb[100:130] = np.nan
    k, block, replicates = 25, 17.3, 200
    lags = np.arange(-k, k + 1) * 2.0
    numerator, denominator = lagged_products(xa, xb, k)
    peaks = block_bootstrap_peaks(numerator, denominator, lags, block, replicates,
                                  np.random.default_rng(5))
    b = int(np.ceil(block))
    picks = np.random.default_rng(5).integers(0, 3000 - b + 1, (replicates, int(np.ceil(3000 / b))))
    expected = []
    for row in picks:
        idx = (row[:, None] + np.arange(b)).ravel()
        curve = numerator[:, idx].sum(axis=1) / denominator[:, idx].sum(axis=1)
        expected.append(refine_peak(lags, curve)[0])
    np.testing.assert_allclose(peaks, expected, rtol=1e-9)
    # b_i = a_{i-4}: r(k) = sum a_i b_{i-k} peaks at k = -4 steps of 2
    assert np.median(peaks) == pytest.approx(-8.0, abs=2.0)


def gathered_peaks(xa, xb, lags, picks, block):
    """The straightforward bootstrap: each replicate's blocks of the lagged products
    (:func:`align.xcorr.lagged_products`) gathered and summed, its peak refined."""
    from align.xcorr import lagged_products, refine_peak

    numerator, denominator = lagged_products(xa, xb, (lags.size - 1) // 2)
    peaks = []
    for row in picks:
        idx = (row[:, None] + np.arange(block)).ravel()
        curve = numerator[:, idx].sum(axis=1) / denominator[:, idx].sum(axis=1)
        peaks.append(refine_peak(lags, curve)[0])
    return np.array(peaks)


@pytest.mark.parametrize("gap", [False, True])
def test_ccf_bootstrap_by_fft_equals_gathering_each_replicates_blocks(gap):
    # the same draws (seed 5) as the gathering loop, the curves by FFT: equal to rounding
    from align.xcorr import ccf_bootstrap_peaks

    rng = np.random.default_rng(12)
    n, k, block, replicates = 2000, 30, 6.4, 150
    xa = ar1(rng, n, 0.5)
    xb = np.roll(xa, -5) + rng.standard_normal(n)
    if gap:
        xa[40:90] = np.nan
        xb[700:703] = np.nan
    lags = np.arange(-k, k + 1) * 0.5
    peaks = ccf_bootstrap_peaks(xa, xb, lags, block, replicates, np.random.default_rng(5))
    b = int(np.ceil(block))
    picks = np.random.default_rng(5).integers(0, n - b + 1, (replicates, int(np.ceil(n / b))))
    np.testing.assert_allclose(peaks, gathered_peaks(xa, xb, lags, picks, b), rtol=1e-9,
                               atol=1e-12)
    # b_i = a_{i+5}: the ccf peaks at k = +5 steps of 0.5
    assert np.median(peaks) == pytest.approx(2.5, abs=0.5)


def test_chunk_sizes_do_not_change_cross_correlate(monkeypatch):
    import align.xcorr as xcorr

    rng = np.random.default_rng(13)
    age = np.arange(0.0, 4000.0, 5.0) + 2.5
    x = ar1(rng, age.size + 10, 0.7)
    a = build_record(age=age + 1000, age_reference="b2k", proxies={"v": (x[:-10], {})},
                     attrs={"core": "A"})
    b = build_record(age=age + 1000, age_reference="b2k", proxies={"v": (x[3:-7], {})},
                     attrs={"core": "B"})
    results = []
    for values in (10**7, 2_345):  # one chunk, and 2-3 surrogates / replicates per chunk
        monkeypatch.setattr(xcorr, "SURROGATE_VALUES", values)
        monkeypatch.setattr(xcorr, "BLOCK_SUM_VALUES", values)
        results.append(cross_correlate((a, "v"), (b, "v"), 100, surrogates=60, bootstrap=40,
                                       seed=3).model_dump(exclude={"provenance"}))
    assert results[0] == results[1]
    assert results[0]["peak_lag"]["median"] == pytest.approx(15.0, abs=2.5)


def test_surrogate_p_value_and_band_equal_a_loop_over_surrogates():
    # one phase surrogate at a time from the same generator, the curve by numpy.correlate of
    # the standardised series over the N_k pairs (the direct formula)
    from align.xcorr import phase_surrogates, surrogate_curves, surrogate_test

    rng = np.random.default_rng(14)
    n, k, count = 300, 20, 40
    xa = ar1(rng, n, 0.6)
    xb = np.roll(xa, 2) + 1.5 * rng.standard_normal(n)
    lags = np.arange(-k, k + 1)

    def direct(x, y):
        zx, zy = (x - x.mean()) / x.std(), (y - y.mean()) / y.std()
        return np.correlate(zx, zy, mode="full")[n - 1 + lags] / (n - np.abs(lags))

    r = direct(xa, xb)
    loop_rng = np.random.default_rng(8)
    curves = np.array([direct(xa, phase_surrogates(xb, 1, loop_rng)[0]) for _ in range(count)])
    peak = np.abs(r).max()
    expected_p = (1 + np.sum(np.abs(curves).max(axis=1) >= peak)) / (count + 1)
    chunk_rng = np.random.default_rng(8)
    r_s = surrogate_curves(lambda s: ccf(xa[None, :], s, k)[0],
                           lambda size: phase_surrogates(xb, size, chunk_rng), count, n)
    np.testing.assert_allclose(r_s, curves, rtol=0, atol=1e-10)
    p_value, band = surrogate_test(r, r_s)
    assert p_value == pytest.approx(expected_p, abs=1e-12)
    np.testing.assert_allclose(band, np.percentile(curves, [2.5, 97.5], axis=0), atol=1e-10)


def test_surrogate_loop_reports_progress_when_asked(monkeypatch, capsys):
    import io

    import align.xcorr as xcorr
    from align.progress import reporting

    monkeypatch.setattr(xcorr, "SURROGATE_VALUES", 12)  # 3 series of 4 points per chunk
    made = []

    def make(size):
        made.append(size)
        return np.ones((size, 4))

    stream = io.StringIO()
    with reporting(stream=stream, every=0.0):
        curves = xcorr.surrogate_curves(lambda s: s[:, :3], make, 7, 4)
    assert curves.shape == (7, 3) and made == [3, 3, 1]
    lines = stream.getvalue().splitlines()
    assert lines[0] == "corealign: surrogate test: 7 surrogates to do"
    assert [line.split(",")[0] for line in lines[1:]] == [
        f"corealign: surrogate test: {k}/7 surrogates" for k in (3, 6, 7)]
    capsys.readouterr()
    xcorr.surrogate_curves(lambda s: s[:, :3], make, 2, 4)  # outside reporting: silent
    assert capsys.readouterr().err == ""
