"""Hard clipping of a Gaussian: closed forms checked against scipy.integrate.quad and Monte Carlo."""

import math
import warnings

import numpy as np
import pytest
from numpy.polynomial import hermite_e
from scipy import integrate, special, stats

from vibsynth.transforms.clipping import (
    MAX_CREST_FACTOR,
    ClipTransform,
    clip_hermite_coefficients,
    clipped_gaussian_kurtosis,
    clipped_gaussian_variance,
    solve_clip_level,
)
from vibsynth.errors import InputError, OutOfRangeError

LEVELS = [0.3, 1.0, 1.8, 3.0, 4.5]


def _clip_expectation(c, func):
    """E[func(clip(U, c), U)] by scipy.integrate.quad, split at the kinks +-c."""
    norm = 1.0 / math.sqrt(2.0 * math.pi)

    def integrand(u):
        return func(min(max(u, -c), c), u) * math.exp(-0.5 * u * u) * norm

    total = 0.0
    for lo, hi in ((-40.0, -c), (-c, c), (c, 40.0)):  # phi(40) ~ 1e-348: nothing beyond
        with warnings.catch_warnings():
            # an odd integrand (even n) integrates to 0, where quad cannot meet a relative
            # tolerance and says so; its absolute error estimate is still checked
            warnings.simplefilter("ignore", integrate.IntegrationWarning)
            value, error = integrate.quad(integrand, lo, hi, epsabs=1e-13, epsrel=1e-12, limit=200)
        assert error < 1e-7  # raw integral; a_n divides it by n!
        total += value
    return total


def _he(n, x):
    """Probabilists' Hermite polynomial He_n(x), scalar, by the three-term recurrence
    He_{k+1} = x He_k - k He_{k-1} (Abramowitz & Stegun 22.7.14); checked against
    numpy.polynomial.hermite_e in test_recurrence_matches_numpy."""
    previous, current = 1.0, x
    if n == 0:
        return previous
    for k in range(1, n):
        previous, current = current, x * current - k * previous
    return current


def test_recurrence_matches_numpy():
    for n in range(16):
        assert _he(n, 1.7) == pytest.approx(hermite_e.hermeval(1.7, [0.0] * n + [1.0]), rel=1e-13)


@pytest.mark.parametrize("c", LEVELS)
def test_coefficients_match_numerical_integration(c):
    # Reference: a_n = E[clip(U) He_n(U)] / n! by scipy.integrate.quad; closed form (Hermite expansion of the
    # hard limiter, Van Vleck & Middleton, Proc. IEEE 54(1), 1966):
    # a_1 = 2 Phi(c) - 1, odd n >= 3: a_n = -2 phi(c) He_{n-2}(c) / n!, even n: 0.
    a = clip_hermite_coefficients(c, 15)
    for n in range(16):
        reference = _clip_expectation(c, lambda y, u, n=n: y * _he(n, u)) / math.factorial(n)
        assert a[n] == pytest.approx(reference, abs=1e-10), n
    assert a[1] == pytest.approx(2.0 * stats.norm.cdf(c) - 1.0, abs=1e-15)
    assert np.all(a[0::2] == 0.0)
    # sign: clipping removes cubic content, so a_3 = -2 phi(c) c / 6 < 0
    assert a[3] < 0.0


@pytest.mark.parametrize("c", LEVELS)
def test_variance_and_kurtosis_closed_forms(c):
    # Reference: scipy.integrate.quad of clip(u)^2 phi(u) and clip(u)^4 phi(u).
    m2 = _clip_expectation(c, lambda y, u: y * y)
    m4 = _clip_expectation(c, lambda y, u: y**4)
    assert clipped_gaussian_variance(c) == pytest.approx(m2, abs=1e-12)
    assert clipped_gaussian_kurtosis(c) == pytest.approx(m4 / m2**2, rel=1e-11)


@pytest.mark.parametrize("c", [1.0, 3.0])
def test_hermite_series_converges_to_variance(c):
    # Reference: Parseval for the Hermite expansion, sum n! a_n^2 = E[y^2] (closed form).
    # The tail decays slowly (about n^-1.5, the price of the kink), but monotonically.
    a = clip_hermite_coefficients(c, 150)
    terms = special.factorial(np.arange(151)) * a**2
    partial = np.cumsum(terms)
    variance = clipped_gaussian_variance(c)
    gaps = variance - partial[[5, 21, 61, 151 - 2]]
    assert np.all(gaps > 0.0) and np.all(np.diff(gaps) < 0.0)
    assert gaps[-1] < 2e-3 * (variance - a[1] ** 2)  # under 0.2% of the distortion power left


@pytest.mark.parametrize("crest", [1.2, 2.0, 3.0, 4.0, 6.0])
def test_solve_clip_level_keeps_peak_over_rms(crest):
    # Reference: the defining equation c / sigma(c) = crest with sigma(c) from scipy.integrate.quad.
    transform = solve_clip_level(crest)
    c = transform.clip_level_sigma
    sigma = math.sqrt(_clip_expectation(c, lambda y, u: y * y))
    assert c / sigma == pytest.approx(crest, rel=1e-11)
    assert transform.crest_factor == pytest.approx(crest, rel=1e-13)
    assert c < crest  # clipping lowers the RMS, so the Gaussian level sits below the crest factor


def test_clipped_record_monte_carlo():
    # Reference: Monte Carlo, 2^21 samples; crest factor 2.5 clips about 1.4% of samples
    # (2 (1 - Phi(2.469)), scipy.stats.norm), so the peak sits exactly at the clip.
    transform = solve_clip_level(2.5)
    u = np.random.default_rng(5).standard_normal(1 << 21)
    y = transform.apply(u)
    rms = math.sqrt(np.mean(y * y))
    assert np.max(np.abs(y)) == pytest.approx(2.5, rel=1e-12)
    assert abs(rms - 1.0) < 5.0 * np.std(y * y) / math.sqrt(y.size) / 2.0
    assert np.max(np.abs(y)) / rms == pytest.approx(2.5, rel=5e-3)
    clipped = np.mean(np.abs(u) >= transform.clip_level_sigma)
    expected = 2.0 * stats.norm.sf(transform.clip_level_sigma)
    assert abs(clipped - expected) < 5.0 * math.sqrt(expected / y.size)
    kurt = stats.kurtosis(y, fisher=False)
    assert kurt == pytest.approx(transform.moments()[3], abs=0.01)


def test_transform_interface():
    transform = solve_clip_level(3.0)
    u = np.random.default_rng(9).standard_normal(100_001)
    y = transform.apply(u)
    in_place = u.copy()
    assert transform.apply(in_place, out=in_place) is in_place
    np.testing.assert_array_equal(in_place, y)
    a = transform.hermite_coefficients(9)
    np.testing.assert_allclose(a, clip_hermite_coefficients(transform.clip_level_sigma, 9) / transform.clipped_std)
    assert transform.output_variance() == pytest.approx(1.0, abs=1e-15)
    # distribution: atoms of mass 1 - Phi(c) at each clip level
    assert transform.cdf(np.array([transform.crest_factor]))[0] == 1.0
    below = transform.cdf(np.array([transform.crest_factor * (1 - 1e-12)]))[0]
    assert 1.0 - below == pytest.approx(stats.norm.sf(transform.clip_level_sigma), rel=1e-6)
    assert transform.ppf(np.array([0.9999999]))[0] == pytest.approx(transform.crest_factor)


@pytest.mark.parametrize("bad", [1.0, 0.5, -3.0, MAX_CREST_FACTOR + 0.5, float("inf"), float("nan")])
def test_refuses_unreachable_crest_factors(bad):
    with pytest.raises(OutOfRangeError) as info:
        solve_clip_level(bad)
    message = str(info.value)
    assert message.startswith("crest_factor:") and "above 1" in message and "at most 10" in message


def test_refuses_bad_inputs():
    with pytest.raises(InputError):
        solve_clip_level("three")
    with pytest.raises(OutOfRangeError):
        ClipTransform(0.0)
    with pytest.raises(InputError):
        clip_hermite_coefficients(2.0, 0)
