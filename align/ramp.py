"""Ramp-function regression: the onset, end and levels of a transition.

A ramp in forward time ``t`` holds ``x1`` until the onset ``t1``, changes linearly to ``x2`` at
the end ``t2``, and holds ``x2`` afterwards (Mudelsee 2000, Eq. 1). Levels are fitted by
weighted least squares for each candidate pair of corners, the corners by brute-force search
over the samples (made O(1) per pair by prefix sums, :func:`align._kernels.ramp_search`), and
the best pair is then refined continuously. Uncertainty comes from a parametric bootstrap
with AR(1) noise on the irregular axis (:mod:`align.noise`).

References
----------
Mudelsee, M. (2000), Computers & Geosciences 26, 293-307, doi:10.1016/S0098-3004(99)00141-7.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import minimize

#: Samples required on each plateau of a fitted ramp.
MIN_PLATEAU = 2

#: Samples up to which the main fit searches every pair of corners; longer series are
#: searched coarse-to-fine on about this many candidate corners, so the cost grows as n.
EXHAUSTIVE = 1000


def ramp(t, t1, t2, x1, x2):
    """The ramp function.

    Parameters
    ----------
    t : array_like
        Forward times.
    t1, t2 : float
        Onset and end (``t1 <= t2``).
    x1, x2 : float
        Levels before the onset and after the end.

    Returns
    -------
    numpy.ndarray
        ``x1`` for ``t <= t1``, ``x2`` for ``t >= t2``, linear between (Eq. 1 of Mudelsee
        2000).
    """
    t = np.asarray(t, dtype=float)
    if t2 <= t1:
        return np.where(t < t1, x1, x2).astype(float)
    return x1 + (x2 - x1) * np.clip((t - t1) / (t2 - t1), 0.0, 1.0)


def ramps(t, params):
    """Many ramps at once: ``params`` rows ``(t1, t2, x1, x2)``; returns (rows, len(t))."""
    t1, t2, x1, x2 = (params[:, k, None] for k in range(4))
    span = np.where(t2 > t1, t2 - t1, 1.0)
    g = np.where(t2 > t1, np.clip((t[None, :] - t1) / span, 0.0, 1.0),
                 (t[None, :] >= t1).astype(float))
    return x1 + (x2 - x1) * g


def levels(t, x, w, t1, t2):
    """Weighted least-squares levels for given corners, and the weighted SSR.

    Returns
    -------
    x1, x2, ssr : float

    Notes
    -----
    With ``g`` the unit ramp (0 before ``t1``, 1 after ``t2``), ``x = x1 + (x2 - x1) g``; the
    2 x 2 normal equations in ``(x1, x2 - x1)`` are solved in closed form.
    """
    g = np.clip((t - t1) / (t2 - t1), 0.0, 1.0) if t2 > t1 else (t >= t1).astype(float)
    sw, sg, sgg = w.sum(), w @ g, w @ (g * g)
    sx, sgx = w @ x, w @ (g * x)
    det = sw * sgg - sg * sg
    if det <= 1e-12 * sw * sw:
        return float(sx / sw), float(sx / sw), float(w @ (x - sx / sw) ** 2)
    b = (sw * sgx - sg * sx) / det
    a = (sx - b * sg) / sw
    resid = x - a - b * g
    return float(a), float(a + b), float(w @ (resid * resid))


@dataclass(frozen=True)
class RampFit:
    """A fitted ramp in forward time (``t1 <= t2``) with its weighted SSR."""

    t1: float
    t2: float
    x1: float
    x2: float
    ssr: float
    edge: bool


def ar1_coefficients(t, tau):
    """AR(1) coefficients ``phi_k = exp(-(t_k - t_{k-1}) / tau)`` between neighbouring samples
    (``phi_0 = 0``), one row per persistence time ``tau`` (scalar or (B,); 0: white noise)."""
    tau = np.atleast_1d(np.asarray(tau, dtype=float))
    phi = np.zeros((tau.size, t.size))
    red = tau > 0
    phi[red, 1:] = np.exp(-np.diff(t)[None, :] / tau[red, None])
    return phi


def fit_ramp(t, x, w, sign=0, tau=0.0):
    """Best ramp: search over sample corners, then continuous refinement.

    Parameters
    ----------
    t : numpy.ndarray
        Increasing forward times (no missing values).
    x : numpy.ndarray
        Values.
    w : numpy.ndarray
        Weights.
    sign : {1, -1, 0}
        Rising only, falling only, or either.
    tau : float
        Persistence time of the AR(1) noise the ramp is fitted under (0: white noise,
        ordinary weighted least squares).

    Returns
    -------
    RampFit
        ``edge`` is true when a corner sits on the first or last sample the search allows
        (the window is too narrow to show the whole transition).

    Notes
    -----
    Up to ``EXHAUSTIVE`` samples every pair of sample corners is tried (``O(n^2)`` pairs);
    beyond, the pairs on every ``s = n // EXHAUSTIVE``-th sample, then every pair within
    ``s`` samples of the best coarse pairs (:func:`align._kernels.ramp_search` with
    ``full``), so the search costs ``O(n)``. The refinement minimises the SSR profiled over
    the levels (closed form) with respect to continuous ``t1 < t2`` (Nelder-Mead), starting
    from the best pair of samples.

    With ``tau > 0`` the fit is generalised least squares under AR(1) noise: the SSR is that
    of the prewhitened residuals ``e_0`` and ``(e_k - phi_k e_{k-1}) / sqrt(1 - phi_k^2)``,
    ``phi_k = exp(-(t_k - t_{k-1}) / tau)`` (generalised least squares by prewhitening;
    Mudelsee 2010, doi:10.1007/978-90-481-9482-7, key ``mudelsee2010``). For fixed
    corners the model stays linear in the two levels, so the search is unchanged. Under red
    noise it keeps the ordinary least-squares ramp from taking a slow noise excursion beside
    a short transition into a much longer ramp.
    """
    from align._kernels import ramp_levels, ramp_search

    phi = ar1_coefficients(t, tau)
    step = max(1, t.size // EXHAUSTIVE)
    best = ramp_search(t, w, x[None, :], phi, int(sign), step, MIN_PLATEAU, True)[0]
    i, j = int(best[5]), int(best[6])
    edge = i <= MIN_PLATEAU - 1 or j >= t.size - MIN_PLATEAU

    def profile(p):
        t1, t2 = p
        if not t[0] <= t1 <= t2 <= t[-1]:
            return np.inf
        x1, x2, ssr = ramp_levels(t, x, w, t1, t2, phi[0])
        return ssr if sign == 0 or (x2 - x1) * sign > 0 else np.inf

    start = np.array([t[i], t[j]])
    scale = max(float(np.median(np.diff(t))), 1e-9)
    simplex = np.array([start, start + [scale, 0.0], start + [0.0, scale]])
    result = minimize(profile, start, method="Nelder-Mead",
                      options={"initial_simplex": simplex, "xatol": 1e-7 * scale,
                               "fatol": 1e-12 * (1.0 + best[4]), "maxiter": 2000})
    t1, t2 = (result.x if result.fun <= profile(start) else start)
    x1, x2, ssr = ramp_levels(t, x, w, t1, t2, phi[0])
    return RampFit(float(t1), float(t2), x1, x2, ssr, bool(edge))


def bootstrap_ramps(t, w, fitted, replicates, sign=0, tau=0.0):
    """Refit ramps to many replicate series on the same axis.

    Parameters
    ----------
    t, w : numpy.ndarray
        Forward times and weights.
    fitted : numpy.ndarray (n,)
        The fitted ramp at ``t``.
    replicates : numpy.ndarray (B, n)
        Noise series to add to ``fitted``.
    sign : {1, -1, 0}
    tau : float or numpy.ndarray (B,)
        Persistence time(s) of the AR(1) noise each replicate is refitted under (as in
        :func:`fit_ramp`).

    Returns
    -------
    numpy.ndarray (B, 4)
        ``t1, t2, x1, x2`` per replicate (corners searched coarse-to-fine on the samples and
        refined between samples by a parabola through the profile SSR).
    """
    from align._kernels import ramp_search
    from align._threads import blocks, pool

    step = max(1, t.size // 30)
    series = fitted[None, :] + replicates
    phi = ar1_coefficients(t, tau)
    # the compiled search releases the GIL: one thread per core, each on a block of rows
    edges = blocks(series.shape[0], 1)

    def search(k):
        rows = slice(edges[k], edges[k + 1]) if phi.shape[0] > 1 else slice(0, 1)
        return ramp_search(t, w, series[edges[k]:edges[k + 1]], phi[rows], int(sign), step,
                           MIN_PLATEAU)

    parts = pool().map(search, range(len(edges) - 1))
    return np.vstack(list(parts))[:, :4]
