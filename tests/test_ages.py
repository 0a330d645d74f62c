"""Age conventions against facts of the trade (each marked with its source)."""

import json

import numpy as np
import pytest

from align import InputError, convert_age
from conftest import run_cli


def test_b2k_is_bp_plus_50():
    # b2k counts from AD 2000, BP from AD 1950 (common practice in ice-core dating)
    assert convert_age(11653, "BP", "b2k") == 11703
    assert convert_age(11703, "b2k", "BP") == 11653


@pytest.mark.parametrize("year, era, bp", [(1, "BCE", 1950), (1, "CE", 1949), (1950, "CE", 0),
                                           (2000, "CE", -50)])
def test_no_year_zero(year, era, bp):
    # the BC/AD system has no year zero: 1 BCE is followed by 1 CE (fact of the trade)
    assert convert_age(year, era, "BP") == bp
    assert convert_age(bp, "BP", era) == year


def test_12785_bp_is_10836_bce_not_10835():
    # 12,785 cal BP = 10,836 BCE; subtracting 1950 gives 10,835 and is off by one
    assert convert_age(12785, "BP", "BCE") == 10836
    assert convert_age(12785, "BP", "BCE") != 12785 - 1950


def test_ka_variants_and_vectorised():
    ages = np.array([11.703, 14.692])
    np.testing.assert_array_equal(convert_age(ages, "ka b2k", "BP"), [11653, 14642])
    np.testing.assert_array_equal(convert_age([11653, 14642], "BP", "ka-b2k"), ages)
    assert convert_age(12.0, "ka", "BP") == 12000


def test_round_trip_is_exact_for_whole_years():
    rng = np.random.default_rng(0)
    bp = rng.integers(1950, 60000, 1000).astype(float)
    for ref in ("b2k", "BCE"):
        np.testing.assert_array_equal(convert_age(convert_age(bp, "BP", ref), ref, "BP"), bp)
    # thousands of years are decimal fractions: exact to rounding only
    np.testing.assert_allclose(convert_age(convert_age(bp, "BP", "ka BP"), "ka BP", "BP"), bp,
                               rtol=0, atol=1e-9)


def test_impossible_calendar_year_is_an_error():
    with pytest.raises(InputError, match="not a CE year"):
        convert_age(1950, "BP", "CE")  # that is 1 BCE
    with pytest.raises(InputError, match="not a BCE year"):
        convert_age(0, "BCE", "BP")
    with pytest.raises(InputError, match="unknown age reference"):
        convert_age(1, "BC2K", "BP")


def test_cli_prints_the_number_alone():
    done = run_cli("age", "12785", "--from", "BP", "--to", "BCE")
    assert done.returncode == 0, done.stderr
    assert done.stdout == "10836\n"


def test_cli_json_and_bad_reference():
    done = run_cli("age", "11703", "--from", "b2k", "--to", "BP", "--json")
    assert json.loads(done.stdout) == {"value": 11703, "from": "b2k", "to": "BP",
                                       "result": 11653}
    bad = run_cli("age", "10", "--from", "XYZ", "--to", "BP")
    assert bad.returncode == 2
    assert len(bad.stderr.strip().splitlines()) == 1 and "Traceback" not in bad.stderr
