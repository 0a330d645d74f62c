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
