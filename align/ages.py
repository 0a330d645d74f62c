"""Age conventions: exact, vectorised conversion between b2k, BP, CE, BCE and their ka forms.

Ages grow into the past and name a reference year; calendar years (CE/BCE) have no year zero.
All conversions pass through years BP (before AD 1950):

=========  ==========================================  ========================
reference  meaning                                     to BP
=========  ==========================================  ========================
``b2k``    years before AD 2000 (ice-core convention)  ``BP = b2k - 50``
``BP``     years before AD 1950 (radiocarbon)          ``BP = BP``
``CE``     calendar year AD/CE, 1, 2, ...              ``BP = 1950 - year``
``BCE``    calendar year BC/BCE, 1, 2, ...             ``BP = year + 1949``
``ka b2k`` thousands of years before AD 2000           ``BP = 1000 ka - 50``
``ka BP``  thousands of years before AD 1950           ``BP = 1000 ka``
=========  ==========================================  ========================

1 BCE is followed directly by 1 CE, so 1 CE = 1949 BP and 1 BCE = 1950 BP; subtracting 1950
from an age BP to get a BCE year is off by one.
"""

from __future__ import annotations

import numpy as np

from align.choices import AgeConvention, RecordReference, options
from align.errors import InputError

#: Offset of each reference from BP, in years, and the scale of its unit.
_LINEAR = {"b2k": (-50.0, 1.0), "BP": (0.0, 1.0), "ka b2k": (-50.0, 1000.0),
           "ka BP": (0.0, 1000.0)}
_CALENDAR = ("CE", "BCE")

#: Reference names accepted on input, folded to their canonical spelling.
_ALIASES = {
    "b2k": "b2k", "bp": "BP", "ce": "CE", "ad": "CE", "bce": "BCE", "bc": "BCE",
    "ka b2k": "ka b2k", "ka-b2k": "ka b2k", "kab2k": "ka b2k", "ka_b2k": "ka b2k",
    "ka bp": "ka BP", "ka-bp": "ka BP", "kabp": "ka BP", "ka_bp": "ka BP", "ka": "ka BP",
}

#: The references a record's age coordinate may use (ages in years).
RECORD_REFERENCES = options(RecordReference)
#: Every reference :func:`convert_age` accepts, canonical spelling.
REFERENCES = options(AgeConvention)


def canonical_reference(name, *, field="age_reference"):
    """Return the canonical spelling of an age reference, or raise :class:`InputError`.

    Parameters
    ----------
    name : str
        A reference such as ``"b2k"``, ``"BP"``, ``"ce"``, ``"ka-b2k"``.
    field : str
        The argument or option being checked, for the error message.
    """
    key = str(name).strip().lower()
    if key not in _ALIASES:
        raise InputError(f"unknown age reference {name!r}; use one of {', '.join(REFERENCES)}",
                         field=field)
    return _ALIASES[key]


def to_bp(values, reference):
    """Convert ages or calendar years in ``reference`` to years BP.

    Parameters
    ----------
    values : array_like
        Ages or calendar years.
    reference : str
        Their reference (see the module table).

    Returns
    -------
    numpy.ndarray
        Years before AD 1950 (BP).
    """
    ref = canonical_reference(reference, field="from")
    x = np.asarray(values, dtype=float)
    if ref in _LINEAR:
        offset, scale = _LINEAR[ref]
        return x * scale + offset
    _check_calendar_years(x, ref)
    return 1950.0 - x if ref == "CE" else x + 1949.0


def from_bp(bp, reference):
    """Convert years BP to ``reference``.

    Parameters
    ----------
    bp : array_like
        Years before AD 1950.
    reference : str
        The target reference (see the module table).

    Returns
    -------
    numpy.ndarray
        Ages or calendar years in ``reference``. CE and BCE years must exist: a BP age older
        than 1949 BP has no CE year and one younger than 1950 BP no BCE year.
    """
    ref = canonical_reference(reference, field="to")
    x = np.asarray(bp, dtype=float)
    if ref in _LINEAR:
        offset, scale = _LINEAR[ref]
        return (x - offset) / scale
    years = 1950.0 - x if ref == "CE" else x - 1949.0
    _check_calendar_years(years, ref)
    return years


def convert_age(values, from_, to):
    """Convert ages between references, exactly and element-wise.

    Parameters
    ----------
    values : float or array_like
        Ages (or calendar years for ``CE``/``BCE``).
    from_, to : str
        References: ``b2k``, ``BP``, ``CE``, ``BCE``, ``ka b2k``, ``ka BP`` (case-insensitive;
        ``ka-b2k`` and ``AD``/``BC`` are accepted too).

    Returns
    -------
    float or numpy.ndarray
        The values in ``to`` (a float for scalar input).

    Raises
    ------
    InputError
        For an unknown reference, or a value with no year in the calendar asked for (there is
        no year 0 CE or 0 BCE).

    Notes
    -----
    ``b2k = BP + 50``; ``BP = 1950 - CE``; ``BP = BCE + 1949`` (no year zero between 1 BCE and
    1 CE). So ``convert_age(12785, "BP", "BCE") == 10836``.

    Examples
    --------
    >>> convert_age(12785, "BP", "BCE")
    10836.0
    >>> convert_age(11703, "b2k", "BP")
    11653.0
    """
    result = from_bp(to_bp(values, from_), to)
    return float(result) if np.ndim(result) == 0 else result


def _check_calendar_years(years, ref):
    bad = np.isfinite(years) & (years < 1.0)
    if np.any(bad):
        first = float(np.asarray(years)[bad].flat[0])
        other = "BCE" if ref == "CE" else "CE"
        raise InputError(f"{first:g} is not a {ref} year (there is no year 0 and no negative "
                         f"year); the age lies in the {other} era", field=ref)


def reference_label(reference):
    """Long form of a record reference for axis labels and CF ``long_name`` attributes."""
    ref = canonical_reference(reference)
    return {"b2k": "years before AD 2000 (b2k)", "BP": "years before AD 1950 (BP)",
            "ka b2k": "thousands of years before AD 2000 (ka b2k)",
            "ka BP": "thousands of years before AD 1950 (ka BP)",
            "CE": "calendar year CE", "BCE": "calendar year BCE"}[ref]
