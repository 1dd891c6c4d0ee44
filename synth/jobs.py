"""The jobs: one drive file from one request, verifying a drive, and the whole run into one folder.

Drive job (``vibsynth generate``): :func:`prepare_drive` checks the whole
request before any sample is made and plans it; :func:`write_prepared_drive`
synthesizes and writes the file and its sidecar (a
:class:`~vibsynth.io.sidecar.Sidecar` recording every option that affects the
samples, so the file can be remade from its seed), atomically.  A request for
a kurtosis, skewness or clip level makes a non-Gaussian drive; the sidecar then
carries ``transform`` and ``compensation`` blocks.

Verify side (``vibsynth verify``): :func:`drive_target`, :func:`drive_criteria`,
:func:`verify_drive`, :func:`verification_data`, :func:`write_verify_report`.
These never import the generator.

Run job (``vibsynth run``): :func:`prepare_run` + :func:`complete_run` (or
:func:`run_job`) generate, verify and write drive, sidecar, profile.toml,
figures, report.pdf and report.json into one folder, returning a
:class:`RunResult` that carries every warning (each also issued as a
:class:`~vibsynth.errors.VibsynthWarning`).  Asked for, a run adds the drive's
fatigue damage and extreme response spectra (:func:`drive_severity_block`:
``fds.png``, ``ers.png`` and their report pages) and the shaker check
(:func:`vibsynth.durability.report.fit_report`).

References
----------
Random-phase inverse-FFT synthesis (Shinozuka & Deodatis 1991, Appl. Mech.
Rev. 44(4)); Welch (1967); Winterstein (1988); Yamazaki & Shinozuka (1988).
"""

from __future__ import annotations

import dataclasses
import datetime
import re
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Callable

import numpy as np

from vibsynth import __version__
from vibsynth.errors import InputError, VibsynthWarning
from vibsynth.io import drivefile
from vibsynth.io.atomic import write_json_atomic
from vibsynth.io.caution import DRIVE_CAUTION
from vibsynth.io.sidecar import Sidecar, profile_block

if TYPE_CHECKING:  # the generator is imported only by the functions that generate
    from vibsynth.analysis.verify import Criteria, Verification
    from vibsynth.generate import design as nongaussian
    from vibsynth.generate import pipeline
    from vibsynth.generate import plan as synthesis
    from vibsynth.profile.asd import AsdProfile

#: Rescale options as the sidecar names them (unit suffix).
_SCALING_KEYS = {"grms": "rescale_grms_g", "level_db": "rescale_level_db"}

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

    Examples
    --------
    >>> 1 <= default_workers() <= MAX_DEFAULT_WORKERS
    True

    References
    ----------
    Python ``os.sched_getaffinity`` (where available) or ``os.cpu_count``.
    """
    from vibsynth.generate._threads import available_threads

    return available_threads(MAX_DEFAULT_WORKERS)


@dataclass(frozen=True)
class DriveRequest:
    """Everything that decides a drive file's samples and format.

    Parameters
    ----------
    output : str
        Destination path; its suffix picks the format (.wav, .flac, .csv, .npy).
    duration_s : float or None
        Duration, s (None: the profile's level schedule sets it).
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
    kurtosis_model : {"transform", "bursts"}
        How ``kurtosis`` is reached: a memoryless transform (default) or a
        slowly varying burst envelope (:mod:`vibsynth.generate.modulation`).
    burst_s : float or None
        Burst duration of the burst model, s (None: from the profile).
    workers : int or None
        Threads that make overlap-add frames (None: :func:`default_workers`).
        The samples are the same whatever the number, so it is not recorded.
    rest_taper_s : float or None
        Velocity/displacement columns: displacement taper at each end, s, that
        brings the base motion to rest (None: the default; 0: none).
    """

    output: str
    duration_s: float | None
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
    rest_taper_s: float | None = None
    kurtosis_model: str = "transform"
    burst_s: float | None = None


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
    sidecar: Sidecar
    seed: int
    warnings: tuple
    design: nongaussian.NonGaussianDesign | None = None
    storage: dict = field(default_factory=dict)

    @property
    def passes(self) -> int:
        """Passes over the record the write takes (2 when full scale comes from an overlap-add record's peak)."""
        return 2 if needs_peak_pass(self.file_format, self.request.full_scale_g, self.plan.mode) else 1

    @property
    def peak_pass(self) -> str | None:
        """How the second pass gets the record: ``"cached"`` (read back from the peak pass's temporary file),
        ``"recomputed"`` (made again: the folder lacks the room for the temporary) or None (one pass)."""
        if self.passes == 1:
            return None
        return self.storage.get("peak_pass") or "cached"


def needs_peak_pass(file_format: str, full_scale_g: float | None, mode: str) -> bool:
    """True when writing takes a first pass for the record's peak: .wav/.flac, full scale from the peak, overlap-add.

    (A periodic record is in memory and gives its peak at once.)

    Examples
    --------
    >>> needs_peak_pass("flac", None, "overlap-add"), needs_peak_pass("flac", 2.0, "overlap-add")
    (True, False)

    References
    ----------
    Peak normalisation of sampled data (see :func:`vibsynth.io.drivefile.full_scale_from_peak`).
    """
    return file_format in ("wav", "flac") and full_scale_g is None and mode == "overlap-add"


def prepare_drive(profile: AsdProfile, request: DriveRequest, refuse_when_full: bool = True) -> PreparedDrive:
    """Check a drive request completely and plan it; nothing is written.

    Parameters
    ----------
    profile : AsdProfile
        Target ASD (g^2/Hz), already rescaled as asked.
    request : DriveRequest
    refuse_when_full : bool
        Raise when the destination folder lacks the space for the file and
        its sidecar (False: plan anyway and say so in ``storage["fits"]``,
        for a dry run).

    Returns
    -------
    PreparedDrive
        Its ``storage`` holds the file size (bytes, exact or an upper
        bound), the space needed with the sidecar (and the peak pass's
        sample cache, when there is one and the folder holds it), the space
        free and whether it fits (see :func:`vibsynth.io.drivefile.storage_plan`).

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
    from vibsynth.profile.multichannel import MultiChannelProfile

    if isinstance(profile, MultiChannelProfile):  # correlated channels: vibsynth.channel_jobs
        from vibsynth.channel_jobs import prepare_channel_drive

        return prepare_channel_drive(profile, request, refuse_when_full)
    from vibsynth.generate import pipeline
    from vibsynth.generate import plan as synthesis
    from vibsynth.transforms.choice import plan_transform

    file_format = drivefile.drive_format(request.output)
    subtype = drivefile.check_subtype(file_format, request.subtype)
    names = tuple(request.quantities)
    if len(names) > 1 and file_format not in ("csv", "npy"):
        raise InputError(
            f"velocity/displacement columns need a .csv or .npy file; .{file_format} holds acceleration only",
            "quantities",
        )
    if request.full_scale_g is not None and file_format not in ("wav", "flac"):
        raise InputError(f"`full_scale_g` applies to .wav/.flac; .{file_format} holds values in g", "full_scale_g")
    bursts = pipeline.check_kurtosis_model(request.kurtosis_model, request.kurtosis, request.skewness, request.clip,
                                           request.loop, request.burst_s)
    transform = None if bursts else plan_transform(request.kurtosis, request.skewness, request.clip)
    from vibsynth.generate.schedule import drive_duration_s
    from vibsynth.generate.tones import check_mixed_request, mixed_rig_limit_check

    mixed = getattr(profile, "mixed", None)  # tones, narrow bands, level schedule (vibsynth.profile.mixed)
    duration_s = drive_duration_s(profile, request.duration_s)
    check_mixed_request(mixed, request.rate_hz, names, request.loop, profile.source or profile.name)
    synthesis.rig_limit_check(profile, request.stroke_limit_mm, request.velocity_limit_m_s)
    mixed_rig_limit_check(profile, request.stroke_limit_mm, request.velocity_limit_m_s)  # tones add their peaks
    # the option alone picks periodic vs overlap-add (never the machine's memory); a periodic
    # record the machine cannot hold is refused by the planner.  Warnings are kept in plan.warnings.
    budget_bytes = request.memory_budget_mb * 2**20
    plan = synthesis.make_plan(
        profile,
        duration_s,
        request.rate_hz,
        amplitude=request.amplitude,
        resolution_hz=request.resolution_hz,
        loop=request.loop,
        ramp_in_s=request.ramp_s,
        ramp_out_s=request.ramp_s,
        quantities=names,
        memory_budget_bytes=budget_bytes,
        transform=transform,
        rest_taper_s=request.rest_taper_s,
    )
    drivefile.check_drive_request(
        request.output, rate_hz=plan.rate_hz, samples=plan.total_samples, quantities=plan.quantities, subtype=subtype,
        check_space=False,
    )
    storage = drivefile.storage_plan(request.output, file_format, subtype, plan.total_samples, plan.quantities,
                                     plan.rate_hz, peak_pass=needs_peak_pass(file_format, request.full_scale_g,
                                                                             plan.mode))
    if refuse_when_full and not storage["fits"]:
        raise drivefile.space_refusal(request.output, storage)
    grms_lines = plan.line_variance**0.5
    design = synthesizer = None
    seed = request_seed(request)
    workers = default_workers() if request.workers is None else request.workers
    if transform is not None:  # the design (scipy.special is loaded on use), the record's draws made meanwhile
        synthesizer, design = pipeline.nongaussian_synthesizer(profile, plan, transform, seed=seed, workers=workers,
                                                               mixed=mixed)
        plan = synthesizer.plan
    if bursts:
        from vibsynth.generate.modulation import burst_plan

        plan = burst_plan(plan, profile.frequency_min_hz, request.kurtosis, request.burst_s)
    if synthesizer is None:
        synthesizer = pipeline.Synthesizer(plan, seed, workers, mixed=mixed)
    options = sidecar_options(request, names, kurtosis_model="bursts" if bursts else "transform",
                              burst_s=plan.modulation.burst_s if bursts else None)
    seed_derivation = SEED_DERIVATION + "; one standard normal pair per line"
    if bursts:
        seed_derivation += "; burst envelope from spawn_key (2,) (see modulation)"
    if plan.spill_highpass is not None and design is None:  # a non-Gaussian drive records it with its compensation
        seed_derivation += (
            f"; overlap-add: sample n is sample n + {plan.spill_highpass.half_length} of the windowed sum of frames, "
            "high-passed by the spill_highpass FIR (the window's leakage below the band removed)"
        )
    if design is not None and plan.mode == "overlap-add":
        block = synthesizer.block_samples
        seed_derivation += (
            f"; non-Gaussian: sample n is sample n + {block // 2} of the Gaussian stream of the compensated "
            f"lines, transformed and high-passed in blocks of {block} samples"
        )
    if mixed is not None and mixed.narrow_bands:
        seed_derivation += ("; narrow band j: cosine offsets (one uniform in each of K sub-bands) then phases "
                            "(uniform, cycles) from spawn_key (2, j)")
    sidecar = Sidecar(
        seed=seed,
        # a rest taper is the fade of a velocity/displacement record: verification judges the part between
        ramp_in_s=(plan.ramp_in_samples or plan.rest_taper_samples) / plan.rate_hz,
        ramp_out_s=(plan.ramp_out_samples or plan.rest_taper_samples) / plan.rate_hz,
        options=options,
        plan={
            "mode": plan.mode,
            "frame_length_samples": plan.frame_length,
            "line_spacing_hz": plan.resolution_hz,
            "grms_lines_g": grms_lines,
            "seed_derivation": seed_derivation,
            "spill_highpass": plan.spill_highpass.to_dict() if plan.spill_highpass is not None and design is None else None,
            "rest_taper_s": plan.rest_taper_samples / plan.rate_hz,
        },
        profile=profile_block(profile, request.profile_source),
        transform=design.transform_block() if design is not None else None,
        compensation=design.compensation_record() if design is not None else None,
        modulation=plan.modulation.to_dict() if bursts else None,
        warnings=tuple(plan.warnings),
        tool=tool_record(),
    )
    return PreparedDrive(
        request=request,
        profile=profile,
        plan=plan,
        synthesizer=synthesizer,
        file_format=file_format,
        subtype=subtype,
        sidecar=sidecar,
        seed=seed,
        warnings=tuple(plan.warnings),
        design=design,
        storage=storage,
    )


#: How a record's randomness follows from its seed (the start of every sidecar's ``plan.seed_derivation``).
SEED_DERIVATION = ("numpy SeedSequence(seed) children: overlap-add frame j uses spawn_key (0, j), "
                   "a periodic record spawn_key (1,); PCG64")


def request_seed(request: DriveRequest) -> int:
    """The request's seed, or a fresh one (below 2**53, so any JSON reader keeps it exact).

    Examples
    --------
    >>> request_seed(DriveRequest("d.npy", 1.0, 1024.0, seed=7))
    7

    References
    ----------
    numpy.random.SeedSequence (fresh entropy from the operating system).
    """
    if request.seed is not None:
        return int(request.seed)
    return int(np.random.SeedSequence().entropy % 2**53)


def sidecar_options(request: DriveRequest, quantities, kurtosis_model: str = "transform",
                    burst_s: float | None = None) -> dict:
    """The sidecar's ``options`` block of a drive request (every option that affects the samples).

    Examples
    --------
    >>> sidecar_options(DriveRequest("d.npy", 1.0, 1024.0), ("acceleration",))["memory_budget_mib"]
    256.0

    References
    ----------
    None (record keeping).
    """
    return {
        "amplitude": request.amplitude,
        "resolution_hz": request.resolution_hz,
        "loop": bool(request.loop),
        "quantities": list(quantities),
        "full_scale_g": request.full_scale_g,
        "ramp_s": request.ramp_s,
        "memory_budget_mib": request.memory_budget_mb,
        "kurtosis": request.kurtosis,
        "skewness": request.skewness,
        "clip": request.clip,
        "kurtosis_model": kurtosis_model,
        "burst_s": burst_s,
        **{_SCALING_KEYS.get(key, key): value for key, value in request.scaling.items()},
    }


def tool_record() -> dict:
    """The sidecar's ``tool`` block: name and versions of the tool and its numerical libraries.

    Examples
    --------
    >>> tool_record()["name"]
    'vibsynth'

    References
    ----------
    None (record keeping).
    """
    import scipy

    return {"name": "vibsynth", "version": __version__, "numpy": np.__version__, "scipy": scipy.__version__}


def write_prepared_drive(prepared: PreparedDrive, progress=None, peak_cache: bool | None = None) -> dict:
    """Synthesize and write a prepared drive (data first, sidecar last, each atomically).

    For .wav/.flac without a given full scale, a first pass finds the record's
    peak (the record is deterministic from its seed) so full scale is the peak
    plus :data:`vibsynth.io.drivefile.DEFAULT_HEADROOM`, and ``scale`` is exact.
    For an overlap-add record that pass also keeps the float64 samples, exactly
    as the generator gives them, in a hidden temporary file beside the output
    (:class:`vibsynth.io.samplecache.SampleCache`, 8 bytes x samples x columns:
    1.47 GB per hour at 51.2 kHz), and the second pass reads them back instead
    of making the record again: the record is generated once and the file is
    byte-identical either way.  The temporary is removed when the samples are
    read (before the file is committed), on any error and on an interrupt.
    The cache streams through a few megabytes of page cache, to the disk and
    back (:class:`vibsynth.io.atomic.StreamedPages`).
    When the folder cannot hold it besides the file (``prepared.peak_pass`` is
    ``"recomputed"``; see :func:`vibsynth.io.drivefile.storage_plan`), or
    writing it fails (a warning says so), the second pass recomputes the record.

    .wav/.flac chunks are checked and quantized ahead on
    :data:`ENCODE_AHEAD_THREADS` threads while the encoder (libsndfile, or
    the direct .wav writer of :mod:`vibsynth.io.wavflac`) writes the previous
    one in the calling thread.

    Parameters
    ----------
    prepared : PreparedDrive
    progress : callable, optional
        Called with a sample count after each chunk (both passes: the counts
        add up to ``prepared.passes`` x the record's samples).
    peak_cache : bool, optional
        Keep the peak pass's samples for the second pass (True) or make the
        record again (False); None: as planned (``prepared.peak_pass``).

    Returns
    -------
    dict
        The sidecar as written (``scale``, ``peak_g``, ...).

    Examples
    --------
    >>> import tempfile, pathlib, warnings
    >>> from vibsynth.profile.files import read_profile
    >>> out = pathlib.Path(tempfile.mkdtemp()) / "d.flac"
    >>> request = DriveRequest(str(out), 30.0, 5120.0, seed=1, memory_budget_mb=1.0)
    >>> with warnings.catch_warnings():
    ...     warnings.simplefilter("ignore")
    ...     prepared = prepare_drive(read_profile("bench-flat"), request)
    >>> prepared.passes, prepared.peak_pass
    (2, 'cached')
    >>> written = write_prepared_drive(prepared)
    >>> sorted(p.name for p in out.parent.iterdir())
    ['d.flac', 'd.flac.json']

    References
    ----------
    See :func:`vibsynth.io.drivefile.write_drive`; libsndfile (FLAC, RIFF WAVE encoding).
    """
    plan, synthesizer, request = prepared.plan, prepared.synthesizer, prepared.request
    sidecar = prepared.sidecar
    step = progress if progress is not None else (lambda samples: None)
    if prepared.file_format not in ("wav", "flac"):
        return drivefile.write_drive(
            request.output,
            synthesizer.iter_chunks(CHUNK_SAMPLES),
            rate_hz=plan.rate_hz,
            samples=plan.total_samples,
            quantities=plan.quantities,
            subtype=prepared.subtype,
            sidecar=sidecar,
            progress=step,
            channels=plan.channels,
        )
    cache = None
    try:
        if request.full_scale_g is not None:
            scale = float(request.full_scale_g)
            sidecar = dataclasses.replace(sidecar, full_scale_from="given")
        else:
            if plan.mode == "periodic":
                peak = synthesizer.peak_abs()
            else:
                keep = prepared.peak_pass == "cached" if peak_cache is None else bool(peak_cache)
                peak, cache = _peak_pass(prepared, step, keep)
            scale = drivefile.full_scale_from_peak(peak)
            sidecar = dataclasses.replace(sidecar, full_scale_from="peak",
                                          full_scale_headroom_fraction=drivefile.DEFAULT_HEADROOM)
        source = cache.iter_chunks(CHUNK_SAMPLES) if cache is not None else synthesizer.iter_chunks(CHUNK_SAMPLES)
        with drivefile.DriveWriter(request.output, rate_hz=plan.rate_hz, samples=plan.total_samples,
                                   quantities=plan.quantities, subtype=prepared.subtype, scale=scale,
                                   sidecar=sidecar, channels=plan.channels) as writer:
            for ready in _encoded_ahead(writer, source):
                writer.write_prepared(ready)
                step(ready.count)
            if cache is not None:  # read to the end: gone before the commit's fsync
                cache.discard()
            return writer.commit()
    finally:
        if cache is not None:
            cache.discard()


#: Threads that check and quantize .wav/.flac chunks ahead of the encoder (which runs in the calling thread).
ENCODE_AHEAD_THREADS = 2

#: Chunks checked and quantized ahead of the encoder at most (bounded memory: a few MB).
ENCODE_AHEAD_CHUNKS = 4


def _encoded_ahead(writer, chunks):
    """``writer.prepare`` of each chunk, in order, computed on worker threads ahead of the consumer."""
    from vibsynth.generate._threads import ordered_map

    def positioned():
        position = 0
        for chunk in chunks:
            yield chunk, position
            position += len(chunk)

    return ordered_map(lambda item: writer.prepare(*item), positioned(), ENCODE_AHEAD_THREADS, ENCODE_AHEAD_CHUNKS)


def _peak_pass(prepared: PreparedDrive, step, keep: bool):
    """The first pass of an overlap-add .wav/.flac record: its peak (g), and its samples cached when ``keep``.

    Returns (peak, cache or None).  A cache that cannot be created or written
    (disk full) is dropped with a warning and the pass goes on for the peak
    alone; the caller then makes the record again.
    """
    from vibsynth.io.samplecache import SampleCache

    plan, synthesizer = prepared.plan, prepared.synthesizer
    columns = slice(None) if plan.channels else 0  # every channel shares the file's full scale
    cache = None
    if keep:
        try:
            cache = SampleCache(prepared.request.output, plan.column_count)
        except OSError as error:
            _cache_dropped(error)
    from vibsynth.generate.pipeline import largest_magnitude

    peak = 0.0
    try:
        for chunk in synthesizer.iter_chunks(CHUNK_SAMPLES):
            peak = max(peak, largest_magnitude(chunk[:, columns]))
            if cache is not None:
                try:
                    cache.write(chunk)
                except OSError as error:
                    cache.discard()
                    cache = None
                    _cache_dropped(error)
            step(len(chunk))
        if cache is not None:
            try:
                cache.close()
            except OSError as error:  # the last chunks, written in the background, did not fit
                cache.discard()
                cache = None
                _cache_dropped(error)
    except BaseException:
        if cache is not None:
            cache.discard()
        raise
    return peak, cache


def _cache_dropped(error: OSError) -> None:
    warnings.warn(f"the peak pass could not keep the samples in a temporary file ({error.strerror or error}); the "
                  "record is made again for the second pass (same samples, about twice the generation time)",
                  VibsynthWarning, stacklevel=4)


# ====================================================================== verify side
#: Samples per chunk read from a drive file while verifying.
READ_CHUNK_SAMPLES = 1 << 18

#: Passes :func:`verify_drive` makes over a drive file (statistics and spectrum, then the checks that need them).
VERIFY_PASSES = 2

#: Layout version of report.json (0.1 wrote an unversioned layout, counted as 1).
REPORT_SCHEMA_VERSION = 2

#: Figures a report folder holds, by key.
FIGURE_NAMES = ("asd", "amplitude", "excerpt", "rms")


def drive_criteria(drive, tolerance_db: tuple[float, float] = (-3.0, 3.0), grms_tolerance_percent: float = 10.0,
                   min_fraction_within: float = 1.0) -> "Criteria":
    """Verification criteria for a drive: the given limits plus the amplitude targets its sidecar records.

    Parameters
    ----------
    drive : vibsynth.io.drivefile.DriveFile
    tolerance_db : (float, float)
        ASD tolerance band, dB (lower < 0 < upper).
    grms_tolerance_percent : float
        g RMS tolerance, %.
    min_fraction_within : float
        Fraction of judged lines that must lie in the band.

    Returns
    -------
    vibsynth.analysis.verify.Criteria
        With ``kurtosis_target``, ``skewness_target`` and ``crest_factor_limit``
        from the sidecar's ``options`` (kurtosis, skewness, clip).

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np
    >>> from vibsynth.io.drivefile import write_drive, open_drive
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "d.npy"
    >>> _ = write_drive(path, [np.zeros(4)], rate_hz=100.0, samples=4, sidecar={"options": {"clip": 3.0}})
    >>> drive_criteria(open_drive(path)).crest_factor_limit
    3.0

    References
    ----------
    Pearson kurtosis and skewness; crest factor (peak / RMS).
    """
    from vibsynth.analysis.verify import Criteria

    targets = drive.sidecar.amplitude_targets() if drive.sidecar is not None else {}
    low, high = tolerance_db
    return Criteria(
        tolerance_low_db=low,
        tolerance_high_db=high,
        grms_tolerance_percent=grms_tolerance_percent,
        min_fraction_within=min_fraction_within,
        kurtosis_target=targets.get("kurtosis"),
        skewness_target=targets.get("skewness"),
        crest_factor_limit=targets.get("clip"),
        burst_s=(drive.sidecar.modulation or {}).get("burst_s") if drive.sidecar is not None else None,
    )


def drive_target(drive) -> "AsdProfile":
    """The target recorded in a drive's sidecar (breakpoints in Hz and g^2/Hz).

    Raises
    ------
    InputError
        No sidecar profile, or one that cannot be read.

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np
    >>> from vibsynth.io.drivefile import write_drive, open_drive
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "d.npy"
    >>> _ = write_drive(path, [np.zeros(4)], rate_hz=100.0, samples=4)
    >>> drive_target(open_drive(path))
    Traceback (most recent call last):
    ...
    vibsynth.errors.InputError: ...d.npy: has no sidecar with a profile; give the target with --profile PROFILE

    References
    ----------
    See :meth:`vibsynth.io.sidecar.Sidecar.target_profile`.
    """
    if drive.sidecar is None:
        raise InputError("has no sidecar with a profile; give the target with --profile PROFILE", str(drive.path))
    return drive.sidecar.target_profile(str(drive.path))


def verify_drive(drive, target, criteria, resolution_hz: float | None = None,
                 dof: float | None = None, progress: Callable[[int], None] | None = None) -> "Verification":
    """Verify an open drive file against a target (streamed, two passes); errors name the file.

    Parameters
    ----------
    drive : vibsynth.io.drivefile.DriveFile
    target : AsdProfile
        Target ASD, g^2/Hz.
    criteria : vibsynth.analysis.verify.Criteria
    resolution_hz : float, optional
        Welch line spacing, Hz.
    dof : float, optional
        Degrees of freedom to aim at.
    progress : callable, optional
        Called with a sample count after each chunk read; the file is read
        :data:`VERIFY_PASSES` times, so the counts add up to that many times
        ``drive.samples``.

    Returns
    -------
    vibsynth.analysis.verify.Verification
        The ramps recorded in the sidecar are left out.

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np
    >>> from vibsynth.io.drivefile import write_drive, open_drive
    >>> from vibsynth.profile.asd import AsdProfile
    >>> rng = np.random.default_rng(0)
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "d.npy"
    >>> _ = write_drive(path, [rng.standard_normal(40960) * 0.01], rate_hz=1024.0, samples=40960)
    >>> target = AsdProfile([1.0, 500.0], [1e-7, 1e-7], name="flat")
    >>> drive = open_drive(path)
    >>> verify_drive(drive, target, drive_criteria(drive, (-6, 6), 50)).grms_measured > 0
    True

    References
    ----------
    Welch (1967); Bendat & Piersol, Random Data (4th ed., 2010), ch. 8.
    """
    from vibsynth.analysis.verify import verify_record

    start, stop = drive.steady_range

    def chunks():
        for chunk in drive.iter_chunks(READ_CHUNK_SAMPLES):
            yield chunk
            if progress is not None:
                progress(len(chunk))

    try:
        return verify_record(
            chunks,
            drive.rate_hz,
            target,
            criteria,
            n_samples=drive.samples,
            resolution_hz=resolution_hz,
            target_dof=dof,
            skip_start_samples=start,
            skip_end_samples=drive.samples - stop,
        )
    except InputError as error:
        if error.source:
            raise
        raise InputError(error.message, str(drive.path), error.location) from None


def verification_data(result, drive, file_label: str) -> dict:
    """The ``verify --json`` object: the verifier's contract keys, ``file``, and the sidecar's ``compensation``.

    Examples
    --------
    >>> verification_data.__name__
    'verification_data'

    References
    ----------
    RFC 8259 (JSON); see :meth:`vibsynth.analysis.verify.Verification.to_dict`.
    """
    data = _json_safe(result.to_dict())
    data["file"] = str(file_label)
    compensation = drive.sidecar.compensation_summary() if drive.sidecar is not None else None
    if compensation is not None:
        data["compensation"] = _json_safe(compensation)
    return data


def write_verify_report(result, drive, folder, file_label: str, data: dict | None = None, paper: str = "a4",
                        level: str | None = None, extra_pages: tuple = ()) -> dict:
    """Write the figures, report.pdf and verify.json into ``folder`` (created), each atomically.

    ``paper`` is the PDF's paper size (``a4`` or ``letter``); ``level`` the
    level applied to the target in words (default: from the sidecar);
    ``extra_pages`` more report pages, (PNG path, notes) pairs such as
    :func:`severity_pages` gives.

    Returns
    -------
    dict
        Paths by key (``asd``, ``amplitude``, ``excerpt``, ``rms``, ``pdf``, ``json``).

    Examples
    --------
    >>> write_verify_report.__name__
    'write_verify_report'

    References
    ----------
    See :func:`vibsynth.analysis.figures.write_report_figures`, :mod:`vibsynth.io.atomic`.
    """
    from vibsynth.analysis.figures import write_report_figures

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    data = verification_data(result, drive, file_label) if data is None else data
    facts = report_facts(drive, level=level, label=Path(file_label).name)
    paths = write_report_figures(result, folder, title=Path(file_label).name, facts=facts, paper=paper,
                                 extra_pages=extra_pages)
    write_json_atomic(folder / "verify.json", data)
    paths["json"] = str(folder / "verify.json")
    return paths


#: Figures the drive's severity (FDS and ERS) adds to a report folder.
SEVERITY_FILES = ("fds.png", "ers.png")


def drive_severity_block(profile: "AsdProfile", drive, drive_path, folder, rate_hz: float | None = None,
                         scale: float | None = None) -> dict:
    """FDS and ERS of a drive file against its profile over the drive's own duration; writes fds.png and ers.png.

    The duration is the drive's steady part (ramps left out), so the drive's
    damage is compared unscaled with the profile's over the same time.

    Parameters
    ----------
    profile : AsdProfile
        Target ASD, g^2/Hz.
    drive : vibsynth.io.drivefile.DriveFile
        The drive, opened (for its rate and steady part).
    drive_path : str or os.PathLike
        The drive file.
    folder : str or os.PathLike
        Report folder (created if missing).
    rate_hz, scale : float, optional
        For drive files that cannot tell their rate or full scale.

    Returns
    -------
    dict
        :func:`vibsynth.durability.report.severity_report`'s keys (``fn_hz``,
        ``fds_narrowband``, ``fds_dirlik``, ``ers_g``, ``fds_drive``, ``ers_drive_g``,
        ...; NaN as None), paths as names relative to ``folder``, and ``duration_s``.

    Examples
    --------
    >>> drive_severity_block.__name__
    'drive_severity_block'

    References
    ----------
    Lalanne, "Mechanical Vibration and Shock Analysis", vol. 5; Dirlik (1985); ASTM E1049-85 (2017).
    """
    from vibsynth.durability.report import severity_report

    start, stop = drive.steady_range
    duration_s = (stop - start) / drive.rate_hz
    data = severity_report(profile, duration_s, drive_path=drive_path, report_dir=folder, rate_hz=rate_hz,
                           scale=scale)
    data["duration_s"] = duration_s
    data["drive"] = Path(drive_path).name
    data["figures"] = [Path(path).name for path in data.get("figures", [])]
    return _json_safe(data, empty_text=None)


def severity_pages(block: dict, folder) -> tuple:
    """The report pages of a severity block: (PNG path, notes) for the FDS and the ERS figure.

    Examples
    --------
    >>> severity_pages({"figures": []}, ".")
    ()

    References
    ----------
    Lalanne, vol. 5; Dirlik (1985); ASTM E1049-85 (2017); Davenport (1964).
    """
    ratios = [r for r in block.get("fds_drive_to_narrowband", []) if r is not None]
    spread = (f"Drive over narrow band: {min(ratios):.3g} to {max(ratios):.3g} over the grid. "
              if ratios else "")
    notes = {
        "fds.png": (
            f"Fatigue damage spectrum over {block.get('duration_s', 0):.4g} s (the drive's steady part), Q = "
            f"{block.get('q', 10):g}, b = {block.get('b', 8):g}, damage per unit of the material constants "
            "(K = C = 1), counted on cycle amplitudes. The specification's narrow-band closed form (Lalanne, vol. 5) "
            "and the broadband estimate of Dirlik (1985) against the drive's own damage: response of the samples "
            "by the ramp-invariant filter (Smallwood 1981), rainflow counting (ASTM E1049-85), Miner's rule. "
            + spread + "The narrow-band form sits above a broadband response's true damage; the lower panel shows "
            "the ratios.",),
        "ers.png": (
            "Extreme response spectrum: pseudo-acceleration (2 pi fn)^2 z_max / g0 of the oscillator. The "
            "specification's expected largest response (Davenport) against the drive's actual largest response "
            "in its steady part.",),
    }
    folder = Path(folder)
    return tuple((folder / name, notes.get(name, ())) for name in block.get("figures", []))


def level_text(options: dict | None) -> str:
    """The level applied to the profile as written, in words, from a sidecar's options.

    Examples
    --------
    >>> level_text({"rescale_level_db": -6.0})
    '-6 dB'
    >>> level_text({})
    '0 dB (as written)'

    References
    ----------
    Decibels of a power quantity: 10 log10 of the ASD ratio.
    """
    options = options or {}
    if options.get("rescale_level_db") is not None:
        return f"{float(options['rescale_level_db']):+g} dB".replace("+0 dB", "0 dB")
    if options.get("rescale_grms_g") is not None:
        return f"rescaled to {float(options['rescale_grms_g']):g} g RMS"
    return "0 dB (as written)"


def report_facts(drive, level: str | None = None, label: str | None = None, created_utc: str | None = None):
    """What report.pdf says about a drive file besides the verification (:class:`~vibsynth.analysis.figures.ReportFacts`).

    Parameters
    ----------
    drive : vibsynth.io.drivefile.DriveFile
        The opened drive (its sidecar read when there is one).
    level : str, optional
        The level applied, in words (default: from the sidecar's options).
    label : str, optional
        Name to print for the drive (default: its file name).
    created_utc : str, optional
        ISO 8601 time of the report (default: now).

    Returns
    -------
    ReportFacts
        With the SHA-256 digests of the drive file and its sidecar.

    Examples
    --------
    >>> report_facts.__name__
    'report_facts'

    References
    ----------
    FIPS 180-4 (SHA-256); ISO 8601.
    """
    from vibsynth.analysis.figures import ReportFacts

    side = drive.sidecar
    side_path = drivefile.sidecar_path(drive.path)
    options = (side.options or {}) if side is not None else {}
    if drive.format in ("wav", "flac"):
        full_scale = f"sample 1.0 = {drive.scale:.6g} g"
        if side is not None and side.full_scale_from == "peak":
            headroom = side.full_scale_headroom_fraction or 0.0
            full_scale += f" (the record's peak {side.peak_g:.4g} g plus {100 * headroom:g} % headroom)"
        elif side is not None and side.full_scale_from == "given":
            full_scale += " (given)"
    else:
        full_scale = "values in g (no full scale)"
    ramps = ""
    if drive.ramp_in_s or drive.ramp_out_s:
        ramps = f"{drive.ramp_in_s:g} s fade-in, {drive.ramp_out_s:g} s fade-out (left out of the verification)"
    return ReportFacts(
        drive_name=label or drive.path.name,
        drive_format=f"{drive.format.upper()}, {drive.subtype}",
        full_scale=full_scale,
        rate_hz=float(drive.rate_hz),
        duration_s=float(drive.duration_s),
        samples=int(drive.samples),
        seed=side.seed if side is not None else None,
        amplitude=str(options.get("amplitude") or ""),
        level=level or (level_text(options) if side is not None else ""),
        profile_source=str(((side.profile or {}).get("source") if side is not None else "") or ""),
        ramps=ramps,
        drive_sha256=drivefile.file_sha256(drive.path),
        sidecar_name=side_path.name if side_path.exists() else "",
        sidecar_sha256=drivefile.file_sha256(side_path) if side_path.exists() else "",
        tool_version=__version__,
        created_utc=created_utc or _now_utc(),
        model=dict(side.transform) if side is not None and isinstance(side.transform, dict) else None,
    )


def _json_safe(value, empty_text=""):
    """NaN/inf -> None (RFC 8259 has neither); with ``empty_text=None``, empty strings -> None too."""
    if isinstance(value, float) and not np.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _json_safe(v, empty_text) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_json_safe(v, empty_text) for v in value]
    if value == "" and isinstance(value, str):
        return empty_text
    return value


# ====================================================================== the run job
def default_run_folder(profile_name: str) -> Path:
    """The default folder of a run: ``vibsynth-run-NAME`` (NAME reduced to safe characters).

    Examples
    --------
    >>> default_run_folder("bench flat").name
    'vibsynth-run-bench-flat'

    References
    ----------
    POSIX portable file name character set.
    """
    safe = re.sub(r"[^A-Za-z0-9._-]+", "-", profile_name).strip("-") or "profile"
    return Path(f"vibsynth-run-{safe}")


@dataclass(frozen=True)
class RunRequest:
    """A whole run: the drive to make, how to judge it, and the folder for everything.

    Parameters
    ----------
    folder : str or os.PathLike
        Output folder (created if needed).
    file_format : {"flac", "wav", "csv", "npy"}
        Format of ``drive.FORMAT``.
    drive : DriveRequest
        The drive options (its ``output`` is ignored: the drive goes to the folder).
    tolerance_db : (float, float)
        ASD tolerance band, dB.
    grms_tolerance_percent : float
        g RMS tolerance, %.
    min_fraction_within : float
        Fraction of judged lines that must lie in the band.
    resolution_hz : float or None
        Welch line spacing, Hz.
    dof : float or None
        Degrees of freedom to aim at.
    overwrite : bool
        Replace a previous run in the folder (see :func:`check_run_folder`);
        without it a folder holding any file refuses the run.
    paper : {"a4", "letter"}
        Paper size of report.pdf.
    severity : bool
        Add the drive's FDS and ERS against the profile (``fds.png``,
        ``ers.png``, two report pages, a ``severity`` block in report.json).
    shaker_path : str or None
        RIG.toml: check the test against the shaker's ratings (a
        ``shaker_fit`` block in report.json; see :func:`vibsynth.durability.report.fit_report`).
    payload_kg : float
        Test item mass for the shaker check, kg.
    """

    folder: str
    drive: DriveRequest
    file_format: str = "flac"
    tolerance_db: tuple = (-3.0, 3.0)
    grms_tolerance_percent: float = 10.0
    min_fraction_within: float = 1.0
    resolution_hz: float | None = None
    dof: float | None = None
    overwrite: bool = False
    paper: str = "a4"
    severity: bool = False
    shaker_path: str | None = None
    payload_kg: float = 0.0


#: Sample formats a run's drive may have (``drive.FORMAT``).
RUN_DRIVE_FORMATS = ("flac", "wav", "csv", "npy")

#: Files a run writes besides the drive and its sidecar.
RUN_REPORT_FILES = (("profile.toml", "report.json", "report.pdf") + tuple(f"{name}.png" for name in FIGURE_NAMES)
                    + SEVERITY_FILES)

_PARTIAL_NAME = re.compile(r"^\.(?P<name>.+?)\.\d+(?:\.\d+)?\.partial$")


def run_file_names() -> frozenset:
    """Names of every file a run may write into its folder (any drive format, its sidecar, report, figures).

    Examples
    --------
    >>> sorted(run_file_names())[:3]
    ['amplitude.png', 'asd.png', 'drive.csv']

    References
    ----------
    The folder layout of :func:`complete_run`.
    """
    drives = [f"drive.{fmt}" for fmt in RUN_DRIVE_FORMATS]
    return frozenset(drives + [drivefile.sidecar_path(Path(name)).name for name in drives] + list(RUN_REPORT_FILES))


def _is_run_file(name: str) -> bool:
    """A file a run writes, or the temporary file of one (``.NAME.PID.partial``)."""
    known = run_file_names()
    match = _PARTIAL_NAME.match(name)
    return name in known or (match is not None and match.group("name") in known)


def _listing(names, most: int = 4) -> str:
    names = sorted(names, key=lambda name: (not name.startswith("drive."), name))  # the drive first
    shown = ", ".join(names[:most])
    return shown + (f" and {len(names) - most} more" if len(names) > most else "")


def check_run_folder(folder, overwrite: bool = False) -> tuple:
    """Check that a run may write into ``folder``; return the previous run's files there (to remove).

    A missing or empty folder is fine.  A folder holding files refuses the run
    unless ``overwrite`` is given; even then, files a run does not write
    (anything but ``drive.*``, sidecars, ``report.*``, figures and
    ``profile.toml``) are never removed and refuse the run.

    Parameters
    ----------
    folder : str or os.PathLike
        The run folder.
    overwrite : bool
        Replace a previous run in the folder.

    Returns
    -------
    tuple of pathlib.Path
        The files of a previous run (empty when the folder is new or empty).

    Raises
    ------
    InputError
        ``folder`` is a file, holds sub-folders or unknown files, or holds a
        previous run and ``overwrite`` is not given (one line naming what is there).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> check_run_folder(folder)
    ()
    >>> _ = (folder / "notes.txt").write_text("mine")
    >>> check_run_folder(folder, overwrite=True)
    Traceback (most recent call last):
    ...
    vibsynth.errors.InputError: ...holds files a run does not write (notes.txt)...

    References
    ----------
    The folder layout of :func:`complete_run`.
    """
    folder = Path(folder)
    if not folder.exists():
        return ()
    if not folder.is_dir():
        raise InputError("exists and is not a folder; give another output folder", str(folder))
    entries = sorted(folder.iterdir())
    if not entries:
        return ()
    unknown = [p.name + ("/" if p.is_dir() else "") for p in entries if p.is_dir() or not _is_run_file(p.name)]
    ours = [p for p in entries if not p.is_dir() and _is_run_file(p.name)]
    if unknown:
        raise InputError(
            f"{folder}: holds files a run does not write ({_listing(unknown)}); `overwrite` replaces only a "
            "previous run's files, so move those away or give an empty or new folder")
    if not overwrite:
        raise InputError(
            f"{folder}: already holds a run ({_listing(p.name for p in ours)}); give `overwrite` to replace it, "
            "or an empty or new folder")
    return tuple(ours)


@dataclass(frozen=True)
class RunResult:
    """What a run made: the files, the verification, the report and every warning.

    Attributes
    ----------
    folder : pathlib.Path
    drive_path : pathlib.Path
    prepared : PreparedDrive
    written : dict
        The drive's sidecar as written.
    verification : vibsynth.analysis.verify.Verification
    report : dict
        report.json as written.
    files : tuple of str
        Names of the files in the folder.
    warnings : tuple of str
        Every warning of the run, in order (also issued as :class:`VibsynthWarning`).
    severity : dict or None
        The ``severity`` block of report.json (when asked).
    shaker_fit : vibsynth.durability.shaker.FitResult or None
        The shaker check (when asked).
    """

    folder: Path
    drive_path: Path
    prepared: PreparedDrive
    written: dict
    verification: "Verification"
    report: dict
    files: tuple
    warnings: tuple
    severity: dict | None = None
    shaker_fit: object = None

    @property
    def passed(self) -> bool:
        """True when the drive passed verification."""
        return bool(self.verification.passed)

    @property
    def fits(self) -> bool:
        """False when a shaker check was asked for and the test does not fit the shaker."""
        return self.shaker_fit is None or bool(self.shaker_fit.fits)


def _now_utc() -> str:
    """The time now, ISO 8601 in UTC to the second (``2026-12-04T19:00:00+00:00``)."""
    return datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds")


def run_report(result_files: dict, folder: Path, drive_path: Path, profile: "AsdProfile", profile_source: str | None,
               written: dict, verification: "Verification", run_warnings, paper: str = "a4",
               created_utc: str | None = None, severity: dict | None = None, shaker_fit: dict | None = None) -> dict:
    """The report.json object of a run (schema ``report.schema.json``, version :data:`REPORT_SCHEMA_VERSION`).

    Paths are relative to the folder; the drive and its sidecar carry SHA-256
    digests.  The ``verification`` block is the ``verify --json`` contract;
    ``severity`` and ``shaker_fit`` blocks are added when given.

    Examples
    --------
    >>> run_report.__name__
    'run_report'

    References
    ----------
    FIPS 180-4 (SHA-256); ISO 8601 (time); RFC 8259 (JSON).
    """
    side = drivefile.sidecar_path(drive_path)
    plan = written.get("plan") or {}
    options = written.get("options") or {}
    report = {
        "schema_version": REPORT_SCHEMA_VERSION,
        "tool": {"name": "vibsynth", "version": __version__},
        "created_utc": created_utc or _now_utc(),
        "paper": paper,
        "drive": {"path": drive_path.name, "sha256": drivefile.file_sha256(drive_path)},
        "sidecar": {"path": side.name, "sha256": drivefile.file_sha256(side)},
        "profile": {"path": "profile.toml", **profile_block(profile, profile_source)},
        "generation": {
            "seed": written.get("seed"),
            "mode": plan.get("mode"),
            "frame_length_samples": plan.get("frame_length_samples"),
            "line_spacing_hz": plan.get("line_spacing_hz"),
            "amplitude": options.get("amplitude"),
            "rate_hz": written.get("rate"),
            "samples": written.get("samples"),
            "duration_s": written.get("duration_s"),
            "scale_g": written.get("scale"),
            "peak_g": written.get("peak_g"),
        },
        "verification": _json_safe(verification.to_dict(), empty_text=None),
        "figures": {name: Path(path).name for name, path in result_files.items()},
        "warnings": list(run_warnings),
        "caution": DRIVE_CAUTION,
    }
    if severity is not None:
        report["severity"] = _json_safe(severity, empty_text=None)
    if shaker_fit is not None:
        report["shaker_fit"] = _json_safe(shaker_fit, empty_text=None)
    return report


@dataclass(frozen=True)
class PreparedRun:
    """A checked run, its drive planned, nothing written yet but the (possibly new) folder.

    Attributes
    ----------
    request : RunRequest
    profile : AsdProfile
    folder, drive_path : pathlib.Path
    prepared : PreparedDrive
    warnings : tuple of str
        Warnings of the planning (each also issued as a :class:`~vibsynth.errors.VibsynthWarning`).
    previous_files : tuple of pathlib.Path
        A previous run's files in the folder (``overwrite``), removed by
        :func:`complete_run` before it writes.
    """

    request: RunRequest
    profile: "AsdProfile"
    folder: Path
    drive_path: Path
    prepared: PreparedDrive
    warnings: tuple
    previous_files: tuple = ()


def prepare_run(profile: "AsdProfile", request: RunRequest) -> PreparedRun:
    """Check a run and plan its drive; creates the folder (removed again if the request is refused).

    Parameters
    ----------
    profile : AsdProfile
        Target ASD (g^2/Hz), already rescaled as asked.
    request : RunRequest

    Returns
    -------
    PreparedRun

    Raises
    ------
    InputError
        A request that cannot be carried out, or a folder that already holds
        files (see :func:`check_run_folder`); nothing is changed.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from vibsynth.profile.files import read_profile
    >>> folder = pathlib.Path(tempfile.mkdtemp()) / "run"
    >>> drive = DriveRequest(output="", duration_s=4.0, rate_hz=5120.0, seed=1)
    >>> prepare_run(read_profile("bench-flat"), RunRequest(str(folder), drive, "npy")).drive_path.name
    'drive.npy'

    References
    ----------
    See :func:`prepare_drive`.
    """
    folder = Path(request.folder)
    previous = check_run_folder(folder, request.overwrite)
    if request.shaker_path is not None:  # a bad rig file is refused before anything is written
        from vibsynth.durability.shaker import read_shaker

        read_shaker(request.shaker_path)
    drive_path = folder / f"drive.{drivefile.drive_format('drive.' + request.file_format)}"
    drive_request = dataclasses.replace(request.drive, output=str(drive_path))
    folder_created = not folder.exists()
    folder.mkdir(parents=True, exist_ok=True)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", VibsynthWarning)
        try:
            prepared = prepare_drive(profile, drive_request)
        except BaseException:
            if folder_created and not any(folder.iterdir()):
                folder.rmdir()
            raise
    collected = _merge_warnings(list(prepared.warnings), caught)
    for message in collected:
        warnings.warn(message, VibsynthWarning, stacklevel=2)
    return PreparedRun(request=request, profile=profile, folder=folder, drive_path=drive_path, prepared=prepared,
                       warnings=tuple(collected), previous_files=previous)


def _merge_warnings(collected: list, caught) -> list:
    """Add the VibsynthWarning messages of ``caught`` not yet in ``collected``; pass other warnings on as they came."""
    for item in caught:
        if issubclass(item.category, VibsynthWarning):
            if str(item.message) not in collected:
                collected.append(str(item.message))
        else:  # anything else (numpy, matplotlib) goes on as it came
            warnings.warn_explicit(item.message, item.category, item.filename, item.lineno)
    return collected


def complete_run(run: PreparedRun, progress: Callable[[int], None] | None = None) -> RunResult:
    """Write the drive of a prepared run, verify it, and write the rest of the folder.

    Writes ``drive.FORMAT`` and its sidecar, the target (``profile.toml``),
    the figures (``asd.png``, ``amplitude.png``, ``excerpt.png``, ``rms.png``),
    ``report.pdf`` and ``report.json``, each atomically; with ``severity`` also
    ``fds.png`` and ``ers.png`` (two more report pages), with ``shaker_path`` the
    shaker check (judged on the drive's actual peaks) in report.json.

    Parameters
    ----------
    run : PreparedRun
    progress : callable, optional
        Called with a sample count after each chunk written.

    Returns
    -------
    RunResult
        With every warning of the run (planning included); those after the
        planning are issued here as :class:`~vibsynth.errors.VibsynthWarning`.

    Examples
    --------
    >>> complete_run.__name__
    'complete_run'

    References
    ----------
    See :func:`verify_drive` and :func:`vibsynth.analysis.figures.write_report_figures`.
    """
    from vibsynth.analysis.figures import write_report_figures
    from vibsynth.profile.files import write_profile

    request, profile, folder, drive_path = run.request, run.profile, run.folder, run.drive_path
    collected = list(run.warnings)
    # a previous run (overwrite): its files go before anything is written, so the folder never holds an old
    # drive, sidecar or report beside new ones (a run stopped half-way leaves no report.json at all)
    for path in run.previous_files:
        path.unlink(missing_ok=True)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", VibsynthWarning)
        written = write_prepared_drive(run.prepared, progress)
        drive = drivefile.open_drive(drive_path)
        criteria = drive_criteria(drive, request.tolerance_db, request.grms_tolerance_percent,
                                  request.min_fraction_within)
        verification = verify_drive(drive, profile, criteria, request.resolution_hz, request.dof)
        write_profile(profile, folder / "profile.toml")
        created = _now_utc()
        facts = report_facts(drive, created_utc=created)
        severity = drive_severity_block(profile, drive, drive_path, folder) if request.severity else None
        figures = write_report_figures(verification, folder, title=drive_path.name, facts=facts,
                                       paper=request.paper,
                                       extra_pages=severity_pages(severity, folder) if severity else ())
        fit = None
        if request.shaker_path is not None:
            from vibsynth.durability.report import fit_report

            fit = fit_report(profile, request.shaker_path, payload_kg=request.payload_kg, drive_path=drive_path)
    _merge_warnings(collected, caught)
    if verification.segment_message and verification.segment_message not in collected:
        collected.append(verification.segment_message)
    if not verification.passed:
        collected.append("the drive did NOT pass verification; see report.pdf before using it")
    if fit is not None and not fit.fits:
        collected.append(f"the test does NOT fit the shaker {fit.shaker.name} (payload {fit.payload_kg:g} kg): "
                         "at least one demand exceeds its rating; see shaker_fit in report.json")
    report = run_report(figures, folder, drive_path, profile, run.prepared.request.profile_source or None, written,
                        verification, collected, paper=request.paper, created_utc=created, severity=severity,
                        shaker_fit=None if fit is None else fit.to_dict())
    write_json_atomic(folder / "report.json", report)
    for message in collected[len(run.warnings):]:  # those of the planning were issued by prepare_run
        warnings.warn(message, VibsynthWarning, stacklevel=2)
    files = (drive_path.name, drivefile.sidecar_path(drive_path).name, "profile.toml", "report.json", "report.pdf",
             *(f"{name}.png" for name in FIGURE_NAMES), *(severity["figures"] if severity else ()))
    return RunResult(folder=folder, drive_path=drive_path, prepared=run.prepared, written=written,
                     verification=verification, report=report, files=files, warnings=tuple(collected),
                     severity=severity, shaker_fit=fit)


def run_job(profile: "AsdProfile", request: RunRequest, progress: Callable[[int], None] | None = None) -> RunResult:
    """Generate a drive, verify it, and write everything into one folder (:func:`prepare_run` + :func:`complete_run`).

    Parameters
    ----------
    profile : AsdProfile
        Target ASD (g^2/Hz), already rescaled as asked.
    request : RunRequest
    progress : callable, optional
        Called with a sample count after each chunk written.

    Returns
    -------
    RunResult
        With every warning of the run (each also issued as a :class:`~vibsynth.errors.VibsynthWarning`).

    Raises
    ------
    InputError
        A request that cannot be carried out (nothing is written).

    Examples
    --------
    >>> import tempfile, pathlib, warnings
    >>> from vibsynth.profile.files import read_profile
    >>> folder = pathlib.Path(tempfile.mkdtemp()) / "run"
    >>> drive = DriveRequest(output="", duration_s=10.0, rate_hz=5120.0, seed=1)
    >>> with warnings.catch_warnings():
    ...     warnings.simplefilter("ignore")
    ...     result = run_job(read_profile("bench-flat"), RunRequest(str(folder), drive, "npy", (-6.0, 6.0)))
    >>> sorted(result.files)[:3]
    ['amplitude.png', 'asd.png', 'drive.npy']

    References
    ----------
    See :func:`prepare_drive`, :func:`verify_drive` and
    :func:`vibsynth.analysis.figures.write_report_figures`.
    """
    return complete_run(prepare_run(profile, request), progress)
