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
SENTINELS = (-999.0, -9999.0, -99999.0, 9999.0, 99999.0, -99.99, -999.9)
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
    only the code is a sentinel too.
    """
    finite = values[np.isfinite(values)]
    for code in SENTINELS:
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
