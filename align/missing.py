"""Missing-value codes: declared ones become NaN, undeclared sentinels are refused.

A code is *declared* by the file (CF ``_FillValue``/``missing_value``, a ``Missing_Values``
line in a commented header) or by the caller (``missing_values=``, ``--missing-value``).
An undeclared value that looks like a code — one of :data:`SENTINELS`, exactly, lying far
outside the robust range of the column's other values — is refused, naming the column, the
value, how often it occurs and its first row: read as data it would look like the largest
event in the record. The fix is one option (declare it); guessing silently either way could
be wrong, so the reader does neither.
"""

from __future__ import annotations

import numpy as np

from align.errors import InputError

#: Values commonly used as missing-value codes in paleoclimate tables (common practice).
SENTINELS = (-999.0, -9999.0, -99999.0, 9999.0, 99999.0, -99.99, -999.9, -99.0, 999.0,
             -9999.9)
#: Magnitudes no measured value reaches: those at or beyond it are fill values (1e20 of climate
#: model output, 9.96921e36 of the netCDF library; common practice) and count as sentinels.
FILL_MAGNITUDE = 1e20
#: How many robust standard deviations (1.4826 MAD) away from the median makes "far outside".
FAR = 10.0


def split_codes(codes, *, field="missing_values"):
    """Numeric and text codes from a list of declared codes (numbers or strings)."""
    numbers, texts = set(), set()
    for code in codes or ():
        text = str(code).strip()
        if not text:
            raise InputError("an empty missing-value code", field=field)
        try:
            numbers.add(float(text))
        except ValueError:
            texts.add(text)
    return numbers, texts


def parse_declared(text):
    """Codes from a header line such as ``Missing_Values: -999, nan`` (commas or blanks)."""
    return [t for t in text.replace(";", ",").replace(",", " ").split() if t]


def mask_codes(values, numbers):
    """``values`` with every declared numeric code set to NaN, and how many were set."""
    hit = np.isin(values, list(numbers)) if numbers else np.zeros(values.shape, bool)
    if not hit.any():
        return values, 0
    out = values.copy()
    out[hit] = np.nan
    return out, int(hit.sum())


def find_sentinel(values):
    """The first undeclared sentinel in ``values``, or None.

    Returns
    -------
    tuple or None
        ``(code, count, first_index, low, high)``: the code, its occurrences, its first index,
        and the range of the column's other values.

    Notes
    -----
    A value ``s`` from :data:`SENTINELS` is a sentinel when ``|s - median| > 10 * 1.4826 * MAD``
    of the other finite values (the MAD scale; Rousseeuw & Croux 1993,
    doi:10.1080/01621459.1993.10476408) and ``s`` lies outside their range; a column holding
    only the code is a sentinel too. Values of magnitude :data:`FILL_MAGNITUDE` or more are
    candidates as well.
    """
    finite = values[np.isfinite(values)]
    for code in (*SENTINELS, *np.unique(finite[np.abs(finite) >= FILL_MAGNITUDE])):
        hit = finite == code
        if not hit.any():
            continue
        others = finite[~hit]
        first = int(np.flatnonzero(values == code)[0])
        if others.size == 0:
            return code, int(hit.sum()), first, np.nan, np.nan
        med = np.median(others)
        scale = 1.4826 * np.median(np.abs(others - med))
        outside = code < others.min() or code > others.max()
        if outside and abs(code - med) > FAR * scale:
            return code, int(hit.sum()), first, float(others.min()), float(others.max())
    return None


def mask_missing(values, numbers, attrs=None):
    """``values`` with every kind of missing value set to NaN: declared codes
    (:func:`mask_codes`), values outside a CF valid range (:func:`mask_invalid`) and the netCDF
    default fill (:func:`mask_default_fill`; ``attrs`` holds a variable's attributes and
    encoding).

    Returns
    -------
    values : numpy.ndarray
    notes : list of (int, str)
        How many of each kind were set, and what they were, for kinds that occurred.
    """
    attrs = attrs or {}
    values, codes = mask_codes(values, numbers)
    values, invalid = mask_invalid(values, attrs)
    values, unwritten = mask_default_fill(values, attrs)
    return values, [(n, what) for n, what in (
        (codes, "missing-value code(s)"), (invalid, "value(s) outside the valid range"),
        (unwritten, "value(s) equal to the netCDF default fill (never written)")) if n]


def mask_invalid(values, attrs):
    """``values`` with those outside the CF ``valid_range`` (or ``valid_min``/``valid_max``)
    set to NaN, and how many were set.

    Notes
    -----
    CF Conventions 1.11, section 2.5.1 (doi:10.5281/zenodo.10940589): values outside the valid
    range are missing. Limits of the packed (integer) type of a variable with ``scale_factor``
    or ``add_offset`` are in packed units and unpacked here, ``limit * scale_factor +
    add_offset``, to compare with the values as read.
    """
    low, high = attrs.get("valid_min"), attrs.get("valid_max")
    if attrs.get("valid_range") is not None:
        low, high = np.ravel(attrs["valid_range"])[:2]
    outside = np.zeros(values.shape, bool)
    with np.errstate(invalid="ignore"):
        if low is not None:
            outside |= values < _unpacked(low, attrs)
        if high is not None:
            outside |= values > _unpacked(high, attrs)
    return _set_missing(values, outside)


def _unpacked(limit, attrs):
    limit = np.ravel(limit)[0]
    if np.asarray(limit).dtype.kind in "iu" and ("scale_factor" in attrs or
                                                 "add_offset" in attrs):
        return float(limit) * float(attrs.get("scale_factor", 1.0)) + float(
            attrs.get("add_offset", 0.0))
    return float(limit)


def mask_default_fill(values, encoding):
    """``values`` equal to the netCDF library's default fill of the stored type (what cells
    never written hold) set to NaN when the file declares no ``_FillValue``, and how many.
    Packed values are compared with the fill unpacked as they were (``scale_factor``,
    ``add_offset``)."""
    dtype = encoding.get("dtype")
    if dtype is None or "_FillValue" in encoding or "missing_value" in encoding:
        return values, 0
    import netCDF4

    fill = netCDF4.default_fillvals.get(np.dtype(dtype).str[1:])
    if fill is None or isinstance(fill, str):
        return values, 0
    stored = np.asarray(fill, dtype=dtype)
    if "scale_factor" in encoding or "add_offset" in encoding:
        stored = stored * np.asarray(encoding.get("scale_factor", 1)) + np.asarray(
            encoding.get("add_offset", 0))
    return _set_missing(values, values == float(stored))


def _set_missing(values, where):
    if not where.any():
        return values, 0
    out = values.copy()
    out[where] = np.nan
    return out, int(where.sum())
