"""`vibsynth generate`: write a drive file (and its sidecar) for an ASD profile, Gaussian or not."""

from __future__ import annotations

import contextlib

import click

from vibsynth.cli import options
from vibsynth.cli.common import (
    terminate_as_interrupt,
    PROGRESS_MIN_SAMPLES,
    Progress,
    caution,
    check_limits_in_inches,
    is_interactive_stderr,
    is_quiet,
    length_text,
    limits_in_si,
    load_profile,
    mark_drive_written,
    note,
    print_json,
    session,
    velocity_text,
    warn,
)
from vibsynth.cli import types
from vibsynth.cli.common import DRIVE_CAUTION, amplitude_options

#: Records of at least PROGRESS_MIN_SAMPLES samples show progress (a bar on a terminal, lines or --json events
#: without); imported from :mod:`vibsynth.cli.common` and looked up here, so it can be changed per module.




#: Time per sample of a .wav/.flac drive's second pass, against its first (peak) pass, for the time-left
#: estimate of the progress lines and bar: reading the kept samples back and encoding them, or making the
#: record again and encoding it (measured on a 2-core machine, one hour at 51.2 kHz; about, machine-dependent).
SECOND_PASS_COST = {"cached": 0.35, "recomputed": 1.3}

#: Non-Gaussian options, shared with `vibsynth run` (declared once in :mod:`vibsynth.cli.options`).
kurtosis_option = options.kurtosis
skewness_option = options.skewness
clip_option = options.clip


@click.command()
@options.profile_argument
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False), metavar="FILE",
              help="The drive FILE to write (a file; `vibsynth run -o` takes a folder); the suffix picks the format: "
                   ".wav, .flac, .csv or .npy. A sidecar FILE.json is written beside it.")
@options.apply(*options.DRIVE_OPTIONS)
@click.option("--resolution", type=types.positive(), default=None, metavar="HZ",
              help="Line spacing of overlap-add frames; also sets the shortest record (1/HZ s). "
                   "Default: min(lowest frequency, narrowest segment) / 8.")
@click.option("--loop", is_flag=True,
              help="Write one periodic record that repeats seamlessly (for playback loops; no ramps).")
@click.option("--quantities", type=types.QuantityList(), default="acceleration", show_default=True, metavar="LIST",
              help="Columns for .csv/.npy: acceleration (g), velocity (m/s), displacement (m), comma separated "
                   "(accel,velocity,displacement), integrated in the frequency domain from the same spectrum. "
                   "With velocity or displacement the base motion starts and ends at rest (see --rest-taper).")
@click.option("--rest-taper", "rest_taper_s", type=types.FiniteFloatRange(min=0), default=None, metavar="S",
              help="With velocity/displacement columns: taper the displacement over S seconds at each end and "
                   "differentiate, so all three columns are 0 at the first and last sample and still exact "
                   "derivatives of one another (default: 4 periods of the lowest frequency; 0: off). A --ramp "
                   "given with these columns is this taper.")
@click.option("--subtype", type=click.Choice(["float", "pcm24", "pcm16"]), default=None,
              help="Sample format: .wav float (default), pcm24 or pcm16; .flac pcm24 (default) or pcm16.")
@click.option("--full-scale", "full_scale_g", type=types.positive(), default=None, metavar="G",
              help=".wav/.flac: the g value of full scale (sample 1.0). Default: the record's peak plus 0.1 %, "
                   "found by a first pass (a long record keeps its samples in a hidden temporary file beside FILE, "
                   "8 bytes per sample, for the second). A sample beyond a given full scale stops the run; nothing "
                   "is clipped.")
@click.option("--memory-budget", "memory_budget_mb", type=types.FiniteFloatRange(min=1), default=256.0,
              show_default=True, metavar="MB",
              help="Working memory for one periodic inverse FFT of the whole record; longer records are made by "
                   "overlap-add of independent frames in constant memory.")
@click.option("--dry-run", is_flag=True,
              help="Plan the drive and report it (mode, passes, samples, file size, space free) without writing "
                   "anything; exit 0 when it would be written, 2 when it would be refused.")
@options.inch
@options.json_output.but(help="Print the summary as JSON on stdout; progress (long records) goes to stderr as "
                              "JSON lines ({\"event\": \"plan\"|\"progress\", ...}).")
@options.quiet
def generate(profile, output, duration, rate, seed, amplitude, ramp_s, stroke_limit, velocity_limit, grms, level_db,
             kurtosis, skewness, clip, resolution, loop, quantities, rest_taper_s, subtype, full_scale_g,
             memory_budget_mb, dry_run, inch, as_json, command_quiet, kurtosis_model=None, burst_s=None):
    """Write a drive time history whose spectrum is PROFILE's: Gaussian, or with a kurtosis, skewness or clip level.

    Random phases on an inverse-FFT frequency grid: one periodic record when it
    fits the memory budget (always with --loop or velocity/displacement
    columns), else overlap-add of independent sine-windowed frames, streamed
    to the file in constant memory. The samples depend only on the seed and the
    options, not on how the record is split.

    .wav/.flac hold normalised samples; the sidecar's `scale` is the g value of
    1.0 (physical = sample x scale). .csv/.npy hold values in g (and m/s, m).

    --kurtosis, --skewness and --clip pass the Gaussian stream (after
    overlap-add) through a memoryless transform and pre-compensate its
    spectrum, so amplitude distribution and ASD hold together; what the
    transform spreads below the band (which would ask the shaker for large
    displacements) is filtered out; the RMS is the target's, ramps come last,
    and the sidecar records the transform and the predicted spectral residual
    (a warning says when a steep band edge or notch makes the target
    unreachable). Velocity/displacement columns stay Gaussian-only. A
    non-Gaussian drive has higher peaks than a Gaussian one (see `vibsynth
    peaks`): check the rig's force and stroke margins for them.

    Before writing, the file's size is worked out (exact for .wav/.npy, an
    upper bound for .flac/.csv) and the drive is refused (exit 2) when the
    folder cannot hold it and its sidecar.  A long .wav/.flac record whose
    full scale follows its peak keeps the first pass's samples in a hidden
    temporary file beside FILE (8 bytes per sample and channel, removed when
    done) so it is generated once; without room for that file as well, the
    record is made twice instead (same file).  A long record (2^21 samples or
    more) has its size and number of passes printed on stderr first (not with
    --quiet), and reports progress: a bar on a terminal, a line every 5 % (at most one
    per 10 s) without one, JSON lines with --json.  --dry-run stops after that
    report.

    A drive file is open-loop: play it only through a closed-loop controller
    with alarm and abort limits, within the shaker's stroke, velocity and force
    limits, following your lab's procedures, local codes and licensed practice.
    """
    from vibsynth import jobs as drive_job

    quiet = is_quiet(command_quiet)
    target = load_profile(profile, grms, level_db)
    if inch:
        for channel in getattr(target, "channels", (target,)):  # a multi-channel profile: every channel
            check_limits_in_inches(channel, stroke_limit, velocity_limit)
    stroke_limit, velocity_limit = limits_in_si(stroke_limit, velocity_limit, inch)
    request = drive_job.DriveRequest(
        output=output,
        duration_s=duration,
        rate_hz=rate,
        seed=seed,
        amplitude=amplitude,
        resolution_hz=resolution,
        loop=loop,
        quantities=quantities,
        subtype=subtype,
        full_scale_g=full_scale_g,
        ramp_s=ramp_s,
        stroke_limit_mm=stroke_limit,
        velocity_limit_m_s=velocity_limit,
        memory_budget_mb=memory_budget_mb,
        profile_source=str(profile),
        scaling={"grms": grms, "level_db": level_db},
        **amplitude_options(profile, kurtosis, skewness, clip, kurtosis_model, burst_s),
        rest_taper_s=rest_taper_s,
    )
    if dry_run:  # plan even when it will not fit, to say so
        prepared = drive_job.prepare_drive(target, request, refuse_when_full=False)
    else:
        prepared = drive_job.prepare_drive(target, request)
    for message in prepared.warnings:
        warn(message)
    if dry_run:
        report = dry_run_summary(prepared)
        if as_json:
            print_json(report)
        elif not quiet:
            click.echo(format_dry_run(report))
        if not prepared.storage.get("fits", True):
            from vibsynth.io import drivefile

            raise drivefile.space_refusal(request.output, prepared.storage)
        return
    if not quiet and prepared.plan.total_samples >= PROGRESS_MIN_SAMPLES:  # a short record is written at once
        announce(prepared, as_json)
    written = write_with_progress(prepared, quiet, as_json)
    if as_json:
        print_json(drive_summary(prepared, written))
    elif not quiet:
        click.echo(format_written(prepared, written, inch))
    caution()


def write_with_progress(prepared, quiet: bool, as_json: bool = False) -> dict:
    """Write a prepared drive with progress on stderr (unless ``quiet``) and clean removal on SIGTERM."""
    from vibsynth import jobs as drive_job

    with progress_for(prepared, quiet, as_json) as progress:
        written = drive_job.write_prepared_drive(prepared, progress)
    mark_drive_written()
    note(f"wrote {prepared.request.output}")
    return written


@contextlib.contextmanager
def progress_for(prepared, quiet: bool, as_json: bool = False):
    """A progress callback for writing ``prepared``, with clean removal on SIGTERM.

    A record of at least :data:`PROGRESS_MIN_SAMPLES` samples shows a bar on a
    terminal, a line every few per cent without one, or JSON lines with
    ``as_json``; nothing with ``quiet``.
    """
    total = prepared.plan.total_samples
    enabled = not quiet and total >= PROGRESS_MIN_SAMPLES
    style = None
    if enabled:
        style = "json" if as_json else ("bar" if is_interactive_stderr() else "lines")
    note(f"writing {prepared.request.output}: {total} samples, {prepared.plan.mode}, {prepared.passes} pass(es)"
         + (f", peak pass {prepared.peak_pass}" if prepared.peak_pass else ""))
    what = f"writing {prepared.request.output}" + {
        None: "",
        "cached": " (2 passes: the peak, then the file from the samples kept)",
        "recomputed": " (2 passes: the peak, then the file from the record made again)",
    }[prepared.peak_pass if prepared.passes > 1 else None]
    weights = (1.0, SECOND_PASS_COST[prepared.peak_pass]) if prepared.passes > 1 else (1.0,)
    with terminate_as_interrupt(), Progress(enabled, prepared.passes * total, "generating", style, what,
                                            weights) as progress:
        yield progress


def dry_run_summary(prepared) -> dict:
    """The plan of a drive as plain data (``generate --dry-run --json``; the ``plan`` event before writing).

    Keys: ``mode``, ``passes``, ``peak_pass`` (with 2 passes: ``"cached"``,
    the first pass keeps the samples in a temporary file that the second reads
    back; ``"recomputed"``, the folder has no room for that file, so the second
    pass makes the record again; None with one pass), ``samples``, ``bytes``
    (the file; exact when ``bytes_exact``, else an upper bound),
    ``cache_bytes`` (the peak pass's temporary file, 8 bytes x samples x
    columns; 0 without a peak pass), ``needed_bytes`` (the most the write
    holds on disk at once: file, sidecar and, when ``"cached"``, the
    temporary), ``free_bytes`` (None when the file system will not say),
    ``fits``, ``rate_hz``, ``duration_s``, ``frame_length_samples``,
    ``line_spacing_hz``, ``file``, ``sidecar``, ``format``, ``subtype``,
    ``columns``, ``seed``.  Sizes in bytes, rate in Hz, duration in s.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from vibsynth import jobs
    >>> from vibsynth.profile.files import read_profile
    >>> request = jobs.DriveRequest(str(pathlib.Path(tempfile.mkdtemp()) / "d.npy"), 2.0, 5120.0, seed=1)
    >>> report = dry_run_summary(jobs.prepare_drive(read_profile("bench-flat"), request))
    >>> report["samples"], report["bytes"], report["passes"]
    (10240, 82048, 1)

    References
    ----------
    See :func:`vibsynth.io.drivefile.storage_plan` (NumPy NEP 1, RIFF WAVE, FLAC, RFC 4180 sizes).
    """
    from vibsynth.io import drivefile

    plan, request, storage = prepared.plan, prepared.request, prepared.storage
    return {
        "file": str(request.output),
        "sidecar": str(drivefile.sidecar_path(request.output)),
        "format": prepared.file_format,
        "subtype": prepared.subtype,
        "columns": list(plan.quantities),
        "mode": plan.mode,
        "passes": prepared.passes,
        "peak_pass": prepared.peak_pass,
        "samples": plan.total_samples,
        "rate_hz": plan.rate_hz,
        "duration_s": plan.total_samples / plan.rate_hz,
        "frame_length_samples": plan.frame_length,
        "line_spacing_hz": plan.resolution_hz,
        "seed": request.seed,
        "bytes": storage.get("bytes"),
        "bytes_exact": storage.get("bytes_exact"),
        "cache_bytes": storage.get("cache_bytes", 0) if prepared.passes > 1 else 0,
        "needed_bytes": storage.get("needed_bytes"),
        "free_bytes": storage.get("free_bytes"),
        "fits": bool(storage.get("fits", True)),
    }


def _size_text(report: dict) -> str:
    from vibsynth.io.drivefile import format_bytes

    size = format_bytes(report["bytes"])
    return size if report["bytes_exact"] else f"up to {size}"


def _free_text(report: dict) -> str:
    from vibsynth.io.drivefile import format_bytes

    return "free space unknown" if report["free_bytes"] is None else f"{format_bytes(report['free_bytes'])} free"


def _passes_text(report: dict) -> str:
    """``N pass(es) over the record``, and for two passes how the second gets the record (from :func:`dry_run_summary`).

    Examples
    --------
    >>> _passes_text({"passes": 2, "peak_pass": "cached", "cache_bytes": 1474560000})
    '2 passes over the record (the first keeps the samples in a 1.47 GB temporary file for the second)'

    References
    ----------
    See :func:`dry_run_summary`.
    """
    from vibsynth.io.drivefile import format_bytes

    passes = report["passes"]
    text = f"{passes} pass{'es' if passes > 1 else ''} over the record"
    mode = report.get("peak_pass")
    if passes > 1 and mode == "cached":
        text += f" (the first keeps the samples in a {format_bytes(report['cache_bytes'])} temporary file for the second)"
    elif passes > 1 and mode == "recomputed":
        text += (f" (the record is made twice: the folder has no room for the {format_bytes(report['cache_bytes'])} "
                 "temporary file that would keep the first pass's samples)")
    return text


def format_dry_run(report: dict) -> str:
    """The plan of a drive (from :func:`dry_run_summary`) as a short text block (``generate --dry-run``).

    Examples
    --------
    >>> report = {"file": "d.npy", "sidecar": "d.npy.json", "format": "npy", "subtype": "float64",
    ...           "columns": ["acceleration"], "mode": "periodic", "passes": 1, "samples": 10240, "rate_hz": 5120.0,
    ...           "duration_s": 2.0, "frame_length_samples": 10240, "line_spacing_hz": 0.5, "bytes": 82048,
    ...           "bytes_exact": True, "needed_bytes": 147584, "free_bytes": None, "fits": True}
    >>> format_dry_run(report).splitlines()[0]
    'would write d.npy (sidecar d.npy.json); nothing written'

    References
    ----------
    See :func:`dry_run_summary`.
    """
    verdict = "fits" if report["fits"] else "does NOT fit; it would be refused"
    cached = report.get("peak_pass") == "cached"
    return "\n".join([
        f"would write {report['file']} (sidecar {report['sidecar']}); nothing written",
        f"  samples     {report['samples']} at {report['rate_hz']:g} Hz ({report['duration_s']:g} s), "
        f"{report['format']} {report['subtype']}, columns {', '.join(report['columns'])}",
        f"  size        {_size_text(report)} ({report['bytes']} bytes"
        + ("" if report["bytes_exact"] else ", an upper bound")
        + f"); with the sidecar{' and the temporary file' if cached else ''} {report['needed_bytes']} "
        f"bytes; {_free_text(report)}: {verdict}",
        f"  generation  {report['mode']}, {'record' if report['mode'] == 'periodic' else 'frames'} of "
        f"{report['frame_length_samples']} samples ({report['line_spacing_hz']:.4g} Hz lines), {_passes_text(report)}",
    ])


def announce(prepared, as_json: bool = False) -> None:
    """Say on stderr what is about to be written (size, passes, space), before the first sample is made.

    One line of text, or a JSON line ``{"event": "plan", ...}`` (the keys of
    :func:`dry_run_summary`) with ``as_json``.

    Examples
    --------
    >>> announce.__name__
    'announce'

    References
    ----------
    JSON Lines (one RFC 8259 object per line).
    """
    import json

    report = dry_run_summary(prepared)
    if as_json:
        click.echo(json.dumps({"event": "plan", **report}), err=True)
        return
    click.echo(f"vibsynth: writing {report['file']}: {report['samples']} samples at {report['rate_hz']:g} Hz "
               f"({report['duration_s']:g} s), {_size_text(report)} ({_free_text(report)}), {report['mode']}, "
               f"{_passes_text(report)}", err=True)


def _written_head(prepared, written: dict) -> dict:
    """The keys every drive summary starts with: file, format, samples, rate, seed, plan, full scale, peak."""
    from vibsynth.io import drivefile

    plan, request = prepared.plan, prepared.request
    scaled = prepared.file_format in ("wav", "flac")
    return {
        "file": str(request.output),
        "sidecar": str(drivefile.sidecar_path(request.output)),
        "format": prepared.file_format,
        "subtype": prepared.subtype,
        "samples": plan.total_samples,
        "rate_hz": plan.rate_hz,
        "duration_s": plan.duration_s,
        "seed": written.get("seed", prepared.seed),
        "mode": plan.mode,
        "frame_length_samples": plan.frame_length,
        "resolution_hz": plan.resolution_hz,
        "amplitude": plan.amplitude,
        "loop": bool(request.loop),
        "ramp_s": request.ramp_s if plan.ramp_in_samples else 0.0,
        "full_scale_g": written.get("scale") if scaled else None,
        "peak_g": written.get("peak_g"),
    }


def drive_summary(prepared, written: dict) -> dict:
    """What was written, as plain data for --json (keys with units; the caution and the warnings included)."""
    plan, target = prepared.plan, prepared.profile
    if plan.channels:
        return channel_drive_summary(prepared, written)
    summary = {
        **_written_head(prepared, written),
        "target": {
            "name": target.name,
            "grms_g": target.grms,
            "frequency_min_hz": target.frequency_min_hz,
            "frequency_max_hz": target.frequency_max_hz,
            "velocity_rms_m_s": target.velocity_rms_m_s,
            "displacement_peak_to_peak_3sigma_m": target.displacement_peak_to_peak_3sigma_m,
        },
        "transform": None,
        "compensation": None,
        "warnings": list(session().warnings),
        "caution": DRIVE_CAUTION,
    }
    design = getattr(prepared, "design", None)
    if design is not None:
        summary["transform"] = design.transform_block()
        summary["compensation"] = design.compensation_record()
    return summary


def channel_drive_summary(prepared, written: dict) -> dict:
    """--json of a multi-channel drive: as a single-channel one, with ``channels`` (per-channel targets and peaks)."""
    target = prepared.profile
    return {
        **_written_head(prepared, written),
        "channels": [
            {"name": name, "column": entry.get("column"), "peak_g": entry.get("peak_g"), "grms_g": channel.grms,
             "frequency_min_hz": channel.frequency_min_hz, "frequency_max_hz": channel.frequency_max_hz,
             "velocity_rms_m_s": channel.velocity_rms_m_s,
             "displacement_peak_to_peak_3sigma_m": channel.displacement_peak_to_peak_3sigma_m}
            for name, channel, entry in zip(target.channel_names, target.channels, written.get("channels") or ())
        ],
        "pairs": written.get("pairs"),
        "transform": None,
        "compensation": None,
        "warnings": list(session().warnings),
        "caution": DRIVE_CAUTION,
    }


def format_channels_written(prepared, written: dict, inch: bool = False) -> str:
    """What was written for a multi-channel drive: file, one line per channel, how the record was made."""
    from vibsynth.io import drivefile

    plan, target, request = prepared.plan, prepared.profile, prepared.request
    side = drivefile.sidecar_path(request.output)
    scale_text = (f", one full scale {written['scale']:.6g} g for all channels"
                  if prepared.file_format in ("wav", "flac") else "")
    lines = [
        f"wrote {request.output} (sidecar {side.name})",
        f"  samples     {plan.total_samples} at {plan.rate_hz:g} Hz ({plan.duration_s:g} s), {len(plan.channels)} "
        f"channels, {prepared.file_format} {prepared.subtype}{scale_text}",
    ]
    for name, channel, entry in zip(target.channel_names, target.channels, written.get("channels") or ()):
        lines.append(
            f"  channel {name:<4}{channel.grms:.4g} g RMS ({channel.frequency_min_hz:g}-{channel.frequency_max_hz:g} Hz), "
            f"peak {entry.get('peak_g', float('nan')):.4g} g; stroke "
            f"{length_text(channel.displacement_peak_to_peak_3sigma_m, inch)} p-p (3 sigma), velocity "
            f"{velocity_text(channel.velocity_rms_m_s, inch)} RMS")
    lines.append(
        f"  generation  {plan.mode}, {'record' if plan.mode == 'periodic' else 'frames'} of {plan.frame_length} samples "
        f"({plan.resolution_hz:.4g} Hz lines), spectral density matrix factored per line, {plan.amplitude} "
        f"source amplitudes, seed {prepared.seed}" + (f", ramps {request.ramp_s:g} s" if plan.ramp_in_samples else "")
    )
    return "\n".join(lines)


def format_written(prepared, written: dict, inch: bool = False) -> str:
    """What was written, the figures a rig operator checks, and how the record was made."""
    from vibsynth.io import drivefile

    if prepared.plan.channels:
        return format_channels_written(prepared, written, inch)
    plan, target, request = prepared.plan, prepared.profile, prepared.request
    side = drivefile.sidecar_path(request.output)
    file_format = prepared.file_format
    scale_text = f", full scale {written['scale']:.6g} g" if file_format in ("wav", "flac") else ""
    lines = [
        f"wrote {request.output} (sidecar {side.name})",
        f"  samples     {plan.total_samples} at {plan.rate_hz:g} Hz ({plan.duration_s:g} s), "
        f"{file_format} {prepared.subtype}{scale_text}",
        f"  target      {target.grms:.4g} g RMS ({target.name}, {target.frequency_min_hz:g}-{target.frequency_max_hz:g} Hz); "
        f"record peak {written['peak_g']:.4g} g",
        f"  stroke      {length_text(target.displacement_peak_to_peak_3sigma_m, inch)} peak-to-peak (3 sigma); "
        f"velocity {velocity_text(target.velocity_rms_m_s, inch)} RMS "
        f"({velocity_text(3 * target.velocity_rms_m_s, inch)} at 3 sigma)",
        f"  generation  {plan.mode}, {'record' if plan.mode == 'periodic' else 'frames'} of {plan.frame_length} "
        f"samples ({plan.resolution_hz:.4g} Hz lines), {plan.amplitude} amplitudes, seed {prepared.seed}"
        + (", loops seamlessly" if request.loop else "")
        + (f", ramps {request.ramp_s:g} s" if plan.ramp_in_samples else ""),
    ]
    design = getattr(prepared, "design", None)
    if design is not None:
        lines.append(format_design(design))
    return "\n".join(lines)


def _round(value: float) -> float:
    """A moment for display: rounding noise (|x| < 1e-9) shown as 0."""
    return 0.0 if abs(value) < 1e-9 else value


def format_design(design) -> str:
    """One summary line for a non-Gaussian drive: the transform and the predicted spectral residual."""
    block = design.transform_block()
    compensation = design.compensation_record()
    if block["family"] == "clip":
        what = (f"clipped: every sample within {block['crest_factor']:g} x RMS = {block['peak_limit_g']:.4g} g "
                f"(Gaussian stream clipped at {block['clip_level_sigma']:.4g} sigma), kurtosis {block['kurtosis']:.3g}")
    else:
        skewness = block.get("requested_skewness", block["skewness"])
        kurtosis = block.get("requested_kurtosis", block["kurtosis"])
        what = (f"{block['form']} cubic Hermite, skewness {_round(skewness):.3g}, kurtosis {_round(kurtosis):.3g} "
                f"(c3 {block['c3']:.4g}, c4 {block['c4']:.4g}"
                + (f"; solved for {_round(block['skewness']):.3g}, {_round(block['kurtosis']):.3g} to offset the "
                   "spill-over high-pass" if "requested_kurtosis" in block else "")
                + ")")
    return (f"  amplitude   {what}; ASD pre-compensated in {compensation['iterations']} updates, predicted worst "
            f"in-band {compensation['worst_in_band_deviation_db']:+.2f} dB"
            + ("" if compensation["achievable"] else " (target not fully reachable, see sidecar)"))


__all__ = ["generate"]
