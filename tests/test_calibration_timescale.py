"""Calibration of the lag when two records name the same timescale (issue 13, item 1).

Generator (``synthetic.spike_core``): 2-yr samples on a true age axis, a spike of 40 noise sd
beginning in the sample whose true interval holds the event; the stated ages are the truth
plus the timescale's real error. Nominal rate: 95 % intervals; tolerance: coverage in
0.90-0.99 over 200 trials (binomial sd 1.5 %, so the band is about -3 to +2.7 sd).
"""

import warnings

import numpy as np
import pytest

from align.lag import estimate_lag
from align.ties import read_ties, transfer
from synthetic import ou_age_error, spike_core

TRIALS = 200


def mce(t):
    """A counted timescale's maximum counting error (yr): 50 yr growing 5 yr per century."""
    return 50.0 + 0.05 * (np.asarray(t, dtype=float) - 10_000.0)


def event_spec(record, centre, half=100.0):
    return {"kind": "event", "record": record, "variable": "s",
            "window": [centre - half, centre + half]}


def synchronised_trial(rng, sync_sd):
    """Core A is layer-counted (states its MCE); core B is synchronised onto A's timescale
    (states no uncertainty of its own, as NEEM on GICC05) with a synchronisation error
    ``d ~ N(0, sync_sd)`` at the marker. Both share one counting error ``z MCE / 2``."""
    event_a = rng.uniform(10_300, 10_700)
    event_b = event_a - rng.uniform(-60, 60)
    z, d = rng.normal(), rng.normal(0.0, sync_sd)
    a = spike_core(rng, event_a, lambda t: z * mce(t) / 2, name="A", timescale="T",
                   kind="layer-counted", mce=mce)
    b = spike_core(rng, event_b, lambda t: z * mce(t) / 2 + d, name="B", timescale="T",
                   kind="layer-counted")
    stated_a, stated_b = event_a + z * mce(event_a) / 2, event_b + z * mce(event_b) / 2 + d
    result = estimate_lag(event_spec(a, stated_a), event_spec(b, stated_b), draws=4000,
                          sync_sd=sync_sd, seed=int(rng.integers(2**31)))
    return result, event_a - event_b


def mislabelled_trial(rng):
    """Two lake cores, each with its own modelled age model (one N(0, 40 yr) error per core,
    stated as ``age_sd = 40``), both labelled with the same timescale name."""
    event_a = rng.uniform(10_300, 10_700)
    event_b = event_a - rng.uniform(-60, 60)
    shift_a, shift_b = rng.normal(0.0, 40.0, 2)
    a = spike_core(rng, event_a, lambda t: shift_a + 0 * t, name="Lake1", timescale="varves",
                   kind="modelled", sd=40.0)
    b = spike_core(rng, event_b, lambda t: shift_b + 0 * t, name="Lake2", timescale="varves",
                   kind="modelled", sd=40.0)
    result = estimate_lag(event_spec(a, event_a + shift_a), event_spec(b, event_b + shift_b),
                          draws=4000, seed=int(rng.integers(2**31)))
    return result, event_a - event_b


def coverage(trial, rng, *args):
    hits = 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for _ in range(TRIALS):
            result, truth = trial(rng, *args)
            hits += result.lag.ci95[0] <= truth <= result.lag.ci95[1]
    return hits / TRIALS, result


@pytest.mark.slow
def test_synchronised_cores_cover_the_true_lag():
    cover, result = coverage(synchronised_trial, np.random.default_rng(131), 15.0)
    print(f"synchronised cores (sync sd 15 yr): coverage {cover:.3f} of {TRIALS}")
    assert result.relation == "shared timescale"
    assert 0.90 <= cover <= 0.99


@pytest.mark.slow
def test_same_name_without_a_counted_timescale_is_independent_and_covers():
    cover, result = coverage(mislabelled_trial, np.random.default_rng(132))
    print(f"two modelled cores sharing a timescale name: coverage {cover:.3f} of {TRIALS}")
    assert result.relation == "independent"
    assert any("varves" in line and "independent" in line for line in result.assumptions)
    assert 0.90 <= cover <= 0.99


def test_one_records_counting_profile_serves_both():
    """NGRIP-like core with its MCE, NEEM-like core on the same counted timescale with none:
    markers 11 yr apart share almost all of the counting error. Expected timescale sd from
    the correlated model's formula |MCE(x2) - MCE(x1)| / 2 (Andersen et al. 2006 MCE as
    2 sigma), not the absolute sd MCE / 2 (about 35 yr here)."""
    rng = np.random.default_rng(5)
    a = spike_core(rng, 10_500.5, lambda t: 0 * t, name="A", timescale="T",
                   kind="layer-counted", mce=mce)
    b = spike_core(rng, 10_489.5, lambda t: 0 * t, name="B", timescale="T",
                   kind="layer-counted")
    with pytest.warns(UserWarning, match="B.*layer-counted.*no age uncertainty"):
        result = estimate_lag(event_spec(a, 10_500), event_spec(b, 10_490), draws=20_000,
                              seed=1, sync_sd=0.0)
    rows = [item for item in result.budget if item.kind == "timescale"]
    assert len(rows) == 1
    expected = abs(mce(result.a.sample.age_interval[0] + 1) - mce(
        result.b.sample.age_interval[0] + 1)) / 2
    assert rows[0].sd == pytest.approx(expected, rel=0.05, abs=0.02)
    assert rows[0].sd < 1.0


def test_sync_error_is_a_budget_item_an_assumption_and_a_what_if_row():
    rng = np.random.default_rng(6)
    a = spike_core(rng, 10_500.5, lambda t: 0 * t, name="A", timescale="T",
                   kind="layer-counted", mce=mce)
    b = spike_core(rng, 10_480.5, lambda t: 0 * t, name="B", timescale="T",
                   kind="layer-counted", mce=mce)
    result = estimate_lag(event_spec(a, 10_500), event_spec(b, 10_480), draws=20_000, seed=2)
    from align.choices import DEFAULT_SYNC_SD

    sync = [item for item in result.budget if item.kind == "sync"]
    assert len(sync) == 1 and sync[0].sd == pytest.approx(DEFAULT_SYNC_SD, rel=0.03)
    assert any(f"{DEFAULT_SYNC_SD:g} yr" in line and "default" in line
               for line in result.assumptions)
    row = next(w for w in result.what_if if w.key == "halve_sync")
    assert row.width < result.lag.ci95[1] - result.lag.ci95[0]


def test_no_uncertainty_anywhere_gives_no_empty_timescale_rows():
    rng = np.random.default_rng(7)
    a = spike_core(rng, 10_500.5, lambda t: 0 * t, name="A", timescale="T",
                   kind="layer-counted")
    b = spike_core(rng, 10_480.5, lambda t: 0 * t, name="B", timescale="U")
    with pytest.warns(UserWarning, match="A.*layer-counted.*no age uncertainty"):
        result = estimate_lag(event_spec(a, 10_500), event_spec(b, 10_480), draws=5000,
                              seed=3)
    assert result.relation == "independent"
    assert all(item.sd > 0 for item in result.budget)
    assert not [item for item in result.budget if item.kind == "timescale"]


# --------------------------------------------------------------------------------------------
# model sensitivity (issue 13, item 6)


def published_profile(greenland):
    """GICC05 MCE at the tabulated onsets of Rasmussen et al. (2014),
    doi:10.1016/j.quascirev.2014.09.007 (tests/data/greenland/GIS_table.txt), by age."""
    import pandas as pd

    table = pd.read_csv(greenland / "GIS_table.txt", sep="\t", comment="#")
    order = np.argsort(table["Age"].to_numpy(float))
    return table["Age"].to_numpy(float)[order], table["MCE"].to_numpy(float)[order]


def test_random_walk_is_a_walk_of_uncertain_layers_on_the_published_profile(greenland):
    """The random-walk model re-derived from the MCE's definition (Andersen et al. 2006,
    doi:10.1016/j.quascirev.2006.08.002: each uncertain layer counted 0.5 +- 0.5 yr, the MCE
    their sum): 2 MCE uncertain layers, each 0 or 1 yr with equal odds. Reference: that
    counting process simulated directly (binomial number of real layers among the uncertain
    ones) at the published MCEs, against the model's accumulated sd."""
    from align.timescale import layer_sd, mce_covariance

    age, mce = published_profile(greenland)
    rng = np.random.default_rng(12)
    counted = rng.binomial((2 * mce).astype(int)[:, None], 0.5, (mce.size, 40_000))
    simulated = (counted - mce[:, None]).std(axis=1)
    model = np.sqrt(np.diag(mce_covariance(mce, "random-walk")))
    np.testing.assert_allclose(model, simulated, rtol=0.02)
    assert np.sqrt(np.diag(mce_covariance(mce, "correlated"))) == pytest.approx(mce / 2)
    # the miscount per year of ice it implies: a small fraction of a year
    per_year = layer_sd(mce[[0, -1]], age[[0, -1]])[0]
    between = layer_sd(mce, age)
    print(f"random walk: {per_year:.3f} yr per year of ice over {age[0]:.0f}-{age[-1]:.0f} b2k "
          f"({between.min():.2f}-{between.max():.2f} between neighbouring events)")
    assert 0.1 < per_year < 0.25 and between.max() < 0.5
    # the walk it replaces (accumulated sd MCE / 2) needed years of miscount per year of ice
    old = np.sqrt(np.diff((mce[[0, -1]] / 2) ** 2) / np.diff(age[[0, -1]]))[0]
    assert old > 5.0


def counted_pair(rng, mce_of=mce):
    """Two events 20-60 yr apart in one layer-counted core (stated MCE, no real error)."""
    a = spike_core(rng, 10_500.5, lambda t: 0 * t, name="A", timescale="T",
                   kind="layer-counted", mce=mce_of)
    b = spike_core(rng, 10_300.5, lambda t: 0 * t, name="A", timescale="T",
                   kind="layer-counted", mce=mce_of)
    return event_spec(a, 10_500), event_spec(b, 10_300)


def test_other_counting_model_row_is_the_lag_redrawn_under_it():
    """Reference: the same lag computed under the other model with the same seed (the
    what-if row redraws only the timescale part, from the same random numbers)."""
    a, b = counted_pair(np.random.default_rng(8))
    result = estimate_lag(a, b, draws=5000, seed=4)
    other = estimate_lag(a, b, draws=5000, seed=4, timescale_model="random-walk")
    row = next(w for w in result.what_if if w.key == "other_counting_model")
    assert row.ci95 == pytest.approx(other.lag.ci95, rel=1e-12)
    assert row.width < result.lag.ci95[1] - result.lag.ci95[0]  # 200 yr: 10 yr vs sqrt(5) yr
    line = next(x for x in result.assumptions if x.startswith("Under the other counting"))
    assert f"{row.ci95[0]:.0f} to {row.ci95[1]:.0f} years" in line and "random-walk" in line
    back = next(w for w in other.what_if if w.key == "other_counting_model")
    assert back.ci95 == pytest.approx(result.lag.ci95, rel=1e-12)
    assert any("0.5 yr" in x and "per year of ice" in x for x in other.assumptions)


def test_bridge_rate_rows_are_the_lag_with_the_rate_halved_and_doubled(tmp_path):
    """Reference: the lag recomputed with the bridge rate halved and doubled, same seed."""
    rng = np.random.default_rng(9)
    a = spike_core(rng, 10_500.5, lambda t: 0 * t, name="A", timescale="T",
                   kind="layer-counted", mce=mce)
    b = spike_core(rng, 10_470.5, lambda t: 0 * t, name="B", timescale="B-model",
                   kind="modelled")
    ties = tmp_path / "ties.csv"
    ties.write_text("label,age,ref_age,sd\nt1,10100,10100,3\nt2,10400,10400,3\n"
                    "t3,10800,10800,3\n")
    options = dict(draws=5000, seed=5, ties=str(ties))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # samples beyond the outer ties are left out
        result = estimate_lag(event_spec(a, 10_500), event_spec(b, 10_470), **options)
    assert result.relation == "tied"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rate = float(transfer(b, read_ties(ties), a).attrs["bridge_rate"])
    rows = {w.key: w for w in result.what_if}
    for key, factor in (("bridge_rate_half", 0.5), ("bridge_rate_double", 2.0)):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            redone = estimate_lag(event_spec(a, 10_500), event_spec(b, 10_470),
                                  bridge_rate=rate * factor, **options)
        assert rows[key].ci95 == pytest.approx(redone.lag.ci95, rel=1e-3)
    assert rows["bridge_rate_half"].width < rows["bridge_rate_double"].width
    assert any("bridge rate halved" in x for x in result.assumptions)


def modelled_trial(rng, scale, sd=40.0):
    """One lake core with a modelled timescale stated as ``age_sd = sd``: its real error is an
    Ornstein-Uhlenbeck process of sd ``sd`` and age scale ``scale`` (``synthetic.ou_age_error``);
    two events 100-300 yr apart (beyond its 50-yr knots). The proxy noise is the same in
    every trial (what varies is the timescale error and where the events sit), which keeps
    the detections cheap. Returns (result, true lag)."""
    error = ou_age_error(rng, sd, scale)
    event_a = rng.uniform(10_500, 10_800)
    event_b = event_a - rng.uniform(100, 300)
    a, b = (spike_core(np.random.default_rng(k), e, error, name="Lake", timescale="varves",
                       kind="modelled", sd=sd) for k, e in enumerate((event_a, event_b)))
    stated = [e + float(error(e)) for e in (event_a, event_b)]
    result = estimate_lag(event_spec(a, stated[0], 30.0), event_spec(b, stated[1], 30.0),
                          draws=2000,
                          age_error_scale=scale, seed=int(rng.integers(2**31)))
    return result, event_a - event_b


@pytest.mark.slow
def test_sd_only_timescale_correlated_over_its_scale_covers():
    """Nominal 95 %; tolerance 0.90-0.99 over 150 trials (binomial sd 1.8 %). The
    independent-depths row (the old treatment) must visibly over-cover and be wider."""
    rng = np.random.default_rng(133)
    hits, free, ratio = [], [], []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for _ in range(150):
            result, truth = modelled_trial(rng, 2000.0)
            row = next(w for w in result.what_if if w.key == "timescale_independent")
            hits.append(result.lag.ci95[0] <= truth <= result.lag.ci95[1])
            free.append(row.ci95[0] <= truth <= row.ci95[1])
            ratio.append(row.width / (result.lag.ci95[1] - result.lag.ci95[0]))
    cover, cover_free = np.mean(hits), np.mean(free)
    print(f"sd-only timescale, OU error of scale 2000 yr: coverage {cover:.3f}; independent "
          f"depths {cover_free:.3f}, {np.median(ratio):.1f}x wider")
    assert result.relation == "same timescale"
    assert 0.90 <= cover <= 0.99
    assert cover_free >= 0.995 and np.median(ratio) > 3


def test_sd_covariance_is_the_covariance_of_an_ou_process():
    """Reference: an Ornstein-Uhlenbeck process simulated exactly by its AR(1) recursion at
    irregular ages (40,000 paths, numpy), its sample covariance against the formula."""
    from align.timescale import sd_covariance

    ages, sd, scale = np.array([0.0, 7.0, 50.0, 400.0, 1500.0]), 30.0, 500.0
    rng = np.random.default_rng(21)
    path = np.empty((40_000, ages.size))
    path[:, 0] = rng.normal(0.0, sd, 40_000)
    for k, rho in enumerate(np.exp(-np.diff(ages) / scale), start=1):
        path[:, k] = rho * path[:, k - 1] + rng.normal(0.0, sd * np.sqrt(1 - rho**2), 40_000)
    expected = sd_covariance(np.full(ages.size, sd), ages, scale)
    np.testing.assert_allclose(np.cov(path, rowvar=False), expected, atol=0.03 * sd**2)
    assert np.allclose(sd_covariance([1.0, 2.0], [0.0, 5.0], 0.0), np.diag([1.0, 4.0]))
    assert np.allclose(sd_covariance([1.0, 2.0], [0.0, 5.0], np.inf), [[1, 2], [2, 4]])


def test_an_age_ensemble_is_recommended_when_the_correlation_decides_the_verdict():
    """Two events 20 yr apart in one modelled core: with a 40-yr sd the verdict differs
    between fully correlated and independent errors, with a 1-yr sd it does not."""
    def lag(sd):
        rng = np.random.default_rng(22)
        a, b = (spike_core(rng, e, lambda t: 0 * t, name="C", timescale="M",
                           kind="modelled", sd=sd) for e in (10_500.5, 10_480.5))
        return estimate_lag(event_spec(a, 10_500, 30.0), event_spec(b, 10_480, 30.0),
                            draws=5000, seed=3)

    wide, narrow = lag(40.0), lag(1.0)
    for result in (wide, narrow):
        assert result.relation == "same timescale"
        assert {"timescale_fully_correlated", "timescale_independent"} <= {
            w.key for w in result.what_if}
        assert any("exp(-|age difference| / 1000 yr)" in x and "default" in x
                   for x in result.assumptions)
    free = next(w for w in wide.what_if if w.key == "timescale_independent")
    assert wide.lag.ci95[0] > 0 and free.ci95[0] < 0 < free.ci95[1]
    assert any("age ensemble" in x and "decide" in x for x in wide.assumptions)
    assert not any("decide" in x for x in narrow.assumptions)
