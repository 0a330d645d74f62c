"""Write the synchrony demo: one invented eruption dated at eight invented sites.

Deterministic: ``python demo/make_sites.py`` rewrites ``records/demo_sites.json``,
``records/demo_site_draws.csv`` and ``records/demo_sites_truth.json``. The eruption is V2 of
the lag demo (true age 12,260 b2k); the ice site is the sulfate event in ``hvd1_ice.nc``.
Every name is invented; every date is synthetic: the true age plus an error drawn from the
site's own stated uncertainty, except the reworked site (displaced on purpose).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

RECORDS = Path(__file__).resolve().parents[1] / "records"
TRUE_AGE = 12260.0  # b2k, eruption V2 of the lag demo
SEED = 20261215
REWORKED_OFFSET = 210.0  # yr older: reworked ash from below


def main():
    rng = np.random.default_rng(SEED)
    varve = rng.normal(0.0, 15.0)  # the shared error of the Kessel Mere varve count
    sites = [
        {"label": "HVD1-ice", "kind": "event", "record": "hvd1_ice.nc", "variable": "sulfate",
         "window": [12110, 12410]},
        {"label": "KM-A-lake", "age": _round(TRUE_AGE + varve + rng.normal(0, 8)), "sd": 17,
         "chronology": "Kessel Mere varves", "shared_sd": 15},
        {"label": "KM-B-lake", "age": _round(TRUE_AGE + varve + rng.normal(0, 12)), "sd": 19,
         "chronology": "Kessel Mere varves", "shared_sd": 15},
    ]
    # peat: an asymmetric 95 % interval (split normal, wider on the young side)
    lo_sd, hi_sd = 45.0, 25.0
    peat = TRUE_AGE + (-abs(rng.normal(0, lo_sd)) if rng.random() < lo_sd / (lo_sd + hi_sd)
                       else abs(rng.normal(0, hi_sd)))
    peat = _round(peat)
    sites.append({"label": "OM-peat", "age": peat, "lower": _round(peat - 1.96 * lo_sd),
                  "upper": _round(peat + 1.96 * hi_sd)})
    # peat with an age-depth model exported as draws (skewed)
    draws = TRUE_AGE + rng.normal(0, 10) + (rng.gamma(4.0, 12.0, 3000) - 48.0)
    np.savetxt(RECORDS / "demo_site_draws.csv", np.round(draws, 1), fmt="%.1f", header="age",
               comments="")
    sites.append({"label": "SF-peat", "draws": "demo_site_draws.csv"})
    sites.append({"label": "TB-marine", "age": _round(TRUE_AGE + rng.normal(0, 55)), "sd": 55,
                  "age_reference": "BP"})
    sites[-1]["age"] = _round(sites[-1]["age"] - 50.0)  # tabulated in BP
    sites.append({"label": "BT-lake", "age": _round(TRUE_AGE + REWORKED_OFFSET
                                                    + rng.normal(0, 25)), "sd": 25})
    sites.append({"label": "VS-marine", "age": _round(TRUE_AGE + rng.normal(0, 4)), "sd": 8,
                  "independent": False})
    request = {"sites": sites, "age_reference": "b2k", "draws": 20000, "seed": 7}
    (RECORDS / "demo_sites.json").write_text(json.dumps(request, indent=2) + "\n")
    truth = {"true_age": TRUE_AGE, "age_reference": "b2k", "displaced": "BT-lake",
             "displaced_by": REWORKED_OFFSET, "not_independent": "VS-marine",
             "shared_chronology": ["KM-A-lake", "KM-B-lake"], "seed": SEED,
             "summary": "the eruption is 12,260 b2k at every site; BT-lake dated reworked ash "
                        "(210 years too old) and should be the most probable outlier; "
                        "VS-marine was tuned to the eruption and must not be counted; "
                        "KM-A-lake and KM-B-lake share one varve chronology."}
    (RECORDS / "demo_sites_truth.json").write_text(json.dumps(truth, indent=2) + "\n")


def _round(value):
    return float(round(value))


if __name__ == "__main__":
    main()
