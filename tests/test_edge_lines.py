"""Band-edge lines carry only the band's share of their bin, so a record's mean-square is the profile's.

References used below:
- Mean-square as the area under the one-sided ASD (Bendat & Piersol, Random Data, 4th ed., 2010),
  computed independently with scipy.integrate.quad (QUADPACK) over the profile's log-log interpolant.
- DFT Parseval relation (Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed., sec. 8.5):
  a periodic record with fixed line magnitudes has mean-square sum_k L_k df exactly.

All profiles here are invented breakpoint tables.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate

from vibsynth import generate_samples
from vibsynth.generate.plan import plan_synthesis
from vibsynth.profile.asd import AsdProfile

#: Tolerance of issue 10 item 2: record mean-square within 0.5 % of the profile's, any band >= one line wide.
TOLERANCE = 0.005


def quad_area(profile: AsdProfile, f1: float, f2: float) -> float:
    """Area under the interpolant between f1 and f2 (g^2), by scipy.integrate.quad, breakpoints as points."""
    lo, hi = max(f1, profile.frequency_min_hz), min(f2, profile.frequency_max_hz)
    if hi <= lo:
        return 0.0
    inner = [f for f in profile.frequencies_hz if lo < f < hi]
    value, _ = integrate.quad(lambda f: float(profile.evaluate(f)), lo, hi, points=inner or None,
                              epsabs=0.0, epsrel=1e-12, limit=200)
    return value


def record_mean_square(profile: AsdProfile, duration_s: float, rate_hz: float, seed: int = 3) -> float:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # coarse-resolution / thin-margin advisories are not under test
        record = generate_samples(profile, duration_s, rate_hz, seed=seed, amplitude="fixed",
                                  resolution_hz=1.0 / duration_s)
    return float(np.mean(np.square(record)))


def test_99_to_101_hz_on_a_4_s_record_at_512_hz():
    # Issue 10 item 2: 1.500 g RMS before (9 full lines of 0.25 Hz for a 2 Hz band), 1.414 g after.
    # Flat 1 g^2/Hz over 2 Hz: mean-square 2 g^2, sqrt(2) = 1.41421 g RMS (area under the ASD).
    profile = AsdProfile([99.0, 101.0], [1.0, 1.0], name="invented-narrow")
    record = generate_samples(profile, 4.0, 512.0, seed=1)
    assert np.mean(record**2) == pytest.approx(2.0, rel=TOLERANCE)
    assert math.sqrt(np.mean(record**2)) == pytest.approx(math.sqrt(2.0), rel=1e-9)  # Parseval: exact
    assert math.sqrt(np.mean(record**2)) < 1.45  # the old 1.500 g fails here


@st.composite
def bands(draw):
    """A 4 s, 2 s or 8 s record at 512 or 1024 Hz, and a profile band at least one line wide.

    One or two log-log segments with slopes within +/-12 dB/octave, band edges anywhere on
    or between grid lines, at least 20 lines above 0 Hz and below rate / 2.56.
    """
    duration = draw(st.sampled_from([2.0, 4.0, 8.0]))
    rate = draw(st.sampled_from([512.0, 1024.0]))
    df = 1.0 / duration
    top = rate / 2.56
    low = draw(st.floats(min_value=20 * df, max_value=top - df))
    width = draw(st.floats(min_value=df, max_value=min(top - low, 120.0)))
    high = low + width
    frequencies = [low, high]
    if width >= 16 * df and draw(st.booleans()):
        frequencies.insert(1, low + width * draw(st.floats(min_value=0.3, max_value=0.7)))
    level = math.exp(draw(st.floats(min_value=math.log(1e-4), max_value=math.log(1.0))))
    values = [level]
    for f1, f2 in zip(frequencies[:-1], frequencies[1:]):
        slope = draw(st.floats(min_value=-12.0, max_value=12.0))  # dB/octave
        values.append(values[-1] * 10 ** (slope * math.log2(f2 / f1) / 10))
    return AsdProfile(frequencies, values, name="invented-band"), duration, rate


@settings(max_examples=60, deadline=None)
@given(bands())
def test_record_mean_square_equals_the_profile_area(case):
    profile, duration, rate = case
    area = quad_area(profile, 0.0, math.inf)  # scipy.integrate.quad reference
    assert profile.mean_square_g2 == pytest.approx(area, rel=1e-9)
    assert record_mean_square(profile, duration, rate) == pytest.approx(area, rel=TOLERANCE)


@st.composite
def grids(draw):
    count = draw(st.integers(min_value=2, max_value=5))
    start = draw(st.floats(min_value=0.3, max_value=200.0))
    steps = draw(st.lists(st.floats(min_value=0.05, max_value=300.0), min_size=count - 1, max_size=count - 1))
    frequencies = list(np.cumsum([start, *steps]))
    values = list(np.exp(draw(st.lists(st.floats(min_value=-12, max_value=2), min_size=count, max_size=count))))
    df = draw(st.floats(min_value=0.01, max_value=5.0))
    return AsdProfile(frequencies, values, name="invented-steps"), df


@settings(max_examples=60, deadline=None)
@given(grids())
def test_line_weights_against_quadrature(case):
    profile, df = case
    lines = int(math.ceil(profile.frequency_max_hz / df)) + 3
    weights = profile.line_spectrum(df, lines)
    k = np.arange(lines)
    lower, upper = (k - 0.5) * df, (k + 0.5) * df
    interior = (lower >= profile.frequency_min_hz) & (upper <= profile.frequency_max_hz)
    # Interior lines are the interpolant at f_k, bit for bit (existing drives keep their samples there).
    np.testing.assert_array_equal(weights[interior], profile.evaluate(k[interior] * df))
    # A line whose bin straddles a band edge carries the quad integral of the interpolant over its bin, / df.
    straddling = ~interior & (upper > profile.frequency_min_hz) & (lower < profile.frequency_max_hz)
    assert 1 <= np.count_nonzero(straddling) <= 2
    for index in np.flatnonzero(straddling):
        expected = quad_area(profile, lower[index], upper[index]) / df
        assert weights[index] == pytest.approx(expected, rel=1e-9, abs=1e-300)
    # Lines beyond the band's bins carry nothing.
    outside = (upper <= profile.frequency_min_hz) | (lower >= profile.frequency_max_hz)
    assert not np.any(weights[outside])


def test_a_band_narrower_than_one_line_goes_to_the_line_that_holds_it():
    profile = AsdProfile([100.05, 100.2], [2.0, 3.0], name="invented-sliver")
    weights = profile.line_spectrum(0.5, 400)
    assert np.count_nonzero(weights) == 1 and weights[200] > 0
    assert weights[200] * 0.5 == pytest.approx(quad_area(profile, 100.0, 100.5), rel=1e-12)


def test_edge_exactly_on_a_line_gives_half_a_line():
    profile = AsdProfile([99.0, 101.0], [1.0, 1.0])
    weights = profile.line_spectrum(0.25, [395, 396, 397, 403, 404, 405])
    # 99 Hz: bin 98.875-99.125 Hz, half inside a flat 1 g^2/Hz band; 99.25 Hz: wholly inside.
    np.testing.assert_array_equal(weights[[0, 2, 3, 5]], [0.0, 1.0, 1.0, 0.0])
    np.testing.assert_allclose(weights[[1, 4]], [0.5, 0.5], rtol=1e-15)


@pytest.mark.parametrize("power", [0.0, 2.0, -4.0])
def test_band_integral_against_quadrature(power):
    profile = AsdProfile([20.0, 80.0, 350.0, 2000.0], [0.01, 0.04, 0.04, 0.005])
    for f1, f2 in [(0.0, 5000.0), (25.5, 27.0), (79.0, 400.0), (1999.9, 2000.1), (10.0, 20.0), (300.0, 200.0)]:
        lo, hi = max(f1, 20.0), min(f2, 2000.0)
        expected = 0.0
        if hi > lo:
            expected, _ = integrate.quad(lambda f: f**power * float(profile.evaluate(f)), lo, hi,
                                         points=[80.0, 350.0], epsabs=0.0, epsrel=1e-12, limit=200)
        assert float(profile.band_integral(f1, f2, power)) == pytest.approx(expected, rel=1e-9, abs=1e-300)


def test_planned_line_spectrum_keeps_interior_lines_and_sums_to_the_area():
    # The planner's line spectrum (periodic and overlap-add) uses the weighted edges: its variance
    # sum L_k df is the profile's area to the midpoint rule on the interior lines.
    profile = AsdProfile([20.0, 80.0, 350.0, 2000.0], [0.01, 0.04, 0.04, 0.005], name="invented-bracket")
    for budget in (1 << 28, 1):
        plan = plan_synthesis(profile, 30.0, 5120.0, memory_budget_bytes=budget)
        f = plan.frequencies_hz
        df = plan.resolution_hz
        interior = (f - df / 2 >= 20.0) & (f + df / 2 <= 2000.0)
        np.testing.assert_array_equal(plan.line_spectrum[interior], profile.evaluate(f[interior]))
        assert plan.line_variance == pytest.approx(quad_area(profile, 0.0, math.inf), rel=1e-3)


@pytest.mark.parametrize("low, high", [(99.0, 101.0), (99.1, 100.3), (500.0, 500.25)])
def test_overlap_add_stream_carries_the_profile_area(low, high):
    # Overlap-add: the plan's variance sum L_k df (which the stream's mean-square equals in
    # expectation, sine window w^2 + w_shifted^2 = 1) is the band's area within 0.5 %.
    profile = AsdProfile([low, high], [0.5, 0.5], name="invented-narrow")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        plan = plan_synthesis(profile, 600.0, 2048.0, memory_budget_bytes=1, resolution_hz=min(0.25, high - low))
    assert plan.mode == "overlap-add"
    assert plan.line_variance == pytest.approx(0.5 * (high - low), rel=TOLERANCE)
