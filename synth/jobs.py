"""One drive file from one request: plan, synthesize, set full scale, write with its sidecar.

This is the orchestration shared by ``vibsynth generate`` and ``vibsynth run``:
it checks the whole request before any sample is made, records every option
that affects the samples in the sidecar (so the file is self-describing and
can be remade from its seed), and writes atomically through
:func:`vibsynth.io.drivefile.write_drive`.

A request for a kurtosis, skewness or clip level makes a non-Gaussian drive
(:mod:`vibsynth.generate.design`): the Gaussian plan's spectrum is pre-compensated,
the memoryless transform is applied to the Gaussian stream after overlap-add,
the output is scaled to the target g RMS and only then ramped.  The sidecar
then carries ``transform`` and ``compensation`` blocks.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np
import scipy

from vibsynth import __version__
from vibsynth.generate import design as nongaussian
from vibsynth.generate import pipeline
from vibsynth.generate import plan as synthesis
from vibsynth.transforms.choice import plan_transform
from vibsynth.io import drivefile
from vibsynth.errors import InputError
from vibsynth.profile.asd import AsdProfile

#: Samples per chunk handed to the writer.
CHUNK_SAMPLES = 1 << 16

#: Most threads a drive job makes frames on by default (the samples never depend on the number).
MAX_DEFAULT_WORKERS = 8


def default_workers() -> int:
    """Threads for making frames: the CPUs this process may run on, at most :data:`MAX_DEFAULT_WORKERS`.

    Returns
    -------
    int
        At least 1.

    References
    ----------
    Python ``os.sched_getaffinity`` (where available) or ``os.cpu_count``.
    """
    try:
        count = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        count = os.cpu_count() or 1
    return max(1, min(int(count), MAX_DEFAULT_WORKERS))


@dataclass(frozen=True)
class DriveRequest:
    """Everything that decides a drive file's samples and format.

    Parameters
    ----------
    output : str
        Destination path; its suffix picks the format (.wav, .flac, .csv, .npy).
    duration_s : float
        Duration, s.
    rate_hz : float
        Sample rate, Hz.
    seed : int or None
        Seed of the random phases (None: a fresh one, recorded in the sidecar).
    amplitude : str
        ``fixed`` or ``rayleigh`` line amplitudes.
    resolution_hz : float or None
        Line spacing of frames, Hz (None: from the profile).
    loop : bool
        One periodic record that repeats seamlessly.
    quantities : tuple of str
        Columns (acceleration first; velocity, displacement for .csv/.npy).
    subtype : str or None
        Sample format (None: the format's default).
    full_scale_g : float or None
        g value of full scale for .wav/.flac (None: from the record's peak).
    ramp_s : float
        Raised-cosine fade-in and fade-out, s each.
    stroke_limit_mm, velocity_limit_m_s : float or None
        Refuse when the profile's 3-sigma stroke (mm peak-to-peak) or
        velocity (m/s) exceeds them.
    memory_budget_mb : float
        Working memory for one periodic inverse FFT, MiB.
    profile_source : str
        How the profile was named (file or preset), for the sidecar.
    scaling : dict
        The rescale options applied to the profile (for the sidecar).
    kurtosis : float or None
        Target Pearson kurtosis (3: Gaussian) by a cubic Hermite transform.
    skewness : float or None
        Target skewness by a cubic Hermite transform (alone: kurtosis 3).
    clip : float or None
        Crest factor limit: every sample within ``clip`` x the target g RMS
        (cannot be combined with ``kurtosis``/``skewness``).
    workers : int or None
        Threads that make overlap-add frames (None: :func:`default_workers`).
        The samples are the same whatever the number, so it is not recorded.
    """

    output: str
    duration_s: float
    rate_hz: float
    seed: int | None = None
    amplitude: str = "fixed"
    resolution_hz: float | None = None
    loop: bool = False
    quantities: tuple = ("acceleration",)
    subtype: str | None = None
    full_scale_g: float | None = None
    ramp_s: float = 0.0
    stroke_limit_mm: float | None = None
    velocity_limit_m_s: float | None = None
    memory_budget_mb: float = 256.0
    profile_source: str = ""
    scaling: dict = field(default_factory=dict)
    kurtosis: float | None = None
    skewness: float | None = None
    clip: float | None = None
    workers: int | None = None


@dataclass(frozen=True)
class PreparedDrive:
    """A checked request with its plan, synthesizer and sidecar, ready to write.

    ``design`` is the non-Gaussian design (transform and compensation) or None
    for a Gaussian drive.
    """

    request: DriveRequest
    profile: AsdProfile
    plan: synthesis.SynthesisPlan
    synthesizer: pipeline.Synthesizer
    file_format: str
    subtype: str
    sidecar: dict
    warnings: tuple
    design: nongaussian.NonGaussianDesign | None = None

    @property
    def passes(self) -> int:
        """Passes over the record the write takes (2 when full scale comes from an overlap-add record's peak)."""
        needs_peak = self.file_format in ("wav", "flac") and self.request.full_scale_g is None
        return 2 if needs_peak and self.plan.mode == "overlap-add" else 1


def prepare_drive(profile: AsdProfile, request: DriveRequest) -> PreparedDrive:
    """Check a drive request completely and plan it; nothing is written.

    Parameters
    ----------
    profile : AsdProfile
        Target ASD (g^2/Hz), already rescaled as asked.
    request : DriveRequest

    Returns
    -------
    PreparedDrive

    Raises
    ------
    InputError
        Any problem with the request (rate, duration, format, folder, limits,
        ``clip`` combined with ``kurtosis``/``skewness``, non-Gaussian options
        with velocity/displacement columns).
    OutOfRangeError
        A kurtosis, skewness or clip level no transform reaches (the message
        states the reachable range).

    References
    ----------
    Random-phase inverse-FFT synthesis (Shinozuka & Deodatis 1991, Appl. Mech.
    Rev. 44(4)); see :mod:`vibsynth.generate.pipeline`.  Non-Gaussian drives: Winterstein
    (1988), Yamazaki & Shinozuka (1988); see :mod:`vibsynth.generate.design`.
    """
    file_format = drivefile.drive_format(request.output)
    subtype = drivefile.check_subtype(file_format, request.subtype)
    names = tuple(request.quantities)
    if len(names) > 1 and file_format not in ("csv", "npy"):
        raise InputError(
            f"velocity/displacement columns need a .csv or .npy file; .{file_format} holds acceleration only",
            "--quantities",
        )
    if request.full_scale_g is not None and file_format not in ("wav", "flac"):
        raise InputError(f"--full-scale applies to .wav/.flac; .{file_format} holds values in g", "--full-scale")
    transform = plan_transform(request.kurtosis, request.skewness, request.clip)
    if transform is not None and len(names) > 1:
        raise InputError(
            "velocity/displacement columns are integrated from Gaussian lines and cannot follow a non-Gaussian "
            "(kurtosis, skewness or clip) acceleration; drop those columns or the non-Gaussian options",
            "--quantities",
        )
    synthesis.rig_limit_check(profile, request.stroke_limit_mm, request.velocity_limit_m_s)
    # the option alone picks periodic vs overlap-add (the same samples on every machine); a periodic
    # record the machine cannot hold is refused by the planner.  Warnings are kept in plan.warnings.
    budget_bytes = request.memory_budget_mb * 2**20
    plan = synthesis.make_plan(
        profile,
        request.duration_s,
        request.rate_hz,
        amplitude=request.amplitude,
        resolution_hz=request.resolution_hz,
        loop=request.loop,
        ramp_in_s=request.ramp_s,
        ramp_out_s=request.ramp_s,
        quantities=names,
        memory_budget_bytes=budget_bytes,
        transform=transform,
    )
    drivefile.check_drive_request(
        request.output, rate_hz=plan.rate_hz, samples=plan.total_samples, quantities=plan.quantities, subtype=subtype
    )
    grms_lines = plan.line_variance**0.5
    design = None
    if transform is not None:
        plan, design = nongaussian.make_nongaussian_plan(profile, plan, transform)
    seed = request.seed
    if seed is None:
        seed = int(np.random.SeedSequence().entropy % 2**53)  # exact in any JSON reader
    workers = default_workers() if request.workers is None else request.workers
    synthesizer = pipeline.Synthesizer(plan, seed, workers)
    sidecar = {
        "seed": seed,
        "mode": plan.mode,
        "frame_length": plan.frame_length,
        "resolution_hz": plan.resolution_hz,
        "amplitude": plan.amplitude,
        "loop": bool(request.loop),
        "ramp_in_s": plan.ramp_in_samples / plan.rate_hz,
        "ramp_out_s": plan.ramp_out_samples / plan.rate_hz,
        "grms_target": profile.grms,
        "grms_lines": grms_lines,
        "seed_derivation": "numpy SeedSequence(seed) children: overlap-add frame j uses spawn_key (0, j), "
        "a periodic record spawn_key (1,); PCG64; one standard normal pair per line",
        "options": {
            "duration_s": request.duration_s,
            "rate_hz": request.rate_hz,
            "seed": seed,
            "amplitude": request.amplitude,
            "resolution_hz": request.resolution_hz,
            "loop": bool(request.loop),
            "quantities": list(names),
            "subtype": subtype,
            "full_scale_g": request.full_scale_g,
            "ramp_s": request.ramp_s,
            "memory_budget_mb": request.memory_budget_mb,
            "kurtosis": request.kurtosis,
            "skewness": request.skewness,
            "clip": request.clip,
            **request.scaling,
        },
        "profile": {
            "name": profile.name,
            "description": profile.description,
            "source": request.profile_source,
            "breakpoints": [
                {"frequency": float(f), "asd": float(s)} for f, s in zip(profile.frequencies_hz, profile.asd_g2_per_hz)
            ],
            "grms": profile.grms,
            "velocity_rms_m_s": profile.velocity_rms_m_s,
            "displacement_rms_m": profile.displacement_rms_m,
            "displacement_peak_to_peak_3sigma_m": profile.displacement_peak_to_peak_3sigma_m,
        },
        "warnings": list(plan.warnings),
        "tool": {"name": "vibsynth", "version": __version__, "numpy": np.__version__, "scipy": scipy.__version__},
    }
    if plan.spill_highpass is not None and design is None:  # a non-Gaussian drive records it with its compensation
        sidecar["spill_highpass"] = plan.spill_highpass.to_dict()
        sidecar["seed_derivation"] += (
            f"; overlap-add: sample n is sample n + {plan.spill_highpass.half_length} of the windowed sum of frames, "
            "high-passed by the spill_highpass FIR (the window's leakage below the band removed)"
        )
    if design is not None:
        sidecar["transform"] = design.transform_block()
        sidecar["compensation"] = design.compensation_record()
        if plan.mode == "overlap-add":
            block = synthesizer.block_samples
            sidecar["seed_derivation"] += (
                f"; non-Gaussian: sample n is sample n + {block // 2} of the Gaussian stream of the compensated "
                f"lines, transformed and high-passed in blocks of {block} samples"
            )
    return PreparedDrive(
        request=request,
        profile=profile,
        plan=plan,
        synthesizer=synthesizer,
        file_format=file_format,
        subtype=subtype,
        sidecar=sidecar,
        warnings=tuple(plan.warnings),
        design=design,
    )


def write_prepared_drive(prepared: PreparedDrive, progress=None) -> dict:
    """Synthesize and write a prepared drive (data first, sidecar last, each atomically).

    For .wav/.flac without a given full scale, a first pass finds the record's
    peak (the record is deterministic from its seed) so full scale is the peak
    plus :data:`vibsynth.io.drivefile.DEFAULT_HEADROOM`, and ``scale`` is exact.

    Parameters
    ----------
    prepared : PreparedDrive
    progress : callable, optional
        Called with a sample count after each chunk (both passes).

    Returns
    -------
    dict
        The sidecar as written (``scale``, ``peak_g``, ...).

    References
    ----------
    See :func:`vibsynth.io.drivefile.write_drive`.
    """
    plan, synthesizer, request = prepared.plan, prepared.synthesizer, prepared.request
    sidecar = dict(prepared.sidecar)
    step = progress if progress is not None else (lambda samples: None)
    scale = 1.0
    if prepared.file_format in ("wav", "flac"):
        if request.full_scale_g is not None:
            scale = float(request.full_scale_g)
            sidecar["full_scale"] = "given"
        else:
            if plan.mode == "periodic":
                peak = synthesizer.peak_abs()
            else:
                peak = 0.0
                for chunk in synthesizer.iter_chunks(CHUNK_SAMPLES):
                    peak = max(peak, float(np.max(np.abs(chunk[:, 0]))))
                    step(len(chunk))
            scale = drivefile.full_scale_from_peak(peak)
            sidecar["full_scale"] = "peak"
            sidecar["headroom"] = drivefile.DEFAULT_HEADROOM
    return drivefile.write_drive(
        request.output,
        synthesizer.iter_chunks(CHUNK_SAMPLES),
        rate_hz=plan.rate_hz,
        samples=plan.total_samples,
        quantities=plan.quantities,
        subtype=prepared.subtype,
        scale=scale,
        sidecar=sidecar,
        progress=step,
    )

