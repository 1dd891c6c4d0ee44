"""The spill-over high-pass: its design and the three ways the pipeline applies it.

Two things put power below the band and down to 0 Hz, where integrating twice
turns a tiny share of the variance into large displacements: the sine window
of overlap-add frames (leakage of the lowest band lines) and a non-Gaussian
drive's memoryless transform (its self-convolutions).  :class:`SpillHighpass`
removes both: pass band from 0.95 x the lowest band frequency, exactly 0 at
0 Hz, at least 60 dB down below its stop edge.

Applied three ways (each a deterministic function of the stream, whatever the
chunk size a record is read in):

:func:`periodic_highpass`
    a periodic record, exactly in the frequency domain (circular, so a looped
    record still loops); a long record has only its lowest lines computed and
    changed (:mod:`vibsynth.generate.lowband`) instead of two whole-record FFTs,
    and memoryless stages before and after it (a transform, the final scale)
    can ride along in those passes over the record (``prepare``, ``finish``);
:class:`PartitionedHighpass`
    a linear (Gaussian) overlap-add stream, by uniformly partitioned
    overlap-save: the FIR in partitions of P samples, FFTs of 2P that stay in
    cache;
:func:`block_highpass`
    a transformed overlap-add stream, one output block of B samples from one
    window of 2B transformed samples (the blocks are independent, so worker
    threads filter them in parallel).

Both FIR ways give output sample n = stream sample n + B/2.  The two
overlap-add ways compute the same convolution and differ only in rounding;
each keeps the samples of vibsynth 0.1 for its kind of drive.

References
----------
Kaiser, J. F., "Nonrecursive digital filter design using the I0-sinh window
function", Proc. IEEE ISCAS 1974 (the FIR design formulas); Oppenheim, A. V. &
Schafer, R. W., *Discrete-Time Signal Processing*, 3rd ed., 2010 (overlap-save);
Soo, J.-S. & Pang, K. K., "Multidelay block frequency domain adaptive filter",
IEEE Trans. ASSP 38(2), 1990 (uniformly partitioned block convolution).
"""

from __future__ import annotations

import collections
import math
from dataclasses import dataclass
from typing import Iterator

import numpy as np

from vibsynth.errors import InputError
from vibsynth.generate._threads import in_stretches

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



def kaiser_beta(attenuation_db: float) -> float:
    """Kaiser window shape parameter for a stop-band attenuation (dimensionless).

    The same formula, in the same floating-point operations, as
    ``scipy.signal.kaiser_beta``; written out here so that generating a drive
    does not import ``scipy.signal`` (about 0.3 s of process start-up).

    Parameters
    ----------
    attenuation_db : float
        Stop-band attenuation A in dB (positive).

    Returns
    -------
    float
        ``0.1102 (A - 8.7)`` above 50 dB, ``0.5842 (A - 21)^0.4 + 0.07886 (A - 21)``
        from 21 to 50 dB, else 0.

    Examples
    --------
    >>> round(kaiser_beta(65.0), 5)
    6.20426

    References
    ----------
    J. F. Kaiser, "Nonrecursive digital filter design using the I0-sinh window
    function", Proc. IEEE Int. Symp. Circuits and Systems (1974), 20-23.
    """
    a = float(attenuation_db)
    if a > 50:
        return 0.1102 * (a - 8.7)
    if a > 21:
        return 0.5842 * (a - 21) ** 0.4 + 0.07886 * (a - 21)
    return 0.0

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

    Examples
    --------
    >>> highpass = SpillHighpass(pass_edge_hz=19.0, stop_edge_hz=12.0, rate_hz=5120.0, half_length=4096)
    >>> float(highpass.response(0.0)), abs(float(highpass.response(100.0)) - 1.0) < 1e-3
    (0.0, True)

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
    def for_plan(plan, band_low_hz: float) -> "SpillHighpass | None":
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
        beta = kaiser_beta(_HIGHPASS_DESIGN_DB)
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
        return np.fft.rfft(kernel)

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
            "scaling (a clipped drive is then clipped and high-passed once more, and multiplied by a smooth gain that "
            "brings each remaining sample above the bound exactly to it)",
        }



def partition_samples(highpass: SpillHighpass, hop: int) -> int:
    """Partition length P of the partitioned overlap-save (samples): B/4, at least min(4096, hop), at most B/2.

    At most B/2, so that the direct term (stream sample n + B/2) starts on a partition.

    Examples
    --------
    >>> partition_samples(SpillHighpass(19.0, 12.0, 5120.0, 4096), 8192)
    4096

    References
    ----------
    Soo & Pang (1990), uniformly partitioned block convolution.
    """
    block = highpass.block_samples
    return min(max(block // HIGHPASS_PARTITIONS, min(MIN_HIGHPASS_PARTITION, int(hop))), block // 2)


def periodic_highpass(y: np.ndarray, highpass: SpillHighpass, workers: int = 1, prepare=None,
                      finish=None) -> np.ndarray:
    """A periodic record high-passed exactly in the frequency domain (circular).

    Only the lines below the pass edge change (the response is 1 above it).  A
    record of at least :data:`vibsynth.generate.lowband.LOWBAND_MIN_SAMPLES`
    samples (with a suitable divisor, see
    :func:`vibsynth.generate.lowband.block_plan`) has just those lines computed
    from block moments and their change added back in place
    (:mod:`vibsynth.generate.lowband`; equal to the whole-record FFTs to
    rounding); a shorter one is transformed whole (``rfft``, response,
    ``irfft``) into a new array.

    Parameters
    ----------
    y : numpy.ndarray, shape (n,)
        One period of the record (any unit).  A long record is changed in
        place when it is a writeable C-contiguous float64 array (else a copy is).
    highpass : SpillHighpass
        With ``half_length`` None (the frequency-domain response).
    workers : int
        Threads for the block moments of a long record (the samples do not
        depend on it).
    prepare : callable, optional
        A memoryless stage to apply to ``y`` (in place) before the filter:
        ``prepare(stretch)`` changes a 1-D stretch of samples in place (e.g. a
        transform).  A long record has it applied stretch by stretch as its
        block moments are taken (one pass over the record instead of two);
        the result is the same, bit for bit, as applying it to the whole
        record first.
    finish : callable, optional
        A memoryless stage to apply (in place, the same way) to the filtered
        record, e.g. the final scaling: a long record has it applied to each
        stretch as the change of its lowest lines is added.

    Returns
    -------
    numpy.ndarray, shape (n,)
        The high-passed record (``y`` itself when changed in place).

    Examples
    --------
    >>> y = periodic_highpass(np.ones(64), SpillHighpass(9.5, 5.0, 64.0))
    >>> bool(np.allclose(y, 0.0))
    True

    References
    ----------
    Oppenheim & Schafer (2010), the DFT of a periodic sequence; Anderson &
    Dahleh (1996), the DFT's lowest lines by a Taylor expansion of its kernel.
    """
    from vibsynth.generate import lowband

    samples = y.size
    top = min(int(math.ceil(highpass.pass_edge_hz * samples / highpass.rate_hz)) + 1, samples // 2 + 1)
    gain = highpass.response(np.arange(top) * (highpass.rate_hz / samples))
    plan = lowband.block_plan(samples, top)
    if plan is not None:
        if not (y.dtype == np.float64 and y.ndim == 1 and y.flags.c_contiguous and y.flags.writeable):
            y = np.array(y, dtype=np.float64).ravel()  # a contiguous copy: the same samples whatever the layout
        change = lowband.low_lines(y, top, plan, workers, prepare)
        change *= gain - 1.0
        return lowband.add_low_lines(y, change, plan, workers, finish)
    if prepare is not None:
        in_stretches(prepare, y, workers)
    spectrum = np.fft.rfft(y)
    del y
    spectrum[:top] *= gain
    y = np.fft.irfft(spectrum, n=samples)
    if finish is not None:
        in_stretches(finish, y, workers)
    return y


def block_highpass(pair, block: int, lowpass_spectrum: np.ndarray | None) -> np.ndarray:
    """One output block of B samples from two consecutive stream blocks of B samples each.

    Output sample i of the block is ``w[B/2 + i] - (h * w)[B/2 + i]`` for the
    window ``w`` of 2B samples and the zero-phase low-pass ``h`` of half-length
    B/2 (circular convolution of the window, which never wraps for these samples).

    Parameters
    ----------
    pair : (numpy.ndarray, numpy.ndarray)
        Stream blocks b and b + 1 (B samples each).
    block : int
        B.
    lowpass_spectrum : numpy.ndarray or None
        :meth:`SpillHighpass.block_lowpass_spectrum` of 2B; None: no filter (the block is only shifted).

    Returns
    -------
    numpy.ndarray, shape (B,)

    Examples
    --------
    >>> highpass = SpillHighpass(0.19, 0.1, 1.0, 32)
    >>> out = block_highpass((np.ones(64), np.ones(64)), 64, highpass.block_lowpass_spectrum(128))
    >>> bool(np.allclose(out, 0.0))
    True

    References
    ----------
    Oppenheim & Schafer (2010), overlap-save.
    """
    previous, current = pair
    shift = block // 2
    window = np.concatenate((previous, current))
    if lowpass_spectrum is None:
        return window[shift : shift + block].copy()
    lowpass = np.fft.irfft(np.fft.rfft(window) * lowpass_spectrum, n=window.size)
    return window[shift : shift + block] - lowpass[shift : shift + block]


class PartitionedHighpass:
    """The FIR high-pass of a linear overlap-add stream by uniformly partitioned overlap-save.

    Parameters
    ----------
    highpass : SpillHighpass
        With a ``half_length`` D = B/2.
    hop : int
        The overlap-add hop (samples); B is a multiple of it.

    Notes
    -----
    ``x - h * x`` with ``h`` the zero-phase low-pass of half-length D, in
    partitions of P samples (:func:`partition_samples`), FFTs of 2P: output
    sample n is stream sample n + D, so the filter only ever reads stream
    samples at or after 0.  Each output block of P samples is the same
    function of the stream whatever range is asked for.

    Examples
    --------
    >>> engine = PartitionedHighpass(SpillHighpass(19.0, 12.0, 5120.0, 4096), 8192)
    >>> engine.partition, engine.lag
    (4096, 2)

    References
    ----------
    Oppenheim & Schafer (2010); Soo & Pang (1990).
    """

    def __init__(self, highpass: SpillHighpass, hop: int):
        self.highpass = highpass
        self.partition = partition_samples(highpass, hop)
        self.lag = highpass.block_samples // self.partition
        self._spectra = None

    @property
    def spectra(self) -> np.ndarray:
        """The kernel's partitions' spectra (rfft of 2P each)."""
        if self._spectra is None:
            size = self.partition
            taps = self.highpass.lowpass_taps()  # h[-D .. D], D = B/2: the causal kernel k[m] = h[m - D]
            count = -(-taps.size // size)
            kernel = np.zeros(count * size)
            kernel[: taps.size] = taps
            padded = np.zeros((count, 2 * size))
            padded[:, :size] = kernel.reshape(count, size)
            self._spectra = np.fft.rfft(padded, axis=1)
        return self._spectra

    def first_piece(self, first_block: int) -> int:
        """Index of the first stream piece (P samples) that output block ``first_block`` needs."""
        return first_block + self.lag - self.spectra.shape[0]

    def last_piece(self, last_block: int) -> int:
        """Index of the last stream piece that output block ``last_block`` needs."""
        return last_block + self.lag

    def filter(self, pieces: Iterator[np.ndarray]) -> Iterator[np.ndarray]:
        """Output blocks (P samples each) from the stream pieces ``first_piece .. last_piece``, in order.

        Pieces of shape (P,) or (P, channels) (each channel filtered alike).
        """
        size, spectra, lag = self.partition, self.spectra, self.lag
        count = spectra.shape[0]
        direct = lag // 2  # the piece holding stream samples n + D of output block o is piece o + lag/2
        recent: collections.deque = collections.deque(maxlen=count)
        kept: collections.deque = collections.deque(maxlen=lag - direct + 1)
        previous = None
        for current in pieces:
            if previous is not None:
                if current.ndim == 2 and spectra.ndim == 2:
                    spectra = spectra[:, :, None]
                recent.append(np.fft.rfft(np.concatenate((previous, current)), axis=0))
                kept.append(current)
                if len(recent) == count:
                    accumulated = recent[-1] * spectra[0]
                    product = np.empty_like(accumulated)
                    for q in range(1, count):
                        accumulated += np.multiply(recent[-1 - q], spectra[q], out=product)
                    lowpass = np.fft.irfft(accumulated, n=2 * size, axis=0)
                    yield kept[0] - lowpass[size:]
            previous = current


def smooth_bound_gain(z: np.ndarray, limit: float, half_width: int, lo: int, hi: int) -> np.ndarray:
    """Gain (dimensionless, at most 1) for samples ``[lo, hi)`` of ``z`` that brings them within +/-limit smoothly.

    Every sample ``n_i`` of ``z`` above the bound (ratio ``rho_i = limit / |z[n_i]|
    < 1``) contributes the factor ``1 - (1 - rho_i) hann((n - n_i) / W)``, a Hann
    dip of half-width W = ``half_width`` samples that reaches ``rho_i`` at
    ``n_i``; the gain is their product.  So ``|gain[n_i] z[n_i]| <= limit`` at every
    such sample, while the gain varies no faster than a Hann window of 2W
    samples: multiplying a record by it moves power by at most about 2/W cycles
    per sample (the main lobe), far less than the band's lowest frequency, so
    nothing reaches 0 Hz the way a hard clip's corners do.  A sample within
    ``[lo, hi)`` is affected by bound crossings up to W samples outside it,
    which ``z`` must therefore hold.

    Parameters
    ----------
    z : numpy.ndarray, shape (n,)
        Samples (any unit).
    limit : float
        Bound, same unit as ``z``.
    half_width : int
        W, samples (>= 1).
    lo, hi : int
        Range of the returned gain, ``0 <= lo - W`` and ``hi + W <= n`` for an exact result.

    Returns
    -------
    numpy.ndarray, shape (hi - lo,)

    Examples
    --------
    >>> z = np.zeros(64); z[32] = 2.0
    >>> gain = smooth_bound_gain(z, 1.0, 8, 16, 48)
    >>> float(gain[16]), float(gain[0]), float(gain[12])
    (0.5, 1.0, 0.75)

    References
    ----------
    Harris, F. J., "On the use of windows for harmonic analysis with the discrete
    Fourier transform", Proc. IEEE 66(1), 1978 (the Hann window's spectrum).
    """
    gain = np.ones(hi - lo)
    w = int(half_width)
    over = np.flatnonzero(np.abs(z[max(lo - w + 1, 0) : min(hi + w - 1, z.size)]) > limit) + max(lo - w + 1, 0)
    if over.size == 0:
        return gain
    offsets = np.arange(-w + 1, w)
    dip = 0.5 + 0.5 * np.cos(np.pi * offsets / w)
    for n in over:
        depth = 1.0 - limit / abs(float(z[n]))
        a, b = max(n - w + 1, lo), min(n + w, hi)
        gain[a - lo : b - lo] *= 1.0 - depth * dip[a - n + w - 1 : b - n + w - 1]
    return gain
