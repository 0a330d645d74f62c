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
from synthetic import spike_core

TRIALS = 200


def mce(t):
    """A counted timescale's maximum counting error (yr): 50 yr growing 5 yr per century."""
    return 50.0 + 0.05 * (np.asarray(t, dtype=float) - 10_000.0)


def event_spec(record, centre):
    return {"kind": "event", "record": record, "variable": "s",
            "window": [centre - 100.0, centre + 100.0]}


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
