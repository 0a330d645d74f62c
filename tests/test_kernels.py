"""The compiled kernels equal the plainly written numpy formulas they replace."""

import numpy as np
import pytest

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


def _ramp_design(t, t1, t2):
    """The ramp's shape g (0 before t1, 1 after t2, linear between), written plainly."""
    return np.clip((t - t1) / (t2 - t1), 0.0, 1.0) if t2 > t1 else (t >= t1).astype(float)


def _weighted_levels(t, x, w, t1, t2):
    """Levels and SSR by numpy's least squares on sqrt(w)-scaled rows (Mudelsee 2000, eq. 3)."""
    design = np.column_stack([np.ones_like(t), _ramp_design(t, t1, t2)])
    root = np.sqrt(w)
    (a, b), *_ = np.linalg.lstsq(design * root[:, None], x * root, rcond=None)
    return a, a + b, float(np.sum(w * (x - design @ [a, b]) ** 2))


def test_ramp_levels_equals_weighted_least_squares():
    from align._kernels import ramp_levels

    rng = np.random.default_rng(4)
    t = np.sort(rng.uniform(0, 300, 80))
    w = rng.uniform(0.5, 2.0, 80)
    for t1, t2 in ((50.0, 120.0), (100.0, 100.0), (10.0, 290.0), (200.0, 201.5)):
        x = 2.0 + 3.0 * _ramp_design(t, t1, t2) + rng.normal(0, 0.3, 80)
        np.testing.assert_allclose(ramp_levels(t, x, w, t1, t2),
                                   _weighted_levels(t, x, w, t1, t2), rtol=1e-10, atol=1e-10)


def test_exhaustive_ramp_search_finds_the_brute_force_optimum():
    """``step = 1`` is the exhaustive search: its best sample pair and SSR equal a brute-force
    scan over every admissible pair with numpy's least squares."""
    from align._kernels import ramp_search

    rng = np.random.default_rng(5)
    n, min_plateau = 40, 3
    t = np.sort(rng.uniform(0, 200, n))
    w = rng.uniform(0.5, 2.0, n)
    X = 1.0 + 2.0 * _ramp_design(t, 60.0, 110.0) + rng.normal(0, 0.4, (3, n))
    X[2] = rng.normal(0, 1.0, n)  # no transition at all: still the least-squares optimum
    out = ramp_search(t, w, X, 0, 1, min_plateau)
    lo_i, hi_j = min_plateau - 1, n - min_plateau
    for r in range(X.shape[0]):
        ssr = {(i, j): _weighted_levels(t, X[r], w, t[i], t[j])[2]
               for i in range(lo_i, hi_j) for j in range(i + 1, hi_j + 1)}
        best = min(ssr, key=ssr.get)
        assert (int(out[r, 5]), int(out[r, 6])) == best
        assert out[r, 4] == pytest.approx(ssr[best], rel=1e-9, abs=1e-9)


def test_overlap_sums_equal_the_overlap_matrix():
    """The one-pass merge equals the plain formula: overlap(sample i, cell j) =
    max(0, min(hi_i, e_j+1) - max(lo_i, e_j)), summed with numpy."""
    from align._kernels import overlap_sums

    rng = np.random.default_rng(6)
    widths = rng.uniform(0.2, 3.0, 300)
    gaps = np.where(rng.random(300) < 0.1, rng.uniform(0, 2, 300), 0.0)
    lo = np.cumsum(widths + gaps) - widths
    hi = lo + widths
    values = rng.normal(size=(300, 2))
    values[rng.random((300, 2)) < 0.1] = np.nan
    edges = np.arange(-5.0, hi[-1] + 7.0, 1.7)
    integral, covered, count, width_sum, width_count, ordered = overlap_sums(lo, hi, values,
                                                                             edges)
    overlap = np.clip(np.minimum(hi[:, None], edges[None, 1:])
                      - np.maximum(lo[:, None], edges[None, :-1]), 0.0, None)
    touches = overlap > 0
    valid = np.isfinite(values)
    assert ordered
    np.testing.assert_allclose(integral, overlap.T @ np.where(valid, values, 0.0), atol=1e-9)
    np.testing.assert_allclose(covered, overlap.T @ valid, atol=1e-9)
    np.testing.assert_array_equal(count, touches.T.astype(int) @ valid)
    np.testing.assert_allclose(width_sum, touches.T @ (hi - lo), atol=1e-9)
    np.testing.assert_array_equal(width_count, touches.sum(axis=0))
