"""Events: where a spike begins.

An *event* is the moment an event signal begins: the age at which the anomalous deposit starts
(a moment within the first year of the deposit), found from the oldest sample of the first
anomalous run in forward time. That sample need not hold the beginning: a deposit that begins
late in a sample (in forward time) fills only part of it, and the diluted anomaly may stay
below the threshold, so the first anomalous sample is the next younger one. The event's age is
therefore spread over the first anomalous sample (uniformly) and over the older neighbour,
weighted by how much of the spike that neighbour's own anomaly allows (see
:func:`onset_spread`). With ``pick="peak"`` the event is the run's peak sample, uniform over
it. Anomalies are robust z-scores: a running-median baseline and a MAD scale (x 1.4826) over a
span of the record, on the log of a positive proxy by default (sulfate, dust and sea salt are
skewed: on their log a spike-free background is close to Gaussian). The threshold is calibrated
so that the background, modelled as Gaussian AR(1) anomalies with the window's own lag-1
autocorrelation, gives the requested number of false events per 1000 years
(:func:`align.anomaly.calibrated_threshold`); a fixed threshold may be given instead, and the
false-alarm rate it implies is stated.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
from pydantic import Field

from align.choices import (DEFAULT_EVENT_BACKGROUND, DEFAULT_EVENT_DIRECTION,
                           DEFAULT_EVENT_FALSE_ALARMS, DEFAULT_EVENT_PICK, EventBackground,
                           EventDirection, EventPick, check_choice)
from align.errors import InputError
from align.markers.base import MarkerKind, Part
from align.schema_base import Estimate, MarkerBase, Model, Pair

#: Default running-median span of the event baseline, in median sample intervals.
BASELINE_SAMPLES = 25
#: Shortest running-median span, in median sample intervals: a median over fewer samples
#: follows a spike of one sample, so no event could stand out from it.
MIN_BASELINE_SAMPLES = 3


class EventOptions(Model):
    """The options of an event marker."""

    kind: Literal["event"] = "event"
    threshold: float | None = Field(None, gt=0, description="robust z-score a run must "
                                    "exceed; default: calibrated to false_alarms")
    false_alarms: float = Field(DEFAULT_EVENT_FALSE_ALARMS, gt=0, le=1000,
                                description="false events per 1000 yr of background the "
                                "threshold is calibrated to")
    background: EventBackground = Field(DEFAULT_EVENT_BACKGROUND, description="model the "
                                        "background on the log of the proxy (auto: when "
                                        "every value is positive) or on the values")
    baseline_years: float | None = Field(None, gt=0, description="running-median span (yr); "
                                         f"default {BASELINE_SAMPLES} median sample intervals")
    pick: EventPick = Field(DEFAULT_EVENT_PICK, description="the oldest sample of the first "
                            "run in forward time, or that run's peak")
    direction: EventDirection = Field(DEFAULT_EVENT_DIRECTION,
                                      description="spikes above or dips below the baseline")


class EventCandidate(Model):
    """One run of anomalous samples: its age span ``[young, old]`` and strength."""

    age_span: Pair
    depth_span: Pair | None = None
    peak_z: float
    n_samples: int


class MarkerSample(Model):
    """The sample that holds a marker."""

    index: int
    age_interval: Pair
    depth: float | None = None
    value: float
    z: float | None = None


class EventResult(MarkerBase):
    """An event: the oldest sample of the first anomalous run in forward time (or its peak)."""

    kind: Literal["event"] = "event"
    found: bool
    message: str
    event: Estimate | None = None
    sample: MarkerSample | None = None
    candidates: list[EventCandidate]
    threshold: float
    false_alarms: float | None = Field(None, description="false events per 1000 yr of "
                                       "background at this threshold (requested, or implied "
                                       "by a fixed threshold)")
    threshold_calibrated: bool = True
    background: Literal["log", "linear"] = "linear"
    persistence: float = Field(0.0, description="lag-1 autocorrelation of the anomalies")
    baseline_years: float
    scale: float
    pick: EventPick
    direction: EventDirection
    older_sample: MarkerSample | None = Field(
        None, description="the sample just older than the first anomalous one, where a "
        "beginning too diluted to pass the threshold may lie (pick 'first' only)")
    spike_height: float | None = Field(None, description="robust z of a sample the spike "
                                       "fills: the run's peak z")
    p_in_sample: float = Field(1.0, description="probability that the deposit begins in "
                               "the picked sample rather than in the older one")

    @property
    def age(self):
        """The event's age estimate (uniform over its sample), or None when none was found."""
        return self.event


def detect_event(record, variable, window=None, *, threshold=None,
                 false_alarms=DEFAULT_EVENT_FALSE_ALARMS, background=DEFAULT_EVENT_BACKGROUND,
                 baseline_years=None, pick=DEFAULT_EVENT_PICK,
                 direction=DEFAULT_EVENT_DIRECTION, age_reference=None):
    """Find where an event signal (a spike) begins.

    Parameters
    ----------
    record : xarray.Dataset
    variable : str
    window : [young, old], optional
        Ages to search (the record's reference, or ``age_reference``); default the record.
    threshold : float, optional
        Robust z-score (running-median baseline, MAD x 1.4826 scale) a run must exceed;
        default: calibrated so that the background gives ``false_alarms`` events per 1000 yr.
    false_alarms : float
        False events per 1000 yr of background (default
        :data:`align.choices.DEFAULT_EVENT_FALSE_ALARMS`).
    background : {"auto", "log", "linear"}
        The scale the background is modelled on (auto: log when every value is positive).
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
    from align.anomaly import (lag1_autocorrelation, rate_for, robust_z, runs_above,
                               surrogate_background, threshold_for)
    from align.detect import (prepare_window, trace_list, trace_points, uniform_estimate,
                              variable_units)
    from align.provenance import provenance, record_input
    from align.record import age_reference as reference_of
    from align.record import record_name
    from align.schema_base import Trace

    check_choice(pick, EventPick, "pick")
    check_choice(direction, EventDirection, "direction")
    check_choice(background, EventBackground, "background")
    if threshold is not None and not (np.isfinite(threshold) and threshold > 0):
        raise InputError("threshold must be a positive number", field="threshold")
    if not (np.isfinite(false_alarms) and 0 < false_alarms <= 1000):
        raise InputError("false_alarms must be a positive rate per 1000 yr (at most 1000)",
                         field="false_alarms")
    record, window = prepare_window(record, variable, window, age_reference)
    age = record["age"].values
    bounds = record["age_bounds"].values
    width = bounds[:, 1] - bounds[:, 0]
    typical = float(np.median(width))
    try:
        span = (BASELINE_SAMPLES * typical if baseline_years is None else float(baseline_years))
    except (TypeError, ValueError):
        raise InputError("baseline_years must be a number of years",
                         field="baseline_years") from None
    if not span > 0:
        raise InputError("baseline_years must be positive", field="baseline_years")
    if span < MIN_BASELINE_SAMPLES * typical:
        raise InputError(f"baseline_years ({span:g}) spans fewer than {MIN_BASELINE_SAMPLES} "
                         f"samples (median interval {typical:.3g} yr): a running median that "
                         f"short follows every spike; give at least "
                         f"{MIN_BASELINE_SAMPLES * typical:.3g}", field="baseline_years")
    if span > bounds[-1, 1] - bounds[0, 0]:
        raise InputError(f"baseline_years ({span:g}) is longer than the record "
                         f"({bounds[-1, 1] - bounds[0, 0]:g} yr)", field="baseline_years")
    near = (age >= window[0] - span / 2) & (age <= window[1] + span / 2)
    inside = np.flatnonzero((age >= window[0]) & (age <= window[1]))
    if inside.size < 5:
        raise InputError(f"only {inside.size} samples in the window", field="window")
    values = record[variable].values.astype(float)
    sign = 1.0 if direction == "up" else -1.0
    near_idx = np.flatnonzero(near)
    scale_kind, forward, back = _background_scale(values[near_idx], background, variable)
    z_near, base_near, scale = robust_z(age[near_idx], sign * forward(values[near_idx]), span)
    persistence = lag1_autocorrelation(z_near)
    step = float(np.median(width[inside]))
    phi, inflation = surrogate_background(near_idx.size, round(span / step),
                                          round(persistence, 2),
                                          round(false_alarms * step / 1000.0, 6))
    calibrated = threshold is None
    if calibrated:
        threshold = threshold_for(false_alarms, step, phi, inflation)
    else:
        false_alarms = rate_for(threshold, step, phi, inflation)
    z = np.full(age.size, np.nan)
    z[near_idx] = z_near
    baseline = np.full(age.size, np.nan)
    baseline[near_idx] = sign * base_near
    level = np.full(age.size, np.nan)
    level[near_idx] = sign * (base_near + threshold * scale)
    runs = [(inside[a], inside[b]) for a, b in runs_above(z[inside], threshold)]
    depth = record["depth"].values if "depth" in record.coords else None
    candidates = [EventCandidate(
        age_span=[float(bounds[a:b + 1, 0].min()), float(bounds[a:b + 1, 1].max())],
        depth_span=None if depth is None else [float(depth[a]), float(depth[b])],
        peak_z=float(np.nanmax(z[a:b + 1])), n_samples=int(b - a + 1)) for a, b in runs]
    inside = inside[trace_points(values[inside])]  # what a figure needs, spikes kept
    trace = Trace(age_top=bounds[inside, 0].tolist(), age_bottom=bounds[inside, 1].tolist(),
                  value=trace_list(values[inside]), curve_age=age[inside].tolist(),
                  curve=trace_list(back(baseline[inside])),
                  threshold=trace_list(back(level[inside])))
    on = "the log of the values" if scale_kind == "log" else "the values"
    rule = (f"calibrated to {false_alarms:.3g} false events per 1000 yr" if calibrated else
            f"fixed; implies {false_alarms:.3g} false events per 1000 yr")
    common = dict(record=record_name(record), variable=variable, window=window,
                  **variable_units(record, variable),
                  age_reference=reference_of(record),
                  method=(f"robust z-score of {on} > {threshold:.3g} ({rule} under an AR(1) "
                          f"background, lag-1 autocorrelation {persistence:.2f}; running median "
                          f"over {span:g} yr, MAD x 1.4826), first anomalous run in forward "
                          "time; "
                          + ("the event is the moment its deposit begins: in its oldest "
                             "sample or, diluted below the threshold, in the next older one"
                             if pick == "first" else "the event is the run's peak sample")),
                  candidates=candidates, threshold=float(threshold),
                  false_alarms=float(false_alarms), threshold_calibrated=calibrated,
                  background=scale_kind, persistence=persistence, baseline_years=span,
                  scale=float(scale), pick=pick, direction=direction, trace=trace,
                  provenance=provenance(inputs=[record_input(record, "record")], parameters={
                      "variable": variable, "window": window, "threshold": threshold,
                      "false_alarms": false_alarms, "background": scale_kind,
                      "baseline_years": span, "pick": pick, "direction": direction}))
    if not runs:
        return EventResult(found=False, message=f"no event found: no sample in the window "
                                                f"exceeds {threshold:.3g} robust sd", **common)
    first, last = max(runs, key=lambda run: age[run[0]])  # the oldest run comes first
    i = last if pick == "first" else first + int(np.nanargmax(z[first:last + 1]))
    lo, hi = float(bounds[i, 0]), float(bounds[i, 1])
    note = (f"{len(runs)} candidate runs; the oldest is taken" if len(runs) > 1
            else "one anomalous run")

    def sample(j):
        return MarkerSample(index=int(j), age_interval=[float(bounds[j, 0]),
                                                        float(bounds[j, 1])],
                            depth=None if depth is None else float(depth[j]),
                            value=float(values[j]), z=float(z[j]))

    older = {}
    if pick == "first" and i + 1 < age.size and np.isfinite(z[i + 1]):
        height = float(np.nanmax(z[first:last + 1]))
        spread = onset_spread(lo, bounds[i + 1, 0], bounds[i + 1, 1], z[i + 1], height)
        older = dict(older_sample=sample(i + 1), spike_height=height, p_in_sample=spread.p)
        estimate = spread.estimate()
    else:
        estimate = uniform_estimate(lo, hi)
    return EventResult(
        found=True, message=f"event found ({note})", event=estimate, sample=sample(i),
        sample_interval=hi - lo, depth=None if depth is None else float(depth[i]), **older,
        **common)


@dataclass(frozen=True)
class OnsetSpread:
    """Where an anomalous deposit begins: uniform over ``[lo, edge]`` with probability ``p``,
    else ``edge + (hi - edge) u`` with ``u`` normal (``mu``, ``sigma``) truncated to [0, 1]."""

    lo: float
    edge: float
    hi: float
    p: float
    mu: float
    sigma: float

    def _u(self):
        from scipy.stats import truncnorm

        return truncnorm((0.0 - self.mu) / self.sigma, (1.0 - self.mu) / self.sigma,
                         loc=self.mu, scale=self.sigma)

    def ppf(self, q):
        """Ages (yr) at probabilities ``q``."""
        q = np.asarray(q, dtype=float)
        inner = self.lo + (self.edge - self.lo) * np.clip(q / max(self.p, 1e-300), 0, 1)
        if self.p >= 1.0:
            return inner
        outer = self.edge + (self.hi - self.edge) * self._u().ppf(
            np.clip((q - self.p) / (1.0 - self.p), 0.0, 1.0))
        return np.where(q <= self.p, inner, outer)

    def draws(self, rng, n):
        """``n`` ages (yr)."""
        return self.ppf(rng.uniform(0.0, 1.0, n))

    def estimate(self):
        from align.schema_base import Estimate

        q = self.ppf([0.025, 0.16, 0.5, 0.84, 0.975])
        m1, v1 = 0.5 * (self.lo + self.edge), (self.edge - self.lo) ** 2 / 12.0
        w = self.hi - self.edge
        mu, var = self._u().stats("mv")
        m2, v2 = self.edge + w * float(mu), w**2 * float(var)
        mean = self.p * m1 + (1 - self.p) * m2
        sd = np.sqrt(self.p * (v1 + (m1 - mean) ** 2) + (1 - self.p) * (v2 + (m2 - mean) ** 2))
        return Estimate(median=float(q[2]), ci68=[float(q[1]), float(q[3])],
                        ci95=[float(q[0]), float(q[4])], sd=float(sd))


def onset_spread(lo, older_lo, older_hi, z_older, height):
    """Where a deposit begins, given the first anomalous sample and its older neighbour.

    Parameters
    ----------
    lo : float
        Young bound (yr) of the first anomalous sample.
    older_lo, older_hi : float
        Age bounds (yr) of the next older sample (a gap between the two is taken with the
        first sample: no spike reaches the older sample from there).
    z_older : float
        The older sample's robust z.
    height : float
        Robust z of a sample the spike fills (the run's peak z).

    Returns
    -------
    OnsetSpread

    Notes
    -----
    The beginning ``T`` is uniform a priori per year over ``[lo, older_hi]``. Starting in the
    older sample a fraction ``u = (T - older_lo) / w`` before its young end, a spike of full
    height ``H`` (in z) adds ``H u`` to that sample's z; starting younger, nothing. With unit
    noise, the likelihood of the older sample's ``z`` is ``phi(z)`` for every ``T`` younger
    than ``older_lo`` and ``phi(z - H u)`` inside the older sample, so ``u`` is normal
    (``z / H``, ``1 / H``) truncated to [0, 1] and the probability of the younger part is
    ``(older_lo - lo) phi(z) / [(older_lo - lo) phi(z) + (w / H) (Phi(H - z) - Phi(-z))]``.
    The first anomalous sample's own z is not used to place ``T`` inside it (its share
    depends on the spike's unknown duration), which keeps the interval on the safe side.
    """
    from scipy.stats import norm

    height = max(float(height), 1e-6)
    w = float(older_hi - older_lo)
    young = float(older_lo - lo) * norm.pdf(z_older)
    old = w / height * (norm.cdf(height - z_older) - norm.cdf(-z_older))
    p = young / (young + old) if young + old > 0 else 1.0
    return OnsetSpread(float(lo), float(older_lo), float(older_hi), float(p),
                       float(z_older / height), 1.0 / height)


def spread_of(marker):
    """The :class:`OnsetSpread` of an event result (uniform over its sample when it was
    picked at its peak or has no older neighbour)."""
    lo, hi = marker.sample.age_interval
    if marker.older_sample is None:
        return OnsetSpread(lo, hi, hi, 1.0, 0.5, 1.0)
    older_lo, older_hi = marker.older_sample.age_interval
    return onset_spread(lo, older_lo, older_hi, marker.older_sample.z, marker.spike_height)


def _background_scale(values, background, variable):
    """``(kind, forward, back)``: the scale the background is modelled on and the maps to and
    from it. ``log`` needs every finite value positive."""
    finite = values[np.isfinite(values)]
    positive = finite.size > 0 and bool(np.all(finite > 0))
    if background == "log" and not positive:
        raise InputError("background 'log' needs positive values; use 'linear'",
                         field="background", source=variable)
    if background == "linear" or not positive:
        return "linear", (lambda v: v), (lambda v: v)
    return "log", np.log, np.exp


class Event(MarkerKind):
    """The event kind (see the module)."""

    name = "event"
    summary = "where a spike begins (robust z-score)"
    options = EventOptions
    result = EventResult
    window_required = False

    def detect(self, record, variable, window, options, *, seed, age_reference):
        # no draws to keep: the age is uniform over the sample, which the result holds
        return detect_event(record, variable, window, age_reference=age_reference, **options)

    def usable(self, marker, label):
        if not marker.found:
            raise InputError(f"marker {label}: {marker.message} (see the candidates; lower the "
                             "threshold or move the window)", field=f"{label}.window")

    def center(self, marker):
        # the median of where the deposit begins (the sample's mid-point when uniform over it)
        return float(marker.event.median)

    def parts(self, marker, label, sign, n, rng):
        lo, hi = marker.sample.age_interval
        where = ("position within its sample" if marker.older_sample is None else
                 "where the deposit begins: its first anomalous sample or the older one")
        return [Part(f"{self.part_name(marker, label)}: {where} ({hi - lo:.3g} yr)",
                     "resolution", label,
                     sign * (spread_of(marker).draws(rng, n) - self.center(marker)))]

    def assumptions(self, marker, label):
        if marker.false_alarms is None:  # a result written before thresholds were calibrated
            return [f"Marker {label}: the event's age is uniform over the age interval of its "
                    "first anomalous sample."]
        on = "the log of the proxy" if marker.background == "log" else "the proxy values"
        how = ("calibrated to" if marker.threshold_calibrated else "fixed, implying")
        return [self._meaning(marker, label),
                f"Marker {label}: the detection threshold ({marker.threshold:.3g} robust sd) is "
                f"{how} {marker.false_alarms:.3g} false events per 1000 years of background, "
                f"modelled on {on} as Gaussian AR(1) anomalies (lag-1 autocorrelation "
                f"{marker.persistence:.2f})."]

    @staticmethod
    def _meaning(marker, label):
        if marker.older_sample is None:
            return (f"Marker {label}: the event's age is uniform over the age interval of its "
                    f"{'peak' if marker.pick == 'peak' else 'first anomalous'} sample.")
        return (f"Marker {label}: the event's age is the moment the anomalous deposit begins "
                "(a moment within the first year of the deposit). It lies in the first "
                f"anomalous sample (probability {marker.p_in_sample:.2f}, uniform over it) or "
                "in the older sample, into which a spike of the run's peak height "
                f"({marker.spike_height:.3g} robust sd, full strength from its start) may "
                "reach no further than that sample's own anomaly "
                f"(z = {marker.older_sample.z:.2f}) allows.")

    def draw(self, ax, marker, colour):
        from align.figures import COLOURS, interval_span

        trace = marker.trace
        ax.plot(trace.curve_age, [np.nan if v is None else v for v in trace.curve],
                color=COLOURS["ink"], lw=1, label="baseline (running median)")
        ax.plot(trace.curve_age, [np.nan if v is None else v for v in trace.threshold],
                color=COLOURS["ink"], lw=1, ls=":",
                label=f"threshold ({marker.threshold:.3g} robust sd"
                      + ("" if marker.false_alarms is None else
                         f", {marker.false_alarms:.3g} false events per 1000 yr") + ")")
        for candidate in marker.candidates:
            ax.axvspan(*candidate.age_span, color=COLOURS["light"], lw=0)
        if marker.found:
            interval_span(ax, marker.event, colour, "event")
        return f"Event pick: {marker.variable} in {marker.record} ({marker.message})"

    def text(self, marker):
        from align.text import estimate_line

        ref = marker.age_reference
        lines = [marker.message]
        if marker.found:
            lo, hi = marker.sample.age_interval
            lines.append(f"event       {estimate_line(marker.event, ref)}; sample {lo:.1f} to "
                         f"{hi:.1f} (z = {marker.sample.z:.1f})")
            if marker.older_sample is not None:
                o_lo, o_hi = marker.older_sample.age_interval
                lines.append(f"            begins in that sample with probability "
                             f"{marker.p_in_sample:.2f}, else in the older one {o_lo:.1f} to "
                             f"{o_hi:.1f} (z = {marker.older_sample.z:.1f})")
        for c in marker.candidates:
            lines.append(f"  candidate {c.age_span[0]:.1f} to {c.age_span[1]:.1f} {ref}: peak z "
                         f"{c.peak_z:.1f}, {c.n_samples} sample(s)")
        return lines


KIND = Event()
