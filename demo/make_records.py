"""Generate the bundled demo records: an invented scenario with synthetic data and a known truth.

Scenario (invented; no real site, core or event): the HVD-1 ice core from Hvitdal Dome is
layer-counted; its sulfate shows volcanic spikes and its d18O two climate transitions. The
TRV-3 sediment core from Lake Torvlund has a modelled (radiocarbon-style) age model with an
ensemble, 10-40-year slices, carbonate d18O with the same two transitions, and tephra layers
from four of the eruptions. The question the demo answers: did eruption V2 (a sulfate spike in
the ice) happen before the cooling onset recorded in the lake, and by how much?

Run from the project root::

    python demo/make_records.py

It rewrites ``records/`` deterministically (fixed seed) and the truth table in
``records/README.md`` and ``records/truth.json``.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np

from align.ages import convert_age
from align.io import save_record
from align.record import build_record

SEED = 20261201
ROOT = Path(__file__).resolve().parents[1]
RECORDS = ROOT / "records"

# ---- the truth (true calendar ages, years b2k) --------------------------------------------
SPAN = (11_300.0, 13_100.0)
ERUPTIONS = {"V0": 11_480.0, "V1": 11_905.0, "V2": 12_260.0, "V3": 12_610.0, "V4": 12_990.0}
SULFATE_PEAK = {"V0": 170.0, "V1": 210.0, "V2": 420.0, "V3": 160.0, "V4": 240.0}
TEPHRA_IN_LAKE = ("V0", "V1", "V3", "V4")  # eruptions whose tephra reached the lake: the ties
#: Climate transitions: (true onset age, duration yr, ice d18O step, lake d18O step).
TRANSITIONS = {"X1 cooling": (12_170.0, 90.0, -4.0, -2.4),
               "X2 warming": (11_650.0, 50.0, 4.5, 2.8)}
EVENT_OF_INTEREST = "V2"
ONSET_OF_INTEREST = "X1 cooling"


def climate(t, column):
    """Noise-free proxy level at true ages ``t`` (column 2: ice d18O step, 3: lake d18O)."""
    base = {2: -38.0, 3: -6.0}[column]
    level = np.full_like(t, base, dtype=float)
    for onset, duration, *steps in TRANSITIONS.values():
        frac = np.clip((onset - t) / duration, 0.0, 1.0)  # 0 before (older), 1 after
        level += steps[column - 2] * frac
    return level


def ar1(rng, n, coefficient, sd):
    """AR(1) noise with lag-1 coefficient ``coefficient`` and marginal sd ``sd``."""
    eps = rng.normal(0.0, sd * np.sqrt(1.0 - coefficient**2), n)
    out = np.empty(n)
    out[0] = rng.normal(0.0, sd)
    for i in range(1, n):
        out[i] = coefficient * out[i - 1] + eps[i]
    return out


def interval_mean(fine_t, fine_values, lo, hi):
    """Mean of a finely tabulated signal over each [lo, hi] (sample integration)."""
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (fine_values[1:] + fine_values[:-1])
                                           * np.diff(fine_t))])
    return (np.interp(hi, fine_t, cum) - np.interp(lo, fine_t, cum)) / (hi - lo)


def smooth_field(rng, x, sd, length, size=1):
    """Smooth Gaussian random functions on ``x`` (squared-exponential covariance)."""
    cov = sd**2 * np.exp(-0.5 * ((x[:, None] - x[None, :]) / length) ** 2)
    chol = np.linalg.cholesky(cov + 1e-9 * sd**2 * np.eye(x.size))
    return (chol @ rng.standard_normal((x.size, size))).T


# ---- the ice core --------------------------------------------------------------------------


def make_ice(rng):
    fine_t = np.arange(SPAN[0] - 50, SPAN[1] + 50, 0.05)
    cold = (fine_t < 12_170) & (fine_t > 11_650)
    accumulation = np.where(cold, 0.013, 0.045) * (1 + 0.08 * np.sin(fine_t / 37.0))
    depth_of_t = 1402.0 + np.concatenate([[0.0], np.cumsum(accumulation[:-1] * 0.05)])
    edges = np.arange(depth_of_t[np.searchsorted(fine_t, SPAN[0])],
                      depth_of_t[np.searchsorted(fine_t, SPAN[1])], 0.05)
    edges = np.round(edges, 4)
    lost = (edges > 1420.4) & (edges < 1420.95)  # a lost 0.55 m core section (no samples)
    top, bottom = edges[:-1], edges[1:]
    keep = ~(lost[:-1] | lost[1:])
    top, bottom = top[keep], bottom[keep]
    true_top, true_bottom = (np.interp(d, depth_of_t, fine_t) for d in (top, bottom))
    mce_of_t = lambda t: 90.0 + 0.04 * (t - SPAN[0])  # noqa: E731 - a one-line profile
    z = rng.normal()  # the one counting-error realisation of this core (correlated model)
    counted = lambda t: t + z * mce_of_t(t) / 2.0  # noqa: E731
    age_bounds = np.column_stack([counted(true_top), counted(true_bottom)])
    mid_true = 0.5 * (true_top + true_bottom)
    spikes = np.zeros_like(fine_t)
    for name, when in ERUPTIONS.items():
        after = np.clip(when - fine_t, 0.0, None)  # years after the eruption began
        spikes += np.where((fine_t <= when) & (after < 4.0),
                           SULFATE_PEAK[name] * (after / 0.4) * np.exp(1 - after / 0.4), 0.0)
    sulfate = interval_mean(fine_t, spikes, true_top, true_bottom)
    n = top.size
    sulfate = sulfate + 25.0 + ar1(rng, n, 0.3, 3.0)  # background with red noise
    d18o = interval_mean(fine_t, climate(fine_t, 2), true_top, true_bottom)
    d18o = d18o + ar1(rng, n, 0.6, 0.8)
    sulfate[rng.choice(n, 12, replace=False)] = np.nan  # broken samples
    d18o[rng.choice(n, 20, replace=False)] = np.nan
    record = build_record(
        depth=0.5 * (top + bottom), depth_bounds=np.column_stack([top, bottom]),
        age=age_bounds.mean(axis=1), age_bounds=age_bounds, age_reference="b2k",
        age_mce=mce_of_t(mid_true),
        proxies={"sulfate": (sulfate, {"units": "ng g-1", "long_name": "sulfate concentration"}),
                 "d18O": (d18o, {"units": "1e-3",
                                 "long_name": "oxygen isotope ratio d18O of ice vs VSMOW"})},
        attrs={"archive": "ice", "site": "Hvitdal Dome (invented)", "core": "HVD-1",
               "timescale": "HVD-count-1 (synthetic layer count)",
               "timescale_kind": "layer-counted",
               "comment": "SYNTHETIC demo record generated by demo/make_records.py; "
                          "invented site, no real data"})
    truth = {"counting_error_z": float(z),
             "depth_of": lambda t: float(np.interp(t, fine_t, depth_of_t)),
             "counted_age": lambda t: float(counted(t)), "mce": lambda t: float(mce_of_t(t))}
    return record, truth


# ---- the lake core -------------------------------------------------------------------------


def make_lake(rng, members=500):
    fine_t = np.arange(SPAN[0] - 100, SPAN[1] + 100, 0.5)
    rate = 0.55 + 0.10 * np.sin(fine_t / 90.0) + 0.04 * np.sin(fine_t / 23.0)  # mm/yr
    depth_of_t = 3.80 + np.concatenate([[0.0], np.cumsum(rate[:-1] * 0.5)]) / 1000.0
    edges = np.round(np.arange(depth_of_t[np.searchsorted(fine_t, SPAN[0])],
                               depth_of_t[np.searchsorted(fine_t, SPAN[1])], 0.01), 4)
    top, bottom = edges[:-1], edges[1:]
    true_top, true_bottom = (np.interp(d, depth_of_t, fine_t) for d in (top, bottom))
    mid = 0.5 * (top + bottom)
    n = mid.size
    # the modelled age model: truth plus one smooth error realisation; the ensemble spreads
    # around the model with the same covariance (a radiocarbon-style age model)
    model_error_sd, length = 45.0, 0.25
    fields = smooth_field(rng, edges, model_error_sd, length, size=members + 21)
    true_edges = np.interp(edges, depth_of_t, fine_t)
    model_edges = true_edges + fields[0]
    ens_edges = model_edges[None, :] + fields[1:]
    keep = np.all(np.diff(ens_edges, axis=1) > 0, axis=1)
    ens_edges = ens_edges[keep][:members]
    ensemble = 0.5 * (ens_edges[:, 1:] + ens_edges[:, :-1]).T  # (sample, member)
    bp = lambda a: convert_age(a, "b2k", "BP")  # noqa: E731 - lake ages are stored in BP
    d18o = interval_mean(fine_t, climate(fine_t, 3), true_top, true_bottom)
    d18o = d18o + ar1(rng, n, 0.5, 0.3)
    tephra = np.abs(rng.normal(0.0, 3.0, n))
    for name in TEPHRA_IN_LAKE:
        i = np.searchsorted(true_bottom, ERUPTIONS[name])
        tephra[i] += 400.0 + 300.0 * rng.random()
        tephra[min(i + 1, n - 1)] += 40.0  # bioturbation tail
    lost = rng.choice(np.arange(5, n - 5), 4, replace=False)
    d18o[lost] = np.nan
    record = build_record(
        depth=mid, depth_bounds=np.column_stack([top, bottom]),
        age=bp(0.5 * (model_edges[1:] + model_edges[:-1])), age_reference="BP",
        age_bounds=np.column_stack([bp(model_edges[:-1]), bp(model_edges[1:])]),
        age_sd=np.std(ensemble, axis=1), age_ensemble=bp(ensemble),
        proxies={"d18O": (d18o, {"units": "1e-3",
                                 "long_name": "oxygen isotope ratio d18O of carbonate vs VPDB"}),
                 "tephra": (tephra, {"units": "g-1", "long_name": "volcanic glass shards per "
                                                                  "gram dry sediment"})},
        attrs={"archive": "lake", "site": "Lake Torvlund (invented)", "core": "TRV-3",
               "timescale": "TRV-3 age model (synthetic)", "timescale_kind": "modelled",
               "comment": "SYNTHETIC demo record generated by demo/make_records.py; "
                          "invented site, no real data"})
    truth = {"depth_of": lambda t: float(np.interp(t, fine_t, depth_of_t)),
             "slice_of": lambda t: int(np.searchsorted(true_bottom, t))}
    return record, truth


def write_ties(ice_truth, lake, lake_truth, rng):
    rows = ["label,depth,ref_depth,sd"]
    for name in TEPHRA_IN_LAKE:
        i = lake_truth["slice_of"](ERUPTIONS[name])
        lake_depth = float(lake["depth"].values[i])  # the tephra is found in one 1-cm slice
        ice_depth = ice_truth["depth_of"](ERUPTIONS[name]) + rng.normal(0, 0.005)
        width = float(np.diff(lake["age_bounds"].values[i])[0])
        rows.append(f"tephra {name},{lake_depth:.3f},{ice_depth:.3f},{width / np.sqrt(12):.1f}")
    (RECORDS / "hvd1_trv3_ties.csv").write_text("\n".join(rows) + "\n")


def write_request():
    event, onset = ERUPTIONS[EVENT_OF_INTEREST], TRANSITIONS[ONSET_OF_INTEREST][0]
    request = {
        "a": {"kind": "event", "record": "hvd1_ice.nc", "variable": "sulfate",
              "window": [round(event - 150, -1), round(event + 150, -1)]},
        "b": {"kind": "onset", "record": "trv3_lake.nc", "variable": "d18O",
              "window": [round(onset - 270, -1), round(onset + 330, -1)]},
        "ties": "hvd1_trv3_ties.csv", "age_reference": "b2k", "draws": 20000, "seed": 1}
    (RECORDS / "demo_lag_request.json").write_text(json.dumps(request, indent=2) + "\n")


def write_survey(ice_truth):
    """An event table of the two transitions (rounded ages on the ice timescale, as a person
    would read them off a plot) and a survey of ice-versus-lake onsets through the ties."""
    rows = ["label,age"] + [f"{name},{round(ice_truth['counted_age'](onset), -1):.0f}"
                            for name, (onset, *_) in TRANSITIONS.items()]
    (RECORDS / "demo_transitions.csv").write_text("\n".join(rows) + "\n")
    spec = {
        "table": {"path": "demo_transitions.csv", "label_column": "label", "age_column": "age",
                  "age_reference": "b2k", "window": [-250, 250]},
        "a": {"kind": "onset", "record": "hvd1_ice.nc", "variable": "d18O"},
        "b": {"kind": "onset", "record": "trv3_lake.nc", "variable": "d18O"},
        "ties": "hvd1_trv3_ties.csv", "age_reference": "b2k", "draws": 20000, "seed": 1}
    (RECORDS / "demo_survey.json").write_text(json.dumps(spec, indent=2) + "\n")


def write_truth(ice_truth):
    event, (onset, *_) = ERUPTIONS[EVENT_OF_INTEREST], TRANSITIONS[ONSET_OF_INTEREST]
    truth = {
        "age_reference": "b2k",
        "event": {"label": EVENT_OF_INTEREST, "true_age": event,
                  "age_on_ice_timescale": round(ice_truth["counted_age"](event), 1)},
        "onset": {"label": ONSET_OF_INTEREST, "true_age": onset,
                  "age_on_ice_timescale": round(ice_truth["counted_age"](onset), 1)},
        "lag": event - onset,
        "lag_on_ice_timescale": round(ice_truth["counted_age"](event)
                                      - ice_truth["counted_age"](onset), 1),
        "eruptions": ERUPTIONS, "tephra_ties": list(TEPHRA_IN_LAKE),
        "transitions": {k: {"onset": v[0], "duration": v[1]} for k, v in TRANSITIONS.items()},
        "ice_counting_error_z": round(ice_truth["counting_error_z"], 4),
        "seed": SEED}
    (RECORDS / "truth.json").write_text(json.dumps(truth, indent=2) + "\n")
    table = "\n".join([
        "| quantity | true value (yr b2k) | on the HVD-1 counted timescale |",
        "| --- | --- | --- |",
        f"| eruption {EVENT_OF_INTEREST} begins (sulfate event) | {event:.0f} | "
        f"{truth['event']['age_on_ice_timescale']:.1f} |",
        f"| {ONSET_OF_INTEREST} onset in the lake | {onset:.0f} | "
        f"{truth['onset']['age_on_ice_timescale']:.1f} |",
        f"| lag = event - onset | {truth['lag']:+.0f} (V2 precedes the onset) | "
        f"{truth['lag_on_ice_timescale']:+.1f} |",
        *[f"| eruption {k} | {v:.0f} | {ice_truth['counted_age'](v):.1f} |"
          for k, v in ERUPTIONS.items() if k != EVENT_OF_INTEREST],
        *[f"| {k} onset (ice and lake together), duration {v[1]:.0f} yr | {v[0]:.0f} | "
          f"{ice_truth['counted_age'](v[0]):.1f} |" for k, v in TRANSITIONS.items()],
    ])
    readme = RECORDS / "README.md"
    text = readme.read_text()
    block = f"<!-- truth:start -->\n{table}\n<!-- truth:end -->"
    readme.write_text(re.sub(r"<!-- truth:start -->.*<!-- truth:end -->", block, text,
                             flags=re.S))


def main():
    rng = np.random.default_rng(SEED)
    ice, ice_truth = make_ice(rng)
    lake, lake_truth = make_lake(rng)
    save_record(ice, RECORDS / "hvd1_ice.nc", history="generated by demo/make_records.py")
    save_record(lake, RECORDS / "trv3_lake.nc", history="generated by demo/make_records.py")
    write_ties(ice_truth, lake, lake_truth, rng)
    write_request()
    write_survey(ice_truth)
    write_truth(ice_truth)
    print(f"wrote {', '.join(p.name for p in sorted(RECORDS.iterdir()) if p.is_file())}")


if __name__ == "__main__":
    main()
