"""`vibsynth verify`: judge a drive file against its target (and the verification pieces `vibsynth run` uses)."""

from __future__ import annotations

import json
from pathlib import Path

import click

from vibsynth.cli import options
from vibsynth.cli import common
from vibsynth.cli.common import Progress, is_quiet, load_profile, note, warn
from vibsynth.cli.types import ProfileSpec, parse_tolerance  # noqa: F401  (parse_tolerance: used by run)

#: Samples per chunk read from a drive file.
READ_CHUNK_SAMPLES = 1 << 18


def format_compensation(block: dict) -> str:
    """One report line for the sidecar's compensation prediction."""
    worst = block.get("worst_in_band_deviation_db")
    text = "predicted worst in-band " + (f"{worst:+.2f} dB" if isinstance(worst, (int, float)) else "n/a")
    if block.get("achievable") is False:
        text += " (the generator reported the target as not fully reachable)"
    return f"  compensation  {text} (from the sidecar, non-Gaussian drive)"


#: Natural frequencies of the response kurtosis a non-Gaussian drive's verification reports.
RESPONSE_POINTS = 6


def response_pass_samples(drive) -> int:
    """Samples :func:`drive_response_kurtosis` reads (the steady part of a non-Gaussian drive; 0 for a Gaussian one)."""
    side = drive.sidecar
    if side is None:
        return 0
    asked = side.options or {}
    if side.modulation is None and all(asked.get(key) is None for key in ("kurtosis", "skewness", "clip")):
        return 0
    start, stop = drive.steady_range
    return stop - start


def drive_response_kurtosis(drive, target, progress=None):
    """Response kurtosis (Q 10, relative displacement) over the band, for a non-Gaussian drive; else None.

    A drive is non-Gaussian when its sidecar asks for a kurtosis, skewness or clip level, or records a
    burst envelope. Reported, not judged: it shows whether the drive's peaks survive a resonance.
    ``progress`` is called with a sample count after each chunk read (one more pass over the file).
    """
    if not response_pass_samples(drive):
        return None
    from vibsynth.analysis.derive import default_response_grid, response_kurtosis_spectrum

    fn = default_response_grid(target.frequency_min_hz, target.frequency_max_hz, drive.rate_hz, RESPONSE_POINTS)
    start, stop = drive.steady_range
    return response_kurtosis_spectrum(_counted(drive.iter_chunks(READ_CHUNK_SAMPLES, start, stop), progress),
                                      drive.rate_hz, fn)


def _counted(chunks, progress):
    """The chunks, with ``progress(len(chunk))`` after each (nothing when ``progress`` is None)."""
    for chunk in chunks:
        yield chunk
        if progress is not None:
            progress(len(chunk))


def format_response_kurtosis(response) -> str:
    """One report line: the response kurtosis at each natural frequency (reported, not judged)."""
    values = ", ".join(f"{fn:.4g} Hz {k:.2f}" for fn, k in zip(response.fn_hz, response.kurtosis))
    return f"  response kurtosis  Q {response.q:g} oscillators (reported, not judged): {values}"


def _db(value) -> str:
    return "-inf dB (no power)" if value is None else f"{value:+.2f} dB"


def format_verification(result, name: str) -> str:
    """The verdict and the evidence as a short text block: every criterion with its measured value and limit."""
    from vibsynth.analysis.verify import floor_percent

    d = result.to_dict()
    a, s = d["asd"], d["statistics"]
    verdict = "PASS" if result.passed else "FAIL (" + ", ".join(result.failed) + ")"
    low, high = a["tolerance_db"]
    checks = list(getattr(result, "checks", ()))
    judged_checks = [c for c in checks if c.get("judged", True)]
    held = sum(1 for c in judged_checks if c["pass"])
    lines = [f"{name} against {result.profile.name}: {verdict}"
             + (f" - {held} of {len(judged_checks)} criteria met" if judged_checks else "")]
    for reason in result.reasons:
        lines.append(f"  ✗ {reason}")
    rows = [
        ("g RMS", f"{d['grms_measured']:.4g} g measured, {d['grms_target']:.4g} g target "
                  f"({d['grms_error_percent']:+.2f} %; tolerance ±{d['grms_tolerance_percent']:g} %)"),
        ("ASD", f"worst {_db(a['max_deviation_db'])} at {a['max_deviation_frequency_hz']:g} Hz; "
                f"{floor_percent(a['fraction_within_tolerance'])} % of {a['lines_judged']} judged lines within "
                f"{low:+g}/{high:+g} dB ({a['lines_near_edge_not_judged']} band-edge lines judged against the "
                "window-smoothed target)"),
        ("estimate", f"Welch, Hann, 50 % overlap: {a['resolution_hz']:.4g} Hz lines, {a['segments']} segments, "
                     f"{a['dof']:.0f} dof (90 % limits {_db(a['confidence_90_percent_db'][0])}/"
                     f"{_db(a['confidence_90_percent_db'][1])})"),
        ("amplitude", f"mean {s['mean']:+.3g} g, skewness {s['skewness']:+.3f}, kurtosis {s['kurtosis']:.3f}, "
                      f"crest factor {s['crest_factor']:.2f} (peak {s['peak']:.4g} g)"),
    ]
    if s.get("expected_peak_sampled_sigma"):
        continuous = (f"; Davenport {s['davenport_expected_peak_sigma']:.2f} σ for the continuous signal"
                      if s.get("davenport_expected_peak_sigma") else "")
        rows.append(("peaks", f"largest {s['largest_peak_sigma']:.2f} σ; a Gaussian record of {s['duration_s']:.4g} s "
                              f"sampled at this rate: {s['expected_peak_sampled_sigma']:.2f} ± "
                              f"{s['expected_peak_sampled_std_sigma']:.2f} σ{continuous}"))
    rows.append(("crossings", f"{s['zero_upcrossing_rate_hz']:.4g} /s counted; "
                              f"{s['zero_upcrossing_rate_sampled_theory_hz']:.4g} /s expected at this rate "
                              f"(Rice {s['zero_upcrossing_rate_rice_hz']:.4g} /s continuous)"))
    rows.append(("beyond kσ", ", ".join(
        f"{e['k_sigma']:g}σ {100 * e['measured_fraction']:.3g} % ({100 * e['gaussian_fraction']:.3g})"
        for e in s["exceedance"]) + "  [Gaussian in brackets]"))
    if s["skipped_start_samples"] or s["skipped_end_samples"]:
        rows.append(("ramps", f"{s['skipped_start_samples']} + {s['skipped_end_samples']} samples of fade-in/out "
                              "left out"))
    for check in checks:
        mark = "ok" if check["pass"] else ("FAIL" if check.get("judged", True) else "outside (reported)")
        rows.append((check["name"].replace("_", " "), f"{mark}: {check['summary']}"))
    width = max(len(label) for label, _ in rows)
    lines += [f"  {label:<{width}}  {value}" for label, value in rows]
    if a["dof_note"]:
        lines.append(f"  note: {a['dof_note']}")
    return "\n".join(lines)


def verify_progress(drive, file, quiet: bool, as_json: bool, passes: int | None = None,
                    extra_samples: int = 0) -> Progress:
    """Progress over reading a drive file (all passes): a bar on a terminal, lines without, JSON lines with --json.

    Shown for files of at least :data:`vibsynth.cli.common.PROGRESS_MIN_SAMPLES` samples, never with --quiet.
    Counts samples read: the file is read ``passes`` times (default
    :data:`vibsynth.jobs.VERIFY_PASSES`), plus ``extra_samples`` (a pass over
    the steady part: the response kurtosis of a non-Gaussian drive, the pairs
    of a multi-channel one).

    Examples
    --------
    >>> verify_progress.__name__
    'verify_progress'

    References
    ----------
    See :class:`vibsynth.cli.common.Progress`.
    """
    from vibsynth.jobs import VERIFY_PASSES

    passes = VERIFY_PASSES if passes is None else int(passes)
    enabled = not quiet and drive.samples >= common.PROGRESS_MIN_SAMPLES
    style = None
    if enabled:
        style = "json" if as_json else ("bar" if common.is_interactive_stderr() else "lines")
    count = passes + (1 if extra_samples else 0)
    return Progress(enabled, passes * drive.samples + int(extra_samples), "verifying", style,
                    f"verifying {file} ({count} passes)")


#: The verification options, declared once in :mod:`vibsynth.cli.options` (shared with `vibsynth run`).
_tolerance_option = options.tolerance
_grms_tolerance_option = options.grms_tolerance
_min_fraction_option = options.min_fraction
_resolution_option = options.welch_resolution
_dof_option = options.dof


@click.command()
@click.argument("file")
@click.option("--profile", "profile_spec", type=ProfileSpec(), default=None, metavar="PROFILE",
              help="Target profile (file, preset, or - for stdin). Default: the profile recorded in FILE's sidecar.")
@options.level_db.but(help="Shift the --profile target by DB decibels first (e.g. -6 for a -6 dB run).")
@options.apply(*options.VERIFY_OPTIONS)
@options.rate.but(required=False, default=None,
                  help="Sample rate in Hz, for a .csv/.npy without a sidecar (must agree with a sidecar).")
@click.option("--scale", type=options.types.positive(), default=None, metavar="G",
              help="g value of full scale 1.0, for a .wav/.flac without a sidecar.")
@options.json_output.but(help="Print the result as JSON on stdout (the published keys: pass, grms_target, asd, "
                              "statistics, ...).")
@click.option("-o", "--report", "report_dir", type=click.Path(file_okay=False), default=None, metavar="DIR",
              help="Write figures (PNG), a multi-page PDF and verify.json into the folder DIR.")
@options.severity.but(help="With --report: add the fatigue damage spectrum (FDS) and extreme response spectrum (ERS) "
                           "of the drive against the target's, over the drive's own duration (fds.png, ers.png, two "
                           "more report.pdf pages, a severity block in verify.json and --json).")
@options.paper
@options.quiet.but(help="No text report (only the exit status; warnings and errors still show; --json still prints).")
def verify(file, profile_spec, level_db, tolerance, grms_tolerance, min_fraction, resolution, dof, rate, scale, as_json,
           report_dir, severity, paper, command_quiet):
    """Judge a drive file against its target ASD: exit 0 pass, 1 fail, 2 bad input.

    Re-estimates the ASD by Welch's method (Hann, 50 % overlap) from the file
    alone, compares each line inside the band with the target's tolerance band
    (lines within two resolution widths of a band edge are reported, not
    judged), compares the overall g RMS, and reports the amplitude statistics
    (skewness, kurtosis, crest factor, exceedances against the Gaussian,
    crossing rate against Rice, largest peak against Davenport). Ramps recorded
    in the sidecar are left out. Kurtosis, skewness or clip targets recorded in
    the sidecar are judged too.

    A multi-channel drive (its sidecar lists channels) is judged channel by
    channel as above, and every pair of channels for coherence and phase
    against the sidecar's pairs (unlisted pairs: incoherent), with bands that
    allow for the estimator's bias and random error at the achieved averages;
    --report adds matrix.png (ASDs on the diagonal, coherence above, phase below).
    """
    from vibsynth import jobs
    from vibsynth.io.drivefile import open_drive

    if severity and not report_dir:
        raise click.UsageError("--severity adds pages to a report; give --report DIR too")
    drive = open_drive(file, rate_hz=rate, scale=scale)
    if drive.channels:
        if severity:
            raise click.UsageError("--severity takes a single-channel drive; run `vibsynth severity --drive` per channel")
        verify_channels(drive, file, profile_spec, level_db, tolerance, grms_tolerance, min_fraction, resolution, dof,
                        as_json, report_dir, command_quiet)
        return
    if level_db is not None and not profile_spec:
        raise click.UsageError("--level-db shifts a --profile target; give --profile too")
    target = load_profile(profile_spec, level_db=level_db) if profile_spec else jobs.drive_target(drive)
    criteria = jobs.drive_criteria(drive, parse_tolerance(tolerance), grms_tolerance, min_fraction)
    note(f"verifying {file} ({drive.samples} samples at {drive.rate_hz:g} Hz) against {target.name}")
    with verify_progress(drive, file, is_quiet(command_quiet), as_json,
                         extra_samples=response_pass_samples(drive)) as progress:
        result = jobs.verify_drive(drive, target, criteria, resolution, dof, progress)
        response = drive_response_kurtosis(drive, target, progress)  # non-Gaussian drives: one more pass
    if result.segment_message:
        warn(result.segment_message)
    data = jobs.verification_data(result, drive, str(file))
    if response is not None:
        data["response_kurtosis"] = response.to_dict()
    compensation = data.get("compensation")
    if report_dir:
        level = None
        if profile_spec:  # a target given here: its level is the one asked here
            level = f"{level_db:+g} dB" if level_db is not None else "0 dB (as written)"
        pages = ()
        if severity:
            data["severity"] = jobs.drive_severity_block(target, drive, file, report_dir, rate_hz=rate, scale=scale)
            pages = jobs.severity_pages(data["severity"], report_dir)
        data["report"] = jobs.write_verify_report(result, drive, report_dir, str(file), data, paper=paper.lower(),
                                                  level=level, extra_pages=pages)
    if as_json:
        click.echo(json.dumps(data, indent=2, allow_nan=False))
    elif not is_quiet(command_quiet):
        click.echo(format_verification(result, Path(file).name))
        if compensation is not None:
            click.echo(format_compensation(compensation))
        if response is not None:
            click.echo(format_response_kurtosis(response))
        if report_dir:
            extra = "".join(f", {name}" for name in data.get("severity", {}).get("figures", []))
            click.echo(f"  report       {report_dir}/ (report.pdf, asd.png, amplitude.png, excerpt.png, rms.png{extra}, "
                       "verify.json)")
    click.get_current_context().exit(0 if result.passed else 1)


def verify_channels(drive, file, profile_spec, level_db, tolerance, grms_tolerance, min_fraction, resolution, dof,
                    as_json, report_dir, command_quiet) -> None:
    """`vibsynth verify` on a multi-channel drive: each channel as a single-channel drive, then every pair."""
    from vibsynth import channel_jobs, jobs
    from vibsynth.io.atomic import write_json_atomic
    from vibsynth.profile.multichannel import MultiChannelProfile

    targets = None
    if profile_spec:
        given = load_profile(profile_spec, level_db=level_db)
        if not isinstance(given, MultiChannelProfile) or given.channel_names != tuple(drive.channels):
            raise click.UsageError(f"--profile must be a multi-channel profile with the channels "
                                   f"{', '.join(drive.channels)}")
        pairs = {(p.first, p.second): (p.coherence_at, p.phase_deg_at) for p in given.pairs}
        targets = (given.channels, pairs)
    elif level_db is not None:
        raise click.UsageError("--level-db shifts a --profile target; give --profile too")
    criteria = jobs.drive_criteria(drive, parse_tolerance(tolerance), grms_tolerance, min_fraction)
    note(f"verifying {file} ({drive.samples} samples at {drive.rate_hz:g} Hz, channels {', '.join(drive.channels)})")
    start, stop = drive.steady_range
    with verify_progress(drive, file, is_quiet(command_quiet), as_json, jobs.VERIFY_PASSES * len(drive.channels),
                         stop - start) as progress:
        result = channel_jobs.verify_channel_drive(drive, criteria, resolution, dof, targets, progress)
    data = {"file": str(file), **result.to_dict()}
    if report_dir:
        paths = channel_jobs.write_channel_report(result, report_dir, Path(file).name)
        write_json_atomic(Path(report_dir) / "verify.json", data)
        data["report"] = {**paths, "json": str(Path(report_dir) / "verify.json")}
    if as_json:
        click.echo(json.dumps(data, indent=2, allow_nan=False))
    elif not is_quiet(command_quiet):
        click.echo(format_channel_verification(result, Path(file).name))
        if report_dir:
            click.echo(f"  report       {report_dir}/ (matrix.png, asd-CHANNEL.png, verify.json)")
    click.get_current_context().exit(0 if result.passed else 1)


def format_channel_verification(result, name: str) -> str:
    """One line per channel (ASD, g RMS) and per pair (coherence, phase), then the verdict."""
    lines = [f"{name}: {'PASS' if result.passed else 'FAIL'} ({len(result.channel_names)} channels)"]
    for channel, verification in zip(result.channel_names, result.channels):
        data = verification.to_dict()
        lines.append(
            f"  channel {channel:<6} {'pass' if verification.passed else 'FAIL'}: g RMS {verification.grms_measured:.4g} "
            f"(target {verification.grms_target:.4g}, {verification.grms_error_percent:+.2f} %), ASD lines within "
            f"tolerance {100 * (data['asd']['fraction_within_tolerance'] or 0):.1f} %"
            + ("" if verification.passed else f"; failed: {', '.join(verification.failed)}"))
    for check in result.pairs:
        data = check.to_dict()
        what = "specified" if check.specified else "incoherent (not specified)"
        phase = ("" if data["phase_error_95_percent_deg"] is None
                 else f", phase error 95 % <= {data['phase_error_95_percent_deg']:.2f} deg")
        lines.append(
            f"  pair {'-'.join(check.channels):<10} {'pass' if check.passed else 'FAIL'}: {what}, "
            f"{100 * data['fraction_within']:.1f} % of {data['lines_judged']} lines in the bands "
            f"(need {100 * data['min_fraction_within']:.0f} %); coherence error 95 % <= "
            f"{data['coherence_error_95_percent']:.3f}{phase}")
    lines.append(f"  estimate     Welch, {result.segments} segments, {result.dof:.0f} dof "
                 f"(n_d = {result.dof / 2:.0f} averages; coherence bias (1 - gamma^2)^2 / n_d allowed for)")
    return "\n".join(lines)
