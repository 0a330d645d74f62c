"""Saved records pass the IOOS compliance checker for CF-1.8 (an outside checker)."""

import pytest
from compliance_checker.runner import CheckSuite

from align import open_record, save_record
from conftest import RECORDS

HIGH, MEDIUM = 3, 2


def cf_problems(path):
    """High- and medium-priority CF-1.8 failures the IOOS compliance checker reports."""
    suite = CheckSuite()
    suite.load_all_available_checkers()
    raw, errors = suite.run_all(suite.load_dataset(str(path)), ["cf:1.8"], skip_checks=[])["cf:1.8"]
    assert not errors, errors
    failed = []
    for result in raw:
        value = result.value
        ok = value if isinstance(value, bool) else value[0] == value[1]
        if not ok and result.weight >= MEDIUM:
            failed.append(f"{result.name}: {result.msgs}")
    return failed


@pytest.mark.parametrize("path", sorted(RECORDS.glob("*.nc")), ids=lambda p: p.name)
def test_bundled_records_pass(path):
    assert cf_problems(path) == []


def test_converted_ngrip_table_passes(tmp_path, ngrip_csv):
    record = open_record(ngrip_csv, age_column="Age_BP", age_reference="BP",
                         units={"d18O": "1e-3", "Ca": "ng g-1", "Na": "ng g-1", "lt": "m"})
    save_record(record, tmp_path / "ngrip.nc")
    assert cf_problems(tmp_path / "ngrip.nc") == []


def test_checker_does_flag_a_broken_file(tmp_path):
    # the check can fail: a coordinate with an invalid unit is a CF error
    record = open_record(RECORDS / "hvd1_ice.nc")
    save_record(record, tmp_path / "good.nc")
    assert cf_problems(tmp_path / "good.nc") == []  # the same file before it is broken
    path = tmp_path / "bad.nc"
    save_record(record, path)
    import netCDF4

    with netCDF4.Dataset(path, "a") as nc:
        nc["depth"].units = "furlongs per fortnight squared"
        nc["sulfate"].standard_name = "not_a_standard_name"
    problems = cf_problems(path)
    assert any("units" in p for p in problems), problems
