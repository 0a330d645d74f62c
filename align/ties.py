"""Tie points: read them, check them, and transfer a record onto another record's timescale.

A tie says that depth ``depth`` of the record being moved is the same instant as depth
``ref_depth`` (or age ``ref_age``) of the reference record: a volcanic sulfate peak found in
both, a tephra layer, another isochronous horizon. Between ties, the transferred age follows a
monotone interpolation, and its uncertainty is pinned at the ties and grows between them.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
from scipy.interpolate import PchipInterpolator
from scipy.stats import chi2

from align.choices import (DEFAULT_TIE_INTERPOLATION, MAX_AGE_SD, TieInterpolation,
                           check_choice)
from align.errors import InputError
from align.record import NV, SAMPLE, add_history, age_reference, age_sigma, record_name

#: Floor (and fallback with only two ties) of the bridge rate: the bridge sd at the middle of
#: the longest tie interval is this fraction of its duration (a stated choice).
FALLBACK_MIDPOINT_FRACTION = 0.02
#: Quantile of chi-squared that turns the scatter of the tie intervals into a rate: the median,
#: so that the rate is median-unbiased even with few intervals.
RATE_CONFIDENCE = 0.5
#: Largest bridge variance across the ties (yr^2): ``MAX_AGE_SD`` squared.
MAX_BRIDGE_VARIANCE = MAX_AGE_SD**2


class TieWarning(UserWarning):
    """Samples lie beyond the outer ties and were left out (or extrapolated)."""


#: Units of a tie's position in the moved record, by its kind.
_POSITION_UNITS = {"depth": "m", "age": "yr"}


@dataclass(frozen=True)
class TieTable:
    """Validated tie points, in increasing position.

    Attributes
    ----------
    labels : tuple of str
    position : numpy.ndarray
        Where each tie sits in the record being moved: its depth (m), or, for a record that
        has only ages, its age on that record's own timescale (yr, in its age reference).
    ref : numpy.ndarray
        Matching depth in the reference record (m) or age on its timescale (yr).
    ref_kind : {"depth", "age"}
    sd : numpy.ndarray
        1-sigma match uncertainty (yr).
    source, checksum : str
        The tie file and the SHA-256 of its bytes.
    position_kind : {"depth", "age"}
        The coordinate of ``position``.
    """

    labels: tuple
    position: np.ndarray
    ref: np.ndarray
    ref_kind: str
    sd: np.ndarray
    source: str = ""
    checksum: str = ""
    position_kind: str = "depth"

    def __len__(self):
        return len(self.labels)


def read_ties(path):
    """Read and check a tie-point table.

    Parameters
    ----------
    path : str or os.PathLike
        A table (the dialects of :func:`align.tables.read_table`) with header
        ``label,depth,ref_depth,sd`` or ``label,depth,ref_age,sd``: ``depth`` in the record
        being moved (m), ``ref_depth`` the matching depth in the reference record (m) or
        ``ref_age`` an age on the reference timescale (yr, in the reference record's age
        reference), ``sd`` the 1-sigma match uncertainty in years. A record with ages only
        is tied by ``age`` instead of ``depth`` (``label,age,ref_age,sd`` or
        ``label,age,ref_depth,sd``): its own age at the tie, in its own age reference; the
        bridge uncertainty then grows with the age distance between ties. Further columns (a
        score, evidence) are allowed and ignored; ``#`` lines are comments.

    Returns
    -------
    TieTable

    Raises
    ------
    InputError
        Fewer than two ties; ties not strictly increasing in both columns (crossing ties name
        the pair); duplicated labels; missing or non-numeric values; negative sd.
    """
    from align.columns import numeric_column, refuse_sentinel
    from align.tables import read_table

    path = Path(path)
    if not path.exists():
        raise InputError("no such tie file", source=str(path), status=404)
    table = read_table(path)
    frame = table.frame
    ref_cols = [c for c in ("ref_depth", "ref_age") if c in frame.columns]
    at_cols = [c for c in ("depth", "age") if c in frame.columns]
    missing = [c for c in ("label", "sd") if c not in frame.columns]
    if missing or len(ref_cols) != 1 or len(at_cols) != 1:
        raise InputError("the header must be label,depth|age,ref_depth|ref_age,sd (found "
                         f"{','.join(frame.columns)})", source=str(path),
                         field=missing[0] if missing else "ref_depth" if len(ref_cols) != 1
                         else "depth")
    ref_col, at_col = ref_cols[0], at_cols[0]
    labels = frame["label"].astype(str).str.strip().tolist()
    columns = {}
    for col in (at_col, ref_col, "sd"):
        values = numeric_column(frame[col], col, str(path), table.locate)
        bad = ~np.isfinite(values)
        if bad.any():
            i = int(np.argmax(bad))
            kind, row = table.locate(i)
            raise InputError(f"tie {labels[i]!r} has no {col}", source=str(path), field=col,
                             row=row, row_kind=kind)
        refuse_sentinel(values, col, str(path), table.locate)
        columns[col] = values
    ties = TieTable(labels=tuple(labels), position=columns[at_col], ref=columns[ref_col],
                    ref_kind=ref_col.removeprefix("ref_"), sd=columns["sd"], source=str(path),
                    checksum=table.checksum, position_kind=at_col)
    check_ties(ties)
    return ties


def check_ties(ties):
    """Check a tie table on its own (count, labels, order, sd); raise :class:`InputError`."""
    source = ties.source or None
    if len(ties) < 2:
        raise InputError(f"at least two ties are needed (found {len(ties)})", source=source,
                         field="label")
    seen = set()
    for label in ties.labels:
        if label in seen:
            raise InputError(f"duplicated tie label {label!r}", source=source, field="label")
        seen.add(label)
    if (ties.sd < 0).any():
        i = int(np.argmax(ties.sd < 0))
        raise InputError(f"tie {ties.labels[i]!r} has a negative sd", source=source,
                         field="sd")
    if ties.position_kind not in _POSITION_UNITS:
        raise InputError("ties sit at a depth or an age", source=source, field="position")
    order = np.argsort(ties.position, kind="stable")
    at, ref = ties.position[order], ties.ref[order]
    labels = [ties.labels[i] for i in order]
    ref_col, kind = f"ref_{ties.ref_kind}", ties.position_kind
    for i in range(len(at) - 1):
        a, b = labels[i], labels[i + 1]
        if at[i + 1] == at[i]:
            raise InputError(f"ties {a!r} and {b!r} are at the same {kind} {at[i]:g}",
                             source=source, field=kind)
        if ref[i + 1] <= ref[i]:
            raise InputError(f"ties {a!r} and {b!r} cross: {kind} increases ({at[i]:g} to "
                             f"{at[i + 1]:g}) but {ref_col} does not ({ref[i]:g} to "
                             f"{ref[i + 1]:g})", source=source, field=ref_col)
    if not np.array_equal(order, np.arange(len(order))):
        return replace(ties, labels=tuple(labels), position=at, ref=ref, sd=ties.sd[order])
    return ties


def _check_range(ties, record, reference):
    """Ties must lie inside the moved record's range and the reference's range."""
    for name, values, rec in ((ties.position_kind, ties.position, record),
                              (f"ref_{ties.ref_kind}", ties.ref, reference)):
        coord = name.removeprefix("ref_")
        if coord not in rec.coords:
            raise InputError(f"the {'reference' if rec is reference else 'moved'} record has no "
                             f"{coord} to tie by {name}", source=ties.source or None, field=name)
        bounds = rec[f"{coord}_bounds"].values
        # depths are strictly ordered; ages may carry tolerated inversions
        lo, hi = ((bounds[0, 0], bounds[-1, 1]) if coord == "depth"
                  else (bounds[:, 0].min(), bounds[:, 1].max()))
        outside = (values < lo) | (values > hi)
        if outside.any():
            i = int(np.argmax(outside))
            raise InputError(f"tie {ties.labels[i]!r} at {name} {values[i]:g} lies outside "
                             f"{record_name(rec)} ({lo:g} to {hi:g})", source=ties.source or None,
                             field=name)


# --------------------------------------------------------------------------------------------
# formulas


def bridge_variance(x, x1, x2, rate):
    """Variance of a Brownian bridge pinned at ``x1`` and ``x2``.

    Parameters
    ----------
    x : array_like
        Positions (here: transferred ages, yr) with ``x1 <= x <= x2``.
    x1, x2 : array_like
        The neighbouring ties' positions.
    rate : float
        Variance per unit of ``x`` (yr^2 per yr).

    Returns
    -------
    numpy.ndarray
        ``rate * (x - x1) * (x2 - x) / (x2 - x1)`` (yr^2): zero at the ties, largest half-way.

    Notes
    -----
    The accumulation between two dated horizons modelled as a random process pinned at both
    ends, in the spirit of Divine et al. (2012) and the Gaussian-process tie-pointing of Heaton
    et al. (2013).

    References
    ----------
    Divine, D. V. et al. (2012), Clim. Past Discuss. 8, 1529-1566, doi:10.5194/cpd-8-1529-2012.
    Heaton, T. J. et al. (2013), Radiocarbon 55(4), 1975-1997, doi:10.2458/azu_js_rc.55.17777.
    """
    x, x1, x2 = (np.asarray(v, dtype=float) for v in (x, x1, x2))
    return rate * (x - x1) * (x2 - x) / (x2 - x1)


def tie_variance(w, sd1, sd2):
    """Variance of a linear interpolation between two ties with independent errors.

    Returns ``(1 - w)^2 sd1^2 + w^2 sd2^2`` (yr^2) for the fraction ``w`` of the way from the
    first tie to the second: the transferred age is that interpolation of the ties' ages.
    """
    return (1.0 - w) ** 2 * sd1**2 + w**2 * sd2**2


def default_bridge_rate(tie_ages, tie_positions, tie_sd):
    """Bridge rate (yr^2 per yr) estimated from how unevenly the ties divide time and depth.

    Parameters
    ----------
    tie_ages : numpy.ndarray
        Ages of the ties on the reference timescale (yr), increasing.
    tie_positions : numpy.ndarray
        Their positions in the moved record (depths in m, or its own ages in yr).
    tie_sd : numpy.ndarray
        Their 1-sigma match uncertainties (yr).

    Returns
    -------
    rate : float
    how : str
        A sentence saying how the rate was chosen (for the record's attributes and reports).

    Notes
    -----
    If accumulation in the moved record relative to the reference wandered like a Brownian
    motion of rate ``r``, the duration ``L_i`` of tie interval ``i`` would differ from the
    duration at the mean accumulation ratio, ``s D_i`` (``s`` = total duration / total
    depth), by a deviation with variance ``r L_i + sd_i^2 + sd_{i+1}^2``. Over ``K``
    intervals (``K - 1`` degrees of freedom, since the outer ties fix ``s``) the rate is
    ``sum((dev_i^2 - sd_i^2 - sd_{i+1}^2) / L_i) / chi2_{K-1}(0.5)``, a median-unbiased
    method-of-moments estimate. With only two ties, or less scatter than the floor implies,
    the rate is the floor: a bridge sd at mid-interval of 2 % of the longest interval's
    duration (``r = 4 (0.02 L)^2 / L``).

    Calibration (``tests/test_ties.py``): on 200 synthetic cores whose accumulation wanders
    smoothly by about +-30 % with 4-8 ties, the 95 % intervals cover the true ages for about
    96-97 % of samples.
    """
    durations = np.diff(tie_ages)
    floor = 4.0 * (FALLBACK_MIDPOINT_FRACTION * durations.max()) ** 2 / durations.max()
    k = durations.size
    if k < 2:
        return floor, ("stated default: bridge sd at mid-interval = "
                       f"{FALLBACK_MIDPOINT_FRACTION:.0%} of the interval (two ties only)")
    ratio = (tie_ages[-1] - tie_ages[0]) / (tie_positions[-1] - tie_positions[0])
    dev = durations - ratio * np.diff(tie_positions)
    excess = (dev**2 - tie_sd[:-1] ** 2 - tie_sd[1:] ** 2) / durations
    estimate = max(0.0, excess.sum()) / chi2.ppf(RATE_CONFIDENCE, k - 1)
    if estimate <= floor:
        return floor, (f"floor (the {k} tie intervals scatter less): bridge sd at "
                       f"mid-interval = {FALLBACK_MIDPOINT_FRACTION:.0%} of the interval")
    return float(estimate), (f"estimated from the scatter of the accumulation ratio between "
                             f"{k} tie intervals")


# --------------------------------------------------------------------------------------------
# transfer


def transfer(record, ties, onto, *, method=DEFAULT_TIE_INTERPOLATION, extrapolate=False,
             bridge_rate=None):
    """Put a record on another record's timescale through tie points.

    Parameters
    ----------
    record : xarray.Dataset
        The record to move; it needs depths and may have no timescale of its own (if it has
        one, it is kept as ``age_original``).
    ties : TieTable or str or os.PathLike
        Tie points (see :func:`read_ties`).
    onto : xarray.Dataset
        The reference record whose timescale is adopted.
    method : {"linear", "pchip"}
        Monotone interpolation between ties: piecewise linear, or monotone cubic (PCHIP,
        Fritsch & Carlson 1980).
    extrapolate : bool
        Beyond the outer ties, samples are left out (with a :class:`TieWarning`) unless this is
        true; then they get ages from the outer tie intervals' slope, the flag
        ``extrapolated = 1`` and an uncertainty that grows as a free Brownian motion at the
        bridge rate.
    bridge_rate : float, optional
        Bridge variance rate in yr^2 per yr of transferred age; default from
        :func:`default_bridge_rate`.

    Returns
    -------
    xarray.Dataset
        The record on ``onto``'s timescale (reference and age reference of ``onto``), with
        ``age_sd`` (yr) = sqrt(reference^2 + tie^2 + bridge^2) and the three parts as
        ``age_sd_reference``, ``age_sd_tie``, ``age_sd_bridge``; ``timescale_kind`` is
        ``transferred``, and the attributes name the reference record, the ties' checksum, the
        method and the bridge rate with how it was chosen.

    Notes
    -----
    Age uncertainty of a transferred sample at age ``x`` between ties ``k`` and ``k+1``
    (fraction ``w`` of the way): ``var = sigma_ref(x)^2 + (1-w)^2 sd_k^2 + w^2 sd_{k+1}^2 +
    rate (x - x_k)(x_{k+1} - x) / (x_{k+1} - x_k)``.
    """
    ties = check_ties(ties) if isinstance(ties, TieTable) else read_ties(ties)
    check_choice(method, TieInterpolation, "method")
    at = ties.position_kind
    if at not in record.coords:
        raise InputError(f"the record to move has no {at}s; these ties sit at {at}s"
                         + (" (tie a record with ages only by age: label,age,ref_age,sd)"
                            if at == "depth" else ""),
                         source=record.attrs.get("source"), field=at)
    if age_reference(onto) is None:
        raise InputError("the reference record has no timescale", source=onto.attrs.get("source"),
                         field="age")
    if bridge_rate is not None and not (np.isfinite(bridge_rate) and bridge_rate >= 0):
        raise InputError("the bridge rate must be a number >= 0", field="bridge_rate")
    _check_range(ties, record, onto)
    tie_ages = _tie_ages(ties, onto)
    span = max(float(np.ptp(tie_ages)), 1.0)
    if bridge_rate is not None and bridge_rate > MAX_BRIDGE_VARIANCE / span:
        raise InputError(f"the bridge rate {bridge_rate:g} yr^2/yr gives an age sd of "
                         f"{np.sqrt(bridge_rate) * np.sqrt(span):.3g} yr across the ties, "
                         f"over the {np.sqrt(MAX_BRIDGE_VARIANCE):g} yr this tool can carry",
                         field="bridge_rate")
    if bridge_rate is None:
        rate, how = default_bridge_rate(tie_ages, ties.position, ties.sd)
    else:
        rate, how = float(bridge_rate), "set by the user"
    moved = record.isel({SAMPLE: _inside_ties(record, ties, extrapolate)})
    ages, sds = _place_between_ties(moved[at].values, ties, tie_ages, method, rate, onto)
    bounds = _map_bounds(moved[f"{at}_bounds"].values, ties.position, tie_ages, method)
    return _assemble(moved, onto, ties, tie_ages, ages, bounds, sds, method, rate, how)


def _tie_ages(ties, onto):
    """Ages of the ties on the reference timescale (yr)."""
    if ties.ref_kind == "age":
        return ties.ref.astype(float)
    edges_depth, edges_age = _edge_relation(onto)
    return np.interp(ties.ref, edges_depth, edges_age)


def _edge_relation(record):
    """The age-depth relation through every sample's top and bottom (piecewise linear)."""
    depth = record["depth_bounds"].values.ravel()
    age = record["age_bounds"].values.ravel()
    order = np.argsort(depth, kind="stable")
    return depth[order], age[order]


def _inside_ties(record, ties, extrapolate):
    """The samples to transfer: a slice (samples are in order, so this is a search)."""
    first, stop = _between_outer_ties(record, ties)
    outside = record.sizes[SAMPLE] - max(stop - first, 0)
    if outside:
        what = "extrapolated beyond" if extrapolate else "left out: they lie beyond"
        warnings.warn(f"{record_name(record)}: {outside} sample(s) {what} the outer ties "
                      f"({ties.position[0]:g} to {ties.position[-1]:g} "
                      f"{_POSITION_UNITS[ties.position_kind]})"
                      + ("" if extrapolate else "; use extrapolate=True (--extrapolate) to keep "
                         "them"), TieWarning, stacklevel=3)
    if stop <= first and not extrapolate:
        raise InputError("no sample lies between the outer ties", source=ties.source or None,
                         field=ties.position_kind)
    return slice(None) if extrapolate else slice(first, stop)


def _between_outer_ties(record, ties):
    """First and stop index of the samples between the outer ties."""
    b = record[f"{ties.position_kind}_bounds"].values
    return (int(np.searchsorted(b[:, 0], ties.position[0], side="left")),
            int(np.searchsorted(b[:, 1], ties.position[-1], side="right")))


def _position_to_age(x, tie_depth, tie_age, method):
    """Monotone position-to-age mapping through the ties, linear beyond the outer ties."""
    x = np.asarray(x, dtype=float)
    if method == "pchip":
        y = PchipInterpolator(tie_depth, tie_age, extrapolate=False)(
            np.clip(x, tie_depth[0], tie_depth[-1]))
    else:
        y = np.interp(x, tie_depth, tie_age)
    if x.size and (x.min() < tie_depth[0] or x.max() > tie_depth[-1]):
        lo_slope = (tie_age[1] - tie_age[0]) / (tie_depth[1] - tie_depth[0])
        hi_slope = (tie_age[-1] - tie_age[-2]) / (tie_depth[-1] - tie_depth[-2])
        y = np.where(x < tie_depth[0], tie_age[0] + (x - tie_depth[0]) * lo_slope, y)
        y = np.where(x > tie_depth[-1], tie_age[-1] + (x - tie_depth[-1]) * hi_slope, y)
    return y


def _map_bounds(bounds, tie_depth, tie_age, method):
    """Map sample bounds (each column is increasing, so each is one merge pass)."""
    inside = tie_depth[0] <= bounds[0, 0] and bounds[-1, 1] <= tie_depth[-1]
    if method != "linear" or not inside:
        return _position_to_age(bounds, tie_depth, tie_age, method)
    from align._kernels import interp_sorted

    out = np.empty(bounds.shape)
    for column in (0, 1):
        interp_sorted(bounds[:, column], tie_depth, tie_age, out[:, column])
    return out


def _place_between_ties(positions, ties, tie_ages, method, rate, onto):
    """Transferred ages and their uncertainty parts (yr): reference, tie, bridge, total.

    Between ties ``k`` and ``k + 1`` (fraction ``w`` of the way in depth, or in the moved
    record's own age for ties by age): the tie variance
    is :func:`tie_variance`, the bridge variance :func:`bridge_variance` at the transferred
    age; beyond the outer ties the bridge grows as a free random walk, ``rate |x - x_outer|``;
    the reference part is the reference's own sd at the transferred age. A compiled single
    pass (:func:`align._kernels.place_between_ties`): this is the hot path of a transfer.
    """
    from align._kernels import place_between_ties

    linear = method == "linear"
    ages = (np.empty(positions.size) if linear
            else _position_to_age(positions, ties.position, tie_ages, method))
    var_tie, var_bridge = place_between_ties(np.ascontiguousarray(positions, dtype=float),
                                             ties.position, tie_ages, ties.sd**2, float(rate),
                                             linear, ages)
    sd_ref = _reference_sd(onto, ages)
    total = np.square(sd_ref)
    total += var_tie
    total += var_bridge
    sds = (sd_ref, np.sqrt(var_tie, out=var_tie), np.sqrt(var_bridge, out=var_bridge),
           np.sqrt(total, out=total))
    return ages, sds


def _reference_sd(onto, ages):
    """The reference timescale's own 1-sigma at the (increasing) transferred ages (yr)."""
    from align._kernels import interp_sorted

    sigma = age_sigma(onto)
    if sigma is None:
        return np.zeros(ages.size)
    axis = onto["age"].values
    if not np.all(np.diff(axis) > 0):  # tolerated age inversions: interpolate on sorted ages
        order = np.argsort(axis, kind="stable")
        axis, sigma = axis[order], sigma[order]
    out = np.empty(ages.size)
    interp_sorted(ages, axis, sigma, out)
    return out


def _assemble(moved, onto, ties, tie_ages, ages, bounds, sds, method, rate, how):
    ref = age_reference(onto)
    sd_ref, sd_tie, sd_bridge, sd_total = sds
    out = moved.drop_vars([v for v in ("age", "age_bounds", "age_sd", "age_mce", "age_ensemble",
                                       "age_original", "age_original_bounds", "age_sd_reference",
                                       "age_sd_tie", "age_sd_bridge", "extrapolated")
                           if v in moved.variables])
    if "age" in moved.coords:
        out["age_original"] = (SAMPLE, moved["age"].values, {
            "units": "yr", "age_reference": age_reference(moved),
            "long_name": f"age on the record's own timescale ({moved.attrs.get('timescale', '')})"})
    out = out.assign_coords(age=(SAMPLE, ages, {
        **onto["age"].attrs, "bounds": "age_bounds"}))
    out["age_bounds"] = ((SAMPLE, NV), bounds)
    out["age_sd"] = (SAMPLE, sd_total, {"units": "yr", "long_name": "1-sigma age uncertainty"})
    for name, sd, what in (("reference", sd_ref, "the reference timescale's own"),
                           ("tie", sd_tie, "tie-point"),
                           ("bridge", sd_bridge, "between-tie (Brownian bridge)")):
        out[f"age_sd_{name}"] = (SAMPLE, sd, {
            "units": "yr", "long_name": f"1-sigma age uncertainty: {what} part"})
    first, stop = _between_outer_ties(moved, ties)
    flagged = np.ones(moved.sizes[SAMPLE], np.int8)
    flagged[first:stop] = 0
    out["extrapolated"] = (SAMPLE, flagged, {
        "long_name": "age extrapolated beyond the outer tie points", "flag_values": [0, 1],
        "flag_meanings": "between_ties extrapolated"})
    out.attrs.update(
        timescale=f"{onto.attrs.get('timescale', record_name(onto))} (transferred)",
        timescale_kind="transferred", reference_record=record_name(onto),
        reference_source=str(onto.attrs.get("source", "")),
        reference_checksum=str(onto.attrs.get("source_checksum", "")),
        reference_timescale_kind=str(onto.attrs.get("timescale_kind", "")),
        ties_source=ties.source, ties_checksum=ties.checksum, tie_labels="; ".join(ties.labels),
        tie_position=ties.position, tie_position_kind=ties.position_kind, tie_age=tie_ages,
        tie_sd=ties.sd, transfer_method=method,
        bridge_rate=rate, bridge_rate_choice=how)
    if "depth" in str(moved.attrs.get("bounds_derived", "")):
        out.attrs["bounds_derived"] = "depth"
    else:
        out.attrs.pop("bounds_derived", None)
    add_history(out, f"transferred onto {record_name(onto)} ({ref}) through {len(ties)} ties "
                     f"({ties.source}), {method}, bridge rate {rate:.4g} yr^2/yr ({how})")
    # valid by construction: a strictly increasing map of a valid record's depths and bounds
    return out
