"""Reading and writing records: NetCDF, text tables, ``.xlsx`` sheets and pandas DataFrames.

This is the only module that touches record files. Reading never changes the input; writing
is atomic (a temporary file in the target folder, flushed to disk, then renamed), so a reader
never sees half a file. CF encoding (fill values, compression, ``Conventions``) happens here
and nowhere else.
"""

from __future__ import annotations

import io as _io
import os
import tempfile
import threading
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from align.ages import parse_age_units
from align.columns import check_depth_direction, depth_scale, frame_to_record, safe_name
from align.errors import InputError, NotATableError
from align.missing import find_sentinel, mask_missing, split_codes
from align.provenance import sha256_bytes, sha256_file
from align.record import SAMPLE, TIMESCALE_VARIABLES, add_history, proxy_variables, validate_record
from align.tables import read_table

NETCDF_SUFFIXES = (".nc", ".nc4", ".cdf", ".netcdf")
_NETCDF_MAGIC = (b"CDF\x01", b"CDF\x02", b"CDF\x05", b"\x89HDF")
#: The HDF5 library under netCDF4 is not thread-safe: every read and write takes this lock
#: (surveys run pairs on threads).
NETCDF_LOCK = threading.RLock()
#: Global attributes a file's own metadata may not overwrite (they are the record's).
_RESERVED_ATTRS = ("archive", "site", "core", "timescale", "timescale_kind", "source",
                   "source_checksum", "history", "bounds_derived", "Conventions", "title")


def open_record(source, *, age_reference=None, age_column=None, depth_column=None,
                age_sd_column=None, mce_column=None, depth_top_column=None,
                depth_bottom_column=None, age_top_column=None, age_bottom_column=None,
                age_units=None, depth_units=None, variables=None, units=None,
                missing_values=None, relative_to=None, relative_sign=None, sheet=None,
                names=None, decimal=None, archive=None, site=None, core=None, timescale=None,
                timescale_kind=None):
    """Read a record from NetCDF, a delimited text table, an ``.xlsx`` sheet or a DataFrame.

    The keywords mirror the command-line mapping options (``--age-column`` is
    ``age_column``, and so on). A NetCDF file in the record schema, and every grid corealign
    writes, needs none of them.

    Parameters
    ----------
    source : str, os.PathLike or pandas.DataFrame
        The input. Text layouts (commented headers, ``/* */`` metadata blocks, ``Name [unit]``
        headers) are described in :mod:`align.tables`.
    age_reference : str, optional
        What the age column counts from: ``b2k``, ``BP``, ``ka b2k``, ``ka BP``, or calendar
        years ``CE``, ``BCE``, ``astronomical`` (converted to BP). Needed unless the header
        unit or the column name says it (``Age [ka BP]``, ``Age_BP``, ``Year (CE)``); a value
        that contradicts the file is refused. For a CF time axis it names the record's
        reference (default BP).
    age_column, depth_column : str, optional
        Columns of sample mid-points, by header as written, name without unit, or cleaned
        name (found automatically when named ``age`` and ``depth``, or, in NetCDF, a CF time
        axis).
    age_sd_column, mce_column : str, optional
        Per-sample 1-sigma age uncertainty, or maximum counting error (``age_sd``/``sd`` and
        ``age_mce``/``mce`` are found automatically).
    depth_top_column, depth_bottom_column, age_top_column, age_bottom_column : str, optional
        Sample interval columns; when absent, bounds are derived half-way between neighbours
        and the record says so.
    age_units : str, optional
        Units of the age and uncertainty columns (``yr``, ``ka``, or with a reference such as
        ``ka BP``; default: from the header, else yr); an uncertainty column whose header
        states its own unit (``sd (yr)``) keeps it.
    depth_units : {"m", "cm", "mm"}, optional
        Units of the depth columns (default: from the header or the name, ``depth_cm``, else
        m).
    variables : list of str, optional
        Proxy columns to keep (default: every other column).
    units : dict of str to str, optional
        CF units of proxy columns (a ``name [unit]`` or ``name (unit)`` header is read too).
    missing_values : list of float or str, optional
        Missing-value codes (added to those the file declares: CF ``_FillValue``,
        ``missing_value`` and ``valid_range``, a ``Missing_Values`` header line; the netCDF
        default fill is missing too). Undeclared codes such as -999 far outside a column's
        values are refused (:mod:`align.missing`).
    relative_to : float, optional
        The age (``age_reference``) of the event the time column counts from.
    relative_sign : {"after", "before"}, optional
        ``after``: positive time is after the event (``age = relative_to - t``); ``before``:
        positive time is before it (``age = relative_to + t``).
    sheet : str or int, optional
        Sheet of an ``.xlsx`` workbook (default the first).
    names : list of str, optional
        Column names of a table without a header line.
    decimal : {".", ","}, optional
        Decimal mark of a text table.
    archive, site, core, timescale, timescale_kind : str, optional
        Record metadata (global attributes).

    Returns
    -------
    xarray.Dataset
        A validated record (see ``records/README.md``), with ``source`` and ``source_checksum``
        attributes naming what was read; the file's own metadata are kept as attributes and
        every conversion is a ``history`` line.

    Raises
    ------
    InputError
        Naming the file, the column or variable and the row of the first problem.
    """
    _check_keywords(dict(
        age_reference=age_reference, age_column=age_column, depth_column=depth_column,
        age_sd_column=age_sd_column, mce_column=mce_column, depth_top_column=depth_top_column,
        depth_bottom_column=depth_bottom_column, age_top_column=age_top_column,
        age_bottom_column=age_bottom_column, age_units=age_units, depth_units=depth_units,
        relative_sign=relative_sign, decimal=decimal, archive=archive, site=site, core=core,
        timescale=timescale, timescale_kind=timescale_kind), variables=variables,
        names=names, units=units, missing_values=missing_values, relative_to=relative_to,
        sheet=sheet, source=source)
    mapping = dict(age_reference=age_reference, age_column=age_column,
                   depth_column=depth_column, age_sd_column=age_sd_column,
                   mce_column=mce_column, depth_top_column=depth_top_column,
                   depth_bottom_column=depth_bottom_column, age_top_column=age_top_column,
                   age_bottom_column=age_bottom_column, age_units=age_units,
                   depth_units=depth_units, variables=variables, units=units,
                   missing_values=_as_list(missing_values), relative_to=relative_to,
                   relative_sign=relative_sign, decimal=decimal)
    layout = dict(sheet=sheet, names=_as_list(names), decimal=decimal)
    meta = {k: v for k, v in dict(archive=archive, site=site, core=core, timescale=timescale,
                                  timescale_kind=timescale_kind).items() if v is not None}
    if isinstance(source, pd.DataFrame):
        checksum = sha256_bytes(pd.util.hash_pandas_object(source, index=True).values.tobytes())
        return frame_to_record(source, mapping, meta, name="DataFrame", checksum=checksum,
                               locate=lambda i: ("row", source.index[i]))
    path = Path(source)
    if not path.exists():
        raise InputError("no such file", source=str(source), status=404)
    if path.is_dir():
        raise NotATableError("is a folder, not a record file", source=str(source))
    if _is_netcdf(path):
        given = [k for k, v in layout.items() if v is not None]
        if given:
            raise InputError(f"{given[0]}= applies to tables, not NetCDF", source=str(path),
                             field=given[0])
        return _read_netcdf(path, mapping, meta)
    table = read_table(path, **layout)
    return frame_to_record(table.frame, mapping, {**file_attributes(table.metadata), **meta},
                           name=str(path), checksum=table.checksum, locate=table.locate,
                           declared_missing=table.missing, descriptions=table.descriptions)


def _check_keywords(texts, *, variables, names, units, missing_values, relative_to, sheet,
                    source):
    """The reading keywords' types, checked before the file is opened."""
    name = source if isinstance(source, (str, os.PathLike)) else None

    def refuse(field, what):
        raise InputError(f"{field} must be {what}", source=name, field=field)

    for field, value in texts.items():
        if value is not None and not isinstance(value, str):
            refuse(field, f"text (got {type(value).__name__})")
    for field, value in (("variables", variables), ("names", names)):
        if value is not None and not (isinstance(value, str) or (
                isinstance(value, (list, tuple)) and all(isinstance(v, str) for v in value))):
            refuse(field, "a list of names (text)")
    if units is not None and not (isinstance(units, dict) and all(
            isinstance(k, str) and isinstance(v, str) for k, v in units.items())):
        refuse("units", "a mapping of variable names to units (text to text)")
    codes = missing_values if isinstance(missing_values, (list, tuple)) else [missing_values]
    if missing_values is not None and not all(
            isinstance(c, (str, int, float)) and not isinstance(c, bool) for c in codes):
        refuse("missing_values", "a number, a text code, or a list of them")
    if relative_to is not None and not _finite_number(relative_to):
        refuse("relative_to", "a finite age")
    if sheet is not None and (isinstance(sheet, bool) or not isinstance(sheet, (str, int))):
        refuse("sheet", "a sheet name or a 0-based position")


def _finite_number(value):
    if isinstance(value, bool) or not isinstance(value, (str, int, float)):
        return False
    try:
        return bool(np.isfinite(float(value)))
    except ValueError:
        return False


def _as_list(value):
    if value is None or isinstance(value, (list, tuple)):
        return value
    return [value]


def file_attributes(metadata):
    """A file's ``Key: value`` metadata as NetCDF-safe global attribute names and values.

    Keys that would overwrite the record's own attributes get a ``file_`` prefix.
    """
    out = {}
    for key, value in metadata.items():
        name = safe_name(str(key)).lower()
        out[f"file_{name}" if name in _RESERVED_ATTRS else name] = str(value)
    return out


def _is_netcdf(path):
    with open(path, "rb") as handle:
        head = handle.read(4)
    return head.startswith(_NETCDF_MAGIC) or (path.suffix.lower() in NETCDF_SUFFIXES)


# --------------------------------------------------------------------------------------------
# NetCDF


def _read_netcdf(path, mapping, meta):
    try:
        with NETCDF_LOCK, xr.open_dataset(path, engine="netcdf4", decode_times=False) as opened:
            _check_declared(opened, str(path))
            _load_values(opened, str(path))
            ds = opened.load()
    except (OSError, ValueError, RuntimeError) as exc:
        if isinstance(exc, InputError):
            raise
        reason = (exc.strerror if isinstance(exc, OSError) and exc.strerror
                  else exc.__class__.__name__)
        raise NotATableError(f"not a readable NetCDF file ({reason})", source=str(path)) from exc
    checksum = sha256_file(path)
    ds = _grid_as_samples(ds)
    if SAMPLE in ds.dims and _in_schema(ds):
        ds = _fill_netcdf_reference(ds, mapping, path)
        _schema_units(ds, str(path))
        _clean_proxies(ds, mapping, str(path))
        ds.attrs.update(meta, source=str(path), source_checksum=checksum)
        return validate_record(ds, source=str(path))
    columns = {name: var.values for name, var in ds.variables.items() if var.ndim == 1}
    lengths = {len(v) for v in columns.values()}
    if not columns or len(lengths) != 1:
        raise InputError("found no record: expected a 'sample' dimension with depth or age, "
                         "or one-dimensional columns of equal length (variables: "
                         f"{', '.join(map(str, ds.variables))})", source=str(path))
    attrs_of = {name: {**var.attrs, **var.encoding} for name, var in ds.variables.items()
                if var.ndim == 1}
    return frame_to_record(pd.DataFrame(columns), mapping, {**ds.attrs, **meta},
                           name=str(path), checksum=checksum, locate=lambda i: ("sample", i),
                           attrs_of=attrs_of)


def _check_declared(ds, name):
    """Sizes the header declares, against :mod:`align.limits`, before any value is read: each
    variable's uncompressed bytes, the count of variables and the length of their names."""
    from align import limits

    limits.check("columns", len(ds.variables), field="variables", source=name)
    for var_name, var in ds.variables.items():
        limits.check("name_length", len(str(var_name)), field="variables", source=name,
                     detail=f" in a variable name ({str(var_name)[:40]!r}...)")
        size = float(np.prod(var.shape, dtype=float)) * var.dtype.itemsize
        limits.check("variable_bytes", size, field=str(var_name), source=name,
                     detail=f" (shape {'x'.join(map(str, var.shape))}, {var.dtype})")


def _load_values(ds, name):
    """Read each variable's values (the header has been read): a variable whose values cannot
    be read is named, and told apart from a file that is not NetCDF at all."""
    for var_name, var in ds.variables.items():
        try:
            var.load()
        except (OSError, RuntimeError) as exc:
            raise InputError(f"the values of this variable cannot be read ({exc}): damaged "
                             "data, or more memory than this process may hold to decompress "
                             "them", source=name, field=str(var_name)) from exc


def _grid_as_samples(ds):
    """A grid written by :func:`save_grid` (one ``age`` or ``depth`` dimension with bounds)
    seen as a record: its dimension becomes ``sample``."""
    if SAMPLE in ds.dims:
        return ds
    along = next((d for d in ("age", "depth") if d in ds.dims and d in ds.coords
                  and f"{d}_bounds" in ds), None)
    if along is None:
        return ds
    return ds.drop_indexes(along).rename_dims({along: SAMPLE})


def _in_schema(ds):
    """A record-schema file: depth in m and/or an age in yr with its reference (or no unit)."""
    if "depth" not in ds.coords and "age" not in ds.coords:
        return False
    if "age" not in ds.coords or "age_reference" in ds["age"].attrs:
        return True
    return str(ds["age"].attrs.get("units", "yr")).strip().lower() in ("yr", "years", "a")


_AGE_SCHEMA = ("age", "age_bounds", "age_sd", "age_mce", "age_ensemble")


def _schema_units(ds, name):
    """Depths in cm or mm and ages in ka, as a schema file's ``units`` say, converted to m and
    yr in place (with a history line); an unknown unit is refused."""
    if "depth" in ds.coords:
        check_depth_direction(ds["depth"].attrs, "depth", name)
        unit = str(ds["depth"].attrs.get("units") or "m").strip() or "m"
        _rescale(ds, ("depth", "depth_bounds"), depth_scale(unit, "depth", name), "m",
                 f"depths converted from {unit} to m")
    if "age" in ds.coords:
        unit = str(ds["age"].attrs.get("units") or "yr").strip() or "yr"
        stated = _age_units(unit, "age", name)
        reference = ds["age"].attrs.get("age_reference")
        if stated.reference is not None and reference not in (None, stated.reference):
            raise InputError(f"the age units say {stated.reference}, age_reference says "
                             f"{reference}", source=name, field="age")
        for var in _AGE_SCHEMA:
            own = str(ds[var].attrs.get("units") or "").strip() if var in ds else ""
            scale = _age_units(own, var, name).scale if own else stated.scale
            _rescale(ds, (var,), scale or 1.0, "yr", f"{var} converted from ka to yr")


def _age_units(text, var, name):
    try:
        return parse_age_units(text, field=var)
    except InputError as exc:
        raise exc.located(source=name) from None


def _rescale(ds, names, scale, unit, note):
    if scale == 1.0:
        return
    for var in names:
        if var in ds.variables:
            ds[var] = ds[var].copy(data=ds[var].values * scale)
            if "units" in ds[var].attrs:
                ds[var].attrs["units"] = unit
    add_history(ds, note)


def _clean_proxies(ds, mapping, name):
    """Declared missing-value codes, values outside a CF valid range and the netCDF default
    fill to NaN, in place; undeclared sentinels refused there and in the depth, age and age
    uncertainty (an sd of 9999 among tens of years is a code, not a date)."""
    numbers, _ = split_codes(mapping.get("missing_values") or [])
    own = [v for v in ("depth", "age", "age_sd", "age_mce") if v in ds.variables]
    for var in (*proxy_variables(ds), *own):
        variable = ds.variables[var]  # not ds[var], which scans every variable
        values = variable.values.astype(float)
        if var not in own:
            values, notes = mask_missing(values, numbers,
                                         {**variable.attrs, **variable.encoding})
            if notes:
                variable.data = values
            for n, what in notes:
                add_history(ds, f"{n} {what} in {var!r} read as missing")
        find = find_sentinel(values)
        if find is not None:
            raise InputError(f"{find[1]} value(s) hold {find[0]:g}, far outside the other "
                             f"values: a missing-value code? declare it with "
                             f"missing_values=[{find[0]:g}]", source=name, field=var,
                             row=find[2], row_kind="sample")


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
    In the main thread, SIGINT and SIGTERM are held while ``write`` runs (a signal inside the
    HDF5 library can leave its lock taken, and the process hung); a signal that came meanwhile
    discards the new file and is delivered as soon as the write returns.
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise InputError("the output folder does not exist", source=str(folder), status=404)
    if path.is_dir():
        raise InputError("is a folder; name a file to write", source=str(path))
    with HeldSignals() as held:
        try:
            fd, tmp = tempfile.mkstemp(prefix=f".{path.name[:200]}.", suffix=".part",
                                       dir=folder)
        except OSError as exc:
            raise InputError(f"cannot write here ({exc.strerror})", source=str(path)) from None
        os.close(fd)
        try:
            umask = os.umask(0)
            os.umask(umask)
            os.chmod(tmp, 0o666 & ~umask)
            write(tmp)
            with open(tmp, "rb+") as handle:
                os.fsync(handle.fileno())
            if held.signal is None:
                os.replace(tmp, path)
        finally:
            Path(tmp).unlink(missing_ok=True)
    held.deliver()
    return path


class HeldSignals:
    """SIGINT and SIGTERM held (main thread only) and delivered after the block."""

    SIGNALS = ("SIGINT", "SIGTERM")

    def __init__(self):
        self.signal = None
        self.saved = {}

    def __enter__(self):
        import signal

        if threading.current_thread() is threading.main_thread():
            for name in self.SIGNALS:
                number = getattr(signal, name)
                previous = signal.signal(number, self._hold)
                if previous is not None:
                    self.saved[number] = previous
        return self

    def _hold(self, signum, frame):
        self.signal = self.signal or signum

    def __exit__(self, *exc):
        import signal

        for number, handler in self.saved.items():
            signal.signal(number, handler)
        return False

    def deliver(self):
        """Send the held signal again, now that its handler is back."""
        if self.signal is not None:
            import signal

            signal.raise_signal(self.signal)


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


def record_frame(record):
    """The record as a :class:`pandas.DataFrame`, one row per sample (``Dataset.to_dataframe``
    would repeat each sample for both of its bounds): depth and age mid-points with their
    bounds as ``*_top``/``*_bottom`` columns, the age uncertainty, and the proxies."""
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
    record_frame(record).to_csv(buffer, index=False, float_format="%.10g")
    return "\n".join(lines) + "\n" + buffer.getvalue()
