"""What marker kinds share: estimates from draws, windows, traces, and the noise-aware onset
bootstrap.

The kinds themselves (detection, Monte Carlo parts, figures, text) live in
:mod:`align.markers`, one module each; :func:`detect_marker` runs the kind a spec names.
"""

from __future__ import annotations

import functools

import numpy as np

from align.errors import InputError
from align.progress import steps
from align.markers.onset import NoiseModel
from align.noise import ar1_persistence, ar1_profile_loglik, persistence_time, simulate_ar1
from align.ramp import bootstrap_ramps, fit_ramp, ramp, ramps
from align.record import age_reference as reference_of
from align.record import with_age_reference
from align.schema_base import Estimate
from align.transforms import marker_variable

#: Pilot replicates that estimate the bias of the noise parameters.
PILOT = 100

#: Values of bootstrap replicates held at once (8 MB): long series are simulated and fitted
#: in chunks of rows, in the order one (draws, n) array would be drawn.
CHUNK_VALUES = 1_000_000


def estimate(draws):
    """Median, 68 % and 95 % central intervals and sd of a sample of draws."""
    draws = np.asarray(draws, dtype=float)
    q = np.percentile(draws, [2.5, 16.0, 50.0, 84.0, 97.5])
    return Estimate(median=float(q[2]), ci68=[float(q[1]), float(q[3])],
                    ci95=[float(q[0]), float(q[4])], sd=float(np.std(draws)))


def uniform_estimate(lo, hi):
    """The estimate of a value uniform over ``[lo, hi]`` (sd ``(hi - lo) / sqrt(12)``)."""
    h = hi - lo
    return Estimate(median=0.5 * (lo + hi), ci68=[lo + 0.16 * h, hi - 0.16 * h],
                    ci95=[lo + 0.025 * h, hi - 0.025 * h], sd=h / np.sqrt(12.0))


# --------------------------------------------------------------------------------------------
# windows


def prepare_window(record, variable, window, reference):
    """The record in the wanted reference and the window as ``[young, old]``."""
    check_proxy(record, variable)
    if reference_of(record) is None:
        raise InputError("the record has no timescale (depth only); tie it first",
                         source=record.attrs.get("source"), field="age")
    if reference is not None:
        record = with_age_reference(record, reference)
    bounds = record["age_bounds"].values
    lo, hi = float(bounds[:, 0].min()), float(bounds[:, 1].max())
    if window is None:
        return record, [lo, hi]
    young, old = check_window(window)
    if old < lo or young > hi:
        raise InputError(f"the window {young:g} to {old:g} lies outside the record "
                         f"({lo:g} to {hi:g} {reference_of(record)})",
                         source=record.attrs.get("source"), field="window")
    return record, [young, old]


def variable_units(record, variable):
    """The ``units`` and ``reference_scale`` of a variable, as marker fields."""
    attrs = record[variable].attrs
    return {"units": attrs.get("units"), "reference_scale": attrs.get("reference_scale")}


def check_window(window, field="window"):
    """A window as ``(young, old)``: two finite ages, the younger (smaller) first. A reversed
    window is refused, not swapped, so that a mistyped window is seen."""
    try:
        values = [float(v) for v in window]
    except (TypeError, ValueError):
        values = []
    if len(values) != 2 or not np.all(np.isfinite(values)) or values[0] == values[1]:
        raise InputError(f"a window is two different finite ages, young and old (got "
                         f"{window!r})", field=field)
    if values[0] > values[1]:
        raise InputError(f"a window is [young, old] (the smaller age first): got "
                         f"{values[0]:g},{values[1]:g}; did you mean {values[1]:g},"
                         f"{values[0]:g}?", field=field)
    return values[0], values[1]


def check_proxy(record, variable):
    """Refuse a ``variable`` that is not one of the record's proxies (absent, or a coordinate,
    bounds or timescale variable such as the two-column ``age_bounds``)."""
    from align.record import proxy_variables

    if variable in proxy_variables(record):
        return
    proxies = ", ".join(proxy_variables(record)) or "none"
    what = ("no such variable" if variable not in record.variables
            else "not a proxy variable (it has dimensions "
                 f"{', '.join(map(str, record[variable].dims))})")
    raise InputError(f"{what}; the proxies are {proxies}", source=record.attrs.get("source"),
                     field=variable)


def trace_list(values):
    """Floats as a list, None where missing (one vectorised conversion, no Python loop)."""
    values = np.asarray(values, dtype=float)
    out = values.astype(object)
    out[~np.isfinite(values)] = None
    return out.tolist()


#: Samples a stored trace keeps at most (a figure is a few hundred to a few thousand pixels
#: wide, common practice for line plots of long series).
TRACE_POINTS = 4000


def trace_points(values, limit=TRACE_POINTS):
    """Positions of the samples a figure of ``values`` needs: all of them up to ``limit``,
    else the first, the last and each bucket's smallest and largest value.

    Parameters
    ----------
    values : numpy.ndarray (n,)
        Sample values in plotting order; NaN is missing.
    limit : int
        Most positions returned (at least 4).

    Returns
    -------
    numpy.ndarray of int
        Increasing positions into ``values``.

    Notes
    -----
    Min/max decimation: the ``n`` samples are cut into ``limit // 2 - 1`` runs of equal
    length and each run keeps the positions of its extremes, so a one-sample spike survives
    and a line through the kept points has the envelope of the full series. A run with only
    missing values keeps its first position (a gap stays a gap).
    """
    values = np.asarray(values, dtype=float)
    n = values.size
    if n <= limit:
        return np.arange(n)
    runs = max(limit // 2 - 1, 1)
    size = -(-n // runs)
    padded = np.full(runs * size, np.nan)
    padded[:n] = values
    rows = padded.reshape(runs, size)
    starts = np.arange(runs) * size
    low = starts + np.argmin(np.where(np.isnan(rows), np.inf, rows), axis=1)
    high = starts + np.argmax(np.where(np.isnan(rows), -np.inf, rows), axis=1)
    kept = np.unique(np.concatenate([[0, n - 1], low, high]))
    return kept[kept < n]


def onset_bootstrap(t, x, w, sign, draws, rng):
    """Ramp fit and AR(1) parametric bootstrap of its corners and levels.

    Returns the (finite) bootstrap rows ``t1, t2, x1, x2``, the fit and its noise model.
    Replicates are simulated and refitted ``CHUNK_VALUES // n`` rows at a time, so memory
    does not grow as ``draws x n``; the draws are the same as in one block.

    The least-squares ramp's residuals give the AR(1) persistence, bias-corrected by a pilot
    (:func:`noise_parameters`); the ramp is refitted under that persistence (generalised
    least squares, :func:`align.ramp.fit_ramp`), its residuals give the noise model, and
    each replicate is refitted under the same persistence. Under red noise the ordinary
    least-squares ramp often takes a noise excursion beside a short transition into a much
    longer ramp and dates its onset too old; the refit mostly avoids that.
    """
    check_draws(draws, t.size)
    tau = 0.0
    for _ in range(2):  # least squares, then refitted under the noise its residuals show
        fit = fit_ramp(t, x, w, sign, tau)
        fitted = ramp(t, fit.t1, fit.t2, fit.x1, fit.x2)
        resid = x - fitted
        a = ar1_persistence(t, resid)
        sd = residual_sd(resid, w, a)
        a, sd, a_draws, sd_draws = noise_parameters(t, w, fitted, a, sd, sign, draws, rng)
        tau = persistence_time(t, a)
    tau_draws = persistence_time(t, a_draws)
    rows = max(1, CHUNK_VALUES // t.size)  # replicates simulated and fitted at a time
    progress = steps("onset bootstrap", draws, "replicates") if draws > rows else None
    chunks = []
    for s in range(0, draws, rows):
        chunks.append(bootstrap_ramps(t, w, fitted, simulate_ar1(
            t, tau_draws[s:s + rows], sd_draws[s:s + rows], min(rows, draws - s), rng), sign,
            tau))
        if progress is not None:
            progress.step(len(chunks[-1]))
    samples = np.vstack(chunks)
    samples = samples[np.all(np.isfinite(samples), axis=1)]
    return samples, fit, NoiseModel(sd=sd, ar1=a, tau=tau)


#: Persistence times of the no-transition surrogates behind a step's p-value, as fractions
#: of the window (log-spaced; white noise is added), and surrogates per persistence time.
NULL_TAUS = np.geomspace(0.01, 3.0, 12)
NULL_PER_TAU = 400
#: Surrogates nearest the record in lag-1 autocorrelation that a step is compared with.
NULL_NEIGHBOURS = 200
#: Longer records are tested on means of consecutive samples (:func:`transition_p`).
NULL_MAX_SAMPLES = 500


def transition_p(t, x, sign):
    """P-value of a fitted step under red noise with no transition.

    Parameters
    ----------
    t : numpy.ndarray (n,)
        Increasing forward times.
    x : numpy.ndarray (n,) or (B, n)
        Values: one series or many on the same axis.
    sign : {1, -1, 0}

    Returns
    -------
    float or numpy.ndarray (B,)
        ``(1 + k) / (1 + NULL_NEIGHBOURS)``, ``k`` the surrogates (among those about as
        persistent as the record) whose statistic is at least the record's.

    Notes
    -----
    The statistic is the log-likelihood ratio of the fitted ramp against a constant, both
    with AR(1) noise whose coefficient and variance are profiled out
    (:func:`align.noise.ar1_profile_loglik`; the ramp is the least-squares one, and every
    sample counts once). It does not depend on the noise's scale, and less on its persistence
    ``tau`` than the step itself (a ramp fitted to red noise always finds a step, the larger
    the redder), but still some. The fitted ramp's residuals cannot tell ``tau`` (the ramp
    soaks up the slow part of the noise), so the test conditions on the AR(1) coefficient
    ``r`` of the demeaned series, which estimates ``tau`` when there is no transition: AR(1)
    surrogates, with ``tau`` log-uniform over ``NULL_TAUS`` times the window and white noise,
    are fitted like the record, and among the ``NULL_NEIGHBOURS`` surrogates whose
    ``ln(1 - r)`` is nearest the record's, the share with a ratio at least the record's is
    the p-value (a conditional parametric bootstrap test; Efron & Tibshirani 1993,
    doi:10.1201/9780429246593, key ``efron1993``). The price is power: a real transition
    raises ``r`` too, so it is compared with redder surrogates. The surrogates are drawn on
    an evenly spaced axis of as many samples as the record, with equal weights (persistence
    and window in units of the mean spacing), from a seed fixed by the sample count and
    direction, so records with as many samples share them; an uneven axis is thereby
    approximated by an even one. A record of more than ``NULL_MAX_SAMPLES`` samples is
    tested on the means of that many runs of consecutive samples: a step and red noise on
    the window's scale survive the averaging, and the surrogates' cost and memory stay those
    of ``NULL_MAX_SAMPLES`` samples (at 20,000 samples they would take 4 GB).
    """
    t, series = _binned(t, np.atleast_2d(x), NULL_MAX_SAMPLES)
    t_null, r_null = _null_steps(t.size, int(sign))
    stat, r = _step_statistic(t, np.ones(t.size), series, sign)
    near = np.argsort(np.abs(np.log1p(-r_null)[None, :] - np.log1p(-r)[:, None]), axis=1,
                      kind="stable")[:, :NULL_NEIGHBOURS]
    p = (1 + np.sum(t_null[near] >= stat[:, None], axis=1)) / (1 + near.shape[1])
    return float(p[0]) if np.ndim(x) == 1 else p


def _binned(t, series, most):
    """``t`` and the columns of ``series`` averaged over at most ``most`` runs of consecutive
    samples of (nearly) equal counts; unchanged when there are no more samples than that."""
    if t.size <= most:
        return t, series
    starts = np.linspace(0, t.size, most + 1).round().astype(int)[:-1]
    counts = np.diff(np.append(starts, t.size))
    return (np.add.reduceat(t, starts) / counts,
            np.add.reduceat(series, starts, axis=1) / counts)


def _step_statistic(t, w, series, sign):
    """Log-likelihood ratio of a ramp under AR(1) noise, and the lag-1 coefficient of the
    demeaned series, per series."""
    fits = bootstrap_ramps(t, w, np.zeros_like(t), series, sign)
    ok = np.all(np.isfinite(fits), axis=1)
    fits = np.where(ok[:, None], fits, [t[0], t[-1], 0.0, 0.0])
    demeaned = series - series.mean(axis=1, keepdims=True)
    ratio = ar1_profile_loglik(t, series - ramps(t, fits)) - ar1_profile_loglik(t, demeaned)
    return np.where(ok, ratio, -np.inf), np.atleast_1d(ar1_persistence(t, series))


@functools.lru_cache(maxsize=32)
def _null_steps(n, sign):
    """Statistics and lag-1 coefficients of no-transition surrogates of ``n`` samples."""
    t = np.arange(float(n))
    rng = np.random.default_rng([n, sign % 3, 13])
    taus = np.repeat(np.concatenate([[0.0], NULL_TAUS * (n - 1.0)]), NULL_PER_TAU)
    stat, r = _step_statistic(t, np.ones(n), simulate_ar1(t, taus, 1.0, taus.size, rng), sign)
    stat.flags.writeable = r.flags.writeable = False
    return stat, r


def check_draws(draws, samples):
    """Draws times samples in the window against the ``draws_x_samples`` limit."""
    from align import limits

    limits.check("draws_x_samples", float(draws) * samples, field="draws",
                 detail=f" ({draws:,} draws x {samples} samples)")


def noise_parameters(t, w, fitted, a, sd, sign, draws, rng):
    """Bias-corrected noise parameters, and per-replicate draws that carry their uncertainty.

    A pilot of ``PILOT`` series is simulated with the estimates, refitted and re-estimated.
    The mean error corrects the estimates (additively for the AR(1) coefficient, by ratio
    for the sd: bootstrap bias correction, Efron & Tibshirani 1993, ch. 10); the pilot's
    scatter, mirrored about the corrected values, gives each replicate of the main bootstrap
    its own noise parameters, so that not knowing them exactly widens the intervals as it
    should.
    """
    noise = simulate_ar1(t, persistence_time(t, a), sd, PILOT, rng)
    params = bootstrap_ramps(t, w, fitted, noise, sign, persistence_time(t, a))
    ok = np.all(np.isfinite(params), axis=1)
    if ok.sum() < PILOT // 2 or sd == 0:
        return a, sd, np.full(draws, a), np.full(draws, sd)
    resid = fitted[None, :] + noise[ok] - ramps(t, params[ok])
    a_star = np.atleast_1d(ar1_persistence(t, resid))
    sd_star = np.atleast_1d(residual_sd(resid, w, a_star))
    a_c = float(np.clip(2.0 * a - a_star.mean(), 0.0, 0.999))
    sd_c = float(sd * sd / sd_star.mean()) if sd_star.mean() > 0 else sd
    pick = rng.integers(0, a_star.size, draws)
    a_draws = np.clip(a_c + a_star.mean() - a_star[pick], 0.0, 0.999)
    sd_draws = sd_c * sd_star.mean() / np.maximum(sd_star[pick], 1e-12 * sd_c)
    return a_c, sd_c, a_draws, sd_draws


def residual_sd(resid, w, a, fitted_levels=2):
    """Noise sd from ramp residuals, corrected for what the fit absorbed of red noise.

    Parameters
    ----------
    resid : numpy.ndarray (n,) or (B, n)
        Residuals (one series or many).
    w : numpy.ndarray (n,)
        Weights.
    a : float or numpy.ndarray (B,)
        AR(1) coefficient(s) at the mean spacing.
    fitted_levels : int
        Parameters fitted like means of the noise (the two levels).

    Returns
    -------
    float or numpy.ndarray (B,)
        ``sqrt(s_w^2 n_eff / (n_eff - k))`` with the weighted residual variance ``s_w^2``,
        ``n_eff = n (1 - a) / (1 + a)`` the effective sample size of AR(1) noise (Bayley &
        Hammersley 1946) and ``k = fitted_levels``: a fitted level soaks up the slow part of
        red noise, so the residual variance underestimates the noise variance more the
        redder the noise.

    References
    ----------
    Bayley, G. V. and Hammersley, J. M. (1946), J. R. Stat. Soc. Suppl. 8, 184-197,
    doi:10.2307/2983560.
    """
    n = resid.shape[-1]
    var = (resid**2 @ w) / w.sum()
    n_eff = np.maximum(n * (1.0 - np.asarray(a)) / (1.0 + np.asarray(a)), fitted_levels + 1.0)
    sd = np.sqrt(var * n_eff / (n_eff - fitted_levels))
    return float(sd) if np.ndim(sd) == 0 else sd




def detect_marker(record, spec, *, seed=None, age_reference=None):
    """Detect the marker that ``spec`` (a marker spec, or its dict) describes.

    The options are the spec's kind-specific fields; ``seed`` feeds kinds that draw.
    """
    from align.markers import kind_of

    data = spec if isinstance(spec, dict) else spec.model_dump()
    kind = kind_of(data["kind"])
    known = set(kind.options.model_fields) - {"kind"}
    options = {k: v for k, v in data.items() if k in known and v is not None}
    wrong = sorted(set(data) - known - {"kind", "record", "variable", "window", "mapping",
                                        "transform"})
    if wrong:
        raise InputError(f"{wrong[0]!r} is not an option of an {kind.name} marker "
                         f"(options: {', '.join(sorted(known))})", field=wrong[0])
    if not kind.on_record:
        return kind.detect(None, None, None, options, seed=seed, age_reference=age_reference)
    record, variable = marker_variable(record, data["variable"], data.get("transform"))
    return kind.detect(record, variable, data.get("window"), options, seed=seed,
                       age_reference=age_reference)
