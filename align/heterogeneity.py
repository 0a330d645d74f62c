"""How much a set of lags disagree, beyond :mod:`align.synchrony`'s Cochran's Q,
DerSimonian-Laird variance and Q-profile interval: each pair's share of Q, and a prediction
interval for a new pair.

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
from scipy.stats import t


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


#: Why a between-pair sd has no interval (its Q-profile interval is empty).
NO_SPREAD_INTERVAL = ("no 95 % interval: the pairs agree more closely than their uncertainties "
                      "predict")


def spread_interval(heterogeneity, number):
    """The between-pair sd's 95 % Q-profile interval in words, ``number`` formatting each
    bound: ``"95 %: lo to hi"``, or why there is none."""
    bounds = heterogeneity.tau_ci95
    if bounds is None:
        return NO_SPREAD_INTERVAL
    return f"95 %: {number(bounds[0])} to {number(bounds[1])}"
