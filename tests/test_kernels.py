"""The compiled kernels equal the plainly written numpy formulas they replace."""

import numpy as np
import pytest

from align._kernels import (_fill_regular_cells, ar1_series, interp_sorted, overlap_cells,
                            overlap_samples, place_between_ties)
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
        np.testing.assert_allclose(ramp_levels(t, x, w, t1, t2, np.zeros(80)),
                                   _weighted_levels(t, x, w, t1, t2), rtol=1e-10, atol=1e-10)


def test_prewhitened_ramp_levels_equal_statsmodels_gls_under_ar1():
    """Under AR(1) noise on an irregular axis (correlation ``exp(-|t_i - t_j| / tau)``) the
    prewhitened levels and SSR equal generalised least squares with that covariance
    (statsmodels ``GLS``, which whitens by the Cholesky factor of the covariance)."""
    import statsmodels.api as sm

    from align._kernels import ramp_levels
    from align.ramp import ar1_coefficients

    rng = np.random.default_rng(14)
    t = np.sort(rng.uniform(0, 300, 60))
    tau = 40.0
    sigma = np.exp(-np.abs(t[:, None] - t[None, :]) / tau)
    for t1, t2 in ((50.0, 120.0), (100.0, 100.0), (200.0, 201.5)):
        g = _ramp_design(t, t1, t2)
        x = 2.0 + 3.0 * g + np.linalg.cholesky(sigma) @ rng.normal(0, 0.5, t.size)
        gls = sm.GLS(x, np.column_stack([np.ones(t.size), g]), sigma=sigma).fit()
        x1, x2, ssr = ramp_levels(t, x, np.ones(t.size), t1, t2, ar1_coefficients(t, tau)[0])
        np.testing.assert_allclose([x1, x2 - x1, ssr], [*gls.params, gls.ssr], rtol=1e-9)


def test_prewhitened_ramp_search_finds_the_brute_force_optimum():
    """The prefix-sum search under AR(1) noise (one persistence per series) lands on the
    sample pair with the least prewhitened SSR among all pairs, and reports that SSR."""
    from align._kernels import ramp_levels, ramp_search
    from align.ramp import ar1_coefficients

    rng = np.random.default_rng(15)
    n, min_plateau = 40, 2
    t = np.sort(rng.uniform(0, 400, n))
    w = rng.uniform(0.5, 2.0, n)
    phi = ar1_coefficients(t, np.array([30.0, 100.0, 0.0]))
    X = 1.0 + 2.0 * _ramp_design(t, 150.0, 180.0) + rng.normal(0, 0.6, (3, n))
    out = ramp_search(t, w, X, phi, 0, 1, min_plateau)
    for r in range(X.shape[0]):
        ssr = {(i, j): ramp_levels(t, X[r], w, t[i], t[j], phi[r])[2]
               for i in range(min_plateau - 1, n - min_plateau)
               for j in range(i + 1, n - min_plateau + 1)}
        best = min(ssr, key=ssr.get)
        assert (int(out[r, 5]), int(out[r, 6])) == best
        np.testing.assert_allclose(out[r, 4], ssr[best], rtol=1e-8)


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
    out = ramp_search(t, w, X, np.zeros((1, n)), 0, 1, min_plateau)
    lo_i, hi_j = min_plateau - 1, n - min_plateau
    for r in range(X.shape[0]):
        ssr = {(i, j): _weighted_levels(t, X[r], w, t[i], t[j])[2]
               for i in range(lo_i, hi_j) for j in range(i + 1, hi_j + 1)}
        best = min(ssr, key=ssr.get)
        assert (int(out[r, 5]), int(out[r, 6])) == best
        assert out[r, 4] == pytest.approx(ssr[best], rel=1e-9, abs=1e-9)


def overlap_matrix_means(lo, hi, values, edges):
    """The overlap-weighted cell means written as plain numpy: a dense (sample, cell) matrix
    of overlaps."""
    overlap = np.clip(np.minimum(hi[:, None], edges[None, 1:])
                      - np.maximum(lo[:, None], edges[None, :-1]), 0.0, None)
    valid = np.isfinite(values)
    covered = overlap[valid].sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = (values[valid, None] * overlap[valid]).sum(axis=0) / covered
        touching = overlap > 0
        native = ((hi - lo)[:, None] * touching).sum(axis=0) / touching.sum(axis=0)
    return mean, covered / np.diff(edges), (touching & valid[:, None]).sum(axis=0), native


def merge_by_samples(lo, hi, values, edges):
    """The sample-by-sample merge that ``overlap_cells`` replaced (corealign before the fine-
    grid rework), transcribed to plain Python with its numpy post-processing."""
    m = edges.size - 1
    integral, covered, count = np.zeros(m), np.zeros(m), np.zeros(m, dtype=np.int64)
    width_sum, width_count = np.zeros(m), np.zeros(m, dtype=np.int64)

    def add(cell, overlap, width, v):
        width_sum[cell] += width
        width_count[cell] += 1
        if v == v:
            integral[cell] += v * overlap
            covered[cell] += overlap
            count[cell] += 1

    c = 0
    for a, b, v in zip(lo, hi, values):
        while c < m and edges[c + 1] <= a:
            c += 1
        if c == m:
            break
        if edges[c] <= a and b <= edges[c + 1]:
            add(c, b - a, b - a, v)
            continue
        j = c
        while j < m and edges[j] < b:
            overlap = min(b, edges[j + 1]) - max(a, edges[j])
            if overlap > 0.0:
                add(j, overlap, b - a, v)
            j += 1
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = integral / covered
        native = width_sum / width_count
    mean[covered == 0] = np.nan
    return mean, covered / np.diff(edges), count, native


def irregular_intervals(rng, n):
    widths = rng.uniform(0.2, 3.0, n)
    widths[rng.random(n) < 0.02] = 0.0  # a few zero-width samples
    spaces = np.where(rng.random(n) < 0.1, rng.uniform(0, 2, n), 0.0)
    lo = 1000.0 + np.cumsum(widths + spaces) - widths
    values = np.where(rng.random(n) < 0.05, np.nan, rng.normal(size=n))
    return lo, lo + widths, values


#: The two merges of samples and cells (by cells for coarse grids, by samples for fine ones).
MERGES = pytest.mark.parametrize("merge", [overlap_cells, overlap_samples],
                                 ids=["by-cells", "by-samples"])


def run_overlap_cells(lo, hi, values, edges, min_coverage=0.0, merge=overlap_cells):
    m = edges.size - 1
    mean, coverage, native = np.empty(m), np.empty(m), np.empty(m)
    count = np.empty(m, dtype=np.int32)
    cells = np.lib.stride_tricks.sliding_window_view(edges, 2)
    ordered = merge(lo, hi, values, cells, min_coverage, mean, coverage, count, native)
    return ordered, mean, coverage, count, native


@MERGES
@pytest.mark.parametrize("step", [0.07, 0.5, 1.6, 2.0, 13.0])
def test_overlap_cells_equals_the_overlap_matrix(step, merge):
    rng = np.random.default_rng(4)
    lo, hi, values = irregular_intervals(rng, 600)
    edges = 995.0 + step * np.arange(int((hi[-1] + 10 - 995.0) / step))
    ordered, mean, coverage, count, native = run_overlap_cells(lo, hi, values, edges,
                                                               merge=merge)
    assert ordered
    e_mean, e_coverage, e_count, e_native = overlap_matrix_means(lo, hi, values, edges)
    np.testing.assert_allclose(mean, e_mean, rtol=1e-10, equal_nan=True)
    np.testing.assert_allclose(coverage, e_coverage, rtol=1e-10, atol=1e-12)
    positive = hi > lo  # the matrix cannot see zero-width samples: compare where none lies
    inside = np.zeros(edges.size - 1, bool)
    cell = np.searchsorted(edges, lo[~positive], side="right") - 1
    inside[cell[(cell >= 0) & (cell < inside.size)]] = True
    np.testing.assert_array_equal(count[~inside], e_count[~inside])
    np.testing.assert_allclose(native[~inside], e_native[~inside], rtol=1e-12, equal_nan=True)


@MERGES
@pytest.mark.parametrize("step", [0.05, 0.3, 1.0, 1.6, 7.3])
def test_overlap_cells_is_identical_to_the_sample_merge_it_replaced(step, merge):
    rng = np.random.default_rng(5)
    lo, hi, values = irregular_intervals(rng, 2000)
    # an edge on a sample bound, with a zero-width sample there
    hi[100] = lo[100]
    edges = lo[100] + step * np.arange(-int((lo[100] - 990.0) / step),
                                       int((hi[-1] - lo[100]) / step))
    ordered, mean, coverage, count, native = run_overlap_cells(lo, hi, values, edges,
                                                               merge=merge)
    assert ordered
    old = merge_by_samples(lo, hi, values, edges)
    for new, before in zip((mean, coverage, count, native), old):
        np.testing.assert_array_equal(new, before)
    # min_coverage is applied in the same pass
    strict = run_overlap_cells(lo, hi, values, edges, 0.7, merge)[1]
    np.testing.assert_array_equal(strict, np.where(coverage >= 0.7, mean, np.nan))


@MERGES
def test_overlap_cells_reports_disorder(merge):
    def ordered(lo, hi):
        return run_overlap_cells(lo, hi, np.ones(lo.size), np.arange(0.0, 5.0), merge=merge)[0]

    lo = np.array([0.0, 1.0, 1.5, 3.0])
    hi = np.array([1.0, 2.0, 2.5, 4.0])  # the third sample overlaps the second
    assert not ordered(lo, hi)
    assert ordered(lo[[0, 1, 3]], hi[[0, 1, 3]])
    # an overlap within the record model's rounding tolerance (1e-9 relative) is no disorder
    lo, hi = np.array([0.0, 1.0 - 1e-10, 2.0, 3.0]), np.array([1.0, 2.0, 3.0, 4.0])
    assert ordered(lo, hi)
    lo[1] = 1.0 - 1e-8
    assert not ordered(lo, hi)
    lo[1], hi[2] = 1.0, 1.9  # a sample running backwards
    assert not ordered(lo, hi)


def test_the_two_merges_give_the_same_numbers():
    """On irregular records with gaps, zero-width samples, missing values, samples on cell
    edges and grids that start or end inside the record, from 0.02 to 20 cells per sample:
    the merge by samples equals the merge by cells bit for bit, and both find the same
    disorder."""
    rng = np.random.default_rng(12)
    disordered = 0
    for trial in range(120):
        n = int(rng.integers(2, 800))
        lo, hi, values = irregular_intervals(rng, n)
        step = float(rng.choice([0.05, 0.3, 0.77, 1.0, 1.6, 7.3, 40.0]))
        start = 990.0 + float(rng.uniform(-5, 30))
        m = max(1, int((hi[-1] + float(rng.uniform(-20, 10)) - start) / step))
        if trial % 4 == 0 and n > 12:  # a sample bound on a cell edge (may run backwards)
            hi[10] = lo[11] = start + step * 7
        edges, centre = regular_cells(start, step, m)
        outs = []
        for merge in (overlap_cells, overlap_samples):
            out = [np.empty(m), np.empty(m), np.empty(m, dtype=np.int32), np.empty(m)]
            outs.append((merge(lo, hi, values, edges, 0.3, *out), out))
        (ordered, by_cells), (same_verdict, by_samples) = outs
        assert ordered == same_verdict
        disordered += not ordered
        if ordered:
            for a, b in zip(by_cells, by_samples):
                np.testing.assert_array_equal(a, b)
    assert 5 < disordered < 60  # both kinds of record were tried


def regular_cells(start, step, m):
    bounds, centre = np.empty((m, 2)), np.empty(m)
    _fill_regular_cells(start, step, bounds, centre)
    return bounds, centre


@MERGES
@pytest.mark.parametrize("step", [0.05, 0.3, 1.0, 7.3])
def test_overlap_cells_writes_the_regular_cells_it_merges(step, merge):
    """Given the grid, the merge writes the cells' bounds and centres as it goes (block by
    block, as the threads run it): the numbers of ``regular_cells``, and the same means as
    the merge that reads them."""
    rng = np.random.default_rng(6)
    lo, hi, values = irregular_intervals(rng, 2000)
    start = 990.0 - 3 * step  # some cells before the first sample, some after the last
    m = int((hi[-1] + 3 * step - start) / step)
    cells, centre = regular_cells(start, step, m)
    read = [np.empty(m), np.empty(m), np.empty(m, dtype=np.int32), np.empty(m)]
    assert overlap_cells(lo, hi, values, cells, 0.4, *read)
    written = [np.full(m, -1.0), np.full(m, -1.0), np.full(m, -1, dtype=np.int32),
               np.full(m, -1.0)]
    edges, middle = np.full(m + 1, np.nan), np.full(m, np.nan)
    bounds = np.lib.stride_tricks.as_strided(edges, (m, 2), (edges.strides[0],) * 2)
    for a, b in ((0, m // 3), (m // 3, m)):
        s = max(np.searchsorted(hi, start + step * a) - 1, 0) if a else 0
        assert merge(lo[s:], hi[s:], values[s:], bounds[a:b], 0.4,
                             *(out[a:b] for out in written), (start, step, a), middle[a:b])
    np.testing.assert_array_equal(bounds, cells)
    np.testing.assert_array_equal(middle, centre)
    for new, old in zip(written, read):
        np.testing.assert_array_equal(new, old)


@pytest.mark.parametrize("start, step, m", [(1000.0, 0.1, 12345), (-7.3, 2.5e-3, 1000),
                                            (11_700.0, 1.0 / 3.0, 999)])
def test_regular_cells_equal_the_numpy_edges(start, step, m):
    edges = start + step * np.arange(m + 1)
    bounds, centre = regular_cells(start, step, m)
    np.testing.assert_array_equal(bounds, np.column_stack([edges[:-1], edges[1:]]))
    np.testing.assert_array_equal(centre, 0.5 * (edges[1:] + edges[:-1]))


@pytest.mark.parametrize("seed", range(6))
def test_coarse_to_fine_ramp_search_finds_the_exhaustive_optimum(seed):
    """The coarse-to-fine search of the main fit (``step > 1`` with ``full``, what long
    series use) lands on the same best
    sample pair as the exhaustive ``step = 1`` search for ramps of 3 and 4 noise sd. (For
    ramps of 1.5-2 sd it missed in 3 of 6 such cases: the SSR surface has many local minima
    and the coarse pair nearest the optimum need not rank among the best; the main fit is
    therefore exhaustive up to ``align.ramp.EXHAUSTIVE`` samples.)"""
    from align._kernels import ramp_search

    rng = np.random.default_rng(10 + seed)
    n = 600
    t = np.sort(rng.uniform(0, 3000, n))
    w = rng.uniform(0.5, 2.0, n)
    t1 = rng.uniform(300, 2000)
    amplitude = (3.0, 4.0)[seed % 2]
    X = amplitude * _ramp_design(t, t1, t1 + rng.uniform(20, 600)) + rng.normal(0, 1, (8, n))
    exhaustive = ramp_search(t, w, X, np.zeros((1, n)), 0, 1, 2)
    for step in (3, 6):
        coarse = ramp_search(t, w, X, np.zeros((1, n)), 0, step, 2, True)
        np.testing.assert_array_equal(coarse[:, 5:], exhaustive[:, 5:])
        np.testing.assert_allclose(coarse[:, :5], exhaustive[:, :5], rtol=1e-12)


def test_fit_ramp_on_a_long_series_equals_the_exhaustive_search():
    from align._kernels import ramp_search
    from align.ramp import EXHAUSTIVE, MIN_PLATEAU, fit_ramp

    rng = np.random.default_rng(7)
    n = 3 * EXHAUSTIVE + 17  # searched coarse-to-fine
    t = np.sort(rng.uniform(0, 10_000, n))
    w = np.ones(n)
    x = 3.0 * _ramp_design(t, 4000.0, 4300.0) + rng.normal(0, 1, n)
    fit = fit_ramp(t, x, w)
    best = ramp_search(t, w, x[None, :], np.zeros((1, n)), 0, 1, MIN_PLATEAU)[0]
    # the continuous refinement starts from the exhaustive optimum's corners and improves it
    assert fit.ssr <= best[4] * (1 + 1e-12)
    assert abs(fit.t1 - t[int(best[5])]) < 3 * np.diff(t).max()
    assert abs(fit.t2 - t[int(best[6])]) < 3 * np.diff(t).max()


def test_onset_bootstrap_in_chunks_equals_one_block(monkeypatch):
    """Chunked replicates (no draws x n array) give the same draws as one block."""
    import align.detect as detect

    rng = np.random.default_rng(8)
    n = 300
    t = np.sort(rng.uniform(0, 1500, n))
    w = np.ones(n)
    x = 2.0 * _ramp_design(t, 600.0, 700.0) + rng.normal(0, 0.5, n)
    whole = detect.onset_bootstrap(t, x, w, 0, 250, np.random.default_rng(1))[0]
    monkeypatch.setattr(detect, "CHUNK_VALUES", 37 * n)  # 37 rows at a time, a ragged end
    chunked = detect.onset_bootstrap(t, x, w, 0, 250, np.random.default_rng(1))[0]
    np.testing.assert_array_equal(chunked, whole)


def test_bootstrap_kernels_equal_their_loops():
    from align._kernels import block_weights, group_by_start, sum_picked_rows, turn_phases

    rng = np.random.default_rng(9)
    n, block, starts = 50, 4, 47
    picks = rng.integers(0, starts, (6, 13)).astype(np.int32)
    # coverage of each point by a replicate's blocks
    expected = np.zeros((6, n))
    for r, row in enumerate(picks):
        for p in row:
            expected[r, p:p + block] += 1.0
    np.testing.assert_array_equal(block_weights(picks, block, n, np.empty((6, n))), expected)
    # sums of the picked rows of a table, in any order: a replicate-by-replicate gather
    table = rng.standard_normal((starts, 5))
    head, rows = group_by_start(picks, starts)
    np.testing.assert_array_equal(np.sort(rows), np.repeat(np.arange(6), 13))
    np.testing.assert_allclose(sum_picked_rows(head, rows, table, np.zeros((6, 5))),
                               table[picks].sum(axis=1), rtol=1e-12, atol=1e-12)
    # amplitude * exp(i phase): numpy's complex exponential to a few units in the last place,
    # over the whole circle and at its ends
    phases = rng.uniform(0, 2 * np.pi, (3, 4000))
    phases[0, :3] = 0.0, np.pi, 2 * np.pi
    amplitude = rng.uniform(0, 5, 4000)
    turned = turn_phases(amplitude, phases, np.empty((3, 4000), complex))
    np.testing.assert_allclose(turned, amplitude * np.exp(1j * phases), rtol=0,
                               atol=5 * np.finfo(float).eps * amplitude.max())
