"""Checks of the streaming amplitude statistics against scipy/numpy and published theory."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.stats
from hypothesis import given, settings
from hypothesis import strategies as st

from vibsynth.errors import InputError
from vibsynth.analysis.stats import (
    LevelCrossingAccumulator,
    MomentAccumulator,
    amplitude_statistics,
)


def uneven_chunks(x, rng, largest=5000):
    """Cut x into random pieces, including empty and single-sample ones."""
    out, i = [], 0
    while i < x.size:
        size = int(rng.choice([0, 1, 2, 17, int(rng.integers(1, largest))]))
        out.append(x[i:i + size])
        i += size
    return out


def band_limited_gaussian(rng, rate_hz, n, f_low_hz, f_high_hz):
    """Gaussian record with a flat one-sided spectrum on [f_low, f_high], unit variance.

    Built here with numpy's FFT (Gaussian real and imaginary parts per line), so
    the project's generator is not involved.
    """
    freqs = np.fft.rfftfreq(n, 1.0 / rate_hz)
    band = (freqs >= f_low_hz) & (freqs <= f_high_hz)
    spec = np.zeros(freqs.size, dtype=complex)
    spec[band] = rng.standard_normal(band.sum()) + 1j * rng.standard_normal(band.sum())
    x = np.fft.irfft(spec, n=n)
    return x / math.sqrt(4.0 * band.sum() / n**2)  # E[x^2] = 4 * lines / n^2 before scaling


@pytest.mark.parametrize("offset", [0.0, 50.0, -1e4])
def test_moments_match_scipy_and_numpy_under_uneven_chunking(offset):
    rng = np.random.default_rng(1 if offset == 0 else 2)
    # A skewed, heavy-tailed sample so skewness and kurtosis are far from 0 and 3.
    x = offset + rng.gamma(2.0, 1.5, 200_003) * rng.choice([-1.0, 1.0, 1.0], 200_003)
    acc = MomentAccumulator(1000.0)
    for chunk in uneven_chunks(x, rng):
        acc.update(chunk)
    r = acc.result()
    # References: numpy and scipy.stats on the whole array.
    assert r.count == x.size
    assert r.mean == pytest.approx(np.mean(x), rel=1e-12, abs=1e-12)
    assert r.std == pytest.approx(np.std(x), rel=1e-10)
    assert r.rms == pytest.approx(np.sqrt(np.mean(x * x)), rel=1e-10)
    assert r.skewness == pytest.approx(scipy.stats.skew(x), rel=1e-10)
    assert r.kurtosis == pytest.approx(scipy.stats.kurtosis(x, fisher=False), rel=1e-10)
    assert r.maximum == np.max(x) and r.minimum == np.min(x)
    assert r.peak == np.max(np.abs(x))
    assert r.crest_factor == pytest.approx(np.max(np.abs(x)) / np.sqrt(np.mean(x * x)), rel=1e-10)
    assert r.duration_s == pytest.approx(x.size / 1000.0)


@settings(max_examples=60, deadline=None)
@given(
    data=st.lists(st.floats(min_value=-1e3, max_value=1e3, allow_nan=False), min_size=3, max_size=300),
    cuts=st.lists(st.integers(min_value=0, max_value=300), max_size=20),
)
def test_property_chunking_does_not_change_the_statistics(data, cuts):
    x = np.array(data)
    if np.std(x) < 1e-6 * max(1.0, np.max(np.abs(x))):
        return  # skewness/kurtosis ill-conditioned for (nearly) constant data
    edges = [0] + sorted(c for c in cuts if c <= x.size) + [x.size]
    acc = MomentAccumulator(10.0)
    for a, b in zip(edges[:-1], edges[1:]):
        acc.update(x[a:b])
    r = acc.result()
    # Reference library: scipy.stats on the unchunked data.
    assert r.skewness == pytest.approx(scipy.stats.skew(x), rel=1e-8, abs=1e-8)
    assert r.kurtosis == pytest.approx(scipy.stats.kurtosis(x, fisher=False), rel=1e-8)
    assert r.std == pytest.approx(np.std(x), rel=1e-10)
    crossings = LevelCrossingAccumulator(10.0, r.mean, r.std)
    for a, b in zip(edges[:-1], edges[1:]):
        crossings.update(x[a:b])
    c = crossings.result()
    below = x < r.mean
    assert c.upcrossings == int(np.count_nonzero(below[:-1] & ~below[1:]))
    assert c.exceedance_counts[1] == int(np.count_nonzero(np.abs(x - r.mean) > 2 * r.std))


def test_sine_crest_factor_and_kurtosis():
    # Sine wave: crest factor sqrt(2), rms = A/sqrt(2), kurtosis 3/2, skewness 0
    # (closed forms: E[sin^2] = 1/2, E[sin^4] = 3/8).
    t = np.arange(100_000) / 10_000.0
    x = 3.0 * np.sin(2 * np.pi * 50.0 * t)
    acc = MomentAccumulator(10_000.0)
    acc.update(x)
    r = acc.result()
    assert r.crest_factor == pytest.approx(math.sqrt(2.0), rel=1e-9)
    assert r.rms == pytest.approx(3.0 / math.sqrt(2.0), rel=1e-9)
    assert r.kurtosis == pytest.approx(1.5, rel=1e-9)
    assert r.skewness == pytest.approx(0.0, abs=1e-9)


def test_gaussian_exceedance_fractions_match_normal_tails():
    rng = np.random.default_rng(77)
    x = 0.3 + 1.7 * rng.standard_normal(2_000_000)
    moments, crossings = amplitude_statistics(x, 1000.0)
    n = crossings.count
    for k, frac, gauss in zip(crossings.levels_sigma, crossings.exceedance_fractions,
                              crossings.gaussian_fractions):
        p = 2.0 * scipy.stats.norm.sf(k)  # reference: scipy.stats.norm, two-sided tail
        assert gauss == pytest.approx(p, rel=1e-12)
        # statistical tolerance: 5 binomial standard deviations (plus the small
        # effect of using the sample std instead of the true one)
        assert abs(frac - p) <= 5.0 * math.sqrt(p * (1 - p) / n) + 2e-4 * p
    assert crossings.mean == moments.mean and crossings.std == moments.std
    assert moments.kurtosis == pytest.approx(3.0, abs=0.02)  # Gaussian: 3; sd of estimate ~ sqrt(24/n)


def test_zero_upcrossing_rate_of_band_limited_gaussian_matches_rice():
    rng = np.random.default_rng(5)
    rate_hz, n, f1, f2 = 8192.0, 2**20, 20.0, 500.0
    x = band_limited_gaussian(rng, rate_hz, n, f1, f2)
    # Rice (1944/45): nu0+ = sqrt(m2/m0); flat band: m0 = S (f2 - f1), m2 = S (f2^3 - f1^3)/3.
    nu0_rice = math.sqrt((f2**3 - f1**3) / (3.0 * (f2 - f1)))
    chunks = uneven_chunks(x, rng, largest=70_000)
    moments, crossings = amplitude_statistics(lambda: iter(chunks), rate_hz)
    assert crossings.upcrossing_rate_hz == pytest.approx(nu0_rice, rel=0.02)
    # the chunked count equals a direct count on the whole array
    below = x < moments.mean
    assert crossings.upcrossings == int(np.count_nonzero(below[:-1] & ~below[1:]))


def test_upcrossing_carried_across_chunk_boundaries():
    x = np.array([-1.0, 1.0, -1.0, -1.0, 2.0, 0.5, -3.0, 1.5])
    whole = LevelCrossingAccumulator(1.0, 0.0, 1.0)
    whole.update(x)
    single = LevelCrossingAccumulator(1.0, 0.0, 1.0)
    for v in x:
        single.update([v])
    assert whole.result().upcrossings == single.result().upcrossings == 3
    assert single.result().upcrossing_rate_hz == pytest.approx(3.0 / 8.0)


def test_window_rms_matches_numpy_per_window():
    rng = np.random.default_rng(8)
    rate = 1000.0
    x = rng.standard_normal(12_345) * np.repeat([1.0, 2.0, 0.5, 1.0, 3.0, 1.0, 1.0, 2.0, 1.0, 1.0, 1.0, 1.0, 1.0],
                                                1000)[:12_345]
    acc = MomentAccumulator(rate, window_s=0.5)
    for chunk in uneven_chunks(x, rng, largest=900):
        acc.update(chunk)
    r = acc.result()
    w = 500
    full = x[: (x.size // w) * w].reshape(-1, w)
    expected = np.sqrt(np.mean(full**2, axis=1))  # reference: numpy on each window
    assert r.window_samples == w and r.window_s == pytest.approx(0.5)
    np.testing.assert_allclose(r.window_rms, expected, rtol=1e-12)


def test_two_pass_source_must_repeat_and_constant_record():
    calls = {"n": 0}

    def source():
        calls["n"] += 1
        return [np.arange(10.0)] if calls["n"] == 1 else [np.arange(9.0)]

    with pytest.raises(InputError, match="same record"):
        amplitude_statistics(source, 10.0)
    moments, crossings = amplitude_statistics(np.full(20, 2.0), 10.0)
    assert crossings is None and math.isnan(moments.kurtosis) and moments.rms == pytest.approx(2.0)


def test_input_errors():
    acc = MomentAccumulator(100.0)
    with pytest.raises(InputError, match="no samples"):
        acc.result()
    acc.update([1.0, 2.0])
    with pytest.raises(InputError, match="sample 3"):
        acc.update([0.0, np.inf])
    with pytest.raises(InputError):
        MomentAccumulator(0.0)
    with pytest.raises(InputError):
        MomentAccumulator(100.0, window_s=-1.0)
    with pytest.raises(InputError):
        LevelCrossingAccumulator(100.0, 0.0, 0.0)
    with pytest.raises(InputError):
        LevelCrossingAccumulator(100.0, 0.0, 1.0, levels_sigma=[1.0, -2.0])
