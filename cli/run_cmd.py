"""`vibsynth run`: the whole job in one command (generate, verify, report) into one folder."""

from __future__ import annotations

from pathlib import Path

import click

from vibsynth._checks import default_rate_hz  # the one default-rate rule
from vibsynth.cli import options
from vibsynth.cli.common import (
    DRIVE_CAUTION,
    amplitude_options,
    caution,
    check_limits_in_inches,
    is_quiet,
    limits_in_si,
    load_profile,
    mark_drive_written,
    note,
    print_json,
    session,
    warn,
)
from vibsynth.cli.generate_cmd import format_written, progress_for
from vibsynth.cli.verify_cmd import (
    format_verification,
    parse_tolerance,
)

#: The preset used when no profile is named.
DEFAULT_PRESET = "parcel-conveyor"

#: Default record length (s): long enough for 120 dof at a fine resolution on the presets.
DEFAULT_DURATION_S = 120.0

#: Files a run writes besides the drive and its sidecar.
REPORT_FILES = ("profile.toml", "report.json", "report.pdf", "asd.png", "amplitude.png", "excerpt.png", "rms.png")


@click.command()
@click.argument("profile", required=False, type=options.types.ProfileSpec())
@click.option("-o", "--output", "--out", "out_dir", type=click.Path(file_okay=False), default=None, metavar="DIR",
              help="The output FOLDER (created if needed; `vibsynth generate -o` takes a file). "
                   "Default: ./vibsynth-run-NAME.")
@options.apply(*(options.duration.but(help=f"Duration of the drive in seconds. Default: {DEFAULT_DURATION_S:g} s, "
                                           "or the profile's [[schedule]] (the sum of its steps)."),
                 options.rate_defaulted)
               + tuple(o for o in options.DRIVE_OPTIONS if o not in (options.duration, options.rate)))
@click.option("--format", "file_format", type=click.Choice(["flac", "wav", "csv", "npy"]), default="flac",
              show_default=True, help="Drive file format.")
@click.option("--overwrite", is_flag=True,
              help="Replace a previous run in the folder: its drive, sidecar, report and figures are removed first. "
                   "Without it a folder holding any file is refused; files a run does not write are never removed.")
@options.apply(*options.VERIFY_OPTIONS)
@options.severity
@options.shaker
@options.payload_kg
@options.paper
@options.inch
@options.json_output
@options.quiet
def run(profile, out_dir, duration, rate, file_format, seed, amplitude, ramp_s, stroke_limit, velocity_limit, grms,
        level_db, kurtosis, skewness, clip, overwrite, tolerance, grms_tolerance, min_fraction, resolution, dof, paper,
        inch, as_json, command_quiet, kurtosis_model=None, burst_s=None, severity=False, shaker_path=None,
        payload_kg=0.0):
    """The main job: generate a drive for PROFILE, verify it, write everything into one folder.

    PROFILE defaults to the bundled preset `parcel-conveyor` (invented demo
    data). Writes drive.FORMAT and its sidecar, the target profile
    (profile.toml), report.json (generation and verification), the figures
    (asd.png, amplitude.png, excerpt.png, rms.png) and report.pdf into the
    folder -o DIR, which must be new or empty (or hold a previous run and
    --overwrite be given). --json prints the report (with the folder, the files, the
    warnings and the caution) instead of the text summary. Exit 0 when the
    drive passes verification, 1 when it does not, 2 for bad input.

    --severity adds the drive's fatigue damage and extreme response spectra
    against the profile's (fds.png, ers.png, two more report.pdf pages, a
    severity block in report.json). --shaker RIG.toml checks the test (with the
    drive's actual peaks) against the shaker's ratings, with --payload-kg the
    test item's mass: a shaker_fit block in report.json, the table in the
    summary, and exit 1 when it does not fit (after everything is written).

    A drive file is open-loop: play it only through a closed-loop controller
    with alarm and abort limits, within the shaker's stroke, velocity and force
    limits, following your lab's procedures, local codes and licensed practice.
    """
    import warnings

    from vibsynth import jobs as drive_job
    from vibsynth.errors import VibsynthWarning

    quiet = is_quiet(command_quiet) or as_json
    spec = profile or DEFAULT_PRESET
    target = load_profile(spec, grms, level_db)
    if duration is None and getattr(getattr(target, "mixed", None), "schedule", None) is None:
        duration = DEFAULT_DURATION_S
    if inch:
        for channel in getattr(target, "channels", (target,)):  # a multi-channel profile: every channel
            check_limits_in_inches(channel, stroke_limit, velocity_limit)
    stroke_limit, velocity_limit = limits_in_si(stroke_limit, velocity_limit, inch)
    rate_hz = rate if rate is not None else default_rate_hz(target.frequency_max_hz)
    note(f"rate {rate_hz:g} Hz" + (" (the smallest common rate >= 2.56 x the top frequency)" if rate is None else ""))
    folder = Path(out_dir) if out_dir else drive_job.default_run_folder(target.name)
    if folder.exists() and not folder.is_dir():
        raise click.UsageError(f"{folder} exists and is not a folder; give another -o/--output")
    drive_job.check_run_folder(folder, overwrite)  # before any work: one line naming what is there
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
            **amplitude_options(spec, kurtosis, skewness, clip, kurtosis_model, burst_s),
        ),
        tolerance_db=parse_tolerance(tolerance),  # checked before any work is done
        grms_tolerance_percent=grms_tolerance,
        min_fraction_within=min_fraction,
        resolution_hz=resolution,
        dof=dof,
        overwrite=overwrite,
        paper=paper.lower(),
        severity=severity,
        shaker_path=shaker_path,
        payload_kg=payload_kg,
    )
    if getattr(target, "channels", None) is not None:  # a multi-channel profile
        if severity or shaker_path is not None:
            raise click.UsageError("--severity and --shaker take a single-channel profile; run `vibsynth severity` "
                                   "or `vibsynth fit` on each channel's profile")
        run_channels_cli(target, request, folder, quiet, as_json, inch)
        return
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", VibsynthWarning)  # the result carries them; printed once each
        pending = drive_job.prepare_run(target, request)
        for message in pending.warnings:
            warn(message)
        try:
            with progress_for(pending.prepared, quiet=quiet) as progress:
                result = drive_job.complete_run(pending, progress)
        finally:
            if Path(pending.prepared.request.output).exists():
                mark_drive_written()  # the caution reaches stderr even when a later step fails
    later = result.warnings[len(pending.warnings):]
    for message in later:
        warn(message)
    if as_json:
        print_json({"folder": str(folder), "files": list(result.files), "pass": bool(result.passed),
                    "report": result.report, "warnings": list(session().warnings), "caution": DRIVE_CAUTION})
    elif not quiet:
        click.echo(format_written(pending.prepared, result.written, inch))
        click.echo("")
        click.echo(format_verification(result.verification, result.drive_path.name))
        if result.severity is not None:
            click.echo(format_severity(result.severity))
        if result.shaker_fit is not None:
            from vibsynth.cli.fit_cmd import format_fit

            click.echo("")
            click.echo(format_fit(result.shaker_fit, target))
        click.echo("")
        click.echo(f"files in {folder}/:")
        for name in result.files:
            click.echo(f"  {name}")
    if result.shaker_fit is not None:
        from vibsynth.cli.fit_cmd import echo_fit_caution

        echo_fit_caution()
    caution()
    click.get_current_context().exit(0 if result.passed and result.fits else 1)


def format_severity(block: dict) -> str:
    """One report line: the drive's FDS over the narrow-band form's, smallest and largest over the grid."""
    ratios = [r for r in block.get("fds_drive_to_narrowband", []) if r is not None]
    text = (f"drive/narrow band {min(ratios):.3g} to {max(ratios):.3g} over {len(ratios)} natural frequencies"
            if ratios else "no natural frequency below 0.3 x the rate")
    return (f"  severity  FDS/ERS over {block['duration_s']:.4g} s, Q {block['q']:g}, b {block['b']:g}: {text} "
            f"({', '.join(block.get('figures', []))})")


def run_channels_cli(target, request, folder: Path, quiet: bool, as_json: bool, inch: bool) -> None:
    """`vibsynth run` on a multi-channel profile: drive, verify.json, matrix.png and per-channel figures."""
    import warnings

    from vibsynth.channel_jobs import run_channels
    from vibsynth.cli.generate_cmd import format_channels_written
    from vibsynth.cli.verify_cmd import format_channel_verification
    from vibsynth.errors import VibsynthWarning

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", VibsynthWarning)  # the result carries them; printed once each
        try:
            result = run_channels(target, request)
        finally:
            if any(Path(folder).glob("drive.*")):
                mark_drive_written()
    for message in result.warnings:
        warn(message)
    if as_json:
        print_json({"folder": str(folder), "files": list(result.files), "pass": bool(result.passed),
                    "verification": result.verification.to_dict(), "warnings": list(session().warnings),
                    "caution": DRIVE_CAUTION})
    elif not quiet:
        click.echo(format_channels_written(result.prepared, result.written, inch))
        click.echo("")
        click.echo(format_channel_verification(result.verification, result.drive_path.name))
        click.echo("")
        click.echo(f"files in {folder}/:")
        for name in result.files:
            click.echo(f"  {name}")
    caution()
    click.get_current_context().exit(0 if result.passed else 1)
