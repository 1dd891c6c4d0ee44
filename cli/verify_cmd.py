"""`vibsynth verify` (judge a drive file against its target) and `vibsynth run` (the whole job)."""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

import click

from vibsynth.cli.common import json_safe, load_profile, warn
from vibsynth.errors import InputError

#: Samples per chunk read from a drive file.
READ_CHUNK_SAMPLES = 1 << 18


def parse_tolerance(text: str) -> tuple[float, float]:
    """``"3"`` -> (-3, +3); ``"-2,3"`` or ``"-2:+3"`` -> (-2, +3) (dB)."""
    cleaned = text.replace(":", ",").replace(" ", "")
    try:
        parts = [float(p) for p in cleaned.split(",") if p != ""]
    except ValueError:
        raise InputError(f"'{text}' is not a tolerance; give DB (e.g. 3 for +/-3 dB) or LOW,HIGH (e.g. -2,3)", "--tolerance") from None
    if len(parts) == 1:
        value = abs(parts[0])
        low, high = -value, value
    elif len(parts) == 2:
        low, high = parts
    else:
        raise InputError(f"'{text}' has {len(parts)} numbers; give DB or LOW,HIGH", "--tolerance")
    if not (math.isfinite(low) and math.isfinite(high) and low < 0 < high):
        raise InputError(f"'{text}': the band needs a negative lower and a positive upper limit in dB", "--tolerance")
    return low, high


def profile_from_sidecar(drive) -> "AsdProfile":  # noqa: F821
    """The target recorded in a drive's sidecar (breakpoints in g^2/Hz)."""
    from vibsynth.profile.asd import AsdProfile

    side = f"{drive.path}.json"
    if not drive.sidecar or "profile" not in drive.sidecar:
        raise InputError("has no sidecar with a profile; give the target with --profile PROFILE", str(drive.path))
    record = drive.sidecar["profile"]
    try:
        points = record["breakpoints"]
        frequencies = [float(p["frequency"]) for p in points]
        values = [float(p["asd"]) for p in points]
    except (KeyError, TypeError, ValueError):
        raise InputError("profile.breakpoints must be a list of {frequency, asd}", side, "profile") from None
    return AsdProfile(frequencies, values, name=str(record.get("name", "sidecar profile")),
                      description=str(record.get("description", "")), source=side)


def criteria_for(drive, tolerance, grms_tolerance, min_fraction):
    """Verification criteria: the options, plus amplitude targets the sidecar asked for."""
    from vibsynth.analysis.verify import Criteria

    low, high = parse_tolerance(tolerance)
    options = (drive.sidecar or {}).get("options", {}) if drive.sidecar else {}
    kurtosis = options.get("kurtosis")
    skewness = options.get("skewness")
    clip = options.get("clip")
    return Criteria(
        tolerance_low_db=low,
        tolerance_high_db=high,
        grms_tolerance_percent=grms_tolerance,
        min_fraction_within=min_fraction,
        kurtosis_target=float(kurtosis) if kurtosis is not None else None,
        skewness_target=float(skewness) if skewness is not None else None,
        crest_factor_limit=float(clip) if clip is not None else None,
    )


def sidecar_compensation(drive) -> dict | None:
    """What the generator predicted for a non-Gaussian drive (the sidecar's ``compensation`` block), or None.

    Copied as it is into the verify report under ``compensation``, so the
    achievable residual the generator promised sits beside what the verifier
    measured; the verifier itself never reads it.
    """
    block = drive.sidecar.get("compensation") if isinstance(drive.sidecar, dict) else None
    if not isinstance(block, dict):
        return None
    keys = ("achievable", "worst_in_band_deviation_db", "worst_in_band_deviation_frequency_hz", "residual_relative",
            "out_of_band_fraction", "iterations", "converged", "description")
    return {key: block.get(key) for key in keys if key in block}


def format_compensation(block: dict) -> str:
    """One report line for the sidecar's compensation prediction."""
    worst = block.get("worst_in_band_deviation_db")
    text = "predicted worst in-band " + (f"{worst:+.2f} dB" if isinstance(worst, (int, float)) else "n/a")
    if block.get("achievable") is False:
        text += " (the generator reported the target as not fully reachable)"
    return f"  compensation  {text} (from the sidecar, non-Gaussian drive)"


def run_verification(drive, target, criteria, resolution=None, dof=None):
    """Verify an open drive file against a target (streamed, two passes); errors name the file."""
    from vibsynth.analysis.verify import verify_record

    start, stop = drive.steady_range
    try:
        return verify_record(
            lambda: drive.iter_chunks(READ_CHUNK_SAMPLES),
            drive.rate_hz,
            target,
            criteria,
            n_samples=drive.samples,
            resolution_hz=resolution,
            target_dof=dof,
            skip_start_samples=start,
            skip_end_samples=drive.samples - stop,
        )
    except InputError as error:
        if error.source:
            raise
        raise InputError(error.message, str(drive.path), error.location) from None


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


def write_json_atomic(path: Path, data) -> None:
    """Write JSON under a temporary name and rename it into place."""
    temporary = path.with_name(f".{path.name}.partial-{os.getpid()}")
    try:
        temporary.write_text(json.dumps(data, indent=2, allow_nan=False, default=_json_default) + "\n", encoding="utf-8")
        os.replace(temporary, path)
    finally:
        if temporary.exists():
            temporary.unlink()


def _json_default(value):
    try:
        return float(value)
    except (TypeError, ValueError):
        return str(value)


_tolerance_option = click.option(
    "--tolerance", default="3", show_default=True, metavar="DB|LOW,HIGH",
    help="ASD tolerance band in dB: 3 for ±3 dB, or LOW,HIGH such as -2,3 "
         "(±3 dB is widespread test-specification practice).")
_grms_tolerance_option = click.option(
    "--grms-tolerance", type=click.FloatRange(min=0, max=100, min_open=True, max_open=True), default=10.0,
    show_default=True, metavar="PCT", help="g RMS tolerance in percent (±10 % is widespread practice).")
_min_fraction_option = click.option(
    "--min-fraction", type=click.FloatRange(min=0, max=1, min_open=True), default=1.0, show_default=True,
    metavar="F", help="Pass when at least this fraction of judged lines is in tolerance (1: every line; "
                      "lower values relax the rule and the report says so).")
_resolution_option = click.option(
    "--resolution", type=click.FloatRange(min=0, min_open=True), default=None, metavar="HZ",
    help="Welch line spacing in Hz (default: the finest giving --dof).")
_dof_option = click.option(
    "--dof", type=click.FloatRange(min=2), default=None, metavar="N",
    help="Statistical degrees of freedom to aim at (default 120; a warning says when the record is too short).")


@click.command()
@click.argument("file")
@click.option("--profile", "profile_spec", default=None, metavar="PROFILE",
              help="Target profile (file or preset). Default: the profile recorded in FILE's sidecar.")
@click.option("--level-db", type=float, default=None, metavar="DB",
              help="Shift the --profile target by DB decibels first (e.g. -6 for a -6 dB run).")
@_tolerance_option
@_grms_tolerance_option
@_min_fraction_option
@_resolution_option
@_dof_option
@click.option("--rate", type=click.FloatRange(min=0, min_open=True), default=None, metavar="HZ",
              help="Sample rate, for a .csv/.npy without a sidecar (must agree with a sidecar).")
@click.option("--scale", type=click.FloatRange(min=0, min_open=True), default=None, metavar="G",
              help="g value of full scale 1.0, for a .wav/.flac without a sidecar.")
@click.option("--json", "as_json", is_flag=True, help="Print the result as JSON.")
@click.option("--report", "report_dir", type=click.Path(file_okay=False), default=None, metavar="DIR",
              help="Write figures (PNG), a multi-page PDF and verify.json into DIR.")
def verify(file, profile_spec, level_db, tolerance, grms_tolerance, min_fraction, resolution, dof, rate, scale, as_json,
           report_dir):
    """Judge a drive file against its target ASD: exit 0 pass, 1 fail, 2 bad input.

    Re-estimates the ASD by Welch's method (Hann, 50 % overlap) from the file
    alone, compares each line inside the band with the target's tolerance band
    (lines within two resolution widths of a band edge are reported, not
    judged), compares the overall g RMS, and reports the amplitude statistics
    (skewness, kurtosis, crest factor, exceedances against the Gaussian,
    crossing rate against Rice, largest peak against Davenport). Ramps recorded
    in the sidecar are left out. Kurtosis, skewness or clip targets recorded in
    the sidecar are judged too.
    """
    from vibsynth.io.drivefile import open_drive

    drive = open_drive(file, rate_hz=rate, scale=scale)
    if level_db is not None and not profile_spec:
        raise click.UsageError("--level-db shifts a --profile target; give --profile too")
    target = load_profile(profile_spec, level_db=level_db) if profile_spec else profile_from_sidecar(drive)
    criteria = criteria_for(drive, tolerance, grms_tolerance, min_fraction)
    result = run_verification(drive, target, criteria, resolution, dof)
    if result.segment_message:
        warn(result.segment_message)
    data = json_safe(result.to_dict())
    data["file"] = str(file)
    compensation = sidecar_compensation(drive)
    if compensation is not None:
        data["compensation"] = json_safe(compensation)
    if report_dir:
        folder = Path(report_dir)
        folder.mkdir(parents=True, exist_ok=True)
        from vibsynth.analysis.figures import write_report_figures

        paths = write_report_figures(result, folder, title=Path(file).name)
        write_json_atomic(folder / "verify.json", data)
        paths["json"] = str(folder / "verify.json")
        data["report"] = paths
    if as_json:
        click.echo(json.dumps(data, indent=2, allow_nan=False))
    else:
        click.echo(format_verification(result, Path(file).name))
        if compensation is not None:
            click.echo(format_compensation(compensation))
        if report_dir:
            click.echo(f"  report       {report_dir}/ (report.pdf, asd.png, amplitude.png, excerpt.png, rms.png, verify.json)")
    click.get_current_context().exit(0 if result.passed else 1)
