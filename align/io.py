"""Reading and writing records: NetCDF, CSV/TSV tables and pandas DataFrames.

This is the only module that touches record files. Reading never changes the input; writing
is atomic (a temporary file in the target folder, flushed to disk, then renamed), so a reader
never sees half a file. CF encoding (fill values, compression, ``Conventions``) happens here
and nowhere else.
"""

from __future__ import annotations

import io as _io
import os
import re
import tempfile
import threading
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from align.errors import InputError, NotATableError
from align.provenance import sha256_bytes, sha256_file
from align.record import (SAMPLE, TIMESCALE_VARIABLES, add_history, build_record,
                          proxy_variables, validate_record)

NETCDF_SUFFIXES = (".nc", ".nc4", ".cdf", ".netcdf")
_NETCDF_MAGIC = (b"CDF\x01", b"CDF\x02", b"CDF\x05", b"\x89HDF")
_DEPTH_SCALE = {"m": 1.0, "cm": 0.01, "mm": 0.001}
_AGE_SCALE = {"yr": 1.0, "a": 1.0, "years": 1.0, "ka": 1000.0}
#: The HDF5 library under netCDF4 is not thread-safe: every read and write takes this lock
#: (surveys run pairs on threads).
NETCDF_LOCK = threading.RLock()
_UNIT_IN_HEADER = re.compile(r"^\s*(?P<name>[^(\[]+?)\s*[(\[](?P<unit>[^)\]]+)[)\]]\s*$")

#: Column names found without being told (lower case).
_AUTO = {"depth": ("depth",), "age": ("age",), "age_sd": ("age_sd", "sd"),
         "age_mce": ("age_mce", "mce"), "depth_top": ("depth_top",),
         "depth_bottom": ("depth_bottom",), "age_top": ("age_top",),
         "age_bottom": ("age_bottom",)}


def open_record(source, *, age_reference=None, age_column=None, depth_column=None,
                age_sd_column=None, mce_column=None, depth_top_column=None,
                depth_bottom_column=None, age_top_column=None, age_bottom_column=None,
                age_units="yr", depth_units="m", variables=None, units=None, archive=None,
                site=None, core=None, timescale=None, timescale_kind=None):
    """Read a record from a NetCDF file, a CSV/TSV table or a :class:`pandas.DataFrame`.

    The keywords mirror the command-line mapping options (``--age-column`` is
    ``age_column``, and so on). A NetCDF file already in the record schema needs none of them.

    Parameters
    ----------
    source : str, os.PathLike or pandas.DataFrame
        The input.
    age_reference : {"b2k", "BP"}, optional
        Reference of the age column; required for tables with ages.
    age_column, depth_column : str, optional
        Columns of sample mid-points (found automatically when named ``age`` and ``depth``).
    age_sd_column, mce_column : str, optional
        Per-sample 1-sigma age uncertainty, or maximum counting error (``age_sd``/``sd`` and
        ``age_mce``/``mce`` are found automatically).
    depth_top_column, depth_bottom_column, age_top_column, age_bottom_column : str, optional
        Sample interval columns; when absent, bounds are derived half-way between neighbours
        and the record says so.
    age_units : {"yr", "ka"}
        Units of the age and uncertainty columns.
    depth_units : {"m", "cm", "mm"}
        Units of the depth columns.
    variables : list of str, optional
        Proxy columns to keep (default: every other column).
    units : dict of str to str, optional
        CF units of proxy columns (a ``name (unit)`` header is read too).
    archive, site, core, timescale, timescale_kind : str, optional
        Record metadata (global attributes).

    Returns
    -------
    xarray.Dataset
        A validated record (see ``records/README.md``), with ``source`` and ``source_checksum``
        attributes naming what was read.

    Raises
    ------
    InputError
        Naming the file, the column or variable and the row of the first problem.
    """
    mapping = dict(age_reference=age_reference, age_column=age_column,
                   depth_column=depth_column, age_sd_column=age_sd_column,
                   mce_column=mce_column, depth_top_column=depth_top_column,
                   depth_bottom_column=depth_bottom_column, age_top_column=age_top_column,
                   age_bottom_column=age_bottom_column, age_units=age_units,
                   depth_units=depth_units, variables=variables, units=units)
    meta = {k: v for k, v in dict(archive=archive, site=site, core=core, timescale=timescale,
                                  timescale_kind=timescale_kind).items() if v is not None}
    if isinstance(source, pd.DataFrame):
        checksum = sha256_bytes(pd.util.hash_pandas_object(source, index=True).values.tobytes())
        return _from_frame(source, mapping, meta, name="DataFrame", checksum=checksum,
                           locate=lambda i: ("row", source.index[i]))
    path = Path(source)
    if not path.exists():
        raise InputError("no such file", source=str(source), status=404)
    if path.is_dir():
        raise NotATableError("is a folder, not a record file", source=str(source))
    if _is_netcdf(path):
        return _read_netcdf(path, mapping, meta)
    return _read_table(path, mapping, meta)


def _is_netcdf(path):
    with open(path, "rb") as handle:
        head = handle.read(4)
    return head.startswith(_NETCDF_MAGIC) or (path.suffix.lower() in NETCDF_SUFFIXES)


# --------------------------------------------------------------------------------------------
# NetCDF


def _read_netcdf(path, mapping, meta):
    try:
        with NETCDF_LOCK, xr.open_dataset(path, engine="netcdf4", decode_times=False) as opened:
            ds = opened.load()
    except (OSError, ValueError, RuntimeError) as exc:
        reason = (exc.strerror if isinstance(exc, OSError) and exc.strerror
                  else exc.__class__.__name__)
        raise NotATableError(f"not a readable NetCDF file ({reason})", source=str(path)) from exc
    checksum = sha256_file(path)
    if SAMPLE in ds.dims and ("depth" in ds.coords or "age" in ds.coords):
        ds = _fill_netcdf_reference(ds, mapping, path)
        ds.attrs.update(meta, source=str(path), source_checksum=checksum)
        return validate_record(ds, source=str(path))
    columns = {name: var.values for name, var in ds.variables.items() if var.ndim == 1}
    lengths = {len(v) for v in columns.values()}
    if not columns or len(lengths) != 1:
        raise InputError("found no record: expected a 'sample' dimension with depth or age, "
                         "or one-dimensional columns of equal length", source=str(path))
    frame = pd.DataFrame(columns)
    units = {name: var.attrs["units"] for name, var in ds.variables.items()
             if var.ndim == 1 and "units" in var.attrs}
    mapping["units"] = {**units, **(mapping.get("units") or {})}
    return _from_frame(frame, mapping, {**ds.attrs, **meta}, name=str(path), checksum=checksum,
                       locate=lambda i: ("sample", i))


def _fill_netcdf_reference(ds, mapping, path):
    """Apply ``age_reference`` to a schema NetCDF whose age lacks one; refuse a contradiction."""
    given = mapping.get("age_reference")
    if given is None or "age" not in ds.coords:
        return ds
    from align.record import record_reference

    ref = record_reference(given)
    stored = ds["age"].attrs.get("age_reference")
    if stored is not None and stored != ref:
        raise InputError(f"the file says its ages are {stored}, the option says {ref}; convert "
                         "instead of relabelling", source=str(path), field="age_reference")
    ds["age"].attrs["age_reference"] = ref
    return ds


def save_record(record, path, *, history=None):
    """Write a record as CF-1.8 NetCDF, atomically.

    Parameters
    ----------
    record : xarray.Dataset
        A record (validated again before anything is written).
    path : str or os.PathLike
        The target file; an existing file is replaced only once the new one is complete.
    history : str, optional
        A line for the ``history`` attribute (default: ``"written by save_record"``).

    Returns
    -------
    pathlib.Path
        The written path.
    """
    ds = validate_record(record.copy())
    ds.attrs.setdefault("title", f"corealign record: {ds.attrs.get('core') or Path(path).stem}")
    return write_cf(ds, path, history=history or "written by save_record")


def save_grid(grid, path, *, history=None):
    """Write a common grid (:func:`align.resample.resample` output) as CF-1.8 NetCDF."""
    return write_cf(grid.copy(), path, history=history or "written by save_grid")


def write_cf(ds, path, *, history):
    """CF encoding at the file edge, then an atomic write: coordinates, bounds and timescale
    variables without fill values, data variables compressed with NaN as fill value."""
    add_history(ds, history)
    ds.attrs["Conventions"] = "CF-1.8"
    encoding = {}
    for name, var in ds.variables.items():
        if name in ds.coords or name in TIMESCALE_VARIABLES or var.dtype.kind not in "f":
            encoding[name] = {"_FillValue": None}
        else:
            encoding[name] = {"_FillValue": np.nan, "zlib": True, "complevel": 4}
        if var.dtype.kind == "f":
            encoding[name]["dtype"] = "float64"
        var.encoding = {}
    def write(tmp):
        with NETCDF_LOCK:
            ds.to_netcdf(tmp, engine="netcdf4", encoding=encoding)

    return atomic_write(path, write)


def atomic_write(path, write):
    """Call ``write(tmp_path)`` on a temporary file beside ``path``, then rename it into place.

    Nothing is left behind when ``write`` fails; an existing file at ``path`` is untouched.
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise InputError("the output folder does not exist", source=str(folder), status=404)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=folder)
    os.close(fd)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    try:
        write(tmp)
        with open(tmp, "rb+") as handle:
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def read_json(path, what="file"):
    """Parse a JSON file; a missing file is 404, bad JSON 400 (as :class:`InputError`)."""
    import json

    path = Path(path)
    try:
        return json.loads(path.read_text())
    except FileNotFoundError:
        raise InputError(f"no such {what}", source=str(path), status=404) from None
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        reason = f"{exc.msg}, line {exc.lineno}" if hasattr(exc, "lineno") else str(exc)
        raise InputError(f"not valid JSON ({reason})", source=str(path), status=400) from None


def record_to_frame(record):
    """The record as a flat table: depth/age mid-points and bounds, uncertainty, proxies."""
    columns = {}
    for name in ("depth", "age"):
        if name in record.coords:
            columns[name] = record[name].values
            bounds = record[f"{name}_bounds"].values
            columns[f"{name}_top"], columns[f"{name}_bottom"] = bounds[:, 0], bounds[:, 1]
    for name in ("age_sd", "age_mce", *proxy_variables(record)):
        if name in record:
            columns[name] = record[name].values
    return pd.DataFrame(columns)


def record_to_csv(record):
    """The record as CSV text with a ``#`` comment header naming reference, units and source."""
    lines = [f"# corealign record: {record.attrs.get('core') or record.attrs.get('source', '')}"]
    if "age" in record.coords:
        lines.append(f"# age_reference: {record['age'].attrs['age_reference']}; ages in yr")
    if "depth" in record.coords:
        lines.append("# depth in m")
    for name in proxy_variables(record):
        lines.append(f"# {name}: {record[name].attrs.get('long_name', name)} "
                     f"[{record[name].attrs.get('units', '')}]")
    buffer = _io.StringIO()
    record_to_frame(record).to_csv(buffer, index=False, float_format="%.10g")
    return "\n".join(lines) + "\n" + buffer.getvalue()


# --------------------------------------------------------------------------------------------
# tables


def _read_table(path, mapping, meta):
    raw = path.read_bytes()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise NotATableError("not a text table (and not NetCDF)", source=str(path)) from exc
    lines = text.splitlines()
    data_lines = [i + 1 for i, line in enumerate(lines)
                  if line.strip() and not line.lstrip().startswith("#")]
    if not data_lines:
        raise InputError("the table is empty (no header and no data rows)", source=str(path))
    header = lines[data_lines[0] - 1]
    sep = "\t" if ("\t" in header or path.suffix.lower() in (".tsv", ".tab")) else (
        ";" if ";" in header and "," not in header else ",")
    try:
        frame = pd.read_csv(_io.StringIO(text), sep=sep, comment="#", dtype=str,
                            keep_default_na=False, skip_blank_lines=True)
    except (pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise NotATableError(f"not a readable table: {exc}", source=str(path)) from exc
    rows = data_lines[1:]
    if len(rows) != len(frame):
        raise NotATableError(f"could not match {len(frame)} parsed rows to {len(rows)} lines "
                             "(quoted line breaks?)", source=str(path))
    frame.columns = [str(c).strip() for c in frame.columns]
    return _from_frame(frame, mapping, meta, name=str(path), checksum=sha256_bytes(raw),
                       locate=lambda i: ("line", rows[i]))


def _from_frame(frame, mapping, meta, *, name, checksum, locate):
    """Build a record from a table of columns (strings or numbers)."""
    if frame.shape[0] == 0:
        raise InputError("the table is empty (no data rows)", source=name)
    frame, header_units = _split_header_units(frame, name)
    roles = _assign_columns(frame.columns, mapping, name)
    proxy_columns = _proxy_columns(frame, roles, mapping, name)
    numeric = {col: _numeric_column(frame[col], col, name, locate)
               for col in [*roles.values(), *proxy_columns]}
    order, numeric, reversed_note = _top_down(numeric, roles, frame.shape[0])
    locate_sorted = (lambda i: locate(order[i])) if order is not None else locate
    for role in ("depth", "age", "age_sd", "age_mce", "depth_top", "depth_bottom", "age_top",
                 "age_bottom"):
        col = roles.get(role)
        if col is not None:
            missing = np.isnan(numeric[col])
            if missing.any():
                kind, row = locate_sorted(int(np.argmax(missing)))
                raise InputError(f"missing {role.replace('_', ' ')} value", source=name,
                                 field=col, row=row, row_kind=kind)
    depth_scale = _scale(_DEPTH_SCALE, mapping.get("depth_units") or "m", "depth_units", name)
    age_scale = _scale(_AGE_SCALE, mapping.get("age_units") or "yr", "age_units", name)

    def get(role, scale=1.0):
        col = roles.get(role)
        return None if col is None else numeric[col] * scale

    def bounds(prefix, scale):
        top, bottom = get(f"{prefix}_top", scale), get(f"{prefix}_bottom", scale)
        if (top is None) != (bottom is None):
            raise InputError(f"give both {prefix} top and bottom columns, or neither",
                             source=name, field=f"{prefix}_top")
        return None if top is None else np.column_stack([top, bottom])

    units = {**header_units, **(mapping.get("units") or {})}
    proxies = {}
    for col in proxy_columns:
        var = _safe_name(col)
        attrs = {"long_name": col}
        if col in units:
            attrs["units"] = units[col]
        proxies[var] = (numeric[col], attrs)
    attrs = {k: v for k, v in meta.items() if isinstance(v, (str, int, float))}
    attrs.update(source=name, source_checksum=checksum)
    age = get("age", age_scale)
    record = build_record(
        depth=get("depth", depth_scale), age=age,
        age_reference=mapping.get("age_reference") if age is not None else None,
        depth_bounds=bounds("depth", depth_scale), age_bounds=bounds("age", age_scale),
        age_sd=get("age_sd", age_scale), age_mce=get("age_mce", age_scale), proxies=proxies,
        attrs=attrs, locate=locate_sorted, source=name)
    if reversed_note:
        warnings.warn(f"{name}: {reversed_note}", UserWarning, stacklevel=3)
        add_history(record, reversed_note)
    if "bounds_derived" in record.attrs:
        add_history(record, f"{record.attrs['bounds_derived']} bounds derived half-way between "
                            "neighbouring mid-points")
    return record


def _split_header_units(frame, name):
    """Columns named ``Ca (ng/g)`` become ``Ca`` with units ``ng/g``."""
    units, renamed = {}, {}
    for col in frame.columns:
        match = _UNIT_IN_HEADER.match(col)
        if match:
            renamed[col] = match["name"].strip()
            units[renamed[col]] = match["unit"].strip()
    if len(set(renamed.values()) | (set(frame.columns) - set(renamed))) < len(frame.columns):
        raise InputError("two columns have the same name once units are split off",
                         source=name)
    return frame.rename(columns=renamed), units


def _assign_columns(columns, mapping, name):
    """Which column plays which role (depth, age, uncertainty, bounds)."""
    lower = {c.lower(): c for c in columns}
    dupes = [c for c in columns if list(columns).count(c) > 1]
    if dupes:
        raise InputError("duplicated column name", source=name, field=dupes[0])
    roles = {}
    for role, candidates in _AUTO.items():
        option = {"age_sd": "age_sd_column", "age_mce": "mce_column"}.get(role, f"{role}_column")
        given = mapping.get(option)
        if given is not None:
            if given not in columns:
                raise InputError(f"no column {given!r} (columns: {', '.join(columns)})",
                                 source=name, field=option.replace("_", "-"))
            roles[role] = given
        else:
            found = next((lower[c] for c in candidates if c in lower), None)
            if found is not None:
                roles[role] = found
    if "depth" not in roles and "age" not in roles:
        raise InputError("no depth or age column; name one with --depth-column or "
                         f"--age-column (columns: {', '.join(columns)})", source=name,
                         field="age-column")
    if "age" in roles and mapping.get("age_reference") is None:
        raise InputError("the age reference is missing; say --age-reference b2k or BP",
                         source=name, field="age_reference")
    if "age" not in roles:
        for role in ("age_sd", "age_mce", "age_top", "age_bottom"):
            if role in roles:
                raise InputError("an age uncertainty or age bounds without an age column",
                                 source=name, field=roles[role])
    return roles


def _proxy_columns(frame, roles, mapping, name):
    taken = set(roles.values())
    wanted = mapping.get("variables")
    if wanted:
        missing = [v for v in wanted if v not in frame.columns]
        if missing:
            raise InputError(f"no column {missing[0]!r}", source=name, field=missing[0])
        return [v for v in wanted if v not in taken]
    return [c for c in frame.columns if c not in taken]


def _numeric_column(series, col, name, locate):
    """Parse one column; empty cells are NaN, anything else non-numeric is an error."""
    if series.dtype.kind in "fiu":
        values = series.to_numpy(dtype=float)
    else:
        text = series.astype(str).str.strip()
        values = pd.to_numeric(text.where(text != ""), errors="coerce").to_numpy(dtype=float)
        bad = np.isnan(values) & (text != "").to_numpy() & ~text.str.lower().isin(
            ["nan", "na"]).to_numpy()
        if bad.any():
            i = int(np.argmax(bad))
            kind, row = locate(i)
            raise InputError(f"not a number: {text.iloc[i]!r}", source=name, field=col, row=row,
                             row_kind=kind)
    inf = np.isinf(values)
    if inf.any():
        kind, row = locate(int(np.argmax(inf)))
        raise InputError("infinite value", source=name, field=col, row=row, row_kind=kind)
    return values


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


def _scale(table, unit, option, name):
    try:
        return table[str(unit).lower()]
    except KeyError:
        raise InputError(f"unknown unit {unit!r}; use one of {', '.join(table)}", source=name,
                         field=option) from None


def _safe_name(column):
    """A NetCDF/CF-safe variable name: letters, digits and underscores, starting with a letter."""
    name = re.sub(r"\W+", "_", column).strip("_") or "value"
    return name if name[0].isalpha() else f"v_{name}"
