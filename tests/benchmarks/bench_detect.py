"""Onset benchmark (issue: markers).

An onset fit with a 2,000-draw AR(1) bootstrap on a 500-sample window, against refitting each
bootstrap replicate with ``scipy.optimize.curve_fit`` (the baseline a scientist writes by
hand): at least 20x faster. And ``detect_onset`` (2,000 draws) on 20,000 against 10,000
samples in interleaved rounds (CPU time): the exponent ``log2(ratio)`` near 1 (at most 1.2),
and the peak extra memory at 20,000 samples.

Run: ``python tests/benchmarks/bench_detect.py``
"""

from __future__ import annotations

import warnings

import numpy as np
from scipy.optimize import curve_fit

import time

from _timing import machine, paired, peak_extra_mb, report_paired
from align import detect_onset
from align.noise import simulate_ar1
from align.ramp import ramp
from align.record import build_record


def main():
    rng = np.random.default_rng(0)
    n = 500
    edges = 10_000.0 + np.concatenate([[0.0], np.cumsum(rng.uniform(2.0, 6.0, n))])
    age = 0.5 * (edges[1:] + edges[:-1])
    truth = ramp(-age, -11_050.0, -10_990.0, 0.0, 3.0)
    noise = simulate_ar1(-age[::-1], 8.0, 1.0, 1, rng)[0][::-1]
    record = build_record(age=age, age_bounds=np.column_stack([edges[:-1], edges[1:]]),
                          age_reference="b2k", proxies={"x": (truth + noise, {})})
    window = [float(edges[0]), float(edges[-1])]

    t = -age[::-1]
    replicates = ramp(t, -11_050.0, -10_990.0, 0.0, 3.0) + simulate_ar1(t, 8.0, 1.0, 2000, rng)
    p0 = [-11_050.0, -10_990.0, 0.0, 3.0]

    def by_hand():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            for series in replicates:
                try:
                    curve_fit(ramp, t, series, p0=p0, maxfev=2000)
                except RuntimeError:
                    pass

    print(machine())
    report_paired("detect_onset vs curve_fit per replicate (speed-up)",
                  lambda: detect_onset(record, "x", window, draws=2000, seed=1), by_hand,
                  limit=20.0, better="higher", rounds=3)
    scaling()


def dense_record(n):
    rng = np.random.default_rng(0)
    edges = 10_000.0 + np.concatenate([[0.0], np.cumsum(rng.uniform(0.02, 0.06, n))])
    age = 0.5 * (edges[1:] + edges[:-1])
    mid = age[n // 2]
    x = ramp(-age, -mid - 20.0, -mid + 20.0, 0.0, 3.0) + rng.normal(0, 1, n)
    record = build_record(age=age, age_bounds=np.column_stack([edges[:-1], edges[1:]]),
                          age_reference="b2k", proxies={"x": (x, {})})
    return lambda: detect_onset(record, "x", [float(edges[0]), float(edges[-1])], draws=2000,
                                seed=1)


def scaling():
    from align.detect import _null_steps

    small, large = dense_record(10_000), dense_record(20_000)
    _null_steps.cache_clear()  # the first onset also makes its no-transition surrogates
    start = time.process_time()
    cold = peak_extra_mb(large)
    print(f"detect_onset 20,000 samples, first in the process: "
          f"{time.process_time() - start:.3g} s CPU, peak extra memory {cold:.0f} MB "
          f"(requirement: <= 500 MB) {'ok' if cold <= 500 else 'NOT MET'}", flush=True)
    ratios, t_large, t_small = paired(large, small, rounds=3, clock=time.process_time)
    exponent = float(np.log2(np.median(ratios)))
    print(f"detect_onset 20,000 vs 10,000 samples: {t_large:.3g} s vs {t_small:.3g} s CPU "
          f"(medians) -> exponent {exponent:.2f} (median of paired ratios) (requirement: "
          f"<= 1.2) {'ok' if exponent <= 1.2 else 'NOT MET'}", flush=True)
    print(f"detect_onset 20,000 samples: peak extra memory {peak_extra_mb(large):.0f} MB",
          flush=True)


if __name__ == "__main__":
    main()
