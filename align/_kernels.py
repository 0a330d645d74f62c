"""Compiled inner loops (numba) for the few places where numpy's many passes are too slow.

Each kernel is a single pass over sorted inputs, merging them instead of searching, and is
the exact equivalent of a plainly written numpy expression that its tests compare it with.
Imported lazily (``import align._kernels`` compiles or loads from the on-disk cache).
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, nogil=True)
def place_between_ties(depth, tie_depth, tie_age, tie_var, rate, linear, ages):
    """Transferred ages and their tie and bridge variances for depth-sorted samples.

    Parameters
    ----------
    depth : float64[n]
        Sample depths, increasing.
    tie_depth, tie_age, tie_var : float64[m]
        Tie depths (increasing), their ages on the reference timescale and the variances of
        their match errors (yr^2).
    rate : float
        Bridge variance rate (yr^2 per yr).
    linear : bool
        Compute ``ages`` by linear interpolation (linear extension beyond the outer ties);
        otherwise ``ages`` already holds them (monotone cubic) and is only read.
    ages : float64[n]
        Output (linear) or input (pchip) ages; increasing either way.

    Returns
    -------
    var_tie, var_bridge : float64[n]
        ``(1-w)^2 v_k + w^2 v_{k+1}`` with ``w`` the fraction of the way between the
        neighbouring ties in depth (clipped to the outer ties), and
        ``rate (x - x_k)(x_{k+1} - x) / (x_{k+1} - x_k)`` between ties,
        ``rate |x - x_outer|`` beyond them (yr^2).

    Notes
    -----
    The samples of each tie interval are contiguous, so the loop runs interval by interval
    with the interval's constants hoisted and no data-dependent branch inside.
    """
    n, m = depth.size, tie_depth.size
    var_tie = np.empty(n)
    var_bridge = np.empty(n)
    start = np.searchsorted(depth, tie_depth)
    for k in range(m - 1):
        lo = 0 if k == 0 else start[k]
        hi = n if k == m - 2 else start[k + 1]
        d1 = tie_depth[k]
        inv = 1.0 / (tie_depth[k + 1] - d1)
        x1, x2 = tie_age[k], tie_age[k + 1]
        span = x2 - x1
        v1, v2 = tie_var[k], tie_var[k + 1]
        c = rate / span
        for i in range(lo, hi):
            w = (depth[i] - d1) * inv
            if linear:
                ages[i] = x1 + w * span
            wc = min(max(w, 0.0), 1.0)
            var_tie[i] = (1.0 - wc) * (1.0 - wc) * v1 + wc * wc * v2
            xc = min(max(ages[i], x1), x2)
            var_bridge[i] = (xc - x1) * (x2 - xc) * c
    first, last = tie_age[0], tie_age[m - 1]
    for i in range(start[0]):
        var_bridge[i] += rate * max(first - ages[i], 0.0)
    for i in range(start[m - 1], n):
        var_bridge[i] += rate * max(ages[i] - last, 0.0)
    return var_tie, var_bridge


@njit(cache=True, nogil=True)
def interp_sorted(x, xp, fp, out):
    """``out[:] = numpy.interp(x, xp, fp)`` for increasing ``x``: a merge instead of a search
    per point (``x`` and ``out`` may be strided views, e.g. columns of a bounds array)."""
    n, m = x.size, xp.size
    slope = (fp[1:] - fp[:-1]) / (xp[1:] - xp[:-1])
    j = 0
    for i in range(n):
        v = x[i]
        if v <= xp[0]:
            out[i] = fp[0]
        elif v >= xp[m - 1]:
            out[i] = fp[m - 1]
        else:
            while xp[j + 1] < v:
                j += 1
            out[i] = fp[j] + (v - xp[j]) * slope[j]


@njit(cache=True, nogil=True, inline="always")
def _u(index):
    """``index`` (never negative) as an unsigned integer: an array access without the
    negative-index wraparound numba adds for signed ones."""
    return np.uint64(index)


@njit(cache=True, nogil=True, inline="always")
def _disordered(lo, hi, i):
    """Sample ``i`` runs backwards or overlaps the one before beyond the record model's
    rounding tolerance."""
    if i == 0:
        return hi[i] < lo[i]
    previous = hi[i - 1]
    return (hi[i] < lo[i]) | (lo[i] < previous - 1e-9 * max(1.0, abs(previous)))


@njit(cache=True, nogil=True)
def _fill_regular_cells(start, step, bounds, centre):
    """Bounds ``(start + j step, start + (j + 1) step)`` and centres of regular cells, in one
    pass: the same numbers as ``start + step * numpy.arange(m + 1)`` and the half-sums of its
    neighbours (and as :func:`overlap_cells` writes when given the grid)."""
    right = start + step * 0
    for j in range(centre.size):
        left, right = right, start + step * (j + 1)
        bounds[j, 0] = left
        bounds[j, 1] = right
        centre[j] = 0.5 * (right + left)


@njit(cache=True, nogil=True, inline="always")
def _cell(j, cells, grid, centre, right):
    """Bounds ``(left, right)`` of cell ``j``: read from ``cells``, or with ``grid`` worked out
    (``right`` is the previous cell's right edge) and written into ``cells`` and ``centre``,
    each edge once."""
    c = _u(j)
    if grid is None:
        return cells[c, 0], cells[c, 1]
    start, step, first = grid
    left, right = right, start + step * (first + j + 1)
    if j == 0:
        cells[c, 0] = left
    cells[c, 1] = right
    centre[c] = 0.5 * (right + left)
    return left, right


@njit(cache=True, nogil=True, inline="always")
def _write_cell(j, left, right, sums, min_coverage, mean, coverage, count, native):
    """Cell ``j``'s outputs from its sums (see :func:`overlap_cells`)."""
    integral, covered, width_sum, valid, overlapping = sums
    c = _u(j)
    cover = covered / (right - left)
    coverage[c] = cover
    mean[c] = integral / covered if covered > 0.0 and cover >= min_coverage else np.nan
    count[c] = valid
    native[c] = width_sum / overlapping if overlapping > 0 else np.nan


@njit(cache=True, nogil=True, inline="always")
def _rest_ordered(lo, hi, i, end):
    """The samples from ``i`` up to the first that starts past the grid's ``end`` are in
    order."""
    ordered = True
    while i < lo.size:
        if _disordered(lo, hi, i):
            ordered = False
        if lo[_u(i)] >= end:
            break
        i += 1
    return ordered


@njit(cache=True, nogil=True)
def overlap_cells(lo, hi, values, cells, min_coverage, mean, coverage, count, native,
                  grid=None, centre=None):
    """Overlap-weighted cell means of one variable, exactly, in one merge of samples and cells
    that runs cell by cell (the faster of the two merges on grids coarser than the samples;
    :func:`overlap_samples` on finer ones: the same numbers).

    Parameters
    ----------
    lo, hi : float64[n]
        Sample intervals, increasing and not overlapping (strided views are fine).
    values : float64[n]
        Sample values; NaN is missing.
    cells : float64[m, 2]
        Cell bounds, increasing and not overlapping (e.g. a sliding-window view of edges); with
        ``grid``, an output that must be the writable overlapping view of ``m + 1`` edges
        (``cells[j, 1]`` and ``cells[j + 1, 0]`` one number, as
        :attr:`align.resample.RegularCells.cells`): each edge is written once.
    min_coverage : float
        Cells covered less than this (fraction) get a NaN mean.
    mean, coverage : float64[m]
        Output: ``sum v_i o_ij / sum o_ij`` over valid samples ``i`` overlapping cell ``j`` by
        ``o_ij`` (NaN when nothing valid overlaps or coverage is below ``min_coverage``), and
        ``sum o_ij`` over the cell's width.
    count : int32[m]
        Output: valid samples overlapping each cell.
    native : float64[m]
        Output: mean interval length of all samples overlapping each cell (NaN: none).
    grid : (float, float, int), optional
        ``(start, step, first)``: the cells are the regular cells ``first .. first + m - 1`` of
        the grid with edges ``start + step * k``; instead of reading ``cells`` the loop writes
        their edges into it, each once, and their centres into ``centre`` as it goes (the
        numbers of :func:`_fill_regular_cells`).
    centre : float64[m], optional
        Output with ``grid``: the cells' centres.

    Returns
    -------
    ordered : bool
        False if the intervals were not increasing and disjoint, beyond the record model's
        rounding tolerance (the outputs are then wrong).

    Notes
    -----
    Cell by cell: the samples from a pointer on that start before the cell's end are summed
    into local accumulators, the pointer moves to the last of them if it reaches into the
    next cell (past them otherwise), and each output is written once, so the cost is
    ``O(n + m)`` with no zero-filled scratch arrays and no second pass. A sample is counted in
    a cell when it overlaps it by a positive length; a zero-width sample counts in the cell
    ``[left, right)`` holding it. The ordering check costs two comparisons per sample (with
    the previous sample's end at hand); the tolerance is worked out only when they fail. The
    loop's indices are never negative and are used unsigned (:func:`_u`), which spares each
    access numba's negative-index wraparound (a tenth of the loop).
    """
    n, m = lo.size, cells.shape[0]
    ordered = True
    i = 0
    right = 0.0
    if grid is not None:
        start, step, first = grid
        right = start + step * first
    for j in range(m):
        left, right = _cell(j, cells, grid, centre, right)
        while i < n and (hi[_u(i)] < left or (hi[_u(i)] == left and lo[_u(i)] < hi[_u(i)])):
            if _disordered(lo, hi, i):
                ordered = False
            i += 1
        integral = covered = width_sum = 0.0
        valid = overlapping = 0
        previous = hi[_u(i - 1)] if i > 0 else -np.inf
        k = i
        while k < n and lo[_u(k)] < right:
            a, b = lo[_u(k)], hi[_u(k)]
            if ((b < a) | (a < previous)) and _disordered(lo, hi, k):  # (rarely checked)
                ordered = False
            previous = b
            overlap = min(b, right) - max(a, left)
            if overlap > 0.0 or left <= a < right:  # (the second: a zero-width sample)
                width_sum += b - a
                overlapping += 1
                v = values[_u(k)]
                if v == v:
                    integral += v * overlap
                    covered += overlap
                    valid += 1
            k += 1
        i = k - 1 if k > i and hi[_u(k - 1)] > right else k  # only the last can reach beyond
        _write_cell(j, left, right, (integral, covered, width_sum, valid, overlapping),
                    min_coverage, mean, coverage, count, native)
    return _rest_ordered(lo, hi, i, cells[m - 1, 1]) and ordered if m else ordered


@njit(cache=True, nogil=True)
def overlap_samples(lo, hi, values, cells, min_coverage, mean, coverage, count, native,
                    grid=None, centre=None):
    """:func:`overlap_cells` by a merge that runs sample by sample: the same numbers (the same
    sums in the same order), faster on grids as fine as the samples or finer.

    Parameters and returns as for :func:`overlap_cells`.

    Notes
    -----
    Each sample closes the cells that end where it starts (or before), adds its piece to every
    cell it reaches beyond and closes that cell, then adds its last piece to the cell it ends
    in, whose sums carry on to the next sample. On a grid as fine as the samples the one
    data-dependent branch (how many cell edges a sample holds) is taken once per sample, not
    once per cell as in :func:`overlap_cells`: on the 2-core development machine 11.3
    against 13.5 ns per cell at one cell per sample, 10.1 against 12.5 at two, 7.5 against
    8.3 at one cell per two samples, but 16 % slower at one per ten and 45 % at one per
    hundred. Branch-free merges (each step advancing the sample or the cell by a comparison)
    were measured 1.6-2x slower: each step waits on the comparison that picks it. The sums
    are written out here and in :func:`overlap_cells` rather than in a shared helper: one
    returning them as a tuple cost 8-12 % of either loop.
    """
    n, m = lo.size, cells.shape[0]
    if m == 0:
        return True
    ordered = True
    right = 0.0
    if grid is not None:
        start, step, first = grid
        right = start + step * first
    j = 0
    left, right = _cell(0, cells, grid, centre, right)
    integral = covered = width_sum = 0.0
    valid = overlapping = 0
    previous = -np.inf
    for i in range(n):
        a, b = lo[_u(i)], hi[_u(i)]
        if ((b < a) | (a < previous)) and _disordered(lo, hi, i):  # (rarely checked)
            ordered = False
        previous = b
        v = values[_u(i)]
        while True:
            if a < right:  # the sample reaches into this cell
                overlap = min(b, right) - max(a, left)
                if overlap > 0.0 or left <= a:  # (the second: a zero-width sample)
                    width_sum += b - a
                    overlapping += 1
                    if v == v:
                        integral += v * overlap
                        covered += overlap
                        valid += 1
                if b <= right:  # and ends in it: the next sample
                    break
            _write_cell(j, left, right, (integral, covered, width_sum, valid, overlapping),
                        min_coverage, mean, coverage, count, native)
            integral = covered = width_sum = 0.0
            valid = overlapping = 0
            j += 1
            if j == m:
                return _rest_ordered(lo, hi, i, right) and ordered
            left, right = _cell(j, cells, grid, centre, right)
    # the cell the samples ended in, and those after them (closed as in the loop above; a
    # sentinel sample past the grid that let the loop close them cost 6-9 % of the loop)
    while True:
        _write_cell(j, left, right, (integral, covered, width_sum, valid, overlapping),
                    min_coverage, mean, coverage, count, native)
        integral = covered = width_sum = 0.0
        valid = overlapping = 0
        j += 1
        if j == m:
            return ordered
        left, right = _cell(j, cells, grid, centre, right)


@njit(cache=True, nogil=True)
def _pair_fit(i, j, t, Pcc, Pcu, Puu, Pcy, Puy, Scc, Scy):
    """Least-squares levels of the prewhitened ramp with corners at samples ``i`` < ``j``:
    returns ``(b, a, Q)`` with ``x = a + b g`` and ``SSR = Syy - Scy^2/Scc - Q`` (prefix
    sums of :func:`_prewhiten`; samples ``i + 1 .. j`` see the slope, later ones the step)."""
    ti = t[i]
    d = t[j] - ti
    rc = Pcc[j + 1] - Pcc[i + 1]
    rcu = Pcu[j + 1] - Pcu[i + 1]
    ruu = Puu[j + 1] - Puu[i + 1]
    rcy = Pcy[j + 1] - Pcy[i + 1]
    ruy = Puy[j + 1] - Puy[i + 1]
    ac = Scc - Pcc[j + 1]
    acy = Scy - Pcy[j + 1]
    sg = (rcu - ti * rc) / d + ac
    sgg = (ruu - 2.0 * ti * rcu + ti * ti * rc) / (d * d) + ac
    sgx = (ruy - ti * rcy) / d + acy
    det = Scc * sgg - sg * sg
    if det <= 1e-12 * Scc * Scc:
        return 0.0, Scy / Scc, -1.0
    num = Scc * sgx - sg * Scy
    b = num / det
    return b, (Scy - b * sg) / Scc, num * num / (Scc * det)


@njit(cache=True, nogil=True)
def _prewhiten(t, w, x, phi, P):
    """Prefix sums ``P`` (5, n + 1) of ``w c^2, w c u, w u^2, w c y, w u y`` and ``sum w y^2``
    for the AR(1)-prewhitened series: ``c_k = (1 - phi_k) / s_k``, ``u_k = (t_k - phi_k
    t_{k-1}) / s_k``, ``y_k = (x_k - phi_k x_{k-1}) / s_k`` with ``s_k = sqrt(1 - phi_k^2)``
    (``c_0 = 1``, ``u_0 = t_0``, ``y_0 = x_0``; all ``phi = 0``: ordinary least squares)."""
    syy = 0.0
    for k in range(t.size):
        if k == 0 or phi[k] == 0.0:
            c, u, y = 1.0, t[k], x[k]
        else:
            s = np.sqrt(1.0 - phi[k] * phi[k])
            c = (1.0 - phi[k]) / s
            u = (t[k] - phi[k] * t[k - 1]) / s
            y = (x[k] - phi[k] * x[k - 1]) / s
        wk = w[k]
        P[0, k + 1] = P[0, k] + wk * c * c
        P[1, k + 1] = P[1, k] + wk * c * u
        P[2, k + 1] = P[2, k] + wk * u * u
        P[3, k + 1] = P[3, k] + wk * c * y
        P[4, k + 1] = P[4, k] + wk * u * y
        syy += wk * y * y
    return syy


@njit(cache=True, nogil=True)
def _vertex(t0, t1, t2, s0, s1, s2):
    """Abscissa of the minimum of the parabola through three points (``t1`` if none)."""
    d0, d2 = t0 - t1, t2 - t1
    denom = d0 * d2 * (d0 - d2)
    if denom == 0.0:
        return t1
    a = (d2 * (s0 - s1) - d0 * (s2 - s1)) / denom
    b = (d0 * d0 * (s2 - s1) - d2 * d2 * (s0 - s1)) / denom
    if a <= 0.0:
        return t1
    v = t1 - b / (2.0 * a)
    return min(max(v, min(t0, t2)), max(t0, t2))


#: Coarse-search candidates refined locally by :func:`ramp_search`.
STARTS = 4


@njit(cache=True, nogil=True)
def ramp_search(t, w, X, phi, sign, step, min_plateau, full=False):
    """Least-squares ramp fits (Mudelsee 2000) of many series on one irregular time axis.

    Parameters
    ----------
    t : float64[n]
        Increasing (forward) times.
    w : float64[n]
        Weights.
    X : float64[B, n]
        Series to fit (e.g. bootstrap replicates).
    phi : float64[1 or B, n]
        AR(1) coefficients ``phi_k`` between samples ``k - 1`` and ``k`` (``phi_0`` unused),
        one row for all series or one per series: the fit minimises the weighted sum of
        squared prewhitened residuals (generalised least squares under AR(1) noise; all
        zeros: ordinary least squares).
    sign : int
        +1 only rising ramps, -1 only falling, 0 either.
    step : int
        Coarse search stride: corners are first searched on every ``step``-th sample; then,
        from each of the ``STARTS`` best coarse pairs and until nothing improves, each corner
        is searched on every sample within ``step / 2`` while the other is held, and both
        within one sample; the best result wins (``step = 1``: exhaustive).
    min_plateau : int
        Samples required on each plateau (at or before the onset, at or after the end).
    full : bool
        Before that refinement, search every pair with both corners within ``step`` of each
        coarse pair's (``(2 step + 1)^2`` pairs per start): then the optimum is found
        whenever the coarse pair nearest it ranks among the ``STARTS`` best.

    Returns
    -------
    float64[B, 7]
        Per series: onset ``t1``, end ``t2`` (refined between samples by a parabola through
        the profile SSR at the neighbouring samples), level before, level after, SSR at the
        best sample pair, and the best pair's sample indices ``i``, ``j``.

    Notes
    -----
    For corners at samples ``i < j`` the model is ``x = a + b g`` with ``g`` 0 up to
    ``t_i``, 1 from ``t_j`` and linear between; the weighted sums it needs come from prefix
    sums, so each candidate pair costs O(1) (levels by weighted least squares, corners by
    brute-force search, as in Mudelsee 2000, but without refitting per pair).
    """
    B, n = X.shape
    out = np.full((B, 7), np.nan)
    P = np.zeros((5, n + 1))
    lo_i = min_plateau - 1
    hi_j = n - min_plateau
    if hi_j <= lo_i:
        return out
    for r in range(B):
        syy = _prewhiten(t, w, X[r], phi[r if phi.shape[0] > 1 else 0], P)
        Pcc, Pcu, Puu, Pcy, Puy = P[0], P[1], P[2], P[3], P[4]
        Scc, Scy = Pcc[n], Pcy[n]
        # coarse: every step-th sample (and the last ones); keep the STARTS best pairs
        top_q = np.full(STARTS, -1.0)
        top_i = np.full(STARTS, -1)
        top_j = np.full(STARTS, -1)
        i = lo_i
        while i <= hi_j - 1:
            j = i + 1
            while j <= hi_j:
                b, a, q = _pair_fit(i, j, t, Pcc, Pcu, Puu, Pcy, Puy, Scc, Scy)
                if q > top_q[STARTS - 1] and (sign == 0 or b * sign > 0):
                    k = STARTS - 1
                    while k > 0 and top_q[k - 1] < q:
                        top_q[k], top_i[k], top_j[k] = top_q[k - 1], top_i[k - 1], top_j[k - 1]
                        k -= 1
                    top_q[k], top_i[k], top_j[k] = q, i, j
                j = hi_j if (j < hi_j and j + step > hi_j) else j + step
            i = hi_j - 1 if (i < hi_j - 1 and i + step > hi_j - 1) else i + step
        best, bi, bj = top_q[0], top_i[0], top_j[0]
        reach = (step + 1) // 2
        for start in range(STARTS if step > 1 else 0):
            if top_i[start] < 0:
                break
            ci, cj, cq = top_i[start], top_j[start], top_q[start]
            if full:
                i0, i1, j0, j1 = ci - step, ci + step, cj - step, cj + step
                for i in range(max(lo_i, i0), min(hi_j - 1, i1) + 1):
                    for j in range(max(j0, i + 1, lo_i + 1), min(hi_j, j1) + 1):
                        b, a, q = _pair_fit(i, j, t, Pcc, Pcu, Puu, Pcy, Puy, Scc, Scy)
                        if q > cq and (sign == 0 or b * sign > 0):
                            cq, ci, cj = q, i, j
            moved = True
            rounds = 0
            while moved and rounds < 8:  # each corner in turn, then both within one sample
                moved = False
                rounds += 1
                for phase in range(3):
                    if phase == 0:
                        i0, i1, j0, j1 = max(lo_i, ci - reach), min(hi_j - 1, ci + reach), cj, cj
                    elif phase == 1:
                        i0, i1, j0, j1 = ci, ci, max(lo_i + 1, cj - reach), min(hi_j, cj + reach)
                    else:
                        i0, i1 = max(lo_i, ci - 1), min(hi_j - 1, ci + 1)
                        j0, j1 = max(lo_i + 1, cj - 1), min(hi_j, cj + 1)
                    for i in range(i0, i1 + 1):
                        for j in range(max(j0, i + 1), j1 + 1):
                            b, a, q = _pair_fit(i, j, t, Pcc, Pcu, Puu, Pcy, Puy, Scc, Scy)
                            if q > cq and (sign == 0 or b * sign > 0):
                                cq, ci, cj = q, i, j
                                moved = True
            if cq > best:
                best, bi, bj = cq, ci, cj
        if bi < 0:
            continue
        b, a, q = _pair_fit(bi, bj, t, Pcc, Pcu, Puu, Pcy, Puy, Scc, Scy)
        base = syy - Scy * Scy / Scc
        t1, t2 = t[bi], t[bj]
        if lo_i < bi and bi + 1 < bj:
            s_lo = base - _pair_fit(bi - 1, bj, t, Pcc, Pcu, Puu, Pcy, Puy, Scc, Scy)[2]
            s_hi = base - _pair_fit(bi + 1, bj, t, Pcc, Pcu, Puu, Pcy, Puy, Scc, Scy)[2]
            t1 = _vertex(t[bi - 1], t[bi], t[bi + 1], s_lo, base - q, s_hi)
        if bi < bj - 1 and bj < hi_j:
            s_lo = base - _pair_fit(bi, bj - 1, t, Pcc, Pcu, Puu, Pcy, Puy, Scc, Scy)[2]
            s_hi = base - _pair_fit(bi, bj + 1, t, Pcc, Pcu, Puu, Pcy, Puy, Scc, Scy)[2]
            t2 = _vertex(t[bj - 1], t[bj], t[bj + 1], s_lo, base - q, s_hi)
        out[r, 0] = t1
        out[r, 1] = max(t2, t1)
        out[r, 2] = a
        out[r, 3] = a + b
        out[r, 4] = base - q
        out[r, 5] = bi
        out[r, 6] = bj
    return out


@njit(cache=True, nogil=True)
def ar1_series(z, dt, tau, sd):
    """In place: turn standard normals ``z`` (series, n) into stationary AR(1) noise.

    ``e_0 = sd z_0``, ``e_i = a_i e_{i-1} + sd sqrt(1 - a_i^2) z_i`` with
    ``a_i = exp(-dt_{i-1} / tau)`` per series (``tau <= 0``: white noise).
    """
    rows, n = z.shape
    for r in range(rows):
        s = sd[r]
        z[r, 0] *= s
        for i in range(1, n):
            a = np.exp(-dt[i - 1] / tau[r]) if tau[r] > 0.0 else 0.0
            z[r, i] = a * z[r, i - 1] + s * np.sqrt(1.0 - a * a) * z[r, i]
    return z
@njit(cache=True, nogil=True)
def ramp_levels(t, x, w, t1, t2, phi):
    """Levels and SSR of the ramp with corners ``t1 <= t2`` by least squares on the
    AR(1)-prewhitened series (``phi`` as in :func:`ramp_search`; all zeros: the weighted
    least squares of :func:`align.ramp.levels`), compiled: it is called a few hundred times
    while the corners are refined."""
    scc = sch = shh = scy = shy = 0.0
    span = t2 - t1
    g_prev = 0.0
    h = np.empty(t.size)
    c = np.empty(t.size)
    y = np.empty(t.size)
    for k in range(t.size):
        if span > 0.0:
            g = min(max((t[k] - t1) / span, 0.0), 1.0)
        else:
            g = 1.0 if t[k] >= t1 else 0.0
        if k == 0 or phi[k] == 0.0:
            c[k], h[k], y[k] = 1.0, g, x[k]
        else:
            s = np.sqrt(1.0 - phi[k] * phi[k])
            c[k] = (1.0 - phi[k]) / s
            h[k] = (g - phi[k] * g_prev) / s
            y[k] = (x[k] - phi[k] * x[k - 1]) / s
        g_prev = g
        wk = w[k]
        scc += wk * c[k] * c[k]
        sch += wk * c[k] * h[k]
        shh += wk * h[k] * h[k]
        scy += wk * c[k] * y[k]
        shy += wk * h[k] * y[k]
    det = scc * shh - sch * sch
    if det <= 1e-12 * scc * scc:
        a, b = scy / scc, 0.0
    else:
        b = (scc * shy - sch * scy) / det
        a = (scy - b * sch) / scc
    ssr = 0.0
    for k in range(t.size):
        r = y[k] - a * c[k] - b * h[k]
        ssr += w[k] * r * r
    return a, a + b, ssr


@njit(cache=True, nogil=True)
def group_by_start(picks, starts):
    """The rows of ``picks`` (replicates, blocks) grouped by the start they picked (a
    counting sort): replicate ``rows[head[s]:head[s + 1]]`` picked start ``s`` (once per
    pick)."""
    head = np.zeros(starts + 1, dtype=np.int64)
    for r in range(picks.shape[0]):
        for k in range(picks.shape[1]):
            head[picks[r, k] + 1] += 1
    for s in range(starts):
        head[s + 1] += head[s]
    fill = head[:-1].copy()
    rows = np.empty(picks.size, dtype=np.int32)
    for r in range(picks.shape[0]):
        for k in range(picks.shape[1]):
            s = picks[r, k]
            rows[fill[s]] = r
            fill[s] += 1
    return head, rows


@njit(cache=True, nogil=True)
def sum_picked_rows(head, rows, table, out):
    """``out[r] += table[s]`` for every pick of start ``s`` by replicate ``r``
    (:func:`group_by_start`): one pass over ``table`` (starts, columns) in order, the small
    ``out`` (replicates, columns) staying in cache."""
    for s in range(head.size - 1):
        for q in range(head[s], head[s + 1]):
            r = rows[q]
            for c in range(table.shape[1]):
                out[r, c] += table[s, c]
    return out


@njit(cache=True, nogil=True)
def block_weights(picks, block, n, out):
    """``out[r, i]``: how many of replicate ``r``'s blocks ``[p, p + block)`` (``p`` in
    ``picks[r]``) cover point ``i`` -- a difference array summed once per row."""
    for r in range(picks.shape[0]):
        row = out[r]
        row[:] = 0.0
        for p in picks[r]:
            row[p] += 1.0
            if p + block < n:
                row[p + block] -= 1.0
        total = 0.0
        for i in range(n):
            total += row[i]
            row[i] = total
    return out


#: Points of the table from which :func:`turn_phases` turns the remaining small angle.
TURNS = 256
_TABLE_STEP = 2.0 * np.pi / TURNS
_COS_TABLE = np.cos(_TABLE_STEP * np.arange(TURNS + 1))
_SIN_TABLE = np.sin(_TABLE_STEP * np.arange(TURNS + 1))


@njit(cache=True, nogil=True)
def turn_phases(amplitude, phases, out):
    """``out = amplitude * exp(1j * phases)`` for phases in ``[0, 2 pi]``, row by row.

    Notes
    -----
    ``exp(i phi) = exp(i phi_j) exp(i d)`` with ``phi_j`` the nearest of ``TURNS`` table
    angles and ``|d| <= pi / TURNS``: the table's cosines and sines (numpy's) turned by the
    Taylor polynomials of ``cos d`` (to ``d^6``) and ``sin d`` (to ``d^7``), whose first
    omitted terms are below 1e-19; within a few units in the last place of numpy's complex
    ``exp`` at a quarter of the cost of ``cos`` and ``sin``.
    """
    inverse = 1.0 / _TABLE_STEP
    for r in range(phases.shape[0]):
        for f in range(phases.shape[1]):
            phi = phases[r, f]
            j = int(phi * inverse + 0.5)
            d = phi - j * _TABLE_STEP
            d2 = d * d
            c = 1.0 + d2 * (-0.5 + d2 * (1.0 / 24.0 + d2 * (-1.0 / 720.0)))
            s = d * (1.0 + d2 * (-1.0 / 6.0 + d2 * (1.0 / 120.0 + d2 * (-1.0 / 5040.0))))
            a = amplitude[f]
            out[r, f] = complex(a * (_COS_TABLE[j] * c - _SIN_TABLE[j] * s),
                                a * (_SIN_TABLE[j] * c + _COS_TABLE[j] * s))
    return out
