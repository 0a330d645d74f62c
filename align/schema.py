"""The one schema: requests and results shared by the library, the CLI and the HTTP API.

Every result class here is what a library function returns, what ``corealign ... --json``
prints (``to_dict()``), what the service answers, and what ``/openapi.json`` documents
(generated from these classes by :func:`json_schemas`). Nothing else defines these shapes.

Conventions: ages are in years in the named ``age_reference``; intervals are
``[lower, upper]`` in numbers (for ages: ``[young, old]``); lags are
``age(a) - age(b)``, positive when ``a`` happened first.
"""

from __future__ import annotations

from typing import Any, ClassVar, Literal

from pydantic import ConfigDict, Field, PrivateAttr, create_model

from align.choices import (DEFAULT_AGE_REFERENCE, DEFAULT_BOOTSTRAP, DEFAULT_CORRELATION_METHOD,
                           DEFAULT_GRID_AXIS, DEFAULT_LAG_DRAWS, DEFAULT_MIN_COVERAGE,
                           DEFAULT_SURROGATE_KIND, DEFAULT_SURROGATES, DEFAULT_SYNC_SD,
                           DEFAULT_TIMESCALE_MODEL, DEFAULT_AGE_ERROR_SCALE,
                           DEFAULT_OUTLIER_PRIOR, MAX_AGE_SD, MAX_LAG_DRAWS, MAX_SITES,
                           MIN_LAG_DRAWS,
                           AgeConvention, BudgetKind, CorrelationMethod, EventPick, GridAxis,
                           OnsetDirection,
                           OnsetMethod, SurrogateKind, SynchronyWhatIfKey, TimescaleModel,
                           WhatIfKey)
from align.markers import KINDS, RECORD_KINDS, Marker, MarkerSpec, MarkerTemplate, RecordKindName
from align.markers.event import EventCandidate, EventResult, MarkerSample
from align.markers.onset import Levels, NoiseModel, OnsetResult
from align.schema_base import (AgeRef, Estimate, InputRef, MarkerBase, MarkerDraws, Model, Pair,
                               Provenance, Trace, json_schemas, validate_as)

# --------------------------------------------------------------------------------------------
# records


class Spread(Model):
    """Median, minimum and maximum of a set of sample intervals."""

    median: float
    min: float
    max: float


class CoordinateInfo(Model):
    """One coordinate of a record: range, units and sample-interval statistics."""

    units: str
    range: Pair
    interval: Spread
    bounds_derived: bool


class VariableInfo(Model):
    """One proxy variable: units, long name and how many values are missing."""

    name: str
    units: str | None = None
    long_name: str | None = None
    n_missing: int
    n_valid: int


class RecordInfo(Model):
    """What a record holds (``corealign info``, ``GET /records/{id}``)."""

    name: str
    source: str
    checksum: str
    archive: str | None = None
    site: str | None = None
    core: str | None = None
    timescale: str | None = None
    timescale_kind: str | None = None
    age_reference: AgeRef | None = None
    n_samples: int
    depth: CoordinateInfo | None = None
    age: CoordinateInfo | None = None
    uncertainty: Literal["mce", "sd", "ensemble", "none"]
    ensemble_members: int = 0
    variables: list[VariableInfo]
    history: list[str] = []


class AgeConversion(Model):
    """One age conversion (``corealign age --json``)."""

    value: float
    from_: str = Field(alias="from")
    to: str
    result: float

    model_config = ConfigDict(extra="forbid", populate_by_name=True)

    def to_dict(self):
        return self.model_dump(mode="json", by_alias=True)


# --------------------------------------------------------------------------------------------
# cross-correlation


class PeakLag(Model):
    """The lag (yr) at the correlation peak, refined below the grid step, with its 95 %
    interval and where that interval comes from."""

    median: float
    ci95: Pair
    source: str


class Curve(Model):
    """Correlation against lag (yr), with the surrogates' central 95 % at each lag."""

    lags: list[float]
    r: list[float | None]
    surrogate_low: list[float | None] = []
    surrogate_high: list[float | None] = []


class SurrogateInfo(Model):
    """The surrogates behind the p-value."""

    kind: SurrogateKind
    count: int


class XcorrResult(Model):
    """Cross-correlation of two records: positive lags mean the pattern is older in a."""

    a: str
    b: str
    window: Pair
    method: CorrelationMethod
    peak_lag: PeakLag
    peak_correlation: float
    p_value: float | None
    p_value_text: str | None = Field(None, description="the p-value in words; at the floor of "
                                     "n surrogates 'p < 1/(n+1)'")
    n_eff: float
    surrogates: SurrogateInfo
    curve: Curve
    grid_step: float
    age_reference: AgeRef
    provenance: Provenance


# --------------------------------------------------------------------------------------------
# lag requests and results


class LagSettings(Model):
    """How a lag is estimated, beyond its two markers: the same for one lag and for every
    pair of a survey."""

    ties: str | None = Field(None, description="tie table between b (depth) and a "
                                               "(ref_depth/ref_age); b is moved onto a")
    age_reference: AgeRef = Field(DEFAULT_AGE_REFERENCE, description="reference of the "
                                  "windows and results")
    draws: int = Field(DEFAULT_LAG_DRAWS, ge=MIN_LAG_DRAWS, le=MAX_LAG_DRAWS,
                       description="Monte Carlo draws")
    seed: int | None = Field(None, ge=0)
    timescale_model: TimescaleModel = DEFAULT_TIMESCALE_MODEL
    bridge_rate: float | None = Field(None, ge=0, le=MAX_AGE_SD**2, description="between-tie "
                                      "variance rate, yr^2 per yr (default: from the ties)")
    sync_sd: float = Field(DEFAULT_SYNC_SD, ge=0, le=MAX_AGE_SD, description="synchronisation "
                           "error (1 sd, yr) between two cores on one shared timescale; the "
                           "shared timescale's error cancels, this one does not")
    age_error_scale: float = Field(DEFAULT_AGE_ERROR_SCALE, gt=0, description="age scale "
                                   "(yr) over which the errors of a timescale given only as "
                                   "an sd stay correlated: exp(-|age difference| / scale)")


class LagRequest(LagSettings):
    """A lag request: the same for ``corealign lag --request``, ``POST /lag`` and
    ``estimate_lag``."""

    a: MarkerSpec
    b: MarkerSpec


class LagSummary(Model):
    """The lag ``age(a) - age(b)`` (yr): positive when a happened first."""

    median: float
    ci68: Pair
    ci95: Pair
    sd: float
    p_a_before_b: float


class BudgetItem(Model):
    """One source of lag uncertainty: its sd (yr) and share of the summed variance."""

    component: str
    kind: BudgetKind
    owner: Literal["a", "b"] | None = Field(None, description="the marker or record it "
                                                               "belongs to, if one")
    sd: float
    share: float


class WhatIf(Model):
    """The 95 % lag interval (yr) if one improvement were made: ``key`` for code, ``change``
    in words for people."""

    key: WhatIfKey
    change: str
    ci95: Pair
    width: float


class Histogram(Model):
    """Counts of draws in bins (edges in yr)."""

    edges: list[float]
    counts: list[int]


class RecordExcerpt(Model):
    """A record around its marker on the common timescale, for the overview figure."""

    label: str
    variable: str
    units: str | None = None
    reference_scale: str | None = None
    age_top: list[float]
    age_bottom: list[float]
    value: list[float | None]
    timescale_sd: list[float]


class LagFigures(Model):
    """What the report's figures draw, beyond the markers' own traces."""

    lag_histogram: Histogram
    records: list[RecordExcerpt]


class LagResult(Model):
    """The lag between two markers with its uncertainty budget."""

    request: LagRequest
    lag: LagSummary
    a: Marker
    b: Marker
    relation: str
    budget: list[BudgetItem]
    budget_total_sd: float
    resolution_floor: float
    what_if: list[WhatIf]
    verdict: str
    resolvable_lag: float = Field(description="the smallest true lag (yr) whose 95 % interval "
                                  "would exclude zero with probability 0.8 under this budget")
    assumptions: list[str]
    references: list[str] = Field(description="keys of the methods' references "
                                              "(align.references)")
    age_reference: AgeRef
    figures: LagFigures
    provenance: Provenance

    _draws: Any = PrivateAttr(default=None)
    _shared: Any = PrivateAttr(default=None)

    @property
    def draws(self):
        """The lag draws (yr; not serialised), or None when read back from JSON."""
        return self._draws

    @property
    def shared(self):
        """The terms of the lag that other lags of a survey may share (not serialised): a list
        of ``(key, scale, z)`` whose ``scale * z`` is added to :attr:`draws`, one standard
        normal ``z`` per key."""
        return self._shared or []


# --------------------------------------------------------------------------------------------
# surveys


class EventTable(Model):
    """A table of events (CSV/TSV) from which marker windows are made, one pair per row."""

    path: str
    label_column: str
    age_column: str
    age_reference: AgeRef
    window: Pair = Field(description="window around each tabulated age, [before, after] in "
                                     "years relative to it: [-250, 250] is age - 250 to "
                                     "age + 250")
    rows: list[str] | None = Field(None, description="labels to use (default: all)")


class PairSpec(Model):
    """One pair of a survey given explicitly."""

    label: str
    a: MarkerSpec
    b: MarkerSpec


class SurveySpec(LagSettings):
    """Many marker pairs: explicit ``pairs``, or a ``table`` with ``a`` and ``b`` templates;
    every pair's lag is estimated with the same settings."""

    pairs: list[PairSpec] | None = None
    table: EventTable | None = None
    a: MarkerTemplate | None = None
    b: MarkerTemplate | None = None


class SurveyPair(Model):
    """One pair's lag, or why it has none."""

    label: str
    lag: LagSummary | None = None
    a_age: Estimate | None = None
    b_age: Estimate | None = None
    verdict: str | None = None
    clear: bool = False
    error: str | None = None
    table_exclude: ClassVar[frozenset[str]] = frozenset({"a", "b"})  # markers: tables of their own

    a: Marker | None = Field(None, description="marker a as found for this pair, its curves "
                                               "thinned for figures")
    b: Marker | None = Field(None, description="marker b as found for this pair, its curves "
                                               "thinned for figures")


class QShare(Model):
    """A pair's share of Cochran's Q."""

    label: str
    share: float


class Heterogeneity(Model):
    """Cochran's Q of the pairs' lags about their weighted mean, the between-pair variance
    (yr^2) of DerSimonian & Laird (1986), the between-pair sd (yr) with its Q-profile 95 %
    interval (Viechtbauer 2007) and the pairs contributing most to Q."""

    q: float
    dof: int
    p_value: float
    tau2: float
    significant: bool = Field(False, description="p < 0.05: the pairs disagree more than "
                                                 "their uncertainties allow")
    tau: float = 0.0
    tau_ci95: Pair | None = None
    largest: list[QShare] = Field(default_factory=list, description="the pairs contributing "
                                  "most to Q, largest first")


class SurveyResult(Model):
    """Per-pair lags and their combination."""

    pairs: list[SurveyPair]
    combined: LagSummary | None = None
    prediction95: Pair | None = Field(None, description="95 % prediction interval (yr) of a "
                                      "new pair's lag (Higgins et al. 2009); 3 pairs or more")
    heterogeneity: Heterogeneity | None = None
    systematic: str
    n_used: int
    age_reference: AgeRef
    assumptions: list[str]
    references: list[str] = Field(description="keys of the methods' references "
                                              "(align.references)")
    provenance: Provenance


# --------------------------------------------------------------------------------------------
# requests of the single steps (HTTP API bodies; the CLI flags and library keywords mirror them)


class StepCommon(Model):
    """What a single detection names: the record, the variable, the window and its reference."""

    record: str
    variable: str
    window: Pair | None = Field(None, description="[young, old] ages to search (an onset "
                                                  "needs one)")
    seed: int | None = Field(None, ge=0, description="for kinds that draw")
    age_reference: AgeRef | None = Field(None, description="reference of the window and the "
                                                           "result (default: the record's)")


def _step_request(kind):
    return create_model(f"{kind.name.title()}Request", __base__=(kind.options, StepCommon),
                        __doc__=f"Find {kind.summary} (``POST /detect/{kind.name}``).")


#: One single-step request class per marker kind (``POST /detect/{kind}``).
DETECT_REQUESTS = {name: _step_request(kind) for name, kind in RECORD_KINDS.items()}
EventRequest = DETECT_REQUESTS["event"]
OnsetRequest = DETECT_REQUESTS["onset"]


class SeriesRef(Model):
    """A record and one of its variables."""

    record: str
    variable: str


class XcorrRequest(Model):
    """Cross-correlate (``cross_correlate``; ``POST /xcorr``)."""

    a: SeriesRef
    b: SeriesRef
    max_lag: float = Field(gt=0)
    step: float | None = Field(None, gt=0)
    method: CorrelationMethod = DEFAULT_CORRELATION_METHOD
    surrogates: int = Field(DEFAULT_SURROGATES, ge=0, le=100_000)
    surrogate_kind: SurrogateKind = DEFAULT_SURROGATE_KIND
    window: Pair | None = None
    seed: int | None = Field(None, ge=0)
    age_reference: AgeRef | None = None
    bootstrap: int = Field(DEFAULT_BOOTSTRAP, ge=10, le=100_000)


class ResampleRequest(Model):
    """Resample a record (``resample``; ``POST /resample``)."""

    record: str
    step: float | None = Field(None, gt=0)
    start: float | None = None
    stop: float | None = None
    variables: list[str] | None = None
    min_coverage: float = Field(DEFAULT_MIN_COVERAGE, ge=0, le=1)
    along: GridAxis = DEFAULT_GRID_AXIS
    interpolate: bool = False


class GridVariable(Model):
    """One variable of a common grid: units and how well its cells are covered."""

    name: str
    units: str | None = None
    valid_cells: int
    mean_coverage: float


class GridSummary(Model):
    """A common grid (``resample --json``; ``POST /resample``); the grid itself is NetCDF."""

    along: GridAxis
    age_reference: AgeRef | None = None
    step: float
    start: float
    stop: float
    cells: int
    variables: list[GridVariable]
    step_choice: str | None = None
    fine_cells: str


# --------------------------------------------------------------------------------------------
# synchrony: one horizon dated at many sites


class SiteSpec(Model):
    """One site where a horizon was found and dated: a marker on a record (``kind``,
    ``record``, ``variable``, ``window`` and the kind's options) or a tabulated date (``age``
    with ``sd``, ``age`` with a 95 % interval ``lower``/``upper``, or ``draws``: a one-column
    file of age draws, or the draws themselves)."""

    label: str = Field(min_length=1)
    kind: RecordKindName | None = None
    record: str | None = Field(None, description="a path (CLI, library) or a stored record's "
                                                 "id (HTTP API)")
    variable: str | None = None
    window: Pair | None = Field(None, description="where to look for the marker, in the "
                                                  "site's age reference")
    mapping: dict[str, Any] | None = Field(None, description="how to read a CSV record")
    threshold: float | None = Field(None, gt=0, description="events: robust z threshold")
    baseline_years: float | None = Field(None, gt=0, description="events: baseline span (yr)")
    pick: EventPick | None = None
    direction: OnsetDirection | None = None
    method: OnsetMethod | None = None
    age: float | None = None
    sd: float | None = None
    lower: float | None = None
    upper: float | None = None
    draws: str | list[float] | None = Field(None, description="a file of age draws (one "
                                                               "column; CLI and library) or "
                                                               "the draws themselves")
    age_reference: AgeConvention | None = Field(None, description="reference of this site's "
                                                                  "ages (default: the "
                                                                  "request's)")
    chronology: str | None = Field(None, description="sites on one chronology share its "
                                                     "error")
    shared_sd: float | None = Field(None, ge=0, description="sd (yr) of the chronology's "
                                                            "error at this site, part of its "
                                                            "total uncertainty")
    independent: bool = Field(True, description="false when the site's chronology was tied "
                                                "to or tuned on this event")


class SynchronyRequest(Model):
    """Sites of one horizon (``test_synchrony``; ``corealign synchrony``; ``POST
    /synchrony``)."""

    sites: list[SiteSpec] = Field(min_length=1, max_length=MAX_SITES)
    age_reference: AgeRef = DEFAULT_AGE_REFERENCE
    draws: int = Field(DEFAULT_LAG_DRAWS, ge=MIN_LAG_DRAWS, le=MAX_LAG_DRAWS)
    seed: int | None = Field(None, ge=0)
    outlier_prior: float = Field(DEFAULT_OUTLIER_PRIOR, gt=0, lt=1)


class SiteResult(Model):
    """One site's age on the common reference, how it was modelled and how it fits."""

    label: str
    source: Literal["record", "tabulated"]
    distribution: str
    age: Estimate
    mean: float
    shared_sd: float = Field(description="sd (yr) of the error shared with its chronology")
    near_gaussian: bool
    chronology: str | None = None
    independent: bool
    outlier_probability: float | None = Field(None, description="posterior probability that "
                                                                "the site is shifted "
                                                                "(independent sites only)")
    note: str | None = None


class ConsistencyTest(Model):
    """The generalised chi-square of one common age over the independent sites."""

    statistic: float
    dof: int
    p_value: float
    p_value_text: str = Field(description="the p-value in words; at the floor of a Monte "
                                          "Carlo calibration 'p < 1/(draws + 1)'")
    level: float
    consistent: bool
    calibration: Literal["chi-square", "Monte Carlo"]


class CombinedAge(Model):
    """The common age (GLS over the independent sites); meaningful only when ``supported``."""

    age: Estimate
    supported: bool
    label: str


class SiteSpread(Model):
    """Between-site sd of the true ages (yr): DerSimonian-Laird with its Q-profile 95 %
    interval, and how far two sites' true ages could differ (95 %)."""

    tau: float
    tau2: float
    ci95: Pair | None = Field(description="Q-profile 95 % interval of tau (yr); None when it "
                                          "is empty (the dates agree more closely than their "
                                          "errors predict)")
    could_differ_by: float | None = Field(description="yr; None when the interval is empty")
    statement: str


class LeaveOneOut(Model):
    """The test and the combined age without one site."""

    label: str
    p_value: float
    p_value_text: str = Field(description="the p-value in words; at the floor of a Monte "
                                          "Carlo calibration 'p < 1/(draws + 1)'")
    consistent: bool
    combined: Estimate
    shift: float = Field(description="combined median without the site minus with it (yr)")
    decisive: bool
    reason: str | None = None


class SynchronyWhatIf(Model):
    """The analysis over another choice of sites; ``key`` is for code, ``change`` for
    people."""

    key: SynchronyWhatIfKey
    change: str
    applicable: bool
    sites: list[str]
    p_value: float | None = None
    p_value_text: str | None = None
    consistent: bool | None = None
    combined: Estimate | None = None
    could_differ_by: float | None = None
    note: str | None = None


class SynchronyResult(Model):
    """Is one horizon the same age at many sites? (test, combined age, spread, outliers,
    influence, what-if, verdict)."""

    request: SynchronyRequest
    sites: list[SiteResult]
    n_independent: int
    test: ConsistencyTest
    combined: CombinedAge
    spread: SiteSpread
    top_outlier: str | None = None
    leave_one_out: list[LeaveOneOut]
    what_if: list[SynchronyWhatIf]
    verdict: str
    cautions: list[str]
    assumptions: list[str]
    references: list[str] = Field([], description="keys of the methods' references "
                                                  "(align.references)")
    age_reference: AgeRef
    provenance: Provenance

    _combined_draws: Any = PrivateAttr(default=None)


#: Every name of the schema, including those defined in :mod:`align.schema_base` and the marker
#: kinds (re-exported here so that the schema has one import path).
__all__ = [
    "AgeConversion", "AgeRef", "BudgetItem", "CoordinateInfo", "Curve", "DETECT_REQUESTS",
    "Estimate", "EventCandidate", "EventRequest", "EventResult", "EventTable",
    "GridSummary", "GridVariable", "Heterogeneity", "Histogram", "InputRef", "KINDS",
    "LagFigures", "LagRequest", "LagResult", "LagSettings", "LagSummary", "Levels", "Marker",
    "MarkerBase", "MarkerDraws", "MarkerSample", "MarkerSpec", "MarkerTemplate", "Model",
    "NoiseModel", "OnsetRequest", "OnsetResult", "Pair", "PairSpec", "PeakLag",
    "Provenance", "RecordExcerpt", "RecordInfo", "ResampleRequest", "SeriesRef", "Spread",
    "StepCommon", "SurrogateInfo", "SurveyPair", "SurveyResult", "SurveySpec", "Trace",
    "VariableInfo", "WhatIf", "XcorrRequest", "XcorrResult", "json_schemas", "validate_as",
    "SiteSpec", "SynchronyRequest", "SiteResult", "ConsistencyTest", "CombinedAge", "SiteSpread",
    "LeaveOneOut", "SynchronyWhatIf", "SynchronyResult"
]
