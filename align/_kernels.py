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


@njit(cache=True, nogil=True)
def overlap_sums(lo, hi, values, edges):
    """Integrate piecewise-constant samples over grid cells, exactly, in one merge pass.

    Parameters
    ----------
    lo, hi : float64[n]
        Sample intervals, increasing and not overlapping (strided views are fine).
    values : float64[n, v]
        Sample values of ``v`` variables; NaN is missing.
    edges : float64[m + 1]
        Cell edges, increasing.

    Returns
    -------
    integral : float64[m, v]
        Sum over valid samples of ``value * overlap(sample, cell)``.
    covered : float64[m, v]
        Sum over valid samples of ``overlap(sample, cell)``.
    count : int64[m, v]
        Valid samples overlapping each cell by a positive length.
    width_sum : float64[m]
        Sum of the interval lengths of all samples overlapping each cell.
    width_count : int64[m]
        Number of samples overlapping each cell.
    ordered : bool
        False if the intervals were not increasing and disjoint, beyond the record model's
        rounding tolerance (the sums are then wrong).
    """
    n, nv = values.shape
    m = edges.size - 1
    integral = np.zeros((m, nv))
    covered = np.zeros((m, nv))
    count = np.zeros((m, nv), dtype=np.int64)
    width_sum = np.zeros(m)
    width_count = np.zeros(m, dtype=np.int64)
    ordered = True
    previous = -np.inf
    c = 0
    for i in range(n):
        a, b = lo[i], hi[i]
        if a < previous - 1e-9 * max(1.0, abs(previous)) or b < a:  # the record's tolerance
            ordered = False
        previous = b
        while c < m and edges[c + 1] <= a:
            c += 1
        if c == m:
            break
        if edges[c] <= a and b <= edges[c + 1]:  # the common case: inside one cell
            width = b - a
            width_sum[c] += width
            width_count[c] += 1
            for k in range(nv):
                v = values[i, k]
                if v == v:
                    integral[c, k] += v * width
                    covered[c, k] += width
                    count[c, k] += 1
            continue
        j = c
        while j < m and edges[j] < b:
            overlap = min(b, edges[j + 1]) - max(a, edges[j])
            if overlap > 0.0:
                width_sum[j] += b - a
                width_count[j] += 1
                for k in range(nv):
                    v = values[i, k]
                    if v == v:
                        integral[j, k] += v * overlap
                        covered[j, k] += overlap
                        count[j, k] += 1
            j += 1
    return integral, covered, count, width_sum, width_count, ordered
