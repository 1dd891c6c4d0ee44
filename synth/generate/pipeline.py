"""The one streaming pipeline: a planned record's samples, from a seed, in any order of chunks.

Stages, for every drive (Gaussian or not)::

    periodic record | overlap-add of frames     (unit-variance Gaussian stream u)
      -> burst envelope a(t) (optional)         (vibsynth.generate.modulation: x = a u)
      -> memoryless transform g (optional)      (vibsynth.transforms, a MemorylessTransform)
      -> spill-over high-pass (optional)        (vibsynth.generate.highpass)
      -> clip to the transform's peak limit, scale to g
      -> + tones and narrow bands, x level schedule  (optional; vibsynth.generate.tones)
      -> raised-cosine ramps
      -> rechunk to the caller's chunk size

The Gaussian drive is the pipeline with no transform stage; its physical scale
is folded into the line amplitudes (the stream is made in g), so its scale stage
is the identity.

``periodic``
    One inverse FFT of the whole record (child ``spawn_key + (1,)`` of the
    root :class:`numpy.random.SeedSequence`).  Velocity and displacement
    columns are integrated from the same lines in the frequency domain.  A
    transformed record is high-passed exactly in the frequency domain
    (circularly, so a looped record still loops seamlessly); its transform
    and final scale are applied stretch by stretch inside the high-pass's
    passes over the record.  The design of a non-Gaussian record does not
    depend on the seed, nor its normal draws on the design:
    :func:`nongaussian_synthesizer` (used by :func:`make_synthesizer`) draws
    them on a second thread while the design runs.  The samples are the same,
    bit for bit, as with every stage in turn.
``overlap-add``
    Independent frames of ``N`` samples, each multiplied by the sine window
    ``w[n] = sin(pi (n + 1/2) / N)``, laid every ``N/2`` samples with the first
    frame starting at ``-N/2``, and summed.  Because ``w[n]^2 + w[n + N/2]^2 = 1``
    the variance is the same at every sample.  Frame ``j`` draws from its own
    child ``spawn_key + (0, j)``, so any stretch of the record can be made alone,
    and frames can be made on worker threads (``Synthesizer(..., workers=k)``)
    with the same samples bit for bit.  The sine window leaks the lowest band
    lines down to 0 Hz (and a transform spills its self-convolutions there), so
    the stream passes the plan's zero-phase FIR high-pass: output sample n is
    stream sample ``n + B/2`` (B the filter block).  A linear stream is filtered
    by partitioned overlap-save, a transformed one block by block
    (:mod:`vibsynth.generate.highpass`).  On two or more threads a long linear
    stream is cut into stretches of output blocks (a few MB each), and each
    stretch is made whole on one thread: its frames, the filter's transforms
    and products; a stretch makes again the few stream pieces before its first
    block that the filter reads (2-6 % more work), so the threads share the
    filter too instead of leaving it to the thread that reads the record
    (2^24 samples on 2 threads: 0.62 s -> 0.50 s, the same samples).

The burst envelope (a plan with ``modulation``, never with a transform)
multiplies the Gaussian stream where it is made (the whole periodic record, or
each overlap-add hop block), at absolute stream sample indices, so it is a
function of the seed and the sample index alone.  It comes before the
spill-over high-pass: the product spreads every line by the envelope's
bandwidth (about ``1 / burst_s``), and what that spread puts below the band is
removed with the window's leakage; the slow envelope passes the high-pass
unchanged.  A periodic record with an envelope gets the exact frequency-domain
high-pass as a transformed one does.

Either way the record is a deterministic function of (seed, plan): it does not
depend on the chunk size it is read in, on where a read starts, on the number
of worker threads, nor on the machine's memory.  Its last bits do depend
on the CPU's instruction set: numpy's SIMD exp, log, sin and cos round
differently with and without AVX-512, so the same seed gives the same
samples to the last bit on machines of one type, equal to rounding across types.

References
----------
Shinozuka, M. & Jan, C.-M., "Digital simulation of random processes and its
applications", Journal of Sound and Vibration 25(1), 1972 (spectral
representation: random-phase sums of cosines).
Allen, J. B., "Short term spectral analysis, synthesis, and modification by
discrete Fourier transform", IEEE Trans. ASSP 25(3), 1977 (overlap-add with
windows whose squares sum to one).
Winterstein, S. R., "Nonlinear vibration models for extremes and fatigue",
J. Eng. Mech. 114(10), 1988 (the memoryless transform after overlap-add).
Youla, D. C. & Webb, H., "Image restoration by the method of convex projections: part 1 - theory",
IEEE Trans. Medical Imaging 1(2), 1982 (alternating projections of a clipped drive).
Oppenheim, A. V. & Schafer, R. W., *Discrete-Time Signal Processing*, 3rd ed.,
2010 (overlap-save); Bendat, J. S. & Piersol, A. G., *Random Data*, 4th ed.,
Wiley 2010 (integration in the frequency domain).
"""

from __future__ import annotations

import collections
from typing import Iterator

import numpy as np

from vibsynth.errors import InputError
from vibsynth.generate._threads import check_workers, frame_workers, in_stretches, ordered_map
from vibsynth.generate.frames import _draw_lines, _draw_normals, _shape_lines, raised_cosine_ramp, rest_taper
from vibsynth.generate.highpass import PartitionedHighpass, block_highpass, periodic_highpass, smooth_bound_gain
from vibsynth.generate.plan import (
    DEFAULT_MEMORY_BUDGET_BYTES,
    SynthesisPlan,
    make_plan,
    parse_quantities,
    warn_all,
)
from vibsynth.generate.seeds import FRAME_STREAM, PERIODIC_STREAM, child_generator, root_seed_sequence, seed_entropy
from vibsynth.profile.asd import STANDARD_GRAVITY_M_S2, AsdProfile

__all__ = ["BOUND_PASSES", "KURTOSIS_MODELS", "Synthesizer", "check_kurtosis_model", "generate_samples", "iter_chunks",
           "largest_magnitude", "make_synthesizer", "nongaussian_synthesizer"]

#: A clipped (bounded) drive alternates clip and high-pass this many more times after the first
#: high-pass.  The high-pass removes the clip's spill below the band but lifts a few samples over the
#: bound again, and clipping those back would put a floor of lines down to 0 Hz back (with the clip
#: as the last step: about 6e-9 g^2/Hz, bench-flat at clip 2.5 had 16.7 mm displacement RMS where the
#: profile needs 0.113 mm).  These are alternating projections onto two convex sets (the samples
#: within the bound; the records with no lines below the high-pass; Youla & Webb 1982), which shrink
#: the overshoots (0.8 % of the bound after the first high-pass, 0.09 % after one more pair) but
#: converge slowly.  The last step is therefore linear in the record and smooth in time: the record
#: is multiplied by a gain that dips (Hann, two periods of the band's lowest frequency wide) to exactly
#: limit / |sample| at each remaining overshoot (:func:`vibsynth.generate.highpass.smooth_bound_gain`),
#: so the bound holds exactly and no power reaches 0 Hz.
BOUND_PASSES = 1

#: A high-passed linear overlap-add stream on two or more threads is made in stretches of output
#: blocks, each whole on one thread (frames, filter transforms and products): at least this many
#: blocks per stretch (a stretch makes again the few stream pieces its first block's filter reads) ...
_SPAN_MIN_BLOCKS = 32
#: ... and at most this many bytes of output per stretch ...
_SPAN_BYTES = 6 * 2**20
#: ... and at most this many bytes for all the stretches alive at once (one per thread in the making, one
#: made ahead, one being read: 24 MB on 2 threads, 32 MB on 8, whatever the duration); where a stretch
#: would then be shorter than its least length, the threads make frames instead.
_SPAN_POOL_BYTES = 32 * 2**20


class Synthesizer:
    """Makes the samples of one planned record from one seed, in any order of chunks.

    Parameters
    ----------
    plan : SynthesisPlan
        Gaussian (no transform) or non-Gaussian (from
        :func:`vibsynth.generate.design.nongaussian_plan`): the plan alone
        decides the stages.
    seed : int, numpy.random.SeedSequence or numpy.random.Generator
        See :func:`vibsynth.generate.seeds.root_seed_sequence`.
    workers : int
        Threads that make overlap-add frames (and filter transformed blocks;
        default 1: all in the calling thread).  The samples are the same bit
        for bit whatever the number.
    mixed : vibsynth.profile.mixed.MixedParts, optional
        Tones and narrow bands added after the scale, and a level schedule
        multiplying the sum, before the ramps (:mod:`vibsynth.generate.tones`).

    Notes
    -----
    A periodic record is computed once (on first use) and kept; an overlap-add
    record is computed block by block on every pass, a few frames alive at a
    time.

    Examples
    --------
    >>> from vibsynth.generate.plan import plan_synthesis
    >>> profile = AsdProfile([20, 2000], [0.01, 0.01])
    >>> synthesizer = Synthesizer(plan_synthesis(profile, 2.0, 5120.0), seed=1)
    >>> synthesizer.samples(0, 4).shape
    (4, 1)

    References
    ----------
    See the module docstring.
    """

    def __init__(self, plan: SynthesisPlan, seed, workers: int = 1, mixed=None):
        self.plan = plan
        self.root = root_seed_sequence(seed)
        self.workers = check_workers(workers)
        self._mixed = None
        if mixed is not None and not mixed.empty:
            from vibsynth.generate.tones import MixedStage

            self._mixed = MixedStage(mixed, plan.rate_hz, self.root)
        self._record: np.ndarray | None = None
        # the periodic record's normal draws, made ahead on another thread (see nongaussian_synthesizer)
        self._drawn = None
        self._envelope_knots = None
        highpass = plan.spill_highpass
        self._partitioned = None
        self._block_lowpass = None
        if plan.mode == "periodic":
            self._block = plan.total_samples
        elif highpass is None:
            self._block = plan.hop
        elif plan.transform is None:
            self._partitioned = PartitionedHighpass(highpass, plan.hop)
            self._block = self._partitioned.partition
        else:
            self._block = highpass.block_samples
            self._block_lowpass = highpass.block_lowpass_spectrum(2 * self._block)

    @property
    def seed(self) -> int:
        """The integer seed that remakes this record (root entropy)."""
        return seed_entropy(self.root)

    @property
    def block_samples(self) -> int:
        """Samples per output block: the filter block B of a high-passed transformed stream
        (output sample n is stream sample n + B/2), the partition of a high-passed linear one,
        else the hop (overlap-add) or the record (periodic)."""
        return int(self._block)

    # ------------------------------------------------------------ frames
    def frame_lines(self, index: int) -> np.ndarray:
        """Complex lines of overlap-add frame ``index`` (or of the periodic record, index 0).

        Scaled for ``irfft(norm="forward")``; in g when the plan has no
        transform, else for a unit-variance stream.
        """
        plan = self.plan
        if plan.mode == "periodic":
            drawn, self._drawn = self._drawn, None  # used once: the lines are shaped in place
            if drawn is not None and plan.channel_factors is None:
                amplitudes = plan._stream_amplitudes  # made while the draws may still be running
                drawn = drawn.result()
                if drawn[0].size == amplitudes.size and drawn[1] == plan._band:
                    return _shape_lines(drawn, amplitudes, plan.amplitude)
                del drawn  # drawn for another band: draw again (the same normals)
            rng = child_generator(self.root, PERIODIC_STREAM)
        else:
            rng = child_generator(self.root, FRAME_STREAM, int(index))
        if plan.channel_factors is not None:  # multi-channel: shape (lines, channels)
            from vibsynth.generate.channels import draw_channel_lines

            return draw_channel_lines(rng, plan)
        return _draw_lines(rng, plan._stream_amplitudes, plan.amplitude, plan._band)

    def frame(self, index: int) -> np.ndarray:
        """Unwindowed periodic frame ``index`` (samples, or (samples, channels)), before transform, scale and ramps."""
        return np.fft.irfft(self.frame_lines(index), n=self.plan.frame_length, axis=0, norm="forward")

    def _windowed_frame(self, index: int) -> np.ndarray:
        frame = self.frame(index)
        frame *= self.plan._window if frame.ndim == 1 else self.plan._window[:, None]
        return frame

    # ------------------------------------------------------------ stages
    def _modulate(self, stream: np.ndarray, first: int) -> np.ndarray:
        """The burst stage: multiply stream samples ``first, first + 1, ...`` by the envelope (in place)."""
        envelope = self.plan.modulation
        if envelope is None:
            return stream
        if self._envelope_knots is None:
            self._envelope_knots = envelope.knots(self.root)
        stream *= envelope.values(self.root, first, first + stream.shape[0], self._envelope_knots)
        return stream

    def _finish_transformed(self, y: np.ndarray) -> np.ndarray:
        """Clip again to the transform's peak limit (if any) and scale to g, in place."""
        limit = self.plan.transform.peak_limit
        if limit is not None:
            np.clip(y, -limit, limit, out=y)
        y *= self.plan.output_scale
        return y

    @property
    def bound_passes(self) -> int:
        """Extra stages after the first high-pass of an overlap-add stream: :data:`BOUND_PASSES` (clip,
        high-pass) and one smooth gain, for a bounded transform with a high-pass; else 0."""
        if self.plan.transform is None or self.plan.spill_highpass is None or self.plan.transform.peak_limit is None:
            return 0
        return BOUND_PASSES + 1

    @property
    def _bound_half_width(self) -> int:
        """Half-width W (samples) of the smooth gain's dips: 2 periods of the high-pass's pass edge,
        at most half the filter block of an overlap-add stream."""
        highpass = self.plan.spill_highpass
        w = max(int(round(2.0 * highpass.rate_hz / highpass.pass_edge_hz)), 1)
        if highpass.block_samples is not None:
            w = min(w, highpass.block_samples // 2)
        return min(w, self.plan.total_samples // 2)

    def _ramp(self, columns: np.ndarray, start: int) -> None:
        """Mixed-mode parts, then the raised-cosine fade-in/out (in place) of a stretch of columns from sample ``start``."""
        if self._mixed is not None:  # tones, narrow bands and the level schedule (acceleration-only records)
            self._mixed.apply(columns[:, 0], start)
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

    # ------------------------------------------------------- periodic record
    def _periodic_record(self) -> np.ndarray:
        if self._record is None:
            plan = self.plan
            lines = self.frame_lines(0)
            total = plan.total_samples
            if plan.channels:  # multi-channel: one column per channel
                columns = np.fft.irfft(lines, n=total, axis=0, norm="forward")
            elif len(plan.quantities) == 1:
                columns = np.fft.irfft(lines, n=total, norm="forward").reshape(total, 1)
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
                    columns[:, position] = np.fft.irfft(integrated, n=total, norm="forward")
                    del integrated
                columns[:, 0] = np.fft.irfft(lines, n=total, norm="forward")
                if plan.rest_taper_samples:
                    self._bring_to_rest(columns, lines)
            del lines
            self._modulate(columns[:, 0], 0)
            if plan.transform is not None:
                y = columns[:, 0]
                transform, limit = plan.transform, plan.transform.peak_limit
                if plan.spill_highpass is not None:
                    del columns  # a short record's inverse transform allocates the next; free this one first
                    # the transform (and, when unbounded, the final scale) applied stretch by stretch
                    # inside the high-pass's passes over the record: the same samples, fewer passes
                    y = periodic_highpass(y, plan.spill_highpass, self.workers,
                                          prepare=lambda stretch: transform.apply(stretch, out=stretch),
                                          finish=self._finish_transformed if limit is None else None)
                    if limit is not None:
                        for _ in range(BOUND_PASSES):  # alternating projections, see BOUND_PASSES
                            np.clip(y, -limit, limit, out=y)
                            y = periodic_highpass(y, plan.spill_highpass, self.workers)
                        # the last overshoots: a smooth gain (circular: the record loops)
                        w = self._bound_half_width
                        padded = np.concatenate((y[-w:], y, y[:w]))
                        y *= smooth_bound_gain(padded, limit, w, w, w + y.size)
                        del padded
                        self._finish_transformed(y)
                else:
                    self._apply_transform(y)
                    self._finish_transformed(y)
                columns = y.reshape(-1, 1)
            elif plan.spill_highpass is not None:
                columns = periodic_highpass(columns[:, 0], plan.spill_highpass, self.workers).reshape(-1, 1)
            self._ramp(columns, 0)
            self._record = columns
        return self._record

    def _apply_transform(self, y: np.ndarray) -> None:
        """The memoryless transform of a whole periodic record, in place (stretches on the worker threads)."""
        transform = self.plan.transform
        in_stretches(lambda part: transform.apply(part, out=part), y, self.workers)

    def _bring_to_rest(self, columns: np.ndarray, lines: np.ndarray) -> None:
        """Taper the displacement at both ends and differentiate analytically (in place; see
        :func:`vibsynth.generate.frames.rest_taper`): every column is 0 at the first and last sample."""
        plan = self.plan
        total, r = plan.total_samples, plan.rest_taper_samples
        omega = 2.0 * np.pi * plan.frequencies_hz[1:]

        def ends(spectrum_factor):
            # the column's values on the two tapered stretches only (irfft of the whole record, then sliced)
            column = np.zeros_like(lines)
            column[1:] = lines[1:] * spectrum_factor
            values = np.fft.irfft(column, n=total, norm="forward")
            return values[:r].copy(), values[total - r :].copy()

        x_head, x_tail = ends(-STANDARD_GRAVITY_M_S2 / omega**2)  # m
        v_head, v_tail = ends(STANDARD_GRAVITY_M_S2 / (1j * omega))  # m/s
        w, dw, ddw = rest_taper(r, plan.rate_hz)
        for head, sign, x, v in ((slice(0, r), 1.0, x_head, v_head), (slice(total - r, total), -1.0, x_tail, v_tail)):
            if sign < 0:
                w, dw, ddw = w[::-1], -dw[::-1], ddw[::-1]
            a = columns[head, 0]
            columns[head, 0] = w * a + (2.0 * dw * v + ddw * x) / STANDARD_GRAVITY_M_S2  # g
            for position, quantity in enumerate(plan.quantities[1:], start=1):
                columns[head, position] = w * v + dw * x if quantity == "velocity" else w * x
            if sign < 0:
                w, dw, ddw = w[::-1], -dw[::-1], ddw[::-1]

    # ---------------------------------------------------- overlap-add stream
    def _iter_hops(self, first_hop: int, last_hop: int, workers: int | None = None) -> Iterator[np.ndarray]:
        """Hop blocks ``first_hop .. last_hop`` of the windowed sum of frames (hop k: samples [k hop, (k+1) hop)).

        Frames are made on ``workers`` threads (default: the synthesizer's).
        """
        plan = self.plan
        hop = plan.hop
        self._cache_shared()
        threads, in_flight = frame_workers(self.workers if workers is None else workers, plan.frame_length)
        frames = ordered_map(self._windowed_frame, range(first_hop, last_hop + 2), threads, in_flight)
        try:
            previous = next(frames)
            for index, following in enumerate(frames, start=first_hop):
                out = previous[hop:]
                out += following[:hop]
                yield self._modulate(out, index * hop)
                previous = following
        finally:
            frames.close()

    def _cache_shared(self) -> None:
        """Compute, in the calling thread, what worker threads read and would otherwise make lazily."""
        plan = self.plan
        plan._window, plan._stream_amplitudes, plan._band  # noqa: B018 - cached before the threads read them
        if plan.modulation is not None and self._envelope_knots is None:
            self._envelope_knots = plan.modulation.knots(self.root)
        if self._partitioned is not None:
            self._partitioned.spectra  # noqa: B018

    def _stream_pieces(self, size: int, first: int, last: int, workers: int | None = None) -> Iterator[np.ndarray]:
        """Pieces ``first .. last`` of ``size`` samples (a power of two) of the windowed sum of frames.

        Piece j holds samples ``[j size, (j+1) size)``; pieces before sample 0 are zeros.
        Frames are made on ``workers`` threads (default: the synthesizer's).
        """
        shape = (size, len(self.plan.channels)) if self.plan.channels else size
        for _ in range(first, min(last, -1) + 1):
            yield np.zeros(shape)
        first = max(first, 0)
        if last < first:
            return
        hop = self.plan.hop
        if size <= hop:
            per = hop // size
            blocks = self._iter_hops(first * size // hop, last * size // hop, workers)
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
        blocks = self._iter_hops(first * per, (last + 1) * per - 1, workers)
        try:
            for _ in range(first, last + 1):
                yield np.concatenate([next(blocks) for _ in range(per)])
        finally:
            blocks.close()

    def _filtered_span(self, span: tuple[int, int], workers: int) -> Iterator[np.ndarray]:
        """High-passed blocks ``span[0] .. span[1]`` of a linear stream (partitioned overlap-save).

        Each block is the same function of the stream whatever span it is made in: a span starts its
        filter from the stream pieces the first block needs (made again by the span before it, too).
        """
        engine = self._partitioned
        pieces = self._stream_pieces(self._block, engine.first_piece(span[0]), engine.last_piece(span[1]), workers)
        try:
            yield from engine.filter(pieces)
        finally:
            pieces.close()

    def _span_record(self, span: tuple[int, int], spare: collections.deque, rows: int) -> np.ndarray:
        """Blocks ``span[0] .. span[1]`` of a high-passed linear stream in one array (a spare one if any,
        else a new one of ``rows`` samples), made in the calling thread."""
        size = self._block
        try:
            record = spare.popleft()
        except IndexError:
            record = np.empty((rows, len(self.plan.channels)) if self.plan.channels else rows)
        for index, block in enumerate(self._filtered_span(span, 1)):
            record[index * size : (index + 1) * size] = block
        return record

    def _filter_spans(self, first_block: int, last_block: int) -> list[tuple[int, int]] | None:
        """Stretches of blocks for the worker threads to make whole, or None (one stretch, the threads make frames).

        A stretch makes again the few stream pieces that its first block's filter reads before it
        (:meth:`PartitionedHighpass.first_piece`), so stretches are long
        (:data:`_SPAN_MIN_BLOCKS` blocks or more; :data:`_SPAN_BYTES` of output at most, and
        :data:`_SPAN_POOL_BYTES` for the threads + 2 alive at once) and used only when
        the range holds at least two per thread: then the frames, the filter's transforms and its
        products all run on the threads, where one stretch leaves the filter to a single thread.
        """
        if self.workers <= 1:
            return None
        blocks = last_block - first_block + 1
        width = len(self.plan.channels) if self.plan.channels else 1
        most = max(1, min(_SPAN_BYTES, _SPAN_POOL_BYTES // (self.workers + 2)) // (8 * width * self._block))
        least = max(_SPAN_MIN_BLOCKS, self._partitioned.spectra.shape[0] * 8)
        if most < least or blocks < 2 * self.workers * least:
            return None
        length = min(most, max(least, -(-blocks // (4 * self.workers))))
        return [(lo, min(lo + length - 1, last_block)) for lo in range(first_block, last_block + 1, length)]

    def _output_blocks(self, first_block: int, last_block: int) -> Iterator[np.ndarray]:
        """Finished (transformed, high-passed, clipped, scaled; unramped) output blocks of :attr:`block_samples`."""
        plan = self.plan
        size = self._block
        if self._partitioned is not None:  # linear stream, partitioned overlap-save
            spans = self._filter_spans(first_block, last_block)
            if spans is None:  # one stretch: frames on the worker threads, the filter in this one
                yield from self._filtered_span((first_block, last_block), self.workers)
                return
            # stretches of blocks, each made whole (frames, filter) on one worker thread
            self._cache_shared()
            # the stretches' arrays are reused (one per thread in the making, one ahead, one being read): no large
            # allocation per stretch for the allocator to keep
            spare: collections.deque = collections.deque()
            rows = (spans[0][1] - spans[0][0] + 1) * size  # the longest stretch: the first
            runs = ordered_map(lambda span: self._span_record(span, spare, rows), spans, self.workers, self.workers + 1)
            try:
                for span, record in zip(spans, runs):
                    for lo in range(0, (span[1] - span[0] + 1) * size, size):
                        yield record[lo : lo + size]
                    spare.append(record)
            finally:
                runs.close()
            return
        if plan.spill_highpass is None:  # no filter: the stream itself
            hops = self._iter_hops(first_block, last_block)
            try:
                for block in hops:
                    yield block if plan.transform is None else self._finish_transformed(plan.transform.apply(block, out=block))
            finally:
                hops.close()
            return
        # transformed stream, one output block from each window of 2B transformed samples; a bounded
        # transform passes (clip, high-pass) `bound_passes` more times, each a further B/2 samples later
        passes = self.bound_passes
        source = self._stream_pieces(size, first_block, last_block + 1 + passes)
        limit = plan.transform.peak_limit

        def pairs(blocks, transform):
            previous = None
            for current in blocks:
                if transform:
                    plan.transform.apply(current, out=current)
                if previous is not None:
                    yield previous, current
                previous = current

        def highpassed(pair):
            return block_highpass(pair, size, self._block_lowpass)

        def clipped_highpassed(pair):
            for block in pair:
                np.clip(block, -limit, limit, out=block)
            return block_highpass(pair, size, self._block_lowpass)

        def smoothly_bounded(pair):
            window = np.concatenate(pair)
            shift = size // 2
            out = window[shift : shift + size].copy()
            out *= smooth_bound_gain(window, limit, self._bound_half_width, shift, shift + size)
            return out

        threads, in_flight = frame_workers(self.workers, 2 * size)
        blocks = ordered_map(highpassed, pairs(source, True), threads, in_flight)
        stages = [blocks]
        for stage in range(passes):
            blocks = map(clipped_highpassed if stage < passes - 1 else smoothly_bounded, pairs(blocks, False))
            stages.append(blocks)
        try:
            for block in blocks:
                yield self._finish_transformed(block)
        finally:
            stages[0].close()
            source.close()

    def _iter_columns(self, chunk_samples: int, start: int, stop: int) -> Iterator[np.ndarray]:
        if self.plan.mode == "periodic":
            record = self._periodic_record()
            for lo in range(start, stop, chunk_samples):
                yield record[lo : min(stop, lo + chunk_samples)].copy()
            return
        size = self._block
        first_block, last_block = start // size, (stop - 1) // size
        position = first_block * size  # absolute index of the next block's first sample
        width = self.plan.column_count
        target = slice(None) if self.plan.channels else 0
        buffer = np.empty((min(chunk_samples, stop - start), width))
        filled, chunk_start = 0, start
        blocks = self._output_blocks(first_block, last_block)
        try:
            for block in blocks:
                lo = max(start - position, 0)
                hi = min(stop - position, size)
                while lo < hi:
                    take = min(hi - lo, buffer.shape[0] - filled)
                    buffer[filled : filled + take, target] = block[lo : lo + take]
                    filled += take
                    lo += take
                    if filled == buffer.shape[0]:
                        self._ramp(buffer, chunk_start)
                        yield buffer
                        chunk_start += filled
                        filled = 0
                        buffer = np.empty((min(chunk_samples, stop - chunk_start), width)) if chunk_start < stop else buffer
                position += size
        finally:
            blocks.close()

    # ------------------------------------------------------------ access
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
        """Largest |acceleration| in the record (g; of any channel): a full pass in overlap-add mode."""
        columns = slice(None) if self.plan.channels else 0
        if self.plan.mode == "periodic":
            return largest_magnitude(self._periodic_record()[:, columns])
        return max(largest_magnitude(chunk[:, columns]) for chunk in self.iter_chunks(chunk_samples))


def largest_magnitude(values: np.ndarray) -> float:
    """The largest |value| of an array (0 for an empty one), from its largest and smallest values.

    Two reductions and no temporary array of magnitudes; the same number as
    ``np.max(np.abs(values))`` for finite values (a NaN gives NaN).

    Parameters
    ----------
    values : numpy.ndarray
        Samples, any unit U and shape.

    Returns
    -------
    float
        Largest magnitude, U.

    Examples
    --------
    >>> largest_magnitude(np.array([0.5, -2.0, 1.5])), largest_magnitude(np.zeros(0))
    (2.0, 0.0)

    References
    ----------
    None (the definition of the peak magnitude).
    """
    if not values.size:
        return 0.0
    return max(float(values.max()), -float(values.min()))


# ----------------------------------------------------------------- library
def make_synthesizer(profile: AsdProfile, duration_s: float | None, rate_hz: float, *, seed, amplitude: str = "fixed",
                     resolution_hz: float | None = None, loop: bool = False, ramp_s: float | None = None,
                     quantities="acceleration", memory_budget_bytes: int = DEFAULT_MEMORY_BUDGET_BYTES,
                     kurtosis: float | None = None, skewness: float | None = None, clip: float | None = None,
                     workers: int = 1, rest_taper_s: float | None = None, kurtosis_model: str = "transform",
                     burst_s: float | None = None) -> tuple[Synthesizer, bool]:
    """The synthesizer of a drive request, and whether a single quantity was named (1-D results).

    Plans exactly as ``vibsynth generate`` does (the same transform,
    pre-compensation and spill high-pass); warnings are kept in
    ``synthesizer.plan.warnings`` and not issued (the public entry points issue them).

    Parameters
    ----------
    profile, duration_s, rate_hz, seed, amplitude, resolution_hz, loop, ramp_s, quantities, memory_budget_bytes,
    kurtosis, skewness, clip, rest_taper_s
        As for :func:`generate_samples`.
    workers : int
        Threads (the samples do not depend on it).
    kurtosis_model, burst_s
        As for :func:`generate_samples`.

    Returns
    -------
    (Synthesizer, bool)

    Examples
    --------
    >>> synthesizer, single = make_synthesizer(AsdProfile([20, 2000], [0.01, 0.01]), 2.0, 5120.0, seed=1)
    >>> synthesizer.plan.mode, single
    ('periodic', True)

    References
    ----------
    See :func:`generate_samples`.
    """
    names, single = parse_quantities(quantities)
    from vibsynth.generate.schedule import drive_duration_s
    from vibsynth.generate.tones import check_mixed_request

    mixed = getattr(profile, "mixed", None)
    duration_s = drive_duration_s(profile, duration_s)
    check_mixed_request(mixed, rate_hz, names, loop, profile.source or profile.name)
    bursts = check_kurtosis_model(kurtosis_model, kurtosis, skewness, clip, loop, burst_s)
    transform = None
    if not bursts and not (kurtosis is None and skewness is None and clip is None):
        # the transforms and the compensation are loaded only for a non-Gaussian drive
        from vibsynth.transforms.choice import plan_transform

        transform = plan_transform(kurtosis, skewness, clip)
    ramp = 0.0 if ramp_s is None else ramp_s
    plan = make_plan(profile, duration_s, rate_hz, amplitude=amplitude, resolution_hz=resolution_hz, loop=loop,
                     ramp_in_s=ramp, ramp_out_s=ramp, quantities=names, memory_budget_bytes=memory_budget_bytes,
                     transform=transform, rest_taper_s=rest_taper_s)
    if transform is not None:
        return nongaussian_synthesizer(profile, plan, transform, seed=seed, workers=workers, mixed=mixed)[0], single
    if bursts:
        from vibsynth.generate.modulation import burst_plan

        plan = burst_plan(plan, profile.frequency_min_hz, kurtosis, burst_s)
    return Synthesizer(plan, seed, workers, mixed=mixed), single


def nongaussian_synthesizer(profile: AsdProfile, plan: SynthesisPlan, transform=None, *, seed, workers: int = 1,
                            mixed=None):
    """Design a non-Gaussian plan and make its synthesizer; a periodic record's normals are drawn meanwhile.

    The same plan, design and samples, bit for bit, as
    :func:`vibsynth.generate.design.make_nongaussian_plan` followed by
    :class:`Synthesizer`.  The design does not depend on the seed and the
    record's standard normal draws (and, for fixed amplitudes, their
    magnitudes) do not depend on the design, so with ``workers >= 2`` a
    periodic single-channel record has them made on a second thread while the
    design runs; the lines are then finished exactly as
    :func:`vibsynth.generate.frames._draw_lines` finishes them (the amplitude
    divided by the magnitude, times the pair).  Should the design's band differ
    from the Gaussian plan's, the normals are drawn again.

    Parameters
    ----------
    profile : AsdProfile
        Target ASD, g^2/Hz.
    plan : SynthesisPlan
        The Gaussian plan of the record (as for :func:`make_nongaussian_plan`).
    transform : MemorylessTransform, optional
        The requested transform; default ``plan.transform``.
    seed : int, numpy.random.SeedSequence or numpy.random.Generator
        See :func:`vibsynth.generate.seeds.root_seed_sequence`.
    workers : int
        Threads (1: everything in the calling thread); the samples do not depend on it.
    mixed : vibsynth.profile.mixed.MixedParts, optional
        As for :class:`Synthesizer`.

    Returns
    -------
    (Synthesizer, NonGaussianDesign)
        The synthesizer (its plan has the design's warnings, not issued) and the design.

    Examples
    --------
    >>> from vibsynth.generate.plan import plan_synthesis
    >>> from vibsynth.transforms.choice import plan_transform
    >>> profile = AsdProfile([20, 40, 600, 1000], [0.01, 0.04, 0.04, 0.01])
    >>> base = plan_synthesis(profile, 4.0, 4096.0)
    >>> synthesizer, design = nongaussian_synthesizer(profile, base, plan_transform(kurtosis=5.0), seed=1, workers=2)
    >>> synthesizer.plan.transform is design.transform, synthesizer.samples().shape
    (True, (16384, 1))

    References
    ----------
    Winterstein (1988); Yamazaki & Shinozuka (1988); Shinozuka & Jan (1972); see
    :mod:`vibsynth.generate.design`.
    """
    from vibsynth.generate.design import make_nongaussian_plan

    root = root_seed_sequence(seed)
    workers = check_workers(workers)
    executor = drawn = None
    wanted = plan.transform if transform is None else transform
    if wanted is not None and workers > 1 and plan.mode == "periodic" and plan.channel_factors is None:
        from concurrent.futures import ThreadPoolExecutor

        executor = ThreadPoolExecutor(max_workers=1, thread_name_prefix="vibsynth-draws")
        drawn = executor.submit(_draw_normals, child_generator(root, PERIODIC_STREAM), plan.frame_length // 2 + 1,
                                plan._band, plan.amplitude)
    try:
        planned, design = make_nongaussian_plan(profile, plan, transform)
        synthesizer = Synthesizer(planned, root, workers, mixed=mixed)
    except BaseException:
        if drawn is not None:
            drawn.cancel()
        raise
    finally:
        if executor is not None:
            executor.shutdown(wait=False)
    synthesizer._drawn = drawn
    return synthesizer, design


#: The ways a kurtosis target is reached: a memoryless transform of the stream, or a burst envelope.
KURTOSIS_MODELS = ("transform", "bursts")


def check_kurtosis_model(kurtosis_model: str, kurtosis, skewness, clip, loop: bool, burst_s) -> bool:
    """Check the kurtosis model against the other options; True for the burst model.

    Parameters
    ----------
    kurtosis_model : {"transform", "bursts"}
    kurtosis, skewness, clip : float or None
        The non-Gaussian options (the burst model takes ``kurtosis`` alone).
    loop : bool
    burst_s : float or None
        Burst duration, s (burst model only).

    Returns
    -------
    bool

    Examples
    --------
    >>> check_kurtosis_model("bursts", 6.0, None, None, False, None)
    True

    References
    ----------
    Smallwood (2005) for the burst (product) model; Winterstein (1988) for the transform.
    """
    model = str(kurtosis_model).strip().lower()
    if model not in KURTOSIS_MODELS:
        raise InputError(f"kurtosis_model {kurtosis_model!r} must be one of {', '.join(KURTOSIS_MODELS)}",
                         "kurtosis_model")
    if model == "transform":
        if burst_s is not None:
            raise InputError("burst_s applies to the burst model; add kurtosis_model = bursts or drop burst_s", "burst_s")
        return False
    if kurtosis is None:
        raise InputError("the burst model needs a kurtosis target above 3; give kurtosis", "kurtosis")
    if skewness is not None or clip is not None:
        raise InputError("the burst model is symmetric and unclipped; drop skewness/clip or use kurtosis_model = "
                         "transform", "kurtosis_model")
    if loop:
        raise InputError("a burst envelope does not repeat seamlessly; drop the loop or use kurtosis_model = transform",
                         "kurtosis_model")
    return True


def generate_samples(
    profile: AsdProfile,
    duration_s: float | None,
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
    rest_taper_s: float | None = None,
    kurtosis_model: str = "transform",
    burst_s: float | None = None,
) -> np.ndarray:
    """A time history whose spectrum is the profile's (Gaussian, or non-Gaussian with the same spectrum).

    Parameters
    ----------
    profile : AsdProfile
        Target ASD in g^2/Hz.  Its optional mixed-mode parts
        (``profile.mixed``: tones, narrow bands, a level schedule; see
        :mod:`vibsynth.profile.mixed`) are added after the transform and the
        scale, and the schedule multiplies the sum (:mod:`vibsynth.generate.tones`).
    duration_s : float or None
        Duration in s (rounded to whole samples); None with a profile whose
        level schedule sets it (``profile.mixed.schedule``).
    rate_hz : float
        Sample rate in Hz (> 2 x the top frequency; below 2.56 x it a
        :class:`~vibsynth.errors.VibsynthWarning` is issued).
    seed : int, numpy.random.SeedSequence or numpy.random.Generator
        Same seed and options: identical samples (to the last bit on machines with
        the same instruction set; see the module docstring).
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
        Working memory for one periodic record (bytes, default 256 MiB);
        beyond it, overlap-add.  This option alone picks the mode.
    kurtosis, skewness, clip : float, optional
        A non-Gaussian drive (Pearson kurtosis, skewness, or every sample within
        ``clip`` x RMS) with its spectrum pre-compensated, exactly as
        ``vibsynth generate`` makes it (see :mod:`vibsynth.generate.design`).
    rest_taper_s : float, optional
        With velocity/displacement columns: the displacement taper at each end
        (s) that brings all three columns to rest at the first and last sample
        (default: four periods of the lowest band frequency; 0: none).  A
        ``ramp_s`` given with these columns is used as this taper.
    kurtosis_model : {"transform", "bursts"}
        How ``kurtosis`` is reached: ``transform`` (default) by a memoryless
        transform, ``bursts`` by a slowly varying random envelope
        ``x = a(t) u(t)`` whose peaks survive a resonance (see
        :mod:`vibsynth.generate.modulation`; kurtosis above 3 only).
    burst_s : float, optional
        Burst duration of the burst model, s (default from the profile's
        lowest frequency: five decay times of a Q = 10 resonance there).

    Returns
    -------
    numpy.ndarray
        Samples, shape (n,) or (n, q), float64.

    Raises
    ------
    InputError
        A parameter that cannot be used (the message names it: ``rate``,
        ``duration``, ``clip``, ``kurtosis``, ``quantities`` ...).

    Warns
    -----
    VibsynthWarning
        A rate below 2.56 x the top frequency, a coarse resolution, a
        non-Gaussian target the compensation cannot fully reach, ...

    Examples
    --------
    >>> x = generate_samples(AsdProfile([20, 2000], [0.01, 0.01]), 2.0, 5120.0, seed=1)
    >>> x.shape
    (10240,)

    References
    ----------
    Shinozuka & Jan (1972); Allen (1977); Winterstein (1988); see :mod:`vibsynth.generate.pipeline`.
    """
    synthesizer, single = make_synthesizer(
        profile, duration_s, rate_hz, seed=seed, amplitude=amplitude, resolution_hz=resolution_hz, loop=loop,
        ramp_s=ramp_s, quantities=quantities, memory_budget_bytes=memory_budget_bytes, kurtosis=kurtosis,
        skewness=skewness, clip=clip, rest_taper_s=rest_taper_s, kurtosis_model=kurtosis_model, burst_s=burst_s,
    )
    warn_all(synthesizer.plan.warnings, stacklevel=2)
    samples = synthesizer.take_record()
    return samples[:, 0] if single else samples


def iter_chunks(
    profile: AsdProfile,
    duration_s: float | None,
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
    rest_taper_s: float | None = None,
    kurtosis_model: str = "transform",
    burst_s: float | None = None,
) -> Iterator[np.ndarray]:
    """The samples of :func:`generate_samples` as consecutive chunks, in constant memory.

    The request is checked, and its warnings issued, when this is called (not
    at the first chunk).

    Parameters
    ----------
    profile, duration_s, rate_hz, seed, amplitude, resolution_hz, loop, ramp_s, quantities, memory_budget_bytes
        As for :func:`generate_samples`.
    kurtosis, skewness, clip, rest_taper_s, kurtosis_model, burst_s
        As for :func:`generate_samples`.
    chunk_samples : int
        Samples per chunk (the last may be shorter).  The samples do not
        depend on it.

    Returns
    -------
    iterator of numpy.ndarray
        Shape (m,) or (m, q), float64, as :func:`generate_samples`.

    Warns
    -----
    VibsynthWarning
        As :func:`generate_samples`.

    Examples
    --------
    >>> chunks = iter_chunks(AsdProfile([20, 2000], [0.01, 0.01]), 2.0, 5120.0, seed=1, chunk_samples=4096)
    >>> [len(c) for c in chunks]
    [4096, 4096, 2048]

    References
    ----------
    Allen (1977), overlap-add synthesis; see :mod:`vibsynth.generate.pipeline`.
    """
    synthesizer, single = make_synthesizer(
        profile, duration_s, rate_hz, seed=seed, amplitude=amplitude, resolution_hz=resolution_hz, loop=loop,
        ramp_s=ramp_s, quantities=quantities, memory_budget_bytes=memory_budget_bytes, kurtosis=kurtosis,
        skewness=skewness, clip=clip, rest_taper_s=rest_taper_s, kurtosis_model=kurtosis_model, burst_s=burst_s,
    )
    warn_all(synthesizer.plan.warnings, stacklevel=2)
    chunks = synthesizer.iter_chunks(chunk_samples)
    return (chunk[:, 0] if single else chunk for chunk in chunks)
