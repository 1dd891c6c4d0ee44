"""Streaming Welch estimate of a one-sided spectral density, with its statistics.

The estimator here is the verifier's own: it judges a record by what is in it and
never imports the generator or the transforms.  It reproduces
``scipy.signal.welch(x, fs, window='hann', nperseg=n, noverlap=n // 2,
detrend='constant', scaling='density')`` (periodic Hann window, 50 % overlap,
segment mean removed, one-sided density, mean of the segment periodograms) while
reading the record in chunks of any length and holding at most one segment of
carried samples, so memory does not grow with the record length.

Computation is always in float64, whatever the dtype of the chunks (scipy keeps
float32 input in float32).

Public API
----------
WelchAccumulator(rate_hz, nperseg)      streaming estimator (.update, .result)
WelchEstimate                           frozen result of the estimator
welch_asd(x, rate_hz, nperseg)          the same on an in-memory array
overlap_correlation(window, step)       Welch's window overlap correlation c_j
welch_dof(segments, correlations)       equivalent degrees of freedom
chi2_confidence_limits(asd, dof, c)     chi-square confidence band
choose_nperseg(n_samples, rate_hz, ...) power-of-two segment length
SegmentChoice                           frozen result of choose_nperseg
"""

from __future__ import annotations

import math
import numbers
import os
from dataclasses import dataclass

import numpy as np
import scipy.fft
import scipy.signal
import scipy.stats
from numpy.lib.stride_tricks import sliding_window_view

from vibsynth.errors import InputError
from vibsynth.analysis.record_input import as_samples, check_rate_hz

__all__ = [
    "WelchAccumulator",
    "WelchEstimate",
    "welch_asd",
    "overlap_correlation",
    "welch_dof",
    "chi2_confidence_limits",
    "choose_nperseg",
    "SegmentChoice",
    "DEFAULT_TARGET_DOF",
]

#: Degrees of freedom aimed at by :func:`choose_nperseg` when none is asked
#: (design choice of this project: about +/-1.3 dB at 90 % confidence).
DEFAULT_TARGET_DOF = 120.0

# Samples per block of segments processed together (bounds temporary memory to
# a few MB whatever the chunk length, and keeps the block in cache).
_BLOCK_SAMPLES = 1 << 19

# Number of FFT worker threads (the library stays on CPU; two is what a shared
# machine can always give), or one in a process asked to run single-threaded
# (OMP_NUM_THREADS=1, as Dask sets in its worker processes, which run one job per
# core).  The estimate does not depend on it: each segment is transformed whole by
# one thread.
_FFT_WORKERS = 2


def _fft_workers() -> int:
    """FFT threads: :data:`_FFT_WORKERS`, at most OMP_NUM_THREADS when that is a positive integer."""
    try:
        limit = int(os.environ.get("OMP_NUM_THREADS", ""))
    except ValueError:
        return _FFT_WORKERS
    return max(1, min(_FFT_WORKERS, limit))


def _check_count(value: int, name: str, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise InputError(f"{name} must be a whole number >= {minimum}, got {value!r}", location=name)
    if int(value) < minimum:
        raise InputError(f"{name} must be >= {minimum}, got {int(value)}", location=name)
    return int(value)


def overlap_correlation(window, step_samples: int) -> np.ndarray:
    """Correlation of a data window with itself shifted by whole segment steps.

    ``c_j = sum_i w[i] w[i + j D] / sum_i w[i]^2`` for ``j = 1, 2, ...`` while
    ``j D < len(w)``, with ``D`` the step between segment starts.  For white
    Gaussian noise, the periodograms of two segments ``j`` steps apart have a
    correlation coefficient ``c_j^2``.

    Parameters
    ----------
    window : array_like
        The data window, 1-D, dimensionless.
    step_samples : int
        Step between the starts of successive segments, in samples
        (``nperseg - noverlap``), >= 1.

    Returns
    -------
    numpy.ndarray
        ``c_1, c_2, ...`` (dimensionless), one per lag that still overlaps;
        empty when segments do not overlap.

    References
    ----------
    P. D. Welch, "The use of the fast Fourier transform for the estimation of
    power spectra: a method based on time averaging over short, modified
    periodograms", IEEE Trans. Audio Electroacoust. AU-15(2), 70-73 (1967).
    F. J. Harris, "On the use of windows for harmonic analysis with the
    discrete Fourier transform", Proc. IEEE 66(1), 51-83 (1978), "overlap
    correlation".
    """
    w = np.asarray(window, dtype=np.float64)
    if w.ndim != 1 or w.size < 2:
        raise InputError(f"window must be a 1-D array of at least 2 values, got shape {w.shape}", location="window")
    step = _check_count(step_samples, "step_samples", 1)
    energy = float(np.dot(w, w))
    if not energy > 0.0:
        raise InputError("window must not be all zeros", location="window")
    lags = np.arange(step, w.size, step)
    return np.array([np.dot(w[: w.size - lag], w[lag:]) / energy for lag in lags], dtype=np.float64)


def _hann_half_overlap_correlation() -> np.ndarray:
    n = 256
    return overlap_correlation(scipy.signal.get_window("hann", n), n - n // 2)


def welch_dof(segments: int, correlations=None) -> float:
    """Equivalent chi-square degrees of freedom of a Welch average of ``segments`` periodograms.

    ``nu = 2 K / (1 + 2 sum_{j=1}^{K-1} (1 - j/K) c_j^2)`` for white Gaussian
    noise (and, approximately, for any spectrum smooth over the window's
    bandwidth).  For the Hann window at 50 % overlap, ``c_1 = 1/6`` and
    ``c_j = 0`` beyond, so ``nu = 2K / (1 + (1 - 1/K)/18) = 36 K^2 / (19 K - 1)``,
    tending to ``36/19 K``, about ``1.89 K``.  The DC and Nyquist lines of a
    one-sided estimate have half this number.

    Parameters
    ----------
    segments : int
        Number K of averaged segments, >= 1.
    correlations : array_like, optional
        Window overlap correlations ``c_1, c_2, ...`` (dimensionless) at lags of
        1, 2, ... segment steps, as :func:`overlap_correlation` returns them.
        Default: those of the periodic Hann window at 50 % overlap.

    Returns
    -------
    float
        Degrees of freedom nu (dimensionless).

    References
    ----------
    P. D. Welch, IEEE Trans. Audio Electroacoust. AU-15(2), 70-73 (1967),
    variance of the averaged modified periodogram.
    J. S. Bendat and A. G. Piersol, "Random Data: Analysis and Measurement
    Procedures", Wiley, chapter on spectral estimation (chi-square model).
    """
    k = _check_count(segments, "segments", 1)
    c = _hann_half_overlap_correlation() if correlations is None else np.asarray(correlations, dtype=np.float64)
    c = np.atleast_1d(c)
    if c.ndim != 1 or not np.all(np.isfinite(c)):
        raise InputError("correlations must be a 1-D list of finite numbers", location="correlations")
    j = np.arange(1, min(k, c.size + 1))
    denominator = 1.0 + 2.0 * float(np.sum((1.0 - j / k) * c[: j.size] ** 2))
    return 2.0 * k / denominator


def chi2_confidence_limits(asd, dof: float, confidence: float = 0.90):
    """Two-sided chi-square confidence limits of a spectral density estimate.

    ``lower = nu S / chi2.ppf(1 - a/2, nu)`` and ``upper = nu S / chi2.ppf(a/2, nu)``
    with ``a = 1 - confidence``: the interval that contains the true density
    with probability ``confidence`` when the estimate S is distributed as
    ``S_true chi2(nu) / nu``.

    Parameters
    ----------
    asd : array_like
        Estimated spectral density, unit^2/Hz (e.g. g^2/Hz), >= 0.
    dof : float
        Degrees of freedom nu of the estimate (dimensionless), > 0.
    confidence : float, optional
        Confidence level, strictly between 0 and 1. Default 0.90.

    Returns
    -------
    lower, upper : numpy.ndarray
        Lower and upper limits, in the unit of ``asd`` (unit^2/Hz), same shape.

    References
    ----------
    J. S. Bendat and A. G. Piersol, "Random Data: Analysis and Measurement
    Procedures", Wiley, confidence intervals of spectral density estimates.
    """
    s = np.asarray(asd, dtype=np.float64)
    if np.any(~np.isfinite(s)) or np.any(s < 0):
        raise InputError("asd must contain finite values >= 0", location="asd")
    if isinstance(dof, bool) or not isinstance(dof, numbers.Real) or not math.isfinite(dof) or dof <= 0:
        raise InputError(f"dof must be a finite number > 0, got {dof!r}", location="dof")
    if (isinstance(confidence, bool) or not isinstance(confidence, numbers.Real)
            or not 0.0 < float(confidence) < 1.0):
        raise InputError(f"confidence must be strictly between 0 and 1 (e.g. 0.90), got {confidence!r}",
                         location="confidence")
    alpha = 1.0 - float(confidence)
    nu = float(dof)
    lower = nu * s / scipy.stats.chi2.ppf(1.0 - alpha / 2.0, nu)
    upper = nu * s / scipy.stats.chi2.ppf(alpha / 2.0, nu)
    return lower, upper


def _segments_for(n_samples: int, nperseg: int) -> int:
    step = nperseg - nperseg // 2
    if n_samples < nperseg:
        return 0
    return (n_samples - nperseg // 2) // step


@dataclass(frozen=True)
class WelchEstimate:
    """A Welch spectral density estimate and its statistics.

    Attributes
    ----------
    frequencies_hz : numpy.ndarray
        Line frequencies, Hz: ``k * rate_hz / nperseg`` for k = 0 .. nperseg//2.
    asd : numpy.ndarray
        One-sided spectral density at those lines, unit^2/Hz (g^2/Hz for a
        record in g). Read-only.
    segments : int
        Number K of averaged segments.
    dof : float
        Equivalent chi-square degrees of freedom of the interior lines
        (the DC and Nyquist lines have half of it).
    resolution_hz : float
        Line spacing ``rate_hz / nperseg``, Hz.
    rate_hz : float
        Sample rate, Hz.
    nperseg : int
        Segment length, samples (overlap is ``nperseg // 2``).
    samples : int
        Samples received; the last ``samples - used`` of them did not fill a
        segment and are not in the estimate.
    samples_used : int
        Samples covered by the averaged segments.
    """

    frequencies_hz: np.ndarray
    asd: np.ndarray
    segments: int
    dof: float
    resolution_hz: float
    rate_hz: float
    nperseg: int
    samples: int
    samples_used: int

    def confidence_limits(self, confidence: float = 0.90):
        """Chi-square limits of :attr:`asd`; see :func:`chi2_confidence_limits`.

        Parameters
        ----------
        confidence : float, optional
            Confidence level in (0, 1). Default 0.90.

        Returns
        -------
        lower, upper : numpy.ndarray
            Limits in unit^2/Hz.

        References
        ----------
        Bendat and Piersol, "Random Data", chi-square confidence intervals.
        """
        return chi2_confidence_limits(self.asd, self.dof, confidence)


class WelchAccumulator:
    """Streaming Welch estimator: feed chunks of any length, read the average at any time.

    Periodic Hann window (``scipy.signal.get_window('hann', nperseg)``), 50 %
    overlap (``noverlap = nperseg // 2``), the mean of each segment removed,
    density scaling, one-sided, mean of the segment periodograms.  The result
    does not depend on how the record is cut into chunks, and equals
    ``scipy.signal.welch`` on the whole record with those settings.  At most
    ``nperseg - 1`` samples are carried between chunks; temporary memory per
    call is bounded by a fixed block size whatever the chunk length.

    Parameters
    ----------
    rate_hz : float
        Sample rate, Hz (> 0).
    nperseg : int
        Segment length, samples (>= 2). Resolution is ``rate_hz / nperseg`` Hz.

    References
    ----------
    P. D. Welch, "The use of the fast Fourier transform for the estimation of
    power spectra: a method based on time averaging over short, modified
    periodograms", IEEE Trans. Audio Electroacoust. AU-15(2), 70-73 (1967).
    """

    def __init__(self, rate_hz: float, nperseg: int):
        self._rate_hz = check_rate_hz(rate_hz)
        self._nperseg = _check_count(nperseg, "nperseg", 2)
        n = self._nperseg
        self._step = n - n // 2
        self._window = scipy.signal.get_window("hann", n)
        self._scale = 1.0 / (self._rate_hz * float(np.dot(self._window, self._window)))
        self._correlations = overlap_correlation(self._window, self._step)
        self._block_segments = max(1, _BLOCK_SAMPLES // n)
        self._carry = np.empty(0, dtype=np.float64)
        self._power_sum = np.zeros(n // 2 + 1, dtype=np.float64)
        self._segments = 0
        self._samples = 0

    @property
    def rate_hz(self) -> float:
        """Sample rate, Hz."""
        return self._rate_hz

    @property
    def nperseg(self) -> int:
        """Segment length, samples."""
        return self._nperseg

    @property
    def segments(self) -> int:
        """Segments averaged so far."""
        return self._segments

    @property
    def samples(self) -> int:
        """Samples received so far."""
        return self._samples

    @property
    def carried_samples(self) -> int:
        """Samples held over for the next segment (always < nperseg)."""
        return self._carry.size

    def _add_segments(self, data: np.ndarray, count: int) -> None:
        """Add the ``count`` segments starting at 0, step, 2 step ... of ``data``."""
        if count <= 0:
            return
        n, step, w = self._nperseg, self._step, self._window
        segs = sliding_window_view(data[: (count - 1) * step + n], n)[::step]
        block = self._block_segments
        buf = np.empty((min(block, count), n), dtype=np.float64)
        for start in range(0, count, block):
            seg = segs[start:start + block]
            b = buf[: seg.shape[0]]
            np.subtract(seg, seg.mean(axis=1, keepdims=True), out=b)  # detrend='constant'
            b *= w
            spec = scipy.fft.rfft(b, axis=1, workers=_fft_workers(), overwrite_x=True)
            pairs = spec.view(np.float64).reshape(spec.shape[0], spec.shape[1], 2)
            self._power_sum += np.einsum("ijk,ijk->j", pairs, pairs)
        self._segments += count

    def update(self, chunk) -> None:
        """Add the next samples of the record.

        Parameters
        ----------
        chunk : array_like
            1-D real samples, in the record's unit (e.g. g); any length,
            including 0 and 1.

        References
        ----------
        Welch (1967), segment averaging.
        """
        x = as_samples(chunk, self._samples)
        if x.size == 0:
            return
        self._samples += x.size
        n, step = self._nperseg, self._step
        carry = self._carry
        c = carry.size
        offset = 0  # start, within x, of the next segment that lies wholly in x
        if c:
            # Segments that start inside the carried samples: build them from
            # carry + the head of x (at most 2 segments, so a small copy).
            starts_in_carry = -(-c // step)  # segment starts 0, step, ... < c
            need = (starts_in_carry - 1) * step + n - c
            head = np.concatenate((carry, x[:need]))
            complete = _segments_for(head.size, n) if head.size >= n else 0
            complete = min(complete, starts_in_carry)
            self._add_segments(head, complete)
            if complete < starts_in_carry:
                # x too short to finish the segment starting at complete*step.
                self._carry = head[complete * step:].copy()
                return
            offset = starts_in_carry * step - c
        remaining = x.size - offset
        count = _segments_for(remaining, n) if remaining >= n else 0
        self._add_segments(x[offset:], count)
        self._carry = x[offset + count * step:].copy()

    def result(self) -> WelchEstimate:
        """The average of the segments received so far.

        Returns
        -------
        WelchEstimate
            Frequencies (Hz), one-sided density (unit^2/Hz), segments, dof,
            resolution (Hz).

        Raises
        ------
        InputError
            When fewer than ``nperseg`` samples were received (no segment).

        References
        ----------
        Welch (1967); density scaling ``1 / (rate_hz * sum(w^2))``.
        """
        n = self._nperseg
        if self._segments == 0:
            raise InputError(
                f"record has {self._samples} samples, fewer than one Welch segment of {n} samples "
                f"({n / self._rate_hz:g} s at {self._rate_hz:g} Hz); use a longer record or a "
                f"shorter segment (coarser resolution)",
                location="nperseg",
            )
        asd = self._power_sum * (self._scale / self._segments)
        if n % 2:
            asd[1:] *= 2.0
        else:
            asd[1:-1] *= 2.0
        freqs = scipy.fft.rfftfreq(n, 1.0 / self._rate_hz)
        asd.setflags(write=False)
        freqs.setflags(write=False)
        return WelchEstimate(
            frequencies_hz=freqs,
            asd=asd,
            segments=self._segments,
            dof=welch_dof(self._segments, self._correlations),
            resolution_hz=self._rate_hz / n,
            rate_hz=self._rate_hz,
            nperseg=n,
            samples=self._samples,
            samples_used=(self._segments - 1) * self._step + n,
        )


def welch_asd(x, rate_hz: float, nperseg: int) -> WelchEstimate:
    """Welch spectral density of an in-memory record (Hann, 50 % overlap, density).

    Equal to ``scipy.signal.welch(x, rate_hz, window='hann', nperseg=nperseg,
    noverlap=nperseg // 2, detrend='constant', scaling='density')``.

    Parameters
    ----------
    x : array_like
        1-D real record, in its unit (e.g. g).
    rate_hz : float
        Sample rate, Hz.
    nperseg : int
        Segment length, samples (>= 2, <= len(x)).

    Returns
    -------
    WelchEstimate
        Frequencies (Hz), one-sided density (unit^2/Hz), segments, dof,
        resolution (Hz).

    References
    ----------
    P. D. Welch, IEEE Trans. Audio Electroacoust. AU-15(2), 70-73 (1967).
    """
    acc = WelchAccumulator(rate_hz, nperseg)
    acc.update(x)
    return acc.result()


@dataclass(frozen=True)
class SegmentChoice:
    """A Welch segment length and what it gives on a given record.

    Attributes
    ----------
    nperseg : int
        Segment length, samples (a power of two).
    resolution_hz : float
        Line spacing ``rate_hz / nperseg``, Hz.
    segments : int
        Segments the record yields at 50 % overlap.
    dof : float
        Degrees of freedom of the estimate (Hann, 50 % overlap).
    target_dof : float or None
        The degrees of freedom aimed at, if any.
    target_reached : bool
        True when ``dof >= target_dof`` (or no target was set).
    message : str
        Empty when the target is reached; otherwise one line saying what was
        reached and how long a record would reach the target.
    """

    nperseg: int
    resolution_hz: float
    segments: int
    dof: float
    target_dof: float | None
    target_reached: bool
    message: str


def _pow2_at_least(value: float) -> int:
    return 1 << max(1, math.ceil(math.log2(value) - 1e-12))


def _pow2_at_most(value: int) -> int:
    return 1 << (int(value).bit_length() - 1)


def _samples_for_dof(target_dof: float, nperseg: int) -> int:
    step = nperseg - nperseg // 2
    k = 1
    while welch_dof(k) < target_dof:
        k *= 2
    lo, hi = k // 2 + 1 if k > 1 else 1, k
    while lo < hi:  # smallest K reaching the target
        mid = (lo + hi) // 2
        if welch_dof(mid) >= target_dof:
            hi = mid
        else:
            lo = mid + 1
    return (lo - 1) * step + nperseg


def choose_nperseg(n_samples: int, rate_hz: float, resolution_hz: float | None = None,
                   target_dof: float | None = None, coarsest_resolution_hz: float | None = None,
                   finest_resolution_hz: float | None = None) -> SegmentChoice:
    """Choose a power-of-two Welch segment length for a record.

    Two ways:

    * ``resolution_hz`` given: the shortest power-of-two segment whose line
      spacing ``rate_hz / nperseg`` is at most ``resolution_hz``.  If
      ``target_dof`` is also given, it is only checked (flag and message).
    * otherwise: the longest power-of-two segment (finest resolution) whose
      estimate still has ``dof >= target_dof`` (default
      :data:`DEFAULT_TARGET_DOF` = 120), searched between
      ``coarsest_resolution_hz`` (default ``rate_hz / 256``) and
      ``finest_resolution_hz`` (default ``rate_hz / 65536``).  When even the
      coarsest allowed resolution cannot reach the target on this record, that
      coarsest segment is returned with ``target_reached=False`` and a message
      giving the record length that would reach it.

    Parameters
    ----------
    n_samples : int
        Record length, samples.
    rate_hz : float
        Sample rate, Hz.
    resolution_hz : float, optional
        Requested line spacing, Hz (the result is this fine or finer).
    target_dof : float, optional
        Degrees of freedom aimed at (dimensionless, > 0).
    coarsest_resolution_hz : float, optional
        Coarsest line spacing allowed when choosing by dof, Hz.
    finest_resolution_hz : float, optional
        Finest line spacing considered when choosing by dof, Hz.

    Returns
    -------
    SegmentChoice
        Segment length (samples), resolution (Hz), segments, dof, flag and
        message.

    Raises
    ------
    InputError
        Bad arguments, or a record shorter than one segment at the requested
        (or coarsest allowed) resolution.

    References
    ----------
    Welch (1967) for the degrees of freedom of 50 %-overlapped Hann segments;
    Bendat and Piersol, "Random Data", for the resolution/variance trade-off.
    The default target of 120 dof and the 256 .. 65536 sample search range are
    design choices of this project (common practice, no source).
    """
    n_rec = _check_count(n_samples, "n_samples", 0)
    rate = check_rate_hz(rate_hz)

    def positive(value, name):
        if value is None:
            return None
        if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value) or value <= 0:
            raise InputError(f"{name} must be a finite number > 0, got {value!r}", location=name)
        return float(value)

    resolution = positive(resolution_hz, "resolution_hz")
    target = positive(target_dof, "target_dof")
    coarsest = positive(coarsest_resolution_hz, "coarsest_resolution_hz")
    finest = positive(finest_resolution_hz, "finest_resolution_hz")
    seconds = n_rec / rate

    def describe(n: int, aim: float | None) -> SegmentChoice:
        k = _segments_for(n_rec, n)
        dof = welch_dof(k) if k else 0.0
        reached = aim is None or dof >= aim
        message = ""
        if not reached:
            need = _samples_for_dof(aim, n)
            try:
                need_s = need / rate
            except OverflowError:  # a sample count beyond floating point: no record is that long
                need_s = math.inf
            message = (f"record of {seconds:g} s gives {dof:.1f} dof at {rate / n:g} Hz resolution "
                       f"({k} segments of {n} samples); {aim:g} dof needs at least {need_s:g} s "
                       f"at that resolution")
        return SegmentChoice(nperseg=n, resolution_hz=rate / n, segments=k, dof=dof,
                             target_dof=aim, target_reached=reached, message=message)

    if resolution is not None:
        ratio = rate / resolution
        n = _pow2_at_least(ratio) if math.isfinite(ratio) else None
        if n is None or n > n_rec:
            raise InputError(
                f"a resolution of {resolution:g} Hz at {rate:g} Hz needs segments of {n or f'{ratio:g}'} samples, "
                f"but the record has only {n_rec} samples ({seconds:g} s); ask for a coarser "
                f"resolution (at least {rate / max(_pow2_at_most(max(n_rec, 2)), 2):g} Hz) or a longer record",
                location="resolution_hz",
            )
        return describe(n, target)

    aim = DEFAULT_TARGET_DOF if target is None else target
    n_min = _pow2_at_least(rate / coarsest) if coarsest is not None else 256
    n_max = _pow2_at_most(max(int(rate / finest), 2)) if finest is not None else 65536
    if finest is not None and coarsest is not None and finest > coarsest:
        raise InputError(
            f"finest_resolution_hz ({finest:g} Hz) must not exceed coarsest_resolution_hz ({coarsest:g} Hz)",
            location="finest_resolution_hz",
        )
    n_max = max(n_max, n_min)
    if n_min > n_rec:
        raise InputError(
            f"record has {n_rec} samples ({seconds:g} s), fewer than one segment of {n_min} samples at the "
            f"coarsest allowed resolution of {rate / n_min:g} Hz; use a longer record or allow a coarser "
            f"resolution",
            location="n_samples",
        )
    best = n_min
    n = n_min
    while n <= min(n_max, n_rec):
        k = _segments_for(n_rec, n)
        if k and welch_dof(k) >= aim:
            best = n
        else:
            break  # dof only falls as segments get longer
        n *= 2
    return describe(best, aim)
