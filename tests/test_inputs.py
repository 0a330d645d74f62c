"""Real files in: age units and encodings, missing-value codes, archive layouts, own outputs.

Fixtures are written by ``tests/fixtures/make_fixtures.py`` (invented values); each check
compares the ages read with the ages the generator wrote, after conversion.
"""

import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from align import InputError, open_record, save_record
from align.describe import describe_record
from align.detect import detect_marker
from align.markers.event import detect_event
from conftest import RECORDS, run_cli

FIXTURES = Path(__file__).resolve().parent / "fixtures"
sys.path.insert(0, str(FIXTURES))
import make_fixtures as made  # noqa: E402

TRUE_B2K = made.AGES_BP + 50.0


def quiet(path, **mapping):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        return open_record(path, **mapping)


def test_fixtures_are_current(tmp_path):
    # the committed files are what the documented script writes (text layouts byte for byte)
    made.main(tmp_path)
    for name in ("export.tab", "template.txt", "undeclared.csv", "bce.csv",
                 "decimal_comma.csv", "relative.csv"):
        assert (tmp_path / name).read_bytes() == (FIXTURES / name).read_bytes(), name


# ---------------------------------------------------------------------------- age encodings

@pytest.mark.parametrize("name, mapping, reference, truth", [
    ("export.tab", {}, "BP", made.AGES_BP),                       # Age [ka BP]
    ("template.txt", {}, "BP", made.AGES_BP),                     # age_calBP, declared -999
    ("bce.csv", {}, "BP", made.AGES_BP),                          # Year [BCE]
    ("workbook.xlsx", {"sheet": "recent"}, "BP", made.RECENT_BP),  # Year (CE)
    ("decimal_comma.csv", {"names": ["age", "Ca", "d18O"], "decimal": ",",
                           "age_units": "cal ka BP"}, "BP", made.AGES_BP),
    ("relative.csv", {"names": ["t", "Ca"], "age_column": "t", "relative_to": made.EVENT_B2K,
                      "relative_sign": "after", "age_reference": "b2k"}, "b2k", TRUE_B2K),
    ("days.nc", {}, "BP", made.AGES_BP),
    ("common_years.nc", {}, "BP", made.AGES_BP),
    ("years.nc", {"age_reference": "b2k"}, "b2k", TRUE_B2K),
])
def test_ages_read_equal_the_generated_ones(name, mapping, reference, truth):
    record = quiet(FIXTURES / name, **mapping)
    assert record.age.attrs["age_reference"] == reference
    np.testing.assert_allclose(record.age.values, truth, rtol=0, atol=1e-9)
    ca, _ = made.series()
    got = record["Ca"].values
    expected = ca.copy()
    if name == "template.txt":
        expected[list(made.GAPS)] = np.nan
    np.testing.assert_array_equal(got, expected)


def test_forward_time_in_ka_is_flipped_and_said():
    with pytest.warns(UserWarning, match="counts forward in time"):
        record = open_record(FIXTURES / "ka_negative.nc")
    np.testing.assert_allclose(record.age.values, made.AGES_BP, rtol=0, atol=1e-9)
    assert "sign flipped" in record.attrs["history"]


def test_cf_decoding_agrees_with_cftime_num2date():
    # reference library: cftime's own num2date on the stored numbers, turned into decimal
    # years here by plain arithmetic on day-of-year (calendar years are whole here)
    import cftime

    for name in ("days.nc", "common_years.nc"):
        with xr.open_dataset(FIXTURES / name, decode_times=False) as ds:
            t = ds["time"]
            dates = cftime.num2date(t.values, t.attrs["units"], t.attrs["calendar"])
        assert all(d.month == 1 and d.day == 1 for d in dates)
        years = np.array([d.year for d in dates], dtype=float)
        np.testing.assert_array_equal(open_record(FIXTURES / name).age.values, 1950.0 - years)


def test_cf_decoding_of_fractional_days_matches_num2date(tmp_path):
    # mid-year dates: decimal year = year + elapsed days / days in that year (cftime)
    import cftime

    days = np.array([-4000000.5, -3650000.25, -1000.0, -10.0])
    xr.Dataset({"x": ("t", [1.0, 2.0, 3.0, 4.0])},
               coords={"t": ("t", days, {"units": "days since 1950-01-01",
                                          "calendar": "julian"})}).to_netcdf(tmp_path / "j.nc")
    dates = cftime.num2date(days, "days since 1950-01-01", "julian")
    expected = []
    for d in dates:
        start = cftime.datetime(d.year, 1, 1, calendar="julian")
        nxt = cftime.datetime(d.year + 1 if d.year != -1 else 1, 1, 1, calendar="julian")
        year = d.year + 1 if d.year < 0 else d.year  # julian has no year 0: -1 is 1 BCE
        expected.append(year + (d - start) / (nxt - start))
    with pytest.warns(UserWarning, match="reversed"):  # forward time lists the oldest first
        age = open_record(tmp_path / "j.nc").age.values
    np.testing.assert_allclose(age, 1950.0 - np.array(expected)[::-1], rtol=0, atol=1e-9)


def test_undecodable_cf_units_are_refused_by_name(tmp_path):
    xr.Dataset({"x": ("t", [1.0, 2.0])},
               coords={"t": ("t", [-10.0, -5.0], {"units": "months since 1950-01-01"})}
               ).to_netcdf(tmp_path / "m.nc")
    with pytest.raises(InputError, match=r"'t'.*months since 1950-01-01"):
        open_record(tmp_path / "m.nc")


def test_ngrip_in_ka_gives_the_same_record_as_in_years(ngrip_csv, tmp_path):
    # published NGRIP decadal table (Erhardt et al. 2019, doi:10.5194/cp-15-811-2019)
    years = open_record(ngrip_csv, age_column="Age_BP", age_reference="BP")
    frame = pd.read_csv(ngrip_csv, comment="#")
    frame["Age [ka BP]"] = frame.pop("Age_BP") / 1000.0
    frame.to_csv(tmp_path / "ngrip_ka.csv", index=False, float_format="%.10g")
    ka = open_record(tmp_path / "ngrip_ka.csv", age_column="Age [ka BP]")
    np.testing.assert_allclose(ka.age.values, years.age.values, rtol=0, atol=1e-9)
    np.testing.assert_allclose(ka.age_bounds.values, years.age_bounds.values, rtol=0, atol=1e-9)
    for name in ("Na", "Ca", "lt", "d18O"):
        np.testing.assert_array_equal(ka[name].values, years[name].values)


def test_ka_header_read_as_ka_not_years(tmp_path):
    # the observed failure: 'Age [ka BP]' was read as years
    path = tmp_path / "ka.csv"
    path.write_text("Age (ka BP),Ca\n11.0,1\n11.5,2\n12.0,3\n")
    info = describe_record(quiet(path))
    assert info.age_reference == "BP" and info.age.range[0] == pytest.approx(10750.0)


@pytest.mark.parametrize("header, option, fragment", [
    ("Age [ka BP]", {"age_reference": "b2k"}, "the options say b2k"),
    ("Age [ka BP]", {"age_units": "yr"}, "the options say yr"),
    ("Age_BP [yr b2k]", {}, "the column name says BP"),
])
def test_a_flag_that_disagrees_with_the_file_is_refused(tmp_path, header, option, fragment):
    path = tmp_path / "a.csv"
    path.write_text(f"{header},x\n1,1\n2,2\n3,3\n")
    with pytest.raises(InputError, match="stated twice") as caught:
        open_record(path, **option)
    assert fragment in str(caught.value)


def test_unit_slip_and_far_future_are_warned(tmp_path):
    path = tmp_path / "days.csv"
    path.write_text("age,x\n" + "".join(f"{3650 * k},{k}\n" for k in range(10)))
    with pytest.warns(UserWarning, match="counted in days"):
        open_record(path, age_reference="BP")
    path.write_text("age,x\n-900,1\n-800,2\n700,3\n")
    with pytest.warns(UserWarning, match="after AD 2100"):
        open_record(path, age_reference="BP", age_column="age")


# ------------------------------------------------------------------------- missing values

def test_declared_missing_values_are_counted_missing_and_no_event_at_them():
    record = quiet(FIXTURES / "template.txt")
    info = {v.name: v.n_missing for v in describe_record(record).variables}
    assert info["Ca"] == len(made.GAPS)
    assert "missing-value code" in record.attrs["history"]
    gap_ages = record.age.values[list(made.GAPS)]

    def at_gap(rec):
        result = detect_event(rec, "Ca", direction="down", threshold=5.0)
        return [c for c in result.candidates
                if any(c.age_span[0] <= a <= c.age_span[1] for a in gap_ages)]

    assert at_gap(record) == []
    as_data = record.copy(deep=True)  # what reading the codes as data did: an "event" there
    as_data["Ca"].values[list(made.GAPS)] = -999.0
    assert at_gap(as_data)


def test_undeclared_sentinel_is_refused_by_name_and_count():
    with pytest.raises(InputError) as caught:
        open_record(FIXTURES / "undeclared.csv", age_reference="BP")
    message = str(caught.value)
    assert "'Ca'" in message and "3 cell(s) hold -999" in message and "line 7" in message
    record = quiet(FIXTURES / "undeclared.csv", age_reference="BP", missing_values=[-999])
    assert int(np.isnan(record.Ca.values).sum()) == 3


def test_cf_fill_value_becomes_missing(tmp_path):
    ds = xr.Dataset({"Ca": ("sample", np.array([1.0, -9999.0, 3.0]))},
                    coords={"age": ("sample", [10.0, 20.0, 30.0],
                                    {"age_reference": "BP", "units": "yr"})})
    ds["Ca"].encoding["_FillValue"] = -9999.0
    ds["age_bounds"] = (("sample", "nv"), [[5.0, 15.0], [15.0, 25.0], [25.0, 35.0]])
    ds.to_netcdf(tmp_path / "f.nc")
    with xr.open_dataset(tmp_path / "f.nc", mask_and_scale=False) as raw:
        assert raw["Ca"].values[1] == -9999.0  # stored as the code
    assert np.isnan(quiet(tmp_path / "f.nc").Ca.values[1])


# ------------------------------------------------------------------------------ layouts

def test_archive_export_keeps_metadata_units_and_addresses_columns(tmp_path):
    record = quiet(FIXTURES / "export.tab", variables=["δ18O H2O [‰ SMOW]", "Ca"])
    assert record["δ18O_H2O"].attrs["units"] == "‰ SMOW"
    assert record["Ca"].attrs["comment"] == "flow analysis"
    assert record.attrs["citation"].startswith("Invented, A. (2026)")
    assert record.attrs["citation"].endswith("(invented values).")
    save_record(record, tmp_path / "x.nc")
    with xr.open_dataset(tmp_path / "x.nc") as again:
        assert again.attrs["file_site"] == "Invented Site"  # 'site' is the record's own
    by_clean = quiet(FIXTURES / "export.tab", age_column="Age", depth_column="Depth")
    np.testing.assert_array_equal(by_clean.age.values, record.age.values)


def test_unknown_column_lists_what_is_there():
    with pytest.raises(InputError) as caught:
        open_record(FIXTURES / "export.tab", age_column="Ages")
    assert "age_column=" in str(caught.value) and "'δ18O H2O [‰ SMOW]'" in str(caught.value)


def test_missing_sheet_lists_sheets():
    with pytest.raises(InputError, match=r"no sheet 'data' \(sheets: notes, recent\)"):
        open_record(FIXTURES / "workbook.xlsx", sheet="data")


# --------------------------------------------------------------------------- own outputs

def _writers(tmp_path):
    from align.io import save_grid
    from align.resample import align_records, resample

    a, b = open_record(RECORDS / "hvd1_ice.nc"), open_record(RECORDS / "trv3_lake.nc")
    save_record(a, tmp_path / "record.nc")
    save_grid(resample(a, 20), tmp_path / "grid_age.nc")
    save_grid(resample(a, 0.05, along="depth"), tmp_path / "grid_depth.nc")
    from align.ties import read_ties

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        grid = align_records(a, b, ties=read_ties(RECORDS / "hvd1_trv3_ties.csv"))
    save_grid(grid, tmp_path / "aligned.nc")
    return {"record.nc": a, "grid_age.nc": None, "grid_depth.nc": None, "aligned.nc": grid}


def test_every_writer_reads_back_without_flags(tmp_path):
    written = _writers(tmp_path)
    for name in written:
        record = quiet(tmp_path / name)
        proxies = [v.name for v in describe_record(record).variables]
        assert proxies and not any(p.endswith(("_coverage", "_n_samples", "native_interval"))
                                   for p in proxies), (name, proxies)
        assert "bounds_derived" not in record.attrs or name == "record.nc"
        with xr.open_dataset(tmp_path / name) as raw:
            along = "sample" if "sample" in raw.dims else next(iter(raw[f"{d}_bounds"].dims[0]
                                                                    for d in ("age", "depth")
                                                                    if f"{d}_bounds" in raw))
            coord = "age" if "age_bounds" in raw else "depth"
            np.testing.assert_array_equal(record[f"{coord}_bounds"].values,
                                          raw[f"{coord}_bounds"].values)
            assert along in raw.dims
    grid = written["aligned.nc"]
    again = quiet(tmp_path / "aligned.nc")
    for name in describe_record(again).variables:
        np.testing.assert_array_equal(again[name.name].values, grid[name.name].values)


def test_info_reads_a_grid_without_flags(tmp_path):
    _writers(tmp_path)
    done = run_cli("info", tmp_path / "aligned.nc")
    assert done.returncode == 0, done.stderr
    assert "coverage" not in done.stdout


# ----------------------------------------------------------------------------- transforms

def test_log_transform_matches_numpy_and_is_named():
    from align.transforms import marker_variable

    record = open_record(RECORDS / "hvd1_ice.nc")
    out, name = marker_variable(record, "sulfate", "log")
    assert name == "log(sulfate)"
    np.testing.assert_array_equal(out[name].values, np.log(record.sulfate.values))  # numpy
    by_hand = record.copy()
    by_hand["sulfate"] = record.sulfate.copy(data=np.log(record.sulfate.values))
    window = [float(record.age.values[50]), float(record.age.values[-50])]
    got = detect_marker(record, {"kind": "event", "variable": "sulfate", "window": window,
                                 "transform": "log"})
    want = detect_event(by_hand, "sulfate", window)
    assert got.variable == "log(sulfate)"
    assert [c.age_span for c in got.candidates] == [c.age_span for c in want.candidates]


def test_log_of_zero_is_refused_with_the_sample():
    record = open_record(RECORDS / "hvd1_ice.nc")
    record["sulfate"].values[7] = 0.0
    with pytest.raises(InputError, match=r"'sulfate', sample 7: cannot take the log of 0"):
        detect_marker(record, {"kind": "event", "variable": "sulfate", "window": None,
                               "transform": "log"})


def test_variables_by_header_text_and_unknown_lists_them():
    from align.transforms import find_variable

    record = open_record(FIXTURES / "export.tab")
    assert find_variable(record, "δ18O H2O [‰ SMOW]") == "δ18O_H2O"
    assert find_variable(record, "δ18O H2O") == "δ18O_H2O"
    with pytest.raises(InputError, match=r"variables: Ca, δ18O_H2O"):
        find_variable(record, "Mg")


# ------------------------------------------------------------------------------------- CLI

def test_cli_speaks_options_and_reads_tables_everywhere():
    done = run_cli("info", FIXTURES / "undeclared.csv", "--age-reference", "BP")
    assert done.returncode == 2 and "declare it with --missing-value -999" in done.stderr
    done = run_cli("xcorr", f"{FIXTURES / 'undeclared.csv'}:d18O",
                   f"{FIXTURES / 'undeclared.csv'}:d18O", "--max-lag", "100",
                   "--surrogates", "20", "--seed", "1", "--age-reference", "BP",
                   "--missing-value", "-999", "--json")
    assert done.returncode == 0, done.stderr
