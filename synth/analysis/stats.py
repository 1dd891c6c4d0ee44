"""Streaming amplitude statistics of a record, in constant memory.

Two passes over the record, each fed in chunks of any length:

1. :class:`MomentAccumulator` -- count, mean, RMS, standard deviation,
   skewness, kurtosis, min, max, peak, crest factor and the RMS of successive
   windows (stationarity).  Chunks are reduced to exact central moments and
   merged pairwise (Chan, Golub & LeVeque; Pebay), never through raw power
   sums, so a large mean does not destroy the higher moments.
2. :class:`LevelCrossingAccumulator` -- given the mean and standard deviation
   from pass 1, counts the samples with ``|x - mean| > k std`` and the
   up-crossings of the mean level.  These need the final mean and standard
   deviation, so they are a second pass: exact, no histogram binning.  The
   caller re-reads the file (or re-feeds the array) for it.

:func:`amplitude_statistics` runs both passes over a re-iterable source of
chunks and returns both results.

Definitions (all "population" forms, i.e. divided by the sample count N):

* ``rms = sqrt(mean(x^2))`` -- about zero, the g RMS of the record, including
  any offset; ``std = sqrt(mean((x - mean)^2))``, about the mean.
* ``skewness = m3 / m2^1.5``, ``kurtosis = m4 / m2^2`` (Pearson, 3 for a
  Gaussian), with ``m_r`` the r-th central moment; equal to
  ``scipy.stats.skew(x)`` and ``scipy.stats.kurtosis(x, fisher=False)``.
* ``peak = max |x|``, ``crest_factor = peak / rms`` (sqrt(2) for a sine).
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

import numpy as np
from scipy.special import erfc

from vibsynth.errors import InputError
from vibsynth.analysis.record_input import as_samples, check_rate_hz

__all__ = [
    "MomentAccumulator",
    "MomentStatistics",
    "LevelCrossingAccumulator",
    "LevelCrossingStatistics",
    "amplitude_statistics",
    "DEFAULT_LEVELS_SIGMA",
    "WindowRmsAccumulator",
]

#: Exceedance levels, in standard deviations, counted by default.
DEFAULT_LEVELS_SIGMA = (1.0, 2.0, 3.0, 4.0)


@dataclass(frozen=True)
class MomentStatistics:
    """First-pass amplitude statistics of a record.

    Attributes
    ----------
    count : int
        Number of samples N.
    duration_s : float
        ``N / rate_hz``, s.
    rate_hz : float
        Sample rate, Hz.
    mean : float
        Mean, record unit (e.g. g).
    rms : float
        Root mean square about zero, ``sqrt(mean(x^2))``, record unit.
    std : float
        Standard deviation about the mean, population form (divided by N),
        record unit.
    skewness : float
        ``m3 / m2^1.5`` (dimensionless); NaN for a constant record.
    kurtosis : float
        ``m4 / m2^2``, Pearson (3 for a Gaussian); NaN for a constant record.
    minimum, maximum : float
        Smallest and largest sample, record unit.
    peak : float
        ``max |x|``, record unit.
    crest_factor : float
        ``peak / rms`` (dimensionless); NaN when rms is 0.
    window_s : float or None
        Length of the stationarity windows, s (None when not asked).
    window_samples : int
        Samples per stationarity window (0 when not asked).
    window_rms : tuple of float
        RMS about zero of each complete successive window, record unit, in
        time order; a trailing partial window is left out.
    """

    count: int
    duration_s: float
    rate_hz: float
    mean: float
    rms: float
    std: float
    skewness: float
    kurtosis: float
    minimum: float
    maximum: float
    peak: float
    crest_factor: float
    window_s: float | None
    window_samples: int
    window_rms: tuple


class MomentAccumulator:
    """First pass: moments, extremes and windowed RMS of a record fed in chunks.

    Each chunk's count, mean and central moment sums M2, M3, M4 are computed
    exactly (two-pass within the chunk) and merged into the running totals with
    the pairwise update formulas, which stay accurate when the mean is large
    compared with the standard deviation.  Memory is constant apart from one
    float per completed stationarity window.

    Parameters
    ----------
    rate_hz : float
        Sample rate, Hz.
    window_s : float, optional
        Length of the successive, non-overlapping windows whose RMS is
        reported (stationarity check), s; rounded to whole samples (>= 1).
        None: no windowed RMS.

    References
    ----------
    T. F. Chan, G. H. Golub and R. J. LeVeque, "Updating formulae and a
    pairwise algorithm for computing sample variances", Stanford report
    STAN-CS-79-773 (1979).
    P. Pebay, "Formulas for robust, one-pass parallel computation of
    covariances and arbitrary-order statistical moments", Sandia report
    SAND2008-6212 (2008).
    """

    def __init__(self, rate_hz: float, window_s: float | None = None):
        self._rate_hz = check_rate_hz(rate_hz)
        if window_s is None:
            self._window_samples = 0
            self._window_s = None
        else:
            if isinstance(window_s, bool) or not isinstance(window_s, numbers.Real) or not math.isfinite(window_s) \
                    or window_s <= 0:
                raise InputError(f"window_s must be a finite duration > 0 s, got {window_s!r}", location="window_s")
            self._window_samples = max(1, int(round(float(window_s) * self._rate_hz)))
            self._window_s = self._window_samples / self._rate_hz
        self._n = 0
        self._mean = 0.0
        self._m2 = 0.0
        self._m3 = 0.0
        self._m4 = 0.0
        self._min = math.inf
        self._max = -math.inf
        # RMS over windows: the one windowed accumulator of this module
        self._windows = WindowRmsAccumulator(self._rate_hz, self._window_samples) if self._window_samples else None

    def _merge(self, n_b: int, mean_b: float, m2_b: float, m3_b: float, m4_b: float) -> None:
        n_a = self._n
        if n_a == 0:
            self._n, self._mean, self._m2, self._m3, self._m4 = n_b, mean_b, m2_b, m3_b, m4_b
            return
        n = n_a + n_b
        delta = mean_b - self._mean
        d_n = delta / n
        m2_a, m3_a, m4_a = self._m2, self._m3, self._m4
        self._mean = self._mean + n_b * d_n
        self._m2 = m2_a + m2_b + delta * d_n * n_a * n_b
        self._m3 = (m3_a + m3_b + delta * d_n * d_n * n_a * n_b * (n_a - n_b)
                    + 3.0 * d_n * (n_a * m2_b - n_b * m2_a))
        self._m4 = (m4_a + m4_b + delta * d_n ** 3 * n_a * n_b * (n_a * n_a - n_a * n_b + n_b * n_b)
                    + 6.0 * d_n * d_n * (n_a * n_a * m2_b + n_b * n_b * m2_a)
                    + 4.0 * d_n * (n_a * m3_b - n_b * m3_a))
        self._n = n

    def update(self, chunk) -> None:
        """Add the next samples of the record.

        Parameters
        ----------
        chunk : array_like
            1-D real samples in the record's unit (e.g. g); any length.

        References
        ----------
        Chan, Golub & LeVeque (1979); Pebay (2008): pairwise merge of central
        moments.
        """
        x = as_samples(chunk, self._n)
        if x.size == 0:
            return
        n_b = x.size
        mean_b = float(np.mean(x))
        d = x - mean_b
        d2 = d * d
        m2_b = float(np.sum(d2))
        m3_b = float(np.dot(d2, d))
        m4_b = float(np.dot(d2, d2))
        self._merge(n_b, mean_b, m2_b, m3_b, m4_b)
        self._min = min(self._min, float(np.min(x)))
        self._max = max(self._max, float(np.max(x)))
        if self._windows is not None:
            self._windows.update(x)

    def result(self) -> MomentStatistics:
        """Statistics of everything received so far.

        Returns
        -------
        MomentStatistics
            See the class attributes for units.

        Raises
        ------
        InputError
            When no sample was received.

        References
        ----------
        Pearson's moment ratios; Pebay (2008) for the merged central moments.
        """
        n = self._n
        if n == 0:
            raise InputError("the record has no samples; nothing to compute statistics from", location="samples")
        var = self._m2 / n
        std = math.sqrt(var)
        rms = math.sqrt(var + self._mean * self._mean)
        if self._m2 > 0.0:
            skewness = math.sqrt(n) * self._m3 / self._m2 ** 1.5
            kurtosis = n * self._m4 / (self._m2 * self._m2)
        else:
            skewness = kurtosis = math.nan
        peak = max(abs(self._min), abs(self._max))
        crest = peak / rms if rms > 0.0 else math.nan
        return MomentStatistics(
            count=n,
            duration_s=n / self._rate_hz,
            rate_hz=self._rate_hz,
            mean=self._mean,
            rms=rms,
            std=std,
            skewness=skewness,
            kurtosis=kurtosis,
            minimum=self._min,
            maximum=self._max,
            peak=peak,
            crest_factor=crest,
            window_s=self._window_s,
            window_samples=self._window_samples,
            window_rms=self._windows.result() if self._windows is not None else (),
        )


@dataclass(frozen=True)
class LevelCrossingStatistics:
    """Second-pass statistics: exceedances of k standard deviations and mean-level up-crossings.

    Attributes
    ----------
    count : int
        Samples examined.
    duration_s : float
        ``count / rate_hz``, s.
    mean, std : float
        The level and scale used (from the first pass), record unit.
    levels_sigma : tuple of float
        The levels k (in standard deviations).
    exceedance_counts : tuple of int
        Samples with ``|x - mean| > k std``, per level.
    exceedance_fractions : tuple of float
        Those counts divided by ``count``.
    gaussian_fractions : tuple of float
        The Gaussian two-sided tail ``2 (1 - Phi(k))`` per level, for comparison.
    upcrossings : int
        Up-crossings of the mean level: sample pairs with
        ``x[i-1] < mean <= x[i]`` (pairs spanning two chunks included).
    upcrossing_rate_hz : float
        ``upcrossings / duration_s``, Hz (crossings per second).
    """

    count: int
    duration_s: float
    mean: float
    std: float
    levels_sigma: tuple
    exceedance_counts: tuple
    exceedance_fractions: tuple
    gaussian_fractions: tuple
    upcrossings: int
    upcrossing_rate_hz: float


class LevelCrossingAccumulator:
    """Second pass: exceedance counts and up-crossings of the mean, given mean and std.

    Parameters
    ----------
    rate_hz : float
        Sample rate, Hz.
    mean : float
        Mean level of the record (from :class:`MomentAccumulator`), record unit.
    std : float
        Standard deviation of the record (from :class:`MomentAccumulator`),
        record unit, > 0.
    levels_sigma : sequence of float, optional
        Exceedance levels k, in standard deviations (> 0). Default 1, 2, 3, 4.

    References
    ----------
    S. O. Rice, "Mathematical analysis of random noise", Bell Syst. Tech. J.
    23, 282-332 (1944) and 24, 46-156 (1945): up-crossing rate of a level.
    """

    def __init__(self, rate_hz: float, mean: float, std: float, levels_sigma=DEFAULT_LEVELS_SIGMA):
        self._rate_hz = check_rate_hz(rate_hz)
        if isinstance(mean, bool) or not isinstance(mean, numbers.Real) or not math.isfinite(mean):
            raise InputError(f"mean must be a finite number, got {mean!r}", location="mean")
        if isinstance(std, bool) or not isinstance(std, numbers.Real) or not math.isfinite(std) or std <= 0:
            raise InputError(f"std must be a finite number > 0 (a constant record has no level crossings), "
                             f"got {std!r}", location="std")
        levels = np.atleast_1d(np.asarray(levels_sigma, dtype=np.float64))
        if levels.ndim != 1 or levels.size == 0 or not np.all(np.isfinite(levels)) or np.any(levels <= 0):
            raise InputError(f"levels_sigma must be a list of numbers > 0, got {levels_sigma!r}",
                             location="levels_sigma")
        self._mean = float(mean)
        self._std = float(std)
        self._levels = tuple(float(k) for k in levels)
        self._thresholds = levels * self._std
        self._counts = np.zeros(levels.size, dtype=np.int64)
        self._n = 0
        self._up = 0
        self._last_below: bool | None = None

    def update(self, chunk) -> None:
        """Add the next samples of the record (the same record, in the same order, as pass 1).

        Parameters
        ----------
        chunk : array_like
            1-D real samples in the record's unit; any length.

        References
        ----------
        Rice (1944/45), level up-crossings.
        """
        x = as_samples(chunk, self._n)
        if x.size == 0:
            return
        self._n += x.size
        a = np.abs(x - self._mean)
        for i, t in enumerate(self._thresholds):
            self._counts[i] += int(np.count_nonzero(a > t))
        below = x < self._mean
        ups = int(np.count_nonzero(below[:-1] & ~below[1:]))
        if self._last_below and not below[0]:
            ups += 1
        self._up += ups
        self._last_below = bool(below[-1])

    def result(self) -> LevelCrossingStatistics:
        """Counts of everything received so far.

        Returns
        -------
        LevelCrossingStatistics
            See the class attributes for units.

        Raises
        ------
        InputError
            When no sample was received.

        References
        ----------
        Gaussian two-sided tail ``2 (1 - Phi(k)) = erfc(k / sqrt 2)``
        (Abramowitz & Stegun 26.2); Rice (1944/45) for up-crossings.
        """
        if self._n == 0:
            raise InputError("the record has no samples; nothing to count", location="samples")
        duration = self._n / self._rate_hz
        counts = tuple(int(c) for c in self._counts)
        return LevelCrossingStatistics(
            count=self._n,
            duration_s=duration,
            mean=self._mean,
            std=self._std,
            levels_sigma=self._levels,
            exceedance_counts=counts,
            exceedance_fractions=tuple(c / self._n for c in counts),
            gaussian_fractions=tuple(float(erfc(k / math.sqrt(2.0))) for k in self._levels),
            upcrossings=self._up,
            upcrossing_rate_hz=self._up / duration,
        )


def amplitude_statistics(chunks, rate_hz: float, window_s: float | None = None,
                         levels_sigma=DEFAULT_LEVELS_SIGMA):
    """Both passes over a record: moments, then exceedances and mean up-crossings.

    Parameters
    ----------
    chunks : numpy.ndarray or callable
        The record as a 1-D array (record unit, e.g. g), or a callable taking
        no argument that returns a fresh iterable of 1-D chunks each time it is
        called (it is called twice: e.g. a function that re-opens a file).
    rate_hz : float
        Sample rate, Hz.
    window_s : float, optional
        Stationarity window length, s (see :class:`MomentAccumulator`).
    levels_sigma : sequence of float, optional
        Exceedance levels in standard deviations. Default 1, 2, 3, 4.

    Returns
    -------
    moments : MomentStatistics
        First-pass statistics.
    crossings : LevelCrossingStatistics or None
        Second-pass counts; None for a constant record (std 0).

    References
    ----------
    Pebay (2008) for the moments; Rice (1944/45) for up-crossings.
    """
    if callable(chunks):
        source = chunks
    else:
        array = np.asarray(chunks)
        def source():  # noqa: E306 - tiny adapter
            return (array,)
    first = MomentAccumulator(rate_hz, window_s)
    for chunk in source():
        first.update(chunk)
    moments = first.result()
    if not moments.std > 0.0:
        return moments, None
    second = LevelCrossingAccumulator(rate_hz, moments.mean, moments.std, levels_sigma)
    for chunk in source():
        second.update(chunk)
    crossings = second.result()
    if crossings.count != moments.count:
        raise InputError(f"the second read of the record gave {crossings.count} samples, the first "
                         f"{moments.count}; the source must give the same record each time", location="chunks")
    return moments, crossings


class WindowRmsAccumulator:
    """RMS (about zero) of successive, non-overlapping windows of a record fed in chunks.

    Parameters
    ----------
    rate_hz : float
        Sample rate, Hz.
    window_samples : int
        Samples per window (>= 1); a trailing partial window is left out.

    Examples
    --------
    >>> acc = WindowRmsAccumulator(100.0, 2)
    >>> acc.update([3.0, 4.0, 0.0]); acc.update([0.0, 1.0])
    >>> [round(v, 3) for v in acc.result()]
    [3.536, 0.0]

    References
    ----------
    J. S. Bendat and A. G. Piersol, "Random Data: Analysis and Measurement
    Procedures", 4th ed., Wiley (2010), section 12.4 (run and reverse
    arrangement tests of stationarity on mean-square values of successive
    short time intervals).
    """

    def __init__(self, rate_hz: float, window_samples: int):
        self._rate_hz = check_rate_hz(rate_hz)
        if isinstance(window_samples, bool) or not isinstance(window_samples, numbers.Integral) \
                or int(window_samples) < 1:
            raise InputError(f"window_samples must be a whole number >= 1, got {window_samples!r}",
                             location="window_samples")
        self._w = int(window_samples)
        self._n = 0
        self._partial_sq = 0.0
        self._partial_n = 0
        self._rms: list[float] = []

    @property
    def window_s(self) -> float:
        """Window length, s."""
        return self._w / self._rate_hz

    def update(self, chunk) -> None:
        """Add the next samples (record unit, any length).

        Examples
        --------
        >>> acc = WindowRmsAccumulator(10.0, 1); acc.update([2.0]); acc.result()
        (2.0,)

        References
        ----------
        Bendat & Piersol (2010), section 12.4.
        """
        x = as_samples(chunk, self._n)
        self._n += x.size
        w, i = self._w, 0
        if self._partial_n:
            take = min(w - self._partial_n, x.size)
            self._partial_sq += float(np.dot(x[:take], x[:take]))
            self._partial_n += take
            i = take
            if self._partial_n < w:
                return
            self._rms.append(math.sqrt(self._partial_sq / w))
            self._partial_sq, self._partial_n = 0.0, 0
        full = (x.size - i) // w
        if full:
            block = x[i:i + full * w].reshape(full, w)
            self._rms.extend(np.sqrt(np.einsum("ij,ij->i", block, block) / w).tolist())
            i += full * w
        rest = x[i:]
        self._partial_sq = float(np.dot(rest, rest))
        self._partial_n = rest.size

    def result(self) -> tuple:
        """RMS of each complete window, in time order (record unit).

        Examples
        --------
        >>> WindowRmsAccumulator(10.0, 3).result()
        ()

        References
        ----------
        Bendat & Piersol (2010), section 12.4.
        """
        return tuple(self._rms)


class HeldRunAccumulator:
    """Longest run of identical consecutive samples of a record fed in chunks (a dropout or a held value).

    A sampled random record whose spectrum is continuous never repeats a value exactly, except where
    quantisation holds it for a few samples at a slow peak; a run of tens of identical samples is a
    dropout, a frozen acquisition or an edit, which spectral and RMS checks over long windows miss.

    Parameters
    ----------
    rate_hz : float
        Sample rate, Hz.

    Examples
    --------
    >>> acc = HeldRunAccumulator(1000.0)
    >>> acc.update([0.1, 0.0, 0.0]); acc.update([0.0, 0.0, 0.3])
    >>> acc.longest, acc.start, acc.value
    (4, 1, 0.0)

    References
    ----------
    Run-length counting (no published method needed); the plausibility limit is set by the caller.
    """

    def __init__(self, rate_hz: float):
        self._rate_hz = check_rate_hz(rate_hz)
        self._n = 0
        self._last = None
        self._run = 0
        self._run_start = 0
        self.longest = 0
        self.start = 0
        self.value = math.nan

    @property
    def longest_s(self) -> float:
        """Duration of the longest run, s (its length / rate)."""
        return self.longest / self._rate_hz

    def update(self, chunk) -> None:
        """Add the next samples (any length).

        Examples
        --------
        >>> acc = HeldRunAccumulator(10.0); acc.update([1.0, 1.0]); acc.longest_s
        0.2

        References
        ----------
        None (bookkeeping).
        """
        x = as_samples(chunk, self._n)
        if x.size == 0:
            return
        # where a new run starts inside this chunk (a sample differing from the one before it)
        starts = np.flatnonzero(np.diff(x) != 0) + 1
        bounds = np.concatenate(([0], starts, [x.size]))
        lengths = np.diff(bounds)
        if self._last is not None and x[0] == self._last:
            lengths[0] += self._run
            first_start = self._run_start
        else:
            first_start = self._n
        run_starts = self._n + bounds[:-1]
        run_starts[0] = first_start
        i = int(np.argmax(lengths))
        if lengths[i] > self.longest:
            self.longest, self.start, self.value = int(lengths[i]), int(run_starts[i]), float(x[bounds[i]])
        self._run, self._run_start, self._last = int(lengths[-1]), int(run_starts[-1]), float(x[-1])
        self._n += x.size
