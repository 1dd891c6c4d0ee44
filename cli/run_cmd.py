"""`vibsynth run`: the whole job in one command (generate, verify, report) into one folder."""

from __future__ import annotations

from pathlib import Path

import click

from vibsynth.cli.common import DRIVE_CAUTION, load_profile, warn
from vibsynth.cli.generate_cmd import clip_option, format_written, kurtosis_option, progress_for, skewness_option
from vibsynth.cli.verify_cmd import (
    _dof_option,
    _grms_tolerance_option,
    _min_fraction_option,
    _resolution_option,
    _tolerance_option,
    format_verification,
    parse_tolerance,
)
from vibsynth import jobs as drive_job

#: The preset used when no profile is named.
DEFAULT_PRESET = "parcel-conveyor"

#: Sample rates offered by default: the smallest one at least 2.56 x the top frequency is used.
COMMON_RATES_HZ = (1024, 2048, 4096, 5120, 8192, 10240, 12800, 16384, 20480, 25600, 32768, 51200, 65536, 102400)

#: Default record length (s): long enough for 120 dof at a fine resolution on the presets.
DEFAULT_DURATION_S = 120.0


def default_rate_hz(top_frequency_hz: float) -> float:
    """The smallest common rate at least 2.56 x the top frequency (anti-alias margin; common practice, no source)."""
    for rate in COMMON_RATES_HZ:
        if rate >= 2.56 * top_frequency_hz:
            return float(rate)
    return float(2 ** int(2.56 * top_frequency_hz).bit_length())


@click.command()
@click.argument("profile", required=False)
@click.option("-o", "--out", "out_dir", type=click.Path(file_okay=False), default=None, metavar="DIR",
              help="Output folder (created if needed). Default: ./vibsynth-run-NAME.")
@click.option("--duration", type=click.FloatRange(min=0, min_open=True), default=DEFAULT_DURATION_S,
              show_default=True, metavar="S", help="Drive duration in seconds.")
@click.option("--rate", type=click.FloatRange(min=0, min_open=True), default=None, metavar="HZ",
              help="Sample rate in Hz. Default: the smallest common rate at least 2.56 x the top frequency.")
@click.option("--format", "file_format", type=click.Choice(["flac", "wav", "csv", "npy"]), default="flac",
              show_default=True, help="Drive file format.")
@click.option("--seed", type=click.IntRange(min=0), default=None, metavar="N",
              help="Seed (default: a fresh one, recorded in the sidecar).")
@click.option("--amplitude", type=click.Choice(["fixed", "rayleigh"]), default="fixed", show_default=True,
              help="Line amplitudes (see `vibsynth generate --help`).")
@click.option("--ramp", "ramp_s", type=click.FloatRange(min=0), default=0.0, metavar="S",
              help="Raised-cosine fade-in and fade-out, s each.")
@click.option("--stroke-limit", type=click.FloatRange(min=0, min_open=True), default=None, metavar="MM",
              help="Refuse if the profile's 3-sigma peak-to-peak displacement exceeds MM.")
@click.option("--velocity-limit", type=click.FloatRange(min=0, min_open=True), default=None, metavar="M_S",
              help="Refuse if the profile's 3-sigma velocity exceeds M_S m/s.")
@click.option("--grms", type=click.FloatRange(min=0, min_open=True), default=None, metavar="G",
              help="Rescale the profile to this g RMS first.")
@click.option("--level-db", type=float, default=None, metavar="DB", help="Shift the profile by DB decibels first.")
@kurtosis_option
@skewness_option
@clip_option
@_tolerance_option
@_grms_tolerance_option
@_min_fraction_option
@_resolution_option
@_dof_option
def run(profile, out_dir, duration, rate, file_format, seed, amplitude, ramp_s, stroke_limit, velocity_limit, grms,
        level_db, kurtosis, skewness, clip, tolerance, grms_tolerance, min_fraction, resolution, dof):
    """The main job: generate a drive for PROFILE, verify it, write everything into one folder.

    PROFILE defaults to the bundled preset `parcel-conveyor` (invented demo
    data). Writes drive.FORMAT and its sidecar, the target profile
    (profile.toml), report.json (generation and verification), the figures
    (asd.png, amplitude.png, excerpt.png, rms.png) and report.pdf. Exit 0 when
    the drive passes verification, 1 when it does not, 2 for bad input.

    A drive file is open-loop: play it only through a closed-loop controller
    with alarm and abort limits, within the shaker's stroke, velocity and force
    limits, following your lab's procedures, local codes and licensed practice.
    """
    import warnings

    from vibsynth.errors import VibsynthWarning

    spec = profile or DEFAULT_PRESET
    target = load_profile(spec, grms, level_db)
    rate_hz = rate if rate is not None else default_rate_hz(target.frequency_max_hz)
    folder = Path(out_dir) if out_dir else drive_job.default_run_folder(target.name)
    if folder.exists() and not folder.is_dir():
        raise click.UsageError(f"{folder} exists and is not a folder; give another --out")
    request = drive_job.RunRequest(
        folder=str(folder),
        file_format=file_format,
        drive=drive_job.DriveRequest(
            output="",
            duration_s=duration,
            rate_hz=rate_hz,
            seed=seed,
            amplitude=amplitude,
            ramp_s=ramp_s,
            stroke_limit_mm=stroke_limit,
            velocity_limit_m_s=velocity_limit,
            profile_source=spec,
            scaling={"grms": grms, "level_db": level_db},
            kurtosis=kurtosis,
            skewness=skewness,
            clip=clip,
        ),
        tolerance_db=parse_tolerance(tolerance),  # checked before any work is done
        grms_tolerance_percent=grms_tolerance,
        min_fraction_within=min_fraction,
        resolution_hz=resolution,
        dof=dof,
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", VibsynthWarning)  # the result carries them; printed below, once each
        pending = drive_job.prepare_run(target, request)
        for message in pending.warnings:
            warn(message)
        with progress_for(pending.prepared, quiet=False) as progress:
            result = drive_job.complete_run(pending, progress)
    click.echo(format_written(pending.prepared, result.written))
    for message in result.warnings[len(pending.warnings):]:
        if "did NOT pass" not in message:
            warn(message)
    click.echo("")
    click.echo(format_verification(result.verification, result.drive_path.name))
    click.echo("")
    click.echo(f"files in {folder}/:")
    for name in result.files:
        click.echo(f"  {name}")
    for message in result.warnings[len(pending.warnings):]:
        if "did NOT pass" in message:
            warn(message)
    click.echo(DRIVE_CAUTION, err=True)
    click.get_current_context().exit(0 if result.passed else 1)
