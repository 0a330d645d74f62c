"""From a table of columns to a record: roles, units, ages, missing values.

One path for text tables, workbooks, generic NetCDF variables and DataFrames. Every column is
known by its header as written (``Age [ka BP]``), its name without the unit (``Age``) and its
cleaned, NetCDF-safe name (``Age``; ``δ18O H2O`` becomes ``δ18O_H2O``); options may use any of
them. The unit and reference of the age column come from the options, the header unit and the
column name; when two of these disagree the table is refused rather than relabelled.
"""

from __future__ import annotations

import re
import warnings
from dataclasses import dataclass
from dataclasses import field as _field

import numpy as np
import pandas as pd

from align.ages import (FORWARD_REFERENCES, AgeUnits, age_units_from_name, canonical_reference,
                        from_bp, parse_age_units, to_bp)
from align.cfdecode import cf_time_to_bp, is_cf_time
from align.errors import InputError
from align.missing import find_sentinel, mask_missing, split_codes
from align.record import TIMESCALE_VARIABLES, add_history, build_record, record_reference

#: Metres per depth unit.
DEPTH_SCALE = {"m": 1.0, "cm": 0.01, "mm": 0.001}
_DEPTH_UNIT = {scale: unit for unit, scale in DEPTH_SCALE.items()}
#: Depth units spelled out (CF files, headers).
_DEPTH_SPELLED = {"metre": 1.0, "metres": 1.0, "meter": 1.0, "meters": 1.0,
                  "centimetre": 0.01, "centimetres": 0.01, "centimeter": 0.01,
                  "centimeters": 0.01, "millimetre": 0.001, "millimetres": 0.001,
                  "millimeter": 0.001, "millimeters": 0.001}
#: Words of a depth column's name that make it a sample's top or bottom, not its mid-depth.
_BOUND_WORDS = {"top", "bottom", "bot", "base", "upper", "lower"}
_HEADER = re.compile(r"^\s*(?P<name>[^(\[]*[^(\[\s])\s*(?:\[(?P<bracket>[^\]]*)\])?\s*"
                     r"(?:\((?P<paren>[^)]*)\))?\s*$")
#: Column names found without being told (lower case).
AUTO = {"depth": ("depth",), "age": ("age",), "age_sd": ("age_sd", "sd"),
        "age_mce": ("age_mce", "mce"), "depth_top": ("depth_top",),
        "depth_bottom": ("depth_bottom",), "age_top": ("age_top",),
        "age_bottom": ("age_bottom",)}
OPTION_OF_ROLE = {role: {"age_sd": "age_sd_column", "age_mce": "mce_column"}.get(
    role, f"{role}_column") for role in AUTO}
#: The youngest plausible age, per record reference: AD 2100 (a stated choice).
FAR_FUTURE = {"b2k": -100.0, "BP": -150.0}
#: A sigma level stated in a header (``2σ``, ``1 sigma``, ``2 sd``).
_SIGMA = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*(?:σ|sigma|sd|s)\s*$", re.IGNORECASE)
#: What each uncertainty column holds, for messages.
_ROLE_HOLDS = {"age_sd": "an age sd column holds 1-sigma uncertainties",
               "age_mce": "an MCE column holds maximum counting errors (2 sigma)"}
#: A number with '.' between groups of three digits: thousands, where ',' is the decimal mark.
_THOUSANDS_DOT = r"[-+]?\d{1,3}(?:\.\d{3})+(?:,\d*)?"
#: Calendar-year lengths (days) whose whole multiples as a sample interval suggest days.
_YEAR_DAYS = (365.0, 365.25, 365.2425, 360.0)


@dataclass
class Column:
    """One column: the header as written, its name without unit, unit, comment, attributes."""

    header: str
    name: str
    unit: str | None = None
    comment: str | None = None
    attrs: dict = _field(default_factory=dict)


def safe_name(column):
    """A NetCDF/CF-safe variable name: letters, digits and underscores, starting with a letter."""
    name = re.sub(r"\W+", "_", column).strip("_") or "value"
    return name if name[0].isalpha() else f"v_{name}"


def split_header(header):
    """``Name [unit] (comment)``, ``Name (unit)`` or ``Name`` as a :class:`Column`."""
    match = _HEADER.match(header)
    if not match or not (match["bracket"] or match["paren"]):
        return Column(header, header.strip())
    if match["bracket"] is not None:
        return Column(header, match["name"], match["bracket"].strip() or None,
                      (match["paren"] or "").strip() or None)
    return Column(header, match["name"], match["paren"].strip() or None)


def frame_to_record(frame, mapping, meta, *, name, checksum, locate, attrs_of=None,
                    declared_missing=(), descriptions=None):
    """Build a record from a table of columns (text or numbers).

    Parameters
    ----------
    frame : pandas.DataFrame
    mapping : dict
        :func:`align.io.open_record` keywords (``age_column``, ``age_units``, ...).
    meta : dict
        Global attributes for the record (file metadata, then the caller's).
    name, checksum : str
        The source, for messages and attributes.
    locate : callable
        Row index to ``(row_kind, row)``.
    attrs_of : dict, optional
        Attributes of each column (NetCDF variables: ``units``, ``calendar``, ...).
    declared_missing : sequence
        Missing-value codes the file declares (added to ``mapping["missing_values"]``).
    descriptions : dict, optional
        Column descriptions from the file (kept as ``comment``).
    """
    if frame.shape[0] == 0:
        raise InputError("the table is empty (no data rows)", source=name)
    columns = _columns(frame, attrs_of or {}, descriptions or {}, name)
    frame = frame.set_axis(list(columns), axis=1)
    roles = assign_roles(columns, mapping, name)
    proxies = _proxy_columns(columns, roles, mapping, name)
    numbers, texts = split_codes([*declared_missing, *(mapping.get("missing_values") or [])])
    notes = []
    numeric = {}
    wanted = [*roles.values(), *proxies]
    parsed = numeric_columns(frame, wanted, name, locate, texts, mapping.get("decimal"))
    for col in wanted:
        values, masked = mask_missing(parsed[col], numbers, columns[col].attrs)
        notes.extend(f"{n} {what} in {columns[col].header!r} read as missing"
                     for n, what in masked)
        if masked and np.isnan(values).all():
            raise InputError("the missing-value code(s) leave this column without any "
                             "value", source=name, field=columns[col].header)
        refuse_sentinel(values, columns[col].header, name, locate)
        numeric[col] = values
    _refuse_missing_roles(numeric, roles, locate, name)
    depth_scale = _depth_scale(roles, columns, mapping, name)
    ages = AgeReading.resolve(roles, columns, mapping, name)
    if "age" in roles:
        ages.orient(numeric[roles["age"]])
    for role in ("age", "age_top", "age_bottom"):
        if role in roles:
            numeric[roles[role]] = ages.convert(numeric[roles[role]])
    for role in ("age_sd", "age_mce"):
        if role in roles:
            scale = ages.uncertainty_scale(columns[roles[role]], role, mapping)
            numeric[roles[role]] = numeric[roles[role]] * scale
    for role in ("depth", "depth_top", "depth_bottom"):
        if role in roles:
            numeric[roles[role]] = numeric[roles[role]] * depth_scale
    if depth_scale != 1.0:
        notes.append(f"depths converted from {_DEPTH_UNIT[depth_scale]} to m")
    if "depth" not in roles and "depth_top" in roles and "depth_bottom" in roles:
        roles["depth"] = "depth"
        numeric["depth"] = (numeric[roles["depth_top"]] + numeric[roles["depth_bottom"]]) / 2
        notes.append("depth mid-points half-way between depth_top and depth_bottom")
    order, numeric, reversed_note = _top_down(numeric, roles, frame.shape[0])
    locate_sorted = (lambda i: locate(order[i])) if order is not None else locate
    if "age" in roles:
        notes.extend(ages.notes + plausibility(numeric[roles["age"]], ages, name))

    def get(role):
        col = roles.get(role)
        return None if col is None else numeric[col]

    def bounds(prefix):
        top, bottom = get(f"{prefix}_top"), get(f"{prefix}_bottom")
        if (top is None) != (bottom is None):
            raise InputError(f"give both {prefix} top and bottom columns, or neither",
                             source=name, field=f"{prefix}_top")
        return None if top is None else np.column_stack([top, bottom])

    units = mapping.get("units") or {}
    proxy_vars = {}
    for col in proxies:
        column = columns[col]
        attrs = {"long_name": column.name}
        unit = next((units[k] for k in (column.header, column.name, col) if k in units),
                    column.unit)
        if unit:
            attrs["units"] = unit
        if column.comment:
            attrs["comment"] = column.comment
        proxy_vars[col] = (numeric[col], attrs)
    attrs = {k: v for k, v in meta.items() if isinstance(v, (str, int, float))}
    attrs.update(source=name, source_checksum=checksum)
    record = build_record(
        depth=get("depth"), age=get("age"),
        age_reference=ages.reference if "age" in roles else None,
        depth_bounds=bounds("depth"), age_bounds=bounds("age"), age_sd=get("age_sd"),
        age_mce=get("age_mce"), proxies=proxy_vars, attrs=attrs, locate=locate_sorted,
        source=name)
    if reversed_note:
        warnings.warn(f"{name}: {reversed_note}", UserWarning, stacklevel=3)
        notes.append(reversed_note)
    for note in notes:
        add_history(record, note)
    if "bounds_derived" in record.attrs:
        add_history(record, f"{record.attrs['bounds_derived']} bounds derived half-way between "
                            "neighbouring mid-points")
    return record


def _columns(frame, attrs_of, descriptions, name):
    """Each column as a :class:`Column`, keyed by its cleaned name (which must be unique)."""
    out = {}
    for header in frame.columns:
        header = str(header)
        column = split_header(header)
        attrs = attrs_of.get(header, {})
        column.attrs = dict(attrs)
        if attrs.get("units") and column.unit is None:
            column.unit = str(attrs["units"])
        if column.comment is None:
            column.comment = descriptions.get(header) or descriptions.get(column.name)
        key = safe_name(column.name)
        if key in out:
            raise InputError(f"two columns are both named {key!r} once units and punctuation "
                             f"are set aside ({out[key].header!r}, {header!r})", source=name,
                             field=header)
        out[key] = column
    return out


def find_column(columns, given):
    """The cleaned name of the column ``given`` names (header, name or cleaned name), or None."""
    for key, column in columns.items():
        if given in (key, column.header, column.name):
            return key
    key = safe_name(split_header(str(given)).name)
    return key if key in columns else None


def available(columns):
    return ", ".join(repr(c.header) for c in columns.values())


def assign_roles(columns, mapping, name):
    """Which column plays which role (depth, age, uncertainty, bounds)."""
    roles = {}
    for role in AUTO:
        option = OPTION_OF_ROLE[role]
        given = mapping.get(option)
        if given is not None:
            found = find_column(columns, given)
            if found is None:
                raise InputError(f"no column {given!r} for {option}= (available: "
                                 f"{available(columns)})", source=name, field=option)
            roles[role] = found
        else:
            found = _exact_match(columns, role, name)
            if found is None and role in _LOOSE:
                found = _loose_match(columns, role)
                if found is not None and role == "depth":
                    _refuse_bound_as_depth(columns[found], name)
            if found is not None:
                roles[role] = found
    if "depth" not in roles and "age" not in roles:
        raise InputError("no depth or age column; name one with depth_column= or age_column= "
                         f"(available: {available(columns)})", source=name, field="age_column")
    if "age" not in roles:
        for role in ("age_sd", "age_mce", "age_top", "age_bottom"):
            if role in roles:
                raise InputError("an age uncertainty or age bounds without an age column",
                                 source=name, field=columns[roles[role]].header)
    return roles


def _exact_match(columns, role, name):
    """The column named as ``role`` is found without being told (any case); two such columns
    (``Depth`` and ``depth``) are refused."""
    found = [key for key in columns if key.lower() in AUTO[role]]
    for candidate in AUTO[role]:
        same = [key for key in found if key.lower() == candidate]
        if len(same) > 1:
            raise InputError(f"columns {columns[same[0]].header!r} and {columns[same[1]].header!r}"
                             f" both look like the {role.replace('_', ' ')}; name one with "
                             f"{OPTION_OF_ROLE[role]}=", source=name, field=columns[same[1]].header)
        if same:
            return same[0]
    return None


#: Name patterns of depth and age columns found when exactly one column matches
#: (``age_calBP``, ``Year [BCE]``, ``depth_m``; a CF time axis for age).
_LOOSE = {"depth": re.compile(r"^depth(?:[\W_].*)?$", re.IGNORECASE),
          "age": re.compile(r"^(?:age|years?)(?:[\W_].*)?$", re.IGNORECASE)}
_OTHER_ROLES = {c for role, names in AUTO.items() if role not in _LOOSE for c in names}


def _name_words(name):
    return re.split(r"[\W_]+", name.lower())


def _name_unit(name):
    """A depth unit among the words of a depth column's name after the first (``depth_cm``,
    ``Depth_cm_mid``, ``depth-mbsf-cm``), or None."""
    units = {word for word in _name_words(name)[1:] if word in DEPTH_SCALE}
    return units.pop() if len(units) == 1 else None


def _refuse_bound_as_depth(column, name):
    """A lone depth column named as a sample's top or bottom (``depth_top_cm``) is not its
    mid-depth."""
    if _BOUND_WORDS & set(_name_words(column.name)):
        raise InputError(f"the column {column.header!r} looks like the top or bottom of the "
                         "samples, not their mid-depth; name the columns with depth_column=, "
                         "or depth_top_column= and depth_bottom_column=", source=name,
                         field=column.header)


def _loose_match(columns, role):
    found = [key for key, c in columns.items() if _LOOSE[role].match(c.name)
             and key.lower() not in _OTHER_ROLES]
    if role == "age" and not found:
        found = [key for key, c in columns.items() if _is_time(c)]
    return found[0] if len(found) == 1 else None


def _is_time(column):
    attrs = column.attrs
    return (is_cf_time(column.unit) or attrs.get("standard_name") == "time"
            or str(attrs.get("axis", "")).upper() == "T")


#: Names a record keeps for its own variables (a proxy named so would be taken for them).
_SCHEMA_NAMES = {"depth", "age", *TIMESCALE_VARIABLES}


def _proxy_columns(columns, roles, mapping, name):
    taken = set(roles.values())
    wanted = mapping.get("variables")
    if wanted:
        keys = []
        for given in wanted:
            key = find_column(columns, given)
            if key is None:
                raise InputError(f"no column {given!r} for variables= (available: "
                                 f"{available(columns)})", source=name, field="variables")
            keys.append(key)
        proxies = [k for k in keys if k not in taken]
    else:
        proxies = [c for c in columns if c not in taken]
    for key in proxies:
        if key in _SCHEMA_NAMES:
            raise InputError(f"a column named {key!r} that is not the record's own {key} cannot "
                             "be kept as a variable; leave it out with variables=",
                             source=name, field=columns[key].header)
    return proxies


def numeric_columns(frame, cols, name, locate, texts=(), decimal=None):
    """Parse the columns ``cols`` of ``frame`` as :func:`numeric_column` does, the cells of
    all text columns in one pass (per-column work made wide tables slow).

    Returns
    -------
    dict of str to numpy.ndarray

    Raises
    ------
    InputError
        For the first column (in the order of ``cols``) holding a cell that is not a number
        or is infinite, as :func:`numeric_column` words it.
    """
    kinds = frame.dtypes
    text = [col for col in cols if kinds[col].kind not in "fiu"]
    out = {col: numeric_column(frame[col], col, name, locate) for col in cols
           if kinds[col].kind in "fiu"}
    if text:
        cells = pd.Series(frame[text].to_numpy(dtype=object).ravel(order="F"))
        values, bad = _parse_cells(cells, texts, decimal)
        shape = (len(text), -1)  # cells were taken column by column
        values, bad = values.reshape(shape), (bad | np.isinf(values)).reshape(shape)
        for col, row_values, row_bad in zip(text, values, bad):
            if row_bad.any():  # worded, and located, by the one-column reader
                numeric_column(frame[col], col, name, locate, texts, decimal)
            out[col] = row_values
    return {col: out[col] for col in cols}


def _parse_cells(cells, texts, decimal):
    """Cells (text) to numbers: blank cells and missing-value texts are NaN; also returns
    where a cell is neither a number nor blank."""
    text = cells.astype(str).str.strip()
    blank = (text == "") | text.isin(list(texts)) | text.str.lower().isin(["nan", "na"])
    parsed = text
    if decimal == ",":  # '11.500' there holds a thousands separator: refused, not 11.5
        parsed = text.str.replace(",", ".", regex=False).where(
            ~text.str.fullmatch(_THOUSANDS_DOT))
    values = pd.to_numeric(parsed.where(~blank), errors="coerce").to_numpy(dtype=float)
    return values, np.isnan(values) & ~blank.to_numpy()


def numeric_column(series, col, name, locate, texts=(), decimal=None):
    """Parse one column; empty cells and text codes are NaN, anything else non-numeric fails."""
    if series.dtype.kind in "fiu":
        values = series.to_numpy(dtype=float)
    else:
        text = series.astype(str).str.strip()
        values, bad = _parse_cells(series, texts, decimal)
        if bad.any():
            i = int(np.argmax(bad))
            kind, row = locate(i)
            hint = (" (a decimal comma? say decimal=',')"
                    if re.fullmatch(r"-?\d+,\d+", text.iloc[i]) else "")
            if not re.search(r"\d", text.iloc[i]):
                hint = (" (a units row under the header? give units in the header, e.g. "
                        "'depth (m)')" if i == 0 else " (a missing-value code? declare it "
                        f"with missing_values=[{text.iloc[i]}])")
            if re.fullmatch(r"-?\d{1,3}(?:,\d{3})+", text.iloc[i]):
                hint = (" (a decimal comma, or a thousands separator? say decimal=',' for the "
                        "one, take the separators out for the other)")
            if decimal == "," and re.fullmatch(_THOUSANDS_DOT, text.iloc[i]):
                hint = " (a thousands separator? with decimal=',' a '.' is no decimal mark)"
            raise InputError(f"not a number: {text.iloc[i]!r}{hint}", source=name, field=col,
                             row=row, row_kind=kind)
    inf = np.isinf(values)
    if inf.any():
        kind, row = locate(int(np.argmax(inf)))
        raise InputError("infinite value", source=name, field=col, row=row, row_kind=kind)
    return values


def refuse_sentinel(values, header, name, locate):
    """Refuse an undeclared missing-value code in a column (:func:`align.missing.find_sentinel`),
    naming the column, the code, its count and its first row."""
    found = find_sentinel(values)
    if found is None:
        return
    code, count, first, low, high = found
    kind, row = locate(first)
    others = (f"far outside the other values ({low:g} to {high:g})" if np.isfinite(low)
              else "and nothing else")
    raise InputError(f"{count} cell(s) hold {code:g}, {others}: a missing-value code? declare "
                     f"it with missing_values=[{code:g}]", source=name, field=header, row=row,
                     row_kind=kind)


def _refuse_missing_roles(numeric, roles, locate, name):
    for role in ("depth", "age", "age_sd", "age_mce", "depth_top", "depth_bottom", "age_top",
                 "age_bottom"):
        col = roles.get(role)
        if col is not None:
            missing = np.isnan(numeric[col])
            if missing.any():
                kind, row = locate(int(np.argmax(missing)))
                raise InputError(f"missing {role.replace('_', ' ')} value", source=name,
                                 field=col, row=row, row_kind=kind)


def check_depth_direction(attrs, field, name):
    """Refuse a depth that CF attributes say counts upward (``positive = "up"``: heights)."""
    if str(attrs.get("positive", "down")).strip().lower() == "up":
        raise InputError("the depth counts upward (positive='up', a height); give depth below "
                         "the top of the core", source=name, field=field)


def depth_scale(unit, field, name):
    """Metres per unit of a depth unit as written (``cm``, ``metres``); refuse an unknown one."""
    scale = DEPTH_SCALE.get(str(unit).strip().lower(), _DEPTH_SPELLED.get(
        str(unit).strip().lower()))
    if scale is None:
        raise InputError(f"unknown depth unit {unit!r}; use one of {', '.join(DEPTH_SCALE)}",
                         source=name, field=field)
    return scale


def _depth_scale(roles, columns, mapping, name):
    """Metres per stored depth unit, from the option, the depth columns' header units and the
    depth column's name (``depth_cm``); two statements that differ are refused."""
    said = {}
    for role in ("depth", "depth_top", "depth_bottom"):
        col = roles.get(role)
        if col is not None:
            check_depth_direction(columns[col].attrs, columns[col].header, name)
            hint = _name_unit(columns[col].name) if role == "depth" else None
            for unit in (columns[col].unit, hint):
                if unit is not None:
                    said.setdefault(depth_scale(unit, columns[col].header, name),
                                    (unit, columns[col].header))
    given = mapping.get("depth_units")
    scale = None if given is None else depth_scale(given, "depth_units", name)
    if len(said) > 1:
        units, fields = zip(*said.values())
        raise InputError(f"the depth columns say {' and '.join(units)}; give them in one unit",
                         source=name, field=fields[1])
    if scale is not None and said and scale not in said:
        raise InputError(f"the file says depths are in {next(iter(said.values()))[0]}, "
                         f"depth_units= says {given}; convert instead of relabelling",
                         source=name, field="depth_units")
    return scale or next(iter(said), 1.0)


def _top_down(numeric, roles, n):
    """Put rows top (shallow/young) first; a table listed bottom-up is reversed, and said so."""
    key = roles.get("depth") or roles.get("age")
    values = numeric[key]
    step = np.diff(values)
    if n > 1 and np.all(step < 0):
        order = np.arange(n)[::-1]
        note = (f"rows reversed to run top-down (the table lists {key} from "
                f"{values[0]:g} down to {values[-1]:g})")
        return order, {c: v[::-1].copy() for c, v in numeric.items()}, note
    return None, numeric, None


# --------------------------------------------------------------------------------------------
# ages


@dataclass
class AgeReading:
    """How the age column's numbers become ages in years on a record reference.

    Attributes
    ----------
    reference : {"b2k", "BP"}
        The record's reference.
    kind : {"linear", "calendar", "cf", "relative"}
    scale : float
        Years per stored unit (also applied to ``age_sd``/``age_mce`` without a unit of their
        own: :meth:`uncertainty_scale`).
    source_reference : str
        What the stored numbers count from (``CE``, ``BCE``, ``astronomical``, CF units, ...).
    """

    reference: str | None
    kind: str = "linear"
    scale: float = 1.0
    source_reference: str | None = None
    calendar: str | None = None
    relative_to: float | None = None
    relative_sign: str | None = None
    stated_scale: bool = False
    flipped: bool = False
    source: str | None = None
    column: str | None = None
    notes: list = _field(default_factory=list)

    def uncertainty_scale(self, column, role, mapping):
        """Years per stored unit of an age sd or MCE column: its own header unit when it
        states one (``sd (yr)`` beside ``Age [ka BP]``), else the age's; a sigma level the
        role does not hold (``sd (2σ)``) is refused."""
        held = 1.0 if role == "age_sd" else 2.0
        unit = None
        for text in (column.unit, column.comment):
            level = _SIGMA.match(text or "")
            if level is not None and float(level[1]) != held:
                raise InputError(f"the header states {float(level[1]):g}-sigma values; "
                                 f"{_ROLE_HOLDS[role]}: convert them first", source=self.source,
                                 field=column.header)
            if level is None and text is column.unit:
                unit = text
        if unit is None:
            return self.scale
        try:
            scale = parse_age_units(unit, field=column.header).scale
        except InputError as exc:
            raise exc.located(source=self.source) from None
        said = {"option": _given_units(mapping), "header": AgeUnits(scale)}
        return _agree(said, "scale", self.source, column.header) or self.scale

    @classmethod
    def resolve(cls, roles, columns, mapping, name):
        """Combine the options, the header unit and the column name; refuse contradictions."""
        relative = mapping.get("relative_to"), mapping.get("relative_sign")
        col = roles.get("age")
        if col is None:
            if relative != (None, None):
                raise InputError("relative_to= needs an age column", source=name,
                                 field="relative_to")
            return cls(None)
        column = columns[col]
        if column.unit and is_cf_time(column.unit):
            return cls._cf(column, mapping, name)
        said = {"option": _given_units(mapping), "header": AgeUnits(), "name": AgeUnits()}
        try:
            if column.unit:
                said["header"] = parse_age_units(column.unit, field=column.header)
            said["name"] = age_units_from_name(column.name)
        except InputError as exc:
            raise exc.located(source=name) from None
        scale = _agree(said, "scale", name, column.header)
        reference = _agree(said, "reference", name, column.header)
        reading = cls(None, scale=scale or 1.0, stated_scale=scale is not None, source=name,
                      column=column.header)
        if relative != (None, None):
            return reading._relative(reference, *relative)
        if reference is None:
            raise InputError("the age reference is missing; say age_reference='b2k' or 'BP' "
                             "(or give the unit in the header, e.g. 'Age [ka BP]')",
                             source=name, field="age_reference")
        if reference in FORWARD_REFERENCES:
            reading.kind, reading.reference, reading.source_reference = (
                "calendar", "BP", reference)
            reading.notes.append(f"ages converted from calendar years {reference} to BP")
        else:
            reading.reference = record_reference(reference)
            if scale not in (None, 1.0):
                reading.notes.append(f"ages converted from ka {reading.reference} to years")
        return reading

    @classmethod
    def _cf(cls, column, mapping, name):
        if mapping.get("age_units") is not None:
            raise InputError(f"the time variable declares CF units {column.unit!r}; "
                             "age_units= does not apply", source=name, field="age_units")
        target = record_reference(mapping.get("age_reference") or "BP")
        calendar = column.attrs.get("calendar")
        return cls(target, kind="cf", source_reference=column.unit, calendar=calendar,
                   stated_scale=True, source=name, column=column.header,
                   notes=[f"ages decoded from CF time {column.header!r} (units "
                          f"{column.unit!r}, calendar {calendar or 'standard'}) to {target}"])

    def _relative(self, reference, at, sign):
        if at is None or sign not in ("after", "before"):
            raise InputError("relative time needs relative_to= (the event's age) and "
                             "relative_sign='after' or 'before' (which way t counts)",
                             source=self.source, field="relative_sign" if at is not None
                             else "relative_to")
        if reference is None:
            raise InputError("relative_to= needs age_reference= (the reference of the event's "
                             "age)", source=self.source, field="age_reference")
        try:
            self.relative_to = float(at)
        except (TypeError, ValueError):
            raise InputError(f"relative_to must be a number (got {at!r})", source=self.source,
                             field="relative_to") from None
        self.kind, self.reference, self.relative_sign = ("relative", record_reference(reference),
                                                          sign)
        self.notes.append(f"ages from time relative to {self.relative_to:g} "
                          f"{self.reference} (positive {sign} the event)")
        return self

    def orient(self, values):
        """Flip a time axis stored forward (all values <= 0, reaching beyond AD 2100 when read
        as ages) to ages, and say so."""
        if (self.kind == "linear" and values.size and np.all(values <= 0)
                and float(np.min(values)) * self.scale < FAR_FUTURE[self.reference]):
            self.flipped = True
            message = (f"{self.column!r} counts forward in time (values {values.min():g} to "
                       f"{values.max():g}, all <= 0): read as ages {self.reference} with the "
                       "sign flipped")
            warnings.warn(f"{self.source}: {message}", UserWarning, stacklevel=4)
            self.notes.append(message)

    def convert(self, values):
        """Stored numbers to ages in years on :attr:`reference`."""
        if self.kind == "cf":
            return from_bp(cf_time_to_bp(values, self.source_reference, self.calendar,
                                         variable=self.column, source=self.source),
                           self.reference)
        if self.kind == "relative":
            t = values * self.scale
            return self.relative_to - t if self.relative_sign == "after" else self.relative_to + t
        if self.kind == "calendar":
            try:
                return to_bp(values, self.source_reference)
            except InputError as exc:
                raise exc.located(source=self.source) from None
        return values * (-self.scale if self.flipped else self.scale)


def _given_units(mapping):
    """What ``age_units=`` and ``age_reference=`` say together."""
    units = mapping.get("age_units")
    scale_ref = parse_age_units(units) if units is not None else AgeUnits()
    ref = mapping.get("age_reference")
    if ref is None:
        return scale_ref
    canonical = canonical_reference(ref)
    ka = canonical.startswith("ka ")
    both = AgeUnits(1000.0 if ka else None, canonical.removeprefix("ka "))
    return _merge(scale_ref, both)


def _merge(a, b):
    if (a.scale is not None and b.scale is not None and a.scale != b.scale) or (
            a.reference is not None and b.reference is not None and a.reference != b.reference):
        raise InputError(f"age_units={a.describe()!r} and age_reference={b.describe()!r} "
                         "disagree", field="age_units")
    return AgeUnits(a.scale if a.scale is not None else b.scale,
                    a.reference if a.reference is not None else b.reference)


def _agree(said, part, name, header):
    stated = {who: getattr(units, part) for who, units in said.items()
              if getattr(units, part) is not None}
    if len(set(stated.values())) > 1:
        words = {"option": "the options say", "header": "the header unit says",
                 "name": "the column name says"}
        show = (lambda v: {1.0: "yr", 1000.0: "ka"}[v]) if part == "scale" else str
        detail = "; ".join(f"{words[w]} {show(v)}" for w, v in stated.items())
        raise InputError(f"the age {part} is stated twice and differently ({detail}); convert "
                         "instead of relabelling", source=name, field=header)
    return next(iter(stated.values()), None)


def plausibility(age, reading, name):
    """Warn about ages that look wrongly read; return the warnings for the history.

    Ages after AD 2100 suggest a forward time axis or a wrong sign; a median sample interval
    that is a whole number of 365-day (or 360/365.25/365.2425-day) years suggests day counts
    read as years; tiny ages in tiny steps with no stated unit suggest ka read as years.
    """
    notes = []
    young = age < FAR_FUTURE[reading.reference]
    if young.any():
        notes.append(f"{int(young.sum())} age(s) lie after AD 2100 (youngest {age.min():g} "
                     f"{reading.reference}): a forward time axis or a wrong sign?")
    step = np.abs(np.diff(age))
    step = step[step > 0]
    if step.size and reading.kind != "cf":
        median = float(np.median(step))
        days = next((d for d in _YEAR_DAYS if median >= d and
                     abs(median / d - round(median / d)) < 1e-9), None)
        if days is not None:
            notes.append(f"the median sample interval is {median:g} yr, a whole number of "
                         f"{days:g}-day years: are the ages counted in days?")
        elif not reading.stated_scale and np.abs(age).max() < 200 and median < 0.05:
            notes.append(f"ages span {age.min():g} to {age.max():g} yr in steps of "
                         f"{median:g}: are they in ka? say age_units='ka'")
    for note in notes:
        warnings.warn(f"{name}: {note}", UserWarning, stacklevel=4)
    return notes
