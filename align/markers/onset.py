"""Onsets: the start, in forward time, of a transition (the older end of a fitted ramp).

The ramp is fitted by ramp-function regression (Mudelsee 2000) with an AR(1) parametric
bootstrap, or by the Bayesian linear ramp with AR(1) noise (Erhardt et al. 2019); either way
the onset's uncertainty is never finer than the sampling. Timescale error is kept separate;
the lag stage adds it with the right correlations.
"""

from __future__ import annotations

from typing import Literal

import numpy as np
from pydantic import Field

from align.choices import (CLEAR_TRANSITION_RATE, DEFAULT_ONSET_DIRECTION,
                           DEFAULT_ONSET_DRAWS, DEFAULT_ONSET_METHOD, DEFAULT_ONSET_POSITION,
                           EDGE_SHARE, LONG_RAMP_SHARE, LOW_SNR, MAX_ONSET_DRAWS,
                           MIN_ONSET_DRAWS, RAMP_RATIO, EventDirection, OnsetDirection,
                           OnsetFlag, OnsetMethod, OnsetPosition, check_choice)
from align.errors import InputError
from align.markers.base import MarkerKind, Part
from align.schema_base import Estimate, MarkerBase, MarkerDraws, Model

#: Points on the age axis at which a fitted ramp's uncertainty band is drawn.
BAND_POINTS = 200
#: Draws that outline a fitted ramp's 95 % band in figures.
BAND_DRAWS = 400


class OnsetOptions(Model):
    """The options of an onset marker."""

    kind: Literal["onset"] = "onset"
    direction: OnsetDirection = Field(DEFAULT_ONSET_DIRECTION,
                                      description="rising, falling, or whichever fits better")
    method: OnsetMethod = Field(DEFAULT_ONSET_METHOD, description="ramp regression with an "
                                "AR(1) bootstrap, or the Bayesian ramp (MCMC)")
    draws: int = Field(DEFAULT_ONSET_DRAWS, ge=MIN_ONSET_DRAWS, le=MAX_ONSET_DRAWS,
                       description="bootstrap replicates or posterior draws")
    position: OnsetPosition = Field(DEFAULT_ONSET_POSITION, description="the point of the "
                                    "transition that is the marker: its onset (older end of "
                                    "the ramp), midpoint or end")


class Levels(Model):
    """The levels before and after a transition (units of the variable)."""

    before: Estimate
    after: Estimate


class NoiseModel(Model):
    """The fitted noise: sd (units of the variable), AR(1) coefficient at the mean spacing,
    persistence time (yr)."""

    sd: float
    ar1: float
    tau: float
    model: str = "AR(1) on the irregular time axis"


class OnsetResult(MarkerBase):
    """A transition onset (the older end of the ramp) with midpoint, end and levels."""

    kind: Literal["onset"] = "onset"
    onset: Estimate
    midpoint: Estimate
    end: Estimate
    duration: Estimate
    levels: Levels
    amplitude: Estimate
    noise: NoiseModel
    direction: EventDirection
    clear_transition: bool
    clear_transition_p: float | None = Field(None, description="p-value of the fitted step "
                                             "against AR(1) noise without a transition, as "
                                             "persistent as the record")
    clear_transition_rate: float = Field(CLEAR_TRANSITION_RATE, description="the false-"
                                         "positive rate (under red noise) at which a step is "
                                         "called a clear transition")
    reason: str | None = None
    draws_used: int
    position: OnsetPosition = DEFAULT_ONSET_POSITION
    flags: list[OnsetFlag] = Field([], description="plausibility flags (keys): a ramp long "
                                   "relative to the window, a plateau shorter than the ramp, "
                                   "the marker's interval near a window edge, ramps of very "
                                   "different lengths in a lag")
    short_ramp_bias: str | None = Field(None, description="the mean onset error measured in "
                                        "simulations of short ramps under red noise at a "
                                        "signal-to-noise ratio as low as this marker's, when "
                                        "it applies (a sentence)")

    @property
    def age(self):
        """The age estimate of the marker's point (``position``: onset, midpoint or end)."""
        return getattr(self, self.position)


def detect_onset(record, variable, window, *, direction=DEFAULT_ONSET_DIRECTION,
                 method=DEFAULT_ONSET_METHOD, draws=DEFAULT_ONSET_DRAWS, seed=None,
                 age_reference=None, position=DEFAULT_ONSET_POSITION):
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
    position : {"onset", "midpoint", "end"}
        The point of the transition the marker stands for (its draws, its ``age``): the
        onset (older end of the ramp, default), the midpoint or the end.

    Returns
    -------
    OnsetResult
        Onset, midpoint and end (ages, yr), duration (yr), levels and amplitude (units of the
        variable), the noise model, ``clear_transition`` with its p-value
        (:func:`align.detect.transition_p`; clear at most ``CLEAR_TRANSITION_RATE`` and no
        corner at the window edge) and a reason when not clear, plausibility ``flags`` and
        the ``short_ramp_bias`` caution when it applies;
        the draws of the marker's point are attached as
        :class:`~align.schema_base.MarkerDraws` (``result.draws``, not serialised) for the
        lag stage.

    Notes
    -----
    The fit runs in forward time ``t = -age`` with each sample weighted by its age interval
    (so that densely sampled stretches do not outweigh sparse ones). The bootstrap adds AR(1)
    noise with the residuals' sd and persistence (:func:`align.noise.ar1_persistence`) to the
    fitted ramp and refits; both noise parameters are first bias-corrected by a pilot
    bootstrap (a fitted ramp soaks up part of red noise, so residuals look whiter and quieter
    than the noise was); each draw of the onset (and end) is then drawn uniformly over the
    whole age interval of the sample holding it, or of it and the next sample when the
    transition is shorter than the sampling resolves (:func:`within_samples`), because a fit
    cannot place a corner more finely than the sampling.

    Known limitation (measured, reduced, not corrected): under red noise at low
    signal-to-noise (AR(1) persistence 50-300 yr, step 2 noise sd, 10-yr samples) a fit
    sometimes absorbs a noise excursion beside a short ramp (20-50 yr) into a much longer
    one, and the onset is then too old: on average by 13-23 yr (median within 4 yr; 95 %
    intervals cover 0.90-0.94), by 2-8 yr at 4 noise sd. Markers of the ramp method with an
    amplitude of at most ``LOW_SNR`` noise sd say so in ``short_ramp_bias``
    (:func:`short_ramp_bias`).

    References
    ----------
    Mudelsee (2000), doi:10.1016/S0098-3004(99)00141-7; Erhardt et al. (2019),
    doi:10.5194/cp-15-811-2019 (keys ``mudelsee2000`` and ``erhardt2019`` of
    :mod:`align.references`).
    """
    from align.detect import (estimate, onset_bootstrap, prepare_window, transition_p,
                              variable_units)
    from align.provenance import provenance, record_input, resolve_seed
    from align.record import age_reference as reference_of
    from align.record import record_name

    check_choice(method, OnsetMethod, "method")
    check_choice(direction, OnsetDirection, "direction")
    check_choice(position, OnsetPosition, "position")
    if not (isinstance(draws, (int, np.integer)) and draws >= MIN_ONSET_DRAWS):
        raise InputError(f"draws must be an integer of at least {MIN_ONSET_DRAWS}",
                         field="draws")
    if window is None:
        raise InputError("an onset needs a window (young, old)", field="window")
    seed = resolve_seed(seed)
    record, window = prepare_window(record, variable, window, age_reference)
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
        samples, fit, noise = onset_bootstrap(t, x, w, sign, draws, rng)
    else:
        from align.bayes import posterior_ramps

        samples, fit, noise = posterior_ramps(t, x, w, sign, draws, rng)
    onset_t, end_t = within_samples(samples[:, 0], samples[:, 1], -bounds[order, 1],
                                    -bounds[order, 0], rng)
    onset_age, end_age = -onset_t, -end_t
    amplitude = samples[:, 3] - samples[:, 2]
    p_value = transition_p(t, x, sign)
    clear, reason = _clarity(fit, p_value)
    point = {"onset": fit.t1, "end": fit.t2, "midpoint": 0.5 * (fit.t1 + fit.t2)}[position]
    depth = record["depth"].values if "depth" in record.coords else None
    result_direction = "up" if fit.x2 > fit.x1 else "down"
    result = OnsetResult(
        record=record_name(record), variable=variable, window=window,
        **variable_units(record, variable),
        age_reference=reference_of(record), method=_method_text(method, noise),
        references=(["mudelsee2000", "mudelsee2002", "mudelsee2010", "efron1993"]
                    if method == "ramp" else ["erhardt2019"]),
        sample_interval=float(np.interp(point, t, width)),
        depth=None if depth is None else float(np.interp(-point, age, depth)),
        onset=estimate(onset_age), midpoint=estimate(0.5 * (onset_age + end_age)),
        end=estimate(end_age), duration=estimate(onset_age - end_age),
        levels=Levels(before=estimate(samples[:, 2]), after=estimate(samples[:, 3])),
        amplitude=estimate(amplitude), noise=noise,
        direction=result_direction, clear_transition=clear,
        clear_transition_p=p_value, reason=reason,
        draws_used=int(len(samples)), position=position,
        flags=_flags(window, onset_age, end_age, position),
        short_ramp_bias=short_ramp_bias(method, position, np.median(amplitude), noise),
        trace=_onset_trace(bounds[keep], values[keep], window, fit, samples),
        provenance=provenance(inputs=[record_input(record, "record")], parameters={
            "variable": variable, "window": window, "direction": result_direction,
            "method": method, "draws": draws, "position": position}, seed=seed))
    ages = {"onset": (onset_age, -samples[:, 0]), "end": (end_age, -samples[:, 1]),
            "midpoint": (0.5 * (onset_age + end_age), -0.5 * (samples[:, 0] + samples[:, 1]))}
    age_draws, fit_draws = ages[position]
    return result.with_draws(MarkerDraws(age=age_draws, fit=fit_draws))


def within_samples(t1, t2, lo, hi, rng):
    """Onset and end draws placed inside the sample intervals that can hold them.

    Parameters
    ----------
    t1, t2 : numpy.ndarray (B,)
        Fitted corners (forward time).
    lo, hi : numpy.ndarray (n,)
        Forward-time bounds of the samples (older, younger), in forward order.
    rng : numpy.random.Generator

    Returns
    -------
    onset, end : numpy.ndarray (B,)
        Each corner drawn uniformly over the whole sample interval that holds it, aligned to
        the sample's bounds (a sample is a mean over its interval: the fit cannot tell where
        inside it the change began). When at most one sample lies between the two corners'
        samples, the transition is shorter than the sampling resolves: a step inside one
        sample makes that sample's mean intermediate and the fitted corners sit at the
        samples on either side, so the onset is drawn over the corner's sample and the next
        one, and the end likewise over its own and the one before. The end is kept no older
        than the onset.
    """
    n = lo.size
    j = np.clip(np.searchsorted(hi, t1, side="right"), 0, n - 1)
    m = np.maximum(np.clip(np.searchsorted(lo, t2, side="right") - 1, 0, n - 1), j)
    short = m - j <= 2
    onset = rng.uniform(lo[j], hi[np.where(short, np.minimum(j + 1, m), j)])
    end = rng.uniform(lo[np.where(short, np.maximum(m - 1, j), m)], hi[m])
    return onset, np.maximum(end, onset)


def short_ramp_bias(method, position, amplitude, noise):
    """The caution that a short ramp's onset is biased old at this signal-to-noise ratio.

    Parameters
    ----------
    method : {"ramp", "bayes"}
    position : {"onset", "midpoint", "end"}
    amplitude : float
        The fitted amplitude (units of the variable).
    noise : NoiseModel

    Returns
    -------
    str or None
        A sentence when the ramp method dates an onset whose amplitude is at most
        ``LOW_SNR`` noise sd, else None.

    Notes
    -----
    The figures are those of ``tests/test_calibration_onsets.py``
    (``test_short_ramp_onsets_under_red_noise`` and the grid in its docstring): 300 records
    per case, 10-yr samples, 500-yr windows, AR(1) noise. The record's own noise estimate
    cannot tell whether it applies: the biased fits are those that take a noise excursion
    into the ramp, and they leave residuals whiter than the noise, so the caution rests on
    the signal-to-noise ratio alone.
    """
    snr = abs(amplitude) / noise.sd if noise.sd > 0 else np.inf
    if method != "ramp" or position != "onset" or snr > LOW_SNR:
        return None
    return (f"the amplitude is {snr:.1f} noise sd, and at so low a signal-to-noise ratio the "
            "onset of a short ramp comes out too old on average where the noise is about as "
            "persistent as the ramp is long: in simulations (AR(1) persistence 50-300 yr, "
            "10-yr samples, 500-yr windows) by 13-23 yr for 20-50-yr ramps of 2 noise sd and "
            "2-8 yr at 4 noise sd (medians within 4 yr; under white noise within 8 yr), "
            "because a few fits draw a noise excursion beside the step into a much longer "
            "ramp; such fits leave whiter residuals than the noise had, so the persistence "
            f"measured here ({noise.tau:.3g} yr) does not rule it out")


def _flags(window, onset_age, end_age, position):
    """Plausibility flags of an onset marker from its draws (see ``OnsetFlag``)."""
    span = window[1] - window[0]
    point = {"onset": onset_age, "end": end_age,
             "midpoint": 0.5 * (onset_age + end_age)}[position]
    lo, hi = np.percentile(point, [2.5, 97.5])
    flags = []
    duration = np.median(onset_age - end_age)
    if duration > LONG_RAMP_SHARE * span:
        flags.append("long_ramp")
    if min(window[1] - np.median(onset_age), np.median(end_age) - window[0]) < duration:
        flags.append("short_plateau")
    if lo < window[0] + EDGE_SHARE * span or hi > window[1] - EDGE_SHARE * span:
        flags.append("near_edge")
    return flags


def flag_ramp_ratio(marker_a, marker_b):
    """Flag both onset markers of a lag ``ramp_ratio`` when one ramp is more than
    ``RAMP_RATIO`` times as long as the other; True when flagged."""
    if marker_a.kind != "onset" or marker_b.kind != "onset":
        return False
    long, short = sorted([marker_a.duration.median, marker_b.duration.median], reverse=True)
    if long <= RAMP_RATIO * max(short, 0.0):
        return False
    for marker in (marker_a, marker_b):
        if "ramp_ratio" not in marker.flags:
            marker.flags.append("ramp_ratio")
    return True


#: What each flag means, for people (code uses the keys).
FLAG_TEXT = {
    "long_ramp": "the ramp ({duration:.0f} yr) is longer than {share:.0%} of the window; "
                 "a gradual change at its start may be noise or a pre-rise, so its onset is "
                 "uncertain beyond its interval",
    "short_plateau": "a plateau inside the window is shorter than the ramp ({duration:.0f} "
                     "yr): the level it is measured from is not established, and a gradual "
                     "pre-rise cannot be told from the ramp; widen the window",
    "near_edge": "the 95 % interval of the {position} comes within {edge:.0%} of the window "
                 "({distance:.0f} yr) of an edge, where the fit is cut; widen the window",
    "ramp_ratio": "its ramp and the other marker's differ in length more than "
                  "{ratio:g}-fold, so the lag depends on the point chosen on them (onset, "
                  "midpoint or end)",
}


def flag_sentences(marker, skip=()):
    """The marker's flags as sentences (leaving out the keys in ``skip``)."""
    span = marker.window[1] - marker.window[0]
    values = {"duration": marker.duration.median, "share": LONG_RAMP_SHARE,
              "position": marker.position, "edge": EDGE_SHARE, "distance": EDGE_SHARE * span,
              "ratio": RAMP_RATIO}
    return [FLAG_TEXT[flag].format(**values) for flag in marker.flags if flag not in skip]


def _clarity(fit, p_value):
    if p_value > CLEAR_TRANSITION_RATE:
        return False, (f"no clear transition: a step this large arises in red noise without a "
                       f"transition with p = {p_value:.2g} (more than "
                       f"{CLEAR_TRANSITION_RATE:g})")
    if fit.edge:
        return False, ("no clear transition: a corner of the fitted ramp sits at the window "
                       "edge; widen the window to include both plateaus")
    return True, None


def _method_text(method, noise):
    if method == "ramp":
        return ("ramp regression (Mudelsee 2000) in forward time, fitted by generalised "
                "least squares under AR(1) noise (prewhitened; Mudelsee 2010), corners by "
                "exhaustive search over the samples then continuous "
                "refinement; AR(1) parametric bootstrap on the irregular axis (tau "
                f"{noise.tau:.3g} yr, bias-corrected), replicates searched coarse-to-fine; "
                "corners displaced uniformly within their sample interval")
    return ("Bayesian linear ramp with AR(1) noise (Erhardt et al. 2019), MCMC (emcee); "
            "corners displaced uniformly within their sample interval")


def _onset_trace(bounds, values, window, fit, samples):
    from align.detect import trace_list
    from align.ramp import ramp, ramps
    from align.schema_base import Trace

    grid = np.linspace(window[1], window[0], BAND_POINTS)  # old to young
    curves = ramps(-grid, samples[:BAND_DRAWS])
    lo, hi = np.percentile(curves, [2.5, 97.5], axis=0)
    return Trace(age_top=bounds[:, 0].tolist(), age_bottom=bounds[:, 1].tolist(),
                 value=trace_list(values), curve_age=grid.tolist(),
                 curve=ramp(-grid, fit.t1, fit.t2, fit.x1, fit.x2).tolist(),
                 band_low=lo.tolist(), band_high=hi.tolist())


class Onset(MarkerKind):
    """The onset kind (see the module)."""

    name = "onset"
    summary = "the onset of a transition (ramp fit)"
    options = OnsetOptions
    result = OnsetResult

    def detect(self, record, variable, window, options, *, seed, age_reference):
        return detect_onset(record, variable, window, seed=seed, age_reference=age_reference,
                            **options)

    def center(self, marker):
        return float(np.median(self.draws_of(marker).fit))

    def parts(self, marker, label, sign, n, rng):
        draws = self.draws_of(marker)
        pick = rng.integers(0, draws.age.size, n)
        fit = draws.fit[pick]
        jitter = draws.age[pick] - fit
        name = self.part_name(marker, label)
        return [Part(f"{name}: {marker.position} fit under AR(1) noise", "detection", label,
                     sign * (fit - np.median(draws.fit))),
                Part(f"{name}: sample interval at the {marker.position} "
                     f"({marker.sample_interval:.3g} yr)", "resolution", label, sign * jitter)]

    def part_name(self, marker, label):
        return f"{label}: {self.describe(marker)[4:]}"

    def describe(self, marker):
        if marker.position == "onset":
            return super().describe(marker)
        return f"the {marker.position} of the transition in {marker.record} {marker.variable}"

    def assumptions(self, marker, label):
        out = [f"Marker {label}: ramp fit with AR(1) noise (sd {marker.noise.sd:.3g}, "
               f"coefficient {marker.noise.ar1:.2f} at the mean spacing); the marker is the "
               f"transition's {marker.position}"
               + (" (the older end of the ramp)" if marker.position == "onset" else "")
               + ", placed no more finely than its sample interval."]
        out.append(f"Marker {label}: a 'clear transition' is a step whose p-value against "
                   f"AR(1) noise without a transition, as persistent as the record, is at most "
                   f"{marker.clear_transition_rate:g} (the false-positive rate under red "
                   "noise).")
        if not marker.clear_transition:
            out.append(f"Caution, marker {label}: {marker.reason}.")
        # unequal ramps are the lag's caution, stated once with the lag at the midpoints
        out += [f"Caution, marker {label}: {text}."
                for text in flag_sentences(marker, skip=("ramp_ratio",))]
        if marker.short_ramp_bias:
            out.append(f"Caution, marker {label}: {marker.short_ramp_bias}.")
        return out

    def draw(self, ax, marker, colour):
        from align.figures import COLOURS, interval_span

        trace = marker.trace
        ax.fill_between(trace.curve_age, [np.nan if v is None else v for v in trace.band_low],
                        [np.nan if v is None else v for v in trace.band_high],
                        color=COLOURS["band"], alpha=0.6, lw=0, label="ramp 95 % band")
        ax.plot(trace.curve_age, trace.curve, color=COLOURS["ink"], lw=1.5, label="fitted ramp")
        interval_span(ax, marker.age, colour, marker.position)
        state = "clear transition" if marker.clear_transition else "NO clear transition"
        return f"Onset fit: {marker.variable} in {marker.record} ({state})"

    def text(self, marker):
        from align.text import estimate_line
        from align.units import unit_label

        ref = marker.age_reference
        unit = unit_label(marker.units, marker.reference_scale)
        unit = f" {unit}" if unit else ""
        return [f"onset       {estimate_line(marker.onset, ref)}",
                f"midpoint    {estimate_line(marker.midpoint, ref)}",
                f"end         {estimate_line(marker.end, ref)}",
                f"duration    {estimate_line(marker.duration)}",
                f"amplitude   {marker.amplitude.median:.3g}{unit} ({marker.direction}); noise "
                f"sd {marker.noise.sd:.3g}{unit}, AR(1) {marker.noise.ar1:.2f}",
                _clarity_line(marker)] + [f"caution: {text}" for text in flag_sentences(marker)
                                          + [marker.short_ramp_bias] if text]


def _clarity_line(marker):
    if not marker.clear_transition:
        return marker.reason
    p = marker.clear_transition_p
    return "clear transition" + ("" if p is None else f" (p = {p:.2g})")


KIND = Onset()
