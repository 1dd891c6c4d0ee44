"""Rainflow counting against ASTM E1049-85's worked example, streaming, and the laws every count obeys."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from vibsynth.durability.rainflow import RainflowCounter, TurningPoints, rainflow_cycles, turning_points

# ASTM E1049-85 (Reapproved 2017), section 5.4.4, Fig. 6 example: the load history and its rainflow count
# (range: cycles) 3: 0.5, 4: 1.5, 6: 0.5, 8: 1.0, 9: 0.5 (the same values are quoted by the tests of the
# general-purpose `rainflow` package on the registry).
ASTM_SERIES = [-2, 1, -3, 5, -1, 3, -4, 4, -2]
ASTM_COUNTS = {3.0: 0.5, 4.0: 1.5, 6.0: 0.5, 8.0: 1.0, 9.0: 0.5}


def _histogram(ranges, counts):
    out: dict[float, float] = {}
    for r, c in zip(ranges.tolist(), counts.tolist()):
        out[r] = out.get(r, 0.0) + c
    return out


def test_astm_e1049_example():
    assert _histogram(*rainflow_cycles(ASTM_SERIES)) == ASTM_COUNTS


def test_astm_example_padded_with_zeros_adds_the_two_end_ranges_as_half_cycles():
    # 0 -> -2 at the start and -2 -> 0 at the end are two more ranges of 2, each left as a half cycle
    # (ASTM E1049-85, 5.4.4 step 6: ranges not counted are half cycles)
    expected = dict(ASTM_COUNTS)
    expected[2.0] = 1.0
    assert _histogram(*rainflow_cycles([0] + ASTM_SERIES + [0])) == expected


def test_astm_example_fed_one_point_at_a_time():
    counter = RainflowCounter()
    tp = TurningPoints()
    parts = []
    for value in ASTM_SERIES:
        parts.append(counter.feed(tp.feed([value])))
    parts.append(counter.feed(tp.finish()))
    parts.append(counter.finish())
    ranges = np.concatenate([p[0] for p in parts])
    counts = np.concatenate([p[1] for p in parts])
    assert _histogram(ranges, counts) == ASTM_COUNTS


def test_turning_points_drop_plateaus_and_keep_the_ends():
    assert turning_points([1, 1, 2, 2, 2, 0, 0, 3, 3]).tolist() == [1.0, 2.0, 0.0, 3.0]
    assert turning_points([5, 5, 5]).tolist() == [5.0]


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(-50, 50), min_size=2, max_size=200), st.lists(st.integers(1, 50), max_size=8))
def test_counting_laws_and_streaming(values, cuts):
    x = np.asarray(values, dtype=float)
    ranges, counts = rainflow_cycles(x)
    reversals = turning_points(x)
    # every range between adjacent reversals is used once: a full cycle takes two, a half cycle one
    # (ASTM E1049-85, 5.4.4), so the counts add up to (reversals - 1) / 2
    assert np.sum(counts) == pytest.approx((reversals.size - 1) / 2.0)
    if ranges.size:
        # the largest range is the record's max minus min
        assert np.max(ranges) == pytest.approx(np.ptp(x))
    # streaming at arbitrary chunk boundaries gives the same count
    edges = sorted({0, x.size, *[c % (x.size + 1) for c in np.cumsum(cuts)]})
    tp, counter = TurningPoints(), RainflowCounter()
    parts = [counter.feed(tp.feed(x[i:j])) for i, j in zip(edges, edges[1:])]
    parts += [counter.feed(tp.finish()), counter.finish()]
    streamed = _histogram(np.concatenate([p[0] for p in parts]), np.concatenate([p[1] for p in parts]))
    assert streamed == _histogram(ranges, counts)


def test_refined_peaks_of_a_sampled_sine():
    # 8 samples per cycle: sampled peaks are low by up to 1 - cos(pi/8) = 7.6 %; the vertex of the parabola
    # through three samples of cos at spacing pi/4 is at worst 0.85 % low (worked out from the cosine's values,
    # no source)
    rate, f = 800.0, 100.0
    t = np.arange(4000) / rate
    x = np.sin(2 * np.pi * f * t + 0.3)
    raw = turning_points(x)[1:-1]
    tp = TurningPoints(refine=True)
    refined = np.concatenate([tp.feed(x[:1234]), tp.feed(x[1234:]), tp.finish()])[1:-1]
    assert np.max(np.abs(raw)) < 0.96  # cos(0.3) here
    np.testing.assert_allclose(np.abs(refined), 1.0, atol=0.0085)
    assert np.all(np.abs(refined) > np.abs(raw))
