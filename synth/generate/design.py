"""Designing a non-Gaussian drive on the plan's grid: transform, spectral pre-compensation, high-pass retention.

A non-Gaussian drive is ``x = sigma_T g(u)``: a unit-variance Gaussian stream
``u`` (made exactly like a Gaussian drive, by random-phase inverse FFTs,
periodic or overlap-added) passed sample by sample through a memoryless
transform ``g`` (:mod:`vibsynth.transforms`) with unit-variance output, then
scaled by the target g RMS ``sigma_T``.  A memoryless transform bends the
spectrum (its Hermite expansion spreads power into self-convolutions of the
Gaussian spectrum), so the Gaussian spectrum is pre-compensated
(:func:`vibsynth.transforms.compensation.compensate_spectrum`, called here with
arrays on the plan's grid) until the predicted output spectrum matches the target.

This module is the only place where :mod:`vibsynth.generate` and
:mod:`vibsynth.transforms` meet; transforms never import the generator.

One source of truth
-------------------
:func:`nongaussian_plan` returns a plan whose ``transform`` is the transform the
spectrum was compensated for and that the pipeline applies
(``plan.transform is design.transform``); when the Hermite transform is
re-solved for the spill-over high-pass (below) the requested moments are kept in
the design only, as ``requested_moments``.

Compensation grid
-----------------
The compensation runs on the generator's own frame grid (``rate / N`` line
spacing, N the overlap-add frame length or, in periodic mode, the record
length) when N is even and at most :data:`COMPENSATION_MAX_FRAME_LENGTH`
samples.  Longer (or odd) periodic records are compensated on a grid of
:data:`COMPENSATION_MAX_FRAME_LENGTH` samples and the compensation factor
(compensated Gaussian spectrum over target, a smooth function of frequency
inside the band) is interpolated linearly onto the record's lines and
multiplied by the exact target there.  Measured on an invented 20-1000 Hz
profile at 4096 Hz, kurtosis 6 (tests/bench/bench_nongaussian.py): compensation
on grids of 2^14 to 2^22 samples gives the same predicted worst in-band
deviation (0.033 dB) and takes 0.01 s (2^14), 0.05-0.08 s (2^18), 0.2-0.4 s
(2^20) and 1.5-3 s (2^22) on a shared 2-core machine; the spectrum interpolated
from the 2^18 grid onto a 2^22-sample record differs from the one compensated
directly on it by less than 2e-6 dB on every line but the two band-edge lines
that hold half a bin's weight (0.38 and 0.20 dB there, the same from a 2^20
grid: those two take their neighbours' factor).  Interpolating from 2^18 rather
than 2^20 lines moves no line of a 2^24-sample record at 51.2 kHz by more than
1.2e-3 dB (the band-edge line; 8e-6 dB for 99.9 % of them).

The design's own repeated work is done once: the target on a compensation
grid, a compensation the pilot already made on the final grid for the final
transform, and the pilot records' phases (the same fixed-seed phases at every
pilot step; with ``workers > 1`` made on another thread while the first
compensation runs).  Pilot records are made on worker threads (``workers``) and
their power sums added in record order, so the design does not depend on the
number of threads.  The compensated spectrum is interpolated onto the record's
lines once, for the compensation the plan uses (the retention and pilot
compensations need only their own grid).

Scaling and the high-pass
-------------------------
``output_scale`` is the target g RMS: the transformed stream has unit
variance whatever its spectrum, so the drive's RMS is the target's; with
clipping every sample satisfies ``|x| <= crest_factor * sigma_T`` (the
pipeline clips again after the high-pass).  The transform's self-convolutions
reach down to 0 Hz: a kurtosis-6 drive of an invented 20-1000 Hz profile
carries about -17 dB (relative to the in-band level) of flat spill-over below
the band, a tiny share of the variance (0.05 %) that, integrated twice, asks
the shaker for metres of displacement.  So the plan carries the spill-over
high-pass (:class:`vibsynth.generate.highpass.SpillHighpass`) for the pipeline
to apply after the transform.  The high-pass also removes the share of the
transform's second- and third-order terms that lies below the band, which would
lower the skewness and kurtosis by a few percent; the Hermite transform is
therefore solved for pre-corrected targets (:func:`design_nongaussian`,
:func:`vibsynth.transforms.compensation.highpass_moment_retention`).

Velocity and displacement columns are refused for non-Gaussian drives: they
are integrated in the frequency domain from the Gaussian lines, and a
transformed acceleration does not have Gaussian lines.

References
----------
.. [1] S. R. Winterstein, "Nonlinear vibration models for extremes and
       fatigue", J. Eng. Mech. 114(10), 1988.
.. [2] F. Yamazaki and M. Shinozuka, "Digital generation of non-Gaussian
       stochastic fields", J. Eng. Mech. 114(7), 1988.
.. [3] M. D. Shields, G. Deodatis and P. Bocchini, "A simple and efficient
       methodology to approximate a general non-Gaussian stationary
       stochastic process by a translation process", Probab. Eng. Mech.
       26(4), 2011.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from vibsynth.errors import InputError, OutOfRangeError
from vibsynth.generate._threads import available_threads, check_workers, ordered_map
from vibsynth.generate.highpass import SpillHighpass
from vibsynth.generate.plan import SynthesisPlan, warn_all
from vibsynth.profile.asd import AsdProfile
from vibsynth.transforms.base import MemorylessTransform
from vibsynth.transforms.choice import transform_family, transform_record
from vibsynth.transforms.compensation import CompensationResult, compensate_spectrum, highpass_moment_retention
from vibsynth.transforms.hermite import solve_cubic_hermite

__all__ = [
    "COMPENSATION_MAX_FRAME_LENGTH",
    "NonGaussianDesign",
    "design_nongaussian",
    "make_nongaussian_plan",
    "nongaussian_plan",
]

#: Longest frame (samples) the spectral compensation runs on directly; longer or
#: odd-length periodic records are compensated on a grid of this many samples
#: and the compensation factor is interpolated (see the module docstring; 2^20
#: before issue 15: the same accuracy at a quarter of the planning time).
COMPENSATION_MAX_FRAME_LENGTH = 1 << 18

#: Below this share of the predicted output variance, spill-over above the
#: band is not mentioned in warnings (it is always recorded).
_SPILL_NOTE_FRACTION = 0.01

#: Largest frame (samples) of the grid the high-pass's moment retention is computed on.
_RETENTION_FRAME_LENGTH = 1 << 18


@dataclass(frozen=True)
class NonGaussianDesign:
    """A non-Gaussian drive's transform and pre-compensated Gaussian spectrum.

    Attributes
    ----------
    transform : MemorylessTransform
        The unit-variance memoryless transform applied (the plan's ``transform``).
    line_spectrum : numpy.ndarray
        Compensated one-sided spectrum of the unit-variance Gaussian stream on
        the plan's grid ``k rate / N``, 1/Hz (sums to 1 / df).
    output_scale_g : float
        g per unit of the transformed stream: the target g RMS.
    compensation : CompensationResult
        The compensation on its own grid (predicted ASD, residuals, verdict).
    compensation_frame_length : int
        Samples of the frame whose grid the compensation ran on.
    rate_hz : float
        Sample rate, Hz.
    interpolated : bool
        True when the compensation grid is not the plan's grid and the
        compensation factor was interpolated onto it.
    band_hz : tuple of float
        The target band (lowest, highest breakpoint frequency), Hz.
    highpass : SpillHighpass or None
        The spill-over high-pass (None when the frame is too short for one).
    requested_moments : tuple of float or None
        (skewness, kurtosis) asked for, when the Hermite transform was solved
        for targets pre-corrected for the high-pass; else None.
    moment_retention : tuple of float or None
        (p2, p3) from :func:`highpass_moment_retention`, else None.

    Examples
    --------
    See :func:`nongaussian_plan`, which makes one.

    References
    ----------
    See the module docstring.
    """

    transform: MemorylessTransform
    line_spectrum: np.ndarray
    output_scale_g: float
    compensation: CompensationResult
    compensation_frame_length: int
    rate_hz: float
    interpolated: bool
    band_hz: tuple
    highpass: SpillHighpass | None = None
    requested_moments: tuple | None = None
    moment_retention: tuple | None = None

    @property
    def crest_factor_limit(self) -> float | None:
        """Peak / RMS bound of the drive (clip family), else None."""
        return self.transform.peak_limit

    @property
    def peak_limit_g(self) -> float | None:
        """Largest possible |sample| in g (clip family): crest factor x target g RMS; else None."""
        limit = self.crest_factor_limit
        return None if limit is None else limit * self.output_scale_g

    def transform_block(self) -> dict:
        """The sidecar's ``transform`` block: :func:`transform_record` plus the output scaling.

        Returns
        -------
        dict
            :func:`transform_record`'s keys, ``requested_skewness`` and
            ``requested_kurtosis`` with ``highpass_retention`` (p2, p3) when the
            transform was pre-corrected for the spill-over high-pass,
            ``output_scale_g`` (g per unit of the transformed stream: the target
            g RMS) and ``peak_limit_g`` (clip family: the largest possible
            |sample|, crest factor x target g RMS; None otherwise).

        References
        ----------
        Winterstein (1988); Van Vleck & Middleton (1966).
        """
        block = transform_record(self.transform)
        if self.requested_moments is not None:
            block["requested_skewness"], block["requested_kurtosis"] = self.requested_moments
        if self.moment_retention is not None:
            block["highpass_retention"] = {"second_order": self.moment_retention[0],
                                           "third_order": self.moment_retention[1]}
            block["note"] = ("skewness and kurtosis above are the transform's own; the spill-over high-pass keeps "
                             "the shares highpass_retention of its second- and third-order terms, so they were "
                             "solved for skewness / p2 and 3 + (kurtosis - 3) / p3 to give the requested values")
        block["output_scale_g"] = float(self.output_scale_g)
        block["peak_limit_g"] = self.peak_limit_g
        return block

    def spill_fractions(self) -> tuple[float, float]:
        """Shares of the predicted output variance below and above the band (dimensionless)."""
        result = self.compensation
        predicted = np.maximum(result.predicted_asd_g2_per_hz, 0.0)
        frequencies = np.arange(predicted.size) * result.df_hz
        total = float(np.sum(predicted))
        if not total > 0:
            return 0.0, 0.0
        low, high = self.band_hz
        below = float(np.sum(predicted[frequencies < low])) / total
        above = float(np.sum(predicted[frequencies > high])) / total
        return below, above

    def worst_in_band(self) -> tuple[float, float]:
        """Worst predicted in-band deviation from the target (dB, signed) and its frequency (Hz)."""
        residual = self.compensation.residual_db
        band = np.isfinite(residual)
        index = int(np.flatnonzero(band)[np.argmax(np.abs(residual[band]))])
        return float(residual[index]), index * self.compensation.df_hz

    def compensation_record(self) -> dict:
        """The compensation as plain data (the sidecar's ``compensation`` block).

        Returns
        -------
        dict
            ``method``, ``grid_frame_length`` (samples), ``grid_resolution_hz``,
            ``grid_lines``, ``interpolated``, ``iterations``, ``converged``,
            ``residual_relative`` (RMS over target lines of predicted/target - 1),
            ``shape_residual_relative``, ``worst_in_band_deviation_db`` (signed,
            predicted) and ``worst_in_band_deviation_frequency_hz``,
            ``max_abs_residual_db``, ``out_of_band_fraction``,
            ``below_band_fraction``, ``above_band_fraction`` (shares of the
            predicted output variance before the spill-over high-pass),
            ``spill_highpass`` (its edges and method, or None), ``achievable``
            and ``description``.

        References
        ----------
        Yamazaki & Shinozuka (1988); Shields, Deodatis & Bocchini (2011).
        """
        result = self.compensation
        worst_db, worst_hz = self.worst_in_band()
        below, above = self.spill_fractions()
        return {
            "method": "iterative spectral correction S_G <- S_G (S_T / S_NG)^beta through the Hermite correlation "
            "map, started from the per-lag inverse of the map (Yamazaki & Shinozuka 1988; Shields, Deodatis & "
            "Bocchini 2011)",
            "grid_frame_length": int(self.compensation_frame_length),
            "grid_resolution_hz": float(result.df_hz),
            "grid_lines": int(result.target_asd_g2_per_hz.size),
            "interpolated": bool(self.interpolated),
            "iterations": int(result.iterations),
            "converged": bool(result.converged),
            "residual_relative": float(result.residual_relative),
            "shape_residual_relative": float(result.shape_residual_relative),
            "worst_in_band_deviation_db": worst_db,
            "worst_in_band_deviation_frequency_hz": worst_hz,
            "max_abs_residual_db": float(result.max_abs_residual_db),
            "out_of_band_fraction": float(result.out_of_band_fraction),
            "below_band_fraction": below,
            "above_band_fraction": above,
            "spill_highpass": None if self.highpass is None else self.highpass.to_dict(),
            "achievable": bool(result.achievable),
            "description": result.description,
        }

    def warnings(self) -> list[str]:
        """Advisory one-line messages (not achievable; spill-over outside the band)."""
        messages = []
        result = self.compensation
        if not result.achievable:
            worst_db, worst_hz = self.worst_in_band()
            messages.append(
                f"the non-Gaussian transform's spill-over cannot be fully compensated: predicted worst in-band "
                f"deviation {worst_db:+.2f} dB at {worst_hz:g} Hz, {100 * result.out_of_band_fraction:.1f} % of the "
                "variance outside the band (steep band edges or deep notches); see the sidecar's compensation block"
            )
        below, above = self.spill_fractions()
        if self.highpass is None and below > 0:
            messages.append(
                f"the frame is too short to filter the transform's spill-over below {self.band_hz[0]:g} Hz "
                f"({100 * below:.2g} % of the variance, down to 0 Hz): the drive asks for more displacement than "
                "the profile; use the default resolution"
            )
        if above >= _SPILL_NOTE_FRACTION:
            messages.append(
                f"the non-Gaussian transform puts {100 * above:.1f} % of the variance above the band "
                f"{self.band_hz[1]:g} Hz (predicted); the rig sees it, the ASD check does not judge it"
            )
        return messages


def _compensation_frame_length(plan: SynthesisPlan) -> int:
    frame = plan.frame_length
    if frame % 2 == 0 and frame <= COMPENSATION_MAX_FRAME_LENGTH:
        return frame
    return min(COMPENSATION_MAX_FRAME_LENGTH, 1 << max(frame - 1, 1).bit_length())


class _DesignMemo:
    """Quantities one design computes more than once, kept for the length of one design call.

    The retention grid, the pilot steps and the final compensation often share a
    grid (and, when the pilot accepts its first transform, a transform too); the
    pilot records of every step draw the same phases.  Each value is the one a
    fresh computation would give, bit for bit.
    """

    def __init__(self):
        self.targets: dict = {}
        self.compensations: dict = {}
        self.phasors: dict = {}


def _compensate_on_grid(profile: AsdProfile, plan: SynthesisPlan, transform, options: dict, frame: int | None = None,
                        memo: _DesignMemo | None = None):
    frame = _compensation_frame_length(plan) if frame is None else int(frame)
    try:
        key = (frame, transform, tuple(sorted(options.items())))
        hash(key)
    except TypeError:  # an unhashable option or transform: no reuse
        key = None
    if memo is not None and key is not None and key in memo.compensations:
        return memo.compensations[key]
    found = _compensate_on_grid_once(profile, plan, transform, options, frame, memo)
    if memo is not None and key is not None:
        memo.compensations[key] = found
    return found


def _compensate_on_grid_once(profile: AsdProfile, plan: SynthesisPlan, transform, options: dict, frame: int,
                             memo: _DesignMemo | None):
    rate = plan.rate_hz
    df = rate / frame
    exact_grid = frame == plan.frame_length
    if exact_grid:
        target = np.array(plan.line_spectrum, dtype=float)
    elif memo is not None and frame in memo.targets:
        target = memo.targets[frame].copy()
    else:
        target = profile.evaluate(np.arange(frame // 2 + 1) * df)
        target[0] = 0.0
        target[-1] = 0.0
        if memo is not None:
            memo.targets[frame] = target.copy()
    if not np.any(target > 0):
        raise InputError(
            f"no line of the {df:.4g} Hz compensation grid falls inside the band "
            f"{profile.frequency_min_hz:g}-{profile.frequency_max_hz:g} Hz; use a finer resolution",
            "resolution",
        )
    result = compensate_spectrum(target, df, transform, **options)
    return result, frame, exact_grid


def _record_spectrum(plan: SynthesisPlan, result: CompensationResult, frame: int, exact_grid: bool) -> np.ndarray:
    """The compensated spectrum on the record's grid (read-only, ``sum * df = 1``), from a compensation on ``frame``.

    Made only for the compensation the plan uses: the retention and pilot
    compensations need their Gaussian spectrum on their own grid alone.
    """
    if exact_grid:
        spectrum = np.array(result.gaussian_psd_per_hz, dtype=float)
        inside = None
    else:
        target = result.target_asd_g2_per_hz
        band = target > 0
        factor = result.gaussian_psd_per_hz[band] / target[band]
        coarse_hz = np.flatnonzero(band) * (plan.rate_hz / frame)
        lo, hi = plan._band  # every non-zero line of the plan's spectrum
        inside = lo + np.flatnonzero(np.asarray(plan.line_spectrum)[lo:hi] > 0)
        spectrum = np.array(plan.line_spectrum, dtype=float)
        spectrum[inside] *= np.interp(inside * plan.resolution_hz, coarse_hz, factor)
    total = float(np.sum(spectrum)) * plan.resolution_hz
    if not (math.isfinite(total) and total > 0):
        raise InputError("the compensated spectrum has no power on the record's grid; use a finer resolution", "resolution")
    if inside is None:
        spectrum /= total
    else:  # every other line is a zero, which the division keeps as it is
        spectrum[inside[0] : inside[-1] + 1] /= total
    spectrum.setflags(write=False)
    return spectrum


#: Samples of the pilot records that check a Hermite drive's moments after the high-pass.
_PILOT_SAMPLES = 1 << 21
#: The pilot re-solves the transform when its kurtosis misses the target by more than this share
#: of the excess (or its skewness by more than this share of the target plus 0.01).
_PILOT_TOLERANCE = 0.02
#: At most this many fixed-point steps.
_PILOT_STEPS = 3


def _pilot_phasors(frame: int, count: int, memo: _DesignMemo | None = None) -> list:
    """Unit phasors ``exp(2 pi i phi)`` of the pilot records' lines (fixed seed; the same at every pilot step)."""
    key = (frame, count)
    if memo is not None and key in memo.phasors:
        found = memo.phasors[key]
        if not isinstance(found, list):  # made ahead on another thread (design_nongaussian)
            found = memo.phasors[key] = found.result()
        return found
    rng = np.random.default_rng(0x5EED)
    phasors = [np.exp(2j * np.pi * rng.random(frame // 2 + 1)) for _ in range(count)]
    if memo is not None:
        memo.phasors[key] = phasors
    return phasors


def _pilot_moments(gaussian_psd, frame: int, transform, response, samples: int = _PILOT_SAMPLES,
                   memo: _DesignMemo | None = None, workers: int = 1):
    """Skewness and Pearson kurtosis of ``highpass(g(u))`` over pilot records (fixed seed, fixed amplitudes).

    The records are made on up to ``workers`` threads and their power sums added
    in record order, so the result does not depend on the number of threads.
    """
    amplitude = np.sqrt(np.asarray(gaussian_psd, dtype=float))
    count = max(1, samples // frame)
    phasors = _pilot_phasors(frame, count, memo)

    def power_sums(phasor):
        lines = amplitude * phasor
        lines[0] = lines[-1] = 0.0
        u = np.fft.irfft(lines, n=frame)
        u /= np.std(u)
        y = np.fft.irfft(np.fft.rfft(transform.apply(u)) * response, n=frame)
        # products, not powers: rounded the same on every machine (numpy's float power differs in the
        # last bit between CPUs with and without AVX-512), and a tenth of the time
        square = y * y
        sums = [np.sum(y), np.sum(square)]
        np.multiply(y, square, out=y)
        sums.append(np.sum(y))
        np.multiply(square, square, out=square)
        sums.append(np.sum(square))
        return sums

    threads = max(1, min(int(workers), count))
    sums = np.zeros(5)
    for powers in ordered_map(power_sums, phasors, threads, threads):
        sums[0] += frame  # the sum of y**0 over the record, exactly
        for k in range(1, 5):
            sums[k] += powers[k - 1]
    m = sums[1] / sums[0]
    m2 = sums[2] / sums[0] - m * m
    m3 = sums[3] / sums[0] - 3 * m * sums[2] / sums[0] + 2 * m**3
    m4 = sums[4] / sums[0] - 4 * m * sums[3] / sums[0] + 6 * m * m * sums[2] / sums[0] - 3 * m**4
    return m3 / m2**1.5, m4 / m2**2


def _pilot_corrected(profile, plan, applied, requested, highpass, options, frame, memo=None, workers=1):
    """The transform re-solved once so that pilot records, high-passed, have the requested moments.

    The leading-order retention (:func:`highpass_moment_retention`) misses
    narrow bands, where the high-pass removes a large share of the transform's
    difference-frequency terms and the second-order term's share of the
    kurtosis (one octave 200-400 Hz at 1024 Hz: kurtosis 5.5-5.9 for 6, and
    2.70 for 3 with skewness 0.5 alone).  Pilot records of the compensated
    spectrum are transformed and high-passed exactly as the drive, and the
    targets moved by the miss (fixed-point steps, at most :data:`_PILOT_STEPS`); kept when the miss is
    within :data:`_PILOT_TOLERANCE`.  A symmetric target's pilot skewness is
    sampling noise: it neither moves the target nor asks for another step.
    """
    skewness, kurtosis = requested
    response = None
    for _ in range(_PILOT_STEPS):
        result, grid, _ = _compensate_on_grid(profile, plan, applied, options, frame, memo)
        if response is None:
            response = highpass.record_response(grid)
        measured_s, measured_k = _pilot_moments(result.gaussian_psd_per_hz, grid, applied, response, memo=memo,
                                                workers=workers)
        if skewness == 0.0:  # a symmetric transform stays symmetric: the pilot's skewness is only noise
            measured_s = 0.0
        if (abs(measured_k - kurtosis) <= _PILOT_TOLERANCE * max(abs(kurtosis - 3.0), 0.5)
                and abs(measured_s - skewness) <= _PILOT_TOLERANCE * abs(skewness) + 0.01):
            break
        _, _, applied_s, applied_k = applied.moments()
        try:
            applied = solve_cubic_hermite(applied_s + (skewness - measured_s), applied_k + (kurtosis - measured_k))
        except OutOfRangeError:
            break
    return applied


def design_nongaussian(profile: AsdProfile, plan: SynthesisPlan, transform, *, correct_for_highpass: bool = True,
                       workers: int | None = None, **compensation_options) -> NonGaussianDesign:
    """Pre-compensate the Gaussian spectrum of a planned record for a memoryless transform.

    With a Hermite transform and a spill-over high-pass, the high-pass removes
    a small share of the transform's second- and third-order terms (their
    power below the band) and so lowers the skewness and kurtosis slightly
    (about 1 % and 2.5 % for the invented 20-1000 Hz profile at kurtosis 6 and
    skewness 0.5).  The transform is then solved for pre-corrected targets,
    ``skewness / p2`` and ``3 + (kurtosis - 3) / p3``
    (:func:`highpass_moment_retention`), and the spectrum compensated again for
    it; the requested moments are kept in the design.  That correction is of
    leading order: for narrow bands (one octave) pilot records of the
    compensated spectrum, transformed and high-passed as the drive, then move
    the targets by what they still miss (a few fixed-point steps).

    Parameters
    ----------
    profile : AsdProfile
        Target ASD, g^2/Hz.
    plan : SynthesisPlan
        The Gaussian plan of the record (its grid: ``plan.rate_hz``,
        ``plan.frame_length``; its line spectrum is the target on that grid).
    transform : HermiteTransform or ClipTransform
        Unit-variance memoryless transform (see :func:`plan_transform`).
    correct_for_highpass : bool
        Pre-correct Hermite targets for the high-pass (default True).
    workers : int, optional
        Threads that make the pilot records (default: the CPUs this process
        may run on).  The design does not depend on it, bit for bit.
    **compensation_options
        Passed to :func:`vibsynth.transforms.compensation.compensate_spectrum` (``beta``,
        ``tolerance``, ``max_iterations``, ...).

    Returns
    -------
    NonGaussianDesign

    Examples
    --------
    >>> from vibsynth.generate.plan import plan_synthesis
    >>> from vibsynth.transforms.choice import plan_transform
    >>> profile = AsdProfile([20, 40, 600, 1000], [0.01, 0.04, 0.04, 0.01])
    >>> design = design_nongaussian(profile, plan_synthesis(profile, 4.0, 4096.0), plan_transform(kurtosis=5.0))
    >>> design.compensation.achievable
    True

    References
    ----------
    .. [1] F. Yamazaki and M. Shinozuka, "Digital generation of non-Gaussian
           stochastic fields", J. Eng. Mech. 114(7), 1988.
    .. [2] M. D. Shields, G. Deodatis and P. Bocchini, Probab. Eng. Mech.
           26(4), 2011.
    .. [3] S. R. Winterstein, "Nonlinear vibration models for extremes and
           fatigue", J. Eng. Mech. 114(10), 1988.
    """
    transform_family(transform)
    workers = available_threads() if workers is None else check_workers(workers)
    memo = _DesignMemo()
    highpass = SpillHighpass.for_plan(plan, profile.frequency_min_hz)
    applied, requested, retention = transform, None, None
    if (correct_for_highpass and highpass is not None and transform.family == "hermite"
            and not transform.is_identity):
        # the retained shares are integrals over the whole spectrum: a coarser grid gives them to
        # many digits and keeps the planning of long periodic records fast
        frame = min(_compensation_frame_length(plan), _RETENTION_FRAME_LENGTH)
        if workers > 1:  # the pilot records' phases do not depend on the compensation: made meanwhile
            from concurrent.futures import ThreadPoolExecutor

            count = max(1, _PILOT_SAMPLES // frame)
            executor = ThreadPoolExecutor(max_workers=1, thread_name_prefix="vibsynth-pilot")
            memo.phasors[(frame, count)] = executor.submit(_pilot_phasors, frame, count)
            executor.shutdown(wait=False)
        first, frame, _ = _compensate_on_grid(profile, plan, transform, compensation_options, frame, memo)
        p2, p3 = highpass_moment_retention(first.gaussian_psd_per_hz, highpass.record_response(frame))
        _, _, skewness, kurtosis = transform.moments()
        retention = (p2, p3)
        try:
            corrected = solve_cubic_hermite(skewness / p2 if skewness else 0.0, 3.0 + (kurtosis - 3.0) / p3)
        except OutOfRangeError:
            corrected = None  # the corrected target is beyond reach: keep the requested transform
        if corrected is not None:
            applied, requested = corrected, (float(skewness), float(kurtosis))
            applied = _pilot_corrected(profile, plan, applied, (float(skewness), float(kurtosis)), highpass,
                                       compensation_options, frame, memo, workers)
    result, frame, exact_grid = _compensate_on_grid(profile, plan, applied, compensation_options, None, memo)
    spectrum = _record_spectrum(plan, result, frame, exact_grid)
    return NonGaussianDesign(
        transform=applied,
        line_spectrum=spectrum,
        output_scale_g=profile.grms,
        compensation=result,
        compensation_frame_length=frame,
        rate_hz=plan.rate_hz,
        interpolated=not exact_grid,
        band_hz=(profile.frequency_min_hz, profile.frequency_max_hz),
        highpass=highpass,
        requested_moments=requested,
        moment_retention=retention,
    )


def nongaussian_plan(profile: AsdProfile, plan: SynthesisPlan, transform=None, **compensation_options):
    """A plan turned non-Gaussian: compensated lines, the applied transform, its high-pass and the output scale.

    Parameters
    ----------
    profile : AsdProfile
        Target ASD, g^2/Hz.
    plan : SynthesisPlan
        Plan from :func:`vibsynth.generate.plan.plan_synthesis` (acceleration
        only; any mode, ramps and loop); its grid is used and its line spectrum
        is the target on that grid.
    transform : MemorylessTransform, optional
        The requested transform (from :func:`vibsynth.transforms.choice.plan_transform`);
        default ``plan.transform``.
    **compensation_options
        Passed to :func:`vibsynth.transforms.compensation.compensate_spectrum`;
        ``workers`` (threads for the pilot records, default the CPUs this
        process may run on; the design does not depend on it) to
        :func:`design_nongaussian`.

    Returns
    -------
    (SynthesisPlan, NonGaussianDesign)
        The plan whose ``line_spectrum`` is the compensated Gaussian spectrum,
        ``transform`` the transform that spectrum was compensated for (the one
        applied: ``plan.transform is design.transform``), ``spill_highpass``
        the design's high-pass and ``output_scale`` the target g RMS, and the
        design (for the sidecar and reports).  Make the samples with
        :class:`vibsynth.generate.pipeline.Synthesizer`.

    Raises
    ------
    InputError
        Velocity/displacement columns were asked for (their integration needs a
        Gaussian record), or no transform.

    Warns
    -----
    VibsynthWarning
        Each of the design's warnings (not achievable; spill-over outside the band).

    Examples
    --------
    >>> from vibsynth.generate.plan import plan_synthesis
    >>> from vibsynth.transforms.choice import plan_transform
    >>> profile = AsdProfile([20, 40, 600, 1000], [0.01, 0.04, 0.04, 0.01])
    >>> plan, design = nongaussian_plan(profile, plan_synthesis(profile, 4.0, 4096.0), plan_transform(kurtosis=5.0))
    >>> plan.transform is design.transform
    True

    References
    ----------
    Winterstein (1988); Yamazaki & Shinozuka (1988); Shields, Deodatis &
    Bocchini (2011).
    """
    planned, design = make_nongaussian_plan(profile, plan, transform, **compensation_options)
    warn_all(design.warnings(), stacklevel=3)
    return planned, design


def make_nongaussian_plan(profile: AsdProfile, plan: SynthesisPlan, transform=None, **compensation_options):
    """:func:`nongaussian_plan` without issuing warnings (they are in ``plan.warnings``).

    Examples
    --------
    >>> from vibsynth.generate.plan import plan_synthesis
    >>> from vibsynth.transforms.choice import plan_transform
    >>> profile = AsdProfile([20, 40, 600, 1000], [0.01, 0.04, 0.04, 0.01])
    >>> plan, _ = make_nongaussian_plan(profile, plan_synthesis(profile, 4.0, 4096.0), plan_transform(clip=3.0))
    >>> plan.transform.family
    'clip'

    References
    ----------
    See the module docstring.
    """
    transform = plan.transform if transform is None else transform
    if transform is None:
        raise InputError("a non-Gaussian plan needs a transform (kurtosis, skewness or clip)", "transform")
    design = design_nongaussian(profile, plan, transform, **compensation_options)
    planned = dataclasses.replace(
        plan,
        line_spectrum=design.line_spectrum,
        transform=design.transform,
        output_scale=design.output_scale_g,
        warnings=tuple(plan.warnings) + tuple(design.warnings()),
        spill_highpass=design.highpass,
    )
    return planned, design
