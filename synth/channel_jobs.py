"""Multi-channel drive jobs: prepare and write a correlated multi-channel drive, and verify one.

Drive side: :func:`prepare_channel_drive` plans the record with
:func:`vibsynth.generate.channels.make_channel_plan` and returns the same
:class:`vibsynth.jobs.PreparedDrive` as a single-channel drive (its
``profile`` is the :class:`~vibsynth.profile.multichannel.MultiChannelProfile`);
:func:`vibsynth.jobs.write_prepared_drive` writes it (one column per channel).

Verify side (never imports the generator): :func:`channel_targets` reads the
channels and pairs back from the sidecar; :func:`verify_channel_drive` verifies
each channel's ASD and g RMS as a single-channel drive is verified, and every
pair's coherence and phase (:mod:`vibsynth.analysis.channels`).

References
----------
Shinozuka (1971); Smallwood & Paez (1993); Bendat & Piersol, *Random Data*,
4th ed., 2010.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from vibsynth.errors import InputError
from vibsynth.io import drivefile
from vibsynth.io.sidecar import Sidecar, profile_block

#: Samples per chunk read while verifying.
READ_CHUNK_SAMPLES = 1 << 16


def _refuse_nongaussian(request) -> None:
    for name in ("kurtosis", "skewness", "clip"):
        if getattr(request, name) is not None:
            raise InputError(
                "non-Gaussian drives are not implemented for multi-channel profiles (a memoryless "
                "transform per channel would change the coherence between channels); drop the option or generate "
                "each channel alone",
                name,
            )


def prepare_channel_drive(profile, request, refuse_when_full: bool = True):
    """Check and plan a multi-channel drive request; nothing is written.

    Parameters
    ----------
    profile : MultiChannelProfile
        Two or more channels (g^2/Hz) and their pairs.
    request : vibsynth.jobs.DriveRequest
        As for a single-channel drive; ``quantities`` must be acceleration
        alone, and ``kurtosis``, ``skewness``, ``clip`` must be None.

    Returns
    -------
    vibsynth.jobs.PreparedDrive

    Raises
    ------
    InputError
        As :func:`vibsynth.jobs.prepare_drive`; a spectral density matrix that
        is not positive semidefinite (one line: frequency, channels, smallest
        eigenvalue); non-Gaussian options.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from vibsynth.jobs import DriveRequest
    >>> from vibsynth.profile.multichannel import parse_any_toml
    >>> text = '[[channels]]\\nname = "x"\\nprofile = "bench-flat"\\n[[channels]]\\nname = "y"\\nprofile = "bench-flat"\\n'
    >>> out = pathlib.Path(tempfile.mkdtemp()) / "d.npy"
    >>> prepare_channel_drive(parse_any_toml(text), DriveRequest(str(out), 2.0, 5120.0, seed=1)).plan.channels
    ('x', 'y')

    References
    ----------
    Shinozuka (1971); Smallwood & Paez (1993); see :mod:`vibsynth.generate.channels`.
    """
    from vibsynth.generate import pipeline
    from vibsynth.generate import plan as synthesis
    from vibsynth.generate.channels import make_channel_plan
    from vibsynth.jobs import (SEED_DERIVATION, PreparedDrive, default_workers, needs_peak_pass, request_seed,
                               sidecar_options, tool_record)

    _refuse_nongaussian(request)
    file_format = drivefile.drive_format(request.output)
    subtype = drivefile.check_subtype(file_format, request.subtype)
    if tuple(request.quantities) != ("acceleration",):
        raise InputError("a multi-channel drive holds acceleration only (one column per channel); drop velocity and "
                         "displacement", "quantities")
    if request.full_scale_g is not None and file_format not in ("wav", "flac"):
        raise InputError(f"full_scale_g applies to .wav/.flac; .{file_format} holds values in g", "full_scale_g")
    for channel in profile.channels:
        synthesis.rig_limit_check(channel, request.stroke_limit_mm, request.velocity_limit_m_s)
    plan = make_channel_plan(
        profile, request.duration_s, request.rate_hz, amplitude=request.amplitude,
        resolution_hz=request.resolution_hz, loop=request.loop, ramp_in_s=request.ramp_s, ramp_out_s=request.ramp_s,
        memory_budget_bytes=request.memory_budget_mb * 2**20,
    )
    drivefile.check_drive_request(request.output, rate_hz=plan.rate_hz, samples=plan.total_samples,
                                  subtype=subtype, channels=plan.channels, check_space=False)
    storage = drivefile.storage_plan(request.output, file_format, subtype, plan.total_samples, ("acceleration",),
                                     plan.rate_hz, channels=len(plan.channels),
                                     peak_pass=needs_peak_pass(file_format, request.full_scale_g, plan.mode))
    if refuse_when_full and not storage["fits"]:
        raise drivefile.space_refusal(request.output, storage)
    seed = request_seed(request)
    workers = default_workers() if request.workers is None else request.workers
    synthesizer = pipeline.Synthesizer(plan, seed, workers)
    factors = plan.channel_factors
    grms_lines = np.sqrt(2.0 * np.sum(np.abs(factors) ** 2, axis=(0, 2)))
    options = sidecar_options(request, ("acceleration",))
    derivation = (
        SEED_DERIVATION + f"; {len(plan.channels)} independent sources, one standard normal pair per line each (source "
        "by source), coloured at each line by a factor H of the spectral density matrix (H H^H = conj(G) df/2; "
        "Cholesky, eigen-decomposition where only semidefinite)"
    )
    if plan.spill_highpass is not None:
        derivation += (f"; overlap-add: sample n is sample n + {plan.spill_highpass.half_length} of the windowed sum "
                       "of frames, high-passed by the spill_highpass FIR")
    envelope = profile.envelope()
    sidecar = Sidecar(
        seed=seed,
        ramp_in_s=plan.ramp_in_samples / plan.rate_hz,
        ramp_out_s=plan.ramp_out_samples / plan.rate_hz,
        options=options,
        plan={
            "mode": plan.mode,
            "frame_length_samples": plan.frame_length,
            "line_spacing_hz": plan.resolution_hz,
            "grms_lines_g": float(np.sqrt(np.sum(grms_lines**2))),
            "seed_derivation": derivation,
            "spill_highpass": plan.spill_highpass.to_dict() if plan.spill_highpass is not None else None,
        },
        profile=profile_block(envelope, request.profile_source),
        warnings=tuple(plan.warnings),
        tool=tool_record(),
        channels=tuple({"name": name, "profile": profile_block(channel, None)}
                       for name, channel in zip(profile.channel_names, profile.channels)),
        pairs=_pair_records(profile),
    )
    return PreparedDrive(request=request, profile=profile, plan=plan, synthesizer=synthesizer,
                         file_format=file_format, subtype=subtype, sidecar=sidecar, seed=seed,
                         warnings=tuple(plan.warnings), design=None, storage=storage)


def _pair_records(profile) -> tuple:
    """The sidecar's ``pairs``: as given, or (``repair``) the repaired values on the check grid."""
    if not profile.repair:
        return tuple(profile.summary()["pairs"])
    grid = profile.check_grid_hz()
    matrix = profile.coherence_matrix(grid)
    names = profile.channel_names
    records = []
    for a in range(profile.channel_count):
        for b in range(a + 1, profile.channel_count):
            values = matrix[:, a, b]
            if profile.pair_of(a, b) is None and not np.any(np.abs(values) > 1e-12):
                continue
            records.append({"channels": [names[a], names[b]], "frequency_hz": grid.tolist(),
                            "coherence": np.clip(np.abs(values) ** 2, 0.0, 1.0).tolist(),
                            "phase_deg": np.angle(values, deg=True).tolist()})
    return tuple(records)


# ====================================================================== verify side
@dataclass
class ChannelVerification:
    """A multi-channel drive verified: each channel as a single-channel drive, and every pair.

    Attributes
    ----------
    channel_names : tuple of str
    channels : tuple of vibsynth.analysis.verify.Verification
        One per channel (ASD, g RMS and the amplitude checks).
    pairs : list of vibsynth.analysis.channels.PairCheck
    frequencies_hz, matrix : numpy.ndarray
        The cross-spectral estimate (Hz; g^2/Hz, shape (K, C, C)).
    dof : float
        Welch degrees of freedom of the cross-spectral estimate.

    Examples
    --------
    See :func:`verify_channel_drive`.

    References
    ----------
    Bendat & Piersol (2010), section 9.2.3; Welch (1967).
    """

    channel_names: tuple
    channels: tuple
    pairs: list
    frequencies_hz: np.ndarray = field(repr=False)
    matrix: np.ndarray = field(repr=False)
    dof: float = 0.0
    segments: int = 0

    @property
    def passed(self) -> bool:
        """Every channel and every pair passed."""
        return all(v.passed for v in self.channels) and all(p.passed for p in self.pairs)

    def to_dict(self) -> dict:
        """Plain data (the ``verify --json`` object of a multi-channel drive)."""
        from vibsynth.analysis.channels import (BAND_SIGMAS, COHERENCE_TOLERANCE, PAIR_MIN_FRACTION,
                                                PHASE_MIN_COHERENCE, PHASE_TOLERANCE_DEG)

        channels = [{"name": n, **v.to_dict()} for n, v in zip(self.channel_names, self.channels)]
        reasons = [f"channel {c['name']}: {reason}" for c in channels for reason in c.get("reasons", [])]
        for pair in self.pairs:
            if not pair.passed:
                a, b = pair.channels
                reasons.append(f"pair {a}-{b}: {pair.fraction_within:.1%} of lines inside the coherence and phase "
                               f"bands (need {PAIR_MIN_FRACTION:.0%})")
        failed = [f"channel {c['name']}" for c in channels if not c.get("pass")]
        failed += [f"pair {p.channels[0]}-{p.channels[1]}" for p in self.pairs if not p.passed]
        return _json_safe({
            "pass": self.passed,
            "failed": failed,
            "reasons": reasons,
            "channels": channels,
            "pairs": [p.to_dict() for p in self.pairs],
            "pair_rule": {
                "coherence": f"expected estimate gamma^2 + (1 - gamma^2)^2 / n_d (bias, Bendat & Piersol 2010) "
                             f"+/- max({COHERENCE_TOLERANCE:g}, {BAND_SIGMAS:g} sigma)",
                "phase_deg": f"target +/- max({PHASE_TOLERANCE_DEG:g} deg, {BAND_SIGMAS:g} sigma) where target "
                             f"coherence >= {PHASE_MIN_COHERENCE:g}",
                "min_fraction_within": PAIR_MIN_FRACTION,
                "averages_n_d": self.dof / 2.0,
                "dof": self.dof,
                "segments": self.segments,
                "resolution_hz": float(self.frequencies_hz[1] - self.frequencies_hz[0]),
            },
        })


def _json_safe(value):
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_json_safe(v) for v in value]
    return value


def channel_targets(drive) -> tuple:
    """Each channel's target (:class:`AsdProfile`) and the pair targets, from a multi-channel drive's sidecar.

    Returns
    -------
    (tuple of AsdProfile, dict)
        Channel targets in column order, and ``(a, b) -> (coherence(f), phase_deg(f))``.

    Raises
    ------
    InputError
        A drive without channels in its sidecar, or an unreadable channel profile.

    Examples
    --------
    >>> channel_targets.__name__
    'channel_targets'

    References
    ----------
    See :mod:`vibsynth.io.sidecar` (``channels``, ``pairs``).
    """
    from vibsynth.profile.asd import AsdProfile

    side = drive.sidecar
    where = str(drivefile.sidecar_path(drive.path))
    if side is None or not side.channels:
        raise InputError("has no multi-channel sidecar (channels)", str(drive.path))
    targets = []
    for index, entry in enumerate(side.channels):
        block = entry.get("profile")
        try:
            points = block["breakpoints"]
            targets.append(AsdProfile([p["frequency_hz"] for p in points], [p["asd_g2_per_hz"] for p in points],
                                      name=entry["name"]))
        except (TypeError, KeyError, InputError) as error:
            raise InputError(f"channel {entry.get('name')!r} has no readable profile ({error})", where,
                             f"channels[{index + 1}].profile") from None
    names = [c["name"] for c in side.channels]
    pairs = {}
    for index, entry in enumerate(side.pairs or ()):
        try:
            a, b = (names.index(n) for n in entry["channels"])
            frequencies = np.asarray(entry["frequency_hz"], dtype=float)
            coherence = np.asarray(entry["coherence"], dtype=float)
            phase = np.asarray(entry["phase_deg"], dtype=float)
        except (TypeError, KeyError, ValueError) as error:
            raise InputError(f"pair cannot be read ({error})", where, f"pairs[{index + 1}]") from None
        pairs[(a, b)] = (_interpolator(frequencies, coherence), _interpolator(frequencies, phase))
    return tuple(targets), pairs


def _interpolator(frequencies: np.ndarray, values: np.ndarray):
    """Log-frequency linear interpolation, constant beyond the ends (the profile's rule)."""
    if frequencies.size == 1:
        return lambda f: np.full(np.shape(f), float(values[0]))
    logs = np.log(frequencies)
    return lambda f: np.interp(np.log(np.maximum(np.asarray(f, dtype=float), 1e-300)), logs, values)


def verify_channel_drive(drive, criteria, resolution_hz: float | None = None, dof: float | None = None,
                         targets=None, progress=None) -> ChannelVerification:
    """Verify a multi-channel drive: every channel's ASD and g RMS, and every pair's coherence and phase.

    Parameters
    ----------
    drive : vibsynth.io.drivefile.DriveFile
        With a multi-channel sidecar.
    criteria : vibsynth.analysis.verify.Criteria
        Applied to each channel.
    resolution_hz, dof : float, optional
        As for :func:`vibsynth.jobs.verify_drive`; the cross-spectral estimate
        uses the first channel's segment length.
    targets : (tuple, dict), optional
        Channel targets and pair targets (default :func:`channel_targets`).
    progress : callable, optional
        Called with a sample count after each chunk read: each channel's
        :data:`vibsynth.jobs.VERIFY_PASSES` passes over the file, then one pass
        over its steady part for the pairs.

    Returns
    -------
    ChannelVerification

    Examples
    --------
    >>> verify_channel_drive.__name__
    'verify_channel_drive'

    References
    ----------
    Welch (1967); Bendat & Piersol (2010), section 9.2.3; see :mod:`vibsynth.analysis.channels`.
    """
    from vibsynth.analysis.channels import CrossSpectralAccumulator, compare_pairs
    from vibsynth.analysis.verify import verify_record

    profiles, pairs = channel_targets(drive) if targets is None else targets
    start, stop = drive.steady_range
    step = progress if progress is not None else (lambda samples: None)

    def counted(chunks):
        for chunk in chunks:
            yield chunk
            step(len(chunk))

    results = []
    for name, target in zip(drive.channels, profiles):
        try:
            results.append(verify_record(
                lambda name=name: counted(drive.iter_chunks(READ_CHUNK_SAMPLES, channel=name)), drive.rate_hz, target,
                criteria, n_samples=drive.samples, resolution_hz=resolution_hz, target_dof=dof,
                skip_start_samples=start, skip_end_samples=drive.samples - stop,
            ))
        except InputError as error:
            raise InputError(f"channel {name}: {error.message}", error.source or str(drive.path),
                             error.location) from None
    nperseg = results[0].estimate.nperseg
    accumulator = CrossSpectralAccumulator(drive.rate_hz, nperseg, len(drive.channels))
    for chunk in counted(drive.iter_channels(READ_CHUNK_SAMPLES, start, stop)):
        accumulator.update(chunk)
    frequencies, matrix, segments, welch = accumulator.result()
    bands = [(p.frequency_min_hz, p.frequency_max_hz) for p in profiles]
    checks = compare_pairs(frequencies, matrix, welch, drive.channels, pairs, bands)
    return ChannelVerification(tuple(drive.channels), tuple(results), checks, frequencies, matrix, welch, segments)


def write_channel_report(result: ChannelVerification, folder, title: str = "") -> dict:
    """Write the matrix figure (``matrix.png``) and each channel's ASD figure into ``folder``; paths by key.

    Examples
    --------
    >>> write_channel_report.__name__
    'write_channel_report'

    References
    ----------
    See :func:`vibsynth.analysis.channels.channel_matrix_figure`.
    """
    from vibsynth.analysis.channels import channel_matrix_figure
    from vibsynth.analysis.figures import asd_figure

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    targets = [v.profile.evaluate(result.frequencies_hz) for v in result.channels]
    figure = channel_matrix_figure(result.frequencies_hz, result.matrix, result.channel_names, targets, result.pairs,
                                   title)
    paths = {"matrix": str(folder / "matrix.png")}
    figure.savefig(paths["matrix"], dpi=110)
    for name, verification in zip(result.channel_names, result.channels):
        path = folder / f"asd-{name}.png"
        asd_figure(verification, title=f"{title} channel {name}").savefig(path, dpi=110)
        paths[f"asd-{name}"] = str(path)
    return paths


# ====================================================================== the run job
@dataclass
class ChannelRunResult:
    """What a multi-channel run made: the files, the verification, every warning.

    Examples
    --------
    See :func:`run_channels`.

    References
    ----------
    See :func:`verify_channel_drive`.
    """

    folder: Path
    drive_path: Path
    prepared: object
    written: dict
    verification: ChannelVerification
    files: tuple
    warnings: tuple

    @property
    def passed(self) -> bool:
        """True when every channel and every pair passed."""
        return self.verification.passed


def run_channels(profile, request, progress=None) -> ChannelRunResult:
    """Generate a multi-channel drive, verify it, and write everything into one folder.

    Writes ``drive.FORMAT`` and its sidecar, ``profile.toml`` (the profile,
    self-contained), ``verify.json``, ``matrix.png`` and one ``asd-CHANNEL.png``
    per channel.

    Parameters
    ----------
    profile : MultiChannelProfile
    request : vibsynth.jobs.RunRequest
    progress : callable, optional
        Called with a sample count after each chunk written.

    Returns
    -------
    ChannelRunResult

    Examples
    --------
    >>> run_channels.__name__
    'run_channels'

    References
    ----------
    See :func:`prepare_channel_drive` and :func:`verify_channel_drive`.
    """
    import dataclasses
    import warnings

    from vibsynth.errors import VibsynthWarning
    from vibsynth.io.atomic import write_json_atomic
    from vibsynth.jobs import _merge_warnings, drive_criteria, write_prepared_drive
    from vibsynth.profile.multichannel import format_multichannel_toml

    folder = Path(request.folder)
    if folder.exists() and not folder.is_dir():
        raise InputError("exists and is not a folder; give another output folder", str(folder))
    drive_path = folder / f"drive.{drivefile.drive_format('drive.' + request.file_format)}"
    created = not folder.exists()
    folder.mkdir(parents=True, exist_ok=True)
    collected: list = []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", VibsynthWarning)
        try:
            prepared = prepare_channel_drive(profile, dataclasses.replace(request.drive, output=str(drive_path)))
        except BaseException:
            if created and not any(folder.iterdir()):
                folder.rmdir()
            raise
        collected = list(prepared.warnings)
        written = write_prepared_drive(prepared, progress)
        drive = drivefile.open_drive(drive_path)
        criteria = drive_criteria(drive, request.tolerance_db, request.grms_tolerance_percent,
                                  request.min_fraction_within)
        verification = verify_channel_drive(drive, criteria, request.resolution_hz, request.dof)
        (folder / "profile.toml").write_text(format_multichannel_toml(profile), encoding="utf-8")
        figures = write_channel_report(verification, folder, f"{drive_path.name} ({profile.name})")
    _merge_warnings(collected, caught)
    if not verification.passed:
        collected.append("the drive did NOT pass verification; see verify.json and matrix.png before using it")
    write_json_atomic(folder / "verify.json", {"file": drive_path.name, **verification.to_dict(),
                                               "warnings": list(collected)})
    files = (drive_path.name, drivefile.sidecar_path(drive_path).name, "profile.toml", "verify.json",
             *(Path(p).name for p in figures.values()))
    return ChannelRunResult(folder, drive_path, prepared, written, verification, files, tuple(collected))


__all__ = ["ChannelRunResult", "ChannelVerification", "channel_targets", "prepare_channel_drive", "run_channels",
           "verify_channel_drive", "write_channel_report"]
