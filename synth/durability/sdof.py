"""Base-excited single-degree-of-freedom oscillator driven by an ASD profile.

The oscillator has natural frequency ``fn`` (Hz) and amplification ``Q``
(damping ratio ``zeta = 1/(2Q)``).  For base acceleration ``A`` (m/s^2, or g)
at frequency ``f`` and ``r = f/fn``:

- absolute-acceleration transmissibility
  ``|T|^2 = (1 + (2 zeta r)^2) / ((1 - r^2)^2 + (2 zeta r)^2)``;
- relative displacement per unit base acceleration (A in m/s^2, Z in m)
  ``|Z/A|^2 = 1 / ((2 pi)^4 ((fn^2 - f^2)^2 + (f fn / Q)^2))``.

The response of a Gaussian base motion with one-sided ASD ``S(f)`` is
Gaussian with one-sided ASD ``|H(f)|^2 S(f)``; its spectral moments
``m_k = integral f^k |H|^2 S df`` are integrated here over the profile's
power-law segments.  Between breakpoints the integrand is smooth, so each
segment is split in ln f at the profile's breakpoints and on a grid that
is fine near ``fn`` (where the resonance peak is ``1/Q`` wide in ln f) and
coarser away from it, and each piece is integrated by 24-point
Gauss-Legendre quadrature; the tests compare the result with
``scipy.integrate.quad`` of the same integrand (agreement 1e-9 or better).

References
----------
J. W. Miles, "On structural fatigue under random loading", Journal of the
Aeronautical Sciences 21(11), 753-762 (1954).
S. H. Crandall and W. D. Mark, "Random Vibration in Mechanical Systems",
Academic Press 1963 (response spectral density ``|H|^2 S``; white-noise
response of the oscillator).
C. Lalanne, "Mechanical Vibration and Shock Analysis", vol. 3 "Random
Vibration" and vol. 5 "Specification Development", ISTE/Wiley (base-excited
oscillator, transmissibility and relative displacement).
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

import numpy as np

from vibsynth.errors import InputError
from vibsynth.profile.asd import STANDARD_GRAVITY_M_S2, AsdProfile

__all__ = [
    "DEFAULT_Q",
    "SdofResponse",
    "acceleration_transmissibility_squared",
    "relative_displacement_gain_squared",
    "response_moments",
    "miles_rms_g",
    "sdof_response",
    "MilesDifference",
    "miles_difference",
]

#: Amplification used when none is given: Q = 10 (damping ratio 5 %), common practice, no source.
DEFAULT_Q = 10.0

_GAUSS_ORDER = 24
_GAUSS_X, _GAUSS_W = np.polynomial.legendre.leggauss(_GAUSS_ORDER)
#: Largest piece of the ln f grid away from the resonance (ln units).
_MAX_PIECE_LN = 0.05


def _positive(value, name: str, unit: str) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value) or value <= 0:
        raise InputError(f"{name} must be a finite number > 0 {unit}, got {value!r}", location=name)
    return float(value)


def _check_q(q: float) -> float:
    q = _positive(q, "q", "(amplification Q = 1/(2 zeta))")
    if q <= 0.5:
        raise InputError(f"q must be > 0.5 (an underdamped oscillator, damping ratio below 1), got {q!r}",
                         location="q")
    return q


def acceleration_transmissibility_squared(frequency_hz, fn_hz: float, q: float):
    """Squared absolute-acceleration transmissibility of a base-excited oscillator.

    ``|T|^2 = (1 + (2 zeta r)^2) / ((1 - r^2)^2 + (2 zeta r)^2)`` with
    ``r = f / fn`` and ``zeta = 1/(2Q)``.

    Parameters
    ----------
    frequency_hz : float or array_like
        Excitation frequency f, Hz (>= 0).
    fn_hz : float
        Natural frequency, Hz (> 0).
    q : float
        Amplification Q (> 0.5).

    Returns
    -------
    float or numpy.ndarray
        ``|T|^2`` (dimensionless), same shape as ``frequency_hz``; ``Q^2 + 1`` at ``f = fn``.

    Examples
    --------
    >>> round(float(acceleration_transmissibility_squared(100.0, 100.0, 10.0)), 6)
    101.0

    References
    ----------
    C. Lalanne, "Mechanical Vibration and Shock Analysis", vol. 1 "Sinusoidal
    Vibration" (transmissibility of a base-excited oscillator).
    """
    fn = _positive(fn_hz, "fn_hz", "Hz")
    qq = _check_q(q)
    r = np.asarray(frequency_hz, dtype=np.float64) / fn
    two_zeta_r_sq = (r / qq) ** 2
    out = (1.0 + two_zeta_r_sq) / ((1.0 - r * r) ** 2 + two_zeta_r_sq)
    return float(out) if out.ndim == 0 else out


def relative_displacement_gain_squared(frequency_hz, fn_hz: float, q: float):
    """Squared relative-displacement response per unit base acceleration, m^2 per (m/s^2)^2.

    ``|Z/A|^2 = 1 / ((2 pi)^4 ((fn^2 - f^2)^2 + (f fn / Q)^2))``; at
    ``f = 0`` it is ``1 / (2 pi fn)^4`` (the static deflection per unit
    acceleration, 1/omega_n^2, squared).

    Parameters
    ----------
    frequency_hz : float or array_like
        Excitation frequency f, Hz.
    fn_hz : float
        Natural frequency, Hz (> 0).
    q : float
        Amplification Q (> 0.5).

    Returns
    -------
    float or numpy.ndarray
        ``|Z/A|^2`` in s^4, same shape as ``frequency_hz``.

    Examples
    --------
    >>> fn = 50.0
    >>> bool(abs(relative_displacement_gain_squared(0.0, fn, 10.0) * (2 * 3.141592653589793 * fn) ** 4 - 1) < 1e-12)
    True

    References
    ----------
    C. Lalanne, "Mechanical Vibration and Shock Analysis", vol. 3 "Random
    Vibration" (relative response of a base-excited oscillator).
    """
    fn = _positive(fn_hz, "fn_hz", "Hz")
    qq = _check_q(q)
    f = np.asarray(frequency_hz, dtype=np.float64)
    out = 1.0 / ((2.0 * math.pi) ** 4 * ((fn * fn - f * f) ** 2 + (f * fn / qq) ** 2))
    return float(out) if out.ndim == 0 else out


def _pieces(profile: AsdProfile, fn_hz: float, q: float) -> np.ndarray:
    """Edges (ln f) of the quadrature pieces: breakpoints, plus a grid graded around ln fn."""
    lo, hi = math.log(profile.frequency_min_hz), math.log(profile.frequency_max_hz)
    edges = [np.log(profile.frequencies_hz)]
    centre = math.log(fn_hz)
    half = 0.5 / q  # half-power half-width of the peak in ln f
    offsets = half * np.concatenate([[0.0], 0.25 * 2.0 ** np.arange(0, 40, 0.5)])
    offsets = offsets[offsets < (hi - lo) + abs(centre - lo) + abs(centre - hi)]
    graded = np.concatenate([centre - offsets, centre + offsets[1:]])
    edges.append(graded[(graded > lo) & (graded < hi)])
    edges = np.unique(np.concatenate(edges))
    widths = np.diff(edges)
    splits = np.maximum(1, np.ceil(widths / _MAX_PIECE_LN).astype(int))
    if np.all(splits == 1):
        return edges
    parts = [np.linspace(a, b, n + 1)[:-1] for a, b, n in zip(edges[:-1], edges[1:], splits)]
    return np.concatenate(parts + [edges[-1:]])


def _nodes(profile: AsdProfile, fn_hz: float, q: float):
    edges = _pieces(profile, fn_hz, q)
    a, b = edges[:-1, None], edges[1:, None]
    u = 0.5 * (a + b) + 0.5 * (b - a) * _GAUSS_X[None, :]
    w = 0.5 * (b - a) * _GAUSS_W[None, :]
    f = np.exp(u).ravel()
    # d f = f d(ln f)
    weight = (w.ravel() * f) * profile.evaluate(f)
    return f, weight


def response_moments(profile: AsdProfile, fn_hz: float, q: float = DEFAULT_Q, *, kind: str = "acceleration",
                     powers=(0, 2, 4)) -> tuple:
    """Spectral moments of the oscillator's response to the profile, integrated over its segments.

    ``m_k = integral f^k |H(f)|^2 S(f) df`` over the profile's band, with
    ``|H|^2`` the absolute-acceleration transmissibility squared
    (``kind="acceleration"``, moments in g^2 Hz^k) or the relative
    displacement gain squared times ``g0^2`` (``kind="relative_displacement"``,
    moments in m^2 Hz^k).

    Parameters
    ----------
    profile : AsdProfile
        Base-acceleration ASD, g^2/Hz.
    fn_hz : float
        Natural frequency, Hz.
    q : float
        Amplification Q (damping ratio 1/(2Q)).
    kind : {"acceleration", "relative_displacement"}
        Which response.
    powers : sequence of float
        The orders k.

    Returns
    -------
    tuple of float
        One moment per order, in g^2 Hz^k or m^2 Hz^k.

    Examples
    --------
    >>> from vibsynth.profile.asd import AsdProfile
    >>> flat = AsdProfile([20.0, 2000.0], [0.01, 0.01])
    >>> m0, = response_moments(flat, 200.0, 10.0, powers=(0,))
    >>> round(m0 ** 0.5, 2)   # g RMS of the response (Miles: 5.6 g)
    5.61

    References
    ----------
    S. H. Crandall and W. D. Mark, "Random Vibration in Mechanical Systems"
    (1963); S. O. Rice, Bell Syst. Tech. J. 23-24 (1944/45) (spectral moments);
    Gauss-Legendre quadrature: M. Abramowitz and I. A. Stegun, 25.4.29.
    """
    if not isinstance(profile, AsdProfile):
        raise InputError(f"profile must be an AsdProfile, got {type(profile).__name__}", location="profile")
    fn = _positive(fn_hz, "fn_hz", "Hz")
    qq = _check_q(q)
    f, weight = _nodes(profile, fn, qq)
    if kind == "acceleration":
        gain = acceleration_transmissibility_squared(f, fn, qq)
    elif kind == "relative_displacement":
        gain = relative_displacement_gain_squared(f, fn, qq) * STANDARD_GRAVITY_M_S2 ** 2
    else:
        raise InputError(f"kind must be 'acceleration' or 'relative_displacement', got {kind!r}", location="kind")
    base = weight * gain
    return tuple(float(np.sum(base * f ** float(k))) for k in powers)


def miles_rms_g(profile: AsdProfile, fn_hz: float, q: float = DEFAULT_Q) -> float:
    """Miles' equation: response g RMS ``sqrt(pi/2 fn Q S(fn))`` of the oscillator.

    Exact for white noise over all frequencies in the limit of light damping;
    the exact response also counts the transmissibility away from fn and the
    ASD's actual shape and band edges (see :func:`sdof_response`).

    Parameters
    ----------
    profile : AsdProfile
        Base-acceleration ASD, g^2/Hz.
    fn_hz : float
        Natural frequency, Hz (0 g when outside the profile's band).
    q : float
        Amplification Q.

    Returns
    -------
    float
        Response acceleration RMS, g.

    Examples
    --------
    >>> from vibsynth.profile.asd import AsdProfile
    >>> round(miles_rms_g(AsdProfile([20.0, 2000.0], [0.01, 0.01]), 200.0, 10.0), 4)
    5.605

    References
    ----------
    J. W. Miles, J. Aeronaut. Sci. 21(11), 753-762 (1954).
    """
    fn = _positive(fn_hz, "fn_hz", "Hz")
    qq = _check_q(q)
    return math.sqrt(0.5 * math.pi * fn * qq * float(profile.evaluate(fn)))


@dataclass(frozen=True)
class SdofResponse:
    """What the oscillator does on a profile (see :func:`sdof_response`).

    Attributes
    ----------
    fn_hz, q : float
        Natural frequency (Hz) and amplification.
    rms_miles_g : float
        Miles' equation, g.
    rms_exact_g : float
        Response acceleration RMS by exact integration, g.
    acceleration_moments : tuple of float
        m0 (g^2), m2 (g^2 Hz^2), m4 (g^2 Hz^4) of the absolute acceleration.
    relative_displacement_rms_m : float
        Relative displacement RMS, m.
    displacement_moments : tuple of float
        m0 (m^2), m1 (m^2 Hz), m2 (m^2 Hz^2), m4 (m^2 Hz^4) of the relative displacement.
    upcrossing_rate_hz : float
        Zero up-crossing rate of the acceleration response ``sqrt(m2/m0)``, Hz.
    displacement_upcrossing_rate_hz : float
        Same for the relative displacement, Hz.
    duration_s : float or None
        Duration the expected peak refers to, s.
    expected_peak_g : float or None
        Davenport's expected largest |acceleration| over the duration, g.
    expected_peak_sigma : float or None
        The same in multiples of the response RMS.
    """

    fn_hz: float
    q: float
    rms_miles_g: float
    rms_exact_g: float
    acceleration_moments: tuple
    relative_displacement_rms_m: float
    displacement_moments: tuple
    upcrossing_rate_hz: float
    displacement_upcrossing_rate_hz: float
    duration_s: float | None = None
    expected_peak_g: float | None = None
    expected_peak_sigma: float | None = None

    @property
    def miles_to_exact_ratio(self) -> float:
        """``rms_miles_g / rms_exact_g`` (dimensionless)."""
        return self.rms_miles_g / self.rms_exact_g if self.rms_exact_g > 0 else math.nan

    def to_dict(self) -> dict:
        """Plain data with unit-suffixed keys (the public JSON of ``vibsynth response``)."""
        return {
            "fn_hz": self.fn_hz,
            "q": self.q,
            "damping_ratio": 0.5 / self.q,
            "rms_miles_g": self.rms_miles_g,
            "rms_exact_g": self.rms_exact_g,
            "miles_to_exact_ratio": self.miles_to_exact_ratio,
            "relative_displacement_rms_m": self.relative_displacement_rms_m,
            "upcrossing_rate_hz": self.upcrossing_rate_hz,
            "relative_displacement_upcrossing_rate_hz": self.displacement_upcrossing_rate_hz,
            "duration_s": self.duration_s,
            "expected_peak_g": self.expected_peak_g,
            "expected_peak_sigma": self.expected_peak_sigma,
        }


def sdof_response(profile: AsdProfile, fn_hz: float, q: float = DEFAULT_Q,
                  duration_s: float | None = None) -> SdofResponse:
    """Response of a base-excited oscillator to a profile: Miles, exact RMS, rates, expected peak.

    Parameters
    ----------
    profile : AsdProfile
        Base-acceleration ASD, g^2/Hz.
    fn_hz : float
        Natural frequency, Hz.
    q : float
        Amplification Q (damping ratio 1/(2Q)); default 10 (common practice, no source).
    duration_s : float, optional
        Duration, s, for Davenport's expected largest peak of the
        acceleration response (omitted: no peak figure).

    Returns
    -------
    SdofResponse

    Examples
    --------
    >>> from vibsynth.profile.asd import AsdProfile
    >>> r = sdof_response(AsdProfile([20.0, 2000.0], [0.01, 0.01]), 200.0, 10.0, duration_s=60.0)
    >>> round(r.rms_exact_g / r.rms_miles_g, 3)
    1.002

    References
    ----------
    Miles (1954); Crandall & Mark (1963); Rice (1944/45) for the up-crossing
    rate; A. G. Davenport, Proc. Instn Civ. Engrs 28, 187-196 (1964) for the
    expected largest peak (:mod:`vibsynth.analysis.extremes`).
    """
    from vibsynth.analysis.extremes import davenport_expected_largest_peak_sigma

    fn = _positive(fn_hz, "fn_hz", "Hz")
    qq = _check_q(q)
    a0, a2, a4 = response_moments(profile, fn, qq, kind="acceleration", powers=(0, 2, 4))
    d0, d1, d2, d4 = response_moments(profile, fn, qq, kind="relative_displacement", powers=(0, 1, 2, 4))
    nu_a = math.sqrt(a2 / a0)
    nu_z = math.sqrt(d2 / d0)
    peak_g = peak_sigma = None
    duration = None
    if duration_s is not None:
        duration = _positive(duration_s, "duration_s", "s")
        peak_sigma = davenport_expected_largest_peak_sigma(nu_a, duration)
        peak_g = peak_sigma * math.sqrt(a0)
    return SdofResponse(
        fn_hz=fn, q=qq, rms_miles_g=miles_rms_g(profile, fn, qq), rms_exact_g=math.sqrt(a0),
        acceleration_moments=(a0, a2, a4), relative_displacement_rms_m=math.sqrt(d0),
        displacement_moments=(d0, d1, d2, d4), upcrossing_rate_hz=nu_a, displacement_upcrossing_rate_hz=nu_z,
        duration_s=duration, expected_peak_g=peak_g, expected_peak_sigma=peak_sigma,
    )


@dataclass(frozen=True)
class MilesDifference:
    """Why Miles' equation and the exact response RMS differ (see :func:`miles_difference`).

    Attributes
    ----------
    exact_to_miles : float
        ``rms_exact_g / rms_miles_g`` (inf when fn is outside the band, where Miles gives 0).
    inside_band : bool
        fn lies within the profile's band.
    white_noise_factor : float
        ``sqrt(1 + 1/Q^2)``: the exact/Miles ratio for white noise over all frequencies.
    slope_db_per_octave : float or None
        Slope of the ASD at fn, dB/octave (None outside the band).
    octaves_to_band_edge : float or None
        Distance from fn to the nearer band edge, octaves (None outside the band).
    off_resonance_share : float
        Share of the response mean-square from more than half an octave away from fn.
    """

    exact_to_miles: float
    inside_band: bool
    white_noise_factor: float
    slope_db_per_octave: float | None
    octaves_to_band_edge: float | None
    off_resonance_share: float

    def to_dict(self) -> dict:
        """Plain data."""
        return {
            "exact_to_miles": self.exact_to_miles,
            "inside_band": self.inside_band,
            "white_noise_factor": self.white_noise_factor,
            "slope_db_per_octave": self.slope_db_per_octave,
            "octaves_to_band_edge": self.octaves_to_band_edge,
            "off_resonance_share": self.off_resonance_share,
        }


def miles_difference(profile: AsdProfile, fn_hz: float, q: float = DEFAULT_Q) -> MilesDifference:
    """The figures that explain how Miles' equation and the exact response differ for this profile.

    Miles' equation takes the ASD at fn as flat over all frequencies; the exact
    response differs by the transmissibility's ``1 + 1/Q^2`` term (white noise),
    by the ASD's slope at fn, by the band edges, and by the response to the rest
    of the band off resonance (quasi-static below, isolated above).

    Parameters
    ----------
    profile : AsdProfile
        Base-acceleration ASD, g^2/Hz.
    fn_hz : float
        Natural frequency, Hz.
    q : float
        Amplification Q.

    Returns
    -------
    MilesDifference

    Examples
    --------
    >>> from vibsynth.profile.asd import AsdProfile
    >>> d = miles_difference(AsdProfile([20.0, 2000.0], [0.01, 0.01]), 200.0, 10.0)
    >>> round(d.white_noise_factor, 4), d.slope_db_per_octave, round(d.off_resonance_share, 3)
    (1.005, 0.0, 0.084)

    References
    ----------
    Miles (1954); Crandall & Mark (1963), white-noise response of the oscillator.
    """
    fn = _positive(fn_hz, "fn_hz", "Hz")
    qq = _check_q(q)
    total, = response_moments(profile, fn, qq, powers=(0,))
    miles = miles_rms_g(profile, fn, qq)
    inside = profile.frequency_min_hz <= fn <= profile.frequency_max_hz
    slope = edge = None
    if inside:
        index = min(max(int(np.sum(profile.frequencies_hz <= fn)) - 1, 0), profile.exponents.size - 1)
        slope = float(profile.slopes_db_per_octave[index])
        edge = min(math.log2(fn / profile.frequency_min_hz), math.log2(profile.frequency_max_hz / fn))
    lo = max(fn / math.sqrt(2.0), profile.frequency_min_hz)
    hi = min(fn * math.sqrt(2.0), profile.frequency_max_hz)
    near = 0.0
    if hi > lo:
        inner = profile.frequencies_hz[(profile.frequencies_hz > lo) & (profile.frequencies_hz < hi)]
        f = np.concatenate([[lo], inner, [hi]])
        near, = response_moments(AsdProfile(f, profile.evaluate(f)), fn, qq, powers=(0,))
    return MilesDifference(
        exact_to_miles=math.sqrt(total) / miles if miles > 0 else math.inf,
        inside_band=inside,
        white_noise_factor=math.sqrt(1.0 + 1.0 / (qq * qq)),
        slope_db_per_octave=slope,
        octaves_to_band_edge=edge,
        off_resonance_share=max(0.0, 1.0 - near / total),
    )
