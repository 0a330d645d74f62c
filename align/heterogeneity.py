"""How much a set of lags disagree: Cochran's Q, the between-pair variance with its
Q-profile confidence interval, each pair's share of Q, and a prediction interval for a new pair.

Pure functions on numpy arrays (estimates ``y`` and their variances ``v``, yr and yr^2), used
by :mod:`align.survey`.

References
----------
Cochran, W. G. (1954), Biometrics 10, 101-129, doi:10.2307/3001666.
DerSimonian, R. and Laird, N. (1986), Controlled Clinical Trials 7, 177-188,
doi:10.1016/0197-2456(86)90046-2.
Viechtbauer, W. (2007), Statistics in Medicine 26, 37-52, doi:10.1002/sim.2514.
Higgins, J. P. T., Thompson, S. G. and Spiegelhalter, D. J. (2009), J. R. Stat. Soc. A 172,
137-159, doi:10.1111/j.1467-985X.2008.00552.x.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import brentq
from scipy.stats import chi2, t


def generalised_q(y, v, tau2):
    """Cochran's Q generalised to a between-pair variance ``tau2`` (dimensionless).

    Notes
    -----
    ``Q(tau2) = sum w_i (y_i - mu)^2`` with ``w_i = 1 / (v_i + tau2)`` and ``mu`` the
    ``w``-weighted mean; ``Q(0)`` is Cochran's Q (Cochran 1954). Under the random-effects
    model ``Q(tau2_true)`` is chi-square with ``k - 1`` dof (Viechtbauer 2007, Eq. 6).
    """
    w = 1.0 / (np.asarray(v, dtype=float) + tau2)
    y = np.asarray(y, dtype=float)
    mu = np.sum(w * y) / w.sum()
    return float(np.sum(w * (y - mu) ** 2))


def dersimonian_laird(y, v):
    """The DerSimonian-Laird between-pair variance (yr^2) and Cochran's Q.

    Notes
    -----
    ``tau2 = max(0, (Q - (k - 1)) / (S1 - S2 / S1))`` with ``S1 = sum w``, ``S2 = sum w^2``,
    ``w = 1 / v`` (DerSimonian & Laird 1986, Eq. 7-8).
    """
    w = 1.0 / np.asarray(v, dtype=float)
    q = generalised_q(y, v, 0.0)
    return max(0.0, (q - (w.size - 1)) / (w.sum() - np.sum(w**2) / w.sum())), q


def q_profile_interval(y, v, level=0.95):
    """Confidence interval of the between-pair variance (yr^2) by the Q-profile method.

    Notes
    -----
    The bounds solve ``Q(tau2) = chi2_{k-1}`` at the upper and lower ``(1 - level)/2``
    quantiles (Viechtbauer 2007, Eq. 7); a bound whose equation has no positive root is 0.
    """
    k = np.size(y)
    alpha = 1.0 - level
    targets = chi2.ppf([1 - alpha / 2, alpha / 2], k - 1)
    return [_q_root(y, v, target) for target in targets]


def _q_root(y, v, target):
    """The ``tau2 >= 0`` where ``Q(tau2) = target`` (0 when ``Q(0) <= target``)."""
    f = lambda tau2: generalised_q(y, v, tau2) - target  # noqa: E731
    if f(0.0) <= 0:
        return 0.0
    top = float(np.var(y) + np.max(v)) or 1.0
    while f(top) > 0:  # Q falls towards 0 as tau2 grows
        top *= 4.0
    return float(brentq(f, 0.0, top, xtol=1e-12, rtol=1e-10))


def q_shares(y, v):
    """Each pair's share of Cochran's Q: ``w_i (y_i - mu)^2 / Q`` (sums to 1)."""
    w = 1.0 / np.asarray(v, dtype=float)
    y = np.asarray(y, dtype=float)
    part = w * (y - np.sum(w * y) / w.sum()) ** 2
    return part / part.sum() if part.sum() > 0 else np.full(y.size, 1.0 / y.size)


def prediction_interval(mean, se, tau2, k, level=0.95):
    """Interval (yr) that holds a new pair's true lag with probability ``level``.

    Notes
    -----
    ``mean +- t_{k-2} sqrt(tau2 + se^2)`` (Higgins, Thompson & Spiegelhalter 2009, Eq. 12);
    needs ``k >= 3`` pairs. Here ``se`` is the sd of the combined lag's Monte Carlo draws, so
    errors shared between pairs are in it.
    """
    if k < 3:
        return None
    half = t.ppf(0.5 + level / 2, k - 2) * np.sqrt(tau2 + se**2)
    return [float(mean - half), float(mean + half)]
