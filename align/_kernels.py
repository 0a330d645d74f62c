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
