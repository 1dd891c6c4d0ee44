"""Checks of the Rice / Davenport / Cartwright & Longuet-Higgins formulas."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.stats
from scipy import integrate

from vibsynth.errors import InputError
from vibsynth.analysis.extremes import (
    cartwright_longuet_higgins_peak_cdf,
    cartwright_longuet_higgins_peak_pdf,
    davenport_expected_largest_peak_sigma,
    davenport_largest_peak_cdf,
    davenport_largest_peak_std_sigma,
    gaussian_exceedance_probability,
    irregularity_factor,
    peak_rate_hz,
    peak_theory,
    peak_theory_from_sampled_spectrum,
    sampled_spectral_moments,
    zero_upcrossing_rate_hz,
)


def flat_band_moments(level, f1, f2):
    """Closed-form spectral moments of a flat one-sided band: m_n = S (f2^(n+1) - f1^(n+1)) / (n+1)."""
    return tuple(level * (f2 ** (n + 1) - f1 ** (n + 1)) / (n + 1) for n in (0, 2, 4))


def band_limited_gaussian(rng, rate_hz, n, f_low_hz, f_high_hz, records=None):
    """Unit-variance Gaussian record(s), flat spectrum on [f_low, f_high], via numpy's FFT.

    Independent of the project's generator on purpose.
    """
    freqs = np.fft.rfftfreq(n, 1.0 / rate_hz)
    band = (freqs >= f_low_hz) & (freqs <= f_high_hz)
    shape = (band.sum(),) if records is None else (records, band.sum())
    spec = np.zeros(shape[:-1] + (freqs.size,), dtype=complex)
    spec[..., band] = rng.standard_normal(shape) + 1j * rng.standard_normal(shape)
    x = np.fft.irfft(spec, n=n, axis=-1)
    return x / math.sqrt(4.0 * band.sum() / n**2)  # exact process variance before scaling


def test_davenport_expected_largest_peak_against_simulated_maxima():
    rng = np.random.default_rng(1964)
    rate_hz, n, f1, f2, records = 4096.0, 2**15, 100.0, 300.0, 400
    x = band_limited_gaussian(rng, rate_hz, n, f1, f2, records=records)
    m0, m2, _ = flat_band_moments(1.0, f1, f2)
    nu0 = zero_upcrossing_rate_hz(m0, m2)
    duration = n / rate_hz
    assert nu0 * duration > 1000  # asymptotic regime of the formula
    maxima_sigma = x.max(axis=1)  # process sigma is 1 by construction
    # Davenport (1964): E[max] = sqrt(2 ln nu0 T) + 0.5772 / sqrt(2 ln nu0 T).
    root = math.sqrt(2.0 * math.log(nu0 * duration))
    assert davenport_expected_largest_peak_sigma(nu0, duration) == pytest.approx(root + 0.5772 / root, rel=1e-5)
    assert np.mean(maxima_sigma) == pytest.approx(davenport_expected_largest_peak_sigma(nu0, duration), rel=0.03)


@pytest.mark.parametrize("cycles, mean_rel, std_rel", [(1e3, 0.006, 0.08), (1e6, 0.002, 0.05), (1e12, 0.001, 0.03)])
def test_davenport_cdf_mean_and_std_agree_with_closed_forms(cycles, mean_rel, std_rel):
    # Davenport (1964) derives the mean and standard deviation of the largest peak as
    # asymptotic expansions of the distribution exp(-nu0 T exp(-x^2/2)); integrate
    # that distribution numerically (scipy.integrate.quad) and compare.
    nu0, t = cycles, 1.0
    centre = math.sqrt(2.0 * math.log(cycles))
    h = 1e-5

    def pdf(v):
        return (davenport_largest_peak_cdf(v + h, nu0, t) - davenport_largest_peak_cdf(v - h, nu0, t)) / (2 * h)

    mean = integrate.quad(lambda v: v * pdf(v), 0.0, 20.0, points=[centre], limit=200)[0]
    var = integrate.quad(lambda v: (v - mean) ** 2 * pdf(v), 0.0, 20.0, points=[centre], limit=200)[0]
    assert mean == pytest.approx(davenport_expected_largest_peak_sigma(nu0, t), rel=mean_rel)
    assert math.sqrt(var) == pytest.approx(davenport_largest_peak_std_sigma(nu0, t), rel=std_rel)
    # pi/sqrt(6) / sqrt(2 ln nu0 T) (Davenport 1964)
    assert davenport_largest_peak_std_sigma(nu0, t) == pytest.approx(math.pi / math.sqrt(6.0) / centre, rel=1e-12)


def test_gaussian_exceedance_against_normal_table():
    # Abramowitz & Stegun Table 26.1 / any normal table: two-sided tails
    # P(|X| > 1) = 0.3173, P(|X| > 2) = 0.0455, P(|X| > 3) = 0.0027, P(|X| > 4) = 6.33e-5.
    for k, table in [(1, 0.31731), (2, 0.045500), (3, 0.0026998), (4, 6.3342e-5)]:
        assert gaussian_exceedance_probability(k) == pytest.approx(table, rel=1e-4)
    ks = np.array([0.0, 0.5, 2.5, 6.0])
    np.testing.assert_allclose(gaussian_exceedance_probability(ks), 2 * scipy.stats.norm.sf(ks),
                               rtol=1e-12)  # reference: scipy.stats.norm


@pytest.mark.parametrize("alpha", [0.0, 0.3, 0.7, 0.95, 0.999, 1.0])
def test_cartwright_longuet_higgins_pdf_is_a_density_with_published_mean(alpha):
    # Integrates to 1 (scipy.integrate.quad).
    total = integrate.quad(lambda e: cartwright_longuet_higgins_peak_pdf(e, alpha), -np.inf, np.inf)[0]
    assert total == pytest.approx(1.0, abs=1e-8)
    # Mean peak height alpha * sqrt(pi/2) (Cartwright & Longuet-Higgins 1956; from memory).
    mean = integrate.quad(lambda e: e * cartwright_longuet_higgins_peak_pdf(e, alpha), -np.inf, np.inf)[0]
    assert mean == pytest.approx(alpha * math.sqrt(math.pi / 2.0), abs=1e-8)
    # The CDF is the integral of the density (scipy.integrate.quad).
    for h in (-1.0, 0.0, 0.8, 2.5):
        area = integrate.quad(lambda e: cartwright_longuet_higgins_peak_pdf(e, alpha), -np.inf, h)[0]
        assert cartwright_longuet_higgins_peak_cdf(h, alpha) == pytest.approx(area, abs=1e-8)


def test_cartwright_longuet_higgins_limits_rayleigh_and_gaussian():
    eta = np.linspace(-4.0, 6.0, 101)
    # alpha = 1: Rayleigh (scipy.stats.rayleigh); alpha = 0: Gaussian (scipy.stats.norm).
    np.testing.assert_allclose(cartwright_longuet_higgins_peak_pdf(eta, 1.0), scipy.stats.rayleigh.pdf(eta),
                               atol=1e-15)
    np.testing.assert_allclose(cartwright_longuet_higgins_peak_pdf(eta, 0.0), scipy.stats.norm.pdf(eta),
                               rtol=1e-12)
    np.testing.assert_allclose(cartwright_longuet_higgins_peak_cdf(eta, 1.0), scipy.stats.rayleigh.cdf(eta),
                               atol=1e-15)
    # continuous approach to the Rayleigh limit
    np.testing.assert_allclose(cartwright_longuet_higgins_peak_pdf(eta, 1.0 - 1e-10),
                               scipy.stats.rayleigh.pdf(eta), atol=1e-4)


def test_rice_rates_and_peak_distribution_against_a_simulated_record():
    rng = np.random.default_rng(1956)
    rate_hz, n, f1, f2 = 8192.0, 2**20, 10.0, 400.0
    x = band_limited_gaussian(rng, rate_hz, n, f1, f2)
    duration = n / rate_hz
    m0, m2, m4 = flat_band_moments(1.0, f1, f2)
    upcrossings = np.count_nonzero((x[:-1] < 0) & (x[1:] >= 0))
    maxima = (x[1:-1] > x[:-2]) & (x[1:-1] >= x[2:])
    peaks = x[1:-1][maxima]
    # Rice (1944/45): nu0 = sqrt(m2/m0), peak rate = sqrt(m4/m2).
    assert upcrossings / duration == pytest.approx(zero_upcrossing_rate_hz(m0, m2), rel=0.02)
    assert peaks.size / duration == pytest.approx(peak_rate_hz(m2, m4), rel=0.02)
    # Cartwright & Longuet-Higgins (1956): fraction of negative maxima (1 - alpha)/2.
    alpha = irregularity_factor(m0, m2, m4)
    expected = cartwright_longuet_higgins_peak_cdf(0.0, alpha)
    assert expected == pytest.approx((1 - alpha) / 2, rel=1e-12)
    observed = np.mean(peaks < 0)
    assert abs(observed - expected) < 5 * math.sqrt(expected * (1 - expected) / peaks.size)
    # and the median peak height (CLH cdf = 0.5), within the order-statistic scatter
    median = np.median(peaks)
    assert cartwright_longuet_higgins_peak_cdf(median, alpha) == pytest.approx(0.5, abs=5 / math.sqrt(peaks.size))


def test_peak_theory_and_sampled_spectrum_helper():
    level, f1, f2, duration = 0.04, 20.0, 2000.0, 60.0
    m0, m2, m4 = flat_band_moments(level, f1, f2)
    theory = peak_theory(m0, m2, m4, duration)
    # Bookkeeping of the result object (definitions, not an outside check); the Rice rates and
    # Davenport's peak are checked against counted records in test_verify.py and above.
    assert theory.rms_g == pytest.approx(math.sqrt(level * (f2 - f1)))  # g RMS = sqrt(area)
    assert theory.zero_upcrossing_rate_hz == pytest.approx(math.sqrt(m2 / m0))  # Rice
    assert theory.peak_rate_hz == pytest.approx(math.sqrt(m4 / m2))  # Rice
    assert theory.irregularity == pytest.approx(m2 / math.sqrt(m0 * m4))
    assert theory.expected_largest_peak_g == pytest.approx(theory.expected_largest_peak_sigma * theory.rms_g)
    # Sampled flat band (a spectrum estimate on a fine grid): the trapezoid helper
    # converges to the closed-form moments.
    f = np.linspace(0.0, 4000.0, 400_001)
    s = np.where((f >= f1) & (f <= f2), level, 0.0)
    sm0, sm2, sm4 = sampled_spectral_moments(f, s)
    assert sm0 == pytest.approx(m0, rel=1e-3)
    assert sm2 == pytest.approx(m2, rel=1e-3)
    assert sm4 == pytest.approx(m4, rel=1e-3)
    sampled = peak_theory_from_sampled_spectrum(f, s, duration)
    assert sampled.expected_largest_peak_sigma == pytest.approx(theory.expected_largest_peak_sigma, rel=1e-4)


def test_input_validation():
    with pytest.raises(InputError, match="m0_g2"):
        zero_upcrossing_rate_hz(0.0, 1.0)
    with pytest.raises(InputError, match="m2"):
        irregularity_factor(1.0, 10.0, 1.0)  # m2^2 > m0 m4 is impossible for a spectrum
    with pytest.raises(InputError, match="duration"):
        davenport_expected_largest_peak_sigma(10.0, 0.05)  # nu0 T = 0.5
    with pytest.raises(InputError):
        davenport_largest_peak_cdf(3.0, float("nan"), 10.0)
    with pytest.raises(InputError):
        cartwright_longuet_higgins_peak_pdf(1.0, 1.5)
    with pytest.raises(InputError):
        gaussian_exceedance_probability(-1.0)
    with pytest.raises(InputError):
        sampled_spectral_moments([1.0, 1.0], [0.1, 0.1])
    with pytest.raises(InputError):
        peak_theory_from_sampled_spectrum([0.0, 1.0], [0.0, 0.0], 10.0)
    assert irregularity_factor(1.0, 1.0, 1.0 - 1e-12) == 1.0  # rounding slack, clamped


def test_davenport_warns_when_few_crossings():
    # The formula is asymptotic in nu0 T (Davenport 1964); a caller asking for it over a couple of
    # crossings is told, and gets the value still (an independent check found it silent at 1.6).
    import warnings

    from vibsynth.errors import VibsynthWarning

    with pytest.warns(VibsynthWarning, match="expected up-crossings"):
        davenport_expected_largest_peak_sigma(32.0, 0.05)
    with warnings.catch_warnings():
        warnings.simplefilter("error", VibsynthWarning)
        davenport_expected_largest_peak_sigma(100.0, 60.0)  # 6000 crossings: silent
