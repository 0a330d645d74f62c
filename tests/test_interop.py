"""Results and records in the scientific-Python toolbox: tables as pandas DataFrames, figures
drawn into a caller's matplotlib Axes, and no change to the caller's matplotlib state."""

import subprocess
import sys

import numpy as np
import pytest

from align import InputError, detect_event, open_record, record_frame
from conftest import RECORDS, ROOT


@pytest.fixture(scope="module")
def lag_result():
    from align import estimate_lag, read_request

    return estimate_lag(read_request(RECORDS / "demo_lag_request.json"), draws=4000)


def test_result_tables_as_dataframes(lag_result):
    budget = lag_result.to_dataframe("budget")
    assert list(budget["component"]) == [b.component for b in lag_result.budget]
    assert budget["share"].sum() == pytest.approx(1.0, abs=1e-9)
    what_if = lag_result.to_dataframe("what_if")
    assert set(what_if["key"]) == {w.key for w in lag_result.what_if}
    assert lag_result.to_dataframe().equals(budget)  # the first table is the default
    with pytest.raises(InputError, match="no table 'nope'"):
        lag_result.to_dataframe("nope")


def test_record_frame_has_one_row_per_sample():
    ice = open_record(RECORDS / "hvd1_ice.nc")
    frame = record_frame(ice)
    assert len(frame) == ice.sizes["sample"]
    # xarray's own to_dataframe repeats each sample for both bounds
    assert len(ice.to_dataframe()) == 2 * ice.sizes["sample"]
    np.testing.assert_array_equal(frame["age_top"], ice.age_bounds.values[:, 0])
    np.testing.assert_array_equal(frame["sulfate"], ice.sulfate.values)


def test_figures_draw_into_a_callers_axes(lag_result):
    from matplotlib.figure import Figure

    from align.figures import lag_figure, marker_figure

    fig = Figure()
    left, right = fig.subplots(1, 2)
    assert lag_figure(lag_result, ax=left) is fig
    assert marker_figure(lag_result.a, "a", ax=right) is fig
    assert left.get_title(loc="left") == "Lag distribution"
    assert right.get_title(loc="left").startswith("Event pick")
    event = detect_event(open_record(RECORDS / "hvd1_ice.nc"), "sulfate", [12150, 12350])
    assert marker_figure(event, "a").axes[0].get_ylabel() == "sulfate (ng/g)"


def test_import_and_report_leave_the_callers_backend_alone(tmp_path):
    """``import align`` loads no plotting, numba or dask, and writing a report does not switch
    the caller's matplotlib backend (a notebook keeps its inline figures)."""
    code = f"""
import sys
import matplotlib
matplotlib.use("svg")
import align
heavy = [m for m in ("matplotlib.pyplot", "numba", "dask", "emcee", "flask", "xarray")
         if m in sys.modules]
assert not heavy, heavy
result = align.estimate_lag(align.read_request({str(RECORDS / 'demo_lag_request.json')!r}),
                            draws=2000)
align.write_report(result, {str(tmp_path / 'r')!r})
assert matplotlib.get_backend() == "svg", matplotlib.get_backend()
assert "matplotlib.pyplot" not in sys.modules
"""
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          cwd=ROOT, timeout=600)
    assert done.returncode == 0, done.stderr
