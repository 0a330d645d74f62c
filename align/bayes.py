"""The Bayesian linear ramp with AR(1) noise (Erhardt et al. 2019), sampled by MCMC.

Model in forward time ``t``: ``x(t) = ramp(t; t1, t2, x1, x2) + e(t)`` with ``e`` an AR(1)
process on the irregular axis, ``e_i | e_{i-1} ~ N(a_i e_{i-1}, sigma^2 (1 - a_i^2))``,
``a_i = exp(-(t_i - t_{i-1}) / tau)``. Priors (stated choices, weakly informative): the onset
uniform over the window, the duration uniform between 0 and the window length, flat levels,
``log sigma`` uniform over four decades around the data's sd, ``log tau`` uniform from a tenth
of the shortest spacing to the window length. Sampled with the affine-invariant ensemble
sampler of Goodman & Weare (2010) as implemented in emcee (Foreman-Mackey et al. 2013).

References
----------
Erhardt, T. et al. (2019), Clim. Past 15, 811-825, doi:10.5194/cp-15-811-2019.
Goodman, J. and Weare, J. (2010), Commun. Appl. Math. Comput. Sci. 5, 65-80,
doi:10.2140/camcos.2010.5.65.
Foreman-Mackey, D. et al. (2013), PASP 125, 306-312, doi:10.1086/670067.
"""

from __future__ import annotations

import emcee
import numpy as np

from align.ramp import fit_ramp, ramps
from align.markers.onset import NoiseModel

WALKERS = 32
BURN = 1000
THIN = 10


def log_posterior(theta, t, x, sign, bounds):
    """Log posterior of ramps for a batch of walkers.

    Parameters
    ----------
    theta : numpy.ndarray (W, 6)
        ``t1, duration, x1, x2, log sigma, log tau`` per walker.
    t, x : numpy.ndarray (n,)
        Forward times and values.
    sign : {1, -1, 0}
        Required direction of the step (0: either).
    bounds : dict
        Prior limits: ``t``, ``log_sigma``, ``log_tau`` as (low, high).

    Returns
    -------
    numpy.ndarray (W,)
        Log posterior up to a constant (``-inf`` outside the prior).
    """
    t1, dur, x1, x2, log_s, log_tau = theta.T
    t2 = t1 + dur
    inside = ((t1 >= bounds["t"][0]) & (t2 <= bounds["t"][1]) & (dur >= 0)
              & (log_s > bounds["log_sigma"][0]) & (log_s < bounds["log_sigma"][1])
              & (log_tau > bounds["log_tau"][0]) & (log_tau < bounds["log_tau"][1]))
    if sign:
        inside &= (x2 - x1) * sign > 0
    out = np.full(theta.shape[0], -np.inf)
    if not inside.any():
        return out
    params = np.column_stack([t1, t2, x1, x2])[inside]
    e = x[None, :] - ramps(t, params)
    sigma = np.exp(log_s[inside])[:, None]
    a = np.exp(-np.diff(t)[None, :] / np.exp(log_tau[inside])[:, None])
    var = sigma**2 * (1.0 - a**2)
    innov = e[:, 1:] - a * e[:, :-1]
    ll = (-0.5 * (e[:, 0] / sigma[:, 0]) ** 2 - np.log(sigma[:, 0])
          - 0.5 * np.sum(innov**2 / var + np.log(var), axis=1))
    out[inside] = ll
    return out


def posterior_ramps(t, x, w, sign, draws, rng):
    """Posterior draws of the ramp corners and levels.

    Parameters
    ----------
    t, x : numpy.ndarray
        Forward times (increasing) and values.
    w : numpy.ndarray
        Sample weights; used only for the least-squares start (the likelihood counts every
        sample once).
    sign : {1, -1, 0}
    draws : int
    rng : numpy.random.Generator

    Returns
    -------
    samples : numpy.ndarray (draws, 4)
        ``t1, t2, x1, x2``.
    fit : align.ramp.RampFit
        The least-squares fit the chains start from (used for the clarity check and figure).
    noise : NoiseModel
        Posterior medians of sigma and tau.
    """
    from align.detect import check_draws

    check_draws(draws, t.size)
    fit = fit_ramp(t, x, w, sign)
    span = t[-1] - t[0]
    sd = float(np.std(x)) or 1.0
    bounds = {"t": (t[0], t[-1]), "log_sigma": (np.log(sd) - 4.6, np.log(sd) + 2.3),
              "log_tau": (np.log(np.diff(t).min() / 10.0), np.log(span))}
    start = np.array([fit.t1, max(fit.t2 - fit.t1, 1e-3 * span), fit.x1, fit.x2,
                      np.log(sd / 2), np.log(np.diff(t).mean())])
    spread = np.array([0.01 * span, 0.01 * span, 0.01 * sd, 0.01 * sd, 0.01, 0.01])
    p0 = start + spread * rng.standard_normal((WALKERS, 6))
    p0[:, 1] = np.abs(p0[:, 1])
    sampler = emcee.EnsembleSampler(WALKERS, 6, log_posterior, vectorize=True,
                                    args=(t, x, int(sign), bounds))
    sampler.random_state = np.random.RandomState(int(rng.integers(2**31))).get_state()
    steps = BURN + THIN * int(np.ceil(draws / WALKERS))
    sampler.run_mcmc(p0, steps, progress=False)
    chain = sampler.get_chain(discard=BURN, thin=THIN, flat=True)[-draws:]
    samples = np.column_stack([chain[:, 0], chain[:, 0] + chain[:, 1], chain[:, 2], chain[:, 3]])
    tau = float(np.exp(np.median(chain[:, 5])))
    noise = NoiseModel(sd=float(np.exp(np.median(chain[:, 4]))),
                       ar1=float(np.exp(-np.diff(t).mean() / tau)), tau=tau,
                       model="AR(1) on the irregular time axis (posterior median)")
    return samples, fit, noise
