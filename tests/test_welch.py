"""Checks of the streaming Welch estimator against scipy and published statistics."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal
import scipy.stats
from hypothesis import given, settings
from hypothesis import strategies as st

from vibsynth.errors import InputError
from vibsynth.analysis.welch import (
    DEFAULT_TARGET_DOF,
    WelchAccumulator,
    chi2_confidence_limits,
    choose_nperseg,
    overlap_correlation,
    welch_asd,
    welch_dof,
)


def scipy_reference(x, rate_hz, nperseg):
    """Reference library: scipy.signal.welch with the settings the estimator promises."""
    return scipy.signal.welch(x, rate_hz, window="hann", nperseg=nperseg, noverlap=nperseg // 2,
                              detrend="constant", scaling="density")


def feed_unevenly(acc, x, rng, nperseg):
    """Feed x in random chunk sizes, including 0, 1 and sizes larger than nperseg."""
    i = 0
    while i < x.size:
        size = int(rng.choice([0, 1, 2, nperseg - 1, nperseg, nperseg + 1, 3 * nperseg + 7,
                               int(rng.integers(1, 2 * nperseg + 2))]))
        acc.update(x[i:i + size])
        assert acc.carried_samples < nperseg  # constant memory: never a whole segment held
        i += size


@pytest.mark.parametrize("nperseg", [2, 3, 7, 64, 255, 256, 1024])
def test_uneven_chunks_match_scipy_welch(nperseg):
    rng = np.random.default_rng(nperseg)
    for _ in range(6):
        n = int(rng.integers(nperseg, 9 * nperseg + 300))
        x = 0.7 + 2.5 * rng.standard_normal(n)  # offset: exercises detrend='constant'
        acc = WelchAccumulator(2048.0, nperseg)
        feed_unevenly(acc, x, rng, nperseg)
        got = acc.result()
        f_ref, p_ref = scipy_reference(x, 2048.0, nperseg)  # reference: scipy.signal.welch
        np.testing.assert_allclose(got.frequencies_hz, f_ref, rtol=1e-12, atol=0)
        np.testing.assert_allclose(got.asd, p_ref, rtol=1e-10, atol=0)
        assert got.samples == n
        assert got.resolution_hz == pytest.approx(2048.0 / nperseg, rel=1e-15)
        step = nperseg - nperseg // 2
        assert got.segments == (n - nperseg // 2) // step  # scipy's segment count (noverlap = n//2, no padding)


def test_long_record_many_blocks_matches_scipy_welch():
    rng = np.random.default_rng(11)
    x = rng.standard_normal(2**20 + 777) * 3.0 - 1.0
    got = welch_asd(x, 25600.0, 1024)
    _, p_ref = scipy_reference(x, 25600.0, 1024)  # reference: scipy.signal.welch
    np.testing.assert_allclose(got.asd, p_ref, rtol=1e-10, atol=0)
    # Same record in three unequal pieces, one of them shorter than a segment.
    acc = WelchAccumulator(25600.0, 1024)
    for piece in (x[:300001], x[300001:300500], x[300500:]):
        acc.update(piece)
    np.testing.assert_allclose(acc.result().asd, p_ref, rtol=1e-10, atol=0)


def test_float32_chunks_are_computed_in_float64():
    rng = np.random.default_rng(5)
    x32 = rng.standard_normal(5000).astype(np.float32)
    got = welch_asd(x32, 1000.0, 256)
    _, p_ref = scipy_reference(x32.astype(np.float64), 1000.0, 256)  # reference: scipy.signal.welch in float64
    np.testing.assert_allclose(got.asd, p_ref, rtol=1e-10, atol=0)


@settings(max_examples=60, deadline=None)
@given(
    n_samples=st.integers(min_value=32, max_value=600),
    nperseg=st.sampled_from([4, 5, 16, 31, 32]),
    cuts=st.lists(st.integers(min_value=0, max_value=600), max_size=25),
    seed=st.integers(min_value=0, max_value=2**32 - 1),
)
def test_property_any_chunking_equals_scipy_welch(n_samples, nperseg, cuts, seed):
    x = np.random.default_rng(seed).standard_normal(n_samples) + 0.25
    edges = [0] + sorted(c for c in cuts if c <= n_samples) + [n_samples]
    acc = WelchAccumulator(100.0, nperseg)
    for a, b in zip(edges[:-1], edges[1:]):
        acc.update(x[a:b])
    _, p_ref = scipy_reference(x, 100.0, nperseg)  # reference: scipy.signal.welch
    np.testing.assert_allclose(acc.result().asd, p_ref, rtol=1e-10, atol=1e-300)


def test_white_noise_level_is_twice_variance_over_rate():
    # One-sided density of white noise of variance s^2 sampled at fs is 2 s^2 / fs
    # (Bendat & Piersol, one-sided spectral density of band-limited white noise).
    rng = np.random.default_rng(3)
    est = welch_asd(rng.normal(0.0, 2.0, 2**18), 1000.0, 512)
    interior = est.asd[1:-1]
    assert np.mean(interior) == pytest.approx(2 * 4.0 / 1000.0, rel=0.01)
    # Parseval: sum of density * df equals the variance (density scaling).
    assert np.sum(est.asd) * est.resolution_hz == pytest.approx(4.0, rel=0.01)


def test_hann_overlap_correlation_published_values():
    w = scipy.signal.get_window("hann", 4096)
    # Harris (1978), Proc. IEEE 66(1), Table I, Hann (alpha = 2): overlap correlation
    # 16.7 % at 50 % overlap; closed form for the periodic Hann window: exactly 1/6.
    c50 = overlap_correlation(w, 2048)
    assert c50.size == 1
    assert c50[0] == pytest.approx(1.0 / 6.0, rel=1e-12)
    # Harris (1978), Table I, Hann: 65.9 % at 75 % overlap (from memory).
    c75 = overlap_correlation(w, 1024)
    assert c75[0] == pytest.approx(0.659, abs=5e-4)
    # Non-overlapping segments are uncorrelated.
    assert overlap_correlation(w, 4096).size == 0


def test_welch_dof_hann_half_overlap_published_formula():
    for k in [1, 2, 3, 10, 57, 1000]:
        # Welch (1967) with c = 1/6: nu = 2K / (1 + (1 - 1/K)/18) = 36 K^2 / (19 K - 1).
        assert welch_dof(k) == pytest.approx(36.0 * k * k / (19.0 * k - 1.0), rel=1e-12)
    # Asymptote 36/19 K, about 1.89 K (Welch 1967).
    assert welch_dof(10**6) / 10**6 == pytest.approx(36.0 / 19.0, rel=1e-6)
    assert welch_dof(1) == pytest.approx(2.0)  # a single periodogram: chi-square with 2 dof
    # General formula with no overlap: independent segments give 2K.
    assert welch_dof(40, correlations=[]) == pytest.approx(80.0)
    # The accumulator's dof agrees (its own Hann window, 50 % overlap).
    est = welch_asd(np.random.default_rng(0).standard_normal(256 * 20), 1.0, 256)
    assert est.dof == pytest.approx(36.0 * est.segments**2 / (19.0 * est.segments - 1.0), rel=1e-12)


def test_dof_matches_monte_carlo_scatter_of_white_noise_estimates():
    # chi-square model (Bendat & Piersol): Var(S_hat) / S^2 = 2 / nu.  The Hann/50 %
    # value (60.7 for K = 32) is 5 % below the naive 2K = 64, so this separates them.
    rng = np.random.default_rng(2024)
    nperseg, k, rate_hz, records = 256, 32, 1000.0, 300
    n = (k - 1) * (nperseg // 2) + nperseg
    estimates = np.array([welch_asd(rng.standard_normal(n), rate_hz, nperseg).asd[2:-2]
                          for _ in range(records)])
    true_asd = 2.0 / rate_hz  # unit-variance white noise
    nu_measured = 2.0 / (estimates.var(axis=0, ddof=1).mean() / true_asd**2)
    assert nu_measured == pytest.approx(welch_dof(k), rel=0.025)
    # 90 % chi-square limits contain the true value about 90 % of the time
    # (Bendat & Piersol); binomial scatter here is about 0.002.
    lower, upper = chi2_confidence_limits(estimates, welch_dof(k), 0.90)
    coverage = np.mean((lower <= true_asd) & (true_asd <= upper))
    assert coverage == pytest.approx(0.90, abs=0.015)


def test_chi2_limits_against_table_and_scipy():
    # Chi-square table (NIST/SEMATECH e-Handbook 1.3.6.7.4), nu = 10:
    # upper 5 % point 18.307, lower 5 % point 3.940.
    lower, upper = chi2_confidence_limits(np.array([1.0]), 10.0, 0.90)
    assert lower[0] == pytest.approx(10.0 / 18.307, rel=1e-4)
    assert upper[0] == pytest.approx(10.0 / 3.940, rel=1e-3)
    # Reference library: scipy.stats.chi2.ppf, arrays and a non-integer dof.
    s = np.array([0.01, 0.04, 2.5])
    lo, hi = chi2_confidence_limits(s, 57.3, 0.95)
    np.testing.assert_allclose(lo, 57.3 * s / scipy.stats.chi2.ppf(0.975, 57.3), rtol=1e-14)
    np.testing.assert_allclose(hi, 57.3 * s / scipy.stats.chi2.ppf(0.025, 57.3), rtol=1e-14)
    est = welch_asd(np.random.default_rng(1).standard_normal(4096), 100.0, 256)
    lo2, hi2 = est.confidence_limits(0.8)
    np.testing.assert_allclose(lo2, est.dof * est.asd / scipy.stats.chi2.ppf(0.9, est.dof), rtol=1e-14)
    assert np.all(lo2 <= est.asd) and np.all(est.asd <= hi2)


def test_choose_nperseg_by_dof():
    rate = 10240.0
    choice = choose_nperseg(102400, rate)  # 10 s record
    assert choice.target_dof == DEFAULT_TARGET_DOF
    assert choice.nperseg & (choice.nperseg - 1) == 0  # power of two
    assert choice.target_reached and choice.message == ""
    assert choice.dof >= DEFAULT_TARGET_DOF
    # the next finer resolution would miss the target
    k_next = (102400 - choice.nperseg) // choice.nperseg
    assert welch_dof(k_next) < DEFAULT_TARGET_DOF
    assert choice.resolution_hz == rate / choice.nperseg
    # segment count as scipy.signal.welch would make them
    est = welch_asd(np.zeros(102400), rate, choice.nperseg)
    assert est.segments == choice.segments


def test_choose_nperseg_reports_unreachable_target():
    choice = choose_nperseg(5000, 10240.0, target_dof=120)
    assert not choice.target_reached
    assert choice.nperseg == 256  # the coarsest allowed by default
    assert "120" in choice.message and "s" in choice.message
    need_s = float(choice.message.rsplit("at least ", 1)[1].split(" s")[0])
    k_needed = round((need_s * 10240.0 - 256) / 128) + 1
    assert welch_dof(k_needed) >= 120 > welch_dof(k_needed - 1)


def test_choose_nperseg_by_resolution():
    choice = choose_nperseg(10**6, 10240.0, resolution_hz=1.0, target_dof=120)
    assert choice.nperseg == 16384 and choice.resolution_hz <= 1.0
    assert choice.resolution_hz * 2 > 1.0
    assert choice.target_reached
    short = choose_nperseg(40000, 10240.0, resolution_hz=1.0, target_dof=120)
    assert not short.target_reached and short.message
    with pytest.raises(InputError, match="resolution"):
        choose_nperseg(1000, 10240.0, resolution_hz=1.0)
    with pytest.raises(InputError):
        choose_nperseg(100, 10240.0)
    with pytest.raises(InputError):
        choose_nperseg(10**6, -1.0)


def test_input_errors_are_input_errors():
    acc = WelchAccumulator(100.0, 64)
    acc.update(np.ones(10))
    with pytest.raises(InputError, match="fewer than one Welch segment"):
        acc.result()
    with pytest.raises(InputError, match="sample 13"):
        acc.update(np.array([0.0, 1.0, 2.0, np.nan]))
    with pytest.raises(InputError, match="1-D"):
        acc.update(np.ones((3, 3)))
    with pytest.raises(InputError, match="real"):
        acc.update(np.ones(3) * 1j)
    with pytest.raises(InputError):
        WelchAccumulator(0.0, 64)
    with pytest.raises(InputError):
        WelchAccumulator(100.0, 1)
    with pytest.raises(InputError):
        WelchAccumulator(100.0, 64.5)
    with pytest.raises(InputError):
        chi2_confidence_limits([1.0], 0.0)
    with pytest.raises(InputError):
        chi2_confidence_limits([1.0], 10.0, confidence=1.0)
    with pytest.raises(InputError):
        welch_dof(0)


def test_result_is_frozen_and_read_only():
    est = welch_asd(np.random.default_rng(9).standard_normal(1000), 100.0, 64)
    with pytest.raises(ValueError):
        est.asd[0] = 1.0
    with pytest.raises(AttributeError):
        est.dof = 3.0  # frozen dataclass
    assert math.isfinite(est.dof)
