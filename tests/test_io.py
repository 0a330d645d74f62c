"""Reading and writing records: round trips, bad input, and the published NGRIP table."""

import warnings

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from align import InputError, open_record, save_record
from align.describe import describe_record
from align.provenance import sha256_file
from align.record import AgeInversionWarning, build_record
from conftest import RECORDS
from corpus import CASES


def assert_same_record(a, b):
    """Values, bounds, uncertainties, ensembles and attributes agree."""
    assert set(a.variables) == set(b.variables)
    for name in a.variables:
        np.testing.assert_array_equal(a[name].values, b[name].values, err_msg=name)
        assert dict(a[name].attrs) == dict(b[name].attrs), name
    keep = lambda attrs: {k: v for k, v in attrs.items()  # noqa: E731
                          if k not in ("history", "source", "source_checksum", "Conventions",
                                       "title")}
    assert keep(a.attrs) == keep(b.attrs)


def make_rich_record():
    rng = np.random.default_rng(3)
    n = 40
    depth = np.linspace(10, 14, n)
    age = 1000 + np.cumsum(rng.uniform(5, 15, n))
    return build_record(depth=depth, age=age, age_reference="BP", age_sd=np.linspace(10, 40, n),
                        age_ensemble=np.sort(age[:, None] + rng.normal(0, 3, (n, 7)), axis=0),
                        proxies={"tephra": (np.where(rng.random(n) < 0.1, np.nan,
                                                     rng.random(n)), {"units": "g-1",
                                                                      "long_name": "shards"})},
                        attrs={"archive": "lake", "site": "X", "core": "X-1",
                               "timescale": "model", "timescale_kind": "modelled"})


def test_netcdf_round_trip_keeps_everything(tmp_path):
    record = make_rich_record()
    save_record(record, tmp_path / "a.nc")
    again = open_record(tmp_path / "a.nc")
    assert_same_record(record, again)
    save_record(again, tmp_path / "b.nc")
    assert_same_record(record, open_record(tmp_path / "b.nc"))
    assert "written by save_record" in again.attrs["history"]


def test_csv_and_dataframe_round_trip(tmp_path):
    csv = tmp_path / "core.csv"
    csv.write_text("# a lake core\ndepth (cm),age,age_sd,Ca (ng/g),d18O\n"
                   "100,1000,20,5,-5.1\n101,1012,21,,-5.0\n102,1030,22,7,-4.8\n")
    record = open_record(csv, age_reference="BP", depth_units="cm", archive="lake")
    np.testing.assert_allclose(record.depth.values, [1.0, 1.01, 1.02])
    assert record["Ca"].attrs["units"] == "ng/g"
    assert np.isnan(record["Ca"].values[1])  # empty cell kept as missing, row not dropped
    np.testing.assert_allclose(record.depth_bounds.values[:, 0], [0.995, 1.005, 1.015])
    np.testing.assert_allclose(record.age_bounds.values[:, 1], [1006, 1021, 1039])
    assert record.attrs["bounds_derived"] == "depth age"
    save_record(record, tmp_path / "core.nc")
    assert_same_record(record, open_record(tmp_path / "core.nc"))
    frame = pd.read_csv(csv, comment="#").rename(columns={"depth (cm)": "depth"})
    from_frame = open_record(frame, age_reference="BP", depth_units="cm", archive="lake")
    for name in ("age_sd", "d18O"):
        np.testing.assert_array_equal(from_frame[name].values, record[name].values)


def test_reading_never_changes_the_input(tmp_path):
    path = tmp_path / "r.nc"
    save_record(make_rich_record(), path)
    before = sha256_file(path)
    open_record(path)
    open_record(RECORDS / "hvd1_ice.nc")
    assert sha256_file(path) == before


def test_failed_write_leaves_nothing_and_keeps_old_file(tmp_path):
    path = tmp_path / "r.nc"
    save_record(make_rich_record(), path)
    before = sha256_file(path)
    broken = make_rich_record()
    broken["age_sd"].values[3] = -1.0
    with pytest.raises(InputError, match="age_sd"):
        save_record(broken, path)
    assert sha256_file(path) == before
    assert [p.name for p in tmp_path.iterdir()] == ["r.nc"]


@pytest.mark.parametrize("name, content, suffix, mapping, fragments", CASES,
                         ids=[c[0] for c in CASES])
def test_bad_input_names_where(tmp_path, name, content, suffix, mapping, fragments):
    path = tmp_path / f"{name}{suffix}"
    path.write_bytes(content if isinstance(content, bytes) else content.encode())
    with pytest.raises(InputError) as caught:
        open_record(path, **mapping)
    message = str(caught.value)
    assert str(path) in message
    for fragment in fragments:
        assert fragment in message, message
    assert "\n" not in message


def test_small_inversion_is_a_warning(tmp_path):
    path = tmp_path / "inv.csv"
    path.write_text("depth,age,age_sd,x\n1.0,100,30,1\n1.1,110,30,2\n1.2,105,30,3\n1.3,130,30,4\n")
    with pytest.warns(AgeInversionWarning, match="line 4"):
        record = open_record(path, age_reference="b2k")
    assert record.sizes["sample"] == 4


def test_bottom_up_table_is_reversed_and_said(tmp_path):
    path = tmp_path / "up.csv"
    path.write_text("age,x\n300,3\n200,2\n100,1\n")
    with pytest.warns(UserWarning, match="reversed"):
        record = open_record(path, age_reference="BP")
    np.testing.assert_array_equal(record.x.values, [1, 2, 3])
    assert "reversed" in record.attrs["history"]


def test_generic_netcdf_columns_are_read(tmp_path):
    xr.Dataset({"Age_BP": ("i", [100.0, 110.0, 120.0]),
                "Ca": ("i", [1.0, 2.0, np.nan], {"units": "ng g-1"})}).to_netcdf(tmp_path / "g.nc")
    record = open_record(tmp_path / "g.nc", age_column="Age_BP", age_reference="BP")
    assert record.Ca.attrs["units"] == "ng g-1"
    np.testing.assert_array_equal(record.age.values, [100, 110, 120])


def test_published_ngrip_decadal_table(ngrip_csv):
    # NGRIP decadal means on GICC05 (Erhardt et al. 2019, doi:10.5194/cp-15-811-2019;
    # tests/data/README.md): 10-year samples, empty cells are missing values.
    record = open_record(ngrip_csv, age_column="Age_BP", age_reference="BP")
    info = describe_record(record)
    assert info.age.interval.median == 10.0
    expected = pd.read_csv(ngrip_csv, comment="#").isna().sum()
    assert {v.name: v.n_missing for v in info.variables} == {
        name: int(expected[name]) for name in ("Na", "Ca", "lt", "d18O")}
    assert info.n_samples == len(pd.read_csv(ngrip_csv, comment="#"))
    assert record.age.values[0] == 10155.0 and record.age.attrs["age_reference"] == "BP"


def test_mce_and_sd_are_exclusive(tmp_path):
    path = tmp_path / "both.csv"
    path.write_text("depth,age,sd,mce\n1,10,1,2\n2,20,1,2\n")
    with pytest.raises(InputError, match="not both"):
        open_record(path, age_reference="b2k")


def test_ensemble_with_reversal_is_refused():
    with pytest.raises(InputError, match="member 1 has an age reversal"):
        build_record(depth=[1.0, 2.0, 3.0], age=[10.0, 20.0, 30.0], age_reference="b2k",
                     age_ensemble=[[10, 10], [20, 25], [30, 24]])


def test_no_warning_on_clean_demo_records():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        for path in RECORDS.glob("*.nc"):
            open_record(path)
