"""`vibsynth generate`: write a drive file (and its sidecar) for an ASD profile, Gaussian or not."""

from __future__ import annotations

import contextlib
import signal

import click

from vibsynth.cli import options
from vibsynth.cli.common import (
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

#: Records longer than this many samples show a progress bar (on a terminal).
PROGRESS_MIN_SAMPLES = 1 << 21


@contextlib.contextmanager
def _terminate_as_interrupt():
    """Turn SIGTERM into KeyboardInterrupt while writing, so temporary files are removed."""

    def _raise(signum, frame):  # noqa: ARG001
        raise KeyboardInterrupt

    try:
        previous = signal.signal(signal.SIGTERM, _raise)
    except (ValueError, OSError):  # not the main thread
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


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
                   "(accel,velocity,displacement), integrated in the frequency domain from the same spectrum.")
@click.option("--subtype", type=click.Choice(["float", "pcm24", "pcm16"]), default=None,
              help="Sample format: .wav float (default), pcm24 or pcm16; .flac pcm24 (default) or pcm16.")
@click.option("--full-scale", "full_scale_g", type=types.positive(), default=None, metavar="G",
              help=".wav/.flac: the g value of full scale (sample 1.0). Default: the record's peak plus 0.1 %, "
                   "found by a first pass. A sample beyond a given full scale stops the run; nothing is clipped.")
@click.option("--memory-budget", "memory_budget_mb", type=types.FiniteFloatRange(min=1), default=256.0,
              show_default=True, metavar="MB",
              help="Working memory for one periodic inverse FFT of the whole record; longer records are made by "
                   "overlap-add of independent frames in constant memory.")
@options.inch
@options.json_output
@options.quiet
def generate(profile, output, duration, rate, seed, amplitude, ramp_s, stroke_limit, velocity_limit, grms, level_db,
             kurtosis, skewness, clip, resolution, loop, quantities, subtype, full_scale_g, memory_budget_mb, inch,
             as_json, command_quiet, kurtosis_model=None, burst_s=None):
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

    A drive file is open-loop: play it only through a closed-loop controller
    with alarm and abort limits, within the shaker's stroke, velocity and force
    limits, following your lab's procedures, local codes and licensed practice.
    """
    from vibsynth import jobs as drive_job

    quiet = is_quiet(command_quiet)
    target = load_profile(profile, grms, level_db)
    if inch:
        check_limits_in_inches(target, stroke_limit, velocity_limit)
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
    )
    prepared = drive_job.prepare_drive(target, request)
    for message in prepared.warnings:
        warn(message)
    written = write_with_progress(prepared, quiet or as_json)
    if as_json:
        print_json(drive_summary(prepared, written))
    elif not quiet:
        click.echo(format_written(prepared, written, inch))
    caution()


def write_with_progress(prepared, quiet: bool) -> dict:
    """Write a prepared drive, with a progress bar on a terminal and clean removal on SIGTERM."""
    from vibsynth import jobs as drive_job

    with progress_for(prepared, quiet) as progress:
        written = drive_job.write_prepared_drive(prepared, progress)
    mark_drive_written()
    note(f"wrote {prepared.request.output}")
    return written


@contextlib.contextmanager
def progress_for(prepared, quiet: bool):
    """A progress callback for writing ``prepared`` (a bar on a terminal), with clean removal on SIGTERM."""
    total = prepared.plan.total_samples
    show = is_interactive_stderr() and not quiet and total >= PROGRESS_MIN_SAMPLES
    note(f"writing {prepared.request.output}: {total} samples, {prepared.plan.mode}, {prepared.passes} pass(es)")
    with _terminate_as_interrupt(), Progress(show, prepared.passes * total, "generating") as progress:
        yield progress


def drive_summary(prepared, written: dict) -> dict:
    """What was written, as plain data for --json (keys with units; the caution and the warnings included)."""
    from vibsynth.io import drivefile

    plan, target, request = prepared.plan, prepared.profile, prepared.request
    scaled = prepared.file_format in ("wav", "flac")
    summary = {
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


def format_written(prepared, written: dict, inch: bool = False) -> str:
    """What was written, the figures a rig operator checks, and how the record was made."""
    from vibsynth.io import drivefile

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
