"""Gaussian drive synthesis: random-phase inverse FFT frames, periodic or overlap-added.

A frame of N samples at rate ``fs`` has lines ``f_k = k fs / N``.  Giving line
``0 < k < N/2`` the complex amplitude ``|X_k| = N sqrt(S(f_k) df / 2)``
(``df = fs/N``) with a uniform random phase and taking numpy's ``irfft``
makes a periodic frame whose variance is exactly ``sum S(f_k) df`` and whose
periodogram equals ``S(f_k)`` at every line.  The DC and Nyquist lines carry
nothing.

Two ways to make a record of any length
---------------------------------------
``periodic``
    One inverse FFT of the whole record (``N`` = record length): the finest
    resolution there is, and the record loops seamlessly.  Used when the record
    fits the memory budget (:data:`DEFAULT_MEMORY_BUDGET_BYTES`, estimated by
    :func:`periodic_memory_bytes`), always for ``loop=True`` and for velocity
    and displacement outputs (which must integrate exactly to each other; a
    record beyond the budget is then refused with the longest duration that
    fits).  Its randomness comes from the child ``spawn_key + (1,)`` of the
    root :class:`numpy.random.SeedSequence`.
``overlap-add``
    Independent frames of ``N`` samples (``N`` a power of two chosen from the
    profile's lowest frequency and narrowest segment, see
    :func:`profile_resolution_hz`), each multiplied by the sine window
    ``w[n] = sin(pi (n + 1/2) / N)``, laid every ``N/2`` samples with the first
    frame starting at ``-N/2``, and summed.  Because ``w[n]^2 + w[n + N/2]^2 = 1``
    the variance is the same at every sample, and every output sample is the
    sum of exactly two frames.  Memory does not grow with duration.  Frame
    ``j`` draws its randomness from its own child ``spawn_key + (0, j)`` of
    the root seed sequence, so any frame (and any stretch of the record) can
    be made alone, and frames can be made in parallel on worker threads
    (``Synthesizer(..., workers=k)``) with the same samples bit for bit.
    The sine window leaks the lowest band lines down to 0 Hz (a white floor
    about 50 dB below the band, which double integration turns into
    displacement many times the profile's), so by default the windowed sum
    passes the zero-phase FIR high-pass :class:`SpillHighpass` (pass edge
    0.95 x the lowest band frequency, 60 dB below its stop edge, exactly 0 at
    0 Hz), by uniformly partitioned overlap-save; output sample n is then
    sample ``n + D`` of the windowed sum (D the FIR half-length).

Either way the record is a deterministic function of (seed, plan): it does not
depend on the chunk size it is read in, nor on where a read starts.

Randomness per frame: one standard normal pair per line (``N + 2`` normals for
a frame of ``N``).  ``amplitude="rayleigh"`` uses the pair as it is (complex
Gaussian line: Rayleigh amplitude, uniform phase, a true Gaussian record);
``amplitude="fixed"`` keeps only its direction (uniform phase, amplitude fixed
by the target, an exact periodogram).  The two modes of one seed therefore
share their phases.

Generation works on a unit-variance Gaussian stream ``u`` whose spectrum has the
shape of the plan's line spectrum; the output is ``output_scale * g(u)`` where
``g`` is an optional memoryless transform applied after overlap-add (the hook
for non-Gaussian drives), then the raised-cosine ramps.  Without a transform
``output_scale = sqrt(sum S df)`` and the output spectrum is the line spectrum
in physical units.

References
----------
Shinozuka, M. & Jan, C.-M., "Digital simulation of random processes and its
applications", Journal of Sound and Vibration 25(1), 1972 (spectral
representation: random-phase sums of cosines).
Kaiser, J. F., "Nonrecursive digital filter design using the I0-sinh window
function", Proc. IEEE ISCAS 1974 (the high-pass FIR); Oppenheim, A. V. &
Schafer, R. W., *Discrete-Time Signal Processing*, 3rd ed., 2010 (overlap-save);
Soo, J.-S. & Pang, K. K., "Multidelay block frequency domain adaptive filter",
IEEE Trans. ASSP 38(2), 1990 (uniformly partitioned block convolution).
Allen, J. B., "Short term spectral analysis, synthesis, and modification by
discrete Fourier transform", IEEE Trans. ASSP 25(3), 1977 (overlap-add with
windows whose squares sum to one).
Princen, J. P. & Bradley, A. B., "Analysis/synthesis filter bank design based
on time domain aliasing cancellation", IEEE Trans. ASSP 34(5), 1986 (the sine
window, ``w^2 + w_shifted^2 = 1``).
Bendat, J. S. & Piersol, A. G., *Random Data*, 4th ed., Wiley 2010 (one-sided
spectral density, integration in the frequency domain).
"""

from __future__ import annotations

import collections
import dataclasses
import math
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from functools import cached_property
from typing import Callable, Iterator, Sequence

import numpy as np
import scipy.fft

from vibsynth.errors import InputError
from vibsynth.profile.asd import STANDARD_GRAVITY_M_S2, AsdProfile

#: Amplitude modes: ``fixed`` (random phase only; exact periodogram) and
#: ``rayleigh`` (complex Gaussian lines; a true Gaussian realisation).
AMPLITUDE_MODES = ("fixed", "rayleigh")

#: The quantities a record can hold, and their units.
QUANTITY_UNITS = {"acceleration": "g", "velocity": "m/s", "displacement": "m"}

#: Generation modes (see the module docstring).
MODES = ("periodic", "overlap-add")

#: Working memory one periodic record may use (bytes) before overlap-add takes over.
DEFAULT_MEMORY_BUDGET_BYTES = 256 * 2**20

#: Frequency lines per feature: the frame resolution is the smaller of the lowest
#: frequency and the narrowest segment divided by this (common practice, no source).
LINES_PER_FEATURE = 8

#: Shortest overlap-add frame (samples); shorter frames cost more per sample in overhead.
MIN_FRAME_LENGTH = 8192

#: Longest overlap-add frame (samples, about 170 MB of working memory).
MAX_FRAME_LENGTH = 1 << 22

#: Rates below this multiple of the top frequency get a warning (anti-alias
#: margin; common practice, no source).
RATE_MARGIN_FACTOR = 2.56

#: Working bytes per sample of a periodic record: the spectrum (8), the record (8),
#: the inverse FFT's scratch and allocator slack; peak RSS growth measured at 45
#: bytes/sample for 2^23 samples (numpy 2.4, scipy 1.17).
PERIODIC_BYTES_PER_SAMPLE = 48
#: Extra bytes per sample for each velocity/displacement column (measured 16-20).
PERIODIC_BYTES_PER_EXTRA_QUANTITY = 20

#: Working memory (bytes) that frames made ahead of use on worker threads may hold: each frame in
#: flight holds its lines and its samples (about 24 bytes per sample with the FFT's scratch).
FRAME_PREFETCH_BYTES = 64 * 2**20

#: Pass-band edge of the spill-over high-pass, as a fraction of the lowest band frequency.
HIGHPASS_PASS_FRACTION = 0.95
#: Stop-band edge of the periodic (frequency-domain) high-pass, same units.
HIGHPASS_STOP_FRACTION = 0.5
#: Stop-band attenuation of the overlap-add FIR high-pass, dB (guaranteed) ...
HIGHPASS_ATTENUATION_DB = 60.0
#: ... designed with Kaiser's formulas for this many dB (they are approximate by about 1 dB).
_HIGHPASS_DESIGN_DB = HIGHPASS_ATTENUATION_DB + 5.0
#: Longest overlap-add filter block (samples; the window is twice this, 128 MB at most).
MAX_HIGHPASS_BLOCK = 1 << 23
#: A Gaussian overlap-add stream is high-passed by partitioned overlap-save: the FIR of B + 1 taps
#: in partitions of B / this many samples (FFTs of 2B / this; small FFTs stay in cache) ...
HIGHPASS_PARTITIONS = 4
#: ... but no shorter than this many samples (or the hop, if shorter).
MIN_HIGHPASS_PARTITION = 4096

_FRAME_STREAM = 0
_PERIODIC_STREAM = 1


def check_workers(workers) -> int:
    """Number of worker threads as a positive int (the samples never depend on it).

    Parameters
    ----------
    workers : int
        Threads that make overlap-add frames (1: all in the calling thread).

    Returns
    -------
    int

    Raises
    ------
    InputError
        Not an integer >= 1.

    References
    ----------
    None (argument check).
    """
    try:
        count = int(workers)
    except (TypeError, ValueError):
        raise InputError(f"workers {workers!r} must be an integer >= 1", "workers") from None
    if isinstance(workers, (bool, np.bool_)) or count != workers or count < 1:
        raise InputError(f"workers {workers!r} must be an integer >= 1", "workers")
    return count


def ordered_map(function: Callable, items, workers: int, in_flight: int) -> Iterator:
    """``function(item)`` for each item, yielded in the order of ``items``.

    With ``workers > 1`` the calls run on a pool of that many threads, at most
    ``in_flight`` of them submitted ahead of the consumer (bounded memory), so
    the consumer's own work (e.g. encoding and writing a file) overlaps with
    them.  Numpy's random draws, its ufuncs and ``scipy.fft`` release the
    interpreter lock, so frames are made in parallel.  Each call must depend
    only on its item: the results are then the same as sequential calls, bit
    for bit.

    Parameters
    ----------
    function : callable
        Called once per item.
    items : iterable
        Consumed in the calling thread.
    workers : int
        Threads (1: plain sequential calls in the calling thread).
    in_flight : int
        Most calls submitted and not yet yielded (>= workers).

    Yields
    ------
    object
        ``function(item)``, in order.

    References
    ----------
    Python ``concurrent.futures.ThreadPoolExecutor``.
    """
    if workers <= 1:
        for item in items:
            yield function(item)
        return
    executor = ThreadPoolExecutor(max_workers=workers, thread_name_prefix="vibsynth")
    pending: collections.deque = collections.deque()
    try:
        for item in items:
            pending.append(executor.submit(function, item))
            if len(pending) > in_flight:
                yield pending.popleft().result()
        while pending:
            yield pending.popleft().result()
    finally:
        for future in pending:
            future.cancel()
        executor.shutdown(wait=True, cancel_futures=True)


def frame_workers(workers: int, frame_length: int) -> tuple[int, int]:
    """Threads and frames in flight for frames of ``frame_length`` samples within :data:`FRAME_PREFETCH_BYTES`.

    Parameters
    ----------
    workers : int
        Threads asked for.
    frame_length : int
        Samples per frame (or per filtered window).

    Returns
    -------
    (int, int)
        Threads to use (fewer for very long frames, at least 1) and the most
        frames in flight.

    References
    ----------
    None (resource sizing).
    """
    per_frame = 24 * max(int(frame_length), 1)
    fit = max(1, FRAME_PREFETCH_BYTES // per_frame)
    threads = max(1, min(int(workers), fit))
    return threads, max(threads, min(4 * threads, fit))


# --------------------------------------------------------------------- seeds
def root_seed_sequence(seed) -> np.random.SeedSequence:
    """The root :class:`numpy.random.SeedSequence` of a record.

    Parameters
    ----------
    seed : int, numpy.random.SeedSequence or numpy.random.Generator
        An int (>= 0) is the entropy of the root sequence; a ``SeedSequence``
        is used as it is; a ``Generator`` gives one integer in ``[0, 2**53)``
        (advancing it) which becomes the entropy, so the record can be remade
        from :func:`seed_entropy` of the result.

    Returns
    -------
    numpy.random.SeedSequence

    References
    ----------
    NumPy ``SeedSequence`` (O'Neill's seed mixing) and its ``spawn_key`` children.
    """
    if isinstance(seed, np.random.SeedSequence):
        return seed
    if isinstance(seed, np.random.Generator):
        return np.random.SeedSequence(int(seed.integers(0, 2**53)))
    if isinstance(seed, (bool, np.bool_)) or seed is None:
        raise InputError(f"seed {seed!r} must be an integer >= 0, a SeedSequence or a numpy Generator", "seed")
    try:
        value = int(seed)
    except (TypeError, ValueError):
        raise InputError(f"seed {seed!r} must be an integer >= 0, a SeedSequence or a numpy Generator", "seed") from None
    if value != seed or value < 0:
        raise InputError(f"seed {seed!r} must be an integer >= 0", "seed")
    return np.random.SeedSequence(value)


def seed_entropy(sequence: np.random.SeedSequence) -> int:
    """The integer entropy of a root seed sequence (what a sidecar records as ``seed``)."""
    entropy = sequence.entropy
    if isinstance(entropy, (list, tuple, np.ndarray)):
        raise InputError("a seed sequence with a list of entropy words cannot be recorded as one seed; pass an int", "seed")
    return int(entropy)


def _child(root: np.random.SeedSequence, *key: int) -> np.random.Generator:
    sequence = np.random.SeedSequence(root.entropy, spawn_key=tuple(root.spawn_key) + tuple(key))
    return np.random.default_rng(sequence)



#: Largest record, in samples, that a plan accepts (about 54 years at 51.2 kHz; far beyond any
#: disk, but it keeps every size computation an exact integer).
MAX_RECORD_SAMPLES = 1e14

# ------------------------------------------------------------------- frames
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

    References
    ----------
    Shinozuka & Jan (1972), spectral representation; the discrete Parseval
    relation of the DFT.
    """
    spectrum = _clean_line_spectrum(line_spectrum, frame_length)
    df = float(rate_hz) / frame_length
    return frame_length * np.sqrt(spectrum * df / 2.0)


def _clean_line_spectrum(line_spectrum, frame_length: int) -> np.ndarray:
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


def _band_of(amplitudes: np.ndarray) -> tuple[int, int]:
    """Index range [lo, hi) holding every non-zero line."""
    nonzero = np.flatnonzero(amplitudes)
    if nonzero.size == 0:
        return 0, 0
    return int(nonzero[0]), int(nonzero[-1]) + 1


def _draw_lines(rng: np.random.Generator, amplitudes: np.ndarray, amplitude: str, band=None) -> np.ndarray:
    """Complex line values: a normal pair per line, scaled (rayleigh) or normalised (fixed).

    Every line draws its pair (so the draws do not depend on the spectrum);
    only lines inside ``band`` (the non-zero amplitudes) are then shaped.
    """
    spectrum = np.empty(amplitudes.size, dtype=np.complex128)
    rng.standard_normal(out=spectrum.view(np.float64))
    lo, hi = _band_of(amplitudes) if band is None else band
    spectrum[:lo] = 0.0
    spectrum[hi:] = 0.0
    part = spectrum[lo:hi]
    weights = amplitudes[lo:hi]
    if amplitude == "rayleigh":
        part *= weights * math.sqrt(0.5)
        return spectrum
    magnitude = np.abs(part)
    zero = magnitude == 0.0
    if np.any(zero):  # probability zero; a phase of 0 keeps the amplitude exact
        part[zero] = 1.0
        magnitude[zero] = 1.0
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
    return scipy.fft.irfft(lines, n=frame_length, overwrite_x=True)


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

    References
    ----------
    Princen & Bradley (1986), the sine window for 50 % overlap (power complementary).
    """
    n = np.arange(frame_length, dtype=float)
    return np.sin(np.pi * (n + 0.5) / frame_length)


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

    References
    ----------
    Raised-cosine (Hann) taper, Blackman & Tukey, *The Measurement of Power
    Spectra*, Dover 1958.
    """
    n = np.arange(int(length_samples), dtype=float)
    return 0.5 * (1.0 - np.cos(np.pi * n / max(int(length_samples), 1)))


# ----------------------------------------------------------- frame length
def profile_resolution_hz(profile: AsdProfile) -> float:
    """Frequency resolution (Hz) a profile needs: min(lowest frequency, narrowest segment) / 8.

    Eight lines per feature keep the lowest frequency and the narrowest notch
    or peak resolved after the overlap-add window smooths the spectrum by about
    1.5 lines (common practice, no source).

    Parameters
    ----------
    profile : AsdProfile

    Returns
    -------
    float
        Resolution in Hz.

    References
    ----------
    Bendat & Piersol (2010): resolution bandwidth must be narrow against the
    spectral features to be resolved.
    """
    widths = np.diff(profile.frequencies_hz)
    return float(min(profile.frequency_min_hz, float(np.min(widths)))) / LINES_PER_FEATURE


def choose_frame_length(rate_hz: float, resolution_hz: float) -> int:
    """Overlap-add frame length: the smallest power of two N >= 8192 with ``rate_hz / N <= resolution_hz``.

    Parameters
    ----------
    rate_hz : float
        Sample rate in Hz.
    resolution_hz : float
        Largest acceptable line spacing in Hz.

    Returns
    -------
    int
        N in samples.

    References
    ----------
    DFT line spacing ``df = fs / N`` (Bendat & Piersol 2010).
    """
    needed = max(MIN_FRAME_LENGTH, math.ceil(float(rate_hz) / float(resolution_hz) - 1e-9))
    return 1 << (needed - 1).bit_length()


def periodic_memory_bytes(total_samples: int, quantity_count: int = 1) -> int:
    """Estimated working memory (bytes) of one periodic record of ``total_samples`` samples.

    Parameters
    ----------
    total_samples : int
        Record length in samples.
    quantity_count : int
        Number of columns (acceleration, velocity, displacement).

    Returns
    -------
    int
        Bytes (an estimate measured with peak RSS; see :data:`PERIODIC_BYTES_PER_SAMPLE`).

    References
    ----------
    Measured for this implementation (no published source).
    """
    per_sample = PERIODIC_BYTES_PER_SAMPLE + PERIODIC_BYTES_PER_EXTRA_QUANTITY * (int(quantity_count) - 1)
    return int(total_samples) * per_sample


# ------------------------------------------------------ spill-over high-pass
@dataclass(frozen=True)
class SpillHighpass:
    """Zero-phase high-pass that removes spill-over below the band.

    Two things put power below the band and down to 0 Hz, where integrating
    twice turns a tiny share of the variance into large displacements: the
    sine window of overlap-add frames (leakage of the lowest band lines) and
    a non-Gaussian drive's memoryless transform (its self-convolutions).  A
    periodic Gaussian record has neither.

    Attributes
    ----------
    pass_edge_hz : float
        Lowest frequency passed unchanged (ripple below 0.01 dB), Hz.
    stop_edge_hz : float
        Highest frequency attenuated by at least the stop-band attenuation, Hz.
    rate_hz : float
        Sample rate, Hz.
    half_length : int or None
        FIR half-length D (taps ``-D .. D``) for overlap-add records; None for
        the exact frequency-domain filter of a periodic record.

    Notes
    -----
    FIR: ``x - h * x`` with ``h`` a Kaiser-windowed sinc low-pass (beta and
    transition width from Kaiser's formulas for 65 dB, so that at least 60 dB
    hold at the stop edge) normalised to
    unit sum, so the response is exactly 0 at 0 Hz and grows as f^2 near it.
    Periodic: the lines below the stop edge are set to 0, those above the pass
    edge kept, with a raised-cosine transition between.

    References
    ----------
    .. [1] J. F. Kaiser, "Nonrecursive digital filter design using the I0-sinh
           window function", Proc. IEEE ISCAS, 1974 (window and design formulas).
    .. [2] A. V. Oppenheim and R. W. Schafer, *Discrete-Time Signal
           Processing*, 3rd ed., Pearson 2010 (overlap-save block convolution).
    """

    pass_edge_hz: float
    stop_edge_hz: float
    rate_hz: float
    half_length: int | None = None

    @staticmethod
    def for_plan(plan: SynthesisPlan, band_low_hz: float) -> "SpillHighpass | None":
        """The high-pass for a plan (periodic: exact; overlap-add: FIR on blocks of B samples).

        Overlap-add: the filter works on blocks of ``B = hop x 2^j`` samples
        (the smallest such B whose FIR of half-length B/2 has its stop edge at
        or above half the lowest band frequency, by Kaiser's width formula;
        usually B is the hop itself).

        Parameters
        ----------
        plan : SynthesisPlan
        band_low_hz : float
            Lowest frequency of the target band, Hz.

        Returns
        -------
        SpillHighpass or None
            None when even blocks of :data:`MAX_HIGHPASS_BLOCK` samples are too
            short for a transition below the band.

        References
        ----------
        Kaiser (1974), transition width ``(A - 7.95) / (2.285 (L - 1) 2 pi)`` cycles per sample.
        """
        pass_edge = HIGHPASS_PASS_FRACTION * float(band_low_hz)
        lowest_stop = HIGHPASS_STOP_FRACTION * float(band_low_hz)
        if plan.mode == "periodic":
            return SpillHighpass(pass_edge, lowest_stop, plan.rate_hz, None)
        block = plan.hop
        while True:
            width = (_HIGHPASS_DESIGN_DB - 7.95) / (2.285 * 2.0 * math.pi * block) * plan.rate_hz
            if pass_edge - width >= lowest_stop:
                return SpillHighpass(pass_edge, pass_edge - width, plan.rate_hz, block // 2)
            if block >= MAX_HIGHPASS_BLOCK:
                return None
            block *= 2

    @property
    def block_samples(self) -> int | None:
        """Overlap-add output block B = 2 x half-length (samples); None for a periodic record."""
        return None if self.half_length is None else 2 * int(self.half_length)

    def lowpass_taps(self) -> np.ndarray:
        """FIR low-pass taps ``h[-D .. D]`` (sum exactly 1), dimensionless."""
        if self.half_length is None:
            raise InputError("a periodic record's high-pass has no taps; use record_response", "highpass")
        d = int(self.half_length)
        beta = 0.1102 * (_HIGHPASS_DESIGN_DB - 8.7)
        cutoff = 0.5 * (self.pass_edge_hz + self.stop_edge_hz) / self.rate_hz  # cycles per sample
        k = np.arange(-d, d + 1, dtype=np.float64)
        taps = 2.0 * cutoff * np.sinc(2.0 * cutoff * k) * np.kaiser(2 * d + 1, beta)
        return taps / np.sum(taps)

    def block_lowpass_spectrum(self, window_samples: int) -> np.ndarray:
        """``rfft`` of the low-pass taps placed circularly in a window of ``window_samples``."""
        d = int(self.half_length)
        taps = self.lowpass_taps()
        kernel = np.zeros(int(window_samples))
        kernel[: d + 1] = taps[d:]
        kernel[-d:] = taps[:d]
        return scipy.fft.rfft(kernel)

    def record_response(self, samples: int) -> np.ndarray:
        """Real (zero-phase) response on the ``rfft`` lines of a record or frame of ``samples`` samples.

        Parameters
        ----------
        samples : int
            Frame length N; the lines are ``k rate_hz / N``, ``k = 0 .. N//2``.

        Returns
        -------
        numpy.ndarray
            Response (dimensionless; the FIR's ripple makes it slightly
            negative in places in the stop band).

        References
        ----------
        DTFT of a finite impulse response sampled by the DFT (Oppenheim & Schafer 2010).
        """
        samples = int(samples)
        if self.half_length is None:
            return self.response(np.arange(samples // 2 + 1) * (self.rate_hz / samples))
        # DFT of the circularly placed taps: the exact DTFT at the lines when the taps fit the frame
        size, step = samples, 1
        while size < 2 * int(self.half_length) + 1:
            size, step = size * 2, step * 2
        if size != samples and samples % 2:
            return self.response(np.arange(samples // 2 + 1) * (self.rate_hz / samples))
        lowpass = self.block_lowpass_spectrum(size).real[::step]
        return 1.0 - lowpass[: samples // 2 + 1]

    def response(self, frequency_hz) -> np.ndarray:
        """Real (zero-phase) response at the given frequencies (Hz), dimensionless."""
        f = np.asarray(frequency_hz, dtype=np.float64)
        if self.half_length is None:
            position = np.clip((f - self.stop_edge_hz) / (self.pass_edge_hz - self.stop_edge_hz), 0.0, 1.0)
            return 0.5 - 0.5 * np.cos(np.pi * position)
        d = int(self.half_length)
        taps = self.lowpass_taps()
        k = np.arange(-d, d + 1, dtype=np.float64)
        lowpass = np.cos(2.0 * np.pi * np.outer(f.ravel(), k) / self.rate_hz) @ taps
        return (1.0 - lowpass).reshape(f.shape)

    def to_dict(self) -> dict:
        """Plain data for the sidecar."""
        return {
            "pass_edge_hz": self.pass_edge_hz,
            "stop_edge_hz": self.stop_edge_hz,
            "method": (
                "periodic record: lines below the stop edge set to 0, raised-cosine transition to the pass edge"
                if self.half_length is None
                else f"zero-phase FIR x - h*x, h a Kaiser-windowed sinc low-pass of {2 * self.half_length + 1} taps "
                f"(unit sum: exactly 0 at 0 Hz), at least {HIGHPASS_ATTENUATION_DB:g} dB below the stop edge"
            ),
            "applied": "after overlap-add (and after the transform of a non-Gaussian drive), before the final "
            "scaling (a clipped drive is clipped again after it)",
        }


# ---------------------------------------------------------------------- plan
@dataclass(frozen=True, eq=False)
class SynthesisPlan:
    """Everything that, with a seed, determines a record sample by sample.

    Parameters
    ----------
    rate_hz : float
        Sample rate in Hz.
    total_samples : int
        Record length in samples.
    frame_length : int
        N: the record length in ``periodic`` mode; the (even) frame length in
        ``overlap-add`` mode.
    line_spectrum : numpy.ndarray, shape (N//2 + 1,)
        One-sided spectral density on the frame grid ``f_k = k rate_hz / N``
        (any unit U^2/Hz; only its shape matters when ``output_scale`` is given
        separately).  DC and Nyquist are set to 0.  For non-Gaussian drives
        this is the compensated Gaussian spectrum.
    mode : {"periodic", "overlap-add"}
    amplitude : {"fixed", "rayleigh"}
    transform : callable or None
        Memoryless ``y = g(u)`` applied to the unit-variance Gaussian stream
        after overlap-add (float64 array in, same-shape float64 array out).
    output_scale : float or None
        Physical units (g) per unit of ``g(u)``; None: ``sqrt(sum S df)`` (the
        Gaussian record then has the line spectrum in physical units).
    quantities : tuple of str
        Columns, from ``acceleration`` (g), ``velocity`` (m/s), ``displacement`` (m);
        velocity and displacement need ``periodic`` mode and no transform.
    ramp_in_samples, ramp_out_samples : int
        Raised-cosine fade-in/out lengths in samples.
    warnings : tuple of str
        Advisory messages found while planning (e.g. a thin anti-alias margin).
    spill_highpass : SpillHighpass or None
        Overlap-add only: the zero-phase FIR high-pass applied to the stream
        (after the transform hook, before the output scale) in blocks of
        ``B = spill_highpass.block_samples``; output sample n is then stream
        sample ``n + B/2``.  It removes the sine window's leakage below the
        band (see :class:`SpillHighpass`).

    References
    ----------
    See the module docstring.
    """

    rate_hz: float
    total_samples: int
    frame_length: int
    line_spectrum: np.ndarray
    mode: str = "overlap-add"
    amplitude: str = "fixed"
    transform: Callable[[np.ndarray], np.ndarray] | None = None
    output_scale: float | None = None
    quantities: tuple = ("acceleration",)
    ramp_in_samples: int = 0
    ramp_out_samples: int = 0
    warnings: tuple = field(default=())
    spill_highpass: SpillHighpass | None = None

    def __post_init__(self):
        object.__setattr__(self, "mode", _check_choice(self.mode, MODES, "mode"))
        object.__setattr__(self, "amplitude", _check_choice(self.amplitude, AMPLITUDE_MODES, "amplitude"))
        rate = float(self.rate_hz)
        if not (math.isfinite(rate) and rate > 0):
            raise InputError(f"rate {self.rate_hz!r} Hz must be a finite number > 0", "rate")
        total, frame = int(self.total_samples), int(self.frame_length)
        if total < 2:
            raise InputError(f"a record needs at least 2 samples, got {total}", "duration")
        if self.mode == "periodic" and frame != total:
            raise InputError(f"a periodic plan's frame length ({frame}) must equal its record length ({total})", "frame_length")
        if self.mode == "overlap-add" and (frame < 2 or frame % 2):
            raise InputError(f"an overlap-add frame length must be even and >= 2, got {frame}", "frame_length")
        spectrum = _clean_line_spectrum(self.line_spectrum, frame)
        if not np.sum(spectrum) > 0:
            raise InputError("no frequency line with a non-zero spectrum falls on the frame grid; use a finer resolution", "line_spectrum")
        spectrum.setflags(write=False)
        quantities = tuple(self.quantities)
        if not quantities or len(set(quantities)) != len(quantities):
            raise InputError(f"quantities {quantities!r} must be a non-empty list without repeats", "quantities")
        for quantity in quantities:
            _check_choice(quantity, tuple(QUANTITY_UNITS), "quantities")
        if quantities != ("acceleration",) and quantities[0] != "acceleration":
            raise InputError("the first quantity must be acceleration", "quantities")
        if len(quantities) > 1 and (self.mode != "periodic" or self.transform is not None):
            raise InputError(
                "velocity and displacement columns need a periodic Gaussian record (no transform) so that they integrate exactly",
                "quantities",
            )
        ramp_in, ramp_out = int(self.ramp_in_samples), int(self.ramp_out_samples)
        if ramp_in < 0 or ramp_out < 0 or ramp_in + ramp_out > total:
            raise InputError(
                f"ramps of {ramp_in} + {ramp_out} samples do not fit a record of {total} samples", "ramp"
            )
        scale = self.output_scale
        if scale is None:
            scale = math.sqrt(float(np.sum(spectrum)) * rate / frame)
        scale = float(scale)
        if not (math.isfinite(scale) and scale > 0):
            raise InputError(f"output scale {self.output_scale!r} must be a finite number > 0", "output_scale")
        object.__setattr__(self, "rate_hz", rate)
        object.__setattr__(self, "total_samples", total)
        object.__setattr__(self, "frame_length", frame)
        object.__setattr__(self, "line_spectrum", spectrum)
        object.__setattr__(self, "output_scale", scale)
        object.__setattr__(self, "quantities", quantities)
        object.__setattr__(self, "ramp_in_samples", ramp_in)
        object.__setattr__(self, "ramp_out_samples", ramp_out)
        object.__setattr__(self, "warnings", tuple(self.warnings))
        highpass = self.spill_highpass
        if highpass is not None:
            if self.mode != "overlap-add" or highpass.half_length is None:
                raise InputError("a spill-over FIR high-pass applies to overlap-add plans only", "spill_highpass")
            if highpass.block_samples % self.hop or highpass.rate_hz != rate:
                raise InputError(
                    f"the high-pass block ({highpass.block_samples} samples at {highpass.rate_hz:g} Hz) must be a "
                    f"multiple of the hop ({self.hop}) at the plan's rate ({rate:g} Hz)",
                    "spill_highpass",
                )

    # ---------------------------------------------------------- geometry
    @property
    def resolution_hz(self) -> float:
        """Line spacing of the frame grid, ``rate_hz / frame_length`` (Hz)."""
        return self.rate_hz / self.frame_length

    @property
    def frequencies_hz(self) -> np.ndarray:
        """Frame grid ``k rate_hz / N`` for ``k = 0 .. N//2`` (Hz)."""
        return np.arange(self.frame_length // 2 + 1) * self.resolution_hz

    @property
    def duration_s(self) -> float:
        """Record duration ``total_samples / rate_hz`` (s)."""
        return self.total_samples / self.rate_hz

    @property
    def hop(self) -> int:
        """Overlap-add hop, N/2 samples."""
        return self.frame_length // 2

    @property
    def line_variance(self) -> float:
        """``sum S(f_k) df`` over the frame grid, in U^2 (the Gaussian record's variance)."""
        return float(np.sum(self.line_spectrum)) * self.resolution_hz

    @property
    def frame_count(self) -> int:
        """Number of frames: 1 (periodic) or ``ceil(total / hop) + 1`` (overlap-add)."""
        if self.mode == "periodic":
            return 1
        return -(-self.total_samples // self.hop) + 1

    @property
    def steady_range(self) -> tuple[int, int]:
        """Sample range ``[start, stop)`` between the ramps."""
        return self.ramp_in_samples, self.total_samples - self.ramp_out_samples

    @cached_property
    def _stream_amplitudes(self) -> np.ndarray:
        # Magnitudes for irfft(norm="forward"): sqrt(S_k / (2 sum S)) gives a unit-variance
        # stream; without a transform the physical scale is folded in as well.
        factor = 1.0 / (2.0 * float(np.sum(self.line_spectrum)))
        if self.transform is None:
            factor *= self.output_scale**2
        amplitudes = self.line_spectrum * factor
        np.sqrt(amplitudes, out=amplitudes)
        return amplitudes

    @cached_property
    def _band(self) -> tuple[int, int]:
        return _band_of(self.line_spectrum)

    @cached_property
    def _window(self) -> np.ndarray:
        return sine_window(self.frame_length)


def _check_choice(value, allowed: Sequence[str], what: str) -> str:
    text = str(value).strip().lower()
    if text not in allowed:
        raise InputError(f"{what} {value!r} is not one of {', '.join(allowed)}", what)
    return text


def parse_quantities(quantities) -> tuple[tuple[str, ...], bool]:
    """Quantity names from a string (``"accel,velocity"``) or a sequence.

    Parameters
    ----------
    quantities : str or sequence of str
        Names or short forms (accel/acc, vel, disp).

    Returns
    -------
    (tuple of str, bool)
        The full names, and whether a single name was given as a string
        (the library then returns 1-D arrays).

    References
    ----------
    None (argument parsing).
    """
    aliases = {"accel": "acceleration", "acc": "acceleration", "vel": "velocity", "disp": "displacement"}
    single = isinstance(quantities, str) and "," not in quantities
    items = [quantities] if single else (quantities.split(",") if isinstance(quantities, str) else list(quantities))
    names = []
    for item in items:
        name = str(item).strip().lower()
        name = aliases.get(name, name)
        if name not in QUANTITY_UNITS:
            raise InputError(
                f"quantity {item!r} is not one of acceleration, velocity, displacement", "quantities"
            )
        names.append(name)
    return tuple(names), single


def plan_synthesis(
    profile: AsdProfile,
    duration_s: float,
    rate_hz: float,
    *,
    amplitude: str = "fixed",
    resolution_hz: float | None = None,
    loop: bool = False,
    ramp_in_s: float = 0.0,
    ramp_out_s: float = 0.0,
    quantities=("acceleration",),
    memory_budget_bytes: int = DEFAULT_MEMORY_BUDGET_BYTES,
    spectrum: Callable[[np.ndarray], np.ndarray] | None = None,
    transform: Callable[[np.ndarray], np.ndarray] | None = None,
    output_scale: float | None = None,
    spill_highpass: bool = True,
) -> SynthesisPlan:
    """Check the request against the profile and plan the record.

    Parameters
    ----------
    profile : AsdProfile
        The target (g^2/Hz); sets the band, the resolution and, unless
        ``spectrum`` is given, the line spectrum.
    duration_s : float
        Record duration in s (rounded to whole samples).
    rate_hz : float
        Sample rate in Hz; must exceed twice the profile's top frequency
        (a rate below 2.56 times it adds a warning).
    amplitude : {"fixed", "rayleigh"}
        See :func:`synthesize_frame`.
    resolution_hz : float, optional
        Largest line spacing in Hz (default :func:`profile_resolution_hz`).
        Sets the overlap-add frame length and the shortest record (1/resolution).
    loop : bool
        Make one periodic record that repeats seamlessly (no ramps).
    ramp_in_s, ramp_out_s : float
        Raised-cosine fade-in and fade-out in s (0: none).
    quantities : sequence of str or str
        Columns: acceleration (g), velocity (m/s), displacement (m);
        acceleration first.
    memory_budget_bytes : int
        Working memory a periodic record may use; longer records use overlap-add.
    spectrum : callable, optional
        One-sided density (U^2/Hz) as a function of frequency (Hz) to sample on
        the frame grid instead of ``profile.evaluate`` (e.g. a compensated
        Gaussian spectrum for a non-Gaussian drive).
    transform : callable, optional
        Memoryless transform of the unit-variance Gaussian stream (see
        :class:`SynthesisPlan`).
    output_scale : float, optional
        Physical g per unit of the transformed stream (default ``sqrt(sum S df)``).
    spill_highpass : bool
        Overlap-add plans: high-pass the stream below the band
        (:class:`SpillHighpass`, default True) so that the sine window's
        leakage does not reach 0 Hz (where double integration would turn it
        into displacement far beyond the profile's).  False gives the plain
        windowed sum of frames.

    Returns
    -------
    SynthesisPlan

    Raises
    ------
    InputError
        Rate at or below twice the top frequency, a record shorter than one
        frame at the needed resolution (the message names the minimum), ramps
        longer than the record, a loop or velocity/displacement record beyond
        the memory budget (the message names the longest that fits).

    References
    ----------
    Nyquist-Shannon sampling theorem (rate > 2 f_max); DFT resolution
    ``df = fs / N`` (Bendat & Piersol 2010).
    """
    names, _ = parse_quantities(quantities)
    rate = _positive(rate_hz, "rate", "Hz")
    duration = _positive(duration_s, "duration", "s")
    top = profile.frequency_max_hz
    warnings: list[str] = []
    if rate <= 2.0 * top:
        raise InputError(
            f"rate {rate:g} Hz must exceed twice the profile's top frequency (2 x {top:g} = {2 * top:g} Hz); "
            f"use at least {RATE_MARGIN_FACTOR:g} x {top:g} = {RATE_MARGIN_FACTOR * top:g} Hz",
            "rate",
        )
    if rate < RATE_MARGIN_FACTOR * top:
        warnings.append(
            f"rate {rate:g} Hz is below {RATE_MARGIN_FACTOR:g} x the top frequency ({RATE_MARGIN_FACTOR * top:g} Hz); "
            "anti-alias filters usually need that margin (common practice)"
        )
    needed = profile_resolution_hz(profile)
    if resolution_hz is None:
        resolution = needed
    else:
        resolution = _positive(resolution_hz, "resolution", "Hz")
        if resolution > needed * (1 + 1e-9):
            warnings.append(
                f"resolution {resolution:g} Hz is coarser than the {needed:.4g} Hz the profile needs "
                "(lowest frequency and narrowest segment / 8); low-frequency and narrow features may be smeared"
            )
    samples_wanted = duration * rate
    if not (math.isfinite(samples_wanted) and samples_wanted <= MAX_RECORD_SAMPLES):
        raise InputError(
            f"duration {duration:g} s at {rate:g} Hz is {samples_wanted:.3g} samples, beyond the "
            f"{MAX_RECORD_SAMPLES:.0e} samples one record may hold; split the test into shorter records",
            "duration",
        )
    frames_wanted = rate / resolution
    if not (math.isfinite(frames_wanted) and frames_wanted <= MAX_RECORD_SAMPLES):
        raise InputError(
            f"resolution {resolution:g} Hz at {rate:g} Hz needs frames of {frames_wanted:.3g} samples, beyond the "
            f"{MAX_RECORD_SAMPLES:.0e} samples one record may hold; ask for a coarser resolution",
            "resolution",
        )
    total = int(round(samples_wanted))
    minimum = math.ceil(frames_wanted - 1e-9)
    if total < minimum:
        raise InputError(
            f"duration {duration:g} s is too short for one frame at {resolution:.4g} Hz resolution "
            f"(lowest frequency {profile.frequency_min_hz:g} Hz); give at least {minimum / rate:.6g} s",
            "duration",
        )
    ramp_in = _ramp_samples(ramp_in_s, rate, "ramp")
    ramp_out = _ramp_samples(ramp_out_s, rate, "ramp")
    if loop and (ramp_in or ramp_out):
        raise InputError("a looped record repeats seamlessly and cannot have ramps; drop the ramp or the loop", "ramp")
    if len(names) > 1 and (ramp_in or ramp_out):
        raise InputError(
            "ramps apply to acceleration drives; with velocity/displacement columns a ramped record would no longer "
            "integrate exactly; drop the ramp",
            "ramp",
        )
    if ramp_in + ramp_out > total:
        raise InputError(
            f"ramps of {ramp_in / rate:g} s + {ramp_out / rate:g} s are longer than the {total / rate:g} s record", "ramp"
        )
    budget = int(memory_budget_bytes)
    if budget <= 0:
        raise InputError(f"memory budget {memory_budget_bytes!r} bytes must be > 0", "memory budget")
    needs_periodic = loop or len(names) > 1
    fits = periodic_memory_bytes(total, len(names)) <= budget
    if needs_periodic and not fits:
        longest = budget // periodic_memory_bytes(1, len(names))
        why = "a looped record" if loop else "velocity/displacement columns"
        raise InputError(
            f"{why} need the whole record in memory: {total} samples need about "
            f"{periodic_memory_bytes(total, len(names)) / 2**20:.0f} MB, above the "
            f"{budget / 2**20:.0f} MB budget; give at most {longest / rate:.6g} s or a larger memory budget",
            "duration",
        )
    if fits or needs_periodic:
        mode, frame = "periodic", total
    else:
        mode, frame = "overlap-add", choose_frame_length(rate, resolution)
        if frame > total:  # a record shorter than one frame (tiny budgets): one periodic record
            mode, frame = "periodic", total
        if frame > MAX_FRAME_LENGTH:
            raise InputError(
                f"a frame of {frame} samples ({rate:g} Hz / {resolution:.4g} Hz) is longer than "
                f"{MAX_FRAME_LENGTH} samples; use a coarser resolution (at least {rate / MAX_FRAME_LENGTH:.4g} Hz)",
                "resolution",
            )
    df = rate / frame
    lines = frame // 2 + 1
    if spectrum is None:
        # Only lines inside the band are non-zero: evaluate those (plus a line of margin).
        lo = max(int(math.floor(profile.frequency_min_hz / df)) - 1, 0)
        hi = min(int(math.ceil(top / df)) + 2, lines)
        values = np.zeros(lines)
        values[lo:hi] = profile.line_spectrum(df, np.arange(lo, hi))
    else:
        values = np.asarray(spectrum(np.arange(lines) * df), dtype=float)
        if values.shape != (lines,):
            raise InputError(f"spectrum returned shape {values.shape}; expected {(lines,)}", "spectrum")
    first_inside = math.ceil(profile.frequency_min_hz / df - 1e-9)
    if first_inside * df > top or first_inside >= lines - (frame % 2 == 0):
        raise InputError(
            f"no frequency line of the {rate / frame:.4g} Hz grid falls inside the band "
            f"{profile.frequency_min_hz:g}-{top:g} Hz; use a finer resolution",
            "resolution",
        )
    plan = SynthesisPlan(
        rate_hz=rate,
        total_samples=total,
        frame_length=frame,
        line_spectrum=values,
        mode=mode,
        amplitude=amplitude,
        transform=transform,
        output_scale=output_scale,
        quantities=names,
        ramp_in_samples=ramp_in,
        ramp_out_samples=ramp_out,
        warnings=tuple(warnings),
    )
    if spill_highpass and mode == "overlap-add":
        highpass = SpillHighpass.for_plan(plan, profile.frequency_min_hz)
        if highpass is None:
            warnings.append(
                f"the frames are too short to filter the overlap-add window's leakage below "
                f"{profile.frequency_min_hz:g} Hz: the record asks for more displacement than the profile; "
                "use the default resolution"
            )
        plan = dataclasses.replace(plan, spill_highpass=highpass, warnings=tuple(warnings))
    return plan


def _positive(value, what: str, unit: str) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{what} {value!r} must be a number > 0 ({unit})", what) from None
    if not (math.isfinite(number) and number > 0):
        raise InputError(f"{what} {value!r} {unit} must be a finite number > 0", what)
    return number


def _ramp_samples(ramp_s, rate: float, what: str) -> int:
    try:
        seconds = float(ramp_s or 0.0)
    except (TypeError, ValueError):
        raise InputError(f"{what} {ramp_s!r} must be a number of seconds >= 0", what) from None
    if not (math.isfinite(seconds) and seconds >= 0):
        raise InputError(f"{what} {ramp_s!r} s must be a finite number >= 0", what)
    if not seconds * rate <= MAX_RECORD_SAMPLES:
        raise InputError(f"{what} {seconds:g} s is longer than any record can be", what)
    return int(round(seconds * rate))


# ------------------------------------------------------------- synthesizer
class RecordAccess:
    """Public access to a planned record's samples, shared by the Gaussian and non-Gaussian synthesizers.

    Subclasses provide ``plan`` (a :class:`SynthesisPlan`), ``_record``,
    ``_periodic_record()`` and ``_iter_columns(chunk, start, stop)``.
    """

    def _ramp(self, columns: np.ndarray, start: int) -> None:
        """Raised-cosine fade-in/out (in place) of a stretch of columns that starts at sample ``start``."""
        plan = self.plan
        stop = start + columns.shape[0]
        ramp_in, ramp_out, total = plan.ramp_in_samples, plan.ramp_out_samples, plan.total_samples
        if ramp_in and start < ramp_in:
            hi = min(stop, ramp_in)
            columns[: hi - start] *= raised_cosine_ramp(ramp_in)[start:hi, None]
        if ramp_out and stop > total - ramp_out:
            lo = max(start, total - ramp_out)
            factors = raised_cosine_ramp(ramp_out)[::-1]
            columns[lo - start :] *= factors[lo - (total - ramp_out) : stop - (total - ramp_out), None]

    def _check_range(self, start, stop) -> tuple[int, int]:
        total = self.plan.total_samples
        start = int(start)
        stop = total if stop is None else int(stop)
        if not 0 <= start < stop <= total:
            raise InputError(f"sample range [{start}, {stop}) must lie inside [0, {total})", "range")
        return start, stop

    def iter_chunks(self, chunk_samples: int = 65536, start: int = 0, stop: int | None = None) -> Iterator[np.ndarray]:
        """Samples ``[start, stop)`` in consecutive chunks of ``chunk_samples`` (the last may be shorter).

        Yields arrays of shape (m, q): one column per quantity (acceleration
        in g, velocity in m/s, displacement in m).  The values do not depend on
        ``chunk_samples`` or ``start``.
        """
        chunk = int(chunk_samples)
        if chunk < 1:
            raise InputError(f"chunk size {chunk_samples!r} must be >= 1 sample", "chunk_samples")
        start, stop = self._check_range(start, stop)
        return self._iter_columns(chunk, start, stop)

    def samples(self, start: int = 0, stop: int | None = None) -> np.ndarray:
        """Samples ``[start, stop)`` as one array of shape (m, q)."""
        start, stop = self._check_range(start, stop)
        if self.plan.mode == "periodic":
            return self._periodic_record()[start:stop].copy()
        return next(self._iter_columns(stop - start, start, stop))

    def take_record(self) -> np.ndarray:
        """The whole record, shape (n, q); a periodic record is handed over without a copy and forgotten."""
        if self.plan.mode == "periodic":
            record = self._periodic_record()
            self._record = None
            return record
        return self.samples()

    def peak_abs(self, chunk_samples: int = 1 << 18) -> float:
        """Largest |acceleration| in the record (g): a full pass in overlap-add mode."""
        if self.plan.mode == "periodic":
            return float(np.max(np.abs(self._periodic_record()[:, 0])))
        return max(float(np.max(np.abs(chunk[:, 0]))) for chunk in self.iter_chunks(chunk_samples))


class Synthesizer(RecordAccess):
    """Makes the samples of one planned record from one seed, in any order of chunks.

    Parameters
    ----------
    plan : SynthesisPlan
    seed : int, numpy.random.SeedSequence or numpy.random.Generator
        See :func:`root_seed_sequence`.
    workers : int
        Threads that make overlap-add frames (default 1: all in the calling
        thread).  Frames are independent, so with more threads they are made
        in parallel and ahead of the consumer; the samples are the same bit
        for bit whatever the number.

    Notes
    -----
    A periodic record is computed once (on first use) and kept; an
    overlap-add record is computed frame by frame on every pass, a few frames
    alive at a time (at most :data:`FRAME_PREFETCH_BYTES` of them in flight
    on worker threads).

    References
    ----------
    See the module docstring.
    """

    def __init__(self, plan: SynthesisPlan, seed, workers: int = 1):
        self.plan = plan
        self.root = root_seed_sequence(seed)
        self.workers = check_workers(workers)
        self._record: np.ndarray | None = None
        self._block_lowpass: np.ndarray | None = None

    @property
    def seed(self) -> int:
        """The integer seed that remakes this record (root entropy)."""
        return seed_entropy(self.root)

    # ------------------------------------------------------------ frames
    def frame_lines(self, index: int) -> np.ndarray:
        """Complex lines of overlap-add frame ``index`` (or of the periodic record, index 0).

        Scaled for ``irfft(norm="forward")``; in g when the plan has no
        transform, else for a unit-variance stream.
        """
        plan = self.plan
        if plan.mode == "periodic":
            rng = _child(self.root, _PERIODIC_STREAM)
        else:
            rng = _child(self.root, _FRAME_STREAM, int(index))
        return _draw_lines(rng, plan._stream_amplitudes, plan.amplitude, plan._band)

    def frame(self, index: int) -> np.ndarray:
        """Unwindowed periodic frame ``index`` (samples), before transform, scale and ramps."""
        return scipy.fft.irfft(self.frame_lines(index), n=self.plan.frame_length, norm="forward", overwrite_x=True)

    def _windowed_frame(self, index: int) -> np.ndarray:
        frame = self.frame(index)
        frame *= self.plan._window
        return frame

    # ------------------------------------------------------------ record
    def _periodic_record(self) -> np.ndarray:
        if self._record is None:
            plan = self.plan
            lines = self.frame_lines(0)
            total = plan.total_samples
            if len(plan.quantities) == 1:
                columns = scipy.fft.irfft(lines, n=total, norm="forward", overwrite_x=True).reshape(total, 1)
            else:
                columns = np.empty((total, len(plan.quantities)))
                omega = 2.0 * np.pi * plan.frequencies_hz[1:]
                for position, quantity in enumerate(plan.quantities[1:], start=1):
                    # Integration in the frequency domain: divide by (i 2 pi f), times g0 for m/s and m.
                    integrated = np.zeros_like(lines)
                    if quantity == "velocity":
                        integrated[1:] = lines[1:] * STANDARD_GRAVITY_M_S2 / (1j * omega)
                    else:
                        integrated[1:] = lines[1:] * (-STANDARD_GRAVITY_M_S2 / omega**2)
                    columns[:, position] = scipy.fft.irfft(integrated, n=total, norm="forward", overwrite_x=True)
                    del integrated
                columns[:, 0] = scipy.fft.irfft(lines, n=total, norm="forward", overwrite_x=True)
            del lines
            self._finish(columns, 0)
            self._record = columns
        return self._record

    def _iter_blocks(self, first_block: int, last_block: int) -> Iterator[np.ndarray]:
        plan = self.plan
        hop = plan.hop
        plan._window, plan._stream_amplitudes, plan._band  # noqa: B018 - cached before the threads read them
        threads, in_flight = frame_workers(self.workers, plan.frame_length)
        frames = ordered_map(self._windowed_frame, range(first_block, last_block + 2), threads, in_flight)
        try:
            previous = next(frames)
            for following in frames:
                out = previous[hop:]
                out += following[:hop]
                yield out
                previous = following
        finally:
            frames.close()

    def _raw_pieces(self, size: int, first: int, last: int) -> Iterator[np.ndarray]:
        """Pieces ``first .. last`` of ``size`` samples (a power of two) of the windowed sum of frames.

        Piece j holds samples ``[j size, (j+1) size)``; pieces before sample 0 are zeros.
        """
        for _ in range(first, min(last, -1) + 1):
            yield np.zeros(size)
        first = max(first, 0)
        if last < first:
            return
        hop = self.plan.hop
        if size <= hop:
            per = hop // size
            blocks = self._iter_blocks(first * size // hop, last * size // hop)
            try:
                skip = first % per
                for block in blocks:
                    for k in range(skip, per):
                        if first > last:
                            return
                        yield block[k * size : (k + 1) * size]
                        first += 1
                    skip = 0
            finally:
                blocks.close()
            return
        per = size // hop
        blocks = self._iter_blocks(first * per, (last + 1) * per - 1)
        try:
            for _ in range(first, last + 1):
                yield np.concatenate([next(blocks) for _ in range(per)])
        finally:
            blocks.close()

    def _transformed(self, values: np.ndarray) -> np.ndarray:
        transformed = np.asarray(self.plan.transform(values), dtype=float)
        if transformed.shape != values.shape:
            raise InputError(f"transform returned shape {transformed.shape}; expected {values.shape}", "transform")
        return transformed

    @property
    def filter_block_samples(self) -> int | None:
        """Samples per high-passed output block (the partition length), or None without a high-pass."""
        highpass = self.plan.spill_highpass
        if highpass is None:
            return None
        block = highpass.block_samples
        # at most B/2, so that the direct term (stream sample n + B/2) starts on a partition
        return min(max(block // HIGHPASS_PARTITIONS, min(MIN_HIGHPASS_PARTITION, self.plan.hop)), block // 2)

    def _partitions(self) -> tuple:
        """Partition length P, the kernel's partitions' spectra (rfft of 2P each) and the lag B/P."""
        if self._block_lowpass is None:
            highpass = self.plan.spill_highpass
            size = self.filter_block_samples
            taps = highpass.lowpass_taps()  # h[-D .. D], D = B/2: the causal kernel k[m] = h[m - D]
            count = -(-taps.size // size)
            kernel = np.zeros(count * size)
            kernel[: taps.size] = taps
            padded = np.zeros((count, 2 * size))
            padded[:, :size] = kernel.reshape(count, size)
            spectra = scipy.fft.rfft(padded, axis=1)
            self._block_lowpass = (size, spectra, highpass.block_samples // size)
        return self._block_lowpass

    def _filtered_blocks(self, first_block: int, last_block: int) -> Iterator[np.ndarray]:
        """High-passed output blocks ``first_block .. last_block`` of P samples (transformed and scaled, unramped).

        ``x - h * x`` with ``h`` the spill high-pass's zero-phase low-pass of
        half-length D = B/2, by uniformly partitioned overlap-save (partitions
        of P samples, FFTs of 2P): output sample n is stream sample n + D, so
        the filter only ever reads stream samples at or after 0.  Each output
        block is the same function of the stream whatever range is asked for.
        """
        plan = self.plan
        size, spectra, lag = self._partitions()
        count = spectra.shape[0]
        direct = lag // 2  # the piece holding stream samples n + D of output block o is piece o + lag/2
        first_piece = first_block + lag - count
        pieces = self._raw_pieces(size, first_piece, last_block + lag)

        def windows():
            previous = None
            for piece in pieces:
                current = piece if plan.transform is None else self._transformed(piece)
                if previous is not None:
                    yield previous, current
                previous = current

        def spectrum(pair):
            return scipy.fft.rfft(np.concatenate(pair)), pair[1]

        # the filter's FFTs are small and many: handing each to a thread costs more than it saves, so the
        # filter runs in the consuming thread while the worker threads make the frames ahead of it
        threads, in_flight = 1, 1

        def outputs():
            recent: collections.deque = collections.deque(maxlen=count)
            kept: collections.deque = collections.deque(maxlen=lag - direct + 1)
            for window_spectrum, piece in ordered_map(spectrum, windows(), threads, in_flight):
                recent.append(window_spectrum)
                kept.append(piece)
                if len(recent) == count:
                    yield tuple(recent), kept[0]

        def block(item):
            recent, piece = item
            accumulated = recent[-1] * spectra[0]
            product = np.empty_like(accumulated)
            for q in range(1, count):
                accumulated += np.multiply(recent[-1 - q], spectra[q], out=product)
            lowpass = scipy.fft.irfft(accumulated, n=2 * size, overwrite_x=True)
            out = piece - lowpass[size:]
            if plan.transform is not None:
                out *= plan.output_scale
            return out

        blocks = ordered_map(block, outputs(), threads, in_flight)
        try:
            yield from blocks
        finally:
            blocks.close()
            pieces.close()

    def _finish(self, columns: np.ndarray, start: int, transformed: bool = False) -> None:
        """Transform, scale (unless ``transformed``) and ramp (in place) a stretch of columns that starts at ``start``."""
        plan = self.plan
        if plan.transform is not None and not transformed:
            columns[:, 0] = self._transformed(columns[:, 0]) * plan.output_scale
        self._ramp(columns, start)

    def _iter_columns(self, chunk_samples: int, start: int, stop: int) -> Iterator[np.ndarray]:
        plan = self.plan
        if plan.mode == "periodic":
            record = self._periodic_record()
            for lo in range(start, stop, chunk_samples):
                yield record[lo : min(stop, lo + chunk_samples)].copy()
            return
        filtered = plan.spill_highpass is not None
        hop = self.filter_block_samples if filtered else plan.hop
        first_block, last_block = start // hop, (stop - 1) // hop
        position = first_block * hop  # absolute index of the next block's first sample
        buffer = np.empty((min(chunk_samples, stop - start), 1))
        filled, chunk_start = 0, start
        blocks = self._filtered_blocks if filtered else self._iter_blocks
        for block in blocks(first_block, last_block):
            lo = max(start - position, 0)
            hi = min(stop - position, hop)
            while lo < hi:
                take = min(hi - lo, buffer.shape[0] - filled)
                buffer[filled : filled + take, 0] = block[lo : lo + take]
                filled += take
                lo += take
                if filled == buffer.shape[0]:
                    self._finish(buffer, chunk_start, transformed=filtered)
                    yield buffer
                    chunk_start += filled
                    filled = 0
                    buffer = np.empty((min(chunk_samples, stop - chunk_start), 1)) if chunk_start < stop else buffer
            position += hop


# ----------------------------------------------------------------- library
def _synthesizer(profile, duration_s, rate_hz, seed, options) -> tuple[Synthesizer, bool]:
    names, single = parse_quantities(options.pop("quantities"))
    ramp = options.pop("ramp_s")
    shape = (options.pop("kurtosis", None), options.pop("skewness", None), options.pop("clip", None))
    if ramp is not None:
        options.setdefault("ramp_in_s", ramp)
        options.setdefault("ramp_out_s", ramp)
    plan = plan_synthesis(profile, duration_s, rate_hz, quantities=names, **options)
    if all(value is None for value in shape):
        return Synthesizer(plan, seed), single
    # Non-Gaussian: the same transform, pre-compensation and spill high-pass as `vibsynth generate`.
    from vibsynth.generate import nongaussian

    transform = nongaussian.plan_transform(*shape)
    if transform is None:
        return Synthesizer(plan, seed), single
    if len(names) > 1:
        raise InputError("velocity/displacement columns cannot follow a non-Gaussian acceleration", "quantities")
    plan, design = nongaussian.nongaussian_plan(profile, plan, transform)
    return design.synthesizer(plan, seed), single


def generate_samples(
    profile: AsdProfile,
    duration_s: float,
    rate_hz: float,
    *,
    seed,
    amplitude: str = "fixed",
    resolution_hz: float | None = None,
    loop: bool = False,
    ramp_s: float | None = None,
    quantities="acceleration",
    memory_budget_bytes: int = DEFAULT_MEMORY_BUDGET_BYTES,
    kurtosis: float | None = None,
    skewness: float | None = None,
    clip: float | None = None,
) -> np.ndarray:
    """A Gaussian time history whose spectrum is the profile's.

    Parameters
    ----------
    profile : AsdProfile
        Target ASD in g^2/Hz.
    duration_s : float
        Duration in s (rounded to whole samples).
    rate_hz : float
        Sample rate in Hz (> 2 x the top frequency).
    seed : int, numpy.random.SeedSequence or numpy.random.Generator
        Same seed and options: identical samples.
    amplitude : {"fixed", "rayleigh"}
        ``fixed`` (default): random phases, amplitudes fixed by the target
        (each frame's periodogram is the target).  ``rayleigh``: a true
        Gaussian realisation.
    resolution_hz : float, optional
        Line spacing for overlap-add frames (default from the profile).
    loop : bool
        One periodic record that repeats seamlessly.
    ramp_s : float, optional
        Raised-cosine fade-in and fade-out, s each.
    quantities : str or sequence of str
        ``"acceleration"`` (default) gives shape (n,) in g; a sequence such as
        ``("acceleration", "velocity", "displacement")`` gives shape (n, q)
        with columns in g, m/s and m, integrated in the frequency domain.
    memory_budget_bytes : int
        Working memory for one periodic record; beyond it, overlap-add.
    kurtosis, skewness, clip : float, optional
        A non-Gaussian drive (Pearson kurtosis, skewness, or every sample within
        ``clip`` x RMS) with its spectrum pre-compensated, exactly as
        ``vibsynth generate`` makes it (see :mod:`vibsynth.generate.nongaussian`).

    Returns
    -------
    numpy.ndarray
        Samples, shape (n,) or (n, q), float64.

    References
    ----------
    Shinozuka & Jan (1972); Allen (1977); see :mod:`vibsynth.generate.pipeline`.
    """
    synthesizer, single = _synthesizer(
        profile,
        duration_s,
        rate_hz,
        seed,
        dict(amplitude=amplitude, resolution_hz=resolution_hz, loop=loop, ramp_s=ramp_s,
             quantities=quantities, memory_budget_bytes=memory_budget_bytes,
             kurtosis=kurtosis, skewness=skewness, clip=clip),
    )
    samples = synthesizer.take_record()
    return samples[:, 0] if single else samples


def iter_chunks(
    profile: AsdProfile,
    duration_s: float,
    rate_hz: float,
    *,
    seed,
    chunk_samples: int = 65536,
    amplitude: str = "fixed",
    resolution_hz: float | None = None,
    loop: bool = False,
    ramp_s: float | None = None,
    quantities="acceleration",
    memory_budget_bytes: int = DEFAULT_MEMORY_BUDGET_BYTES,
    kurtosis: float | None = None,
    skewness: float | None = None,
    clip: float | None = None,
) -> Iterator[np.ndarray]:
    """The samples of :func:`generate_samples` as consecutive chunks, in constant memory.

    Parameters
    ----------
    profile, duration_s, rate_hz, seed, amplitude, resolution_hz, loop, ramp_s, quantities, memory_budget_bytes
        As for :func:`generate_samples`.
    kurtosis, skewness, clip : float, optional
        As for :func:`generate_samples`.
    chunk_samples : int
        Samples per chunk (the last may be shorter).  The samples do not
        depend on it.

    Yields
    ------
    numpy.ndarray
        Shape (m,) or (m, q), float64, as :func:`generate_samples`.

    References
    ----------
    Allen (1977), overlap-add synthesis; see :mod:`vibsynth.generate.pipeline`.
    """
    synthesizer, single = _synthesizer(
        profile,
        duration_s,
        rate_hz,
        seed,
        dict(amplitude=amplitude, resolution_hz=resolution_hz, loop=loop, ramp_s=ramp_s,
             quantities=quantities, memory_budget_bytes=memory_budget_bytes,
             kurtosis=kurtosis, skewness=skewness, clip=clip),
    )
    for chunk in synthesizer.iter_chunks(chunk_samples):
        yield chunk[:, 0] if single else chunk


def rig_limit_check(profile: AsdProfile, stroke_limit_mm: float | None = None, velocity_limit_m_s: float | None = None) -> None:
    """Refuse a profile whose 3-sigma displacement or velocity exceeds a rig's limits.

    Parameters
    ----------
    profile : AsdProfile
        Target ASD in g^2/Hz.
    stroke_limit_mm : float, optional
        Shaker stroke, peak-to-peak, in mm; compared with 6 x displacement RMS.
    velocity_limit_m_s : float, optional
        Shaker velocity limit (peak) in m/s; compared with 3 x velocity RMS.

    Raises
    ------
    InputError
        Naming the need, the limit and by how much it is exceeded.

    References
    ----------
    Velocity and displacement ASD ``S_a g0^2/(2 pi f)^2`` and
    ``S_a g0^2/(2 pi f)^4`` (Bendat & Piersol 2010); the 3-sigma margin is
    common practice (no source).
    """
    if stroke_limit_mm is not None:
        limit = _positive(stroke_limit_mm, "stroke limit", "mm")
        need = profile.displacement_peak_to_peak_3sigma_m * 1e3
        if need > limit:
            raise InputError(
                f"the profile needs {need:.3g} mm peak-to-peak displacement (3 sigma), "
                f"{need - limit:.3g} mm ({need / limit:.3g} x the limit) beyond the {limit:g} mm stroke limit; "
                "refusing to write the drive",
                "--stroke-limit",
            )
    if velocity_limit_m_s is not None:
        limit = _positive(velocity_limit_m_s, "velocity limit", "m/s")
        need = 3.0 * profile.velocity_rms_m_s
        if need > limit:
            raise InputError(
                f"the profile needs {need:.3g} m/s peak velocity (3 sigma), "
                f"{need - limit:.3g} m/s ({need / limit:.3g} x the limit) beyond the {limit:g} m/s velocity limit; "
                "refusing to write the drive",
                "--velocity-limit",
            )


__all__ = [
    "AMPLITUDE_MODES",
    "DEFAULT_MEMORY_BUDGET_BYTES",
    "MODES",
    "QUANTITY_UNITS",
    "SynthesisPlan",
    "Synthesizer",
    "check_workers",
    "choose_frame_length",
    "frame_workers",
    "generate_samples",
    "iter_chunks",
    "line_amplitudes",
    "ordered_map",
    "parse_quantities",
    "periodic_memory_bytes",
    "plan_synthesis",
    "profile_resolution_hz",
    "raised_cosine_ramp",
    "rig_limit_check",
    "root_seed_sequence",
    "seed_entropy",
    "sine_window",
    "synthesize_frame",
]
