"""The ASD profile: breakpoints joined by straight lines on log-log axes.

A random-vibration requirement is a table of breakpoints (frequency in Hz,
one-sided acceleration spectral density in g^2/Hz).  Between two breakpoints
the ASD is a power law, ``S(f) = S1 (f/f1)^n`` with
``n = ln(S2/S1) / ln(f2/f1)``, i.e. a straight line on log-log axes whose
slope in dB/octave is ``10 log10(S2/S1) / log2(f2/f1)``.  Outside the band the
ASD is zero.

Because every segment is a power law, every spectral integral the tool needs
(mean-square, velocity and displacement mean-square, spectral moments
``m_p = integral f^p S(f) df``) has a closed form, which this module uses.
Nothing here integrates numerically.

References
----------
Bendat, J. S. & Piersol, A. G., *Random Data: Analysis and Measurement
Procedures*, 4th ed., Wiley 2010 (one-sided spectral density, mean-square as
its integral).
Rice, S. O., "Mathematical analysis of random noise", Bell System Technical
Journal 23 (1944) and 24 (1945) (spectral moments, zero-crossing rate).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from vibsynth.errors import InputError
from vibsynth.profile.units import STANDARD_GRAVITY_M_S2  # 9.80665 m/s^2 (CGPM 1901, ISO 80000-3)

#: 10 log10(2): the dB/octave slope of an ASD that doubles every octave (about 3.0103).
DB_PER_OCTAVE_DOUBLING = 10.0 * math.log10(2.0)



def _exprel_scalar(x: float) -> float:
    if abs(x) < _EPSILON:
        return 1.0
    if x > 717.0:
        return math.inf
    try:
        return math.expm1(x) / x
    except OverflowError:  # e^x beyond the largest double (x > 709.78...)
        return math.inf


_EPSILON = 2.0**-52


def exprel(x) -> np.ndarray:
    """``(e^x - 1) / x`` elementwise, 1 at ``x = 0`` (dimensionless).

    The relative error function of the exponential, exact through its
    removable singularity because ``expm1`` keeps its accuracy for small
    ``x``.  Evaluated with the C library's ``expm1`` one element at a time
    (``math.expm1``), which gives the same values, bit for bit, as
    ``scipy.special.exprel``; it is here so that making a Gaussian drive
    never imports ``scipy.special`` (whose import costs more start-up time
    than a second of samples).  The arrays it sees are small: one entry per
    profile segment, or per line at a band edge.

    Parameters
    ----------
    x : array_like
        Dimensionless argument.

    Returns
    -------
    numpy.ndarray
        Same shape as ``x``.

    Examples
    --------
    >>> float(exprel(0.0)), round(float(exprel(1.0)), 12)
    (1.0, 1.718281828459)

    References
    ----------
    Abramowitz, M. & Stegun, I. A., *Handbook of Mathematical Functions*, NBS 1964,
    4.2.1 (the exponential series: the limit 1 at x = 0).
    """
    values = np.asarray(x, dtype=float)
    flat = [_exprel_scalar(value) for value in values.ravel().tolist()]
    return np.array(flat, dtype=float).reshape(values.shape)

def _readonly(values) -> np.ndarray:
    array = np.array(values, dtype=float)
    array.setflags(write=False)
    return array


def power_law_segment_moment(f1_hz, f2_hz, s1, s2, power: float) -> np.ndarray:
    """Closed-form integral of ``f^power * S(f)`` over log-log segments.

    On each segment ``S(f) = s1 (f/f1)^n`` with ``n = ln(s2/s1)/ln(f2/f1)``; the
    integral is ``s1 f1^(p+1) / (n+p+1) ((f2/f1)^(n+p+1) - 1)``, which tends to
    ``s1 f1^(p+1) ln(f2/f1)`` when ``n + p + 1 = 0``.  It is evaluated as
    ``s1 f1^(p+1) L exprel((n+p+1) L)`` with ``L = ln(f2/f1)`` and
    ``exprel(x) = (e^x - 1)/x``, which is exact and continuous through the
    singular case.

    Parameters
    ----------
    f1_hz, f2_hz : array_like
        Segment start and end frequencies in Hz, ``0 < f1 < f2``.
    s1, s2 : array_like
        Spectral density at ``f1`` and ``f2`` (any unit U, e.g. g^2/Hz), > 0.
    power : float
        The exponent p of the frequency weight ``f^p``.

    Returns
    -------
    numpy.ndarray
        Per-segment integral, in U * Hz^(p+1).

    References
    ----------
    Closed-form integration of power-law (straight line on log-log axes)
    spectra, as used for ASD breakpoint tables: Bendat & Piersol (2010),
    mean-square value as the integral of the one-sided spectral density.
    """
    f1 = np.asarray(f1_hz, dtype=float)
    f2 = np.asarray(f2_hz, dtype=float)
    s1 = np.asarray(s1, dtype=float)
    s2 = np.asarray(s2, dtype=float)
    log_ratio = np.log(f2 / f1)
    exponent = np.log(s2 / s1) / log_ratio
    return s1 * f1 ** (power + 1.0) * log_ratio * exprel((exponent + power + 1.0) * log_ratio)


@dataclass(frozen=True)
class AsdProfile:
    """An immutable one-sided acceleration spectral density profile.

    Parameters
    ----------
    frequencies_hz : array_like
        Breakpoint frequencies in Hz, strictly increasing, all > 0, at least two.
    asd_g2_per_hz : array_like
        ASD at each breakpoint in g^2/Hz, all > 0 and finite.
    name : str
        Short name (shown in tables and reports).
    description : str
        One-line description.

    Notes
    -----
    Between breakpoints the ASD is interpolated linearly on log-log axes; it
    is zero below the first and above the last breakpoint.  Use
    :func:`vibsynth.profile.files.read_profile` or :meth:`from_breakpoints` to build
    one from a table that mixes ASD values and slopes.
    """

    frequencies_hz: np.ndarray
    asd_g2_per_hz: np.ndarray
    name: str = "profile"
    description: str = ""
    source: str = field(default="", compare=False)
    #: Mixed-mode parts (tones, narrow bands, level schedule; :mod:`vibsynth.profile.mixed`) or None.
    mixed: object = field(default=None, repr=False)

    def __post_init__(self):
        f = np.array(self.frequencies_hz, dtype=float).ravel()
        s = np.array(self.asd_g2_per_hz, dtype=float).ravel()
        where = self.source or self.name
        if f.size != s.size:
            raise InputError(
                f"{f.size} frequencies but {s.size} ASD values; give one ASD per frequency", where
            )
        if f.size < 2:
            raise InputError(
                f"a profile needs at least two breakpoints, got {f.size}", where
            )
        for index, (fi, si) in enumerate(zip(f, s)):
            row = f"breakpoint {index + 1}"
            if not math.isfinite(fi):
                raise InputError(f"frequency {fi} is not a finite number; give a frequency in Hz > 0", where, row)
            if not math.isfinite(si):
                raise InputError(f"ASD {si} is not a finite number; give an ASD in g^2/Hz > 0", where, row)
            if fi <= 0:
                raise InputError(f"frequency {fi:g} Hz must be > 0", where, row)
            if si <= 0:
                raise InputError(
                    f"ASD {si:g} must be > 0 (log-log interpolation needs positive values; "
                    "end the band at the last non-zero breakpoint instead)",
                    where,
                    row,
                )
            if index and fi <= f[index - 1]:
                what = "repeats" if fi == f[index - 1] else "is below"
                raise InputError(
                    f"frequency {fi:g} Hz {what} the previous breakpoint ({f[index - 1]:g} Hz); "
                    "frequencies must be strictly increasing",
                    where,
                    row,
                )
        # Every figure the tool reports comes from the closed-form moments m_p, p = -4 .. 4 (displacement
        # to peak rate); refuse a table whose figures overflow or underflow double precision.
        with np.errstate(all="ignore"):
            slopes = np.log(s[1:] / s[:-1]) / np.log(f[1:] / f[:-1])
            moments = [float(np.sum(power_law_segment_moment(f[:-1], f[1:], s[:-1], s[1:], p)))
                       for p in (-4.0, -2.0, 0.0, 2.0, 4.0)]
        if not (np.all(np.isfinite(slopes)) and all(math.isfinite(m) and m > 0 for m in moments)):
            raise InputError(
                f"the profile's figures (g RMS, velocity, displacement, spectral moments) do not fit in floating-point "
                f"numbers (band {f[0]:g}-{f[-1]:g} Hz, ASD {s.min():g}-{s.max():g} g^2/Hz); check the units and the "
                "exponents of the breakpoints",
                where,
            )
        object.__setattr__(self, "frequencies_hz", _readonly(f))
        object.__setattr__(self, "asd_g2_per_hz", _readonly(s))

    # ------------------------------------------------------------------ build
    @classmethod
    def from_breakpoints(cls, points, name: str = "profile", description: str = "", source: str = ""):
        """Build a profile from breakpoints that give an ASD or a slope.

        Parameters
        ----------
        points : sequence of (frequency_hz, asd_g2_per_hz, slope_db_per_octave)
            For each breakpoint exactly one of ``asd_g2_per_hz`` and
            ``slope_db_per_octave`` is given (the other is ``None``).  A slope
            (dB/octave) defines this point's ASD from the previous point:
            ``S2 = S1 10^(slope log2(f2/f1) / 10)``.  The first point must give
            an ASD.
        name, description, source : str
            Labels; ``source`` (a file name) is used in error messages.

        Returns
        -------
        AsdProfile

        References
        ----------
        dB/octave slope of a power-law spectrum: 10 log10(S2/S1)/log2(f2/f1)
        (decibel and octave definitions, IEC 60050 / ISO 80000-3).
        """
        where = source or name
        frequencies: list[float] = []
        values: list[float] = []
        for index, (frequency, asd, slope) in enumerate(points):
            row = f"breakpoint {index + 1}"
            if (asd is None) == (slope is None):
                raise InputError(
                    "give exactly one of 'asd' (g^2/Hz) or 'slope_db_per_octave' (dB/octave from the previous point)",
                    where,
                    row,
                )
            if asd is not None:
                frequencies.append(float(frequency))
                values.append(float(asd))
                continue
            if index == 0:
                raise InputError(
                    "the first breakpoint has a slope but no previous point to slope from; give its 'asd' in g^2/Hz",
                    where,
                    row,
                )
            slope = float(slope)
            frequency = float(frequency)
            if not math.isfinite(slope):
                raise InputError(f"slope {slope} dB/octave is not a finite number", where, row)
            previous_f, previous_s = frequencies[-1], values[-1]
            if not (math.isfinite(frequency) and frequency > previous_f > 0):
                raise InputError(
                    f"frequency {frequency:g} Hz must be above the previous breakpoint ({previous_f:g} Hz)",
                    where,
                    row,
                )
            octaves = math.log2(frequency / previous_f)
            try:
                value = previous_s * 10.0 ** (slope * octaves / 10.0)
            except OverflowError:
                value = math.inf
            if not (math.isfinite(value) and value > 0):
                raise InputError(
                    f"slope {slope:g} dB/octave over {octaves:.4g} octaves from {previous_s:g} g^2/Hz gives an ASD "
                    "outside the range of floating-point numbers; check the slope",
                    where,
                    row,
                )
            frequencies.append(frequency)
            values.append(value)
        return cls(np.array(frequencies), np.array(values), name=name, description=description, source=source)

    # ------------------------------------------------------------- geometry
    @property
    def frequency_min_hz(self) -> float:
        """Lowest breakpoint frequency (Hz)."""
        return float(self.frequencies_hz[0])

    @property
    def frequency_max_hz(self) -> float:
        """Highest breakpoint frequency (Hz)."""
        return float(self.frequencies_hz[-1])

    @property
    def exponents(self) -> np.ndarray:
        """Power-law exponent n of each segment (dimensionless), ``S ~ f^n``."""
        f, s = self.frequencies_hz, self.asd_g2_per_hz
        return np.log(s[1:] / s[:-1]) / np.log(f[1:] / f[:-1])

    @property
    def slopes_db_per_octave(self) -> np.ndarray:
        """Slope of each segment in dB/octave: ``10 log10(S2/S1) / log2(f2/f1)``."""
        return self.exponents * DB_PER_OCTAVE_DOUBLING

    def evaluate(self, frequency_hz) -> np.ndarray:
        """ASD in g^2/Hz at the given frequencies (Hz), log-log interpolated, 0 outside the band.

        Parameters
        ----------
        frequency_hz : array_like
            Frequencies in Hz (any shape; values <= 0 give 0).

        Returns
        -------
        numpy.ndarray
            ASD in g^2/Hz, same shape as ``frequency_hz``.

        References
        ----------
        Straight-line interpolation on log-log axes of breakpoint tables.
        """
        f = np.asarray(frequency_hz, dtype=float)
        out = np.zeros(f.shape)
        inside = (f >= self.frequencies_hz[0]) & (f <= self.frequencies_hz[-1])
        if np.any(inside):
            log_f = np.log(f[inside])
            out[inside] = np.exp(
                np.interp(log_f, np.log(self.frequencies_hz), np.log(self.asd_g2_per_hz))
            )
        return out

    def line_spectrum(self, resolution_hz: float, lines) -> np.ndarray:
        """The profile as a line spectrum on the grid ``f_k = k df`` (g^2/Hz per line).

        Line k stands for its bin ``[f_k - df/2, f_k + df/2]``, so that
        ``sum_k L_k df`` is the record's mean-square (discrete Parseval
        relation).  A line whose bin lies inside the band keeps ``S(f_k)``
        exactly (the value :meth:`evaluate` gives).  A line whose bin straddles
        a band edge (where the target drops to zero) gets the exact integral of
        ``S`` over the part of its bin inside the band, divided by ``df``:
        ``L_k = (1/df) integral_{max(f_k - df/2, f_min)}^{min(f_k + df/2, f_max)} S(f) df``.
        Counting such a line in full would add up to half a line of power at
        each edge (99-101 Hz on a 0.25 Hz grid: 9 lines of 0.25 Hz for a 2 Hz
        band, 6 % too much RMS); the integral also covers a line that lies just
        outside the band but whose bin reaches into it (where ``S(f_k) = 0``),
        and a steep skirt that changes across the bin, which the bin's share
        times ``S(f_k)`` would miss.  A band narrower than one bin goes wholly
        to the line whose bin holds it.  The sum ``sum_k L_k df`` is then the
        profile's mean-square up to the midpoint rule on the interior lines.

        Parameters
        ----------
        resolution_hz : float
            Line spacing ``df`` in Hz (> 0).
        lines : int or array_like of int
            Number of lines (``k = 0 .. lines - 1``) or the line indices k.

        Returns
        -------
        numpy.ndarray
            ``L_k`` in g^2/Hz, one per line (0 for bins outside the band).
            The DC line's bin is ``[-df/2, df/2]`` like any other; a caller that
            drops the DC or Nyquist line drops its share too.

        Examples
        --------
        >>> p = AsdProfile([99.0, 101.0], [1.0, 1.0])
        >>> p.line_spectrum(0.25, [396, 397, 403, 404, 405])  # 99, 99.25, 100.75, 101, 101.25 Hz
        array([0.5, 1. , 1. , 0.5, 0. ])
        >>> round(float(p.line_spectrum(0.25, 1000).sum() * 0.25), 12)  # = mean-square, 2 g^2
        2.0

        References
        ----------
        Discrete Parseval relation of the DFT and the spectral representation
        of Shinozuka & Jan (1972), each line carrying the power of its bin;
        closed-form integral of power-law segments (:func:`power_law_segment_moment`).
        """
        df = float(resolution_hz)
        if not (math.isfinite(df) and df > 0):
            raise InputError(f"resolution {resolution_hz!r} Hz must be a finite number > 0", "resolution")
        index = np.arange(int(lines)) if np.ndim(lines) == 0 else np.asarray(lines)
        values = self.evaluate(index * df)
        lower = (index - 0.5) * df
        upper = (index + 0.5) * df
        low, high = self.frequency_min_hz, self.frequency_max_hz
        edge = (upper > low) & (lower < high) & ((lower < low) | (upper > high))
        if np.any(edge):
            values[edge] = self.band_integral(lower[edge], upper[edge]) / df
        return values

    # ------------------------------------------------------------- integrals
    def band_integral(self, f_low_hz, f_high_hz, power: float = 0.0) -> np.ndarray:
        """Closed-form ``integral f^power S(f) df`` from ``f_low_hz`` to ``f_high_hz`` (limits clipped to the band).

        Parameters
        ----------
        f_low_hz, f_high_hz : array_like
            Lower and upper limits in Hz (broadcast together); where
            ``f_high_hz <= f_low_hz`` the result is 0.
        power : float
            Exponent p of the frequency weight (0: the mean-square in g^2).

        Returns
        -------
        numpy.ndarray
            The integral in g^2 Hz^power, shape of the broadcast limits.

        Examples
        --------
        >>> p = AsdProfile([20.0, 2000.0], [0.04, 0.04])
        >>> round(float(p.band_integral(0.0, 100.0)), 12)  # 0.04 g^2/Hz x 80 Hz
        3.2

        References
        ----------
        Power-law segment integral as in :func:`power_law_segment_moment`
        (Bendat & Piersol 2010, mean-square as the integral of the ASD).
        """
        a, b = np.broadcast_arrays(np.asarray(f_low_hz, dtype=float), np.asarray(f_high_hz, dtype=float))
        f, s = self.frequencies_hz, self.asd_g2_per_hz
        exponent = self.exponents
        lo = np.maximum(a[..., None], f[:-1])
        hi = np.minimum(b[..., None], f[1:])
        inside = hi > lo
        lo = np.where(inside, lo, f[:-1])
        hi = np.where(inside, hi, f[1:])
        with np.errstate(all="ignore"):
            s_lo = s[:-1] * (lo / f[:-1]) ** exponent
            log_ratio = np.log1p((hi - lo) / lo)  # ln(hi/lo), accurate for a bin much narrower than lo
            part = s_lo * lo ** (power + 1.0) * log_ratio * exprel((exponent + power + 1.0) * log_ratio)
        return np.sum(np.where(inside, part, 0.0), axis=-1)

    def segment_moments(self, power: float) -> np.ndarray:
        """Per-segment closed-form ``integral f^power S(f) df`` in g^2 Hz^power.

        References
        ----------
        See :func:`power_law_segment_moment`.
        """
        f, s = self.frequencies_hz, self.asd_g2_per_hz
        return power_law_segment_moment(f[:-1], f[1:], s[:-1], s[1:], power)

    def spectral_moment(self, power: float) -> float:
        """Spectral moment ``m_p = integral f^p S(f) df`` in g^2 Hz^p (closed form).

        Parameters
        ----------
        power : float
            The order p (0 gives the mean-square; 2 and 4 give Rice's moments;
            -2 and -4 lead to velocity and displacement).

        Returns
        -------
        float
            m_p in g^2 Hz^p.

        References
        ----------
        Rice (1944/45), spectral moments of a stationary Gaussian process.
        """
        return float(np.sum(self.segment_moments(power)))

    @property
    def mean_square_g2(self) -> float:
        """Mean-square acceleration in g^2: the area under the ASD."""
        return self.spectral_moment(0.0)

    @property
    def grms(self) -> float:
        """Overall acceleration RMS in g: the square root of the area under the ASD."""
        return math.sqrt(self.mean_square_g2)

    @property
    def segment_shares(self) -> np.ndarray:
        """Each segment's share of the mean-square (fractions summing to 1)."""
        areas = self.segment_moments(0.0)
        return areas / np.sum(areas)

    @property
    def velocity_rms_m_s(self) -> float:
        """Velocity RMS in m/s: ``sqrt(integral S g0^2 / (2 pi f)^2 df)``.

        References
        ----------
        Integration of a random acceleration in the frequency domain: the
        velocity ASD is ``S_a g0^2 / (2 pi f)^2`` (Bendat & Piersol 2010).
        """
        return STANDARD_GRAVITY_M_S2 / (2.0 * math.pi) * math.sqrt(self.spectral_moment(-2.0))

    @property
    def displacement_rms_m(self) -> float:
        """Displacement RMS in m: ``sqrt(integral S g0^2 / (2 pi f)^4 df)``.

        References
        ----------
        Displacement ASD ``S_a g0^2 / (2 pi f)^4`` (Bendat & Piersol 2010).
        """
        return STANDARD_GRAVITY_M_S2 / (2.0 * math.pi) ** 2 * math.sqrt(self.spectral_moment(-4.0))

    @property
    def displacement_peak_to_peak_3sigma_m(self) -> float:
        """Peak-to-peak displacement at +/-3 sigma in m (6 x displacement RMS): the stroke the drive needs.

        The 3-sigma stroke estimate is common practice (no source); a Gaussian
        record exceeds 3 sigma 0.27 % of the time, so a rig needs margin above it.
        """
        return 6.0 * self.displacement_rms_m

    @property
    def zero_upcrossing_rate_hz(self) -> float:
        """Rice's expected rate of zero up-crossings ``sqrt(m2/m0)`` in 1/s.

        References
        ----------
        Rice (1944/45), eq. for the expected number of zeros of a Gaussian process.
        """
        return math.sqrt(self.spectral_moment(2.0) / self.spectral_moment(0.0))

    @property
    def peak_rate_hz(self) -> float:
        """Rice's expected rate of maxima ``sqrt(m4/m2)`` in 1/s (Rice 1944/45)."""
        return math.sqrt(self.spectral_moment(4.0) / self.spectral_moment(2.0))

    @property
    def irregularity_factor(self) -> float:
        """Irregularity factor ``alpha = m2 / sqrt(m0 m4)`` (1 for a narrow band; Rice 1944/45)."""
        return self.spectral_moment(2.0) / (math.sqrt(self.spectral_moment(0.0)) * math.sqrt(self.spectral_moment(4.0)))

    # --------------------------------------------------------------- scaling
    def scaled(self, asd_factor: float) -> "AsdProfile":
        """The profile with every ASD value multiplied by ``asd_factor`` (> 0).

        The g RMS scales by ``sqrt(asd_factor)``.
        """
        factor = float(asd_factor)
        if not (math.isfinite(factor) and factor > 0):
            raise InputError(f"ASD scale factor {asd_factor!r} must be a finite number > 0", self.source or self.name)
        return AsdProfile(
            self.frequencies_hz, self.asd_g2_per_hz * factor, name=self.name, description=self.description, source=self.source,
            mixed=self.mixed,
        )

    def scaled_db(self, level_db: float) -> "AsdProfile":
        """The profile shifted by ``level_db`` dB (ASD x 10^(dB/10)); -6 dB halves the g RMS."""
        level = float(level_db)
        if not math.isfinite(level) or abs(level) > 60:
            raise InputError(f"level {level_db!r} dB must be a finite number between -60 and +60", self.source or self.name)
        return self.scaled(10.0 ** (level / 10.0))

    def scaled_to_grms(self, grms: float) -> "AsdProfile":
        """The profile scaled so that its overall g RMS equals ``grms`` (g, > 0)."""
        target = float(grms)
        if not (math.isfinite(target) and target > 0):
            raise InputError(f"target g RMS {grms!r} must be a finite number > 0", self.source or self.name)
        ratio = target / self.grms
        factor = ratio * ratio  # not ratio ** 2, which raises OverflowError instead of giving inf
        if not (math.isfinite(factor) and factor > 0):
            raise InputError(
                f"target g RMS {grms!r} would scale the ASD by {factor:g}, beyond floating-point numbers; "
                f"the profile has {self.grms:.4g} g RMS",
                self.source or self.name,
            )
        return self.scaled(factor)

    def with_name(self, name: str, description: str | None = None) -> "AsdProfile":
        """A copy with another name (and description)."""
        return AsdProfile(
            self.frequencies_hz,
            self.asd_g2_per_hz,
            name=name,
            description=self.description if description is None else description,
            source=self.source,
            mixed=self.mixed,
        )

    # --------------------------------------------------------------- export
    def summary(self) -> dict:
        """Overall figures as plain data (the ``vibsynth info --json`` contract).

        Keys: ``grms`` (g), ``velocity_rms`` (m/s), ``displacement_rms`` (m),
        ``displacement_peak_to_peak_3sigma`` (m), ``frequency_min`` and
        ``frequency_max`` (Hz), ``zero_upcrossing_rate`` and ``peak_rate`` (1/s),
        ``irregularity_factor``, ``mean_square`` (g^2), and ``breakpoints`` (list
        of ``frequency`` in Hz, ``asd`` in g^2/Hz, and ``slope_db_per_octave`` and
        ``share_of_mean_square`` of the segment that ends there, coming from
        the previous breakpoint; both None on the first, as in profile files).
        """
        slopes = self.slopes_db_per_octave
        shares = self.segment_shares
        breakpoints = []
        for index, (frequency, asd) in enumerate(zip(self.frequencies_hz, self.asd_g2_per_hz)):
            first = index == 0
            breakpoints.append(
                {
                    "frequency": float(frequency),
                    "asd": float(asd),
                    "slope_db_per_octave": None if first else float(slopes[index - 1]),
                    "share_of_mean_square": None if first else float(shares[index - 1]),
                }
            )
        return {
            "name": self.name,
            "description": self.description,
            "grms": self.grms,
            "mean_square": self.mean_square_g2,
            "velocity_rms": self.velocity_rms_m_s,
            "displacement_rms": self.displacement_rms_m,
            "displacement_peak_to_peak_3sigma": self.displacement_peak_to_peak_3sigma_m,
            "frequency_min": self.frequency_min_hz,
            "frequency_max": self.frequency_max_hz,
            "zero_upcrossing_rate": self.zero_upcrossing_rate_hz,
            "peak_rate": self.peak_rate_hz,
            "irregularity_factor": self.irregularity_factor,
            "breakpoints": breakpoints,
        }
