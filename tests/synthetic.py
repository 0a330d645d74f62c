"""Synthetic records with a known truth, shared by the calibration tests."""

from __future__ import annotations

import numpy as np

from align.record import build_record


def smooth_noise(rng, x, sd, length):
    """A smooth random function on ``x`` (sum of random Fourier modes, squared-exp spectrum)."""
    k = rng.normal(0.0, 1.0 / length, 24)
    phase = rng.uniform(0, 2 * np.pi, 24)
    return sd * np.sqrt(2.0 / 24) * np.cos(np.outer(x, k) + phase).sum(axis=1)


def ar1(rng, n, phi, sd=1.0):
    """Stationary AR(1) series with lag-1 coefficient ``phi`` and marginal sd ``sd``."""
    out = np.empty(n)
    out[0] = rng.normal(0.0, sd)
    eps = rng.normal(0.0, sd * np.sqrt(1.0 - phi**2), n)
    for i in range(1, n):
        out[i] = phi * out[i - 1] + eps[i]
    return out


def distorted_core(rng, n=400, span=(10_000.0, 12_000.0), wobble=0.3):
    """A core whose accumulation changes smoothly: returns (depth edges, true ages of edges)."""
    t = np.linspace(*span, 4001)
    rate = 0.02 * np.exp(smooth_noise(rng, t, wobble, 200.0))  # m per yr
    depth_t = np.concatenate([[0.0], np.cumsum(rate[:-1] * np.diff(t))])
    edges = np.linspace(depth_t[0], depth_t[-1], n + 1)
    return edges, np.interp(edges, depth_t, t)


def exact_reference(span=(9_000.0, 13_000.0)):
    """A reference record on the true timescale with no uncertainty (ages only)."""
    age = np.arange(span[0], span[1], 1.0) + 0.5
    return build_record(age=age, age_reference="b2k", proxies={"x": (np.zeros(age.size), {})},
                        attrs={"core": "truth"})


def spike_core(rng, event, age_error, *, name, timescale, kind=None, mce=None, sd=None,
               step=2.0, span=(10_000.0, 11_000.0)):
    """A core of ``step``-yr samples (true ages) holding a spike (40 noise sd, 3 samples) that
    begins in the sample whose true age interval holds ``event``.

    Its stated ages are the truth plus ``age_error(true_age)`` (the timescale's real error).
    ``mce`` (a function of true age) or ``sd`` (a number) is the uncertainty the record
    states; ``kind`` its ``timescale_kind``. Returns the record.
    """
    edges = np.arange(span[0], span[1] + step / 2, step)
    mid = 0.5 * (edges[1:] + edges[:-1])
    values = 10.0 + rng.normal(0.0, 1.0, mid.size)
    holding = np.searchsorted(edges, event) - 1
    values[holding:holding + 3] += 40.0
    stated = edges + age_error(edges)
    uncertainty = {}
    if mce is not None:
        uncertainty["age_mce"] = mce(mid)
    if sd is not None:
        uncertainty["age_sd"] = np.full(mid.size, float(sd))
    attrs = {"core": name, "timescale": timescale}
    if kind:
        attrs["timescale_kind"] = kind
    return build_record(age=0.5 * (stated[1:] + stated[:-1]),
                        age_bounds=np.column_stack([stated[:-1], stated[1:]]),
                        age_reference="b2k", proxies={"s": (values, {"units": "1"})},
                        attrs=attrs, **uncertainty)



def spike_in_samples(rng, step, amplitude, *, years=600, start=10_000, duration=(2, 5)):
    """A record of ``step``-yr samples (exact means of an annual series) holding a spike that
    begins at a known moment.

    Generator: annual values ``100 + N(0, 1)``, year ``k`` (an integer, b2k) covering the
    ages ``[k, k + 1]``. The anomalous deposit begins at the age ``T``, uniform over the middle
    third of the record (so uniformly random within its year and within its sample), and
    lasts ``d`` yr (``d`` uniform in ``duration``): each year gets the spike in proportion to
    the part of it inside ``[T - d, T]``. The spike's height is ``amplitude`` sd *of one
    sample* (``amplitude / sqrt(step)`` annual sd), so a sample it fills stands out alike at
    every step. Samples are the means of ``step`` consecutive years; their age bounds are
    the years' outer bounds. Returns ``(record, T)``.
    """
    annual = 100.0 + rng.normal(0.0, 1.0, years)  # index j: the year start + j
    onset = rng.uniform(start + years / 3, start + 2 * years / 3)
    d = rng.uniform(*duration)
    year = start + np.arange(years)
    inside = np.clip(np.minimum(year + 1, onset) - np.maximum(year, onset - d), 0.0, 1.0)
    annual += inside * amplitude / np.sqrt(step)
    n = years // step
    values = annual[:n * step].reshape(n, step).mean(axis=1)
    edges = start + step * np.arange(n + 1, dtype=float)
    return build_record(age=0.5 * (edges[1:] + edges[:-1]),
                        age_bounds=np.column_stack([edges[:-1], edges[1:]]),
                        age_reference="b2k",
                        proxies={"s": (values, {"units": "ng/g"})}), onset


def ou_age_error(rng, sd, scale, span=(9_900.0, 11_100.0), step=50.0):
    """An age-model error of a known age scale: an Ornstein-Uhlenbeck process (sd ``sd`` yr,
    correlation ``exp(-|dt| / scale)``) drawn exactly at knots ``step`` yr apart by its AR(1)
    recursion, linear between them (so the ages stay monotonic: the error's slope has sd
    ``sd sqrt(2 / (scale step))``); exact at the knots, slightly smoother between. Returns a
    function of true age."""
    t = np.arange(span[0], span[1] + step, step)
    rho = np.exp(-step / scale)
    from scipy.signal import lfilter

    shocks = rng.normal(0.0, sd * np.sqrt(1.0 - rho**2), t.size)
    shocks[0] = rng.normal(0.0, sd)
    path = lfilter([1.0], [1.0, -rho], shocks)
    return lambda age: np.interp(age, t, path)
