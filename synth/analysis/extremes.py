"""Peak and crossing theory of a stationary Gaussian process, from its spectral moments.

Spectral moments of a one-sided spectral density S(f) (g^2/Hz, f in Hz):
``m_n = integral f^n S(f) df``, so m0 is in g^2 (the mean square), m2 in
g^2 Hz^2 and m4 in g^2 Hz^4.  The profile model computes them in closed form
from a breakpoint table; this module only takes the numbers.
:func:`sampled_spectral_moments` is a numerical helper (trapezoid rule) for a
spectrum known only at sampled lines, e.g. a Welch estimate.

Public API
----------
zero_upcrossing_rate_hz(m0, m2)             Rice: sqrt(m2/m0)
peak_rate_hz(m2, m4)                         Rice: sqrt(m4/m2)
irregularity_factor(m0, m2, m4)              alpha = m2 / sqrt(m0 m4)
davenport_expected_largest_peak_sigma(nu0, T)
davenport_largest_peak_std_sigma(nu0, T)
davenport_largest_peak_cdf(x, nu0, T)
gaussian_exceedance_probability(k)           2 (1 - Phi(k))
cartwright_longuet_higgins_peak_pdf(eta, alpha)
cartwright_longuet_higgins_peak_cdf(eta, alpha)
peak_theory(m0, m2, m4, duration_s)          all of the above, as a PeakTheory
sampled_spectral_moments(frequencies_hz, asd)
peak_theory_from_sampled_spectrum(frequencies_hz, asd, duration_s)
"""

from __future__ import annotations

import math
import warnings
import numbers
from dataclasses import dataclass

import numpy as np
from scipy.integrate import trapezoid
from scipy import special
from scipy.special import erfc, ndtr

from vibsynth.errors import InputError, VibsynthWarning

__all__ = [
    "LargestPeak",
    "largest_peak_from_crossing_rate",
    "sampled_crossing_rate_hz",
    "zero_upcrossing_rate_hz",
    "peak_rate_hz",
    "irregularity_factor",
    "davenport_expected_largest_peak_sigma",
    "davenport_largest_peak_std_sigma",
    "davenport_largest_peak_cdf",
    "gaussian_exceedance_probability",
    "cartwright_longuet_higgins_peak_pdf",
    "cartwright_longuet_higgins_peak_cdf",
    "PeakTheory",
    "peak_theory",
    "sampled_spectral_moments",
    "peak_theory_from_sampled_spectrum",
]

_EULER_GAMMA = float(np.euler_gamma)  # 0.5772..., Euler-Mascheroni constant

# Relative slack on the Cauchy-Schwarz bound m2^2 <= m0 m4 for rounding in
# moments computed elsewhere (alpha is then clamped to 1).
_ALPHA_SLACK = 1e-9


def _positive(value, name: str, unit: str) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value) or value <= 0:
        raise InputError(f"{name} must be a finite number > 0 {unit}, got {value!r}", location=name)
    return float(value)


def zero_upcrossing_rate_hz(m0_g2: float, m2_g2_hz2: float) -> float:
    """Expected rate of up-crossings of the mean level, ``nu0 = sqrt(m2 / m0)``.

    Parameters
    ----------
    m0_g2 : float
        Zeroth spectral moment (mean square), g^2 (or unit^2), > 0.
    m2_g2_hz2 : float
        Second spectral moment, g^2 Hz^2, > 0.

    Returns
    -------
    float
        Up-crossings per second, Hz.

    References
    ----------
    S. O. Rice, "Mathematical analysis of random noise", Bell Syst. Tech. J.
    23, 282-332 (1944) and 24, 46-156 (1945).
    """
    return math.sqrt(_positive(m2_g2_hz2, "m2_g2_hz2", "g^2 Hz^2") / _positive(m0_g2, "m0_g2", "g^2"))


def peak_rate_hz(m2_g2_hz2: float, m4_g2_hz4: float) -> float:
    """Expected rate of maxima (peaks of either sign), ``sqrt(m4 / m2)``.

    Parameters
    ----------
    m2_g2_hz2 : float
        Second spectral moment, g^2 Hz^2, > 0.
    m4_g2_hz4 : float
        Fourth spectral moment, g^2 Hz^4, > 0.

    Returns
    -------
    float
        Maxima per second, Hz.

    References
    ----------
    S. O. Rice, Bell Syst. Tech. J. 23, 282-332 (1944); 24, 46-156 (1945).
    """
    return math.sqrt(_positive(m4_g2_hz4, "m4_g2_hz4", "g^2 Hz^4") / _positive(m2_g2_hz2, "m2_g2_hz2", "g^2 Hz^2"))


def irregularity_factor(m0_g2: float, m2_g2_hz2: float, m4_g2_hz4: float) -> float:
    """Irregularity factor ``alpha = m2 / sqrt(m0 m4)``: up-crossing rate over peak rate.

    1 for a narrow-band process (one peak per up-crossing), towards 0 for a
    broad-band one.  The spectral width parameter of Cartwright &
    Longuet-Higgins is ``epsilon = sqrt(1 - alpha^2)``.

    Parameters
    ----------
    m0_g2 : float
        Zeroth spectral moment, g^2, > 0.
    m2_g2_hz2 : float
        Second spectral moment, g^2 Hz^2, > 0.
    m4_g2_hz4 : float
        Fourth spectral moment, g^2 Hz^4, > 0.

    Returns
    -------
    float
        alpha in (0, 1] (dimensionless).

    Raises
    ------
    InputError
        Non-positive moments, or ``m2^2 > m0 m4`` (impossible for a spectrum).

    References
    ----------
    S. O. Rice (1944/45); D. E. Cartwright and M. S. Longuet-Higgins, "The
    statistical distribution of the maxima of a random function", Proc. R.
    Soc. Lond. A 237, 212-232 (1956).
    """
    m0 = _positive(m0_g2, "m0_g2", "g^2")
    m2 = _positive(m2_g2_hz2, "m2_g2_hz2", "g^2 Hz^2")
    m4 = _positive(m4_g2_hz4, "m4_g2_hz4", "g^2 Hz^4")
    alpha = m2 / math.sqrt(m0 * m4)
    if alpha > 1.0 + _ALPHA_SLACK:
        raise InputError(
            f"spectral moments m0={m0:g}, m2={m2:g}, m4={m4:g} give m2^2 > m0*m4 (alpha={alpha:.6g}); "
            f"no spectrum has that, check the moments (m2^2 <= m0*m4 must hold)",
            location="m2_g2_hz2",
        )
    return min(alpha, 1.0)


#: Below this many expected up-crossings in the duration the largest-peak formula is only rough (its
#: derivation assumes many independent crossings; common practice, no source).
DAVENPORT_MIN_CYCLES = 20.0


def _ln_nu0_t(nu0_hz: float, duration_s: float) -> float:
    nu0 = _positive(nu0_hz, "nu0_hz", "Hz")
    t = _positive(duration_s, "duration_s", "s")
    cycles = nu0 * t
    if cycles <= 1.0:
        raise InputError(
            f"nu0_hz * duration_s = {cycles:g} expected up-crossings; Davenport's largest-peak formula needs "
            f"many more than 1 (use a longer duration)",
            location="duration_s",
        )
    if cycles < DAVENPORT_MIN_CYCLES:
        warnings.warn(
            f"only {cycles:.3g} expected up-crossings in the duration: Davenport's largest-peak formula is "
            f"asymptotic (many crossings) and rough below about {DAVENPORT_MIN_CYCLES:g}; give a longer duration",
            VibsynthWarning, stacklevel=3)
    return math.log(cycles)


def davenport_expected_largest_peak_sigma(nu0_hz: float, duration_s: float) -> float:
    """Expected largest peak of a Gaussian record of given length, in standard deviations.

    ``sqrt(2 ln(nu0 T)) + 0.5772 / sqrt(2 ln(nu0 T))`` (0.5772 is Euler's
    constant); asymptotic for ``nu0 T`` large (hundreds or more).

    Parameters
    ----------
    nu0_hz : float
        Zero up-crossing rate, Hz (see :func:`zero_upcrossing_rate_hz`).
    duration_s : float
        Record duration T, s; ``nu0 T`` must exceed 1.

    Returns
    -------
    float
        Expected largest peak over the standard deviation (dimensionless);
        multiply by the RMS (about the mean) to get g.

    References
    ----------
    A. G. Davenport, "Note on the distribution of the largest value of a
    random function with application to gust loading", Proc. Instn Civ.
    Engrs 28, 187-196 (1964).
    """
    root = math.sqrt(2.0 * _ln_nu0_t(nu0_hz, duration_s))
    return root + _EULER_GAMMA / root


def davenport_largest_peak_std_sigma(nu0_hz: float, duration_s: float) -> float:
    """Standard deviation of the largest peak, in standard deviations of the process.

    ``(pi / sqrt 6) / sqrt(2 ln(nu0 T))``.

    Parameters
    ----------
    nu0_hz : float
        Zero up-crossing rate, Hz.
    duration_s : float
        Record duration T, s; ``nu0 T`` must exceed 1.

    Returns
    -------
    float
        Standard deviation of the largest peak over the process standard
        deviation (dimensionless).

    References
    ----------
    A. G. Davenport, Proc. Instn Civ. Engrs 28, 187-196 (1964).
    """
    return (math.pi / math.sqrt(6.0)) / math.sqrt(2.0 * _ln_nu0_t(nu0_hz, duration_s))


def davenport_largest_peak_cdf(x_sigma, nu0_hz: float, duration_s: float):
    """Probability that the largest peak in T stays below x standard deviations.

    ``P(max <= x) = exp(-nu0 T exp(-x^2 / 2))`` (up-crossings of a high level
    as a Poisson stream).

    Parameters
    ----------
    x_sigma : float or array_like
        Level, in standard deviations of the process (dimensionless).
    nu0_hz : float
        Zero up-crossing rate, Hz.
    duration_s : float
        Record duration T, s; ``nu0 T`` must exceed 1.

    Returns
    -------
    float or numpy.ndarray
        Probability (dimensionless), same shape as ``x_sigma``.

    References
    ----------
    A. G. Davenport, Proc. Instn Civ. Engrs 28, 187-196 (1964); Rice
    (1944/45) for the up-crossing rate of a level.
    """
    ln_cycles = _ln_nu0_t(nu0_hz, duration_s)
    x = np.asarray(x_sigma, dtype=np.float64)
    if np.any(np.isnan(x)):
        raise InputError("x_sigma must not contain NaN", location="x_sigma")
    p = np.exp(-np.exp(ln_cycles - 0.5 * x * x))
    return float(p) if p.ndim == 0 else p


def gaussian_exceedance_probability(k_sigma):
    """Probability that a Gaussian value is more than k standard deviations from its mean.

    ``2 (1 - Phi(k)) = erfc(k / sqrt 2)``, two-sided.

    Parameters
    ----------
    k_sigma : float or array_like
        Level k, in standard deviations, >= 0.

    Returns
    -------
    float or numpy.ndarray
        Probability (dimensionless), same shape as ``k_sigma``.

    References
    ----------
    M. Abramowitz and I. A. Stegun, "Handbook of Mathematical Functions",
    26.2 (normal probability function).
    """
    k = np.asarray(k_sigma, dtype=np.float64)
    if np.any(~np.isfinite(k)) or np.any(k < 0):
        raise InputError(f"k_sigma must be finite and >= 0, got {k_sigma!r}", location="k_sigma")
    p = erfc(k / math.sqrt(2.0))
    return float(p) if p.ndim == 0 else p


def _check_alpha(irregularity) -> float:
    if isinstance(irregularity, bool) or not isinstance(irregularity, numbers.Real) \
            or not math.isfinite(irregularity) or not 0.0 <= irregularity <= 1.0:
        raise InputError(f"irregularity must be between 0 and 1 (alpha = m2/sqrt(m0 m4)), got {irregularity!r}",
                         location="irregularity")
    return float(irregularity)


def cartwright_longuet_higgins_peak_pdf(eta, irregularity: float):
    """Probability density of the height of a maximum, in standard deviations.

    With ``epsilon = sqrt(1 - alpha^2)`` and ``eta`` the peak height over the
    process standard deviation (maxima of either sign):
    ``p(eta) = epsilon / sqrt(2 pi) exp(-eta^2 / (2 epsilon^2))
    + alpha eta exp(-eta^2 / 2) Phi(eta alpha / epsilon)``.
    It is the Rayleigh density ``eta exp(-eta^2/2)`` (eta >= 0) for alpha = 1
    and the Gaussian density for alpha = 0.

    Parameters
    ----------
    eta : float or array_like
        Peak height over the process standard deviation (dimensionless).
    irregularity : float
        Irregularity factor alpha in [0, 1] (see :func:`irregularity_factor`).

    Returns
    -------
    float or numpy.ndarray
        Density per unit of eta (dimensionless), same shape as ``eta``.

    References
    ----------
    D. E. Cartwright and M. S. Longuet-Higgins, "The statistical distribution
    of the maxima of a random function", Proc. R. Soc. Lond. A 237, 212-232
    (1956).
    """
    alpha = _check_alpha(irregularity)
    x = np.asarray(eta, dtype=np.float64)
    eps = math.sqrt(max(0.0, 1.0 - alpha * alpha))
    if eps == 0.0:
        p = np.where(x > 0.0, x * np.exp(-0.5 * x * x), 0.0)
    else:
        p = (eps / math.sqrt(2.0 * math.pi) * np.exp(-0.5 * (x / eps) ** 2)
             + alpha * x * np.exp(-0.5 * x * x) * ndtr(x * alpha / eps))
    return float(p) if p.ndim == 0 else p


def cartwright_longuet_higgins_peak_cdf(eta, irregularity: float):
    """Probability that a maximum is at most eta standard deviations high.

    ``F(eta) = Phi(eta / epsilon) - alpha exp(-eta^2 / 2) Phi(eta alpha / epsilon)``
    with ``epsilon = sqrt(1 - alpha^2)``; the integral of
    :func:`cartwright_longuet_higgins_peak_pdf`.  The fraction of negative
    maxima is ``F(0) = (1 - alpha) / 2``.

    Parameters
    ----------
    eta : float or array_like
        Peak height over the process standard deviation (dimensionless).
    irregularity : float
        Irregularity factor alpha in [0, 1].

    Returns
    -------
    float or numpy.ndarray
        Probability (dimensionless), same shape as ``eta``.

    References
    ----------
    D. E. Cartwright and M. S. Longuet-Higgins, Proc. R. Soc. Lond. A 237,
    212-232 (1956).
    """
    alpha = _check_alpha(irregularity)
    x = np.asarray(eta, dtype=np.float64)
    eps = math.sqrt(max(0.0, 1.0 - alpha * alpha))
    if eps == 0.0:
        f = np.where(x > 0.0, -np.expm1(-0.5 * x * x), 0.0)
    else:
        f = ndtr(x / eps) - alpha * np.exp(-0.5 * x * x) * ndtr(x * alpha / eps)
    return float(f) if f.ndim == 0 else f


@dataclass(frozen=True)
class PeakTheory:
    """Gaussian crossing and peak predictions for one spectrum and duration.

    Attributes
    ----------
    m0_g2, m2_g2_hz2, m4_g2_hz4 : float
        Spectral moments, g^2, g^2 Hz^2, g^2 Hz^4 (or unit^2 ...).
    rms_g : float
        ``sqrt(m0)``, g (standard deviation of the zero-mean process).
    zero_upcrossing_rate_hz : float
        Rice's ``sqrt(m2/m0)``, Hz.
    peak_rate_hz : float
        Rice's ``sqrt(m4/m2)``, Hz.
    irregularity : float
        ``alpha = m2 / sqrt(m0 m4)`` (dimensionless).
    duration_s : float
        Duration T the largest-peak values refer to, s.
    expected_largest_peak_sigma : float
        Davenport's expected largest peak over the standard deviation.
    largest_peak_std_sigma : float
        Davenport's standard deviation of the largest peak, in standard deviations.
    expected_largest_peak_g : float
        ``expected_largest_peak_sigma * rms_g``, g.
    """

    m0_g2: float
    m2_g2_hz2: float
    m4_g2_hz4: float
    rms_g: float
    zero_upcrossing_rate_hz: float
    peak_rate_hz: float
    irregularity: float
    duration_s: float
    expected_largest_peak_sigma: float
    largest_peak_std_sigma: float
    expected_largest_peak_g: float


def peak_theory(m0_g2: float, m2_g2_hz2: float, m4_g2_hz4: float, duration_s: float) -> PeakTheory:
    """Rice rates, irregularity and Davenport's largest peak from spectral moments.

    Parameters
    ----------
    m0_g2 : float
        Zeroth spectral moment (mean square), g^2, > 0.
    m2_g2_hz2 : float
        Second spectral moment, g^2 Hz^2, > 0.
    m4_g2_hz4 : float
        Fourth spectral moment, g^2 Hz^4, > 0.
    duration_s : float
        Record duration, s (``nu0 * duration_s`` must exceed 1).

    Returns
    -------
    PeakTheory
        See its attributes for units.

    References
    ----------
    Rice (1944/45); Cartwright & Longuet-Higgins (1956); Davenport (1964).
    """
    alpha = irregularity_factor(m0_g2, m2_g2_hz2, m4_g2_hz4)
    nu0 = zero_upcrossing_rate_hz(m0_g2, m2_g2_hz2)
    expected = davenport_expected_largest_peak_sigma(nu0, duration_s)
    rms = math.sqrt(float(m0_g2))
    return PeakTheory(
        m0_g2=float(m0_g2),
        m2_g2_hz2=float(m2_g2_hz2),
        m4_g2_hz4=float(m4_g2_hz4),
        rms_g=rms,
        zero_upcrossing_rate_hz=nu0,
        peak_rate_hz=peak_rate_hz(m2_g2_hz2, m4_g2_hz4),
        irregularity=alpha,
        duration_s=float(duration_s),
        expected_largest_peak_sigma=expected,
        largest_peak_std_sigma=davenport_largest_peak_std_sigma(nu0, duration_s),
        expected_largest_peak_g=expected * rms,
    )


def sampled_spectral_moments(frequencies_hz, asd):
    """Numerical helper: spectral moments m0, m2, m4 of a spectrum known at sampled lines.

    Trapezoid rule over the given lines (linear axes), suited to a densely
    sampled spectrum such as a Welch estimate.  It is NOT the way to
    integrate a breakpoint profile (straight lines on log-log axes): the
    profile model has closed-form moments for that.

    Parameters
    ----------
    frequencies_hz : array_like
        Increasing line frequencies, Hz, >= 0.
    asd : array_like
        One-sided spectral density at those lines, g^2/Hz (or unit^2/Hz), >= 0.

    Returns
    -------
    m0_g2, m2_g2_hz2, m4_g2_hz4 : float
        Spectral moments, g^2, g^2 Hz^2, g^2 Hz^4.

    References
    ----------
    Rice (1944/45) for the moments ``m_n = integral f^n S(f) df``; trapezoid
    rule (Abramowitz & Stegun 25.4.2) as the quadrature.
    """
    f = np.asarray(frequencies_hz, dtype=np.float64)
    s = np.asarray(asd, dtype=np.float64)
    if f.ndim != 1 or s.shape != f.shape or f.size < 2:
        raise InputError(f"frequencies_hz and asd must be 1-D arrays of the same length >= 2, got shapes "
                         f"{f.shape} and {s.shape}", location="asd")
    if not np.all(np.isfinite(f)) or np.any(f < 0) or np.any(np.diff(f) <= 0):
        raise InputError("frequencies_hz must be finite, >= 0 and strictly increasing", location="frequencies_hz")
    if not np.all(np.isfinite(s)) or np.any(s < 0):
        raise InputError("asd must be finite and >= 0 at every line", location="asd")
    f2 = f * f
    return (float(trapezoid(s, f)), float(trapezoid(f2 * s, f)), float(trapezoid(f2 * f2 * s, f)))


def peak_theory_from_sampled_spectrum(frequencies_hz, asd, duration_s: float) -> PeakTheory:
    """:func:`peak_theory` on moments from :func:`sampled_spectral_moments` (trapezoid helper).

    Parameters
    ----------
    frequencies_hz : array_like
        Increasing line frequencies, Hz.
    asd : array_like
        One-sided spectral density at those lines, g^2/Hz.
    duration_s : float
        Record duration, s.

    Returns
    -------
    PeakTheory
        See its attributes for units.

    References
    ----------
    Rice (1944/45); Cartwright & Longuet-Higgins (1956); Davenport (1964).
    """
    m0, m2, m4 = sampled_spectral_moments(frequencies_hz, asd)
    if not (m0 > 0 and m2 > 0 and m4 > 0):
        raise InputError("the sampled spectrum has no power away from 0 Hz (its moments are zero)", location="asd")
    return peak_theory(m0, m2, m4, duration_s)


# ---------------------------------------------------------------------------
# Largest |x| of a sampled record, from level-crossing rates
# ---------------------------------------------------------------------------

#: Levels on the grid that integrates the largest-peak distribution.
_GRID_POINTS = 8001


def sampled_crossing_rate_hz(level_sigma, lag_one_correlation: float, rate_hz: float):
    """Up-crossings per second of a level by a sampled stationary Gaussian sequence.

    ``fs P(u_n < v < u_(n+1)) = 2 fs T(v, sqrt((1 - rho1)/(1 + rho1)))``, with
    Owen's T function; at ``v = 0`` it is Sheppard's ``fs arccos(rho1) / (2 pi)``.

    Parameters
    ----------
    level_sigma : float or array_like
        Level v in standard deviations (dimensionless); +/-inf give 0.
    lag_one_correlation : float
        Correlation coefficient rho1 between successive samples, in (-1, 1).
    rate_hz : float
        Sample rate fs, Hz.

    Returns
    -------
    numpy.ndarray
        Up-crossings per second, Hz.

    References
    ----------
    D. B. Owen, Ann. Math. Statist. 27(4), 1956: ``Phi2(h, h; rho) = Phi(h) -
    2 T(h, sqrt((1-rho)/(1+rho)))``; W. F. Sheppard, Phil. Trans. R. Soc. A
    192, 1899 (orthant probability).
    """
    rho = float(lag_one_correlation)
    if not -1.0 < rho < 1.0:
        raise InputError(f"lag-one correlation {rho!r} must lie strictly between -1 and 1", "lag_one_correlation")
    v = np.asarray(level_sigma, dtype=np.float64)
    a = math.sqrt((1.0 - rho) / (1.0 + rho))
    finite = np.isfinite(v)
    out = np.zeros(v.shape)
    out[finite] = 2.0 * float(rate_hz) * special.owens_t(v[finite], a)
    return out


def _continuous_rate(level_sigma, nu0_hz: float):
    v = np.asarray(level_sigma, dtype=np.float64)
    with np.errstate(over="ignore"):
        return np.where(np.isfinite(v), nu0_hz * np.exp(-0.5 * np.square(np.where(np.isfinite(v), v, 0.0))), 0.0)


@dataclass(frozen=True)
class LargestPeak:
    """Distribution summary of the largest |x| of a record, in units of the RMS (sigma).

    Attributes
    ----------
    mean_sigma, std_sigma : float
        Mean and standard deviation (dimensionless, multiples of the RMS).
    p05_sigma, p95_sigma : float
        5 % and 95 % points (dimensionless).
    method : str
        How it was obtained.
    """

    mean_sigma: float
    std_sigma: float
    p05_sigma: float
    p95_sigma: float
    method: str = ""

    def to_dict(self, rms_g: float) -> dict:
        """Plain data, with the values also in g (``rms_g`` the drive's RMS in g)."""
        return {
            "mean_sigma": self.mean_sigma,
            "std_sigma": self.std_sigma,
            "p05_sigma": self.p05_sigma,
            "p95_sigma": self.p95_sigma,
            "mean_g": self.mean_sigma * rms_g,
            "std_g": self.std_sigma * rms_g,
            "p05_g": self.p05_sigma * rms_g,
            "p95_g": self.p95_sigma * rms_g,
            "method": self.method,
        }


def largest_peak_from_crossing_rate(rate_of_level, duration_s: float, upper_limit_sigma: float | None = None,
                                    method: str = "") -> LargestPeak:
    """Largest |x| in T from the rate at which |x| exceeds each level (Poisson crossings).

    ``F(a) = P(max |x| <= a) = exp(-T rate(a))``; the mean is
    ``integral_0^inf (1 - F) da``, the second moment ``integral 2 a (1 - F) da``
    (trapezoid rule on a fine grid; the integrand is smooth), quantiles by
    interpolation of F.  With an upper limit (clipping) F jumps to 1 there.

    Parameters
    ----------
    rate_of_level : callable
        ``rate(a)`` for an array of levels a (sigma): expected crossings per
        second of level a by |x| (both signs), Hz, decreasing in a.
    duration_s : float
        Record duration T, s.
    upper_limit_sigma : float, optional
        |x| never exceeds this (sigma); F = 1 from there on.
    method : str
        Label stored in the result.

    Returns
    -------
    LargestPeak

    References
    ----------
    Cramer & Leadbetter (1967), Poisson limit of high-level crossings; Davenport (1964).
    """
    duration = float(duration_s)
    if not (math.isfinite(duration) and duration > 0):
        raise InputError(f"duration {duration_s!r} s must be a finite number > 0", "duration")
    top = 2.0
    while float(duration * rate_of_level(np.array([top]))[0]) > 1e-12 and top < 200.0:
        if upper_limit_sigma is not None and top >= upper_limit_sigma:
            break
        top *= 1.25
    if upper_limit_sigma is not None:
        top = min(top, float(upper_limit_sigma))
    levels = np.linspace(0.0, top, _GRID_POINTS)
    if upper_limit_sigma is not None and top >= upper_limit_sigma:
        # the limit itself: F is taken from below (the jump to 1 is at the limit)
        levels[-1] = np.nextafter(top, 0.0)
    expected = duration * np.asarray(rate_of_level(levels), dtype=np.float64)
    cdf = np.exp(-expected)
    survival = -np.expm1(-expected)
    mean = float(np.trapezoid(survival, levels))
    second = float(np.trapezoid(2.0 * levels * survival, levels))
    std = math.sqrt(max(second - mean * mean, 0.0))
    grid_levels, grid_cdf = levels, cdf
    if upper_limit_sigma is not None and top >= upper_limit_sigma:
        grid_levels = np.append(levels, top)
        grid_cdf = np.append(cdf, 1.0)
    keep = np.concatenate([[True], np.diff(grid_cdf) > 0])
    p05, p95 = np.interp([0.05, 0.95], grid_cdf[keep], grid_levels[keep])
    return LargestPeak(mean, std, float(p05), float(p95), method)
