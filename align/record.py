"""The canonical record: one :class:`xarray.Dataset` per core, built and checked in one place.

The schema is documented field by field in ``records/README.md``; in short:

* dimension ``sample`` (one entry per measured interval, top to bottom), ``nv`` (2, for bounds)
  and, for an age ensemble, ``member``;
* coordinates ``depth`` (m, increasing down-core) and ``age`` (yr, attribute ``age_reference``
  ``b2k`` or ``BP``); either may be absent, not both;
* CF bounds ``depth_bounds`` and ``age_bounds`` (sample, nv): ``[:, 0]`` the top (shallower,
  younger) end and ``[:, 1]`` the bottom (deeper, older) end of each sample;
* age uncertainty: ``age_sd`` (1 sigma, yr) or, for a layer-counted timescale, ``age_mce``
  (maximum counting error, yr); optionally ``age_ensemble`` (sample, member);
* proxy variables on ``sample`` with CF ``units`` and ``long_name``;
* global attributes ``archive``, ``site``, ``core``, ``timescale``, ``timescale_kind``,
  ``source``, ``source_checksum``, ``history`` and ``bounds_derived``.

Everything here works on in-memory objects; files are read and written by :mod:`align.io`.
"""

from __future__ import annotations

import warnings

import numpy as np
import xarray as xr

from align.ages import RECORD_REFERENCES, canonical_reference, from_bp, reference_label, to_bp
from align.errors import InputError

SAMPLE, NV, MEMBER = "sample", "nv", "member"
ARCHIVES = ("ice", "lake", "marine", "speleothem", "peat", "other")
TIMESCALE_KINDS = ("layer-counted", "modelled", "transferred")
#: Data variables that describe the timescale, never proxies.
TIMESCALE_VARIABLES = ("depth_bounds", "age_bounds", "age_sd", "age_mce", "age_ensemble",
                       "age_original", "age_original_bounds", "age_sd_reference", "age_sd_tie",
                       "age_sd_bridge", "extrapolated")

_AGE_ATTRS = {"units": "yr", "bounds": "age_bounds"}
_DEPTH_ATTRS = {"units": "m", "long_name": "depth below the top of the core",
                "positive": "down", "bounds": "depth_bounds"}


class AgeInversionWarning(UserWarning):
    """Age decreases down-core by less than the stated uncertainty."""


def build_record(*, depth=None, age=None, age_reference=None, depth_bounds=None,
                 age_bounds=None, age_sd=None, age_mce=None, age_ensemble=None, proxies=None,
                 attrs=None, locate=None, source=None):
    """Assemble and validate a canonical record from plain arrays.

    Parameters
    ----------
    depth, age : array_like, optional
        Sample mid-points: depth in m, age in yr (``age_reference``). At least one is needed.
    age_reference : {"b2k", "BP"}, optional
        Required when ``age`` is given.
    depth_bounds, age_bounds : array_like (n, 2), optional
        Sample intervals. Missing bounds are derived half-way between neighbouring mid-points
        (age bounds from the depth bounds through the age-depth relation when both exist), and
        the record says so in its ``bounds_derived`` attribute.
    age_sd, age_mce : array_like, optional
        Age uncertainty in yr: 1-sigma, or maximum counting error (not both).
    age_ensemble : array_like (n, members), optional
        Age realisations in yr, same reference.
    proxies : dict of str to (array_like, dict), optional
        Proxy values and their attributes (``units``, ``long_name``).
    attrs : dict, optional
        Global attributes (archive, site, core, timescale, timescale_kind, source, ...).
    locate : callable, optional
        Maps a sample index to ``(row_kind, row)`` for error messages (CSV line numbers).
    source : str, optional
        The file the arrays came from, for error messages.

    Returns
    -------
    xarray.Dataset
        The validated record.
    """
    attrs = dict(attrs or {})
    coords, data_vars, derived = {}, {}, []
    n = _sample_count(depth, age, source)
    _check_order_before_deriving(depth, age, locate, source)
    if depth is not None:
        depth = np.asarray(depth, dtype=float)
        coords["depth"] = (SAMPLE, depth, dict(_DEPTH_ATTRS))
        if depth_bounds is None:
            depth_bounds = derive_bounds(depth, name="depth", source=source)
            derived.append("depth")
        data_vars["depth_bounds"] = ((SAMPLE, NV), np.asarray(depth_bounds, dtype=float))
    if age is not None:
        if age_reference is None:
            raise InputError("the age reference is missing; say whether ages are b2k or BP",
                             source=source, field="age_reference")
        ref = record_reference(age_reference)
        age = np.asarray(age, dtype=float)
        coords["age"] = (SAMPLE, age, {**_AGE_ATTRS, "long_name": f"age, {reference_label(ref)}",
                                       "age_reference": ref})
        if age_bounds is None:
            age_bounds = _derive_age_bounds(depth, age, data_vars.get("depth_bounds"), source)
            derived.append("age")
        data_vars["age_bounds"] = ((SAMPLE, NV), np.asarray(age_bounds, dtype=float))
    if age_sd is not None and age_mce is not None:
        raise InputError("give either an age sd or an MCE column, not both", source=source,
                         field="age_sd")
    if age_sd is not None:
        data_vars["age_sd"] = (SAMPLE, np.asarray(age_sd, dtype=float),
                               {"units": "yr", "long_name": "1-sigma age uncertainty"})
    if age_mce is not None:
        data_vars["age_mce"] = (SAMPLE, np.asarray(age_mce, dtype=float),
                                {"units": "yr", "long_name": "maximum counting error of age"})
    if age_ensemble is not None:
        data_vars["age_ensemble"] = ((SAMPLE, MEMBER), np.asarray(age_ensemble, dtype=float),
                                     {"units": "yr", "long_name": "age ensemble member"})
    for name, (values, var_attrs) in (proxies or {}).items():
        data_vars[name] = (SAMPLE, np.asarray(values), dict(var_attrs))
    if derived:
        attrs["bounds_derived"] = " ".join(derived)
    ds = xr.Dataset(data_vars, coords=coords, attrs=attrs)
    if len(ds.sizes) and ds.sizes.get(SAMPLE, n) != n:
        raise InputError("columns differ in length", source=source)
    return validate_record(ds, source=source, locate=locate)


def _sample_count(depth, age, source):
    if depth is None and age is None:
        raise InputError("a record needs a depth or an age column (found neither)",
                         source=source, field="depth")
    n = len(depth) if depth is not None else len(age)
    if n == 0:
        raise InputError("the table is empty (no data rows)", source=source)
    return n


def _check_order_before_deriving(depth, age, locate, source):
    """Bounds are derived from mid-points, so the mid-points are checked first."""
    locate = locate or (lambda i: ("sample", int(i)))

    def fail(message, field, index):
        kind, row = locate(index)
        raise InputError(message, source=source, field=field, row=row, row_kind=kind)

    if depth is not None:
        _check_mid_points(np.asarray(depth, dtype=float), "depth", fail)
    if age is not None:
        _check_mid_points(np.asarray(age, dtype=float), "age", fail, increasing=depth is None)


def record_reference(name):
    """Canonical record age reference (``b2k`` or ``BP``), or :class:`InputError`."""
    ref = canonical_reference(name)
    if ref not in RECORD_REFERENCES:
        raise InputError(f"record ages must be b2k or BP (got {name!r}); convert calendar "
                         "years or ka first", field="age_reference")
    return ref


def derive_bounds(mid, *, name="depth", source=None):
    """Sample intervals half-way between neighbouring mid-points.

    Parameters
    ----------
    mid : numpy.ndarray
        Strictly increasing mid-points.
    name : str
        The coordinate, for error messages.

    Returns
    -------
    numpy.ndarray (n, 2)
        Top and bottom of each sample; the outer samples extend by half the spacing to their
        only neighbour.
    """
    mid = np.asarray(mid, dtype=float)
    if mid.size < 2:
        raise InputError(f"a single sample needs explicit {name} bounds (nothing to derive "
                         "them from)", source=source, field=name)
    inner = 0.5 * (mid[1:] + mid[:-1])
    edges = np.concatenate([[mid[0] - (inner[0] - mid[0])], inner,
                            [mid[-1] + (mid[-1] - inner[-1])]])
    return np.column_stack([edges[:-1], edges[1:]])


def _derive_age_bounds(depth, age, depth_bounds, source):
    if depth is None:
        return derive_bounds(age, name="age", source=source)
    dbounds = depth_bounds[1]
    if depth.size < 2:
        raise InputError("a single sample needs explicit age bounds", source=source,
                         field="age")
    return interp_extrapolate(dbounds, depth, age)


def interp_extrapolate(x, xp, fp):
    """Piecewise-linear interpolation with linear extrapolation from the outer segments."""
    y = np.interp(x, xp, fp)
    lo_slope = (fp[1] - fp[0]) / (xp[1] - xp[0])
    hi_slope = (fp[-1] - fp[-2]) / (xp[-1] - xp[-2])
    y = np.where(x < xp[0], fp[0] + (x - xp[0]) * lo_slope, y)
    return np.where(x > xp[-1], fp[-1] + (x - xp[-1]) * hi_slope, y)


# --------------------------------------------------------------------------------------------
# validation


def validate_record(ds, *, source=None, locate=None):
    """Check a dataset against the record schema and return it.

    Parameters
    ----------
    ds : xarray.Dataset
        A candidate record.
    source : str, optional
        Where it came from, for error messages.
    locate : callable, optional
        Maps a sample index to ``(row_kind, row)`` (default: ``("sample", index)``).

    Returns
    -------
    xarray.Dataset
        ``ds`` itself.

    Raises
    ------
    InputError
        Naming the variable and the sample (or file line) of the first problem found.

    Notes
    -----
    Age inversions (age decreasing down-core) smaller than the larger of the two samples'
    stated 1-sigma uncertainty (``age_sd`` or ``age_mce / 2``) are allowed with an
    :class:`AgeInversionWarning`; larger inversions, and any inversion in a record without an
    uncertainty, are errors.
    """
    source = source or ds.attrs.get("source")
    locate = locate or (lambda i: ("sample", int(i)))

    def fail(message, field, index=None):
        kind, row = locate(index) if index is not None else ("row", None)
        raise InputError(message, source=source, field=field, row=row, row_kind=kind)

    if SAMPLE not in ds.dims or ds.sizes[SAMPLE] == 0:
        fail("the record has no samples", None)
    if "depth" not in ds.coords and "age" not in ds.coords:
        fail("a record needs a depth or an age coordinate (found neither)", "depth")
    if "depth" in ds.coords:
        _check_coordinate(ds, "depth", fail)
    if "age" in ds.coords:
        ref = ds["age"].attrs.get("age_reference")
        if ref not in RECORD_REFERENCES:
            fail("the age reference is missing or unknown; set age_reference to b2k or BP",
                 "age_reference")
        inverted = "depth" in ds.coords and _check_age_order(ds, fail, source, locate)
        _check_coordinate(ds, "age", fail, strict_bounds=not inverted)
    _check_uncertainty(ds, fail)
    for name in proxy_variables(ds):
        values = ds.variables[name].values  # a Variable: ds[name] scans every variable
        if not np.issubdtype(values.dtype, np.number):
            fail("values are not numeric", name)
        bad = np.isinf(values)
        if bad.any():
            fail("infinite value", name, np.argmax(bad))
    kind = ds.attrs.get("timescale_kind")
    if kind is not None and kind not in TIMESCALE_KINDS:
        fail(f"timescale_kind must be one of {', '.join(TIMESCALE_KINDS)} (got {kind!r})",
             "timescale_kind")
    archive = ds.attrs.get("archive")
    if archive is not None and archive not in ARCHIVES:
        fail(f"archive must be one of {', '.join(ARCHIVES)} (got {archive!r})", "archive")
    return ds


def _check_coordinate(ds, name, fail, strict_bounds=True):
    _check_mid_points(ds[name].values, name, fail,
                      increasing=name == "depth" or "depth" not in ds.coords)
    _check_bounds(ds, name, fail, strict_bounds)


def _check_mid_points(values, name, fail, increasing=True):
    """Mid-points are finite and, where they order the samples, strictly increasing."""
    bad = ~np.isfinite(values)
    if bad.any():
        fail(f"missing or infinite {name}", name, np.argmax(bad))
    if not increasing:
        return
    step = np.diff(values)
    dup = step == 0
    if dup.any():
        fail(f"duplicated {name} {values[np.argmax(dup)]:g}", name, np.argmax(dup) + 1)
    back = step < 0
    if back.any():
        fail(f"{name} is not increasing ({values[np.argmax(back)]:g} is followed by "
             f"{values[np.argmax(back) + 1]:g})", name, np.argmax(back) + 1)


def _check_bounds(ds, name, fail, strict):
    """Bounds exist and are finite; with ``strict``, also ordered, non-empty and disjoint.

    Age intervals of a record with tolerated age inversions may overlap where the ages invert,
    so they are checked only for finiteness.
    """
    bname = f"{name}_bounds"
    if bname not in ds:
        fail(f"{name} bounds are missing", bname)
    b = ds[bname].values
    if b.shape != (ds.sizes[SAMPLE], 2):
        fail(f"bounds must have shape (sample, 2), found {b.shape}", bname)
    bad = ~np.isfinite(b).all(axis=1)
    if bad.any():
        fail("missing or infinite bound", bname, np.argmax(bad))
    if not strict:
        return
    width = b[:, 1] - b[:, 0]
    if (width <= 0).any():
        i = np.argmax(width <= 0)
        what = "empty" if width[i] == 0 else "negative"
        fail(f"sample interval {b[i, 0]:g} to {b[i, 1]:g} is {what}", bname, i)
    tol = 1e-9 * max(1.0, float(np.abs(b).max()))
    overlap = b[1:, 0] < b[:-1, 1] - tol
    if overlap.any():
        i = np.argmax(overlap) + 1
        fail(f"sample interval {b[i, 0]:g} to {b[i, 1]:g} overlaps the one above it "
             f"({b[i - 1, 0]:g} to {b[i - 1, 1]:g})", bname, i)
    mid = ds[name].values
    outside = (mid < b[:, 0] - tol) | (mid > b[:, 1] + tol)
    if outside.any():
        i = np.argmax(outside)
        fail(f"{name} {mid[i]:g} lies outside its own interval {b[i, 0]:g} to {b[i, 1]:g}",
             bname, i)


def _check_age_order(ds, fail, source, locate):
    """Check that age grows down-core; return True when tolerated inversions exist."""
    age = ds["age"].values
    step = np.diff(age)
    dup = step == 0
    if dup.any():
        fail(f"duplicated age {age[np.argmax(dup)]:g} at two depths", "age", np.argmax(dup) + 1)
    inverted = np.flatnonzero(step < 0)
    if inverted.size == 0:
        return False
    sigma = age_sigma(ds)
    for i in inverted:
        drop = age[i] - age[i + 1]
        allowed = 0.0 if sigma is None else max(sigma[i], sigma[i + 1])
        if drop > allowed:
            fail(f"age inversion: age decreases by {drop:g} yr down-core ({age[i]:g} above "
                 f"{age[i + 1]:g}), more than the stated 1-sigma uncertainty", "age", i + 1)
    kind, row = locate(inverted[0] + 1)
    warnings.warn(f"{source or 'record'}: {len(inverted)} age inversion(s) within the stated "
                  f"uncertainty, first at {kind} {row}", AgeInversionWarning, stacklevel=3)
    return True


def _check_uncertainty(ds, fail):
    for name in ("age_sd", "age_mce"):
        if name in ds:
            values = ds[name].values
            bad = ~np.isfinite(values) | (values < 0)
            if bad.any():
                fail("age uncertainty must be finite and not negative", name, np.argmax(bad))
    if "age_sd" in ds and "age_mce" in ds:
        fail("a record carries either age_sd or age_mce, not both", "age_mce")
    if "age_ensemble" in ds:
        ens = ds["age_ensemble"].transpose(SAMPLE, MEMBER).values
        bad = ~np.isfinite(ens).all(axis=1)
        if bad.any():
            fail("missing ensemble age", "age_ensemble", np.argmax(bad))
        back = np.diff(ens, axis=0) < 0
        if back.any():
            i, m = np.unravel_index(np.argmax(back), back.shape)
            fail(f"ensemble member {m} has an age reversal", "age_ensemble", i + 1)


# --------------------------------------------------------------------------------------------
# accessors


def proxy_variables(ds):
    """Names of the proxy variables: data variables on ``sample`` that are not timescale.

    Bookkeeping is not a proxy either: variables another variable names in its CF
    ``ancillary_variables`` (a grid's ``*_coverage`` and ``*_n_samples``) and a grid's
    ``native_interval`` (or ``{record}_native_interval``).
    """
    # Variables, not DataArrays: making a DataArray scans every variable for its coordinates,
    # which made reading a table quadratic in its columns
    data = [(name, ds.variables[name]) for name in ds.data_vars]
    ancillary = {name for _, var in data
                 for name in str(var.attrs.get("ancillary_variables", "")).split()}
    return [name for name, var in data
            if var.dims == (SAMPLE,) and name not in TIMESCALE_VARIABLES
            and name not in ancillary and not name.endswith("native_interval")]


def age_reference(ds):
    """The record's age reference, or None for a depth-only record."""
    return ds["age"].attrs.get("age_reference") if "age" in ds.coords else None


def age_sigma(ds):
    """Per-sample 1-sigma age uncertainty in yr (``age_sd``, or ``age_mce / 2``), or None.

    Notes
    -----
    The maximum counting error is taken as 2 sigma (Andersen et al. 2006; common practice, e.g.
    Walker et al. 2008 quote the 99-year MCE at the base of the Holocene as 2 sigma).
    """
    if "age_sd" in ds:
        return ds["age_sd"].values.astype(float)
    if "age_mce" in ds:
        return ds["age_mce"].values.astype(float) / 2.0
    if "age_ensemble" in ds:
        return ds["age_ensemble"].std(MEMBER).values
    return None


def uncertainty_kind(ds):
    """``"mce"``, ``"sd"``, ``"ensemble"`` or ``"none"``."""
    for name, kind in (("age_mce", "mce"), ("age_sd", "sd"), ("age_ensemble", "ensemble")):
        if name in ds:
            return kind
    return "none"


def record_name(ds):
    """A short name for messages and variable prefixes: the core, else the site, else source."""
    for key in ("core", "site", "source"):
        if ds.attrs.get(key):
            return str(ds.attrs[key])
    return "record"


def with_age_reference(ds, reference):
    """Return the record with its ages (coordinate, bounds, ensemble) in ``reference``.

    Parameters
    ----------
    ds : xarray.Dataset
        A record with an age coordinate.
    reference : {"b2k", "BP"}
        The wanted reference.

    Returns
    -------
    xarray.Dataset
        A new record (``ds`` unchanged); uncertainties are differences and stay as they are.
    """
    target = record_reference(reference)
    current = age_reference(ds)
    if current is None:
        raise InputError("the record has no timescale (depth only); tie it first",
                         source=ds.attrs.get("source"), field="age")
    if current == target:
        return ds
    out = ds.copy()
    for name in ("age", "age_bounds", "age_ensemble"):
        if name in out.variables:
            out[name] = out[name].copy(data=from_bp(to_bp(out[name].values, current), target))
    out["age"].attrs.update(age_reference=target, long_name=f"age, {reference_label(target)}")
    add_history(out, f"ages converted from {current} to {target}")
    return out


def add_history(ds, line):
    """Append one line to the record's CF ``history`` attribute (in place)."""
    from align.provenance import history_line

    old = ds.attrs.get("history", "")
    ds.attrs["history"] = (old + "\n" if old else "") + history_line(line)
    return ds
