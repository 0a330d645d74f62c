"""Table dialects: delimited text and Excel workbooks, with the metadata around them.

Layouts read (each has a fixture written by ``tests/fixtures/make_fixtures.py``):

* comma-, semicolon- or tab-separated text, ``#`` comment lines anywhere;
* a commented header: ``# Key: value`` lines become metadata; a ``Missing_Values`` line
  (any spelling of ``missing value(s)``) declares missing-value codes; ``## column<TAB>text``
  lines describe columns (the layout of the world data service for paleoclimatology text
  template);
* a ``/* ... */`` metadata block before the header (``Key:<TAB>value`` lines; tab-separated
  archive exports), with headers such as ``Name [unit] (comment)``;
* headerless tables (``names=``), decimal commas (``decimal=","``);
* ``.xlsx`` workbooks (``sheet=``, default the first), with the same ``#`` rows on top.

Cells come back as text; :mod:`align.io` parses numbers, so that every problem is reported
with its line (text) or row (workbook).
"""

from __future__ import annotations

import io as _io
import re
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from align.errors import InputError, NotATableError
from align.missing import parse_declared
from align.provenance import sha256_bytes

EXCEL_SUFFIXES = (".xlsx", ".xlsm")
_ZIP_MAGIC = b"PK\x03\x04"
_META_LINE = re.compile(r"^\s*(?P<key>[A-Za-z][\w .()/-]*?)\s*[:=]\s*(?P<value>.*?)\s*$")
_MISSING_KEY = re.compile(r"^missing[\s_-]*values?$", re.IGNORECASE)


@dataclass
class Table:
    """A table read from a file, before any column is interpreted.

    Attributes
    ----------
    frame : pandas.DataFrame
        Cells as text (or numbers, from a workbook), columns as headed in the file.
    locate : callable
        Maps a data row index to ``(row_kind, row)`` for messages (file line or sheet row).
    metadata : dict of str to str
        ``Key: value`` pairs from a commented header or a ``/* */`` block.
    missing : list of str
        Missing-value codes the file declares.
    descriptions : dict of str to str
        Column descriptions (``## column<TAB>text`` lines).
    checksum : str
        SHA-256 of the file's bytes.
    """

    frame: pd.DataFrame
    locate: object
    metadata: dict = field(default_factory=dict)
    missing: list = field(default_factory=list)
    descriptions: dict = field(default_factory=dict)
    checksum: str = ""


def is_workbook(path):
    with open(path, "rb") as handle:
        head = handle.read(4)
    return path.suffix.lower() in EXCEL_SUFFIXES or head == _ZIP_MAGIC


def read_table(path, *, sheet=None, names=None, decimal=None):
    """Read a text table or a workbook sheet (see the module notes for the layouts).

    Parameters
    ----------
    path : pathlib.Path
    sheet : str or int, optional
        Workbook sheet name or 0-based position (default the first); refused for text.
    names : list of str, optional
        Column names of a table without a header line.
    decimal : {".", ","}, optional
        Decimal mark of the numbers (default ``.``).

    Returns
    -------
    Table
    """
    path = Path(path)
    if decimal not in (None, ".", ","):
        raise InputError(f"decimal must be '.' or ',' (got {decimal!r})", source=str(path),
                         field="decimal")
    raw = path.read_bytes()
    if is_workbook(path):
        table = _read_workbook(path, sheet, names)
    else:
        if sheet is not None:
            raise InputError("sheet= applies to workbooks (.xlsx) only", source=str(path),
                             field="sheet")
        table = _read_text(path, raw, names, decimal)
    table.checksum = sha256_bytes(raw)
    return table


def _read_text(path, raw, names, decimal):
    lines = decode_text(raw, str(path)).splitlines()
    block_end = _metadata_block_end(lines, path)
    body = [(i + 1, line) for i, line in enumerate(lines)
            if i >= block_end and line.strip() and not line.lstrip().startswith("#")]
    if not body:
        raise InputError("the table is empty (no header and no data rows)", source=str(path))
    comments = [line for i, line in enumerate(lines)
                if i >= block_end and line.lstrip().startswith("#")]
    metadata, missing, descriptions = _commented_header(comments)
    metadata.update(_block_metadata(lines[:block_end]))
    header = body[0][1]
    sep = _separator(header, path, decimal)
    _check_header(names or _header_fields(header, sep), str(path), given=bool(names))
    try:
        frame = pd.read_csv(_io.StringIO("\n".join(line for _, line in body)), sep=sep,
                            dtype=str, keep_default_na=False, skip_blank_lines=True,
                            header=None if names else 0, names=names)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, ValueError) as exc:
        raise NotATableError(f"not a readable table: {exc}", source=str(path)) from exc
    rows = [n for n, _ in body[(0 if names else 1):]]
    if len(rows) != len(frame):
        raise NotATableError(f"could not match {len(frame)} parsed rows to {len(rows)} lines "
                             "(quoted line breaks?)", source=str(path))
    if names and frame.shape[1] != len(names):
        raise InputError(f"names= gives {len(names)} names for {frame.shape[1]} columns",
                         source=str(path), field="names")
    frame.columns = [str(c).strip() for c in frame.columns]
    return Table(frame, lambda i: ("line", rows[i]), metadata, missing, descriptions)


#: Bytes that no text table holds: C0 controls other than tab, line breaks and form feed.
_CONTROL = re.compile(rb"[\x00-\x08\x0b\x0e-\x1f\x7f]")


def decode_text(raw, name):
    """A text file's bytes as text: UTF-8 (with or without a byte-order mark), UTF-16 with its
    byte-order mark (spreadsheets' "Unicode text"), else Latin-1 (ISO 8859-1) or Windows-1252
    with a warning naming the first byte that is not UTF-8.

    Raises
    ------
    NotATableError
        For binary content (control bytes), naming the byte offset of the first one.
    """
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            return raw.decode("utf-16")
        except UnicodeDecodeError as exc:
            raise NotATableError(f"not UTF-16 text after its byte-order mark (byte "
                                 f"{exc.start + 2})", source=name) from None
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        first = exc.start
    control = _CONTROL.search(raw)
    if control is not None:
        raise NotATableError(f"not a text table (and not NetCDF): byte {control.start()} is "
                             f"a control character (0x{raw[control.start()]:02x})",
                             source=name)
    for encoding in ("latin-1", "cp1252"):
        if encoding == "latin-1" and re.search(rb"[\x80-\x9f]", raw):
            continue  # C1 controls: not ISO 8859-1 text, try Windows-1252
        try:
            text = raw.decode(encoding)
        except UnicodeDecodeError:
            break
        warnings.warn(f"{name}: not UTF-8 (byte {first} is 0x{raw[first]:02x}); read as "
                      f"{'Latin-1' if encoding == 'latin-1' else 'Windows-1252'}",
                      UserWarning, stacklevel=4)
        return text
    raise NotATableError(f"not a text table: byte {first} (0x{raw[first]:02x}) is neither "
                         "UTF-8 nor Latin-1 or Windows-1252 text", source=name)


def _header_fields(header, sep):
    import csv

    return [field.strip() for field in next(csv.reader([header], delimiter=sep))]


def _check_header(names, name, *, given=False):
    """The header's column names against the column and name-length limits, and unique."""
    from align import limits

    where = "names" if given else "header"
    limits.check("columns", len(names), field=where, source=name)
    for column in names:
        limits.check("name_length", len(column), field=where, source=name,
                     detail=f" in a column name ({column[:40]!r}...)")
    seen = set()
    for column in names:
        if column in seen and column:
            raise InputError(f"two columns are named {column!r}; give each column its own "
                             "name", source=name, field=column)
        seen.add(column)


def _separator(header, path, decimal):
    if "\t" in header or path.suffix.lower() in (".tsv", ".tab"):
        return "\t"
    if ";" in header and ("," not in header or decimal == ","):
        return ";"
    return ","


def _metadata_block_end(lines, path):
    """Index of the first line after a leading ``/* ... */`` block (0 when there is none)."""
    first = next((i for i, line in enumerate(lines) if line.strip()), None)
    if first is None or not lines[first].lstrip().startswith("/*"):
        return 0
    for i in range(first, len(lines)):
        if lines[i].rstrip().endswith("*/"):
            return i + 1
    raise InputError("a '/*' metadata block is never closed with '*/'", source=str(path))


def _block_metadata(lines):
    """``Key:<TAB>value`` lines of a ``/* */`` block; indented lines continue the value."""
    metadata, key = {}, None
    for line in lines:
        line = line.strip().removeprefix("/*").removesuffix("*/")
        if not line.strip():
            continue
        match = _META_LINE.match(line) if not line.startswith(("\t", " ")) else None
        if match:
            key = match["key"]
            metadata[key] = match["value"]
        elif key is not None:
            metadata[key] = f"{metadata[key]} {line.strip()}".strip()
    return metadata


def _commented_header(comments):
    """Metadata, declared missing-value codes and column descriptions of ``#`` lines."""
    metadata, missing, descriptions = {}, [], {}
    for line in comments:
        content = line.lstrip()
        if content.startswith("##"):
            name, _, text = content[2:].strip().partition("\t")
            if name.strip():
                descriptions[name.strip()] = text.strip()
            continue
        match = _META_LINE.match(content.lstrip("#").strip())
        if not match or not match["value"]:
            continue
        if _MISSING_KEY.match(match["key"]):
            missing.extend(parse_declared(match["value"]))
        metadata[match["key"]] = match["value"]
    return metadata, missing, descriptions


def _read_workbook(path, sheet, names):
    try:
        import openpyxl  # noqa: F401  (pandas needs it for .xlsx; say so if it is missing)
    except ImportError as exc:
        raise InputError("reading .xlsx needs the openpyxl package", source=str(path)) from exc
    try:
        book = pd.ExcelFile(path, engine="openpyxl")
    except Exception as exc:  # noqa: BLE001 - any failure to open is "not a workbook"
        raise NotATableError(f"not a readable workbook ({exc.__class__.__name__})",
                             source=str(path)) from exc
    with book:
        chosen = 0 if sheet is None else sheet
        if isinstance(chosen, str) and chosen not in book.sheet_names:
            raise InputError(f"no sheet {chosen!r} (sheets: {', '.join(book.sheet_names)})",
                             source=str(path), field="sheet")
        if isinstance(chosen, int) and not 0 <= chosen < len(book.sheet_names):
            raise InputError(f"no sheet number {chosen} (the workbook has "
                             f"{len(book.sheet_names)})", source=str(path), field="sheet")
        raw = pd.read_excel(book, sheet_name=chosen, header=None, dtype=object)
    cells = raw.astype(object).where(raw.notna(), "")
    first = cells.iloc[:, 0].astype(str).str.lstrip()
    comment = first.str.startswith("#").to_numpy()
    blank = (cells.astype(str).apply(lambda c: c.str.strip()) == "").all(axis=1).to_numpy()
    metadata, missing, descriptions = _commented_header(list(first[comment]))
    keep = [i for i in range(len(cells)) if not comment[i] and not blank[i]]
    if not keep:
        raise InputError("the sheet is empty (no header and no data rows)", source=str(path),
                         field="sheet")
    if names:
        header, data = list(names), keep
        if len(names) != cells.shape[1]:
            raise InputError(f"names= gives {len(names)} names for {cells.shape[1]} columns",
                             source=str(path), field="names")
    else:
        header, data = [str(c).strip() for c in cells.iloc[keep[0]]], keep[1:]
        _check_header([h for h in header if h], str(path))
    frame = cells.iloc[data].reset_index(drop=True)
    frame.columns = header
    frame = frame.loc[:, [h != "" for h in header]]
    return Table(frame, lambda i: ("row", data[i] + 1), metadata, missing, descriptions)
