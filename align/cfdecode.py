"""CF time coordinates (``<unit> since <date>``) decoded to ages in years BP.

A CF time axis counts forward from a reference date in the units and calendar it declares
(CF Conventions 1.11, section 4.4, doi:10.5281/zenodo.10940589). Sub-day to day units are
decoded by cftime on the declared calendar; year units (``years``, ``common_years``) are
read as counts of calendar years, which is how paleoclimate files use them (the UDUNITS
``year`` of 365.242198781 days would put 10,000 "years" three days off a calendar year count).
Anything cftime cannot decode is refused, naming the variable and its ``units``.
"""

from __future__ import annotations

import re
import warnings

import numpy as np

from align.errors import InputError

_SINCE = re.compile(r"^\s*(?P<unit>[A-Za-z_]+)\s+since\s+(?P<date>.+?)\s*$")
#: Units counted as whole calendar years from the reference date.
_YEAR_UNITS = ("years", "year", "yr", "yrs", "common_years", "common_year", "a")
_CALENDARS_WITH_YEAR_ZERO = ("proleptic_gregorian", "360_day", "365_day", "noleap",
                             "366_day", "all_leap", "allleap")


def is_cf_time(units):
    """Whether ``units`` has the CF form ``<unit> since <date>``."""
    return isinstance(units, str) and _SINCE.match(units) is not None


def cf_time_to_bp(values, units, calendar=None, *, variable, source=None):
    """Decode CF time values to ages in years before AD 1950 (BP).

    Parameters
    ----------
    values : array_like
        The stored numbers (NaN allowed).
    units : str
        ``"<unit> since <date>"`` as the file declares it.
    calendar : str, optional
        The CF ``calendar`` attribute (default ``standard``).
    variable, source : str
        Named in errors.

    Returns
    -------
    numpy.ndarray
        Ages BP (yr): ``BP = 1950 - y``, ``y`` the date as an astronomical decimal year
        (year plus the elapsed fraction of that year in the calendar).

    Raises
    ------
    InputError
        When cftime cannot decode the units or calendar (naming ``variable`` and ``units``).
    """
    calendar = (calendar or "standard").strip().lower()
    match = _SINCE.match(str(units))
    if match is None:
        raise InputError(f"cannot decode time units {units!r} (expected '<unit> since <date>')",
                         source=source, field=variable)
    values = np.asarray(values, dtype=float)
    ok = np.isfinite(values)
    out = np.full(values.shape, np.nan)
    with warnings.catch_warnings():
        # cftime warns that CF does not define negative years without a year zero; they are
        # decoded as such all the same
        warnings.filterwarnings("ignore", message=".*year zero convention.*")
        try:
            out[ok] = _decode(values[ok], units, match["unit"], match["date"], calendar)
        except (ValueError, TypeError, OverflowError) as exc:
            raise InputError(f"cannot decode time units {units!r} with calendar {calendar!r} "
                             f"({exc})", source=source, field=variable) from None
    return out


def _decode(values, units, unit, date, calendar):
    if unit.lower() in _YEAR_UNITS:
        origin = decimal_years(_dates([0.0], f"days since {date}", calendar), calendar)[0]
        return 1950.0 - (origin + values)
    return 1950.0 - decimal_years(_dates(values, units, calendar), calendar)


def _dates(values, units, calendar):
    import cftime

    return np.atleast_1d(cftime.num2date(np.asarray(values, dtype=float), units, calendar,
                                         only_use_cftime_datetimes=True))


def decimal_years(dates, calendar):
    """Astronomical decimal years of cftime dates: ``year + elapsed / length of year``.

    Calendars without a year zero (``standard``, ``julian``) number 1 BCE as -1; it becomes
    astronomical year 0 here.
    """
    import cftime

    years = np.array([d.year for d in dates])
    starts = cftime.date2num([cftime.datetime(y, 1, 1, calendar=calendar) for y in years],
                             "days since 1970-01-01", calendar)
    ends = cftime.date2num([cftime.datetime(_next_year(y, calendar), 1, 1, calendar=calendar)
                            for y in years], "days since 1970-01-01", calendar)
    now = cftime.date2num(list(dates), "days since 1970-01-01", calendar)
    astronomical = np.where((years < 0) & (calendar not in _CALENDARS_WITH_YEAR_ZERO),
                            years + 1, years)
    return astronomical + (np.asarray(now) - starts) / (np.asarray(ends) - starts)


def _next_year(year, calendar):
    if year == -1 and calendar not in _CALENDARS_WITH_YEAR_ZERO:
        return 1
    return year + 1
