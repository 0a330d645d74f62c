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
``astronomical``  signed year with a year 0 (0 = 1 BCE)    ``BP = 1950 - year``
=========  ==========================================  ========================

1 BCE is followed directly by 1 CE, so 1 CE = 1949 BP and 1 BCE = 1950 BP; subtracting 1950
from an age BP to get a BCE year is off by one. Astronomical year numbering (used by ISO 8601
and cftime calendars with a year zero) has a year 0 = 1 BCE, and -1 = 2 BCE.

Units written in file headers (``ka BP``, ``cal ka BP``, ``yr b2k``, ``a BP``, ``yr CE``) are
read by :func:`parse_age_units`; a reference written into a column name (``Age_BP``,
``age_b2k``) by :func:`age_units_from_name`.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from align.choices import AgeConvention, RecordReference, options
from align.errors import InputError

#: Offset of each reference from BP, in years, and the scale of its unit.
_LINEAR = {"b2k": (-50.0, 1.0), "BP": (0.0, 1.0), "ka b2k": (-50.0, 1000.0),
           "ka BP": (0.0, 1000.0), "astronomical": (1950.0, -1.0)}
_CALENDAR = ("CE", "BCE")

#: Reference names accepted on input, folded to their canonical spelling.
_ALIASES = {
    "b2k": "b2k", "bp": "BP", "ce": "CE", "ad": "CE", "bce": "BCE", "bc": "BCE",
    "ka b2k": "ka b2k", "ka-b2k": "ka b2k", "kab2k": "ka b2k", "ka_b2k": "ka b2k",
    "ka bp": "ka BP", "ka-bp": "ka BP", "kabp": "ka BP", "ka_bp": "ka BP", "ka": "ka BP",
    "astronomical": "astronomical", "astro": "astronomical",
}

#: The references a record's age coordinate may use (ages in years).
RECORD_REFERENCES = options(RecordReference)
#: Every reference :func:`convert_age` accepts, canonical spelling.
REFERENCES = options(AgeConvention)
#: References that count forward in time (calendar years).
FORWARD_REFERENCES = ("CE", "BCE", "astronomical")


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
    if np.ndim(values) == 0 and not np.isfinite(values):
        raise InputError(f"an age must be a finite number (got {values})", field="value")
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
            "CE": "calendar year CE", "BCE": "calendar year BCE",
            "astronomical": "astronomical year (0 = 1 BCE)"}[ref]


# --------------------------------------------------------------------------------------------
# units written in headers and names

#: Words of an age unit, folded to (scale in years, reference); ``None`` leaves a part open.
_UNIT_WORDS = {
    "yr": (1.0, None), "yrs": (1.0, None), "year": (1.0, None), "years": (1.0, None),
    "a": (1.0, None), "ka": (1000.0, None), "kyr": (1000.0, None), "kyrs": (1000.0, None),
    "ky": (1000.0, None), "kiloyears": (1000.0, None), "kyears": (1000.0, None),
    "bp": (None, "BP"), "b2k": (None, "b2k"), "ce": (None, "CE"), "ad": (None, "CE"),
    "bce": (None, "BCE"), "bc": (None, "BCE"), "astronomical": (None, "astronomical"),
}
#: Words that qualify an age unit without changing it (calibrated ages, "age").
_UNIT_FILLER = {"cal", "calendar", "calibrated", "age", "ages", "before", "present"}
_PHRASES = (("before present", "bp"), ("before ad 2000", "b2k"), ("before 2000", "b2k"),
            ("b.p.", "bp"), ("b.c.e.", "bce"), ("c.e.", "ce"), ("a.d.", "ad"),
            ("b.c.", "bc"), ("calbp", "cal bp"), ("calka", "cal ka"), ("kabp", "ka bp"),
            ("yrbp", "yr bp"), ("kab2k", "ka b2k"), ("yrb2k", "yr b2k"))


@dataclass(frozen=True)
class AgeUnits:
    """What an age column's numbers mean: ``scale`` years per unit and a ``reference``.

    Either part may be ``None`` when the text does not say it.
    """

    scale: float | None = None
    reference: str | None = None

    def describe(self):
        scale = {None: "", 1.0: "yr", 1000.0: "ka"}[self.scale]
        return " ".join(p for p in (scale, self.reference or "") if p) or "(nothing)"


def _unit_tokens(text):
    low = f" {str(text).strip().lower()} "
    for phrase, word in _PHRASES:
        low = low.replace(phrase, word)
    return [t for t in re.split(r"[^a-z0-9]+", low) if t]


def _fold(tokens, strict, text, field):
    scale = reference = None
    for token in tokens:
        if token in _UNIT_FILLER:
            continue
        word = _UNIT_WORDS.get(token)
        if word is None:
            if strict:
                raise InputError(f"unknown age unit {text!r}; use yr or ka, optionally with "
                                 "BP, b2k, CE, BCE (e.g. 'ka BP', 'yr b2k', 'cal ka BP')",
                                 field=field)
            continue
        if (word[0] is not None and scale not in (None, word[0])) or (
                word[1] is not None and reference not in (None, word[1])):
            raise InputError(f"age unit {text!r} says two different things", field=field)
        scale = word[0] if word[0] is not None else scale
        reference = word[1] if word[1] is not None else reference
    if scale == 1000.0 and reference in FORWARD_REFERENCES:
        raise InputError(f"age unit {text!r}: thousands of calendar years are not supported; "
                         "give years", field=field)
    return AgeUnits(scale, reference)


def parse_age_units(text, *, field="age_units"):
    """Read an age unit as written in a header or an option.

    Parameters
    ----------
    text : str
        E.g. ``"ka BP"``, ``"cal ka BP"``, ``"yr b2k"``, ``"a BP"``, ``"kyr"``, ``"yr CE"``.
    field : str
        The option or column named in errors.

    Returns
    -------
    AgeUnits

    Raises
    ------
    InputError
        For any word that is not an age unit or reference, or for contradictory words.
    """
    tokens = _unit_tokens(text)
    if not tokens:
        raise InputError(f"unknown age unit {text!r}", field=field)
    return _fold(tokens, True, text, field)


def age_units_from_name(name):
    """The unit and reference a column name hints at (``Age_BP``, ``age_ka_b2k``), else empty.

    Only whole words count, so ``Age_BP`` hints BP but ``Ca`` hints nothing.
    """
    return _fold([t for t in _unit_tokens(name) if t in _UNIT_WORDS and t != "a"], False, name,
                 "age_column")
