"""Robust anomalies: running-median baseline, MAD scale, z-scores and contiguous runs.

Pure functions on numpy arrays, shared by event detection (:mod:`align.detect`) and tie-point
suggestions (:mod:`align.suggest`). They work on irregular sampling and keep missing values
missing.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: Consistency constant of the MAD for normally distributed data, 1 / Phi^-1(3/4).
MAD_TO_SD = 1.4826


def running_median(t, x, span):
    """Centred running median over a span of ``t`` units on an irregular axis.

    Parameters
    ----------
    t : numpy.ndarray
        Increasing positions (yr).
    x : numpy.ndarray
        Values; NaN is ignored inside each window.
    span : float
        Full width of the window (same units as ``t``).

    Returns
    -------
    numpy.ndarray
        The median of the finite values within ``[t_i - span/2, t_i + span/2]`` (NaN where a
        window holds none).
    """
    index = pd.to_timedelta(np.asarray(t, dtype=float) - float(t[0]), unit="s")
    series = pd.Series(np.asarray(x, dtype=float), index=index)
    window = pd.Timedelta(seconds=float(span))
    return series.rolling(window, center=True, min_periods=1, closed="both").median().to_numpy()


def mad_scale(residuals):
    """Robust standard deviation: ``1.4826 * median(|r - median(r)|)`` over finite values.

    Notes
    -----
    The factor makes the MAD a consistent estimator of the sd for normal data (Hampel 1974;
    handbook value 1/Phi^-1(0.75) = 1.4826).

    References
    ----------
    Hampel, F. R. (1974), J. Am. Stat. Assoc. 69, 383-393, doi:10.1080/01621459.1974.10482962.
    """
    r = np.asarray(residuals, dtype=float)
    r = r[np.isfinite(r)]
    if r.size == 0:
        return np.nan
    return MAD_TO_SD * float(np.median(np.abs(r - np.median(r))))


def robust_z(t, x, span):
    """Robust anomaly of each sample against a running-median baseline.

    Returns
    -------
    z : numpy.ndarray
        ``(x - baseline) / scale`` (dimensionless; NaN where ``x`` is missing).
    baseline : numpy.ndarray
        Running median (units of ``x``).
    scale : float
        MAD-based sd of ``x - baseline`` (units of ``x``).
    """
    baseline = running_median(t, x, span)
    residual = np.asarray(x, dtype=float) - baseline
    scale = mad_scale(residual)
    if not np.isfinite(scale) or scale == 0:
        scale = float(np.nanstd(residual)) or 1.0
    return residual / scale, baseline, scale


def runs_above(z, threshold):
    """Contiguous runs of samples with ``z > threshold`` (missing values end a run).

    Returns
    -------
    list of (int, int)
        ``(first, last)`` sample indices of each run, inclusive, in index order.
    """
    above = np.nan_to_num(np.asarray(z, dtype=float), nan=-np.inf) > threshold
    padded = np.concatenate([[False], above, [False]])
    change = np.flatnonzero(padded[1:] != padded[:-1])
    return [(int(a), int(b) - 1) for a, b in zip(change[::2], change[1::2])]
