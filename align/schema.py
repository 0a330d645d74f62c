"""The one schema: requests and results shared by the library, the CLI and the HTTP API.

Every result class here is what a library function returns, what ``corealign ... --json``
prints (``to_dict()``), what the service answers, and what ``/openapi.json`` documents
(generated from these classes by :func:`json_schemas`). Nothing else defines these shapes.

Conventions: ages are in years in the named ``age_reference``; intervals are
``[lower, upper]`` in numbers (for ages: ``[young, old]``); lags are
``age(a) - age(b)``, positive when ``a`` happened first.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal, Union

from pydantic import BaseModel, ConfigDict, Field, PrivateAttr

Pair = Annotated[list[float], Field(min_length=2, max_length=2)]
AgeRef = Literal["b2k", "BP"]


class Model(BaseModel):
    """Base of every schema class: strict about unknown fields, JSON-ready."""

    model_config = ConfigDict(extra="forbid")

    def to_dict(self):
        """The JSON-ready dictionary (the shape of ``--json`` and of the API)."""
        return self.model_dump(mode="json")


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
# provenance and estimates


class InputRef(Model):
    """One input of a result: its role, where it came from, and its checksum."""

    role: str
    source: str
    sha256: str
    timescale: str = ""


class Provenance(Model):
    """What a result was made from: inputs, parameters, seed and version."""

    inputs: list[InputRef]
    parameters: dict[str, Any]
    seed: int | None = None
    version: str
    created: str


class Estimate(Model):
    """A quantity with its uncertainty: median, central 68 % and 95 % intervals, sd."""

    median: float
    ci68: Pair
    ci95: Pair
    sd: float


# --------------------------------------------------------------------------------------------
# markers


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


class Trace(Model):
    """The window's data and the fitted curves, enough to redraw a marker's figure."""

    age_top: list[float]
    age_bottom: list[float]
    value: list[float | None]
    curve_age: list[float] = []
    curve: list[float | None] = []
    band_low: list[float | None] = []
    band_high: list[float | None] = []
    threshold: list[float | None] = []


class MarkerBase(Model):
    """What every marker says: where it was looked for, how, and at what resolution."""

    record: str
    variable: str
    window: Pair
    age_reference: AgeRef
    method: str
    sample_interval: float | None = Field(None, description="age interval (yr) of the sample "
                                                            "holding the marker")
    depth: float | None = None
    trace: Trace
    provenance: Provenance

    _draws: Any = PrivateAttr(default=None)
    _fit_draws: Any = PrivateAttr(default=None)


class EventResult(MarkerBase):
    """An event: the oldest sample of the first anomalous run in forward time (or its peak)."""

    kind: Literal["event"] = "event"
    found: bool
    message: str
    event: Estimate | None = None
    sample: MarkerSample | None = None
    candidates: list[EventCandidate]
    threshold: float
    baseline_years: float
    scale: float
    pick: Literal["first", "peak"]
    direction: Literal["up", "down"]

    @property
    def age(self):
        """The event's age estimate (uniform over its sample), or None when none was found."""
        return self.event


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
    direction: Literal["up", "down"]
    clear_transition: bool
    reason: str | None = None
    draws_used: int

    @property
    def age(self):
        """The onset's age estimate."""
        return self.onset


Marker = Annotated[Union[EventResult, OnsetResult], Field(discriminator="kind")]


# --------------------------------------------------------------------------------------------
# cross-correlation


class PeakLag(Model):
    """The lag (yr) at the correlation peak, refined below the grid step, with its 95 %
    interval and where that interval comes from."""

    median: float
    ci95: Pair
    source: str


class Curve(Model):
    """Correlation against lag (yr)."""

    lags: list[float]
    r: list[float | None]


class SurrogateInfo(Model):
    """The surrogates behind the p-value."""

    kind: Literal["phase", "ar1"]
    count: int


class XcorrResult(Model):
    """Cross-correlation of two records: positive lags mean the pattern is older in a."""

    a: str
    b: str
    window: Pair
    method: Literal["pearson", "kernel"]
    peak_lag: PeakLag
    peak_correlation: float
    p_value: float | None
    n_eff: float
    surrogates: SurrogateInfo
    curve: Curve
    grid_step: float
    age_reference: AgeRef
    provenance: Provenance


# --------------------------------------------------------------------------------------------
# lag requests and results


class MarkerSpec(Model):
    """Which marker to find, where. ``record`` is a path (CLI,
    library; relative paths resolve beside the request file, then in the working folder) or
    a stored record's id (HTTP API)."""

    kind: Literal["event", "onset"]
    record: str
    variable: str
    window: Pair
    mapping: dict[str, Any] | None = Field(None, description="how to read a CSV record "
                                                             "(open_record keywords)")
    threshold: float | None = Field(None, gt=0, description="events: robust z threshold")
    baseline_years: float | None = Field(None, gt=0, description="events: baseline span (yr)")
    pick: Literal["first", "peak"] | None = None
    direction: Literal["auto", "up", "down"] | None = None
    method: Literal["ramp", "bayes"] | None = None
    draws: int | None = Field(None, ge=100, le=100_000, description="onsets: bootstrap or "
                                                                     "posterior draws")


class LagRequest(Model):
    """A lag request: the same for ``corealign lag --request``, ``POST /lag`` and
    ``estimate_lag``."""

    a: MarkerSpec
    b: MarkerSpec
    ties: str | None = Field(None, description="tie table between b (depth) and a "
                                               "(ref_depth/ref_age); b is moved onto a")
    age_reference: AgeRef = "b2k"
    draws: int = Field(20_000, ge=1000, le=1_000_000)
    seed: int | None = Field(None, ge=0)
    timescale_model: Literal["correlated", "random-walk"] = "correlated"
    bridge_rate: float | None = Field(None, ge=0)


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
    kind: Literal["resolution", "detection", "timescale", "tie", "bridge"]
    owner: Literal["a", "b"] | None = Field(None, description="the marker or record it "
                                                               "belongs to, if one")
    sd: float
    share: float


class WhatIf(Model):
    """The 95 % lag interval (yr) if one improvement were made."""

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
    resolvable_lag: float
    assumptions: list[str]
    age_reference: AgeRef
    figures: LagFigures
    provenance: Provenance

    _draws: Any = PrivateAttr(default=None)


def validate_as(model, data, *, source=None):
    """``model.model_validate(data)`` with the first problem raised as an
    :class:`~align.errors.InputError` that names the offending field."""
    from pydantic import ValidationError

    from align.errors import InputError

    try:
        return model.model_validate(data)
    except ValidationError as exc:
        first = exc.errors()[0]
        where = ".".join(map(str, first["loc"])) or None
        raise InputError(first["msg"], source=source, field=where) from None


def json_schemas(models):
    """JSON Schemas of ``models`` with references into ``#/components/schemas`` (OpenAPI)."""
    from pydantic.json_schema import models_json_schema

    _, top = models_json_schema([(m, "serialization") for m in models],
                                ref_template="#/components/schemas/{model}")
    return top.get("$defs", {})


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


class MarkerTemplate(Model):
    """A marker without its window (the table supplies it)."""

    kind: Literal["event", "onset"]
    record: str
    variable: str
    mapping: dict[str, Any] | None = None
    threshold: float | None = Field(None, gt=0)
    baseline_years: float | None = Field(None, gt=0)
    pick: Literal["first", "peak"] | None = None
    direction: Literal["auto", "up", "down"] | None = None
    method: Literal["ramp", "bayes"] | None = None
    draws: int | None = Field(None, ge=100, le=100_000)


class PairSpec(Model):
    """One pair of a survey given explicitly."""

    label: str
    a: MarkerSpec
    b: MarkerSpec


class SurveySpec(Model):
    """Many marker pairs: explicit ``pairs``, or a ``table`` with ``a`` and ``b`` templates."""

    pairs: list[PairSpec] | None = None
    table: EventTable | None = None
    a: MarkerTemplate | None = None
    b: MarkerTemplate | None = None
    ties: str | None = None
    age_reference: AgeRef = "b2k"
    draws: int = Field(20_000, ge=1000, le=1_000_000)
    seed: int | None = Field(None, ge=0)
    timescale_model: Literal["correlated", "random-walk"] = "correlated"


class SurveyPair(Model):
    """One pair's lag, or why it has none."""

    label: str
    lag: LagSummary | None = None
    a_age: Estimate | None = None
    b_age: Estimate | None = None
    verdict: str | None = None
    clear: bool = False
    error: str | None = None


class Heterogeneity(Model):
    """Cochran's Q of the pairs' lags about their weighted mean, and the between-pair
    variance (yr^2) of DerSimonian & Laird (1986)."""

    q: float
    dof: int
    p_value: float
    tau2: float


class SurveyResult(Model):
    """Per-pair lags and their combination."""

    pairs: list[SurveyPair]
    combined: LagSummary | None = None
    heterogeneity: Heterogeneity | None = None
    systematic: str
    n_used: int
    age_reference: AgeRef
    assumptions: list[str]
    provenance: Provenance


# --------------------------------------------------------------------------------------------
# requests of the single steps (HTTP API bodies; the CLI flags and library keywords mirror them)


class EventRequest(Model):
    """Find an event (``detect_event``; ``POST /detect/event``)."""

    record: str
    variable: str
    window: Pair | None = None
    threshold: float = Field(5.0, gt=0)
    baseline_years: float | None = Field(None, gt=0)
    pick: Literal["first", "peak"] = "first"
    direction: Literal["up", "down"] = "up"
    age_reference: AgeRef | None = None


class OnsetRequest(Model):
    """Fit an onset (``detect_onset``; ``POST /detect/onset``)."""

    record: str
    variable: str
    window: Pair
    direction: Literal["auto", "up", "down"] = "auto"
    method: Literal["ramp", "bayes"] = "ramp"
    draws: int = Field(2000, ge=100, le=100_000)
    seed: int | None = Field(None, ge=0)
    age_reference: AgeRef | None = None


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
    method: Literal["pearson", "kernel"] = "pearson"
    surrogates: int = Field(1000, ge=0, le=100_000)
    surrogate_kind: Literal["phase", "ar1"] = "phase"
    window: Pair | None = None
    seed: int | None = Field(None, ge=0)
    age_reference: AgeRef | None = None
    bootstrap: int = Field(1000, ge=10, le=100_000)


class ResampleRequest(Model):
    """Resample a record (``resample``; ``POST /resample``)."""

    record: str
    step: float | None = Field(None, gt=0)
    start: float | None = None
    stop: float | None = None
    variables: list[str] | None = None
    min_coverage: float = Field(0.5, ge=0, le=1)
    along: Literal["age", "depth"] = "age"
    interpolate: bool = False


class GridVariable(Model):
    """One variable of a common grid: units and how well its cells are covered."""

    name: str
    units: str | None = None
    valid_cells: int
    mean_coverage: float


class GridSummary(Model):
    """A common grid (``resample --json``; ``POST /resample``); the grid itself is NetCDF."""

    along: Literal["age", "depth"]
    age_reference: AgeRef | None = None
    step: float
    start: float
    stop: float
    cells: int
    variables: list[GridVariable]
    step_choice: str | None = None
    fine_cells: str


# --------------------------------------------------------------------------------------------
# the service's own bodies


class Health(Model):
    """``GET /health``."""

    status: Literal["ok"]
    version: str


class RecordEntry(Model):
    """A stored record in the catalogue."""

    id: str
    name: str
    archive: str | None = None
    site: str | None = None
    timescale: str | None = None
    timescale_kind: str | None = None
    age_reference: AgeRef | None = None
    n_samples: int
    variables: list[str]
    depth_range: Pair | None = None
    age_range: Pair | None = None
    checksum: str
    created: str


class RecordList(Model):
    """``GET /records``."""

    records: list[RecordEntry]


class StoredRecord(Model):
    """``POST /records`` and ``GET /records/{id}``: the catalogue entry and what it holds."""

    entry: RecordEntry
    info: RecordInfo


class StoredTies(Model):
    """``POST /ties``."""

    id: str
    labels: list[str]
    ref_kind: Literal["depth", "age"]
    checksum: str


class Problem(Model):
    """An RFC 9457 problem-details body (``application/problem+json``)."""

    model_config = ConfigDict(extra="allow")

    type: str
    title: str
    status: int
    detail: str
    instance: str | None = None
    pointer: str | None = Field(None, description="JSON pointer to the offending field")
