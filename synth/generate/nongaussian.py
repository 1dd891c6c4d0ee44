"""Non-Gaussian drives that keep their spectrum: transform choice, spectral pre-compensation, plan.

A non-Gaussian drive is ``x = sigma_T g(u)``: a unit-variance Gaussian stream
``u`` (made exactly like a Gaussian drive, by random-phase inverse FFTs,
periodic or overlap-added) passed sample by sample through a memoryless
transform ``g`` with unit-variance output, then scaled by the target g RMS
``sigma_T``.  Two families of ``g``:

``hermite``
    Winterstein's cubic Hermite model solved exactly for a target skewness and
    kurtosis (:func:`vibsynth.transforms.hermite.solve_cubic_hermite`): the softening form
    for kurtosis >= 3, the inverse-polynomial (hardening) form below 3.
``clip``
    Hard clipping at ``c`` Gaussian sigma, rescaled to unit variance, with
    ``c`` solved so that the peak is the requested multiple of the output
    RMS (:func:`vibsynth.transforms.clipping.solve_clip_level`).

A memoryless transform bends the spectrum (its Hermite expansion spreads
power into self-convolutions of the Gaussian spectrum), so the Gaussian
spectrum is pre-compensated (:func:`vibsynth.transforms.compensation.compensate_spectrum`)
until the predicted output spectrum matches the target.

Where the transform acts
------------------------
After overlap-add, on the Gaussian stream, never per frame: overlap-added
non-Gaussian frames would dilute the kurtosis towards 3.
:class:`NonGaussianSynthesizer` reads the Gaussian stream from a
:class:`vibsynth.generate.pipeline.Synthesizer` in hop-aligned blocks, transforms them,
high-passes them (below), scales and ramps; the record stays a deterministic
function of (seed, options), independent of the chunk size it is read in.  (The
plan also carries the transform as the synthesizer's ``transform`` hook, which
gives the transformed stream without the high-pass.)

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
deviation (0.033 dB) and takes 0.01 s (2^14), 0.06 s (2^18), 0.55 s (2^20) and
3.3 s (2^22, beyond the cap); the spectrum interpolated from the 2^20 grid onto
a 2^22-sample record differs from the one compensated directly on it by less
than 1e-3 dB on every line.

Scaling
-------
``output_scale`` is the target g RMS: the transformed stream has unit
variance whatever its spectrum, so the drive's RMS is the target's; with
clipping every sample satisfies ``|x| <= crest_factor * sigma_T``.  Ramps
(fade-in/out) are applied after the transform and the scaling.

Spill-over below the band
-------------------------
The transform's self-convolutions reach down to 0 Hz: a kurtosis-6 drive of an
invented 20-1000 Hz profile carries about -17 dB (relative to the in-band
level) of flat spill-over from 20 Hz down to the record's lowest line.  It is a
tiny share of the variance (0.05 %) but, integrated twice, it asks the shaker
for displacements of metres instead of the profile's fraction of a millimetre.
So the transformed stream passes a zero-phase high-pass (:class:`SpillHighpass`)
before scaling: its pass band starts at 0.95 x the lowest band frequency
(ripple below 0.01 dB), it is zero at 0 Hz (and quadratic near it), and it
attenuates by 60 dB or more below its stop edge.  Periodic records are filtered
exactly in the frequency domain (lines below the stop edge set to zero,
raised-cosine transition); overlap-add records by a Kaiser-windowed FIR
(half-length N/4, overlap-save on hop-aligned windows of N samples), so the
samples stay independent of the chunk size.  A clipped drive is clipped again
at its limit after the filter, so the peak bound holds exactly.  Spill-over above
the band is left in (it does not load the stroke) and recorded.

The high-pass also removes the share of the transform's second- and
third-order terms that lies below the band, which would lower the skewness and
kurtosis by a few percent; the Hermite transform is therefore solved for
pre-corrected targets (:func:`design_nongaussian`,
:func:`highpass_moment_retention`).

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
.. [4] J. H. Van Vleck and D. Middleton, "The spectrum of clipped noise",
       Proc. IEEE 54(1), 1966.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np
import scipy.fft

from vibsynth.transforms.clipping import ClipTransform, solve_clip_level
from vibsynth.transforms.compensation import CompensationResult, compensate_spectrum
from vibsynth.errors import InputError, OutOfRangeError
from vibsynth.transforms.hermite import (
    HermiteTransform,
    reachable_kurtosis_range,
    solve_cubic_hermite,
)
from vibsynth.profile.asd import AsdProfile
from vibsynth.generate.pipeline import (  # noqa: F401 - the spill-over high-pass is defined with the synthesis and re-exported
    _HIGHPASS_DESIGN_DB,
    HIGHPASS_ATTENUATION_DB,
    HIGHPASS_PASS_FRACTION,
    HIGHPASS_STOP_FRACTION,
    MAX_HIGHPASS_BLOCK,
    SpillHighpass,
    RecordAccess,
    SynthesisPlan,
    Synthesizer,
    frame_workers,
    ordered_map,
    raised_cosine_ramp,
)

__all__ = [
    "COMPENSATION_MAX_FRAME_LENGTH",
    "PERIODIC_BYTES_PER_SAMPLE",
    "NonGaussianDesign",
    "NonGaussianSynthesizer",
    "SpillHighpass",
    "StreamTransform",
    "design_nongaussian",
    "gaussian_level",
    "highpass_moment_retention",
    "nongaussian_plan",
    "plan_transform",
    "transform_record",
]

#: Longest frame (samples) the spectral compensation runs on directly; longer or
#: odd-length periodic records are compensated on a grid of this many samples
#: and the compensation factor is interpolated (see the module docstring).
COMPENSATION_MAX_FRAME_LENGTH = 1 << 20

#: Below this share of the predicted output variance, spill-over above the
#: band is not mentioned in warnings (it is always recorded).
_SPILL_NOTE_FRACTION = 0.01

#: Working bytes per sample of a non-Gaussian periodic record (planning included): peak RSS
#: growth measured at 54 bytes/sample for 2^23 samples (numpy 2.4, scipy 1.17), against
#: :data:`vibsynth.generate.pipeline.PERIODIC_BYTES_PER_SAMPLE` for a Gaussian one; the drive job
#: scales the memory budget by their ratio before planning.
PERIODIC_BYTES_PER_SAMPLE = 56

#: Largest frame (samples) of the grid the high-pass's moment retention is computed on.
_RETENTION_FRAME_LENGTH = 1 << 18



# ---------------------------------------------------------------------------
# Choosing the transform
# ---------------------------------------------------------------------------


def _optional_number(value, name: str) -> float | None:
    if value is None:
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{value!r} is not a number", f"--{name}") from None
    if not math.isfinite(number):
        raise InputError(f"{value!r} must be a finite number", f"--{name}")
    return number


def plan_transform(kurtosis: float | None = None, skewness: float | None = None, clip: float | None = None):
    """The memoryless transform that gives the requested amplitude distribution.

    Parameters
    ----------
    kurtosis : float, optional
        Target Pearson kurtosis of the drive (3 for a Gaussian; dimensionless).
        Values above 3 use the softening cubic Hermite form, values below 3 the
        hardening (inverse-polynomial) form.
    skewness : float, optional
        Target skewness (dimensionless).  Given alone, the kurtosis stays at 3.
    clip : float, optional
        Crest factor limit: every sample of the drive within ``clip`` times its
        RMS (dimensionless, 1 < clip <= 10).  Cannot be combined with
        ``kurtosis`` or ``skewness`` (clipping sets the kurtosis itself).

    Returns
    -------
    HermiteTransform, ClipTransform or None
        A unit-variance transform of a standard Gaussian, or None when nothing
        non-Gaussian was asked for (or kurtosis 3 and skewness 0).

    Raises
    ------
    InputError
        ``clip`` combined with ``kurtosis``/``skewness``, or a value that is
        not a finite number.
    OutOfRangeError
        A target no monotone transform reaches; the message states the
        reachable range (e.g. kurtosis 3 to 46.2 with the softening form and
        1.29 to 3 with the hardening form at skewness 0; crest factors above 1
        and up to 10).

    References
    ----------
    .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes and
           fatigue", J. Eng. Mech. 114(10), 1988 (cubic Hermite model).
    .. [2] J. H. Van Vleck and D. Middleton, "The spectrum of clipped noise",
           Proc. IEEE 54(1), 1966 (clipped Gaussian).
    """
    kurtosis = _optional_number(kurtosis, "kurtosis")
    skewness = _optional_number(skewness, "skewness")
    clip = _optional_number(clip, "clip")
    if clip is not None:
        if kurtosis is not None or skewness is not None:
            given = " and ".join(n for n, v in (("--kurtosis", kurtosis), ("--skewness", skewness)) if v is not None)
            raise InputError(
                f"--clip cannot be combined with {given}: clipping at {clip:g} x RMS sets the kurtosis itself "
                "(and keeps the skewness at 0); give either --clip or --kurtosis/--skewness",
                "--clip",
            )
        try:
            return solve_clip_level(clip)
        except OutOfRangeError as error:
            raise OutOfRangeError(
                f"{clip:g} x RMS cannot be reached by clipping: the crest factor (peak/RMS) must be above 1 "
                "and at most 10 (beyond 10 a Gaussian record never reaches the clip level; omit --clip)",
                "--clip",
            ) from error
    if kurtosis is None and skewness is None:
        return None
    skew = 0.0 if skewness is None else skewness
    kurt = 3.0 if kurtosis is None else kurtosis
    if skew == 0.0 and kurt == 3.0:
        return None
    try:
        return solve_cubic_hermite(skew, kurt)
    except OutOfRangeError as error:
        option = "--kurtosis" if kurtosis is not None else "--skewness"
        bound = 1.0 + skew * skew
        reach = reachable_kurtosis_range(skew).describe()
        if kurt <= bound:
            reach = f"every distribution has kurtosis > 1 + skewness^2 = {bound:g}; {reach}"
        raise OutOfRangeError(
            f"kurtosis {kurt:g} with skewness {skew:g} is out of reach of a monotone cubic Hermite transform: {reach}",
            option,
        ) from error


def transform_family(transform) -> str:
    """The family name of a transform, as sidecars record it.

    Parameters
    ----------
    transform : HermiteTransform or ClipTransform

    Returns
    -------
    str
        ``"hermite"`` (cubic Hermite, either form) or ``"clip"``.

    Raises
    ------
    InputError
        For any other object.

    References
    ----------
    Winterstein (1988), cubic Hermite model; Van Vleck & Middleton (1966), clipped Gaussian.
    """
    if isinstance(transform, ClipTransform):
        return "clip"
    if isinstance(transform, HermiteTransform):
        return "hermite"
    raise InputError(f"unknown transform {transform!r}; expected a HermiteTransform or ClipTransform", "transform")


def transform_record(transform) -> dict:
    """A transform's parameters and exact output moments as plain data (the sidecar's ``transform`` block).

    Parameters
    ----------
    transform : HermiteTransform or ClipTransform

    Returns
    -------
    dict
        ``family`` (``hermite`` or ``clip``); for ``hermite``: ``form``
        (``softening`` or ``hardening``), ``c3``, ``c4`` (dimensionless; for
        the hardening form the coefficients of ``u = z + c3 He2(z) + c4 He3(z)``),
        ``kappa``, ``mean_offset``; for ``clip``: ``clip_level_sigma`` (clip
        level in sigma of the Gaussian stream), ``crest_factor`` (peak / RMS of
        the output), ``clipped_rms_sigma``; for both: ``skewness`` and
        ``kurtosis`` (exact moments of the transformed Gaussian) and
        ``applied`` (where in the pipeline).

    References
    ----------
    Winterstein (1988); Van Vleck & Middleton (1966).
    """
    family = transform_family(transform)
    _, _, skewness, kurtosis = transform.moments()
    record = {"family": family}
    if family == "clip":
        record.update(
            clip_level_sigma=float(transform.clip_level_sigma),
            crest_factor=float(transform.crest_factor),
            clipped_rms_sigma=float(transform.clipped_std),
            equation="y = min(max(u, -c), c) / sigma_c, u the unit-variance Gaussian stream",
        )
    else:
        record.update(
            form="hardening" if transform.hardening else "softening",
            c3=float(transform.c3),
            c4=float(transform.c4),
            kappa=float(transform.kappa),
            mean_offset=float(transform.mean_offset),
            equation=(
                "u = z + c3 (z^2 - 1) + c4 (z^3 - 3 z), y = kappa (z - mean_offset)"
                if transform.hardening
                else "y = kappa (u + c3 (u^2 - 1) + c4 (u^3 - 3 u))"
            ),
        )
    record.update(
        skewness=float(skewness),
        kurtosis=float(kurtosis),
        applied="sample by sample to the unit-variance Gaussian stream after overlap-add, "
        "then scaled to the target g RMS, then ramps",
    )
    return record


def gaussian_level(transform, y):
    """Level of the Gaussian stream that maps to output level ``y``: ``g^-1(y)``.

    Parameters
    ----------
    transform : HermiteTransform, ClipTransform or None
        None is the identity (Gaussian drive).
    y : array_like
        Output levels in units of the output RMS (dimensionless).

    Returns
    -------
    numpy.ndarray
        ``u`` with ``g(u) = y`` (sigma units of the Gaussian stream); for
        clipping ``+inf`` at or above the crest factor and ``-inf`` at or
        below minus it (no Gaussian level reaches the clipped value's far side).

    References
    ----------
    Winterstein (1988): extremes of a translation process through the inverse
    of its monotone transform.
    """
    y = np.asarray(y, dtype=np.float64)
    if transform is None:
        return y.copy()
    if isinstance(transform, ClipTransform):
        crest = transform.crest_factor
        u = y * transform.clipped_std
        u = np.where(y >= crest, np.inf, u)
        return np.where(y <= -crest, -np.inf, u)
    return transform.inverse(y)


class StreamTransform:
    """The transform as the synthesizer's hook: applied in place to the unit-variance Gaussian stream.

    Parameters
    ----------
    transform : HermiteTransform or ClipTransform

    References
    ----------
    Winterstein (1988); Van Vleck & Middleton (1966).
    """

    def __init__(self, transform):
        self.transform = transform
        self.__name__ = f"{transform_family(transform)} transform"

    def __call__(self, u: np.ndarray) -> np.ndarray:
        u = np.asarray(u, dtype=np.float64)
        if u.flags.c_contiguous and u.flags.writeable:
            return self.transform.apply(u, out=u)
        return self.transform.apply(u)

    def __repr__(self) -> str:
        return f"StreamTransform({self.transform!r})"


# ---------------------------------------------------------------------------
# Spill-over high-pass
# ---------------------------------------------------------------------------




# ---------------------------------------------------------------------------
# Design: compensated spectrum on the plan's grid
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class NonGaussianDesign:
    """A non-Gaussian drive's transform and pre-compensated Gaussian spectrum.

    Attributes
    ----------
    transform : HermiteTransform or ClipTransform
        Unit-variance memoryless transform.
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
    """

    transform: object
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
        return float(self.transform.crest_factor) if isinstance(self.transform, ClipTransform) else None

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
                "the profile; use the default --resolution"
            )
        if above >= _SPILL_NOTE_FRACTION:
            messages.append(
                f"the non-Gaussian transform puts {100 * above:.1f} % of the variance above the band "
                f"{self.band_hz[1]:g} Hz (predicted); the rig sees it, the ASD check does not judge it"
            )
        return messages

    def synthesizer(self, plan: SynthesisPlan, seed, workers: int = 1) -> "NonGaussianSynthesizer":
        """The synthesizer of a plan made by :func:`nongaussian_plan` with this design (``workers`` threads)."""
        return NonGaussianSynthesizer(plan, self, seed, workers)


def _compensation_frame_length(plan: SynthesisPlan) -> int:
    frame = plan.frame_length
    if frame % 2 == 0 and frame <= COMPENSATION_MAX_FRAME_LENGTH:
        return frame
    return min(COMPENSATION_MAX_FRAME_LENGTH, 1 << max(frame - 1, 1).bit_length())


def highpass_moment_retention(gaussian_psd_per_hz, highpass_response) -> tuple[float, float]:
    """Shares of the second- and third-order Hermite terms that a linear filter keeps.

    For ``y = u + a2 He2(u) + a3 He3(u)`` the leading skewness term is
    ``6 a2 E[...]`` and the leading excess-kurtosis term ``24 a3``; through a
    filter ``h`` they become ``6 a2 p2`` and ``24 a3 p3`` with
    ``p_n = sum_tau h(tau) rho(tau)^n`` (Mehler: ``E[u^2 He2(u')] = 2 rho^2``,
    ``E[u^3 He3(u')] = 6 rho^3``), i.e. the share of the spectrum of ``rho^n``
    passed by the filter's (zero-phase) response.

    Parameters
    ----------
    gaussian_psd_per_hz : array_like, shape (N/2 + 1,)
        One-sided spectrum of the Gaussian stream on the lines of a frame of N
        samples (any scale), 1/Hz.
    highpass_response : array_like, shape (N/2 + 1,)
        Real zero-phase response of the filter on the same lines.

    Returns
    -------
    p2, p3 : float
        Retained shares (dimensionless, 1 for no filter).

    References
    ----------
    F. G. Mehler, J. Reine Angew. Math. 66, 1866 (bivariate normal expansion);
    Winterstein (1988), leading-order moments of the cubic Hermite model.
    """
    psd = np.asarray(gaussian_psd_per_hz, dtype=np.float64)
    response = np.asarray(highpass_response, dtype=np.float64)
    n = 2 * (psd.size - 1)
    weights = np.full(psd.size, 2.0)
    weights[0] = weights[-1] = 1.0
    rho = scipy.fft.irfft(psd * weights, n=n)
    rho /= rho[0]
    shares = []
    for order in (2, 3):
        lines = scipy.fft.rfft(rho**order).real * weights
        shares.append(float(np.sum(lines * response) / np.sum(lines)))
    return shares[0], shares[1]


def _compensate_on_grid(profile: AsdProfile, plan: SynthesisPlan, transform, options: dict, frame: int | None = None):
    rate = plan.rate_hz
    frame = _compensation_frame_length(plan) if frame is None else int(frame)
    df = rate / frame
    exact_grid = frame == plan.frame_length
    if exact_grid:
        target = np.array(plan.line_spectrum, dtype=float)
    else:
        target = profile.evaluate(np.arange(frame // 2 + 1) * df)
        target[0] = 0.0
        target[-1] = 0.0
    if not np.any(target > 0):
        raise InputError(
            f"no line of the {df:.4g} Hz compensation grid falls inside the band "
            f"{profile.frequency_min_hz:g}-{profile.frequency_max_hz:g} Hz; use a finer resolution",
            "resolution",
        )
    result = compensate_spectrum(target, df, transform, **options)
    if exact_grid:
        spectrum = np.array(result.gaussian_psd_per_hz, dtype=float)
    else:
        band = target > 0
        factor = result.gaussian_psd_per_hz[band] / target[band]
        coarse_hz = np.flatnonzero(band) * df
        fine = np.array(plan.line_spectrum, dtype=float)
        inside = np.flatnonzero(fine > 0)
        fine[inside] *= np.interp(inside * plan.resolution_hz, coarse_hz, factor)
        spectrum = fine
    total = float(np.sum(spectrum)) * plan.resolution_hz
    if not (math.isfinite(total) and total > 0):
        raise InputError("the compensated spectrum has no power on the record's grid; use a finer resolution", "resolution")
    spectrum /= total
    spectrum.setflags(write=False)
    return result, spectrum, frame, exact_grid


def design_nongaussian(profile: AsdProfile, plan: SynthesisPlan, transform, *, correct_for_highpass: bool = True,
                       **compensation_options) -> NonGaussianDesign:
    """Pre-compensate the Gaussian spectrum of a planned record for a memoryless transform.

    With a Hermite transform and a spill-over high-pass, the high-pass removes
    a small share of the transform's second- and third-order terms (their
    power below the band) and so lowers the skewness and kurtosis slightly
    (about 1 % and 2.5 % for the invented 20-1000 Hz profile at kurtosis 6 and
    skewness 0.5).  The transform is then solved for pre-corrected targets,
    ``skewness / p2`` and ``3 + (kurtosis - 3) / p3``
    (:func:`highpass_moment_retention`), and the spectrum compensated again for
    it; the requested moments are kept in the design.

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
    **compensation_options
        Passed to :func:`vibsynth.transforms.compensation.compensate_spectrum` (``beta``,
        ``tolerance``, ``max_iterations``, ...).

    Returns
    -------
    NonGaussianDesign

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
    highpass = SpillHighpass.for_plan(plan, profile.frequency_min_hz)
    applied, requested, retention = transform, None, None
    if (correct_for_highpass and highpass is not None and isinstance(transform, HermiteTransform)
            and not transform.is_identity):
        # the retained shares are integrals over the whole spectrum: a coarser grid gives them to
        # many digits and keeps the planning of long periodic records fast
        frame = min(_compensation_frame_length(plan), _RETENTION_FRAME_LENGTH)
        first, _, frame, _ = _compensate_on_grid(profile, plan, transform, compensation_options, frame)
        p2, p3 = highpass_moment_retention(first.gaussian_psd_per_hz, highpass.record_response(frame))
        _, _, skewness, kurtosis = transform.moments()
        retention = (p2, p3)
        try:
            corrected = solve_cubic_hermite(skewness / p2 if skewness else 0.0, 3.0 + (kurtosis - 3.0) / p3)
        except OutOfRangeError:
            corrected = None  # the corrected target is beyond reach: keep the requested transform
        if corrected is not None:
            applied, requested = corrected, (float(skewness), float(kurtosis))
    result, spectrum, frame, exact_grid = _compensate_on_grid(profile, plan, applied, compensation_options)
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


def nongaussian_plan(profile: AsdProfile, plan: SynthesisPlan, transform, **compensation_options):
    """A Gaussian plan turned non-Gaussian: compensated lines, the transform hook and the output scale.

    Parameters
    ----------
    profile : AsdProfile
        Target ASD, g^2/Hz.
    plan : SynthesisPlan
        Gaussian plan from :func:`vibsynth.generate.pipeline.plan_synthesis` (acceleration
        only; any mode, ramps and loop).
    transform : HermiteTransform or ClipTransform
        From :func:`plan_transform`.
    **compensation_options
        Passed to :func:`vibsynth.transforms.compensation.compensate_spectrum`.

    Returns
    -------
    (SynthesisPlan, NonGaussianDesign)
        The plan whose ``line_spectrum`` is the compensated Gaussian spectrum,
        ``transform`` the in-place :class:`StreamTransform` and
        ``output_scale`` the target g RMS (so the drive's RMS is the
        target's), and the design (for the sidecar and reports).  Make the
        samples with ``design.synthesizer(plan, seed)``
        (:class:`NonGaussianSynthesizer`: transform, spill-over high-pass,
        scaling, ramps).  A plain :class:`vibsynth.generate.pipeline.Synthesizer` of the
        plan applies the transform hook but not the high-pass.

    Raises
    ------
    InputError
        Velocity/displacement columns were asked for (their integration needs a
        Gaussian record).

    References
    ----------
    Winterstein (1988); Yamazaki & Shinozuka (1988); Shields, Deodatis &
    Bocchini (2011).
    """
    if tuple(plan.quantities) != ("acceleration",):
        raise InputError(
            "velocity/displacement columns are integrated from Gaussian lines and cannot follow a non-Gaussian "
            "(kurtosis, skewness or clip) acceleration; drop those columns or the non-Gaussian options",
            "--quantities",
        )
    design = design_nongaussian(profile, plan, transform, **compensation_options)
    planned = dataclasses.replace(
        plan,
        line_spectrum=design.line_spectrum,
        transform=StreamTransform(transform),
        output_scale=design.output_scale_g,
        warnings=tuple(plan.warnings) + tuple(design.warnings()),
        spill_highpass=None,  # the non-Gaussian synthesizer high-passes after the transform itself
    )
    return planned, design


# ---------------------------------------------------------------------------
# The synthesizer: transform, spill-over high-pass, scale, ramps
# ---------------------------------------------------------------------------


class NonGaussianSynthesizer(RecordAccess):
    """Makes the samples of a non-Gaussian record from one seed, in any order of chunks.

    The unit-variance Gaussian stream comes from a :class:`vibsynth.generate.pipeline.Synthesizer`
    of the plan's compensated line spectrum (no transform, no scaling, no
    ramps); each stretch is transformed sample by sample, high-passed
    (:class:`SpillHighpass`), clipped again at the limit for the clip family,
    scaled to the target g RMS, and ramped.

    Parameters
    ----------
    plan : SynthesisPlan
        From :func:`nongaussian_plan`.
    design : NonGaussianDesign
        From :func:`nongaussian_plan`.
    seed : int, numpy.random.SeedSequence or numpy.random.Generator
        See :func:`vibsynth.generate.pipeline.root_seed_sequence`.
    workers : int
        Threads that make the Gaussian frames and filter the blocks (default
        1); the samples are the same bit for bit whatever the number.

    Notes
    -----
    Overlap-add: output block ``b`` (samples ``[b B, (b+1) B)``, ``B`` the
    high-pass block, usually the hop) is filtered from one window of ``2 B``
    transformed samples of the Gaussian stream, offset by ``B/2`` (output sample
    n is stream sample ``n + B/2``, so the filter always sees real samples
    before the record's start).  Every window is read at the same block-aligned
    positions whatever the chunk size, so the samples do not depend on it.  Periodic: the whole record is
    transformed and filtered at once (circularly, so a looped record still
    loops seamlessly).

    References
    ----------
    Winterstein (1988); Oppenheim & Schafer (2010), overlap-save; see the module docstring.
    """

    def __init__(self, plan: SynthesisPlan, design: NonGaussianDesign, seed, workers: int = 1):
        self.plan = plan
        self.design = design
        overrides = dict(transform=None, output_scale=1.0, ramp_in_samples=0, ramp_out_samples=0, warnings=(),
                         spill_highpass=None)
        self._shift = 0
        self._block = plan.hop
        if plan.mode == "overlap-add":
            if design.highpass is not None:
                self._block = design.highpass.block_samples
            self._shift = self._block // 2
            blocks = -(-plan.total_samples // self._block)
            overrides["total_samples"] = (blocks + 1) * self._block
        self._stream = Synthesizer(dataclasses.replace(plan, **overrides), seed, workers)
        self.workers = self._stream.workers
        self._transform = design.transform
        self._limit = design.crest_factor_limit
        self._scale = float(plan.output_scale)
        self._record: np.ndarray | None = None
        self._block_lowpass = None
        if plan.mode == "overlap-add" and design.highpass is not None:
            if design.highpass.half_length is None:
                raise InputError("a periodic record's high-pass cannot filter an overlap-add record", "highpass")
            self._block_lowpass = design.highpass.block_lowpass_spectrum(2 * self._block)

    @property
    def seed(self) -> int:
        """The integer seed that remakes this record (root entropy)."""
        return self._stream.seed

    @property
    def block_samples(self) -> int:
        """Overlap-add: samples per filtered block B (output sample n is Gaussian-stream sample n + B/2)."""
        return int(self._block)

    # -------------------------------------------------------------- pieces
    def _finish_unit(self, y: np.ndarray) -> np.ndarray:
        """Clip again (clip family) and scale to g, in place."""
        if self._limit is not None:
            np.clip(y, -self._limit, self._limit, out=y)
        y *= self._scale
        return y

    def _periodic_record(self) -> np.ndarray:
        if self._record is None:
            record = self._stream.take_record()
            y = record[:, 0]
            samples = y.size
            self._transform.apply(y, out=y)
            highpass = self.design.highpass
            if highpass is not None:
                spectrum = scipy.fft.rfft(y)
                del record, y  # free the record before the inverse transform allocates the next
                # only the lines below the pass edge change (the response is 1 above it)
                top = min(int(math.ceil(highpass.pass_edge_hz * samples / highpass.rate_hz)) + 1, spectrum.size)
                lines = np.arange(top) * (highpass.rate_hz / samples)
                spectrum[:top] *= highpass.response(lines)
                y = scipy.fft.irfft(spectrum, n=samples, overwrite_x=True)
                del spectrum
            record = self._finish_unit(y).reshape(-1, 1)
            self._ramp(record, 0)
            self._record = record
        return self._record

    def _filter_block(self, pair) -> np.ndarray:
        """One output block from two consecutive transformed stretches of B samples: high-pass, clip, scale."""
        previous, current = pair
        hop, shift = self._block, self._shift
        window = np.concatenate((previous, current))
        if self._block_lowpass is None:
            block = window[shift : shift + hop].copy()
        else:
            lowpass = scipy.fft.irfft(scipy.fft.rfft(window) * self._block_lowpass, n=window.size)
            block = window[shift : shift + hop] - lowpass[shift : shift + hop]
        return self._finish_unit(block)

    def _blocks(self, first_block: int, last_block: int):
        """Filtered, scaled output blocks ``first_block .. last_block`` (B samples each, unramped)."""
        hop = self._block
        source = self._stream.iter_chunks(hop, start=first_block * hop, stop=(last_block + 2) * hop)

        def pairs():
            previous = None
            for chunk in source:
                current = chunk[:, 0]
                self._transform.apply(current, out=current)
                if previous is not None:
                    yield previous, current
                previous = current

        threads, in_flight = frame_workers(self.workers, 2 * hop)
        blocks = ordered_map(self._filter_block, pairs(), threads, in_flight)
        try:
            yield from blocks
        finally:
            blocks.close()
            source.close()

    def _iter_columns(self, chunk_samples: int, start: int, stop: int):
        if self.plan.mode == "periodic":
            record = self._periodic_record()
            for lo in range(start, stop, chunk_samples):
                yield record[lo : min(stop, lo + chunk_samples)].copy()
            return
        hop = self._block
        first_block, last_block = start // hop, (stop - 1) // hop
        position = first_block * hop
        buffer = np.empty((min(chunk_samples, stop - start), 1))
        filled, chunk_start = 0, start
        for block in self._blocks(first_block, last_block):
            lo = max(start - position, 0)
            hi = min(stop - position, hop)
            while lo < hi:
                take = min(hi - lo, buffer.shape[0] - filled)
                buffer[filled : filled + take, 0] = block[lo : lo + take]
                filled += take
                lo += take
                if filled == buffer.shape[0]:
                    self._ramp(buffer, chunk_start)
                    yield buffer
                    chunk_start += filled
                    filled = 0
                    buffer = np.empty((min(chunk_samples, stop - chunk_start), 1)) if chunk_start < stop else buffer
            position += hop
