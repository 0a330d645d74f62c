"""Site tables: reading and checking the sites of a synchrony request (the file edge).

A request is a JSON file ``{"sites": [...], "age_reference": ..., "seed": ...}`` or a CSV table
with one site per row and the columns ``label,age,sd`` (optional ``lower``, ``upper``,
``age_reference``, ``chronology``, ``shared_sd``, ``independent``). A site's ``draws`` may name
a one-column file of age draws, read here (relative paths resolve beside the request file).
Every problem is raised as :class:`~align.errors.InputError` naming the site's label and the
field (``sites.<index>.<field>``, a JSON pointer in the HTTP service).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from align.choices import RecordReference, options
from align.errors import InputError
from align.missing import find_sentinel
from align.schema import SynchronyRequest

#: Columns a CSV site table may have (``label`` and ``age`` are required).
CSV_COLUMNS = ("label", "age", "sd", "lower", "upper", "age_reference", "chronology",
               "shared_sd", "independent")
MARKER_FIELDS = ("kind", "record", "variable", "window")
#: Largest age magnitude accepted (yr), and the smallest and largest sd: no chronology is
#: finer than a thousandth of a year or coarser than the age of the universe.
MAX_AGE, MIN_SD, MAX_SD = 1e10, 1e-3, 1e10
_TRUE = {"true", "yes", "1", "y", "t"}
_FALSE = {"false", "no", "0", "n", "f"}


def read_sites(path):
    """Read a site file (JSON request or CSV table) as a checked request.

    Relative ``record`` and ``draws`` paths name files beside the site file when such a file
    exists there (else they stay relative to the working folder), as for lag requests.

    Parameters
    ----------
    path : str or os.PathLike
        A ``.json`` request or a ``.csv`` site table.

    Returns
    -------
    SynchronyRequest
    """
    from align.io import read_json

    path = Path(path)
    if path.suffix.lower() == ".json":
        body = read_json(path, "site file")
        if not isinstance(body, dict) or not isinstance(body.get("sites"), list):
            raise InputError("a site file holds a JSON object with a list 'sites'",
                             source=str(path), field="sites")
    else:
        body = {"sites": read_site_table(path)}
    for site in body["sites"]:
        for key in ("record", "draws"):
            if isinstance(site, dict) and isinstance(site.get(key), str):
                candidate = path.parent / site[key]
                if not Path(site[key]).is_absolute() and candidate.exists():
                    site[key] = str(candidate)
    return sites_request(body, source=str(path))


def read_site_table(path):
    """The rows of a CSV site table as site dicts (empty cells left out)."""
    import pandas as pd

    try:
        frame = pd.read_csv(path, dtype=str, comment="#", skipinitialspace=True,
                            keep_default_na=False)
    except FileNotFoundError:
        raise InputError("no such site table", source=str(path), status=404) from None
    except (OSError, UnicodeDecodeError, pd.errors.ParserError,
            pd.errors.EmptyDataError) as exc:
        raise InputError(f"cannot read the site table ({exc})", source=str(path),
                         status=400) from None
    columns = [c.strip() for c in frame.columns]
    unknown = [c for c in columns if c not in CSV_COLUMNS]
    if unknown:
        raise InputError(f"unknown column {unknown[0]!r} (columns: {', '.join(CSV_COLUMNS)})",
                         source=str(path), field=unknown[0])
    if "label" not in columns:
        raise InputError("a site table needs a 'label' column", source=str(path), field="label")
    frame.columns = columns
    sites = []
    for k, row in enumerate(frame.to_dict("records")):
        site = {}
        for column, cell in row.items():
            cell = cell.strip()
            if cell:
                site[column] = _cell(cell, column, row.get("label", ""), k, path)
        sites.append(site)
    return sites


def _cell(text, column, label, k, path):
    if column in ("label", "age_reference", "chronology"):
        return text
    if column == "independent":
        if text.lower() in _TRUE | _FALSE:
            return text.lower() in _TRUE
        raise InputError(f"site {label!r}: independent is true or false, got {text!r}",
                         source=str(path), field=f"sites.{k}.independent", row=k + 1)
    try:
        return float(text)
    except ValueError:
        raise InputError(f"site {label!r}: {column} is not a number ({text!r})",
                         source=str(path), field=f"sites.{k}.{column}", row=k + 1) from None


def read_draws(path, label, k):
    """One column of age draws (a header line is allowed); never empty, all finite."""
    import pandas as pd

    field = f"sites.{k}.draws"
    try:
        frame = pd.read_csv(path, header=None, comment="#")
    except FileNotFoundError:
        raise InputError(f"site {label!r}: no such draws file", source=str(path),
                         field=field) from None
    except pd.errors.EmptyDataError:
        raise InputError(f"site {label!r}: the draws file is empty", source=str(path),
                         field=field) from None
    except (OSError, UnicodeDecodeError, pd.errors.ParserError) as exc:
        raise InputError(f"site {label!r}: cannot read the draws file ({exc})",
                         source=str(path), field=field) from None
    if frame.shape[1] != 1:
        raise InputError(f"site {label!r}: a draws file has one column, this one has "
                         f"{frame.shape[1]}", source=str(path), field=field)
    values = pd.to_numeric(frame.iloc[:, 0], errors="coerce").to_numpy(dtype=float)
    if values.size and not np.isfinite(values[0]):
        values = values[1:]  # a header line
    return check_draws(values, label, k, source=str(path))


def check_draws(values, label, k, *, source=None):
    """Draws as a float array: at least two, all finite, not all equal."""
    values = np.asarray(values, dtype=float)
    field = f"sites.{k}.draws"
    if values.size == 0:
        raise InputError(f"site {label!r}: no draws (the draws are empty)", source=source,
                         field=field)
    bad = np.flatnonzero(~(np.abs(values) <= MAX_AGE))
    if bad.size:
        raise InputError(f"site {label!r}: draw {bad[0] + 1} is not an age (not a number, or "
                         f"beyond {MAX_AGE:g} yr)", source=source, field=field,
                         row=int(bad[0]) + 1)
    found = find_sentinel(values)
    if found is not None:
        raise InputError(f"site {label!r}: {found[1]} draw(s) hold {found[0]:g}, far outside "
                         "the other draws: a missing-value code? remove them", source=source,
                         field=field, row=found[2] + 1)
    if values.size < 2 or np.ptp(values) == 0:
        raise InputError(f"site {label!r}: the draws have no spread (need at least two "
                         "different values)", source=source, field=field)
    return values


def sites_request(body, *, source=None):
    """A checked :class:`SynchronyRequest` from a body (dict or request).

    Raises
    ------
    InputError
        Naming the site's label and ``sites.<index>.<field>`` for: a site without an age or a
        record, sd <= 0, lower >= upper, an age outside its interval, an unknown age
        reference, duplicate labels, fewer than two independent sites.
    """
    from align.schema import validate_as

    if isinstance(body, SynchronyRequest):
        request = body
    else:
        try:
            request = validate_as(SynchronyRequest, body, source=source)
        except InputError as exc:
            raise _labelled(exc, body) from None
    seen = {}
    for k, site in enumerate(request.sites):
        if site.label in seen:
            raise InputError(f"site {site.label!r}: the label is used twice (sites "
                             f"{seen[site.label]} and {k})", source=source,
                             field=f"sites.{k}.label")
        seen[site.label] = k
        check_site(site, k, source=source)
    independent = [s.label for s in request.sites if s.independent]
    if len(independent) < 2:
        others = [s.label for s in request.sites if not s.independent]
        raise InputError(f"fewer than two independent sites ({len(independent)}); "
                         + (f"not independent: {', '.join(others)}" if others else
                            "a test of one common age needs at least two"),
                         source=source, field="sites")
    return request


def _labelled(exc, body):
    """A schema error on ``sites.<k>.<field>`` re-worded to name the site's label."""
    parts = (exc.field or "").split(".")
    if len(parts) >= 2 and parts[0] == "sites" and parts[1].isdigit():
        try:
            label = body["sites"][int(parts[1])].get("label", f"#{parts[1]}")
        except (KeyError, IndexError, TypeError, AttributeError):
            return exc
        return InputError(f"site {label!r}: {exc.message}", source=exc.source,
                          field=exc.field, status=exc.status)
    return exc


def check_site(site, k, *, source=None):
    """Check one site's fields (see :func:`sites_request`)."""

    def fail(message, field):
        raise InputError(f"site {site.label!r}: {message}", source=source,
                         field=f"sites.{k}.{field}")

    for name in ("age", "lower", "upper"):
        value = getattr(site, name)
        if value is not None and not abs(value) <= MAX_AGE:
            fail(f"{name} {value:g} is beyond {MAX_AGE:g} yr", name)
    for name in ("sd", "shared_sd"):
        value = getattr(site, name)
        if value is not None and value > MAX_SD:
            fail(f"{name} {value:g} is beyond {MAX_SD:g} yr", name)
    marker = [f for f in MARKER_FIELDS if getattr(site, f) is not None]
    tabulated = [f for f in ("age", "sd", "lower", "upper", "draws")
                 if getattr(site, f) is not None]
    if marker and tabulated:
        fail(f"give a marker ({', '.join(MARKER_FIELDS)}) or a tabulated date, not both "
             f"({marker[0]} and {tabulated[0]})", tabulated[0])
    if marker:
        missing = [f for f in MARKER_FIELDS if getattr(site, f) is None]
        if missing:
            fail(f"a marker site needs {', '.join(MARKER_FIELDS)}", missing[0])
        if site.age_reference is not None and (site.age_reference
                                               not in options(RecordReference)):
            fail("a marker's window is in b2k or BP", "age_reference")
        return
    if site.draws is not None:
        if site.age is not None or site.sd is not None or site.lower is not None:
            fail("give draws alone, without age, sd or an interval", "draws")
        return
    if site.age is None:
        fail("no age and no record (give age with sd or lower/upper, draws, or a marker "
             "on a record)", "age")
    if site.sd is not None:
        if site.lower is not None or site.upper is not None:
            fail("give sd or a 95 % interval (lower, upper), not both", "sd")
        if not site.sd > 0:
            fail(f"sd must be greater than 0 (got {site.sd:g})", "sd")
        if site.sd < MIN_SD:
            fail(f"sd {site.sd:g} is below {MIN_SD:g} yr", "sd")
        if site.shared_sd is not None and site.shared_sd > site.sd:
            fail(f"shared_sd ({site.shared_sd:g}) exceeds the site's sd ({site.sd:g})",
                 "shared_sd")
        return
    if site.lower is None or site.upper is None:
        fail("needs sd, or both lower and upper (a 95 % interval)",
             "lower" if site.lower is None else "upper")
    if not site.lower < site.upper:
        fail(f"lower ({site.lower:g}) must be smaller than upper ({site.upper:g})", "lower")
    if site.upper - site.lower < 2 * MIN_SD:
        fail(f"the interval is narrower than {2 * MIN_SD:g} yr", "lower")
    if not site.lower <= site.age <= site.upper:
        fail(f"age {site.age:g} lies outside its interval [{site.lower:g}, {site.upper:g}]",
             "age")
