"""Markers: events (spikes) and transition onsets, each with its own uncertainty.

An *event* is the moment an event signal begins: the oldest sample of the first anomalous run
in forward time. Its age is known only to within that sample's age interval, so its
distribution is uniform over it (sd ``h / sqrt(12)``). An *onset* is the older end of a ramp
fitted to a transition; its uncertainty comes from a parametric AR(1) bootstrap (or the
Bayesian ramp of Erhardt et al. 2019) and is never finer than the sampling. Timescale error
is kept separate; the lag stage adds it with the right correlations.
"""

from __future__ import annotations

import numpy as np

from align.anomaly import robust_z, runs_above
from align.errors import InputError
from align.noise import ar1_persistence, persistence_time, simulate_ar1
from align.provenance import provenance, record_input, resolve_seed
from align.ramp import bootstrap_ramps, fit_ramp, ramp, ramps
from align.record import age_reference as reference_of
from align.record import record_name, with_age_reference
from align.schema import (Estimate, EventCandidate, EventResult, Levels, MarkerSample,
                          NoiseModel, OnsetResult, Trace)

#: Default running-median span of the event baseline, in median sample intervals.
BASELINE_SAMPLES = 25
#: Points on the age axis at which a fitted ramp's uncertainty band is drawn.
BAND_POINTS = 200
#: Draws that outline a fitted ramp's 95 % band in figures.
BAND_DRAWS = 400
#: Pilot replicates that estimate the bias of the noise parameters.
PILOT = 100
METHODS = ("ramp", "bayes")
DIRECTIONS = ("auto", "up", "down")


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


def _prepared(record, variable, window, reference):
    """The record in the wanted reference and the window as ``[young, old]``."""
    if variable not in record:
        raise InputError("no such variable", source=record.attrs.get("source"), field=variable)
    if reference_of(record) is None:
        raise InputError("the record has no timescale (depth only); tie it first",
                         source=record.attrs.get("source"), field="age")
    if reference is not None:
        record = with_age_reference(record, reference)
    bounds = record["age_bounds"].values
    lo, hi = float(bounds[:, 0].min()), float(bounds[:, 1].max())
    if window is None:
        return record, [lo, hi]
    window = [float(v) for v in window]
    if len(window) != 2 or not np.all(np.isfinite(window)) or window[0] == window[1]:
        raise InputError("a window is two different ages, young and old", field="window")
    young, old = sorted(window)
    if old < lo or young > hi:
        raise InputError(f"the window {young:g} to {old:g} lies outside the record "
                         f"({lo:g} to {hi:g} {reference_of(record)})",
                         source=record.attrs.get("source"), field="window")
    return record, [young, old]


def _trace_lists(values):
    return [None if not np.isfinite(v) else float(v) for v in values]


# --------------------------------------------------------------------------------------------
# events


def detect_event(record, variable, window=None, *, threshold=5.0, baseline_years=None,
                 pick="first", direction="up", age_reference=None):
    """Find where an event signal (a spike) begins.

    Parameters
    ----------
    record : xarray.Dataset
    variable : str
    window : [young, old], optional
        Ages to search (the record's reference, or ``age_reference``); default the record.
    threshold : float
        Robust z-score (running-median baseline, MAD x 1.4826 scale) a run must exceed.
    baseline_years : float, optional
        Running-median span (default 25 median sample intervals).
    pick : {"first", "peak"}
        The oldest sample of the first run in forward time, or that run's peak sample.
    direction : {"up", "down"}
        Spikes above or dips below the baseline.
    age_reference : {"b2k", "BP"}, optional
        Reference of the window and the result (default: the record's).

    Returns
    -------
    EventResult
        ``event`` uniform over the picked sample's age interval (yr); every candidate run
        with its age span and peak z; ``found = False`` with a message when no run exceeds
        the threshold (a normal result, not an error).
    """
    if pick not in ("first", "peak"):
        raise InputError("pick must be 'first' or 'peak'", field="pick")
    if direction not in ("up", "down"):
        raise InputError("direction must be 'up' or 'down' for events", field="direction")
    if not (np.isfinite(threshold) and threshold > 0):
        raise InputError("threshold must be a positive number", field="threshold")
    record, window = _prepared(record, variable, window, age_reference)
    age = record["age"].values
    bounds = record["age_bounds"].values
    width = bounds[:, 1] - bounds[:, 0]
    span = float(baseline_years) if baseline_years else BASELINE_SAMPLES * float(np.median(width))
    if not span > 0:
        raise InputError("baseline_years must be positive", field="baseline_years")
    near = (age >= window[0] - span / 2) & (age <= window[1] + span / 2)
    inside = np.flatnonzero((age >= window[0]) & (age <= window[1]))
    if inside.size < 5:
        raise InputError(f"only {inside.size} samples in the window", field="window")
    values = record[variable].values.astype(float)
    sign = 1.0 if direction == "up" else -1.0
    near_idx = np.flatnonzero(near)
    z_near, base_near, scale = robust_z(age[near_idx], sign * values[near_idx], span)
    z = np.full(age.size, np.nan)
    z[near_idx] = z_near
    baseline = np.full(age.size, np.nan)
    baseline[near_idx] = sign * base_near
    runs = [(inside[a], inside[b]) for a, b in runs_above(z[inside], threshold)]
    depth = record["depth"].values if "depth" in record.coords else None
    candidates = [EventCandidate(
        age_span=[float(bounds[a:b + 1, 0].min()), float(bounds[a:b + 1, 1].max())],
        depth_span=None if depth is None else [float(depth[a]), float(depth[b])],
        peak_z=float(np.nanmax(z[a:b + 1])), n_samples=int(b - a + 1)) for a, b in runs]
    trace = Trace(age_top=bounds[inside, 0].tolist(), age_bottom=bounds[inside, 1].tolist(),
                  value=_trace_lists(values[inside]), curve_age=age[inside].tolist(),
                  curve=_trace_lists(baseline[inside]),
                  threshold=_trace_lists(baseline[inside] + sign * threshold * scale))
    common = dict(record=record_name(record), variable=variable, window=window,
                  age_reference=reference_of(record),
                  method=(f"robust z-score > {threshold:g} (running median over {span:g} yr, "
                          "MAD x 1.4826), first anomalous run in forward time"),
                  candidates=candidates, threshold=float(threshold), baseline_years=span,
                  scale=float(scale), pick=pick, direction=direction, trace=trace,
                  provenance=provenance(inputs=[record_input(record, "record")], parameters={
                      "variable": variable, "window": window, "threshold": threshold,
                      "baseline_years": span, "pick": pick, "direction": direction}))
    if not runs:
        return EventResult(found=False, message=f"no event found: no sample in the window "
                                                f"exceeds {threshold:g} robust sd", **common)
    first, last = max(runs, key=lambda run: age[run[0]])  # the oldest run comes first
    i = last if pick == "first" else first + int(np.nanargmax(z[first:last + 1]))
    lo, hi = float(bounds[i, 0]), float(bounds[i, 1])
    note = (f"{len(runs)} candidate runs; the oldest is taken" if len(runs) > 1
            else "one anomalous run")
    return EventResult(
        found=True, message=f"event found ({note})", event=uniform_estimate(lo, hi),
        sample=MarkerSample(index=int(i), age_interval=[lo, hi],
                            depth=None if depth is None else float(depth[i]),
                            value=float(values[i]), z=float(z[i])),
        sample_interval=hi - lo, depth=None if depth is None else float(depth[i]), **common)


# --------------------------------------------------------------------------------------------
# onsets


def detect_onset(record, variable, window, *, direction="auto", method="ramp", draws=2000,
                 seed=None, age_reference=None):
    """Fit the onset of a transition and its uncertainty.

    Parameters
    ----------
    record : xarray.Dataset
    variable : str
    window : [young, old]
        Ages holding the transition with some of both plateaus.
    direction : {"auto", "up", "down"}
        Rising, falling, or whichever fits better.
    method : {"ramp", "bayes"}
        Ramp regression with an AR(1) parametric bootstrap (default), or the Bayesian linear
        ramp with AR(1) noise of Erhardt et al. (2019), sampled by MCMC.
    draws : int
        Bootstrap replicates or posterior draws.
    seed : int, optional
        Drawn and recorded when None.
    age_reference : {"b2k", "BP"}, optional
        Reference of the window and the result (default: the record's).

    Returns
    -------
    OnsetResult
        Onset, midpoint and end (ages, yr), duration (yr), levels and amplitude (units of the
        variable), the noise model, ``clear_transition`` with a reason when the step is not
        larger than twice the noise sd or a corner sits at the window edge; the onset draws
        are kept for the lag stage (not serialised).

    Notes
    -----
    The fit runs in forward time ``t = -age`` with each sample weighted by its age interval
    (so that densely sampled stretches do not outweigh sparse ones). The bootstrap adds AR(1)
    noise with the residuals' sd and persistence (:func:`align.noise.ar1_persistence`) to the
    fitted ramp and refits; both noise parameters are first bias-corrected by a pilot
    bootstrap (a fitted ramp soaks up part of red noise, so residuals look whiter and quieter
    than the noise was); each draw of the onset (and end) is then displaced uniformly within the
    age interval of the sample at that point, because a fit cannot place a corner more
    finely than the sampling.
    """
    if method not in METHODS:
        raise InputError(f"method must be one of {', '.join(METHODS)}", field="method")
    if direction not in DIRECTIONS:
        raise InputError(f"direction must be one of {', '.join(DIRECTIONS)}", field="direction")
    if not (isinstance(draws, (int, np.integer)) and draws >= 100):
        raise InputError("draws must be an integer of at least 100", field="draws")
    if window is None:
        raise InputError("an onset needs a window (young, old)", field="window")
    seed = resolve_seed(seed)
    record, window = _prepared(record, variable, window, age_reference)
    age = record["age"].values
    bounds = record["age_bounds"].values
    values = record[variable].values.astype(float)
    keep = np.flatnonzero((age >= window[0]) & (age <= window[1]) & np.isfinite(values))
    if keep.size < 8:
        raise InputError(f"only {keep.size} samples with values in the window; an onset fit "
                         "needs at least 8", field="window")
    order = keep[::-1]  # forward time: oldest first
    t, x = -age[order], values[order]
    width = bounds[order, 1] - bounds[order, 0]
    w = width / width.mean()
    sign = {"auto": 0, "up": 1, "down": -1}[direction]
    rng = np.random.default_rng(seed)
    if method == "ramp":
        samples, fit, noise = _bootstrap(t, x, w, sign, draws, rng)
    else:
        from align.bayes import posterior_ramps

        samples, fit, noise = posterior_ramps(t, x, w, sign, draws, rng)
    # resolution: a corner is placed no more finely than the sample interval where it sits
    h_onset = np.interp(samples[:, 0], t, width)
    h_end = np.interp(samples[:, 1], t, width)
    onset_t = samples[:, 0] + rng.uniform(-0.5, 0.5, len(samples)) * h_onset
    end_t = np.maximum(samples[:, 1] + rng.uniform(-0.5, 0.5, len(samples)) * h_end, onset_t)
    onset_age, end_age = -onset_t, -end_t
    amplitude = samples[:, 3] - samples[:, 2]
    clear, reason = _clarity(fit, noise)
    depth = record["depth"].values if "depth" in record.coords else None
    result = OnsetResult(
        record=record_name(record), variable=variable, window=window,
        age_reference=reference_of(record),
        method=_method_text(method, noise), sample_interval=float(np.interp(fit.t1, t, width)),
        depth=None if depth is None else float(np.interp(-fit.t1, age, depth)),
        onset=estimate(onset_age), midpoint=estimate(0.5 * (onset_age + end_age)),
        end=estimate(end_age), duration=estimate(onset_age - end_age),
        levels=Levels(before=estimate(samples[:, 2]), after=estimate(samples[:, 3])),
        amplitude=estimate(amplitude), noise=noise,
        direction="up" if fit.x2 > fit.x1 else "down", clear_transition=clear, reason=reason,
        draws_used=int(len(samples)),
        trace=_onset_trace(bounds[keep], values[keep], window, fit, samples),
        provenance=provenance(inputs=[record_input(record, "record")], parameters={
            "variable": variable, "window": window, "direction": direction, "method": method,
            "draws": draws}, seed=seed))
    result._draws = onset_age
    result._fit_draws = -samples[:, 0]
    return result


def _bootstrap(t, x, w, sign, draws, rng):
    fit = fit_ramp(t, x, w, sign)
    fitted = ramp(t, fit.t1, fit.t2, fit.x1, fit.x2)
    resid = x - fitted
    a = ar1_persistence(t, resid)
    sd = residual_sd(resid, w, a)
    a, sd, a_draws, sd_draws = _noise_parameters(t, w, fitted, a, sd, sign, draws, rng)
    tau_draws = persistence_time(t, a_draws)
    samples = bootstrap_ramps(t, w, fitted, simulate_ar1(t, tau_draws, sd_draws, draws, rng),
                              sign)
    samples = samples[np.all(np.isfinite(samples), axis=1)]
    return samples, fit, NoiseModel(sd=sd, ar1=a, tau=persistence_time(t, a))


def _noise_parameters(t, w, fitted, a, sd, sign, draws, rng):
    """Bias-corrected noise parameters, and per-replicate draws that carry their uncertainty.

    A pilot of ``PILOT`` series is simulated with the estimates, refitted and re-estimated.
    The mean error corrects the estimates (additively for the AR(1) coefficient, by ratio
    for the sd: bootstrap bias correction, Efron & Tibshirani 1993, ch. 10); the pilot's
    scatter, mirrored about the corrected values, gives each replicate of the main bootstrap
    its own noise parameters, so that not knowing them exactly widens the intervals as it
    should.
    """
    noise = simulate_ar1(t, persistence_time(t, a), sd, PILOT, rng)
    params = bootstrap_ramps(t, w, fitted, noise, sign)
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


def _clarity(fit, noise):
    step = abs(fit.x2 - fit.x1)
    if step <= 2.0 * noise.sd:
        return False, (f"no clear transition: the step ({step:.3g}) is not larger than twice "
                       f"the noise sd ({noise.sd:.3g})")
    if fit.edge:
        return False, ("no clear transition: a corner of the fitted ramp sits at the window "
                       "edge; widen the window to include both plateaus")
    return True, None


def _method_text(method, noise):
    if method == "ramp":
        return ("ramp regression (Mudelsee 2000) in forward time, levels by weighted least "
                "squares, corners by exhaustive search over the samples then continuous "
                "refinement; AR(1) parametric bootstrap on the irregular axis (tau "
                f"{noise.tau:.3g} yr, bias-corrected), replicates searched coarse-to-fine; "
                "corners displaced uniformly within their sample interval")
    return ("Bayesian linear ramp with AR(1) noise (Erhardt et al. 2019), MCMC (emcee); "
            "corners displaced uniformly within their sample interval")


def _onset_trace(bounds, values, window, fit, samples):
    grid = np.linspace(window[1], window[0], BAND_POINTS)  # old to young
    curves = ramps(-grid, samples[:BAND_DRAWS])
    lo, hi = np.percentile(curves, [2.5, 97.5], axis=0)
    return Trace(age_top=bounds[:, 0].tolist(), age_bottom=bounds[:, 1].tolist(),
                 value=_trace_lists(values), curve_age=grid.tolist(),
                 curve=ramp(-grid, fit.t1, fit.t2, fit.x1, fit.x2).tolist(),
                 band_low=lo.tolist(), band_high=hi.tolist())


#: Options a marker spec may carry, by kind.
MARKER_OPTIONS = {"event": ("threshold", "baseline_years", "pick", "direction"),
                  "onset": ("direction", "method", "draws")}


def detect_marker(record, spec, *, seed=None, age_reference=None):
    """Detect the marker a request describes (``spec``: kind, variable, window, options)."""
    options = {k: v for k, v in spec.items() if k not in ("kind", "record", "variable",
                                                          "window", "mapping")
               and v is not None}
    wrong = sorted(set(options) - set(MARKER_OPTIONS[spec["kind"]]))
    if wrong:
        raise InputError(f"{wrong[0]!r} is not an option of an {spec['kind']} marker "
                         f"(options: {', '.join(MARKER_OPTIONS[spec['kind']])})", field=wrong[0])
    if spec["kind"] == "event":
        return detect_event(record, spec["variable"], spec["window"],
                            age_reference=age_reference, **options)
    return detect_onset(record, spec["variable"], spec["window"], seed=seed,
                        age_reference=age_reference, **options)
