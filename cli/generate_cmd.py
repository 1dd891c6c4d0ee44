"""`vibsynth generate`: write a drive file (and its sidecar) for an ASD profile, Gaussian or not."""

from __future__ import annotations

import contextlib
import signal

import click

from vibsynth.cli.common import DRIVE_CAUTION, Progress, is_interactive_stderr, load_profile, warn
from vibsynth import jobs as drive_job
from vibsynth.generate import plan as synthesis
from vibsynth.io import drivefile

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


def _parse_quantities(text: str) -> tuple[str, ...]:
    names, _ = synthesis.parse_quantities(text)
    if names[0] != "acceleration":
        names = ("acceleration",) + tuple(name for name in names if name != "acceleration")
    return names


#: Non-Gaussian options, shared with `vibsynth run`.
kurtosis_option = click.option("--kurtosis", type=float, default=None, metavar="K",
              help="Non-Gaussian drive with this kurtosis (3 is Gaussian; field vibration is often 4 to 8), by a "
                   "cubic Hermite transform of the Gaussian stream, its spectrum pre-compensated so the ASD still "
                   "meets the target. Below 3 (and for some skewed targets) the inverse (hardening) form is used. Out-of-range values are refused "
                   "with the reachable range.")
skewness_option = click.option("--skewness", type=float, default=None, metavar="S",
              help="Non-Gaussian drive with this skewness (0 is symmetric), as --kurtosis; alone it keeps the "
                   "kurtosis at 3.")
clip_option = click.option("--clip", type=float, default=None, metavar="SIGMA",
              help="Hold every sample within SIGMA x the drive's RMS (the target g RMS), e.g. 3: the Gaussian "
                   "stream is clipped and rescaled, its spectrum pre-compensated so the ASD still meets the target. "
                   "Cannot be combined with --kurtosis/--skewness.")


@click.command()
@click.argument("profile")
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False), metavar="FILE",
              help="Drive file to write; the suffix picks the format: .wav, .flac, .csv or .npy. "
                   "A sidecar FILE.json is written beside it.")
@click.option("--duration", required=True, type=click.FloatRange(min=0, min_open=True), metavar="S",
              help="Duration in seconds.")
@click.option("--rate", required=True, type=click.FloatRange(min=0, min_open=True), metavar="HZ",
              help="Sample rate in Hz; must exceed twice the profile's top frequency (2.56 x is the usual margin).")
@click.option("--seed", type=click.IntRange(min=0), default=None, metavar="N",
              help="Seed of the random phases; same seed and options give identical samples. "
                   "Default: a fresh one, recorded in the sidecar.")
@click.option("--amplitude", type=click.Choice(synthesis.AMPLITUDE_MODES), default="fixed", show_default=True,
              help="fixed: random phases with line amplitudes fixed by the target, so every frame's periodogram "
                   "is the target and the re-estimated ASD sits tightly inside tolerance bands (the default, as "
                   "drive files are judged against those bands). rayleigh: Gaussian line amplitudes, making each "
                   "record a true Gaussian realisation with the usual chi-square scatter (for statistical studies).")
@click.option("--resolution", type=click.FloatRange(min=0, min_open=True), default=None, metavar="HZ",
              help="Line spacing of overlap-add frames; also sets the shortest record (1/HZ s). "
                   "Default: min(lowest frequency, narrowest segment) / 8.")
@click.option("--loop", is_flag=True,
              help="Write one periodic record that repeats seamlessly (for playback loops; no ramps).")
@click.option("--quantities", default="acceleration", show_default=True, metavar="LIST",
              help="Columns for .csv/.npy: acceleration (g), velocity (m/s), displacement (m), comma separated "
                   "(accel,velocity,displacement), integrated in the frequency domain from the same spectrum.")
@click.option("--subtype", type=click.Choice(["float", "pcm24", "pcm16"]), default=None,
              help="Sample format: .wav float (default), pcm24 or pcm16; .flac pcm24 (default) or pcm16.")
@click.option("--full-scale", "full_scale_g", type=click.FloatRange(min=0, min_open=True), default=None, metavar="G",
              help=".wav/.flac: the g value of full scale (sample 1.0). Default: the record's peak plus 0.1 %, "
                   "found by a first pass. A sample beyond a given full scale stops the run; nothing is clipped.")
@click.option("--ramp", "ramp_s", type=click.FloatRange(min=0), default=0.0, metavar="S",
              help="Raised-cosine fade-in and fade-out of S seconds each, so the rig never sees a step; "
                   "the sidecar records them and verification judges the steady part.")
@click.option("--stroke-limit", type=click.FloatRange(min=0, min_open=True), default=None, metavar="MM",
              help="Refuse to write if the profile's 3-sigma displacement (peak-to-peak) exceeds MM.")
@click.option("--velocity-limit", type=click.FloatRange(min=0, min_open=True), default=None, metavar="M_S",
              help="Refuse to write if the profile's 3-sigma velocity (peak) exceeds M_S m/s.")
@click.option("--grms", type=click.FloatRange(min=0, min_open=True), default=None, metavar="G",
              help="Rescale the profile to this overall g RMS first.")
@click.option("--level-db", type=float, default=None, metavar="DB",
              help="Shift the profile by DB decibels first (-6 dB: half the g RMS).")
@click.option("--memory-budget", "memory_budget_mb", type=click.FloatRange(min=1), default=256.0, show_default=True,
              metavar="MB",
              help="Working memory for one periodic inverse FFT of the whole record; longer records are made by "
                   "overlap-add of independent frames in constant memory.")
@kurtosis_option
@skewness_option
@clip_option
@click.option("--quiet", is_flag=True, help="No summary and no progress bar (warnings and the caution still show).")
def generate(profile, output, duration, rate, seed, amplitude, resolution, loop, quantities, subtype, full_scale_g,
             ramp_s, stroke_limit, velocity_limit, grms, level_db, memory_budget_mb, kurtosis, skewness, clip, quiet):
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
    target = load_profile(profile, grms, level_db)
    request = drive_job.DriveRequest(
        output=output,
        duration_s=duration,
        rate_hz=rate,
        seed=seed,
        amplitude=amplitude,
        resolution_hz=resolution,
        loop=loop,
        quantities=_parse_quantities(quantities),
        subtype=subtype,
        full_scale_g=full_scale_g,
        ramp_s=ramp_s,
        stroke_limit_mm=stroke_limit,
        velocity_limit_m_s=velocity_limit,
        memory_budget_mb=memory_budget_mb,
        profile_source=str(profile),
        scaling={"grms": grms, "level_db": level_db},
        kurtosis=kurtosis,
        skewness=skewness,
        clip=clip,
    )
    prepared = drive_job.prepare_drive(target, request)
    for message in prepared.warnings:
        warn(message)
    written = write_with_progress(prepared, quiet)
    if not quiet:
        click.echo(format_written(prepared, written))
    click.echo(DRIVE_CAUTION, err=True)


def write_with_progress(prepared, quiet: bool) -> dict:
    """Write a prepared drive, with a progress bar on a terminal and clean removal on SIGTERM."""
    total = prepared.plan.total_samples
    show = is_interactive_stderr() and not quiet and total >= PROGRESS_MIN_SAMPLES
    with _terminate_as_interrupt(), Progress(show, prepared.passes * total, "generating") as progress:
        return drive_job.write_prepared_drive(prepared, progress)


def format_written(prepared, written: dict) -> str:
    """What was written, the figures a rig operator checks, and how the record was made."""
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
        f"  stroke      {target.displacement_peak_to_peak_3sigma_m * 1e3:.4g} mm peak-to-peak (3 sigma); "
        f"velocity {target.velocity_rms_m_s:.4g} m/s RMS ({3 * target.velocity_rms_m_s:.4g} m/s at 3 sigma)",
        f"  generation  {plan.mode}, {'record' if plan.mode == 'periodic' else 'frames'} of {plan.frame_length} "
        f"samples ({plan.resolution_hz:.4g} Hz lines), {plan.amplitude} amplitudes, seed {prepared.sidecar['seed']}"
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
