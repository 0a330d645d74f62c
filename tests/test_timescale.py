"""Layer-counting error models and age ensembles."""

import warnings

import numpy as np
import pytest

from align import open_record, transfer
from align.record import build_record
from align.timescale import age_ensemble, error_covariance, mce_covariance, relative_sd
from conftest import RECORDS


def gis_rows(greenland, events=("Holocene", "GI-1e")):
    """Rows of the published Greenland event table (Rasmussen et al. 2014,
    doi:10.1016/j.quascirev.2014.09.007; tests/data/greenland/GIS_table.txt)."""
    import pandas as pd

    table = pd.read_csv(greenland / "GIS_table.txt", sep="\t", comment="#")
    rows = table.set_index("Event").loc[list(events)]
    return rows["Age"].to_numpy(float), rows["MCE"].to_numpy(float)


def test_published_mce_relative_and_absolute_sd(greenland):
    # GICC05: MCE 99 yr at 11,703 b2k and 186 yr at 14,692 b2k (Rasmussen et al. 2014);
    # MCE taken as 2 sigma (Andersen et al. 2006; common practice)
    age, mce = gis_rows(greenland)
    assert age.tolist() == [11703, 14692] and mce.tolist() == [99, 186]
    record = build_record(age=age, age_reference="b2k", age_mce=mce,
                          age_bounds=np.column_stack([age - 5, age + 5]),
                          proxies={"x": (np.zeros(2), {})})
    cov = error_covariance(record, age)
    np.testing.assert_allclose(np.sqrt(np.diag(cov)), [49.5, 93.0])
    rel = np.sqrt(cov[0, 0] + cov[1, 1] - 2 * cov[0, 1])
    assert rel == pytest.approx(43.5, abs=1e-9)
    assert relative_sd(99, 186) == pytest.approx((186 - 99) / 2)
    # the independent-layer model: 2 MCE uncertain layers of sd 0.5 yr (Andersen et al. 2006's
    # 0.5 +- 0.5 yr per uncertain layer), so the relative variance is (186 - 99) / 2 yr^2
    assert relative_sd(99, 186, "random-walk") == pytest.approx(np.sqrt((186 - 99) / 2))


def test_covariance_models_are_positive_semidefinite():
    mce = np.linspace(10, 300, 30)
    for model in ("correlated", "random-walk"):
        eig = np.linalg.eigvalsh(mce_covariance(mce, model))
        assert eig.min() > -1e-8 * eig.max()


@pytest.fixture
def small_blocks(monkeypatch):
    """Draw ensembles in many small blocks, so that the block seams are exercised."""
    import align.timescale

    monkeypatch.setattr(align.timescale, "DRAW_BLOCK", 13)


@pytest.mark.parametrize("model", ["correlated", "random-walk"])
def test_counted_ensemble_monotonic_and_spread_matches(model, small_blocks):
    ice = open_record(RECORDS / "hvd1_ice.nc")
    members = 2000
    ens = age_ensemble(ice, members, seed=5, model=model).values
    assert ens.shape == (ice.sizes["sample"], members)
    assert np.all(np.diff(ens, axis=0) >= 0), "a member has an age reversal"
    # correlated: MCE / 2; random walk: 2 MCE uncertain layers of sd 0.5 yr each
    sd = ice.age_mce.values / 2 if model == "correlated" else np.sqrt(ice.age_mce.values / 2)
    spread = ens.std(axis=1)
    # sampling error of an sd from n draws: sd / sqrt(2 (n - 1)); allow 4 of them
    np.testing.assert_allclose(spread, sd, rtol=4 / np.sqrt(2 * (members - 1)))
    np.testing.assert_allclose(ens.mean(axis=1), ice.age.values,
                               atol=4 * sd.max() / np.sqrt(members))


def test_transferred_ensemble_monotonic_and_spread_matches(small_blocks):
    lake, ice = open_record(RECORDS / "trv3_lake.nc"), open_record(RECORDS / "hvd1_ice.nc")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        moved = transfer(lake, RECORDS / "hvd1_trv3_ties.csv", ice, extrapolate=True)
    members = 4000
    ens = age_ensemble(moved, members, seed=11).values
    assert np.all(np.diff(ens, axis=0) >= 0)
    np.testing.assert_allclose(ens.std(axis=1), moved.age_sd.values,
                               rtol=4 / np.sqrt(2 * (members - 1)) + 0.01)


def test_ensemble_is_reproducible_and_recorded():
    ice = open_record(RECORDS / "hvd1_ice.nc")
    a = age_ensemble(ice, 50, seed=3, model="random-walk")
    b = age_ensemble(ice, 50, seed=3, model="random-walk")
    c = age_ensemble(ice, 50, seed=4, model="random-walk")
    np.testing.assert_array_equal(a.values, b.values)
    assert not np.array_equal(a.values, c.values)
    assert a.attrs["seed"] == 3 and a.attrs["model"] == "random-walk"
