"""Tie-point suggestions: match sharp peaks found in two records as one monotonic sequence.

Volcanic sulfate peaks, tephra shard maxima and other sharp horizons appear in both records
but on different timescales, and each record also has peaks the other lacks. Candidates are
found as robust anomalies (:mod:`align.anomaly`) and matched by dynamic programming: the best
chain of pairs that never cross, whose age offset between the two timescales changes slowly,
and that keeps as many strong pairs as it can. The result is written as a tie table for a
person to review; it is never applied automatically.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from align.anomaly import robust_z, runs_above
from align.errors import InputError
from align.record import age_reference, age_sigma, record_name

#: Allowed change of the age offset between two consecutive matches, per year between them: a
#: stated choice, generous enough for a layer-counted ice core against a radiocarbon-style
#: sediment age model, whose offset can wander by tens of years per century.
DRIFT_PER_YEAR = 0.25


@dataclass(frozen=True)
class Peaks:
    """Candidate horizons of one record: sample index, age, depth, sample interval, z-score."""

    index: np.ndarray
    age: np.ndarray
    depth: np.ndarray
    width: np.ndarray
    z: np.ndarray


def find_peaks(record, variable, *, threshold=4.0, baseline_years=None):
    """Peaks of ``variable``: the highest sample of each run of robust anomalies.

    Parameters
    ----------
    record : xarray.Dataset
    variable : str
    threshold : float
        Robust z-score a run must exceed.
    baseline_years : float, optional
        Running-median span (default 25 median sample intervals).

    Returns
    -------
    Peaks
    """
    if variable not in record:
        raise InputError("no such variable", source=record.attrs.get("source"), field=variable)
    if age_reference(record) is None:
        raise InputError("tie suggestions need a timescale in both records",
                         source=record.attrs.get("source"), field="age")
    age = record["age"].values
    bounds = record["age_bounds"].values
    width = bounds[:, 1] - bounds[:, 0]
    span = baseline_years or 25.0 * float(np.median(width))
    z, _, _ = robust_z(age, record[variable].values, span)
    peaks = [first + int(np.nanargmax(z[first:last + 1]))
             for first, last in runs_above(z, threshold)]
    index = np.asarray(peaks, dtype=int)
    depth = record["depth"].values[index] if "depth" in record.coords else np.full(index.size,
                                                                                     np.nan)
    return Peaks(index=index, age=age[index], depth=depth, width=width[index], z=z[index])


def match_peaks(ref, moved, max_offset):
    """The best non-crossing chain of peak pairs whose age offset drifts slowly.

    Parameters
    ----------
    ref, moved : Peaks
        Peaks of the reference record and of the record to move (ages in one reference).
    max_offset : float
        Largest age difference (yr) a pair may have.

    Returns
    -------
    list of (int, int, float)
        ``(i, j, penalty)``: peak ``i`` of ``ref`` matched to peak ``j`` of ``moved``, and the
        offset-change penalty paid to reach it (0 for the first of a chain).

    Notes
    -----
    Each pair is worth ``1 + log10(min(z_i, z_j))``; joining pair ``q`` to a later pair ``p``
    costs ``((o_p - o_q) / tol)^2`` with offsets ``o = age_moved - age_ref`` and
    ``tol = h_q + h_p + DRIFT_PER_YEAR |t_p - t_q|`` (``h`` the samples' age intervals). The
    chain maximising worth minus cost is found by dynamic programming over all pairs
    (``O(P^2)`` for ``P`` candidate pairs), requiring both indices to increase.
    """
    ii, jj = np.nonzero(np.abs(moved.age[None, :] - ref.age[:, None]) <= max_offset)
    if ii.size == 0:
        return []
    offset = moved.age[jj] - ref.age[ii]
    when = ref.age[ii]
    res = ref.width[ii] + moved.width[jj]
    worth = 1.0 + np.log10(np.maximum(np.minimum(ref.z[ii], moved.z[jj]), 1.0))
    best = worth.copy()
    back = np.full(ii.size, -1)
    cost_in = np.zeros(ii.size)
    for p in range(ii.size):
        earlier = np.flatnonzero((ii < ii[p]) & (jj < jj[p]))
        if earlier.size == 0:
            continue
        tol = res[earlier] + res[p] + DRIFT_PER_YEAR * np.abs(when[p] - when[earlier])
        cost = ((offset[p] - offset[earlier]) / tol) ** 2
        gain = best[earlier] - cost
        k = int(np.argmax(gain))
        if gain[k] > 0:
            best[p] = worth[p] + gain[k]
            back[p] = earlier[k]
            cost_in[p] = cost[k]
    chain = []
    p = int(np.argmax(best))
    while p >= 0:
        chain.append((int(ii[p]), int(jj[p]), float(cost_in[p])))
        p = int(back[p])
    return chain[::-1]


def suggest_ties(ref, ref_variable, moved, moved_variable, *, max_offset=None, threshold=4.0):
    """Candidate tie points between two records, for a person to review.

    Parameters
    ----------
    ref : xarray.Dataset
        The reference record (its depths become ``ref_depth``, or its ages ``ref_age``).
    ref_variable : str
    moved : xarray.Dataset
        The record that would be moved (needs depths).
    moved_variable : str
    max_offset : float, optional
        Largest age difference (yr) between the two timescales at a tie. Default: three times
        the two timescales' combined 1-sigma uncertainty at the middle of their overlap, or
        10 % of the overlap where neither states an uncertainty.
    threshold : float
        Robust z-score a peak must exceed in each record.

    Returns
    -------
    pandas.DataFrame
        A tie table (``label, depth, ref_depth | ref_age, sd``) plus ``score`` (0-1, higher is
        surer) and ``evidence`` (the two peaks' ages and z-scores), one row per candidate, in
        depth order.
    """
    if "depth" not in moved.coords:
        raise InputError("the record to move needs depths for a tie table",
                         source=moved.attrs.get("source"), field="depth")
    ref_ref, moved_ref = age_reference(ref), age_reference(moved)
    if ref_ref != moved_ref and None not in (ref_ref, moved_ref):
        from align.record import with_age_reference

        moved = with_age_reference(moved, ref_ref)
    a = find_peaks(ref, ref_variable, threshold=threshold)
    b = find_peaks(moved, moved_variable, threshold=threshold)
    limit = max_offset if max_offset is not None else _default_offset(ref, moved)
    if not limit > 0:
        raise InputError("max_offset must be a positive number of years", field="max_offset")
    chain = match_peaks(a, b, limit)
    by_depth = "depth" in ref.coords
    rows = []
    for k, (i, j, cost) in enumerate(chain, start=1):
        sd = float(np.hypot(a.width[i], b.width[j]) / np.sqrt(12.0))
        strength = min(1.0, np.log10(max(min(a.z[i], b.z[j]), 1.0)) / 2.0)
        rows.append({
            "label": f"candidate {k}", "depth": float(b.depth[j]),
            ("ref_depth" if by_depth else "ref_age"): float(a.depth[i] if by_depth else a.age[i]),
            "sd": round(sd, 2), "score": round(strength / (1.0 + cost), 3),
            "evidence": (f"{record_name(ref)} {ref_variable} z={a.z[i]:.1f} at {a.age[i]:.1f}; "
                         f"{record_name(moved)} {moved_variable} z={b.z[j]:.1f} at "
                         f"{b.age[j]:.1f} {ref_ref}")})
    columns = ["label", "depth", "ref_depth" if by_depth else "ref_age", "sd", "score",
               "evidence"]
    return pd.DataFrame(rows, columns=columns)


def _default_offset(ref, moved):
    lo = max(ref["age"].values[0], moved["age"].values[0])
    hi = min(ref["age"].values[-1], moved["age"].values[-1])
    if hi <= lo:
        raise InputError("the two records do not overlap in age; give max_offset",
                         field="max_offset")
    mid = 0.5 * (lo + hi)
    sds = [np.interp(mid, rec["age"].values, s) for rec in (ref, moved)
           if (s := age_sigma(rec)) is not None]
    if not sds:
        return 0.1 * (hi - lo)
    return 3.0 * float(np.sqrt(np.sum(np.square(sds))))
