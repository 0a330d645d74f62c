"""The bad-input corpus: tables that must be refused with a message naming where.

Each case: a name, the file's bytes, its suffix, the reader mapping, and the fragments the
one-line error must contain (file name is always checked by the tests themselves). The same
corpus is read by the library, the CLI and the HTTP upload tests.
"""

from __future__ import annotations

GOOD_HEADER = "depth,age,d18O\n"

CASES = [
    ("duplicated-depth", GOOD_HEADER + "1.0,100,-35\n1.1,110,-35\n1.1,120,-34\n", ".csv",
     {"age_reference": "b2k"}, ["'depth'", "line 4", "duplicated depth"]),
    ("duplicated-age", "age,d18O\n100,-35\n110,-35\n110,-34\n", ".csv",
     {"age_reference": "b2k"}, ["'age'", "line 4", "duplicated age"]),
    ("non-monotonic-depth", GOOD_HEADER + "1.0,100,-35\n1.2,110,-35\n1.1,120,-34\n1.3,130,-33\n",
     ".csv", {"age_reference": "b2k"}, ["'depth'", "line 4", "not increasing"]),
    ("age-inversion", GOOD_HEADER + "1.0,100,-35\n1.1,110,-35\n1.2,90,-34\n1.3,130,-33\n", ".csv",
     {"age_reference": "b2k"}, ["'age'", "line 4", "age inversion"]),
    ("negative-interval", "depth,depth_top,depth_bottom,d18O\n1.0,0.95,1.05,-35\n"
     "1.1,1.15,1.05,-35\n", ".csv", {}, ["'depth_bounds'", "line 3", "negative"]),
    ("overlapping-intervals", "depth,depth_top,depth_bottom,d18O\n1.0,0.95,1.08,-35\n"
     "1.1,1.05,1.15,-35\n", ".csv", {}, ["'depth_bounds'", "line 3", "overlaps"]),
    ("non-numeric-cell", "# a comment line\n" + GOOD_HEADER + "1.0,100,-35\n1.1,110,abc\n",
     ".csv", {"age_reference": "b2k"}, ["'d18O'", "line 4", "not a number"]),
    ("infinity", GOOD_HEADER + "1.0,100,-35\n1.1,110,inf\n", ".csv", {"age_reference": "b2k"},
     ["'d18O'", "line 3", "infinite"]),
    ("missing-depth", GOOD_HEADER + "1.0,100,-35\n,110,-34\n1.2,120,-33\n", ".csv",
     {"age_reference": "b2k"}, ["'depth'", "line 3", "missing depth"]),
    ("empty-table", GOOD_HEADER, ".csv", {"age_reference": "b2k"}, ["empty"]),
    ("missing-age-reference", GOOD_HEADER + "1.0,100,-35\n1.1,110,-34\n", ".csv", {},
     ["age_reference", "missing"]),
    ("not-a-table", bytes(range(256)) * 4, ".csv", {}, ["not a text table"]),
    ("not-netcdf", b"this is not a NetCDF file\n", ".nc", {}, ["not a readable NetCDF"]),
    ("no-depth-or-age", "x,y\n1,2\n3,4\n", ".csv", {}, ["no depth or age column"]),
]


def _netcdf_bytes(units):
    """A small NetCDF whose time variable ``t`` has the given units (generated, not stored)."""
    import xarray as xr

    ds = xr.Dataset({"Ca": ("t", [1.0, 2.0, 3.0])},
                    coords={"t": ("t", [-30.0, -20.0, -10.0], {"units": units})})
    return bytes(ds.to_netcdf())


def _workbook_bytes():
    """A one-sheet ``.xlsx`` (sheet ``data``), generated in memory."""
    import io

    import pandas as pd

    buffer = io.BytesIO()
    pd.DataFrame({"age": [1.0, 2.0], "Ca": [3.0, 4.0]}).to_excel(buffer, sheet_name="data",
                                                                  index=False)
    return buffer.getvalue()


CASES += [
    ("unknown-age-unit", "Age [fortnights],Ca\n1,2\n2,3\n", ".csv", {},
     ["unknown age unit 'fortnights'"]),
    ("contradicting-age-reference", "Age [ka BP],Ca\n1,2\n2,3\n", ".csv",
     {"age_reference": "b2k"}, ["'Age [ka BP]'", "stated twice", "the header unit says BP"]),
    ("undecodable-cf-time", _netcdf_bytes("months since 1950-01-01"), ".nc", {},
     ["'t'", "cannot decode time units 'months since 1950-01-01'"]),
    ("undeclared-sentinel", "age,Ca\n1,2\n2,-999\n3,2.5\n4,-999\n5,3\n", ".csv",
     {"age_reference": "BP"}, ["'Ca'", "line 3", "2 cell(s) hold -999", "missing-value code"]),
    ("missing-code-empties-column", "age,Ca\n1,-999\n2,-999\n", ".csv",
     {"age_reference": "BP", "missing_values": "-999"}, ["'Ca'", "without any value"]),
    ("no-such-sheet", _workbook_bytes(), ".xlsx", {"age_reference": "BP", "sheet": "nope"},
     ["'sheet'", "no sheet 'nope' (sheets: data)"]),
    ("relative-without-sign", "t,Ca\n1,2\n2,3\n", ".csv",
     {"age_column": "t", "age_reference": "b2k", "relative_to": "100"},
     ["'relative_sign'", "relative time needs"]),
    ("calendar-year-zero", "Year (CE),Ca\n0,2\n1,3\n", ".csv", {},
     ["0 is not a CE year"]),
]


def _declared_netcdf_bytes(length=2**29):
    """A NetCDF of a few kB whose header declares a ``length`` float64 variable (4 GiB by
    default): no value is written, so HDF5 allocates no chunk."""
    import os
    import tempfile

    import netCDF4

    fd, path = tempfile.mkstemp(suffix=".nc")
    os.close(fd)
    try:
        with netCDF4.Dataset(path, "w") as ds:
            ds.createDimension("sample", length)
            ds.createVariable("age", "f8", ("sample",), chunksizes=(4096,))
            ds.createVariable("Ca", "f8", ("sample",), chunksizes=(4096,), zlib=True)
        with open(path, "rb") as handle:
            return handle.read()
    finally:
        os.unlink(path)


def wide_table(columns):
    """A CSV header of ``age`` and ``columns - 1`` proxies, and two rows."""
    names = ["age", *(f"c{i}" for i in range(columns - 1))]
    rows = [",".join(str(k + i) for i in range(columns)) for k in (1, 2)]
    return "\n".join([",".join(names), *rows]) + "\n"


#: Cases of the resource limits and of issue 14 (any surface: library, CLI and service).
CASES += [
    ("duplicate-column-names", "depth,age,x,x\n1.0,100,1,2\n1.1,110,2,3\n", ".csv",
     {"age_reference": "b2k"}, ["'x'", "two columns are named 'x'"]),
    ("column-name-over-300-chars", f"depth,age,{'c' * 300}\n1.0,100,1\n1.1,110,2\n", ".csv",
     {"age_reference": "b2k"}, ["300 characters", "limit 'name_length'"]),
    ("twenty-thousand-columns", wide_table(20_000), ".csv", {"age_reference": "b2k"},
     ["20,000 columns", "limit 'columns'"]),
    ("declares-4-GiB", _declared_netcdf_bytes(), ".nc", {},
     ["4,294,967,296 bytes", "limit 'variable_bytes'"]),
    ("binary-names-its-byte", b"depth,age\n1,2\n\x00\xff", ".csv", {},
     ["not a text table", "byte 14"]),
]

#: Reading keywords of the wrong type (the service's ``mapping``; the library's keywords):
#: (name, mapping, field, fragment). The CLI cannot spell them (its options are text).
MAPPING_CASES = [
    ("variables-numbers", {"age_reference": "b2k", "variables": [1, 2]}, "variables",
     "a list of names"),
    ("units-as-text", {"age_reference": "b2k", "units": "ng/g"}, "units",
     "a mapping of variable names to units"),
    ("age-column-number", {"age_reference": "b2k", "age_column": 3}, "age_column", "text"),
    ("relative-to-text", {"age_reference": "b2k", "relative_to": "soon"}, "relative_to",
     "a finite age"),
]

#: Cases that were read without a word and came out wrong (tests/test_reading_units.py).
CASES += [
    ("two-sigma-sd", "age,sd (2σ),Ca\n100,20,5\n110,20,6\n", ".csv", {"age_reference": "BP"},
     ["'sd (2σ)'", "2-sigma values", "1-sigma"]),
    ("thousands-dot-with-decimal-comma", "depth;age;Ca\n1,0;11.500;5\n1,1;11.600;6\n", ".csv",
     {"age_reference": "BP", "decimal": ","}, ["'age'", "line 2", "thousands separator"]),
    ("fill-value-1e20", "age,Ca\n1,2\n2,1e20\n3,2.5\n4,3\n", ".csv", {"age_reference": "BP"},
     ["'Ca'", "line 3", "1 cell(s) hold 1e+20"]),
]
