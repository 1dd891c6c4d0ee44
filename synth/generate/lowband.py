"""The lowest DFT lines of a long periodic record, without a transform of the whole record.

The spill-over high-pass of a periodic record changes only the lines below its
pass edge: a few thousand of the millions a long record has.  Rather than a
forward and an inverse FFT of the whole record, the few lines are computed (and
their change added back) from block moments of the samples: with blocks of
``L`` samples, ``n = m L + r`` and the block centre ``c = (L - 1) / 2``,

    e^(-2 pi i k n / N) = e^(-2 pi i k m / M) e^(-2 pi i k c / N) e^(-i a_k s_r),
    a_k = 2 pi k L / N,  s_r = (r - c) / L,  M = N / L,

and the last factor is expanded in its Taylor series,
``sum_p (-i a_k)^p s_r^p / p!``, truncated after :func:`block_plan`'s ``P``
terms (error below 1e-20 of the samples' absolute sum, far below rounding).
The lines are then ``P`` short FFTs (length ``M``) of the moments
``mu_p[m] = sum_r y[m L + r] s_r^p``; adding lines back is the same in reverse.
The work is ``2 P N`` multiply-adds in small matrix products (cache-sized
blocks, on worker threads) plus ``2 P`` FFTs of ``N / L`` points, against two
FFTs of ``N`` points; the result equals the FFT's to rounding (about 1e-15 of
the record's RMS).

Used by :func:`vibsynth.generate.highpass.periodic_highpass` for records of at
least :data:`LOWBAND_MIN_SAMPLES` samples whose length has a divisor that makes
the expansion short; shorter or awkward lengths keep the whole-record FFTs.

References
----------
C. Anderson and M. D. Dahleh, "Rapid computation of the discrete Fourier
transform", SIAM J. Sci. Comput. 17(4), 1996 (Taylor expansion of the DFT
kernel about grid points); A. Dutt and V. Rokhlin, "Fast Fourier transforms for
nonequispaced data", SIAM J. Sci. Comput. 14(6), 1993.
"""

from __future__ import annotations

import math

import numpy as np

from vibsynth.generate._threads import ordered_map

__all__ = ["LOWBAND_MIN_SAMPLES", "add_low_lines", "block_plan", "low_lines"]

#: Shortest record (samples) computed by block moments; below it the whole-record FFTs are cheap.
LOWBAND_MIN_SAMPLES = 1 << 20
#: Longest and shortest block (samples).
_MAX_BLOCK = 64
_MIN_BLOCK = 8
#: Largest |a_k s_r| (radians) the Taylor expansion is used for.
_MAX_PHASE = 0.25
#: Truncation bound of the expansion, relative to the samples' absolute sum.
_TRUNCATION = 1e-20
#: Multiply-adds per small matrix product (kept small: cache-sized, and one BLAS thread each).
_PRODUCT_SIZE = 1 << 17


def block_plan(samples: int, lines: int) -> tuple[int, int] | None:
    """Block length L and number of Taylor terms P for the lowest ``lines`` lines of a record, or None.

    Parameters
    ----------
    samples : int
        Record length N (samples).
    lines : int
        Lines wanted: ``k = 0 .. lines - 1`` (frequencies ``k rate / N``).

    Returns
    -------
    (int, int) or None
        The largest L <= 64 (at least 8) that divides N with ``N / L >= 4 lines``
        and ``pi (lines - 1) L / N <= 0.25`` rad, and the fewest P with
        ``theta^P / P! <= 1e-20`` for that phase ``theta``; None when the record
        is shorter than :data:`LOWBAND_MIN_SAMPLES` or no such L exists (the
        caller then uses whole-record FFTs).

    Examples
    --------
    >>> block_plan(1 << 24, 6228)
    (64, 12)
    >>> block_plan(1 << 24, 1 << 22) is None
    True

    References
    ----------
    Taylor's remainder bound ``|x|^P / P!`` for ``e^(ix)``; Anderson & Dahleh (1996).
    """
    samples, lines = int(samples), int(lines)
    if samples < LOWBAND_MIN_SAMPLES or lines < 1:
        return None
    for block in range(_MAX_BLOCK, _MIN_BLOCK - 1, -1):
        if samples % block or samples // block < 4 * lines:
            continue
        theta = math.pi * (lines - 1) * block / samples
        if theta > _MAX_PHASE:
            continue
        terms = 1
        while theta**terms / math.factorial(terms) > _TRUNCATION:
            terms += 1
        return block, terms
    return None


def _powers(block: int, terms: int) -> np.ndarray:
    """``s_r^p`` for r = 0 .. L-1 (rows) and p = 0 .. P-1 (columns)."""
    s = (np.arange(block) - 0.5 * (block - 1)) / block
    powers = np.empty((block, terms))
    powers[:, 0] = 1.0
    for p in range(1, terms):
        powers[:, p] = powers[:, p - 1] * s
    return powers


def _taylor_factors(lines: int, samples: int, block: int, terms: int, sign: float) -> np.ndarray:
    """``e^(sign 2 pi i k c / N) (sign i a_k)^p / p!`` for k < lines (columns) and p < P (rows)."""
    k = np.arange(lines)
    a = 2.0 * np.pi * k * block / samples
    factors = np.empty((terms, lines), dtype=complex)
    factors[0] = np.exp(sign * 2j * np.pi * k * (0.5 * (block - 1)) / samples)
    for p in range(1, terms):
        factors[p] = factors[p - 1] * (sign * 1j * a / p)
    return factors


def _row_chunks(rows: int, step: int, workers: int) -> list[tuple[int, int]]:
    """Row ranges for the threads: ``workers`` stretches, each a whole number of ``step`` rows."""
    per = -(-rows // max(workers, 1))
    per = -(-per // step) * step
    return [(lo, min(lo + per, rows)) for lo in range(0, rows, per)]


def low_lines(y: np.ndarray, lines: int, plan: tuple[int, int], workers: int = 1, prepare=None) -> np.ndarray:
    """``scipy.fft.rfft(y)[:lines]`` from block moments (equal to rounding).

    Parameters
    ----------
    y : numpy.ndarray, shape (N,)
        One period of the record (any unit U), float64, C-contiguous.
    lines : int
        Lines wanted (``k = 0 .. lines - 1``).
    plan : (int, int)
        ``(L, P)`` from :func:`block_plan` for ``(N, lines)``.
    workers : int
        Threads (the result does not depend on it).
    prepare : callable, optional
        ``prepare(stretch)`` changes a stretch (a 1-D view) of ``y`` in place
        just before its moments are taken, while it is in cache: a memoryless
        (sample by sample) stage such as a transform, so that ``y`` ends up
        changed exactly as a separate pass over it would change it and the
        lines are those of the changed record.  Every sample is prepared once.

    Returns
    -------
    numpy.ndarray of complex, shape (lines,)
        DFT lines in U (unnormalised, as ``rfft``).

    Examples
    --------
    >>> y = np.cos(2 * np.pi * 3 * np.arange(1 << 20) / (1 << 20))
    >>> np.round(low_lines(y, 5, block_plan(1 << 20, 5)).real / (1 << 19), 12) + 0.0
    array([0., 0., 0., 1., 0.])

    References
    ----------
    Anderson & Dahleh (1996), Taylor expansion of the DFT kernel.
    """
    block, terms = plan
    samples = y.size
    rows = samples // block
    blocks = y.reshape(rows, block)
    powers = _powers(block, terms)
    moments = np.empty((rows, terms))
    step = max(1, _PRODUCT_SIZE // (block * terms))

    def moments_of(chunk):
        lo, hi = chunk
        for start in range(lo, hi, step):
            stop = min(start + step, hi)
            if prepare is not None:
                prepare(y[start * block : stop * block])
            np.matmul(blocks[start:stop], powers, out=moments[start:stop])

    for _ in ordered_map(moments_of, _row_chunks(rows, step, workers), workers, workers):
        pass
    by_term = np.ascontiguousarray(moments.T)
    del moments
    spectra = list(ordered_map(lambda row: np.fft.rfft(row)[:lines], by_term, workers, workers))
    factors = _taylor_factors(lines, samples, block, terms, -1.0)
    result = np.zeros(lines, dtype=complex)
    for p in range(terms - 1, -1, -1):  # smallest terms first
        result += factors[p] * spectra[p]
    return result


def add_low_lines(y: np.ndarray, values: np.ndarray, plan: tuple[int, int], workers: int = 1,
                  finish=None) -> np.ndarray:
    """Add ``scipy.fft.irfft(X, n=N)`` to ``y`` in place, X holding ``values`` on its lowest lines and 0 elsewhere.

    Parameters
    ----------
    y : numpy.ndarray, shape (N,)
        Record (any unit U), float64, C-contiguous; changed in place.
    values : numpy.ndarray of complex, shape (K,)
        Lines ``k = 0 .. K - 1`` in U (unnormalised, as ``rfft`` gives them);
        the imaginary part of line 0 is ignored, as ``irfft`` does.
    plan : (int, int)
        ``(L, P)`` from :func:`block_plan` for ``(N, K)``.
    workers : int
        Threads (the result does not depend on it).
    finish : callable, optional
        ``finish(stretch)`` changes a stretch (a 1-D view) of ``y`` in place
        just after the lines are added to it, while it is in cache: a
        memoryless stage (such as a final scaling), applied exactly as a
        separate pass over ``y`` would apply it.  Every sample is finished once.

    Returns
    -------
    numpy.ndarray
        ``y``.

    Examples
    --------
    >>> y = np.zeros(1 << 20)
    >>> _ = add_low_lines(y, np.array([0, 0, 1 << 19], dtype=complex), block_plan(1 << 20, 3))
    >>> bool(np.allclose(y, np.cos(2 * np.pi * 2 * np.arange(1 << 20) / (1 << 20)), atol=1e-12))
    True

    References
    ----------
    Anderson & Dahleh (1996), Taylor expansion of the DFT kernel.
    """
    block, terms = plan
    samples = y.size
    rows = samples // block
    lines = values.size
    factors = _taylor_factors(lines, samples, block, terms, 1.0)
    spectrum = np.zeros(rows // 2 + 1, dtype=complex)

    def term(p):
        spectrum_p = spectrum.copy()
        spectrum_p[:lines] = factors[p] * values
        spectrum_p[0] = spectrum_p[0].real
        return np.fft.irfft(spectrum_p, n=rows)

    # each term's slowly varying part on the block grid: irfft over rows, / L for the 1/N of the full irfft
    by_term = np.stack(list(ordered_map(term, range(terms), workers, workers)), axis=1)
    by_term /= block
    powers = np.ascontiguousarray(_powers(block, terms).T)
    blocks = y.reshape(rows, block)
    step = max(1, _PRODUCT_SIZE // (block * terms))

    def add_to(chunk):
        lo, hi = chunk
        scratch = np.empty((step, block))
        for start in range(lo, hi, step):
            stop = min(start + step, hi)
            part = scratch[: stop - start]
            np.matmul(by_term[start:stop], powers, out=part)
            blocks[start:stop] += part
            if finish is not None:
                finish(y[start * block : stop * block])

    for _ in ordered_map(add_to, _row_chunks(rows, step, workers), workers, workers):
        pass
    return y
