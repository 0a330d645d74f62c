"""Robust anomalies: running-median baseline, MAD scale, z-scores and contiguous runs.

Pure functions on numpy arrays, shared by event detection (:mod:`align.detect`) and tie-point
suggestions (:mod:`align.suggest`). They work on irregular sampling and keep missing values
missing.
"""

from __future__ import annotations

from functools import lru_cache

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


def lag1_autocorrelation(z, clip=4.0):
    """Lag-1 autocorrelation of a series of anomalies, robust to a few spikes: values are
    clipped to ``+-clip`` before the sample autocorrelation is taken; 0 when too short."""
    z = np.clip(np.asarray(z, dtype=float), -clip, clip)
    pairs = np.isfinite(z[1:]) & np.isfinite(z[:-1])
    if pairs.sum() < 3:
        return 0.0
    x, y = z[:-1][pairs], z[1:][pairs]
    x, y = x - x.mean(), y - y.mean()
    denom = np.sqrt(np.sum(x * x) * np.sum(y * y))
    return float(np.clip(np.sum(x * y) / denom, -0.99, 0.99)) if denom > 0 else 0.0


def upcrossing_probability(level, phi):
    """Probability that a stationary Gaussian AR(1) series of unit variance and lag-1
    correlation ``phi`` crosses ``level`` upwards between two consecutive samples.

    Notes
    -----
    ``P(X_0 <= c < X_1) = Phi(c) - Phi_2(c, c; phi) = 2 T(c, sqrt((1 - phi) / (1 + phi)))``
    with Owen's T function (Owen 1956; for ``phi = 0`` it is ``Phi(c) (1 - Phi(c))``);
    ``tests/test_calibration_events.py`` checks it against scipy's bivariate normal.

    References
    ----------
    Owen, D. B. (1956), Tables for computing bivariate normal probabilities, Ann. Math.
    Statist. 27, 1075-1090 (DOI from memory: 10.1214/aoms/1177728074).
    """
    from scipy.special import owens_t

    return 2.0 * owens_t(level, np.sqrt((1.0 - phi) / (1.0 + phi)))


def calibrated_threshold(false_alarms, step, phi):
    """The anomaly level (in units of the background's sd) that a Gaussian AR(1) background
    crosses upwards ``false_alarms`` times per 1000 yr, sampled every ``step`` yr.

    Each upward crossing starts one anomalous run, i.e. one false event; the level solves
    ``upcrossing_probability(c, phi) = false_alarms * step / 1000``.
    """
    from scipy.optimize import brentq

    target = false_alarms * step / 1000.0
    if target >= upcrossing_probability(0.0, phi):
        return 0.0
    return float(brentq(lambda c: upcrossing_probability(c, phi) - target, 0.0, 40.0,
                        xtol=1e-10))


def false_alarm_rate(threshold, step, phi):
    """False events per 1000 yr that a level ``threshold`` implies (see
    :func:`calibrated_threshold`)."""
    return float(upcrossing_probability(threshold, phi) * 1000.0 / step)


def robust_z_batch(t, x, span):
    """:func:`robust_z` of each column of ``x`` (samples x series), vectorised: one rolling
    median over all columns, one MAD scale per column."""
    index = pd.to_timedelta(np.asarray(t, dtype=float) - float(t[0]), unit="s")
    frame = pd.DataFrame(np.asarray(x, dtype=float), index=index)
    baseline = frame.rolling(pd.Timedelta(seconds=float(span)), center=True, min_periods=1,
                             closed="both").median().to_numpy()
    residual = np.asarray(x, dtype=float) - baseline
    centre = np.nanmedian(residual, axis=0)
    scale = MAD_TO_SD * np.nanmedian(np.abs(residual - centre), axis=0)
    return residual / np.where(scale > 0, scale, 1.0)


def upcrossings(z, level):
    """Upward crossings of ``level`` per pair of consecutive samples, over all columns."""
    above = np.nan_to_num(z, nan=-np.inf) > level
    return float(np.mean(above[1:] & ~above[:-1]))


#: Seed of the background surrogates (fixed: detection is deterministic; the calibration's
#: own Monte Carlo error is well inside its tolerance).
SURROGATE_SEED = 13


@lru_cache(maxsize=4096)
def surrogate_background(samples, span, persistence, fit_rate=0.0, series=200):
    """The background model of anomalies, calibrated on surrogates: ``(phi, inflation)``.

    Parameters
    ----------
    samples : int
        Samples of the record the anomalies were computed on.
    span : int
        Running-median span in samples.
    persistence : float
        Lag-1 autocorrelation of the anomalies (rounded by the caller: results are cached).
    fit_rate : float
        Up-crossings per sample at which the tail is fitted (the wanted false-alarm rate).

    Notes
    -----
    Gaussian AR(1) surrogates on a regular axis, with a lag-1 autocorrelation chosen so that
    their anomalies have ``persistence`` (one correction for what the running median
    removes), are passed through the same running-median and MAD pipeline
    (:func:`robust_z_batch`). The estimated baseline and scale make the anomalies' tails
    heavier than Gaussian: their up-crossing rate is measured at the level the Gaussian
    formula puts at ``max(fit_rate, 20 crossings over all surrogates)`` and a scale
    ``inflation`` fitted there, ``upcrossing_probability(level / inflation, phi) =
    measured``, with ``phi`` the surrogates' own anomaly persistence. Thresholds then follow
    from :func:`threshold_for` and rates from :func:`rate_for`.
    """
    from scipy.optimize import brentq
    from scipy.signal import lfilter

    t = np.arange(samples, dtype=float)
    eps = np.random.default_rng(SURROGATE_SEED).standard_normal((samples, series))
    gen = float(np.clip(persistence, 0.0, 0.98))
    for _ in range(2):  # the second pass corrects the persistence the pipeline removes
        innov = np.sqrt(1.0 - gen**2)
        start = eps.copy()
        start[0] /= innov  # a stationary first value
        z = robust_z_batch(t, lfilter([innov], [1.0, -gen], start, axis=0), float(span))
        phi = float(np.mean(lag1_columns(z)))
        gen = float(np.clip(gen + (persistence - phi), 0.0, 0.98))
    rate = max(fit_rate, 20.0 / (samples * series))
    level = calibrated_threshold(rate * 1000.0, 1.0, phi)
    measured = upcrossings(z, level)
    f = lambda s: upcrossing_probability(level / s, phi) - measured  # noqa: E731
    inflation = 1.0
    if measured > 0 and level > 0 and f(0.5) < 0 < f(3.0):
        inflation = float(brentq(f, 0.5, 3.0, xtol=1e-6))
    return phi, inflation


def lag1_columns(z, clip=4.0):
    """:func:`lag1_autocorrelation` of each column of ``z`` (no missing values)."""
    z = np.clip(z, -clip, clip)
    x, y = z[:-1] - z[:-1].mean(axis=0), z[1:] - z[1:].mean(axis=0)
    denom = np.sqrt(np.sum(x * x, axis=0) * np.sum(y * y, axis=0))
    return np.clip(np.sum(x * y, axis=0) / np.where(denom > 0, denom, 1.0), -0.99, 0.99)


def threshold_for(false_alarms, step, phi, inflation):
    """Robust-sd threshold for ``false_alarms`` per 1000 yr (see :func:`surrogate_background`)."""
    return inflation * calibrated_threshold(false_alarms, step, phi)


def rate_for(threshold, step, phi, inflation):
    """False events per 1000 yr at ``threshold`` (see :func:`surrogate_background`)."""
    return false_alarm_rate(threshold / inflation, step, phi)
