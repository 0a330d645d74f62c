"""Interval-aware resampling against reference libraries, brute force and published data."""

import numpy as np
import pytest
import xarray as xr

from align import InputError, open_record, resample
from align.record import build_record
from align.resample import GridWarning, overlap_mean, round_step
from conftest import RECORDS, run_cli
from test_cf import cf_problems


def interval_record(lo, hi, values, **proxies):
    return build_record(age=0.5 * (lo + hi), age_bounds=np.column_stack([lo, hi]),
                        age_reference="b2k",
                        proxies={"x": (np.asarray(values, float), {"units": "1"}), **proxies})


def brute_force(lo, hi, values, edges):
    """Overlap-weighted cell means written plainly: for every cell, every sample."""
    out = []
    for a, b in zip(edges[:-1], edges[1:]):
        weight = total = 0.0
        for s, e, v in zip(lo, hi, values):
            overlap = max(0.0, min(b, e) - max(a, s))
            if overlap > 0 and np.isfinite(v):
                weight += overlap
                total += v * overlap
        out.append(total / weight if weight else np.nan)
    return np.array(out)


def random_intervals(rng, n, gaps=True):
    widths = rng.uniform(0.2, 3.0, n)
    spaces = np.where(rng.random(n) < 0.1, rng.uniform(0, 2, n), 0.0) if gaps else np.zeros(n)
    lo = 1000.0 + np.cumsum(widths + spaces) - widths
    return lo, lo + widths


def test_equals_brute_force_on_random_irregular_intervals():
    rng = np.random.default_rng(0)
    lo, hi = random_intervals(rng, 400)
    values = np.where(rng.random(400) < 0.05, np.nan, rng.normal(size=400))
    edges = np.arange(995.0, hi[-1] + 5, 2.5)
    mean, _, _, _ = overlap_mean(lo, hi, values, edges)
    np.testing.assert_allclose(mean[:, 0], brute_force(lo, hi, values, edges), rtol=1e-12,
                               equal_nan=True)


def test_exact_to_1e9_at_old_ages_and_large_values():
    # ages ~1e5 yr and values ~1e3 on a grid finer than the samples: against the overlap
    # means in exact rational arithmetic (fractions.Fraction of the same floats), the
    # relative error stays far below 1e-9 (no long running sums to cancel)
    from fractions import Fraction

    rng = np.random.default_rng(21)
    lo, hi = random_intervals(rng, 120)
    lo, hi = lo + 99_000.0, hi + 99_000.0
    values = 1000.0 + rng.normal(0.0, 5.0, 120)
    edges = 99_995.0 + 0.37 * np.arange(int((hi[-1] - 99_995.0) / 0.37) + 2)
    mean = overlap_mean(lo, hi, values, edges)[0][:, 0]
    exact = []
    for a, b in zip(edges[:-1], edges[1:]):
        weight = total = Fraction(0)
        near = (lo < b) & (hi > a)
        for s, e, v in zip(lo[near], hi[near], values[near]):
            overlap = min(Fraction(b), Fraction(e)) - max(Fraction(a), Fraction(s))
            if overlap > 0:
                weight += overlap
                total += Fraction(v) * overlap
        exact.append(float(total / weight) if weight else np.nan)
    np.testing.assert_allclose(mean, exact, rtol=1e-9, atol=0, equal_nan=True)
    assert np.isfinite(mean).sum() > 200


def test_equals_xarray_coarsen_when_samples_tile_the_grid():
    # xarray's coarsen(...).mean() is the reference when every cell holds 4 whole samples
    lo = np.arange(2000.0, 2400.0, 2.0)
    values = np.sin(lo / 7.0)
    grid = resample(interval_record(lo, lo + 2.0, values), 8.0, start=2000.0, stop=2400.0)
    reference = xr.DataArray(values, dims="t").coarsen(t=4).mean()
    np.testing.assert_allclose(grid.x.values, reference.values, rtol=1e-13)
    assert np.all(grid.x_n_samples.values == 4) and np.all(grid.x_coverage.values == 1.0)


def test_integral_is_conserved():
    rng = np.random.default_rng(1)
    lo, hi = random_intervals(rng, 5000, gaps=False)
    values = rng.lognormal(size=5000)
    grid = resample(interval_record(lo, hi, values), 7.3, start=1100.0,
                    stop=1100.0 + 7.3 * 200, min_coverage=0.0)
    original = np.sum(values * np.clip(np.minimum(hi, 1100 + 7.3 * 200) - np.maximum(lo, 1100),
                                       0, None))
    resampled = np.sum(grid.x.values * grid.x_coverage.values * 7.3)
    assert resampled == pytest.approx(original, rel=1e-10)


def test_coverage_and_counts_on_a_hand_made_case():
    # samples [0,2] [2,3] (missing) [3,4] [6,9]; cells of 2 from 0 to 10
    lo = np.array([0.0, 2.0, 3.0, 6.0])
    hi = np.array([2.0, 3.0, 4.0, 9.0])
    record = interval_record(lo + 100, hi + 100, [1.0, np.nan, 5.0, 2.0])
    grid = resample(record, 2.0, start=100.0, stop=110.0, min_coverage=0.6)
    np.testing.assert_array_equal(grid.x_coverage.values, [1.0, 0.5, 0.0, 1.0, 0.5])
    np.testing.assert_array_equal(grid.x_n_samples.values, [1, 1, 0, 1, 1])
    np.testing.assert_array_equal(grid.x.values, [1.0, np.nan, np.nan, 2.0, np.nan])
    np.testing.assert_allclose(grid.native_interval.values, [2.0, 1.0, np.nan, 3.0, 3.0])
    lenient = resample(record, 2.0, start=100.0, stop=110.0, min_coverage=0.5)
    np.testing.assert_array_equal(lenient.x.values, [1.0, 5.0, np.nan, 2.0, 2.0])


def test_finer_cells_repeat_the_sample_unless_asked(tmp_path):
    record = interval_record(np.array([0.0, 10.0]) + 50, np.array([10.0, 20.0]) + 50, [0.0, 10.0])
    flat = resample(record, 2.5, start=50.0, stop=70.0)
    np.testing.assert_array_equal(flat.x.values, [0, 0, 0, 0, 10, 10, 10, 10])
    assert "piecewise constant" in flat.attrs["fine_cells"]
    linear = resample(record, 2.5, start=50.0, stop=70.0, interpolate=True)
    # mid-points 55 and 65; cell centres 51.25, 53.75, ...: clamped outside, linear between
    np.testing.assert_allclose(linear.x.values, [0, 0, 1.25, 3.75, 6.25, 8.75, 10, 10])
    assert "linear interpolation" in linear.attrs["fine_cells"]


def test_published_ngrip_decadal_pairs(ngrip_csv):
    # NGRIP decadal d18O on GICC05 (Erhardt et al. 2019, doi:10.5194/cp-15-811-2019): 20-year
    # cells aligned with the 10-year samples are the means of consecutive pairs
    record = open_record(ngrip_csv, age_column="Age_BP", age_reference="BP")
    grid = resample(record, 20.0, start=10150.0, stop=60150.0, variables=["d18O"],
                    min_coverage=1.0)
    values = record.d18O.values
    pairs = np.full(2500, np.nan)
    pairs[: values.size // 2] = 0.5 * (values[0:-1:2] + values[1::2])[: values.size // 2]
    np.testing.assert_allclose(grid.d18O.values, pairs, rtol=1e-13, equal_nan=True)
    assert np.isfinite(grid.d18O.values).sum() > 2400


def test_several_records_prefix_clashing_names_and_say_the_step():
    ice, lake = open_record(RECORDS / "hvd1_ice.nc"), open_record(RECORDS / "trv3_lake.nc")
    with pytest.warns(GridWarning, match="coarser native resolution"):
        grid = resample([ice, lake])
    assert {"HVD_1_d18O", "TRV_3_d18O", "sulfate", "tephra"} <= set(grid.data_vars)
    assert grid.attrs["resample_step"] == round_step(np.median(np.diff(lake.age_bounds.values)))
    assert grid.age.attrs["age_reference"] == "b2k"  # the lake's BP ages were converted


def test_ensemble_resampled_member_by_member(monkeypatch):
    lake = open_record(RECORDS / "trv3_lake.nc")
    grid = resample(lake, 50.0, variables=["d18O"])
    assert grid.d18O_ensemble.dims == ("member", "age")
    assert grid.d18O_ensemble.shape == (500, grid.sizes["age"])
    import importlib

    # the module, not the function of the same name that align exports
    monkeypatch.setattr(importlib.import_module("align.resample"), "LAZY_ENSEMBLE", 1000)
    lazy = resample(lake, 50.0, variables=["d18O"])
    assert hasattr(lazy.d18O_ensemble.data, "dask")
    np.testing.assert_array_equal(lazy.d18O_ensemble.values, grid.d18O_ensemble.values)
    # the median member agrees with the median timescale where the cells are well covered:
    # in every such cell within twice the members' typical spread (the members do spread)
    spread = np.nanstd(grid.d18O_ensemble.values, axis=0)
    median_member = np.nanmedian(grid.d18O_ensemble.values, axis=0)
    well = np.isfinite(grid.d18O.values) & (grid.d18O_coverage.values >= 0.9)
    assert well.sum() >= 10 and np.nanmedian(spread) > 0
    gap = np.abs(median_member[well] - grid.d18O.values[well])
    assert gap.max() < 2 * np.nanmedian(spread), (gap.max(), np.nanmedian(spread))


def test_bad_grid_arguments():
    record = open_record(RECORDS / "hvd1_ice.nc")
    with pytest.raises(InputError, match="positive"):
        resample(record, -1.0)
    with pytest.raises(InputError, match="whole number of steps"):
        resample(record, 10.0, start=11300.0, stop=11305.0)
    with pytest.raises(InputError, match="no such variable"):
        resample(record, 10.0, variables=["nope"])


def test_cli_resample_and_align_pass_the_cf_checker(tmp_path):
    out = tmp_path / "ice.nc"
    done = run_cli("resample", RECORDS / "hvd1_ice.nc", "--step", "10", "-o", out)
    assert done.returncode == 0, done.stderr
    aligned = tmp_path / "aligned.nc"
    done = run_cli("align", RECORDS / "hvd1_ice.nc", RECORDS / "trv3_lake.nc", "--ties",
                   RECORDS / "hvd1_trv3_ties.csv", "-o", aligned)
    assert done.returncode == 0, done.stderr
    assert cf_problems(aligned) == []
    grid = xr.open_dataset(aligned)
    assert "TRV_3_d18O" in grid and "through tie points" in grid.attrs["alignment"]
    refused = run_cli("align", RECORDS / "hvd1_ice.nc", RECORDS / "trv3_lake.nc", "-o",
                      tmp_path / "no.nc")
    assert refused.returncode == 2 and "different timescales" in refused.stderr


def test_blocks_of_cells_on_threads_give_the_same_grid(monkeypatch):
    import importlib

    module = importlib.import_module("align.resample")
    threads = importlib.import_module("align._threads")
    rng = np.random.default_rng(7)
    lo, hi = random_intervals(rng, 3000)
    values = np.where(rng.random(3000) < 0.05, np.nan, rng.normal(size=3000))
    edges = np.arange(995.0, hi[-1] + 5, 0.37)
    whole = overlap_mean(lo, hi, values, edges)
    monkeypatch.setattr(module, "CELLS_PER_THREAD", 100)
    monkeypatch.setattr(threads, "THREADS", 4)
    assert len(threads.blocks(edges.size - 1, 100)) == 5
    for split, one in zip(overlap_mean(lo, hi, values, edges), whole):
        np.testing.assert_array_equal(split, one)
    # a regular grid's bounds and centres are written by the blocks' merges
    regular = 995.0 + 0.37 * np.arange(edges.size)  # (not arange's numbers)
    grid = module.grid_cells(lo[0], hi[-1], 0.37, regular[0], regular[-1])
    for split, one in zip(overlap_mean(lo, hi, values, grid),
                          overlap_mean(lo, hi, values, regular)):
        np.testing.assert_array_equal(split, one)
    assert grid.filled
    np.testing.assert_array_equal(grid.bounds, np.column_stack([regular[:-1], regular[1:]]))
    np.testing.assert_array_equal(grid.centre, 0.5 * (regular[1:] + regular[:-1]))
    # disorder is found wherever it lies, also where a block starts
    cell = np.searchsorted(lo, edges[(edges.size - 1) // 2]) + 1
    lo[cell] = hi[cell - 1] - 0.1
    with pytest.raises(InputError, match="overlap"):
        overlap_mean(lo, hi, values, edges)


@pytest.mark.parametrize("nv, m", [(1, 1), (1, 7), (3, 5), (2, 100_001)])
def test_outputs_carved_from_one_block_do_not_overlap(nv, m):
    """The per-cell outputs share one allocation (fine grids): each has its shape and dtype,
    none overlaps another, and a multi-variable resampling equals one variable at a time."""
    from align.resample import _fresh

    arrays = _fresh(((nv, m), (nv, m), (m,)), int_shape=(nv, m))
    assert [a.shape for a in arrays] == [(nv, m), (nv, m), (m,), (nv, m)]
    assert [a.dtype for a in arrays] == [np.float64] * 3 + [np.int32]
    for k, a in enumerate(arrays):
        for b in arrays[k + 1:]:
            assert not np.shares_memory(a, b)
    rng = np.random.default_rng(11)
    lo, hi = random_intervals(rng, 500)
    values = rng.normal(size=(500, nv))
    edges = np.linspace(lo[0], hi[-1], min(m, 2000) + 1)
    together = overlap_mean(lo, hi, values, edges)
    for k in range(nv):
        alone = overlap_mean(lo, hi, values[:, k], edges)
        for a, b in zip(together[:3], alone[:3]):
            np.testing.assert_array_equal(a[:, k], b[:, 0])
        np.testing.assert_array_equal(together[3], alone[3])
