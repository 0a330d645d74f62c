"""Inputs that were read without a word and came out wrong: units stated beside the numbers
(uncertainty headers, depth column names, NetCDF attributes), thousands separators, CF
validity ranges, the netCDF library's fill value and depth given only as intervals.

Each case is the smallest file that showed the problem; the expected values are worked by
hand from what the file states.
"""

import numpy as np
import pytest
import xarray as xr

from align import InputError, open_record


def table(tmp_path, text, name="t.csv"):
    path = tmp_path / name
    path.write_text(text)
    return path


# ------------------------------------------------------------------- uncertainty columns

@pytest.mark.parametrize("header, sd_header, cell, expected", [
    ("age (ka BP)", "sd (yr)", "50", 50.0),       # was 50,000 yr: the age's ka applied
    ("age (yr BP)", "sd (ka)", "0.05", 50.0),     # was 0.05 yr: the header's ka ignored
    ("age (ka BP)", "sd (ka)", "0.05", 50.0),
    ("age (ka BP)", "sd", "0.05", 50.0),          # no unit of its own: the age's
])
def test_an_uncertainty_header_unit_is_its_own(tmp_path, header, sd_header, cell, expected):
    path = table(tmp_path, f"depth,{header},{sd_header},Ca\n"
                           f"1.0,11.0{'' if 'ka' in header else '00'},{cell},5\n"
                           f"1.1,11.1{'' if 'ka' in header else '00'},{cell},6\n")
    record = open_record(path)
    np.testing.assert_allclose(record.age_sd.values, [expected, expected])


def test_an_mce_header_unit_is_its_own(tmp_path):
    path = table(tmp_path, "depth,age (ka b2k),mce (yr),Ca\n1.0,11.0,40,5\n1.1,11.1,42,6\n")
    np.testing.assert_allclose(open_record(path).age_mce.values, [40.0, 42.0])


def test_an_uncertainty_unit_that_contradicts_the_option_is_refused(tmp_path):
    path = table(tmp_path, "depth,age,sd (yr),Ca\n1.0,11.0,50,5\n1.1,11.1,50,6\n")
    with pytest.raises(InputError, match=r"'sd \(yr\)'.*stated twice"):
        open_record(path, age_reference="BP", age_units="ka")


@pytest.mark.parametrize("sd_header", ["sd (2σ)", "age_sd (2 sigma)", "sd [yr] (2 sigma)"])
def test_a_two_sigma_uncertainty_is_not_read_as_one_sigma(tmp_path, sd_header):
    # was read as a 1-sigma sd of 20 yr (twice the stated uncertainty)
    path = table(tmp_path, f"age,{sd_header},Ca\n100,20,5\n110,20,6\n")
    with pytest.raises(InputError, match=r"2-sigma") as caught:
        open_record(path, age_reference="BP")
    assert repr(sd_header) in str(caught.value) and str(path) in str(caught.value)


# ------------------------------------------------------------------------------ depth units

@pytest.mark.parametrize("column, expected", [("depth_cm", [1.0, 1.01]), ("depth_mm", [1.0, 1.01]),
                                              ("Depth_m", [100.0, 101.0])])
def test_a_depth_unit_in_the_column_name_is_applied(tmp_path, column, expected):
    scale = {"depth_cm": 1, "depth_mm": 10, "Depth_m": 1}[column]
    path = table(tmp_path, f"{column},age,Ca\n{100 * scale},100,5\n{101 * scale},110,6\n")
    record = open_record(path, age_reference="BP")
    np.testing.assert_allclose(record.depth.values, expected)
    said = {"depth_cm": "from cm to m", "depth_mm": "from mm to m"}.get(column)
    assert (said in record.attrs["history"]) if said else "converted" not in record.attrs[
        "history"]


@pytest.mark.parametrize("column", ["depth_mid_cm", "Depth_cm_mid", "depth-mbsf-cm"])
def test_a_depth_unit_anywhere_in_the_column_name_is_applied(tmp_path, column):
    # was read as metres (100 m)
    path = table(tmp_path, f"{column},age,Ca\n100,100,5\n101,110,6\n")
    record = open_record(path, age_reference="BP")
    np.testing.assert_allclose(record.depth.values, [1.0, 1.01])


@pytest.mark.parametrize("column", ["depth_top_cm", "Depth_cm_top", "depth_lower_cm", "depth_base"])
def test_a_lone_top_or_bottom_depth_is_not_taken_for_the_mid_depth(tmp_path, column):
    # was taken for the sample's mid-depth (and the first two read as metres)
    path = table(tmp_path, f"{column},age,Ca\n100,100,5\n101,110,6\n")
    with pytest.raises(InputError, match=r"depth_top_column=") as caught:
        open_record(path, age_reference="BP")
    assert repr(column) in str(caught.value)


def test_a_depth_unit_spelled_out_agrees_with_its_symbol(tmp_path):
    path = table(tmp_path, "depth (centimetres),age,Ca\n100,100,5\n101,110,6\n")
    record = open_record(path, age_reference="BP", depth_units="cm")
    np.testing.assert_allclose(record.depth.values, [1.0, 1.01])


def test_a_depth_name_unit_that_contradicts_the_option_is_refused(tmp_path):
    path = table(tmp_path, "depth_m,age,Ca\n1.0,100,5\n1.1,110,6\n")
    with pytest.raises(InputError, match=r"depth_units"):
        open_record(path, age_reference="BP", depth_units="cm")


def test_depth_intervals_without_mid_points_keep_the_depth(tmp_path):
    # was: the depth dropped without a word (an age-only record)
    path = table(tmp_path, "depth_top (cm),depth_bottom (cm),age,Ca\n"
                           "100,101,100,5\n101,102,110,6\n102,104,120,7\n")
    record = open_record(path, age_reference="BP")
    np.testing.assert_allclose(record.depth.values, [1.005, 1.015, 1.03])
    np.testing.assert_allclose(record.depth_bounds.values[:, 1], [1.01, 1.02, 1.04])
    assert "half-way between depth_top and depth_bottom" in record.attrs["history"]


def test_two_columns_that_both_look_like_the_depth_are_refused(tmp_path):
    # 'depth' was taken and 'Depth' kept as a proxy, without a word
    path = table(tmp_path, "Depth,depth,age,Ca\n1.0,2.0,100,5\n1.1,2.1,110,6\n")
    with pytest.raises(InputError, match=r"'depth'.*'Depth' and 'depth' both look like the "
                                         r"depth; name one with depth_column="):
        open_record(path, age_reference="BP")
    with pytest.raises(InputError, match=r"'depth': a column named 'depth' that is not the "
                                         r"record's own depth"):
        open_record(path, age_reference="BP", depth_column="Depth")  # was an internal error
    np.testing.assert_allclose(open_record(path, age_reference="BP", depth_column="Depth",
                                           variables=["Ca"]).depth, [1.0, 1.1])


# --------------------------------------------------------------------- numbers in the cells

def test_a_thousands_dot_with_decimal_commas_is_refused(tmp_path):
    # '11.500' in a decimal-comma table is eleven thousand five hundred; it was read as 11.5
    path = table(tmp_path, "depth;age;Ca\n1,0;11.500;5\n1,1;11.600;6\n")
    with pytest.raises(InputError, match=r"'age', line 2: not a number: '11.500'.*thousands"):
        open_record(path, age_reference="BP", decimal=",")
    comma = table(tmp_path, 'depth,age,Ca\n1.0,"11,500",5\n1.1,"11,600",6\n', "c.csv")
    with pytest.raises(InputError, match=r"'11,500' \(a decimal comma, or a thousands "):
        open_record(comma, age_reference="BP")
    ok = table(tmp_path, "depth;age;Ca\n1,0;11500;5,5\n1.1;11600;6,5\n", "ok.csv")
    read = open_record(ok, age_reference="BP", decimal=",")  # '1.1' is no thousands: kept
    np.testing.assert_allclose(read.Ca, [5.5, 6.5])
    np.testing.assert_allclose(read.depth, [1.0, 1.1])


@pytest.mark.parametrize("cell", ["1e20", "1e30", "9.96921e36", "-1e+20", "-99", "999",
                                  "-9999.9"])
def test_fill_values_and_other_codes_are_refused_as_missing_value_codes(tmp_path, cell):
    # each was read as data: a spike of 1e20 (or -99, ...) in Ca
    path = table(tmp_path, f"depth,age,Ca\n1.0,100,5\n1.1,110,{cell}\n1.2,120,6\n1.3,130,5.5\n")
    with pytest.raises(InputError, match=r"'Ca', line 3: 1 cell\(s\) hold .*missing-value code"):
        open_record(path, age_reference="BP")
    code = float(cell)
    declared = open_record(path, age_reference="BP", missing_values=[code])
    assert np.isnan(declared.Ca.values[1])


@pytest.mark.parametrize("encoding", ["utf-16", "utf-16-be"])
def test_a_utf16_table_with_its_byte_order_mark_is_read(tmp_path, encoding):
    # was refused as binary (byte 3 is a control character)
    text = "depth\tage\tδ18O (‰)\n1.0\t100\t-35.1\n1.1\t110\t-34.9\n"
    raw = text.encode(encoding)
    path = tmp_path / "u.txt"
    path.write_bytes(raw if encoding == "utf-16" else b"\xfe\xff" + raw)
    record = open_record(path, age_reference="BP")
    np.testing.assert_array_equal(record["δ18O"].values, [-35.1, -34.9])
    assert record["δ18O"].attrs["units"] == "‰"


def test_text_cells_say_what_they_may_be(tmp_path):
    units = table(tmp_path, "depth,age,Ca\nm,yr BP,ng/g\n1.0,100,5\n1.1,110,6\n", "u.csv")
    with pytest.raises(InputError, match=r"'depth', line 2: not a number: 'm' \(a units row"):
        open_record(units, age_reference="BP")
    code = table(tmp_path, "depth,age,Ca\n1.0,100,5\n1.1,110,n/a\n1.2,120,6\n", "n.csv")
    with pytest.raises(InputError, match=r"declare it with missing_values=\[n/a\]"):
        open_record(code, age_reference="BP")
    assert np.isnan(open_record(code, age_reference="BP", missing_values=["n/a"]).Ca[1])


# ---------------------------------------------------------------------------------- NetCDF

def _schema_file(path, *, ca=(5.0, 6.0, 7.0, 6.5), ca_attrs=None, age_units="yr",
                 depth_units="m", depth=(1.0, 1.01, 1.02, 1.03)):
    """A record-schema NetCDF written with netCDF4 directly (no xarray encoding)."""
    import netCDF4

    n = len(ca)
    age = 100.0 + 10.0 * np.arange(n)
    with netCDF4.Dataset(path, "w") as ds:
        ds.createDimension("sample", n)
        ds.createDimension("nv", 2)
        for name, values, units in (("age", age, age_units), ("depth", np.asarray(depth),
                                                               depth_units)):
            var = ds.createVariable(name, "f8", ("sample",))
            var.setncatts({"units": units, "bounds": f"{name}_bounds",
                           **({"age_reference": "BP"} if name == "age" else {})})
            var[:] = values
            half = np.diff(values).mean() / 2
            ds.createVariable(f"{name}_bounds", "f8", ("sample", "nv"))[:] = np.column_stack(
                [values - half, values + half])
        var = ds.createVariable("Ca", "f8", ("sample",))
        var.set_auto_maskandscale(False)
        var.setncatts({"coordinates": "age depth", **(ca_attrs or {})})
        var[:] = np.asarray(ca)
    return path


@pytest.mark.parametrize("units, expected", [("cm", [1.0, 1.01, 1.02, 1.03]),
                                             ("mm", [0.1, 0.101, 0.102, 0.103])])
def test_schema_netcdf_depth_in_cm_or_mm_is_converted(tmp_path, units, expected):
    path = _schema_file(tmp_path / "d.nc", depth_units=units, depth=(100.0, 101, 102, 103))
    record = open_record(path)
    np.testing.assert_allclose(record.depth.values, expected)  # was 100 m and more
    np.testing.assert_allclose(record.depth_bounds.values[0], [expected[0] - (expected[1] -
                                                               expected[0]) / 2,
                                                               (expected[0] + expected[1]) / 2])
    assert record.depth.attrs["units"] == "m" and "depth" in record.attrs["history"]


def test_schema_netcdf_age_in_ka_is_converted(tmp_path):
    path = _schema_file(tmp_path / "a.nc", age_units="ka")
    record = open_record(path)
    np.testing.assert_allclose(record.age.values, [100e3, 110e3, 120e3, 130e3])  # was 100 yr
    np.testing.assert_allclose(record.age_bounds.values[0], [95e3, 105e3])


@pytest.mark.parametrize("units", ["", " ", "metres"])
def test_schema_netcdf_blank_or_spelled_out_units_read_as_before(tmp_path, units):
    path = _schema_file(tmp_path / "b.nc", depth_units=units, age_units=units.replace(
        "metres", "years"))
    record = open_record(path)
    np.testing.assert_allclose(record.depth.values, [1.0, 1.01, 1.02, 1.03])
    np.testing.assert_allclose(record.age.values, [100.0, 110.0, 120.0, 130.0])


def test_schema_netcdf_unknown_depth_unit_is_refused(tmp_path):
    path = _schema_file(tmp_path / "f.nc", depth_units="ft")
    with pytest.raises(InputError, match=r"'depth'.*unknown depth unit 'ft'"):
        open_record(path)


def test_schema_netcdf_age_in_cf_time_units_is_refused_by_name(tmp_path):
    # an age_reference beside 'years since 1950-01-01' (forward time) was read as ages BP
    path = _schema_file(tmp_path / "t.nc", age_units="years since 1950-01-01")
    with pytest.raises(InputError, match=r"t\.nc, 'age': unknown age unit 'years since"):
        open_record(path)


@pytest.mark.parametrize("attrs, value", [({"valid_range": np.array([0.0, 100.0])}, 500.0),
                                          ({"valid_min": 0.0}, -1.0),
                                          ({"valid_max": 100.0}, 500.0)])
def test_cf_values_outside_the_valid_range_are_missing(tmp_path, attrs, value):
    path = _schema_file(tmp_path / "v.nc", ca=(5.0, 6.0, value, 6.5), ca_attrs=attrs)
    record = open_record(path)
    np.testing.assert_array_equal(np.isnan(record.Ca.values), [False, False, True, False])
    assert "outside the valid range" in record.attrs["history"]


def test_cf_valid_range_of_a_generic_netcdf_column(tmp_path):
    xr.Dataset({"Age_BP": ("i", [100.0, 110.0, 120.0]),
                "Ca": ("i", [1.0, 2.0, -5.0], {"valid_min": 0.0})}).to_netcdf(tmp_path / "g.nc")
    record = open_record(tmp_path / "g.nc", age_column="Age_BP", age_reference="BP")
    assert np.isnan(record.Ca.values[2]) and not np.isnan(record.Ca.values[:2]).any()


def test_cf_valid_range_of_packed_values_is_in_packed_units(tmp_path):
    # stored int16 0..1000 times 0.01: valid 0 to 10 once unpacked; 1200 (12.0) is outside
    import netCDF4

    path = _schema_file(tmp_path / "p.nc", ca=(0.0, 0.0, 0.0, 0.0))
    with netCDF4.Dataset(path, "a") as ds:
        var = ds.createVariable("Mg", "i2", ("sample",))
        var.set_auto_maskandscale(False)
        var.setncatts({"coordinates": "age depth", "scale_factor": 0.01,
                       "valid_range": np.array([0, 1000], dtype="i2")})
        var[:] = np.array([500, 600, 1200, 700], dtype="i2")
    mg = open_record(path).Mg.values
    np.testing.assert_allclose(mg[[0, 1, 3]], [5.0, 6.0, 7.0])
    assert np.isnan(mg[2])


def test_an_undeclared_code_in_a_schema_netcdf_age_sd_is_refused(tmp_path):
    # sd 9999 among 10 yr was read as an age uncertainty (the proxies alone were checked)
    import netCDF4

    path = _schema_file(tmp_path / "s.nc")
    with netCDF4.Dataset(path, "a") as ds:
        ds.createVariable("age_sd", "f8", ("sample",))[:] = [10.0, 10.0, 9999.0, 10.0]
        ds["age_sd"].units = "yr"
    with pytest.raises(InputError, match=r"'age_sd', sample 2: 1 value\(s\) hold 9999"):
        open_record(path)


def test_the_netcdf_default_fill_is_missing(tmp_path):
    # cells never written hold the library's default fill (no _FillValue attribute)
    import netCDF4

    fill = netCDF4.default_fillvals["f8"]
    path = _schema_file(tmp_path / "u.nc", ca=(5.0, 6.0, fill, 6.5))
    record = open_record(path)
    np.testing.assert_array_equal(np.isnan(record.Ca.values), [False, False, True, False])
    assert "default fill" in record.attrs["history"]


# ------------------------------------------------------------------- ties and site draws

def test_a_missing_value_code_in_a_tie_table_is_refused(tmp_path):
    # sd 9999 among 3-7 yr was a tie of no weight, read without a word
    from align.ties import read_ties

    path = table(tmp_path, "label,depth,ref_depth,sd\nA,1.0,10.0,3\nB,1.5,11.0,4\nC,2.0,12.0,9999\n"
                           "D,2.5,13.0,5\nE,3.0,14.0,7\n", "ties.csv")
    with pytest.raises(InputError, match=r"'sd', line 4: 1 cell\(s\) hold 9999"):
        read_ties(path)


def test_a_missing_value_code_among_site_draws_is_refused():
    # -999 among draws near 12,260 yr pulled the site's age without a word
    from align.sites import check_draws

    draws = np.r_[np.random.default_rng(1).normal(12260.0, 30.0, 200), -999.0, -999.0]
    with pytest.raises(InputError, match=r"row 201: site .X.: 2 draw\(s\) hold -999"):
        check_draws(draws, "X", 0)
    assert check_draws(draws[:200], "X", 0).size == 200


@pytest.mark.parametrize("header, expected", [("age [ka b2k]", 12150.0), ("age (yr)", 12.15),
                                              ("age", 12.15)])
def test_an_event_table_age_header_unit_is_applied(tmp_path, header, expected):
    # 'age [ka b2k]' was read as years: windows around 12 yr b2k
    from align.schema import SurveySpec
    from align.survey import table_pairs

    table(tmp_path, f"label,{header}\nX1,12.150\n", "events.csv")
    spec = SurveySpec.model_validate({
        "table": {"path": "events.csv", "label_column": "label", "age_column": header,
                  "age_reference": "b2k", "window": [-250, 250]},
        "a": {"kind": "event", "record": "a.nc", "variable": "x"},
        "b": {"kind": "event", "record": "b.nc", "variable": "x"}, "age_reference": "b2k"})

    class Sources:
        def path(self, name):
            return tmp_path / name

    (pair,) = table_pairs(spec, Sources())
    assert pair.a.window == [expected - 250, expected + 250]
    spec.table.age_reference = "BP"
    if "b2k" in header:
        with pytest.raises(InputError, match=r"'age \[ka b2k\]'.*header says b2k"):
            table_pairs(spec, Sources())
    spec.table.age_reference = "b2k"
    table(tmp_path, f"label,{header}\nX1,12.150\nX2,-999\nX3,12.3\n", "events.csv")
    with pytest.raises(InputError, match=r"events\.csv, .*line 3: an event at -999"):
        table_pairs(spec, Sources())  # was an event at -999, its windows far off the records


def test_a_proxy_named_age_sd_does_not_replace_the_named_uncertainty(tmp_path):
    # with age_sd_column='err', the column 'age_sd' (1 yr) became the uncertainty, not 'err'
    path = table(tmp_path, "age,age_sd,err,Ca\n100,1,20,5\n110,1,20,6\n")
    with pytest.raises(InputError, match=r"'age_sd': a column named 'age_sd' that is not"):
        open_record(path, age_reference="BP", age_sd_column="err")
    record = open_record(path, age_reference="BP", age_sd_column="err", variables=["Ca"])
    np.testing.assert_array_equal(record.age_sd.values, [20.0, 20.0])


def test_a_depth_counted_upward_is_refused(tmp_path):
    # CF positive='up' depths are heights: read as depths, the core was upside down
    path = _schema_file(tmp_path / "up.nc", depth=(-1.03, -1.02, -1.01, -1.0))
    with xr.open_dataset(path) as ds:
        ds = ds.load()
    ds["depth"].attrs["positive"] = "up"
    ds.to_netcdf(tmp_path / "up2.nc")
    with pytest.raises(InputError, match=r"up2\.nc, 'depth': .*positive='up'"):
        open_record(tmp_path / "up2.nc")
    xr.Dataset({"Age_BP": ("i", [100.0, 110.0]),
                "z": ("i", [-1.0, -1.1], {"positive": "up", "units": "m"})}
               ).to_netcdf(tmp_path / "g.nc")
    with pytest.raises(InputError, match=r"g\.nc, 'z': .*positive='up'"):
        open_record(tmp_path / "g.nc", age_column="Age_BP", depth_column="z",
                    age_reference="BP")


def test_the_netcdf_default_fill_of_packed_values_is_missing(tmp_path):
    # an int16 never written holds -32767; unpacked by 0.1 it read as -3276.7
    import netCDF4

    path = _schema_file(tmp_path / "pk.nc")
    with netCDF4.Dataset(path, "a") as ds:
        var = ds.createVariable("Mg", "i2", ("sample",), fill_value=False)
        var.set_auto_maskandscale(False)
        var.setncatts({"coordinates": "age depth", "scale_factor": 0.1})
        var[:] = np.array([50, 60, netCDF4.default_fillvals["i2"], 70], dtype="i2")
    mg = open_record(path).Mg.values
    np.testing.assert_allclose(mg[[0, 1, 3]], [5.0, 6.0, 7.0])
    assert np.isnan(mg[2])
