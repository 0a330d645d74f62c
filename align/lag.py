"""The lag between two markers, with an uncertainty budget that says what limits it.

``lag = age(a) - age(b)``: positive when ``a`` happened first. One joint Monte Carlo adds, with
their correlations, every source of uncertainty: where an event sits inside its sample, where
an onset sits under autocorrelated noise (and inside its sample), and how the two timescales
relate -- within one core or timescale only the error between the two positions counts; records
joined by tie points share the reference timescale and add the tie and between-tie (bridge)
errors; two cores on one shared (layer-counted or synchronised) timescale share its error and
add their synchronisation error; independent timescales add both absolute errors; age
ensembles are drawn member by member. Each source is kept as its own column of draws, so the
budget, the resolution floor and the what-if intervals come from the same draws.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from align.detect import detect_marker
from align.choices import DEFAULT_AGE_ERROR_SCALE, DEFAULT_SYNC_SD
from align.errors import InputError
from align.io import open_record
from align.transforms import marker_variable
from align.provenance import dataset_checksum, provenance, record_input, resolve_seed
from align.record import age_sigma, record_name, uncertainty_kind, with_age_reference
from align.markers import Part, kind_of
from align.choices import RAMP_RATIO
from align.markers.onset import flag_ramp_ratio
from align.schema import (BudgetItem, Histogram, LagFigures, LagRequest, LagResult, LagSummary,
                          Model, RecordExcerpt, WhatIf, validate_as)
from align.ties import bridge_variance, read_ties, transfer
from align.timescale import ensemble_at, error_covariance, layer_sd, mce_covariance

CAUTION = ("A lag within its uncertainty does not establish cause or its absence; even a "
           "resolved lag shows order, not cause.")


# --------------------------------------------------------------------------------------------
# requests and sources


class Sources:
    """Finds the records and tie tables a request names (paths, or records already in
    memory). The HTTP service uses a subclass that looks ids up in its store."""

    def __init__(self, loaded=None):
        self.loaded = dict(loaded or {})

    def path(self, name):
        return Path(name)

    def record(self, spec):
        if spec.record in self.loaded:
            return self.loaded[spec.record]
        return open_record(self.path(spec.record), **(spec.mapping or {}))

    def ties(self, name):
        return read_ties(self.path(name))

    def transfer(self, record, ties, reference, bridge_rate=None):
        """``record`` on ``reference``'s timescale through ``ties`` (a survey reuses it)."""
        return transfer(record, ties, reference, bridge_rate=bridge_rate)


def lag_request(a, b=None, **options):
    """A :class:`LagRequest` and its :class:`Sources` from any of the accepted forms.

    ``a`` may be a whole request (a :class:`LagRequest` or a dict with ``a`` and ``b``; read a
    request file with :func:`align.read_request`), or the first marker (a marker spec or dict)
    with ``b`` the second. In marker dicts, ``record`` may be an in-memory record (an
    xarray.Dataset).
    """
    loaded = {}
    if isinstance(a, (str, Path)):
        raise InputError("estimate_lag takes a request or two markers, not a file; read the "
                         "file with align.read_request", source=str(a), field="a")
    if isinstance(a, LagRequest):
        body = a.model_dump()
    elif isinstance(a, dict) and "a" in a and b is None:
        body = dict(a)
    else:
        body = {"a": a, "b": b}
    body.update({k: v for k, v in options.items() if v is not None})
    for key in ("a", "b"):
        spec = body.get(key)
        if isinstance(spec, Model):
            body[key] = spec.model_dump()
        elif isinstance(spec, dict) and not isinstance(spec.get("record", ""), str):
            record = spec["record"].copy()  # labelled below; the caller's object stays as is
            record.attrs.setdefault("source_checksum", dataset_checksum(record))
            name = f"<in-memory {record_name(record)} {record.attrs['source_checksum'][:12]}>"
            record.attrs.setdefault("source", name)
            loaded[name] = record
            body[key] = {**spec, "record": name}
    return validate_as(LagRequest, body), Sources(loaded)


# --------------------------------------------------------------------------------------------
# the Monte Carlo


def estimate_lag(a, b=None, *, ties=None, draws=None, seed=None, age_reference=None,
                 timescale_model=None, bridge_rate=None, sync_sd=None, age_error_scale=None,
                 sources=None):
    """Estimate the lag between two markers with a full uncertainty budget.

    Parameters
    ----------
    a, b : MarkerSpec or dict, or a whole request in ``a``
        See :func:`lag_request` (a request dict or a :class:`LagRequest`; a request file is
        read with :func:`align.read_request`).
    ties : str, optional
        Tie table between ``b`` (``depth``) and ``a`` (``ref_depth``/``ref_age``); ``b``'s
        record is moved onto ``a``'s timescale through it.
    draws : int, optional
        Monte Carlo draws (default 20,000).
    seed : int, optional
        Drawn and recorded when None.
    age_reference : {"b2k", "BP"}, optional
        Reference of the windows and results (default b2k).
    timescale_model : {"correlated", "random-walk"}, optional
        Layer-counting error model (see :mod:`align.timescale`).
    bridge_rate : float, optional
        Between-tie variance rate (yr^2 per yr); default from the ties.
    sync_sd : float, optional
        Synchronisation error (1 sd, yr) between two cores on one shared timescale (default
        :data:`align.choices.DEFAULT_SYNC_SD`, stated in the assumptions).
    age_error_scale : float, optional
        Age scale (yr) over which the errors of a timescale given only as an sd stay
        correlated (default :data:`align.choices.DEFAULT_AGE_ERROR_SCALE`, stated in the
        assumptions; see :func:`align.timescale.sd_covariance`).
    sources : Sources, optional
        Where records and ties come from (the HTTP service passes its store).

    Returns
    -------
    LagResult
        ``lag`` (yr; positive: a first), both markers, the ``budget`` (sd in yr, shares of
        the summed variance), ``resolution_floor`` (yr), ``what_if`` intervals, ``verdict``,
        ``assumptions`` and provenance.
    """
    request, found = lag_request(a, b, ties=ties, draws=draws, seed=seed,
                                 age_reference=age_reference, timescale_model=timescale_model,
                                 bridge_rate=bridge_rate, sync_sd=sync_sd,
                                 age_error_scale=age_error_scale)
    sources = sources or found
    seed = resolve_seed(request.seed)
    request = request.model_copy(update={"seed": seed})
    seed_a, seed_b, seed_mc = (int(s.generate_state(1)[0])
                               for s in np.random.SeedSequence(seed).spawn(3))
    ref = request.age_reference
    rec_a = _on_reference(_record(sources, request.a), ref)
    rec_b = _record(sources, request.b)
    tie_table = sources.ties(request.ties) if request.ties else None
    if tie_table is not None and rec_b is None:
        raise InputError("ties move marker b's record onto a's; marker b has no record",
                         field="ties")
    if tie_table is not None:
        rec_b = sources.transfer(rec_b, tie_table, rec_a, bridge_rate=request.bridge_rate)
    rec_b = _on_reference(rec_b, ref)
    relation = _relation(rec_a, rec_b)
    _warn_uncounted(rec_a, rec_b)
    marker_a = _detected(rec_a, request.a, seed_a, ref, "a")
    marker_b = _detected(rec_b, request.b, seed_b, ref, "b")
    kind_a, kind_b = kind_of(marker_a.kind), kind_of(marker_b.kind)
    rng = np.random.default_rng(seed_mc)
    n = request.draws
    age_a, age_b = kind_a.center(marker_a), kind_b.center(marker_b)
    center = age_a - age_b
    own = kind_a.parts(marker_a, "a", +1.0, n, rng) + kind_b.parts(marker_b, "b", -1.0, n, rng)
    state = rng.bit_generator.state  # the timescale parts' draws, repeated by the what-ifs
    timing = (relation, rec_a, rec_b, age_a, age_b)
    parts = own + _timescale_parts(*timing, request, n, rng)
    lag = center + sum(p.draws for p in parts)
    others = [(key, change, center + sum(p.draws for p in own + _timescale_parts(
        *timing, other, n, _generator(state))))
        for key, change, other in _other_timescales(relation, rec_a, rec_b, parts, request)]
    result = _result(request, lag, center, parts, marker_a, marker_b, relation, rec_a, rec_b,
                     tie_table, seed, others)
    if flag_ramp_ratio(marker_a, marker_b):
        result.assumptions[-1:-1] = _midpoint_note(request, sources)
    result._draws = lag
    result._shared = [term for p in parts if isinstance(p, JointPart) for term in p.terms]
    return result


def _midpoint_note(request, sources):
    """The lag of ``request`` taken at both transitions' midpoints, as a caution (a list of
    one sentence; when the lag already is at the midpoints, the caution alone)."""
    if request.a.position == request.b.position == "midpoint":
        return [f"Caution: the two ramps differ in length more than {RAMP_RATIO:g}-fold; the "
                "lag is taken at their midpoints, where the difference matters least."]
    at_midpoints = request.model_copy(update={
        key: getattr(request, key).model_copy(update={"position": "midpoint"})
        for key in ("a", "b")})
    lag = estimate_lag(at_midpoints, sources=sources).lag
    return [f"Caution: the two ramps differ in length more than {RAMP_RATIO:g}-fold, so the "
            f"lag depends on the point chosen on them; at both midpoints a - b would be "
            f"{lag.median:.0f} years (95 %: {lag.ci95[0]:.0f} to {lag.ci95[1]:.0f})."]


@dataclass
class JointPart(Part):
    """A part made of standard normals that other lags may share: ``draws = sum(scale * z)``
    over ``terms`` of ``(key, scale, z)``; a survey draws one ``z`` per key for all pairs."""

    terms: list = field(default_factory=list)


def joint_part(component, kind, owner, terms):
    return JointPart(component, kind, owner, sum(scale * z for _, scale, z in terms), terms)


def _detected(record, spec, seed, reference, label):
    """Marker ``label`` found and usable; a problem with it names the field under ``label``."""
    try:
        marker = detect_marker(record, spec, seed=seed, age_reference=reference)
    except InputError as exc:
        field = exc.field or ""
        field = field if field.startswith(f"{label}.") else f"{label}.{field}".rstrip(".")
        raise InputError(exc.message, source=exc.source, field=field, row=exc.row,
                         row_kind=exc.row_kind, status=exc.status) from None
    kind_of(marker.kind).usable(marker, label)
    return marker


def _record(sources, spec):
    """The record a marker is found on, or None for a kind that is not on a record."""
    return sources.record(spec) if kind_of(spec.kind).on_record else None


def _on_reference(record, reference):
    return None if record is None else with_age_reference(record, reference)


# --------------------------------------------------------------------------------------------
# how the two timescales relate


def _relation(rec_a, rec_b):
    """``same record``, ``same timescale``, ``tied``, ``shared timescale`` or ``independent``.

    Equal ``timescale`` names mean a shared timescale only when it is real: a layer-counted
    timescale (``timescale_kind`` or an ``age_mce``) or a record synchronised onto it
    (``transferred``). Two modelled age models that happen to carry one name are independent
    (see :func:`_name_only`). A marker that is not on a record carries its own absolute
    error: independent."""
    if rec_a is None or rec_b is None:
        return "independent"
    attrs_a, attrs_b = rec_a.attrs, rec_b.attrs
    if (attrs_b.get("timescale_kind") == "transferred"
            and attrs_b.get("reference_checksum") == attrs_a.get("source_checksum")):
        return "tied"
    if attrs_a.get("source_checksum") and attrs_a.get("source_checksum") == attrs_b.get(
            "source_checksum"):
        return "same record"
    same_scale = attrs_a.get("timescale") and attrs_a.get("timescale") == attrs_b.get(
        "timescale")
    if same_scale and attrs_a.get("core") and attrs_a.get("core") == attrs_b.get("core"):
        return "same timescale"
    if same_scale and any(_counted(r) or r.attrs.get("timescale_kind") == "transferred"
                          for r in (rec_a, rec_b)):
        return "shared timescale"
    return "independent"


def _counted(record):
    return record is not None and (record.attrs.get("timescale_kind") == "layer-counted"
                                   or "age_mce" in record)


def _name_only(relation, rec_a, rec_b):
    """True when the records name one timescale that is not taken as shared."""
    if rec_a is None or rec_b is None:
        return False
    name = rec_a.attrs.get("timescale")
    return relation == "independent" and bool(name) and name == rec_b.attrs.get("timescale")


def _warn_uncounted(*records):
    """Warn about a layer-counted record that states no age uncertainty."""
    for record in records:
        if _counted(record) and uncertainty_kind(record) == "none":
            warnings.warn(f"{record_name(record)} is on a layer-counted timescale but states no "
                          "age uncertainty (no age_mce, age_sd or age_ensemble): its counting "
                          "error is missing from the lag", UserWarning, stacklevel=3)


def _timescale_parts(relation, rec_a, rec_b, age_a, age_b, request, n, rng):
    """Timescale, tie, bridge and synchronisation errors at the markers' central ages
    ``age_a``, ``age_b``; parts that are zero in every draw are left out."""
    parts = _error_parts(relation, rec_a, rec_b, age_a, age_b, request, n, rng)
    return [p for p in parts if np.any(p.draws != 0)]


def _error_parts(relation, rec_a, rec_b, age_a, age_b, request, n, rng):
    model = request.timescale_model
    if relation in ("same record", "same timescale"):
        return _within_one(rec_a, age_a, age_b, request, n, rng,
                           "timescale: error between the two markers")
    if relation == "tied":
        return (_within_one(rec_a, age_a, age_b, request, n, rng,
                            f"timescale of {record_name(rec_a)}: error between the markers")
                + _tie_parts(rec_b, age_b, n, rng))
    if relation == "shared timescale":
        return _shared_parts(rec_a, rec_b, age_a, age_b, request, n, rng)
    return [_absolute(rec, age, label, sign, n, rng, model)
            for rec, age, label, sign in ((rec_a, age_a, "a", +1.0), (rec_b, age_b, "b", -1.0))
            if rec is not None]


def _shared_parts(rec_a, rec_b, age_a, age_b, request, n, rng):
    """One shared timescale: its error at the two markers (the profile of whichever record
    carries it serves both when only one does) and the cores' synchronisation error."""
    carries = [uncertainty_kind(r) != "none" for r in (rec_a, rec_b)]
    profile_a = rec_a if carries[0] or not carries[1] else rec_b
    profile_b = rec_b if carries[1] else profile_a
    sig = np.array([_sigma_at(profile_a, age_a), _sigma_at(profile_b, age_b)])
    counted = all(uncertainty_kind(p) == "mce" for p in (profile_a, profile_b))
    # an sd profile (a record synchronised onto the timescale) keeps its sd at each marker
    cov = (mce_covariance(2.0 * sig, request.timescale_model) if counted
           else np.outer(sig, sig) if request.timescale_model == "correlated"
           else np.minimum.outer(sig, sig) ** 2)
    e = _bivariate(cov, n, rng)
    return [Part(f"shared timescale ({rec_a.attrs.get('timescale')}): error between the "
                 "markers", "timescale", None, e[:, 0] - e[:, 1]),
            Part(f"synchronisation of {record_name(rec_a)} and {record_name(rec_b)} "
                 f"(sd {request.sync_sd:g} yr)", "sync", None,
                 rng.normal(0.0, request.sync_sd, n))]


def _sigma_at(record, age):
    sigma = age_sigma(record)
    return 0.0 if sigma is None else float(np.interp(age, record["age"].values, sigma))


def _bivariate(cov, n, rng):
    vals, vecs = np.linalg.eigh(cov)
    return rng.standard_normal((n, 2)) @ (vecs * np.sqrt(np.clip(vals, 0, None))).T


def _within_one(record, age_a, age_b, request, n, rng, name):
    """Errors of one timescale at two positions: only their difference enters the lag (an
    sd-only timescale's errors correlated over ``request.age_error_scale``)."""
    kind = uncertainty_kind(record)
    if kind == "none":
        return []
    if "age_ensemble" in record:  # member-paired
        members = ensemble_at(record, np.array([age_a, age_b]))
        pick = rng.integers(0, members.shape[0], n)
        diff = (members[pick, 0] - age_a) - (members[pick, 1] - age_b)
        return [Part(f"{name} (age ensemble, member-paired)", "timescale", None, diff)]
    e = _bivariate(error_covariance(record, [age_a, age_b], request.timescale_model,
                                    request.age_error_scale), n, rng)
    return [Part(name, "timescale", None, e[:, 0] - e[:, 1])]


def _absolute(record, age, label, sign, n, rng, model):
    """One record's absolute timescale error at ``age``. Lags sharing the record share it:
    a counted timescale (correlated model) has one error per core, scaled by its sd at each
    age; otherwise lags share it at the same age only."""
    name = f"{label}: timescale of {record_name(record)} (absolute)"
    if "age_ensemble" in record:
        members = ensemble_at(record, np.array([age]))[:, 0]
        return Part(name + ", age ensemble", "timescale", label,
                    sign * (members[rng.integers(0, members.size, n)] - age))
    ident = record.attrs.get("source_checksum") or record_name(record)
    counted = uncertainty_kind(record) == "mce"
    per_core = counted and model == "correlated"
    key = ("timescale", ident) if per_core else ("timescale", ident, round(float(age), 1))
    sd = (float(np.sqrt(mce_covariance([2.0 * _sigma_at(record, age)], model)[0, 0]))
          if counted else _sigma_at(record, age))
    return joint_part(name, "timescale", label, [(key, sign * sd, rng.standard_normal(n))])


def _generator(state):
    """A generator at a saved ``bit_generator.state``: the same draws again."""
    rng = np.random.default_rng()
    rng.bit_generator.state = state
    return rng


def _other_timescales(relation, rec_a, rec_b, parts, request):
    """The what-if rows that redraw the timescale parts under another assumption, as
    ``(key, change, request)``: the other counting-error model when a counted timescale
    enters the lag; fully correlated and independent errors of an sd-only timescale within
    one core."""
    kinds = {p.kind for p in parts}
    records = [r for r in (rec_a, rec_b) if r is not None]
    out = []
    if "timescale" in kinds and any(uncertainty_kind(r) == "mce" for r in records):
        other = OTHER_MODEL[request.timescale_model]
        out.append(("other_counting_model", f"the {other} counting-error model instead of the "
                    f"{request.timescale_model} one",
                    request.model_copy(update={"timescale_model": other})))
    if "timescale" in kinds and _sd_within_one(relation, rec_a):
        out += [("timescale_fully_correlated", "errors of the sd-only timescale fully "
                 "correlated (one shift of the whole core)",
                 request.model_copy(update={"age_error_scale": np.inf})),
                ("timescale_independent", "errors of the sd-only timescale independent "
                 "between depths", request.model_copy(update={"age_error_scale": 0.0}))]
    return out


#: The other layer-counting error model of each.
OTHER_MODEL = {"correlated": "random-walk", "random-walk": "correlated"}


def _sd_within_one(relation, record):
    """True when one sd-only timescale's errors at both markers enter the lag."""
    return (relation in ("same record", "same timescale", "tied") and record is not None
            and uncertainty_kind(record) == "sd" and "age_ensemble" not in record)


def _tie_parts(moved, age_b, n, rng):
    """Tie and bridge errors of the transferred record at b's position (subtracted)."""
    attrs = moved.attrs
    tie_age, tie_sd = (np.atleast_1d(np.asarray(attrs[k], dtype=float))
                       for k in ("tie_age", "tie_sd"))
    rate = float(attrs["bridge_rate"])
    # the tie weights by where b sits between its two ties on the transferred (increasing)
    # timescale: the same fraction as in depth (or own age) for the linear transfer
    k = int(np.clip(np.searchsorted(tie_age, age_b, side="right") - 1, 0, tie_age.size - 2))
    w = float(np.clip((age_b - tie_age[k]) / (tie_age[k + 1] - tie_age[k]), 0.0, 1.0))
    table = ("tie", attrs.get("reference_checksum"), tuple(np.round(tie_age, 3)))
    ties = [(table + (j,), -weight * tie_sd[j], rng.standard_normal(n))
            for j, weight in ((k, 1 - w), (k + 1, w))]
    x1, x2 = tie_age[k], tie_age[k + 1]
    inside = bridge_variance(min(max(age_b, x1), x2), x1, x2, rate)
    beyond = rate * (max(tie_age[0] - age_b, 0.0) + max(age_b - tie_age[-1], 0.0))
    bridge = rng.normal(0.0, np.sqrt(inside + beyond), n)
    labels = attrs.get("tie_labels", "").split("; ")
    between = (f"between ties {labels[k]!r} and {labels[k + 1]!r}" if len(labels) == tie_age.size
               else "between ties")
    return [joint_part("tie points (match uncertainty)", "tie", "b", ties),
            Part(f"{between} (bridge, rate {rate:.3g} yr^2/yr)", "bridge", "b", -bridge)]


# --------------------------------------------------------------------------------------------
# the result


#: The probability with which :func:`resolvable_lag` resolves a lag of its size.
RESOLVE_PROBABILITY = 0.8


def resolvable_lag(lag, probability=RESOLVE_PROBABILITY):
    """The smallest true lag (yr) whose 95 % interval excludes zero with ``probability``.

    Notes
    -----
    With the lag's error ``e = draw - median`` (its distribution taken as fixed under a shift
    of the true lag ``L``), the interval ``L + e + [q2.5 - m, q97.5 - m]`` lies above zero when
    ``e > -(L - (m - q2.5))``; that has probability ``p`` when ``L = (m - q2.5) +
    (m - q_{1-p})``. The same on the negative side; the larger of the two is returned. For a
    normal lag this is ``(1.96 + 0.84) sd`` at ``p = 0.8`` -- the half-width of the 95 %
    interval alone (``1.96 sd``) is resolved only about half of the time.
    """
    q = np.percentile(lag, [2.5, 100 * (1 - probability), 50.0, 100 * probability, 97.5])
    return float(max((q[2] - q[0]) + (q[2] - q[1]), (q[4] - q[2]) + (q[3] - q[2])))


def lag_summary(lag):
    """Median, 68 % and 95 % intervals, sd and P(lag > 0) of lag draws (yr)."""
    q = np.percentile(lag, [2.5, 16.0, 50.0, 84.0, 97.5])
    return LagSummary(median=float(q[2]), ci68=[float(q[1]), float(q[3])],
                      ci95=[float(q[0]), float(q[4])], sd=float(np.std(lag)),
                      p_a_before_b=float(np.mean(lag > 0)))


#: The what-if rows: machine key -> (the change in words, how much it scales a budget part).
WHAT_IFS = {
    "halve_resolution_a": ("halve the sample interval of a",
                           lambda p: 0.5 if p.kind == "resolution" and p.owner == "a" else 1.0),
    "halve_resolution_b": ("halve the sample interval of b",
                           lambda p: 0.5 if p.kind == "resolution" and p.owner == "b" else 1.0),
    "halve_ties": ("halve the tie-point uncertainty", lambda p: 0.5 if p.kind == "tie" else 1.0),
    "double_ties": ("double the number of tie points (halving the bridge variance)",
                    lambda p: np.sqrt(0.5) if p.kind == "bridge" else 1.0),
    "no_timescale": ("remove the timescale error",
                     lambda p: 0.0 if p.kind == "timescale" else 1.0),
    "halve_sync": ("halve the synchronisation error between the cores",
                   lambda p: 0.5 if p.kind == "sync" else 1.0),
    # the bridge variance is proportional to its rate (align.ties.bridge_variance)
    "bridge_rate_half": ("halve the bridge rate between ties",
                         lambda p: np.sqrt(0.5) if p.kind == "bridge" else 1.0),
    "bridge_rate_double": ("double the bridge rate between ties",
                           lambda p: np.sqrt(2.0) if p.kind == "bridge" else 1.0),
}
#: The budget kind each what-if row acts on (rows for kinds absent from a lag are left out).
WHAT_IF_KIND = {"halve_resolution_a": "resolution", "halve_resolution_b": "resolution",
                "halve_ties": "tie", "double_ties": "bridge", "no_timescale": "timescale",
                "halve_sync": "sync", "bridge_rate_half": "bridge",
                "bridge_rate_double": "bridge"}


def what_if_for(kind, owner):
    """The key of the what-if row that shrinks a budget item of ``kind`` (and ``owner``)."""
    if kind == "resolution":
        return f"halve_resolution_{owner}"
    return next((key for key, k in WHAT_IF_KIND.items() if k == kind), None)


def _what_ifs(center, parts, others=()):
    """What-if rows: each scaling row of :data:`WHAT_IFS` whose kind is present, then the
    ``others`` (``(key, change, lag draws)``) redrawn under another timescale assumption."""
    present = {(p.kind, p.owner) for p in parts} | {(p.kind, None) for p in parts}
    rows = []
    for key, (change, scale) in WHAT_IFS.items():
        owner = key[-1] if WHAT_IF_KIND[key] == "resolution" else None
        if (WHAT_IF_KIND[key], owner) in present:
            rows.append((key, change, center + sum(scale(p) * p.draws for p in parts)))
    out = []
    for key, change, lag in rows + list(others):
        lo, hi = np.percentile(lag, [2.5, 97.5])
        out.append(WhatIf(key=key, change=change, ci95=[float(lo), float(hi)],
                          width=float(hi - lo)))
    return out


def _side(ci95):
    """+1, -1 or 0: an interval above zero, below it, or holding it."""
    return 1 if ci95[0] > 0 else -1 if ci95[1] < 0 else 0


def _sensitivity(what_if, summary, request):
    """Sentences for the what-if rows that redraw or rescale an assumption of the model."""
    rows = {w.key: w for w in what_if}
    out = []
    if "other_counting_model" in rows:
        w = rows["other_counting_model"]
        other = OTHER_MODEL[request.timescale_model]
        out.append(f"Under the other counting-error model ({other}) the 95 % "
                   f"interval would be {w.ci95[0]:.0f} to {w.ci95[1]:.0f} years.")
    if "bridge_rate_half" in rows:
        half, double = rows["bridge_rate_half"], rows["bridge_rate_double"]
        out.append(f"With the bridge rate halved the 95 % interval would be {half.ci95[0]:.0f} "
                   f"to {half.ci95[1]:.0f} years; doubled, {double.ci95[0]:.0f} to "
                   f"{double.ci95[1]:.0f} years.")
    if "timescale_fully_correlated" in rows:
        full, free = rows["timescale_fully_correlated"], rows["timescale_independent"]
        out.append(f"With the sd-only timescale's errors fully correlated the 95 % interval "
                   f"would be {full.ci95[0]:.0f} to {full.ci95[1]:.0f} years; independent "
                   f"between depths, {free.ci95[0]:.0f} to {free.ci95[1]:.0f} years.")
        if len({_side(summary.ci95), _side(full.ci95), _side(free.ci95)}) > 1:
            out.append("The verdict changes between fully correlated and independent timescale "
                       "errors: an age ensemble from the age model (age_ensemble) would carry "
                       "the real correlation and decide it.")
    return out


def verdict(summary, marker_a, marker_b):
    """The lag in words, with its 95 % interval."""
    lo, hi = summary.ci95
    a, b = (kind_of(m.kind).describe(m) for m in (marker_a, marker_b))
    interval = f"(95 %: {lo:.0f} to {hi:.0f})"
    if lo > 0:
        return f"{a} precedes {b} by {summary.median:.0f} years {interval}"
    if hi < 0:
        return f"{a} follows {b} by {-summary.median:.0f} years {interval}"
    return (f"{a} and {b} are indistinguishable within uncertainty: a - b = "
            f"{summary.median:.0f} years {interval}")


def _used_parameters(request, marker_a, marker_b, rec_b):
    """The request's parameters with the values actually used where it left the choice to
    the method: each marker's resolved settings (threshold, background, baseline, direction)
    and the bridge rate estimated from the ties."""
    used = request.model_dump(exclude={"seed"})
    for side, marker in (("a", marker_a), ("b", marker_b)):
        resolved = marker.provenance.parameters
        used[side].update({k: v for k, v in resolved.items() if k in used[side]})
    if rec_b is not None and "bridge_rate" in rec_b.attrs:
        used["bridge_rate"] = float(rec_b.attrs["bridge_rate"])
    return used


def _assumptions(relation, rec_a, rec_b, marker_a, marker_b, request):
    model = request.timescale_model
    out = []
    kinds = {uncertainty_kind(r) for r in (rec_a, rec_b) if r is not None}
    if "mce" in kinds:
        out.append("The maximum counting error of a layer-counted timescale is taken as 2 sigma "
                   "(Andersen et al. 2006; common practice).")
        out.append(_counting_sentence(model, rec_a, rec_b))
    if relation == "tied":
        out.append(f"{record_name(rec_b)} is on the timescale of {record_name(rec_a)} through "
                   f"tie points; between ties a Brownian bridge with rate "
                   f"{float(rec_b.attrs['bridge_rate']):.3g} yr^2/yr "
                   f"({rec_b.attrs.get('bridge_rate_choice', '')}).")
    if relation == "shared timescale":
        out += _shared_assumptions(rec_a, rec_b, request)
    if _name_only(relation, rec_a, rec_b):
        out.append(f"Both records name the timescale {rec_a.attrs.get('timescale')!r}, but it "
                   "is neither layer-counted nor one they were synchronised onto "
                   "(timescale_kind), so their age models are taken as independent.")
    for record in (rec_a, rec_b):
        if _counted(record) and uncertainty_kind(record) == "none":
            out.append(f"{record_name(record)} is layer-counted but states no age uncertainty; "
                       "its counting error is not included.")
    if relation == "independent":
        out.append("The two timescales are independent: both absolute timescale errors count.")
    if _sd_within_one(relation, rec_a):
        scale = request.age_error_scale
        how = ("default, common practice: about the spacing of dated levels; set "
               "age_error_scale" if scale == DEFAULT_AGE_ERROR_SCALE
               and "age_error_scale" not in request.model_fields_set else "as requested")
        out.append(f"The timescale of {record_name(rec_a)} is given only as an sd: its errors "
                   f"at two depths are correlated as exp(-|age difference| / {scale:g} yr) "
                   f"({how}); an age ensemble would carry the age model's real correlation.")
    for label, marker in (("a", marker_a), ("b", marker_b)):
        out += kind_of(marker.kind).assumptions(marker, label)
    out.append("What-if rows scale only the named term (halving a sample interval halves the "
               "resolution terms; the fit noise is kept); rows for another counting-error model "
               "or timescale correlation redraw the timescale terms from the same random "
               "numbers.")
    out.append(CAUTION)
    return out


def _counting_sentence(model, rec_a, rec_b):
    """The counting-error model in words, with the miscount per year of ice it implies."""
    if model == "correlated":
        return (f"Counting errors follow the {model} model: one systematic bias growing with "
                "depth, so two nearby depths share almost all of it.")
    per_layer = [float(np.median(layer_sd(r["age_mce"].values, r["age"].values)))
                 for r in (rec_a, rec_b)
                 if r is not None and "age_mce" in r and r.sizes["sample"] > 1]
    implied = (f" (a miscount sd of {max(per_layer):.2g} yr per year of ice on this record's "
               "MCE profile, median over its samples)" if per_layer else "")
    return (f"Counting errors follow the {model} model: each uncertain layer (counted as "
            "0.5 +- 0.5 yr, Andersen et al. 2006) is an independent error of sd 0.5 yr, so the "
            f"variance grows by half the MCE's increase{implied}.")


def _shared_assumptions(rec_a, rec_b, request):
    scale = rec_a.attrs.get("timescale")
    out = [f"Both records are on the {scale} timescale: its error at the two markers is "
           "shared, so only the error between them counts."]
    silent = [record_name(r) for r in (rec_a, rec_b) if uncertainty_kind(r) == "none"]
    if len(silent) == 1:
        out.append(f"{silent[0]} states no uncertainty of its own: the {scale} error profile "
                   "of the other record serves both.")
    default = ("default; set sync_sd" if request.sync_sd == DEFAULT_SYNC_SD
               and "sync_sd" not in request.model_fields_set else "as requested")
    out.append(f"The synchronisation error between the two cores does not cancel: normal, sd "
               f"{request.sync_sd:g} yr ({default}).")
    return out


def _references(relation, rec_a, rec_b, marker_a, marker_b):
    """Keys (:mod:`align.references`) of the methods this lag used, each once."""
    keys = []
    if "mce" in {uncertainty_kind(r) for r in (rec_a, rec_b) if r is not None}:
        keys.append("andersen2006")
    keys += marker_a.references + marker_b.references
    if relation == "tied":
        keys += ["divine2012", "heaton2013"]
    return list(dict.fromkeys(keys))


def _excerpt(record, marker, label):
    if record is None:  # not on a record: nothing to draw but its interval
        return RecordExcerpt(label=f"{label}: {marker.record}", variable=marker.variable,
                             age_top=[], age_bottom=[], value=[], timescale_sd=[])
    record, _ = marker_variable(record, marker.variable)
    age = record["age"].values
    inside = (age >= marker.window[0]) & (age <= marker.window[1])
    sigma = age_sigma(record)
    values = record[marker.variable].values[inside]
    return RecordExcerpt(
        label=f"{label}: {record_name(record)}", variable=marker.variable,
        units=record[marker.variable].attrs.get("units"),
        reference_scale=record[marker.variable].attrs.get("reference_scale"),
        age_top=record["age_bounds"].values[inside, 0].tolist(),
        age_bottom=record["age_bounds"].values[inside, 1].tolist(),
        value=[None if not np.isfinite(v) else float(v) for v in values],
        timescale_sd=(sigma[inside] if sigma is not None else np.zeros(inside.sum())).tolist())


def _result(request, lag, center, parts, marker_a, marker_b, relation, rec_a, rec_b, ties,
            seed, others=()):
    summary = lag_summary(lag)
    variances = np.array([np.var(p.draws) for p in parts])
    total = float(variances.sum()) or 1.0
    budget = [BudgetItem(component=p.component, kind=p.kind, owner=p.owner,
                         sd=float(np.sqrt(v)), share=float(v / total))
              for p, v in zip(parts, variances)]
    floor = float(np.sqrt(sum(v for p, v in zip(parts, variances) if p.kind == "resolution")))
    resolvable = resolvable_lag(lag)
    text = verdict(summary, marker_a, marker_b)
    text += (f"; with this budget a true lag of {resolvable:.0f} years or more would be "
             f"resolved (95 % interval excluding zero) with probability "
             f"{RESOLVE_PROBABILITY:.0%} or more")
    lo, hi = np.percentile(lag, [0.1, 99.9])
    counts, edges = np.histogram(lag, bins=60, range=(lo, hi))
    inputs = [item for rec, marker, label in ((rec_a, marker_a, "a"), (rec_b, marker_b, "b"))
              for item in ([record_input(rec, label)] if rec is not None
                           else kind_of(marker.kind).inputs(marker, label))]
    if ties is not None:
        inputs.append({"role": "ties", "source": ties.source, "sha256": ties.checksum,
                       "timescale": ""})
    what_if = _what_ifs(center, parts, others)
    assumptions = _assumptions(relation, rec_a, rec_b, marker_a, marker_b, request)
    assumptions[-1:-1] = _sensitivity(what_if, summary, request)  # before the caution
    return LagResult(
        request=request, lag=summary, a=marker_a, b=marker_b, relation=relation, budget=budget,
        budget_total_sd=float(np.sqrt(total)), resolution_floor=floor,
        what_if=what_if, verdict=text, resolvable_lag=resolvable,
        assumptions=assumptions,
        references=_references(relation, rec_a, rec_b, marker_a, marker_b),
        age_reference=request.age_reference,
        figures=LagFigures(lag_histogram=Histogram(edges=edges.tolist(),
                                                   counts=counts.tolist()),
                           records=[_excerpt(rec_a, marker_a, "a"),
                                    _excerpt(rec_b, marker_b, "b")]),
        provenance=provenance(inputs=inputs,
                              parameters=_used_parameters(request, marker_a, marker_b, rec_b),
                              seed=seed))
