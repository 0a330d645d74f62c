"""Stored traces are sized to a figure: min/max decimation keeps spikes and the envelope."""

import numpy as np

from align import detect_event
from align.detect import TRACE_POINTS, trace_points
from align.record import build_record


def extremes_by_loop(values, runs):
    """Each run's first smallest and first largest position, written as a plain loop."""
    size = -(-values.size // runs)
    kept = {0, values.size - 1}
    for start in range(0, values.size, size):
        run = values[start:start + size]
        if np.isnan(run).all():
            kept.add(start)
            continue
        kept.add(start + int(np.nanargmin(run)))
        kept.add(start + int(np.nanargmax(run)))
    return np.array(sorted(kept))


def test_short_series_are_kept_whole():
    np.testing.assert_array_equal(trace_points(np.arange(50.0), limit=50), np.arange(50))


def test_decimation_keeps_each_runs_extremes():
    rng = np.random.default_rng(0)
    values = rng.normal(size=100_003)
    values[rng.random(values.size) < 0.01] = np.nan
    values[5_000:7_000] = np.nan  # whole runs missing
    kept = trace_points(values, limit=400)
    assert kept.size <= 400
    np.testing.assert_array_equal(kept, extremes_by_loop(values, 400 // 2 - 1))


def test_a_one_sample_spike_survives_and_the_envelope_is_kept():
    rng = np.random.default_rng(1)
    values = rng.normal(size=200_000)
    values[123_457] = 40.0
    kept = trace_points(values)
    assert 123_457 in kept and kept.size <= TRACE_POINTS
    assert values[kept].max() == values.max() and values[kept].min() == values.min()


def test_detect_event_stores_a_figure_sized_trace_with_the_spike():
    rng = np.random.default_rng(2)
    n = 30_000
    edges = 10_000.0 + np.arange(n + 1) * 0.5
    values = rng.normal(size=n)
    values[18_000:18_003] += 25.0
    record = build_record(age=0.5 * (edges[1:] + edges[:-1]),
                          age_bounds=np.column_stack([edges[:-1], edges[1:]]),
                          age_reference="b2k", proxies={"x": (values, {})})
    result = detect_event(record, "x", threshold=8.0)
    trace = result.trace
    assert result.found and result.sample.index in range(18_000, 18_003)
    assert len(trace.value) <= TRACE_POINTS
    assert max(trace.value) == values.max()
    assert len(trace.age_top) == len(trace.age_bottom) == len(trace.curve) == len(trace.value)
    assert trace.age_top == sorted(trace.age_top)
