"""Frames: line amplitudes, random-phase frame synthesis, the sine window and the raised-cosine ramp.

A frame of N samples at rate ``fs`` has lines ``f_k = k fs / N``.  Giving line
``0 < k < N/2`` the complex amplitude ``|X_k| = N sqrt(S(f_k) df / 2)``
(``df = fs/N``) with a uniform random phase and taking numpy's ``irfft``
makes a periodic frame whose variance is exactly ``sum S(f_k) df`` and whose
periodogram equals ``S(f_k)`` at every line.  The DC and Nyquist lines carry
nothing.

Randomness per frame: one standard normal pair per line (``N + 2`` normals for
a frame of ``N``).  ``amplitude="rayleigh"`` uses the pair as it is (complex
Gaussian line: Rayleigh amplitude, uniform phase, a true Gaussian record);
``amplitude="fixed"`` keeps only its direction (uniform phase, amplitude fixed
by the target, an exact periodogram).  The two modes of one seed therefore
share their phases.

References
----------
Shinozuka, M. & Jan, C.-M., "Digital simulation of random processes and its
applications", Journal of Sound and Vibration 25(1), 1972.
Princen, J. P. & Bradley, A. B., "Analysis/synthesis filter bank design based
on time domain aliasing cancellation", IEEE Trans. ASSP 34(5), 1986 (the sine window).
"""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np

from vibsynth.errors import InputError

#: Amplitude modes: ``fixed`` (random phase only; exact periodogram) and
#: ``rayleigh`` (complex Gaussian lines; a true Gaussian realisation).
from vibsynth._checks import AMPLITUDE_MODES  # noqa: E402  (defined once, light for the command line)


def _check_choice(value, allowed: Sequence[str], what: str) -> str:
    """``value`` as a lower-case member of ``allowed``, else an InputError naming ``what``."""
    text = str(value).strip().lower()
    if text not in allowed:
        raise InputError(f"{what} {value!r} is not one of {', '.join(allowed)}", what)
    return text


def line_amplitudes(line_spectrum, rate_hz: float, frame_length: int) -> np.ndarray:
    """Line magnitudes ``|X_k| = N sqrt(S(f_k) df / 2)`` for numpy's ``irfft`` (backward norm).

    Parameters
    ----------
    line_spectrum : array_like, shape (N//2 + 1,)
        One-sided spectral density at ``f_k = k rate_hz / N`` in U^2/Hz (e.g. g^2/Hz).
        The DC and (for even N) Nyquist lines are ignored (set to 0).
    rate_hz : float
        Sample rate in Hz.
    frame_length : int
        Frame length N in samples.

    Returns
    -------
    numpy.ndarray, shape (N//2 + 1,)
        Magnitudes in U (times N), zero at DC and Nyquist.

    Examples
    --------
    >>> line_amplitudes([0.0, 1.0, 1.0, 0.0], 6.0, 6)
    array([0.        , 4.24264069, 4.24264069, 0.        ])

    References
    ----------
    Shinozuka & Jan (1972), spectral representation; the discrete Parseval
    relation of the DFT.
    """
    spectrum = _clean_line_spectrum(line_spectrum, frame_length)
    df = float(rate_hz) / frame_length
    return frame_length * np.sqrt(spectrum * df / 2.0)




def _clean_line_spectrum(line_spectrum, frame_length: int) -> np.ndarray:
    if _is_clean_constant(line_spectrum, frame_length):
        # a read-only float64 array that owns its data (a plan's spectrum, or a design's) is shared, not copied:
        # the same values, and a long record's planning skips a copy of millions of lines
        spectrum = line_spectrum
        if not math.isfinite(float(np.sum(spectrum))) or float(np.min(spectrum)) < 0:
            raise InputError("line spectrum values must be finite and >= 0", "line_spectrum")
        return spectrum
    spectrum = np.array(line_spectrum, dtype=float).ravel()
    if spectrum.size != frame_length // 2 + 1:
        raise InputError(
            f"line spectrum has {spectrum.size} values; a frame of {frame_length} samples needs {frame_length // 2 + 1}",
            "line_spectrum",
        )
    if not math.isfinite(float(np.sum(spectrum))) or float(np.min(spectrum)) < 0:
        raise InputError("line spectrum values must be finite and >= 0", "line_spectrum")
    spectrum[0] = 0.0
    if frame_length % 2 == 0:
        spectrum[-1] = 0.0
    return spectrum


def _is_clean_constant(line_spectrum, frame_length: int) -> bool:
    """True for a read-only 1-D float64 array owning its data, of ``N//2 + 1`` lines, with +0.0 at DC
    (and Nyquist, for even N): :func:`_clean_line_spectrum` would return an equal copy of it."""
    if not (isinstance(line_spectrum, np.ndarray) and line_spectrum.dtype == np.float64 and line_spectrum.ndim == 1
            and line_spectrum.flags.owndata and not line_spectrum.flags.writeable
            and line_spectrum.size == frame_length // 2 + 1):
        return False
    ends = line_spectrum[[0, -1]] if frame_length % 2 == 0 else line_spectrum[:1]
    return not np.any(ends != 0.0) and not np.any(np.signbit(ends))


def _band_of(amplitudes: np.ndarray) -> tuple[int, int]:
    """Index range [lo, hi) holding every non-zero line (NaN counts as non-zero, as for ``np.flatnonzero``)."""
    values = np.asarray(amplitudes).ravel()
    # scanned in cache-sized pieces from each end: a long record's band is a small part of its lines
    step = _BAND_SCAN
    for start in range(0, values.size, step):
        found = np.flatnonzero(values[start : start + step] != 0)
        if found.size:
            lo = start + int(found[0])
            break
    else:
        return 0, 0
    for stop in range(values.size, lo, -step):
        start = max(stop - step, lo)
        found = np.flatnonzero(values[start:stop] != 0)
        if found.size:
            return lo, start + int(found[-1]) + 1
    raise AssertionError("unreachable: line lo is non-zero")


#: Lines per piece that :func:`_band_of` scans at a time.
_BAND_SCAN = 1 << 16


def _draw_lines(rng: np.random.Generator, amplitudes: np.ndarray, amplitude: str, band=None) -> np.ndarray:
    """Complex line values: a normal pair per line, scaled (rayleigh) or normalised (fixed).

    Every line draws its pair (so the draws do not depend on the spectrum);
    only lines inside ``band`` (the non-zero amplitudes) are then shaped.
    """
    band = _band_of(amplitudes) if band is None else band
    return _shape_lines(_draw_normals(rng, amplitudes.size, band, amplitude), amplitudes, amplitude)


def _draw_normals(rng: np.random.Generator, size: int, band: tuple[int, int], amplitude: str) -> tuple:
    """The part of :func:`_draw_lines` that does not need the amplitudes: the normal pairs (zero outside
    ``band``) and, for ``fixed``, their magnitudes on ``band`` (a zero pair made ``1 + 0i``).

    Returns ``(spectrum, band, magnitude)`` (``magnitude`` None for ``rayleigh``) for :func:`_shape_lines`.
    """
    spectrum = np.empty(size, dtype=np.complex128)
    rng.standard_normal(out=spectrum.view(np.float64))
    lo, hi = band
    spectrum[:lo] = 0.0
    spectrum[hi:] = 0.0
    if amplitude == "rayleigh":
        return spectrum, (lo, hi), None
    part = spectrum[lo:hi]
    magnitude = np.abs(part)
    zero = magnitude == 0.0
    if np.any(zero):  # probability zero; a phase of 0 keeps the amplitude exact
        part[zero] = 1.0
        magnitude[zero] = 1.0
    return spectrum, (lo, hi), magnitude


def _shape_lines(drawn: tuple, amplitudes: np.ndarray, amplitude: str) -> np.ndarray:
    """Finish :func:`_draw_lines` from :func:`_draw_normals`' result (changed in place and returned)."""
    spectrum, (lo, hi), magnitude = drawn
    part = spectrum[lo:hi]
    weights = amplitudes[lo:hi]
    if amplitude == "rayleigh":
        part *= weights * math.sqrt(0.5)
        return spectrum
    np.divide(weights, magnitude, out=magnitude)
    part *= magnitude
    return spectrum


def synthesize_frame(line_spectrum, rate_hz: float, rng: np.random.Generator, amplitude: str = "fixed") -> np.ndarray:
    """One periodic random-phase frame whose spectrum is ``line_spectrum``.

    Parameters
    ----------
    line_spectrum : array_like, shape (N//2 + 1,)
        One-sided spectral density in U^2/Hz at ``f_k = k rate_hz / N``,
        ``k = 0 .. N//2``; N is ``2 (len - 1)``.  DC and Nyquist are ignored.
    rate_hz : float
        Sample rate in Hz.
    rng : numpy.random.Generator
        Source of the phases (and amplitudes): ``N + 2`` standard normals.
    amplitude : {"fixed", "rayleigh"}
        ``fixed``: ``|X_k| = N sqrt(S df / 2)`` exactly, uniform phase; the
        frame's variance is exactly ``sum S(f_k) df`` and its periodogram is
        ``S(f_k)`` at every line.  ``rayleigh``: complex Gaussian lines with
        that RMS magnitude (a Gaussian realisation; variance equal in expectation).

    Returns
    -------
    numpy.ndarray, shape (N,)
        The frame in U (e.g. g).

    Examples
    --------
    >>> frame = synthesize_frame(np.r_[0.0, np.ones(7), 0.0], 16.0, np.random.default_rng(1))
    >>> round(float(np.var(frame)), 12)  # sum S df over the 7 lines, df = 1 Hz
    7.0

    References
    ----------
    Shinozuka & Jan (1972); numpy/scipy ``irfft`` normalisation (backward:
    ``x_n = (1/N) sum_k X_k exp(2 pi i k n / N)``).
    """
    amplitude = _check_choice(amplitude, AMPLITUDE_MODES, "amplitude")
    spectrum = np.asarray(line_spectrum, dtype=float)
    frame_length = 2 * (spectrum.size - 1)
    if frame_length < 2:
        raise InputError("line spectrum needs at least two values", "line_spectrum")
    amplitudes = line_amplitudes(spectrum, rate_hz, frame_length)
    lines = _draw_lines(rng, amplitudes, amplitude)
    return np.fft.irfft(lines, n=frame_length)


def sine_window(frame_length: int) -> np.ndarray:
    """The sine window ``w[n] = sin(pi (n + 1/2) / N)``; ``w[n]^2 + w[n + N/2]^2 = 1``.

    Parameters
    ----------
    frame_length : int
        N, even.

    Returns
    -------
    numpy.ndarray, shape (N,)
        Window values (dimensionless).

    Examples
    --------
    >>> w = sine_window(8)
    >>> bool(np.allclose(w[:4] ** 2 + w[4:] ** 2, 1.0))
    True

    References
    ----------
    Princen & Bradley (1986), the sine window for 50 % overlap (power complementary).
    """
    n = np.arange(frame_length, dtype=float)
    return np.sin(np.pi * (n + 0.5) / frame_length)


def rest_taper(length_samples: int, rate_hz: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Displacement taper ``w`` at the start of a record and its time derivatives ``w'`` (1/s) and ``w''`` (1/s^2).

    ``w(t) = s(t / T)`` with ``s(u) = 10 u^3 - 15 u^4 + 6 u^5`` (the quintic
    that rises from 0 to 1 with zero first and second derivatives at both
    ends), ``T`` = ``length_samples / rate_hz`` and ``t = n / rate_hz``,
    ``n = 0 .. R-1``.  Base motion ``x`` multiplied by ``w`` starts at rest:
    ``w x``, ``(w x)' = w v + w' x`` and ``(w x)'' = w a + 2 w' v + w'' x`` are
    all 0 at ``t = 0`` and are exact derivatives of one another; reversed (and
    ``w'`` negated) it brings the end to rest.

    This is a displacement taper with analytic differentiation, the principle
    of the baseline corrections used for strong-motion records, which correct
    the displacement (not the acceleration) so that the record begins and
    ends at rest and the three traces stay consistent (Chiu 1997; Boore 2001).

    Parameters
    ----------
    length_samples : int
        R, samples (>= 2).
    rate_hz : float
        Sample rate, Hz.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray, numpy.ndarray), each shape (R,)
        ``w`` (dimensionless), ``w'`` (1/s), ``w''`` (1/s^2).

    Examples
    --------
    >>> w, dw, ddw = rest_taper(5, 4.0)
    >>> [float(v) for v in w]
    [0.0, 0.103515625, 0.5, 0.896484375, 1.0]
    >>> float(dw[0]), float(ddw[0])
    (0.0, 0.0)

    References
    ----------
    Chiu, H.-C., "Stable baseline correction of digital strong-motion data",
    Bull. Seism. Soc. Am. 87(4), 1997; Boore, D. M., "Effect of baseline
    corrections on displacements and response spectra for several recordings
    of the 1999 Chi-Chi, Taiwan, earthquake", Bull. Seism. Soc. Am. 91(5),
    2001 (from memory: baseline correction of the displacement); the quintic
    taper: common practice, no source.
    """
    r = int(length_samples)
    duration = (r - 1) / float(rate_hz)
    u = np.arange(r, dtype=float) / (r - 1)
    w = u**3 * (10.0 + u * (-15.0 + 6.0 * u))
    dw = 30.0 * u**2 * (1.0 - u) ** 2 / duration
    ddw = 60.0 * u * (1.0 - u) * (1.0 - 2.0 * u) / duration**2
    return w, dw, ddw


def raised_cosine_ramp(length_samples: int) -> np.ndarray:
    """Fade-in factors ``0.5 (1 - cos(pi n / R))``, ``n = 0 .. R-1``: 0 at the first sample, rising to 1.

    Parameters
    ----------
    length_samples : int
        R, the ramp length in samples.

    Returns
    -------
    numpy.ndarray, shape (R,)
        Factors (dimensionless); reverse them for the fade-out.

    Examples
    --------
    >>> raised_cosine_ramp(4)
    array([0.        , 0.14644661, 0.5       , 0.85355339])

    References
    ----------
    Raised-cosine (Hann) taper, Blackman & Tukey, *The Measurement of Power
    Spectra*, Dover 1958.
    """
    n = np.arange(int(length_samples), dtype=float)
    return 0.5 * (1.0 - np.cos(np.pi * n / max(int(length_samples), 1)))


