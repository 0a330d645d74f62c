"""The compiled kernels equal the plainly written numpy formulas they replace."""

import numpy as np

from align._kernels import ar1_series, interp_sorted, place_between_ties
from align.ties import bridge_variance, tie_variance


def test_interp_sorted_equals_numpy_interp():
    rng = np.random.default_rng(1)
    xp = np.sort(rng.uniform(0, 100, 50))
    fp = rng.normal(size=50)
    x = np.sort(rng.uniform(-10, 110, 5000))
    out = np.empty(x.size)
    interp_sorted(x, xp, fp, out)
    np.testing.assert_allclose(out, np.interp(x, xp, fp), rtol=1e-12, atol=1e-12)


def test_place_between_ties_equals_the_formulas():
    rng = np.random.default_rng(2)
    tie_depth = np.sort(rng.uniform(1, 9, 12))
    tie_age = np.sort(rng.uniform(100, 5000, 12))
    tie_sd = rng.uniform(0, 10, 12)
    depth = np.sort(rng.uniform(0, 10, 4000))  # some beyond the outer ties
    ages = np.empty(depth.size)
    var_tie, var_bridge = place_between_ties(depth, tie_depth, tie_age, tie_sd**2, 3.0, True,
                                             ages)
    # the same, written plainly with numpy and the documented formula functions
    k = np.clip(np.searchsorted(tie_depth, depth, side="right") - 1, 0, 10)
    w = (depth - tie_depth[k]) / (tie_depth[k + 1] - tie_depth[k])
    expected_age = tie_age[k] + w * (tie_age[k + 1] - tie_age[k])
    np.testing.assert_allclose(ages, expected_age, rtol=1e-12)
    wc = np.clip(w, 0, 1)
    np.testing.assert_allclose(var_tie, tie_variance(wc, tie_sd[k], tie_sd[k + 1]), rtol=1e-12,
                               atol=1e-12)
    inner = bridge_variance(np.clip(ages, tie_age[k], tie_age[k + 1]), tie_age[k],
                            tie_age[k + 1], 3.0)
    beyond = 3.0 * (np.clip(tie_age[0] - ages, 0, None) + np.clip(ages - tie_age[-1], 0, None))
    np.testing.assert_allclose(var_bridge, inner + beyond, rtol=1e-12, atol=1e-9)


def test_ar1_series_equals_the_recursion():
    rng = np.random.default_rng(3)
    t = np.sort(rng.uniform(0, 100, 60))
    z = rng.standard_normal((4, 60))
    tau = np.array([0.0, 2.0, 10.0, 50.0])
    sd = np.array([1.0, 0.5, 2.0, 3.0])
    expected = np.empty_like(z)
    for r in range(4):
        expected[r, 0] = sd[r] * z[r, 0]
        for i in range(1, 60):
            a = np.exp(-(t[i] - t[i - 1]) / tau[r]) if tau[r] > 0 else 0.0
            expected[r, i] = a * expected[r, i - 1] + sd[r] * np.sqrt(1 - a * a) * z[r, i]
    np.testing.assert_allclose(ar1_series(z.copy(), np.diff(t), tau, sd), expected, rtol=1e-12)
