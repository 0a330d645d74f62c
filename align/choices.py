"""Every set of choices and every default, written once.

The schema (:mod:`align.schema`), the library's signatures and argument checks, the CLI's
``choices=``, defaults and help, and the service all take them from here;
``tests/test_choices.py`` checks that the CLI agrees with the schema. To add a choice, add it to
its ``Literal`` here and handle it where it is computed.

This module imports nothing heavy (``typing`` only), so the CLI can build its parser from it
without loading the scientific stack.
"""

from __future__ import annotations

from typing import Literal, get_args

#: References a record's ages may be stored in (years before AD 2000 or AD 1950).
RecordReference = Literal["b2k", "BP"]
#: Every age convention :func:`align.convert_age` speaks.
AgeConvention = Literal["b2k", "BP", "CE", "BCE", "ka b2k", "ka BP", "astronomical"]
#: Units of a depth column.
DepthUnits = Literal["m", "cm", "mm"]

#: Which sample of an anomalous run dates an event.
EventPick = Literal["first", "peak"]
#: The scale an event's background is modelled on: the log of a positive proxy (skewed
#: backgrounds such as sulfate, dust, sea salt), the values as they are, or log when every
#: value is positive.
EventBackground = Literal["auto", "log", "linear"]
#: Spikes above or dips below the baseline.
EventDirection = Literal["up", "down"]
#: Rising, falling, or whichever fits better.
OnsetDirection = Literal["auto", "up", "down"]
#: Which point of a transition an onset marker stands for: its onset (the older end of the
#: ramp), its midpoint or its end (the younger end).
OnsetPosition = Literal["onset", "midpoint", "end"]
#: How an onset and its uncertainty are estimated.
OnsetMethod = Literal["ramp", "bayes"]

#: Transforms of a proxy before a marker is looked for (:mod:`align.transforms`).
Transform = Literal["log", "log10", "neg"]

#: How layer-counting errors accumulate with depth (:mod:`align.timescale`).
TimescaleModel = Literal["correlated", "random-walk"]
#: Interpolation between tie points (:func:`align.transfer`).
TieInterpolation = Literal["linear", "pchip"]
#: The coordinate a grid runs along.
GridAxis = Literal["age", "depth"]
#: Cross-correlation estimators.
CorrelationMethod = Literal["pearson", "kernel"]
#: Surrogates behind a cross-correlation's p-value.
SurrogateKind = Literal["phase", "ar1"]
#: Kinds of lag-budget items.
BudgetKind = Literal["resolution", "detection", "timescale", "tie", "bridge", "combination",
                     "sync"]
#: Machine keys of the what-if rows (the sentences shown to people are in ``align.lag``).
WhatIfKey = Literal["halve_resolution_a", "halve_resolution_b", "halve_ties", "double_ties",
                    "no_timescale", "halve_sync", "other_counting_model", "bridge_rate_half",
                    "bridge_rate_double", "timescale_fully_correlated",
                    "timescale_independent"]
#: Machine keys of a synchrony result's what-if rows (the sentences are in ``align.synchrony``).
SynchronyWhatIfKey = Literal["without_top_outlier", "independent_chronologies_only",
                             "each_chronology_once"]
#: Formats of a report folder.
ReportFormat = Literal["html", "md", "json"]

#: Defaults, one constant each.
DEFAULT_AGE_REFERENCE: RecordReference = "b2k"
#: False events per 1000 yr of background an event threshold is calibrated to (a choice: one
#: false event in 100,000 years of record).
DEFAULT_EVENT_FALSE_ALARMS = 0.01
DEFAULT_EVENT_BACKGROUND: EventBackground = "auto"
DEFAULT_EVENT_PICK: EventPick = "first"
DEFAULT_EVENT_DIRECTION: EventDirection = "up"
DEFAULT_ONSET_DIRECTION: OnsetDirection = "auto"
DEFAULT_ONSET_METHOD: OnsetMethod = "ramp"
DEFAULT_ONSET_POSITION: OnsetPosition = "onset"
DEFAULT_ONSET_DRAWS = 2000
DEFAULT_LAG_DRAWS = 20_000
DEFAULT_TIMESCALE_MODEL: TimescaleModel = "correlated"
#: Synchronisation error (1 sd, yr) between two cores on one shared timescale when the request
#: gives none: a rule of thumb for cores matched at volcanic horizons a few centuries apart
#: (common practice); the lag states it as an assumption.
DEFAULT_SYNC_SD = 5.0
#: Largest age sd (yr) any one error source may state: a million years, beyond any timescale
#: this tool dates against (a stated choice that keeps the arithmetic finite).
MAX_AGE_SD = 1e6
DEFAULT_TIE_INTERPOLATION: TieInterpolation = "linear"
DEFAULT_GRID_AXIS: GridAxis = "age"
DEFAULT_MIN_COVERAGE = 0.5
DEFAULT_CORRELATION_METHOD: CorrelationMethod = "pearson"
DEFAULT_SURROGATES = 1000
DEFAULT_SURROGATE_KIND: SurrogateKind = "phase"
DEFAULT_BOOTSTRAP = 1000
DEFAULT_SUGGEST_THRESHOLD = 4.0
DEFAULT_DEPTH_UNITS: DepthUnits = "m"
#: Most sites in one synchrony request (the outlier sampler's cost grows as their square).
MAX_SITES = 200
#: Prior probability that a site of a synchrony test is shifted (outlier model).
DEFAULT_OUTLIER_PRIOR = 0.05

#: Bounds on counts (also the schema's ``ge``/``le``).
MIN_ONSET_DRAWS, MAX_ONSET_DRAWS = 100, 100_000
MIN_LAG_DRAWS, MAX_LAG_DRAWS = 1000, 1_000_000

#: Age scale (yr) over which the errors of a modelled timescale given only as an sd stay
#: correlated (correlation ``exp(-|age1 - age2| / scale)``), when the request gives none: about
#: the spacing of the dated levels behind a modelled age-depth relation (common practice);
#: the lag states it as an assumption and shows fully correlated and independent errors as
#: what-if rows.
DEFAULT_AGE_ERROR_SCALE = 1000.0


def options(choice):
    """The allowed values of a ``Literal`` alias, as a tuple (for ``choices=`` and checks)."""
    return get_args(choice)


def check_choice(value, choice, field):
    """Raise :class:`~align.errors.InputError` naming ``field`` unless ``value`` is one of
    ``choice``'s values; return ``value``."""
    allowed = options(choice)
    if value not in allowed:
        from align.errors import InputError

        raise InputError(f"{field} must be one of {', '.join(map(str, allowed))} "
                         f"(got {value!r})", field=field)
    return value


#: False-positive rate of the "clear transition" decision of an onset marker under red noise
#: without a transition (the p-value of the fitted step against AR(1) surrogates as
#: persistent as the record, :func:`align.detect.transition_p`); a choice (common practice:
#: 5 %).
CLEAR_TRANSITION_RATE = 0.05
#: Plausibility flags of an onset marker (keys; the sentences are in ``align.markers.onset``):
#: a ramp long relative to the window, a plateau inside the window shorter than the ramp (the
#: onset or end sits within one ramp length of the window's edge), the marker's 95 % interval
#: near a window edge, and (in a lag) ramps of very different lengths, so that the point
#: chosen on them matters.
OnsetFlag = Literal["long_ramp", "short_plateau", "near_edge", "ramp_ratio"]
#: A ramp longer than this share of the window is flagged ``long_ramp`` (a choice).
LONG_RAMP_SHARE = 1.0 / 3.0
#: A marker whose 95 % interval comes within this share of the window of an edge is flagged
#: ``near_edge`` (a choice: the fit cannot put a corner beyond the window, so the interval is
#: cut there).
EDGE_SHARE = 0.1
#: Ramps whose durations differ more than this factor are flagged ``ramp_ratio`` in a lag (a
#: choice).
RAMP_RATIO = 3.0
#: An onset marker of the ramp method whose amplitude is at most this many noise sd carries
#: the short-ramp bias caution (``OnsetResult.short_ramp_bias``): simulated onsets of short
#: ramps under red noise are too old on average at 2 and 4 noise sd, not at 8 (a choice
#: between them; see ``tests/test_calibration_onsets.py``).
LOW_SNR = 5.0
