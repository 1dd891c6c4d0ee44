"""Fatigue damage spectrum (FDS) and extreme response spectrum (ERS) of a profile or a drive.

For each natural frequency fn of a grid, a base-excited oscillator (Q, see
:mod:`vibsynth.durability.sdof`) responds with relative displacement z (m).
Damage is counted per unit of the material constants (Basquin's
``N s^b = C`` with the "stress" ``K z``, K = C = 1), on cycle amplitudes (half
the rainflow range), by Miner's rule:

- narrow band (Lalanne, vol. 5):
  ``D = nu0+ T (sqrt(2) sigma_z)^b Gamma(1 + b/2)`` with ``sigma_z`` the
  relative-displacement RMS and ``nu0+ = sqrt(m2/m0)`` its zero up-crossing
  rate, both from exact integrals over the profile;
- Dirlik (1985), broadband: the rainflow-range density built from the
  response moments m0, m1, m2, m4 with Dirlik's published coefficients,
  integrated in closed form (below);
- time domain (a drive): the oscillator's response to the samples
  (:class:`vibsynth.durability.filters.SdofFilterBank`), rainflow counting
  (:mod:`vibsynth.durability.rainflow`), ``D = sum n_i a_i^b``.

ERS: the pseudo-acceleration ``(2 pi fn)^2 z_max / g0`` in g, with z_max the
expected largest |z| over the duration by Davenport's formula (profile), or
the actual largest |z| of the drive's response.

Dirlik's closed form: with ``Z = S / (2 sqrt(m0))`` (S the range),
``p(Z) = D1/Qd e^(-Z/Qd) + D2 Z/R^2 e^(-Z^2/(2R^2)) + D3 Z e^(-Z^2/2)``,
peaks at ``E[P] = sqrt(m4/m2)`` per second, and amplitudes ``Z sqrt(m0)``:
``D = E[P] T m0^(b/2) (D1 Qd^b Gamma(1+b) + 2^(b/2) Gamma(1+b/2) (D2 |R|^b + D3))``.

References
----------
C. Lalanne, "Mechanical Vibration and Shock Analysis", vol. 4 "Fatigue
Damage" and vol. 5 "Specification Development", ISTE/Wiley (FDS and ERS
definitions, narrow-band damage).
T. Dirlik, "Application of computers in fatigue analysis", PhD thesis,
University of Warwick (1985).
A. G. Davenport, Proc. Instn Civ. Engrs 28, 187-196 (1964).
M. A. Miner, "Cumulative damage in fatigue", J. Appl. Mech. 12, A159-A164 (1945).
ASTM E1049-85 (2017), rainflow counting.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass, field

import numpy as np
from scipy.special import gamma

from vibsynth.durability.sdof import DEFAULT_Q, _check_q, _positive, response_moments
from vibsynth.errors import InputError
from vibsynth.profile.asd import STANDARD_GRAVITY_M_S2, AsdProfile

__all__ = [
    "DEFAULT_B",
    "FdsResult",
    "DriveSeverity",
    "natural_frequency_grid",
    "narrowband_damage",
    "dirlik_damage",
    "profile_severity",
    "drive_severity",
    "ers_from_displacement_g",
]

#: Basquin exponent used when none is given: b = 8, common practice, no source (a value often taken for
#: structural metals in vibration-test tailoring; state your own for your material).
DEFAULT_B = 8.0

#: Default number of natural frequencies in a grid.
DEFAULT_POINTS = 60


def _check_b(b) -> float:
    value = _positive(b, "b", "(Basquin exponent)")
    if value < 1.0 or value > 30.0:
        raise InputError(f"b must be between 1 and 30 (a Basquin fatigue exponent), got {b!r}", location="b")
    return value


def natural_frequency_grid(fn_min_hz: float, fn_max_hz: float, points: int = DEFAULT_POINTS) -> np.ndarray:
    """Log-spaced natural frequencies from fn_min_hz to fn_max_hz inclusive.

    Parameters
    ----------
    fn_min_hz, fn_max_hz : float
        Ends of the grid, Hz (0 < min < max).
    points : int
        Number of natural frequencies (>= 2).

    Returns
    -------
    numpy.ndarray
        Natural frequencies, Hz.

    Examples
    --------
    >>> natural_frequency_grid(10.0, 1000.0, 3).tolist()
    [10.0, 100.0, 1000.0]

    References
    ----------
    numpy.geomspace.
    """
    lo = _positive(fn_min_hz, "fn_min_hz", "Hz")
    hi = _positive(fn_max_hz, "fn_max_hz", "Hz")
    if hi <= lo:
        raise InputError(f"fn_max_hz ({hi:g} Hz) must be above fn_min_hz ({lo:g} Hz)", location="fn_max_hz")
    if isinstance(points, bool) or not isinstance(points, numbers.Integral) or points < 2:
        raise InputError(f"points must be an integer >= 2, got {points!r}", location="points")
    grid = np.geomspace(lo, hi, int(points))
    grid[0], grid[-1] = lo, hi
    return grid


def narrowband_damage(m0_m2: float, m2_m2_hz2: float, duration_s: float, b: float = DEFAULT_B) -> float:
    """Narrow-band fatigue damage ``nu0+ T (sqrt(2) sigma)^b Gamma(1 + b/2)`` (K = C = 1).

    Parameters
    ----------
    m0_m2 : float
        Mean square of the response (e.g. relative displacement, m^2).
    m2_m2_hz2 : float
        Second spectral moment of the response, m^2 Hz^2.
    duration_s : float
        Exposure, s.
    b : float
        Basquin exponent.

    Returns
    -------
    float
        Damage in units of m^b (per unit K^b / C).

    Examples
    --------
    >>> d = narrowband_damage(1e-8, 1e-4, 3600.0, 8.0)   # sigma 0.1 mm, nu0+ = 100 Hz
    >>> bool(abs(d - 100 * 3600 * (2 ** 0.5 * 1e-4) ** 8 * 24) < 1e-12 * d)
    True

    References
    ----------
    Lalanne, vol. 4 and vol. 5 (narrow-band damage of a Gaussian process with Rayleigh peaks).
    """
    m0 = _positive(m0_m2, "m0_m2", "m^2")
    m2 = _positive(m2_m2_hz2, "m2_m2_hz2", "m^2 Hz^2")
    t = _positive(duration_s, "duration_s", "s")
    bb = _check_b(b)
    return math.sqrt(m2 / m0) * t * (2.0 * m0) ** (0.5 * bb) * float(gamma(1.0 + 0.5 * bb))


def dirlik_damage(m0: float, m1: float, m2: float, m4: float, duration_s: float, b: float = DEFAULT_B) -> float:
    """Dirlik's broadband fatigue damage from four spectral moments (K = C = 1, amplitudes = half ranges).

    Parameters
    ----------
    m0, m1, m2, m4 : float
        Spectral moments of the response, unit^2 Hz^k (e.g. m^2, m^2 Hz, ...).
    duration_s : float
        Exposure, s.
    b : float
        Basquin exponent.

    Returns
    -------
    float
        Damage in unit^b.

    Examples
    --------
    A narrow band (m1^2 = m0 m2, m2^2 = m0 m4) gives the narrow-band value:

    >>> m0, f0 = 1.0, 50.0
    >>> d = dirlik_damage(m0, m0 * f0, m0 * f0**2, m0 * f0**4 * (1 + 1e-9), 100.0, 4.0)
    >>> bool(abs(d / narrowband_damage(m0, m0 * f0**2, 100.0, 4.0) - 1) < 1e-3)
    True

    References
    ----------
    T. Dirlik, "Application of computers in fatigue analysis", PhD thesis,
    University of Warwick (1985); the coefficients D1, D2, D3, Q, R as
    reproduced in N. W. M. Bishop and F. Sherratt, "Finite Element Based
    Fatigue Calculations", NAFEMS 2000.
    """
    for value, name in ((m0, "m0"), (m1, "m1"), (m2, "m2"), (m4, "m4")):
        _positive(value, name, "(spectral moment)")
    t = _positive(duration_s, "duration_s", "s")
    bb = _check_b(b)
    xm = m1 / m0 * math.sqrt(m2 / m4)
    g = min(m2 / math.sqrt(m0 * m4), 1.0)
    d1 = 2.0 * (xm - g * g) / (1.0 + g * g)
    denom = 1.0 - g - d1 + d1 * d1
    if d1 <= 0.0 or denom <= 0.0:
        # the narrow-band limit (Dirlik's density tends to Rayleigh as g -> 1)
        return narrowband_damage(m0, m2, t, bb) * math.sqrt(m4 / m2) / math.sqrt(m2 / m0)
    r = (g - xm - d1 * d1) / denom
    d2 = denom / (1.0 - r)
    d3 = 1.0 - d1 - d2
    qd = 1.25 * (g - d3 - d2 * r) / d1
    peak_rate = math.sqrt(m4 / m2)
    moment = (d1 * qd ** bb * float(gamma(1.0 + bb))
              + 2.0 ** (0.5 * bb) * float(gamma(1.0 + 0.5 * bb)) * (d2 * abs(r) ** bb + d3))
    return peak_rate * t * m0 ** (0.5 * bb) * moment


def ers_from_displacement_g(fn_hz, z_max_m):
    """Pseudo-acceleration ``(2 pi fn)^2 z_max / g0`` in g.

    Parameters
    ----------
    fn_hz : float or array_like
        Natural frequency, Hz.
    z_max_m : float or array_like
        Largest relative displacement, m.

    Returns
    -------
    float or numpy.ndarray
        ERS value, g.

    Examples
    --------
    >>> round(float(ers_from_displacement_g(100.0, 1e-3)), 3)
    40.257

    References
    ----------
    Lalanne, vol. 5 (extreme response spectrum as pseudo-acceleration).
    """
    out = (2.0 * math.pi * np.asarray(fn_hz, dtype=np.float64)) ** 2 * np.asarray(z_max_m, dtype=np.float64) \
        / STANDARD_GRAVITY_M_S2
    return float(out) if out.ndim == 0 else out


@dataclass(frozen=True)
class FdsResult:
    """FDS and ERS of a profile over a grid of natural frequencies (see :func:`profile_severity`).

    Attributes
    ----------
    fn_hz : numpy.ndarray
        Natural frequencies, Hz.
    q, b, duration_s : float
        Amplification, Basquin exponent, exposure (s).
    fds_narrowband, fds_dirlik : numpy.ndarray
        Damage (m^b, K = C = 1) by the narrow-band form and by Dirlik.
    ers_g : numpy.ndarray
        Expected extreme response (pseudo-acceleration), g.
    displacement_rms_m : numpy.ndarray
        Relative-displacement RMS at each fn, m.
    upcrossing_rate_hz : numpy.ndarray
        nu0+ of the relative displacement, Hz.
    """

    fn_hz: np.ndarray
    q: float
    b: float
    duration_s: float
    fds_narrowband: np.ndarray
    fds_dirlik: np.ndarray
    ers_g: np.ndarray
    displacement_rms_m: np.ndarray
    upcrossing_rate_hz: np.ndarray

    def to_dict(self) -> dict:
        """Plain data (lists), keys as in the public JSON of ``vibsynth severity``."""
        return {
            "fn_hz": self.fn_hz.tolist(),
            "q": self.q,
            "b": self.b,
            "duration_s": self.duration_s,
            "fds_narrowband": self.fds_narrowband.tolist(),
            "fds_dirlik": self.fds_dirlik.tolist(),
            "ers_g": self.ers_g.tolist(),
            "relative_displacement_rms_m": self.displacement_rms_m.tolist(),
            "upcrossing_rate_hz": self.upcrossing_rate_hz.tolist(),
        }


def profile_severity(profile: AsdProfile, duration_s: float, fn_hz=None, *, q: float = DEFAULT_Q,
                     b: float = DEFAULT_B) -> FdsResult:
    """FDS (narrow band and Dirlik) and ERS of a profile over a duration.

    Parameters
    ----------
    profile : AsdProfile
        Base-acceleration ASD, g^2/Hz.
    duration_s : float
        Exposure T, s.
    fn_hz : array_like, optional
        Natural frequencies, Hz (default: 60 log-spaced over the profile's band).
    q : float
        Amplification Q (default 10, common practice, no source).
    b : float
        Basquin exponent (default 8, common practice, no source).

    Returns
    -------
    FdsResult

    Examples
    --------
    >>> from vibsynth.profile.asd import AsdProfile
    >>> flat = AsdProfile([20.0, 2000.0], [0.01, 0.01])
    >>> one = profile_severity(flat, 60.0, [200.0])
    >>> four = profile_severity(flat.scaled(4.0), 60.0, [200.0])
    >>> round(float(four.fds_narrowband[0] / one.fds_narrowband[0]), 6)    # 4^(b/2) = 256
    256.0

    References
    ----------
    Lalanne, vol. 5; Dirlik (1985); Davenport (1964). See the module docstring.
    """
    from vibsynth.analysis.extremes import davenport_expected_largest_peak_sigma

    if not isinstance(profile, AsdProfile):
        raise InputError(f"profile must be an AsdProfile, got {type(profile).__name__}", location="profile")
    t = _positive(duration_s, "duration_s", "s")
    qq = _check_q(q)
    bb = _check_b(b)
    if fn_hz is None:
        fn = natural_frequency_grid(profile.frequency_min_hz, profile.frequency_max_hz)
    else:
        fn = np.atleast_1d(np.asarray(fn_hz, dtype=np.float64))
        if fn.ndim != 1 or fn.size == 0 or not np.all(np.isfinite(fn)) or np.any(fn <= 0):
            raise InputError("fn_hz must be a 1-D list of natural frequencies > 0 Hz", location="fn_hz")
    nb = np.empty(fn.size)
    dk = np.empty(fn.size)
    ers = np.empty(fn.size)
    rms = np.empty(fn.size)
    nu = np.empty(fn.size)
    for index, f in enumerate(fn):
        m0, m1, m2, m4 = response_moments(profile, float(f), qq, kind="relative_displacement", powers=(0, 1, 2, 4))
        nb[index] = narrowband_damage(m0, m2, t, bb)
        dk[index] = dirlik_damage(m0, m1, m2, m4, t, bb)
        nu[index] = math.sqrt(m2 / m0)
        rms[index] = math.sqrt(m0)
        z_max = davenport_expected_largest_peak_sigma(nu[index], t) * rms[index]
        ers[index] = ers_from_displacement_g(float(f), z_max)
    return FdsResult(fn_hz=fn, q=qq, b=bb, duration_s=t, fds_narrowband=nb, fds_dirlik=dk, ers_g=ers,
                     displacement_rms_m=rms, upcrossing_rate_hz=nu)


@dataclass(frozen=True)
class DriveSeverity:
    """FDS and ERS of a drive, from the oscillators' responses to its samples (see :func:`drive_severity`).

    Attributes
    ----------
    fn_hz : numpy.ndarray
        Natural frequencies, Hz.
    q, b : float
        Amplification and Basquin exponent.
    duration_s : float
        Duration of the samples analysed, s.
    fds : numpy.ndarray
        Rainflow + Miner damage (m^b, K = C = 1, amplitudes = half ranges).
    ers_g : numpy.ndarray
        Actual largest |z| as pseudo-acceleration, g.
    displacement_rms_m : numpy.ndarray
        RMS of the relative displacement response, m.
    cycles : numpy.ndarray
        Number of rainflow cycles counted at each fn (half cycles count 0.5).
    """

    fn_hz: np.ndarray
    q: float
    b: float
    duration_s: float
    fds: np.ndarray
    ers_g: np.ndarray
    displacement_rms_m: np.ndarray
    cycles: np.ndarray = field(repr=False)

    def to_dict(self) -> dict:
        """Plain data; keys ``fds_drive`` and ``ers_drive_g`` as in ``vibsynth severity --drive``."""
        return {
            "fn_hz": self.fn_hz.tolist(),
            "duration_s": self.duration_s,
            "fds_drive": self.fds.tolist(),
            "ers_drive_g": self.ers_g.tolist(),
            "relative_displacement_rms_drive_m": self.displacement_rms_m.tolist(),
            "cycles_drive": self.cycles.tolist(),
        }


def drive_severity(chunks, rate_hz: float, fn_hz, *, q: float = DEFAULT_Q, b: float = DEFAULT_B) -> DriveSeverity:
    """FDS and ERS of a drive given as chunks of acceleration samples, in constant memory.

    Each chunk goes through the oscillators
    (:class:`~vibsynth.durability.filters.SdofFilterBank`, relative displacement
    in m), their peaks and valleys (each refined to the vertex of the parabola
    through its neighbouring samples, so that peaks between samples are not
    lost) through the streaming rainflow counter, and the damage
    ``sum n_i (range_i / 2)^b`` is accumulated; nothing else is kept.  The
    ERS uses the largest refined |peak|.

    Parameters
    ----------
    chunks : iterable of array_like
        Consecutive base-acceleration samples, g (e.g.
        ``DriveFile.iter_chunks()`` or ``[x]``).
    rate_hz : float
        Sample rate, Hz.
    fn_hz : array_like
        Natural frequencies, Hz (each below 0.5 x rate; a warning above 0.3 x rate).
    q : float
        Amplification Q.
    b : float
        Basquin exponent.

    Returns
    -------
    DriveSeverity

    Examples
    --------
    >>> import numpy as np
    >>> x = np.random.default_rng(1).standard_normal(20_000) * 0.5
    >>> severity = drive_severity([x[:7000], x[7000:]], 4096.0, [100.0, 400.0])
    >>> bool(np.all(severity.fds > 0)) and bool(np.all(severity.ers_g > 0))
    True

    References
    ----------
    Smallwood (1981) for the filter; ASTM E1049-85 (2017) for rainflow;
    Miner (1945); Lalanne vol. 4-5 for FDS/ERS.
    """
    from vibsynth.durability.filters import SdofFilterBank
    from vibsynth.durability.rainflow import RainflowCounter, TurningPoints

    qq = _check_q(q)
    bb = _check_b(b)
    rate = _positive(rate_hz, "rate_hz", "Hz")
    fn = np.atleast_1d(np.asarray(fn_hz, dtype=np.float64))
    bank = SdofFilterBank(fn, qq, rate, kind="relative_displacement")
    tps = [TurningPoints(refine=True) for _ in fn]
    counters = [RainflowCounter() for _ in fn]
    damage = np.zeros(fn.size)
    cycles = np.zeros(fn.size)
    z_max = np.zeros(fn.size)
    sum_sq = np.zeros(fn.size)
    samples = 0

    def consume(response: np.ndarray, final: bool) -> None:
        for index in range(fn.size):
            z = response[index]
            if z.size:
                sum_sq[index] += float(np.dot(z, z))
            points = tps[index].feed(z)
            if final:
                points = np.concatenate([points, tps[index].finish()])
            if points.size:
                z_max[index] = max(z_max[index], float(np.max(np.abs(points))))
            parts = [counters[index].feed(points)]
            if final:
                parts.append(counters[index].finish())
            for ranges, counts in parts:
                damage[index] += float(np.sum(counts * (0.5 * ranges) ** bb))
                cycles[index] += float(np.sum(counts))

    for chunk in chunks:
        x = np.asarray(chunk, dtype=np.float64).ravel()
        samples += x.size
        consume(bank.filter_chunk(x), final=False)
    if samples == 0:
        raise InputError("the drive has no samples", location="chunks")
    consume(bank.flush(), final=True)
    return DriveSeverity(fn_hz=fn, q=qq, b=bb, duration_s=samples / rate, fds=damage,
                         ers_g=ers_from_displacement_g(fn, z_max), displacement_rms_m=np.sqrt(sum_sq / samples),
                         cycles=cycles)
