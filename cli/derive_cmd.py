"""`vibsynth derive`: from a recording to a test profile (ASD breakpoints and amplitude statistics)."""

from __future__ import annotations

from pathlib import Path

import click

from vibsynth.cli import options
from vibsynth.cli.common import is_quiet, note, print_json
from vibsynth.cli.types import positive

#: Samples per chunk read from the recording.
READ_CHUNK_SAMPLES = 1 << 18


def _band(ctx, param, value):
    if value is None:
        return None
    low, high = value
    if not (0 < low < high):
        raise click.BadParameter(f"{low:g} {high:g}: give the lowest and highest frequency, 0 < LO < HI (Hz)")
    return float(low), float(high)


def format_derived(result, profile_path: str | None) -> str:
    """The measurement and the fitted profile as a short text block."""
    d = result.to_dict(profile_path)
    w, st, fit = d["welch"], d["stationarity"], d["fit"]
    rows = [
        ("record", f"{result.samples} samples at {result.rate_hz:g} Hz ({result.duration_s:.4g} s)"),
        ("g RMS", f"{result.grms_g:.4g} g (mean {result.mean_g:+.3g} g)"),
        ("amplitude", f"skewness {result.skewness:+.3f}, kurtosis {result.kurtosis:.3f}, crest factor "
                      f"{result.crest_factor:.2f} (peak {result.peak_g:.4g} g)"),
        ("ASD", f"Welch, Hann, 50 % overlap: {w['resolution_hz']:.4g} Hz lines, {w['segments']} segments, "
                f"{w['dof']:.0f} dof; band {result.band_hz[0]:g}-{result.band_hz[1]:g} Hz"),
        ("stationarity", ("stationary" if result.stationary else "NOT stationary")
         + f": {st['reverse_arrangements']} reverse arrangements of {st['windows']} window mean squares "
           f"({st['window_s']:.3g} s each; {st['limit_low']:.0f}-{st['limit_high']:.0f} expected at "
           f"{st['significance']:g})"),
        ("bursts", "no burst time scale (kurtosis near 3)" if result.burst_s is None
         else f"envelope time scale {result.burst_s:.3g} s"),
        ("amplitude model", d["amplitude"]["model"]),
        ("response kurtosis", f"Q {result.response.q:g}: " + ", ".join(
            f"{fn:.4g} Hz {k:.2f}" for fn, k in zip(result.response.fn_hz, result.response.kurtosis))),
        ("fit", f"{fit['method']}, {fit['points']} breakpoints: log error RMS {fit['log_error_rms_db']:.2f} dB, "
                f"at most {fit['worst_below_db']:.2f} dB below and {fit['worst_above_db']:.2f} dB above a measured line"
         + (f" (margin {fit['margin_db']:g} dB)" if fit["method"] == "envelope" else "")),
    ]
    width = max(len(label) for label, _ in rows)
    lines = [f"{result.source}: derived profile" + (f" written to {profile_path}" if profile_path else "")]
    lines += [f"  {label:<{width}}  {value}" for label, value in rows]
    lines += [f"    {p['frequency_hz']:10.4g} Hz  {p['asd_g2_per_hz']:.4g} g^2/Hz" for p in fit["breakpoints"]]
    return "\n".join(lines)


@click.command()
@click.argument("recording")
@options.rate.but(required=False, default=None,
                  help="Sample rate in Hz, for a .csv/.npy without a sidecar or time column (must agree with a sidecar).")
@click.option("--scale", type=positive(), default=None, metavar="G",
              help="g value of full scale 1.0, for a .wav/.flac without a sidecar.")
@click.option("--points", type=click.IntRange(min=2), default=8, show_default=True, metavar="N",
              help="Breakpoints of the fitted profile.")
@click.option("--fit", "method", type=click.Choice(["envelope", "mean"]), default="envelope", show_default=True,
              help="envelope: the profile lies at or above every measured line (less --margin); mean: least squares "
                   "on log-log axes.")
@click.option("--margin", "margin_db", type=options.types.FiniteFloatRange(min=0), default=0.0, show_default=True,
              metavar="DB", help="How far the envelope fit may lie below a measured line, dB.")
@click.option("--band", "band_hz", type=(positive(), positive()), default=None, callback=_band, metavar="LO HI",
              help="Band to measure and fit, Hz. Default: where the ASD lies within 40 dB of its peak.")
@click.option("--q", "q", type=positive(), default=10.0, show_default=True,
              help="Amplification Q of the oscillators of the response kurtosis spectrum.")
@click.option("-o", "--output", "output", type=click.Path(dir_okay=False), default=None, metavar="FILE",
              help="Write the fitted profile to FILE (.toml, with an [amplitude] table that `vibsynth generate` "
                   "uses as its defaults).")
@click.option("--drive", "drive_file", type=click.Path(dir_okay=False), default=None, metavar="FILE",
              help="A drive file made for this recording: its response kurtosis on the same natural frequencies is "
                   "reported and plotted beside the recording's (does the drive's peakiness survive the resonances?).")
@click.option("--report", "report_dir", type=click.Path(file_okay=False), default=None, metavar="DIR",
              help="Write derive.json and figures (measured ASD with the fit; response kurtosis) into DIR.")
@options.json_output.but(help="Print the result as JSON (keys: grms, kurtosis, skewness, stationary, profile_path, "
                              "and the rest with units).")
@options.quiet
def derive(recording, rate, scale, points, method, margin_db, band_hz, q, output, report_dir, as_json,
           command_quiet, drive_file=None):
    """Measure a RECORDING and fit a test profile to it: ASD breakpoints plus its amplitude statistics.

    Reads the recording (.wav/.flac/.csv/.npy, with or without a sidecar) in
    two passes and reports its ASD (Welch, dof stated), g RMS, mean, skewness,
    kurtosis, crest factor, a stationarity judgement (reverse-arrangements test
    on the mean squares of 40 successive windows, Bendat & Piersol), the
    kurtosis of the response of Q oscillators across the band, and the time
    scale of its bursts when it is peaky. The written profile carries the
    amplitude statistics in an [amplitude] table, so `vibsynth generate
    PROFILE.toml` reproduces the spectrum and the peakiness (bursts whose peaks
    survive a resonance) in a drive of any length; options override the table.

    Too short a recording for the band's lowest frequency, a constant one or
    non-finite samples stop with exit 2; clipped flat tops and a trend are
    warnings.
    """
    from vibsynth.analysis.derive import derive_record
    from vibsynth.errors import InputError
    from vibsynth.io.drivefile import open_drive

    quiet = is_quiet(command_quiet) or as_json
    destination = None
    if output is not None:
        destination = Path(output)
        if destination.suffix.lower() != ".toml":
            raise InputError(f"the derived profile is written as TOML; name it FILE.toml (got '{destination.suffix}')",
                             output)
        if not destination.parent.exists():
            raise InputError("folder does not exist; create it first", str(destination.parent))
    drive = open_drive(recording, rate_hz=rate, scale=scale)
    compared = open_drive(drive_file) if drive_file is not None else None  # checked before anything is written
    result = derive_record(drive, band_hz=band_hz, points=points, method=method, margin_db=margin_db, q=q,
                           chunk_samples=READ_CHUNK_SAMPLES)
    profile_path = None
    if destination is not None:
        from vibsynth.io.atomic import write_text_atomic
        from vibsynth.profile.files import format_amplitude_section, format_toml_profile

        profile = result.profile(name=destination.stem, description=f"Derived from {Path(recording).name} "
                                                                      f"({result.fit.method} fit)")
        text = format_toml_profile(profile) + "\n" + format_amplitude_section(result.amplitude_section())
        write_text_atomic(destination, text)
        profile_path = str(destination)
        note(f"wrote {destination}")
    data = result.to_dict(profile_path)
    drive_response = None
    if drive_file is not None:
        from vibsynth.analysis.derive import response_kurtosis_spectrum

        start, stop = compared.steady_range
        drive_response = response_kurtosis_spectrum(compared.iter_chunks(READ_CHUNK_SAMPLES, start, stop),
                                                    compared.rate_hz, result.response.fn_hz, q)
        data["drive_response_kurtosis"] = {"drive": str(drive_file), **drive_response.to_dict()}
    if report_dir is not None:
        from vibsynth.analysis.derive_figures import write_derive_report

        data["report_files"] = write_derive_report(result, Path(report_dir), data, drive_response)
    if as_json:
        print_json(data)
    elif not quiet:
        click.echo(format_derived(result, profile_path))
        if drive_response is not None:
            click.echo(f"  drive {drive_file}: input kurtosis {drive_response.input_kurtosis:.3f}; response kurtosis "
                       + ", ".join(f"{fn:.4g} Hz {k:.2f}" for fn, k in zip(drive_response.fn_hz,
                                                                            drive_response.kurtosis)))
