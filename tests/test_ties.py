"""Tie points and transfer: validation, the bridge formula, and coverage on a known truth."""

import warnings

import numpy as np
import pytest

from align import InputError, open_record, read_ties, transfer
from align.record import build_record
from align.ties import TieWarning, bridge_variance, default_bridge_rate
from conftest import RECORDS, run_cli
from synthetic import distorted_core, exact_reference


def write(tmp_path, text, name="ties.csv"):
    path = tmp_path / name
    path.write_text(text)
    return path


def moved_record(edges):
    mid = 0.5 * (edges[1:] + edges[:-1])
    return build_record(depth=mid, depth_bounds=np.column_stack([edges[:-1], edges[1:]]),
                        proxies={"x": (np.zeros(mid.size), {})}, attrs={"core": "moved"})


@pytest.mark.parametrize("text, fragment", [
    ("label,depth,ref_age,sd\nA,1.0,100,2\n", "at least two ties"),
    ("label,depth,ref_age,sd\nA,1.0,100,2\nB,2.0,90,2\n", "ties 'A' and 'B' cross"),
    ("label,depth,ref_age,sd\nA,1.0,100,2\nA,2.0,190,2\n", "duplicated tie label 'A'"),
    ("label,depth,ref_age,sd\nA,1.0,100,2\nB,2.0,abc,2\n", "line 3.*not a number: 'abc'"),
    ("label,depth,ref_age,sd\nA,1.0,100,2\nB,2.0,,2\n", "line 3.*tie 'B' has no ref_age"),
    ("label,depth,sd\nA,1.0,2\nB,2.0,2\n", "header must be"),
])
def test_tie_table_errors_name_the_ties(tmp_path, text, fragment):
    with pytest.raises(InputError, match=fragment):
        read_ties(write(tmp_path, text))


def test_ties_out_of_range_are_refused(tmp_path):
    lake, ice = open_record(RECORDS / "trv3_lake.nc"), open_record(RECORDS / "hvd1_ice.nc")
    ties = read_ties(write(tmp_path, "label,depth,ref_depth,sd\nA,4.0,1413,2\nB,9.0,1450,2\n"))
    with pytest.raises(InputError, match="tie 'B' at depth 9 lies outside TRV-3"):
        transfer(lake, ties, ice)
    ties = read_ties(write(tmp_path, "label,depth,ref_depth,sd\nA,4.0,1413,2\nB,4.5,2000,2\n"))
    with pytest.raises(InputError, match="tie 'B' at ref_depth 2000 lies outside HVD-1"):
        transfer(lake, ties, ice)


@pytest.mark.parametrize("text, fragment", [
    ("label,depth,ref_depth,sd\nA,4.0,1413,2\n", "at least two ties"),
    ("label,depth,ref_depth,sd\nA,4.0,1450,2\nB,4.5,1413,2\n", "cross"),
    ("label,depth,ref_depth,sd\nA,4.0,1413,2\nB,9.0,1450,2\n", "outside"),
])
def test_cli_tie_errors_exit_2(tmp_path, text, fragment):
    done = run_cli("tie", RECORDS / "trv3_lake.nc", "--ties", write(tmp_path, text), "--onto",
                   RECORDS / "hvd1_ice.nc", "-o", tmp_path / "out.nc")
    assert done.returncode == 2 and fragment in done.stderr
    assert len(done.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "out.nc").exists()


def test_bridge_variance_matches_the_analytic_formula(tmp_path):
    edges = np.linspace(0.0, 10.0, 1001)
    record = moved_record(edges)
    reference = exact_reference((0.0, 2000.0))
    ties = read_ties(write(tmp_path, "label,depth,ref_age,sd\nA,0,100,0\nB,3,400,0\n"
                                     "C,10,1500,0\n"))
    rate = 7.5
    out = transfer(record, ties, reference, bridge_rate=rate)
    x = out.age.values
    # written out independently: var = r (x - x1)(x2 - x) / (x2 - x1), pinned at 100, 400, 1500
    x1 = np.where(x <= 400, 100.0, 400.0)
    x2 = np.where(x <= 400, 400.0, 1500.0)
    expected = rate * (x - x1) * (x2 - x) / (x2 - x1)
    np.testing.assert_allclose(out.age_sd_bridge.values ** 2, expected, rtol=1e-12, atol=1e-12)
    # pinned at the inner tie: near 400 the variance is at most r |x - 400| (zero at the tie)
    near = np.abs(x - 400.0) < 5.0
    assert near.sum() >= 2
    assert np.all(out.age_sd_bridge.values[near] ** 2 <= rate * np.abs(x[near] - 400.0) + 1e-9)
    assert bridge_variance(400.0, 100.0, 400.0, rate) == 0.0
    first = (x > 100) & (x < 400)
    assert abs(x[first][np.argmax(out.age_sd_bridge.values[first])] - 250.0) <= 1.6
    assert bridge_variance(250.0, 100.0, 400.0, rate) == pytest.approx(rate * 150 * 150 / 300,
                                                                         abs=1e-12)
    assert bridge_variance(np.array([100.0, 400.0]), 100.0, 400.0, rate).tolist() == [0.0, 0.0]


def test_transfer_keeps_own_timescale_and_provenance(tmp_path):
    lake, ice = open_record(RECORDS / "trv3_lake.nc"), open_record(RECORDS / "hvd1_ice.nc")
    with pytest.warns(TieWarning, match="left out"):
        out = transfer(lake, RECORDS / "hvd1_trv3_ties.csv", ice)
    assert out.attrs["timescale_kind"] == "transferred"
    assert out.attrs["reference_record"] == "HVD-1"
    assert len(out.attrs["ties_checksum"]) == 64 and out.attrs["transfer_method"] == "linear"
    assert out.age.attrs["age_reference"] == "b2k"
    assert out.age_original.attrs["age_reference"] == "BP"
    # the sample holding each tie spans the reference's age at the tie's ref_depth
    ties = read_ties(RECORDS / "hvd1_trv3_ties.csv")
    ref_age = np.interp(ties.ref, np.sort(ice.depth_bounds.values.ravel()),
                        np.sort(ice.age_bounds.values.ravel()))
    for depth, age in zip(ties.position[1:-1], ref_age[1:-1]):
        i = np.flatnonzero((out.depth_bounds.values[:, 0] <= depth)
                           & (out.depth_bounds.values[:, 1] >= depth))[0]
        lo, hi = out.age_bounds.values[i]
        assert lo - 1e-6 <= age <= hi + 1e-6
    total = out.age_sd_reference**2 + out.age_sd_tie**2 + out.age_sd_bridge**2
    np.testing.assert_allclose(out.age_sd.values ** 2, total.values, rtol=1e-12)


def test_extrapolation_is_flagged_and_widens(tmp_path):
    lake, ice = open_record(RECORDS / "trv3_lake.nc"), open_record(RECORDS / "hvd1_ice.nc")
    with pytest.warns(TieWarning, match="extrapolated"):
        out = transfer(lake, RECORDS / "hvd1_trv3_ties.csv", ice, extrapolate=True)
    assert out.sizes["sample"] == lake.sizes["sample"]
    flagged = out.extrapolated.values == 1
    ties = read_ties(RECORDS / "hvd1_trv3_ties.csv")
    b = lake.depth_bounds.values
    beyond = (b[:, 0] < ties.position[0]) | (b[:, 1] > ties.position[-1])
    assert flagged.sum() == beyond.sum() > 0
    bridge = out.age_sd_bridge.values
    top = np.flatnonzero(flagged & (out.depth.values < 4.0))
    assert np.all(np.diff(bridge[top][::-1]) > 0)  # grows away from the first tie


def test_pchip_is_monotone_and_passes_through_ties(tmp_path):
    edges = np.linspace(0.0, 10.0, 201)
    ties = read_ties(write(tmp_path, "label,depth,ref_age,sd\nA,0,100,1\nB,2,140,1\n"
                                     "C,5,900,1\nD,10,1000,1\n"))
    out = transfer(moved_record(edges), ties, exact_reference((0.0, 2000.0)), method="pchip")
    assert np.all(np.diff(out.age.values) > 0)
    assert np.all(np.diff(out.age_bounds.values.ravel()) >= -1e-9)


def test_default_rate_is_stated_and_positive():
    rate, how = default_bridge_rate(np.array([0.0, 300.0]), np.array([0.0, 1.0]), np.zeros(2))
    assert rate == pytest.approx(4 * (0.02 * 300) ** 2 / 300) and "two ties" in how
    ages = np.array([0.0, 100.0, 300.0, 350.0, 600.0])
    rate2, how2 = default_bridge_rate(ages, np.array([0.0, 2.0, 3.0, 5.0, 6.0]), np.zeros(5))
    assert rate2 > 0 and "estimated" in how2


def test_coverage_on_synthetic_truth():
    """True ages lie inside the reported 95 % intervals for 90-99 % of samples over 200
    simulated cores: accumulation distorted smoothly (+-30 %), 4-8 ties at random horizons
    with known 1-sigma errors, default bridge rate."""
    rng = np.random.default_rng(42)
    reference = exact_reference()
    inside = total = 0
    for _ in range(200):
        edges, true_edge_age = distorted_core(rng)
        record = moved_record(edges)
        k = rng.integers(2, 7)  # inner ties, at least 20 samples apart, plus both ends
        inner = np.sort(rng.choice(np.arange(20, edges.size - 20, 20), k, replace=False))
        tie_edge = np.concatenate([[0], inner, [edges.size - 1]])
        sd = rng.uniform(1.0, 8.0, tie_edge.size)
        from align.ties import TieTable

        ties = TieTable(labels=tuple(f"t{i}" for i in range(tie_edge.size)),
                        position=edges[tie_edge], ref=true_edge_age[tie_edge] + rng.normal(0, sd),
                        ref_kind="age", sd=sd)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", TieWarning)
            out = transfer(record, ties, reference)
        true_mid = np.interp(out.depth.values, edges, true_edge_age)
        inside += int(np.sum(np.abs(out.age.values - true_mid) <= 1.96 * out.age_sd.values))
        total += out.sizes["sample"]
    coverage = inside / total
    print(f"transfer coverage of true ages by 95 % intervals: {coverage:.3f} ({total} samples)")
    assert 0.90 <= coverage <= 0.99


def test_ties_by_age_move_an_age_only_record(tmp_path):
    """A record with ages only (a published age-only download) is tied by its own ages: the
    transferred ages pass through the ties, and the bridge variance is the Brownian bridge of
    the reference-age distance to the ties, r (x - x1)(x2 - x) / (x2 - x1), written out here
    independently; the same ties given by depth on a copy with depth = own age / 1000 give the
    same record (the age position is the depth position in other units)."""
    own = np.arange(1000.0, 3000.0, 5.0) + 2.5
    record = build_record(age=own, age_reference="BP", proxies={"x": (np.zeros(own.size), {})},
                          attrs={"core": "download"})
    reference = exact_reference((900.0, 3500.0))
    ties = read_ties(write(tmp_path, "label,age,ref_age,sd\nA,1000,1100,0\nB,1800,1950,0\n"
                                     "C,3000,3300,0\n"))
    assert ties.position_kind == "age"
    rate = 4.0
    out = transfer(record, ties, reference, bridge_rate=rate)
    x = out.age.values
    np.testing.assert_allclose(x, np.interp(own, [1000, 1800, 3000], [1100, 1950, 3300]),
                               rtol=1e-12)
    x1 = np.where(x <= 1950, 1100.0, 1950.0)
    x2 = np.where(x <= 1950, 1950.0, 3300.0)
    expected = rate * (x - x1) * (x2 - x) / (x2 - x1)
    np.testing.assert_allclose(out.age_sd_bridge.values ** 2, expected, rtol=1e-9, atol=1e-9)
    by_depth = build_record(depth=own / 1000.0, age=own, age_reference="BP",
                            proxies={"x": (np.zeros(own.size), {})}, attrs={"core": "download"})
    depth_ties = read_ties(write(tmp_path, "label,depth,ref_age,sd\nA,1.0,1100,0\n"
                                           "B,1.8,1950,0\nC,3.0,3300,0\n", "d.csv"))
    same = transfer(by_depth, depth_ties, reference, bridge_rate=rate)
    np.testing.assert_allclose(same.age.values, x, rtol=1e-12)
    np.testing.assert_allclose(same.age_sd.values, out.age_sd.values, rtol=1e-9, atol=1e-9)


def test_published_age_only_table_moves_through_age_ties(tmp_path, ngrip_csv):
    """The NGRIP decadal table (Erhardt et al. 2019; tests/data) has ages only. Tied by age
    onto a b2k reference with ties at own age + 50 (the BP-to-b2k offset, exact), every
    transferred age is its own age + 50 and the uncertainty is pinned at the ties."""
    ngrip = open_record(ngrip_csv, age_column="Age_BP", age_reference="BP")
    window = ngrip.isel(sample=slice(0, 300))
    own = window.age.values
    reference = exact_reference((own[0] - 20, own[-1] + 100))
    bounds = window.age_bounds.values
    knots = [bounds[0, 0], own[100], own[200], bounds[-1, 1]]
    rows = "".join(f"t{i},{a:.1f},{a + 50:.1f},2\n" for i, a in enumerate(knots))
    out = transfer(window, read_ties(write(tmp_path, "label,age,ref_age,sd\n" + rows)),
                   reference)
    np.testing.assert_allclose(out.age.values, own + 50.0, atol=1e-9)
    assert out.sizes["sample"] == 300
    at_inner_ties = out.age_sd.values[[100, 200]]
    assert np.all(at_inner_ties <= 2.0 + 1e-9) and out.age_sd.values.max() > 2.5


def test_a_depth_only_record_cannot_take_age_ties(tmp_path):
    record = moved_record(np.linspace(0.0, 10.0, 101))
    ties = read_ties(write(tmp_path, "label,age,ref_age,sd\nA,1,100,1\nB,2,200,1\n"))
    with pytest.raises(InputError, match="no ages"):
        transfer(record, ties, exact_reference((0.0, 500.0)))
