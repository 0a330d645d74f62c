"""Autocorrelated noise on irregular time axes: AR(1) persistence, simulation, surrogates.

Proxy noise is red: neighbouring samples share part of their deviation. On an irregular axis
the AR(1) process is defined by a persistence time ``tau``: the coefficient between samples
``Delta t`` apart is ``a = exp(-Delta t / tau)`` (Robinson 1977; Mudelsee 2002).

References
----------
Mudelsee, M. (2002), Computers & Geosciences 28, 69-72, doi:10.1016/S0098-3004(01)00041-3.
Kendall, M. G. (1954), Biometrika 41, 403-404, doi:10.1093/biomet/41.3-4.403.
Robinson, P. M. (1977), Ann. Inst. Stat. Math. 29, 57-70, doi:10.1007/BF02532778.
"""

from __future__ import annotations

import numpy as np


def ar1_persistence(t, r):
    """Least-squares AR(1) coefficient at the mean spacing, for one or many series.

    Parameters
    ----------
    t : numpy.ndarray (n,)
        Increasing times (yr).
    r : numpy.ndarray (n,) or (B, n)
        Zero-mean series (e.g. residuals) on ``t``, no missing values.

    Returns
    -------
    numpy.ndarray (B,) or float
        ``a`` in [0, 0.999] at the mean spacing ``d`` minimising
        ``sum((z_i - a^((t_i - t_{i-1}) / d) z_{i-1})^2)`` for the series scaled to unit
        variance (Mudelsee 2002, Eq. 3, parametrised by ``a = exp(-d / tau)``), bias-corrected
        by ``a' = (n a + 1) / (n - 3)`` (Kendall 1954). Found on a grid of 100 values of
        ``a`` with a parabola through the best three, for all series at once.
    """
    t = np.asarray(t, dtype=float)
    single = np.ndim(r) == 1
    r = np.atleast_2d(np.asarray(r, dtype=float))
    n = r.shape[1]
    if n < 5:
        return 0.0 if single else np.zeros(r.shape[0])
    z = r - r.mean(axis=1, keepdims=True)
    z /= np.where(z.std(axis=1, keepdims=True) > 0, z.std(axis=1, keepdims=True), 1.0)
    dt = np.diff(t)
    step = dt / dt.mean()
    grid = np.linspace(0.0, 0.9995, 100)
    coef = grid[:, None] ** step[None, :]  # (G, n - 1)
    lagged = z[:, :-1]
    ssr = ((z[:, 1:] ** 2).sum(axis=1)[:, None] - 2.0 * (z[:, 1:] * lagged) @ coef.T
           + (lagged**2) @ np.square(coef, out=coef).T)  # (B, G)
    k = np.clip(np.argmin(ssr, axis=1), 1, grid.size - 2)
    rows = np.arange(ssr.shape[0])
    s0, s1, s2 = ssr[rows, k - 1], ssr[rows, k], ssr[rows, k + 1]
    denom = s0 - 2.0 * s1 + s2
    shift = np.where(denom > 0, 0.5 * (s0 - s2) / np.where(denom > 0, denom, 1.0), 0.0)
    a = grid[k] + np.clip(shift, -1.0, 1.0) * (grid[1] - grid[0])
    a = np.clip((n * a + 1.0) / (n - 3.0), 0.0, 0.999)
    return float(a[0]) if single else a


def persistence_time(t, a):
    """Persistence time ``tau = -d / ln a`` (yr) of coefficient(s) ``a`` at the mean spacing
    ``d`` of ``t`` (0 for white noise, ``a <= 0.001``)."""
    d = float(np.diff(t).mean())
    a = np.asarray(a, dtype=float)
    with np.errstate(divide="ignore"):
        tau = np.where(a > 1e-3, -d / np.log(np.where(a > 1e-3, a, 0.5)), 0.0)
    return float(tau) if tau.ndim == 0 else tau


def simulate_ar1(t, tau, sd, size, rng):
    """Stationary AR(1) noise on the axis ``t`` with persistence ``tau`` and sd ``sd``.

    Parameters
    ----------
    t : numpy.ndarray (n,)
        Increasing times.
    tau : float or numpy.ndarray (size,)
        Persistence time (0: white noise), one for all series or one per series.
    sd : float or numpy.ndarray (size,)
        Marginal standard deviation, likewise.
    size : int
        Number of independent series.
    rng : numpy.random.Generator

    Returns
    -------
    numpy.ndarray (size, n)
        ``e_0 ~ N(0, sd^2)``, ``e_i = a_i e_{i-1} + N(0, sd^2 (1 - a_i^2))``.
    """
    from align._kernels import ar1_series

    tau = np.broadcast_to(np.asarray(tau, dtype=float), (size,))
    sd = np.broadcast_to(np.asarray(sd, dtype=float), (size,))
    z = rng.standard_normal((size, len(t)))
    return ar1_series(z, np.diff(np.asarray(t, dtype=float)), np.ascontiguousarray(tau),
                      np.ascontiguousarray(sd))


def lag1_autocorrelation(x):
    """Sample lag-1 autocorrelation of a regular series (``acf`` convention: divided by the
    lag-0 sum of squares of the demeaned series)."""
    x = np.asarray(x, dtype=float)
    d = x - x.mean()
    return float(np.dot(d[1:], d[:-1]) / np.dot(d, d))


def ar1_profile_loglik(t, z, grid=200):
    """Gaussian AR(1) log-likelihood of zero-mean series, maximised over the coefficient and
    the innovation variance, for many series at once.

    Parameters
    ----------
    t : numpy.ndarray (n,)
        Increasing times.
    z : numpy.ndarray (B, n)
        Zero-mean series on ``t``.
    grid : int
        Values of the coefficient ``a`` at the mean spacing searched in [0, 0.999].

    Returns
    -------
    numpy.ndarray (B,)
        ``max_a [-(n/2) ln(S(a)/n) - (1/2) sum_i ln(1 - a_i^2)]`` (constants dropped), with
        ``a_i = a^((t_i - t_{i-1}) / d)`` and ``S(a) = z_0^2 + sum_i (z_i - a_i z_{i-1})^2 /
        (1 - a_i^2)``: the exact likelihood of a stationary AR(1) process on an irregular
        axis (Robinson 1977) with the variance profiled out.
    """
    t = np.asarray(t, dtype=float)
    z = np.atleast_2d(np.asarray(z, dtype=float))
    n = z.shape[1]
    dt = np.diff(t)
    coef = np.linspace(0.0, 0.999, grid)[:, None] ** (dt / dt.mean())[None, :]  # (G, n - 1)
    inv = 1.0 / (1.0 - coef**2)
    s = (z[:, :1] ** 2 + (z[:, 1:] ** 2) @ inv.T - 2.0 * (z[:, 1:] * z[:, :-1]) @ (coef * inv).T
         + (z[:, :-1] ** 2) @ (coef**2 * inv).T)  # (B, G)
    ll = -0.5 * n * np.log(np.maximum(s, 1e-300) / n) + 0.5 * np.log(inv).sum(axis=1)[None, :]
    return ll.max(axis=1)
