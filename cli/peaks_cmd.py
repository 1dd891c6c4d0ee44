"""`vibsynth peaks`: how high will the peaks of a drive go, from theory and a Monte-Carlo, side by side."""

from __future__ import annotations

import json

import click

from vibsynth._checks import RATE_MARGIN_FACTOR, default_rate_hz
from vibsynth.cli import options
from vibsynth.cli.common import (Progress, is_interactive_stderr, is_quiet, json_safe, load_profile, note,
                                 record_mapper, warn)

#: Above this many samples to synthesize in the Monte-Carlo, a runtime warning is printed.
MC_WARN_SAMPLES = 200_000_000


def _percent(p: float) -> str:
    """A probability as a percentage, in one style for every magnitude."""
    if p == 0:
        return "0 %"
    if p >= 1e-5:
        return f"{100 * p:.3g} %"
    return f"{100 * p:.2e} %"


def _peak_cell(peak, rms_g: float) -> str:
    return (f"{peak.mean_sigma:5.2f} ± {peak.std_sigma:4.2f} [{peak.p05_sigma:.2f}, {peak.p95_sigma:.2f}]"
            f"  {peak.mean_sigma * rms_g:.4g} g")


def format_report(report) -> str:
    """The peak table as text: largest peak, crest factor and exceedances, theory beside Monte-Carlo."""
    from vibsynth import peaks as peak_stats

    profile = report.profile
    lines = [
        f"Peaks of a {report.duration_s:g} s drive of {profile.name} ({profile.grms:.4g} g RMS, "
        f"{profile.frequency_min_hz:g}-{profile.frequency_max_hz:g} Hz) sampled at {report.rate_hz:g} Hz"
        + (f"; Monte-Carlo of {report.records} records per row, seed {report.seed}" if report.records else
           "; theory only"),
        "",
        f"largest |x| in {report.duration_s:g} s, in multiples of the RMS: mean ± std [5 %, 95 %], and the mean in g",
    ]
    columns = ["theory, continuous signal", f"theory, {report.rate_hz:g} Hz samples"]
    if report.records:
        columns.append(f"Monte-Carlo, {report.records} records")
    width = max(len(row.theory.label) for row in report.rows) + 2
    cell = 40
    lines.append(" " * (width + 2) + "".join(f"{c:<{cell}}" for c in columns))
    for row in report.rows:
        cells = [_peak_cell(row.theory.continuous, row.theory.rms_g), _peak_cell(row.theory.sampled, row.theory.rms_g)]
        if row.monte_carlo is not None:
            cells.append(_peak_cell(row.monte_carlo.largest_peak(), row.theory.rms_g))
        lines.append(f"  {row.theory.label:<{width}}" + "".join(f"{c:<{cell}}" for c in cells))
    lines += ["", "crest factor (largest |x| / RMS): expected"]
    for row in report.rows:
        text = (f"  {row.theory.label:<{width}}{row.theory.continuous.mean_sigma:.2f} continuous, "
                f"{row.theory.sampled.mean_sigma:.2f} sampled")
        if row.theory.crest_factor_limit is not None:
            text += f" (hard limit {row.theory.crest_factor_limit:g})"
        if row.monte_carlo is not None:
            mc = row.monte_carlo
            text += f"; Monte-Carlo {float(mc.crest_factor.mean()):.2f} (highest {float(mc.crest_factor.max()):.2f})"
        lines.append(text)
    lines += ["", "share of samples beyond k x RMS, P(|x| > k sigma): theory" + (" / Monte-Carlo" if report.records else "")]
    header = "  k   " + "".join(f"{row.theory.label:<34}" for row in report.rows)
    lines.append(header)
    for index, k in enumerate(peak_stats.K_SIGMA_LEVELS):
        cells = []
        for row in report.rows:
            text = _percent(row.theory.exceedance[index])
            if row.monte_carlo is not None:
                text += " / " + _percent(float(row.monte_carlo.exceedance[index]))
            cells.append(f"{text:<34}")
        lines.append(f"  {k:<4g}" + "".join(cells))
    if report.records:
        lines += ["", "Monte-Carlo against the sampled theory (tolerance: see --help)"]
        for row in report.rows:
            agreement = row.agreement()
            peak = agreement["largest_peak"]
            compared = [e for e in agreement["exceedance"] if e["compared"]]
            bad = [e for e in compared if not e["within"]]
            mark = "within" if peak["within"] and not bad else "OUTSIDE"
            lines.append(
                f"  {row.theory.label:<{width}}{mark} tolerance: largest peak {peak['difference_sigma']:+.3f} sigma "
                f"(allowed ±{peak['allowed_sigma']:.3f}); exceedance compared at k = "
                + (", ".join(f"{e['k_sigma']:g}" for e in compared) or "none")
                + (f", outside at k = {', '.join(str(e['k_sigma']) for e in bad)}" if bad else "")
            )
    if report.compensation is not None:
        lines += ["", f"non-Gaussian drive: ASD pre-compensated, predicted worst in-band "
                      f"{report.compensation['worst_in_band_deviation_db']:+.2f} dB"
                      + ("" if report.compensation["achievable"] else " (target not fully reachable)")]
    lines += ["", "The rig follows the continuous signal between samples: size force and stroke margins for the "
                  "'continuous' column. A drive file is open-loop: play it only through a closed-loop controller "
                  "with alarm and abort limits, within the shaker's limits and your lab's procedures."]
    return "\n".join(lines)


@click.command()
@options.profile_argument
@options.duration.but(help="Duration of the drive in seconds (the largest peak grows with it).")
@options.rate_defaulted.but(help="Sample rate of the records, Hz. Default: the smallest common rate (1024, 2048, "
                                 f"4096, 5120, 8192, ... Hz) at least {RATE_MARGIN_FACTOR:g} x the top frequency, "
                                 "as for `vibsynth run`. Lower rates run the Monte-Carlo faster; the 'samples' "
                                 "theory follows the rate.")
@options.kurtosis.but(help="Add a row for a drive with this kurtosis.")
@options.skewness.but(help="Add a row for a drive with this skewness.")
@options.clip.but(help="Add a row for a drive clipped at SIGMA x RMS (not with --kurtosis/--skewness).")
@options.records
@options.seed.but(default=0, show_default=True, help="Seed of the Monte-Carlo (record i uses spawn key i).")
@options.amplitude.but(help="Line amplitudes of the Monte-Carlo records, as for `vibsynth generate`.")
@options.grms
@options.level_db
@options.workers
@options.scheduler
@options.json_output
@options.quiet.but(help="No table and no progress bar (warnings and errors still show; --json still prints).")
def peaks(profile, duration, rate, kurtosis, skewness, clip, records, seed, amplitude, grms, level_db, workers,
          scheduler, as_json, command_quiet):
    """How high will the peaks go? Largest peak, exceedances and crest factor of PROFILE's drive.

    For a drive of --duration seconds: the expected largest |x| with its
    spread (standard deviation, 5 % and 95 % points), the share of samples
    beyond 1 to 6 x RMS and the crest factor, for the Gaussian drive and for
    the one asked with --kurtosis/--skewness/--clip, from theory and from a
    Monte-Carlo of --records records made by the same pipeline as `vibsynth
    generate`, side by side.

    Theory: high levels are crossed as a Poisson stream (Rice); the Gaussian
    largest peak is Davenport's, with both signs counted; a non-Gaussian
    drive's is the Gaussian extreme mapped through its transform (Winterstein).
    'continuous' is the band-limited signal the rig sees; 'samples' is what
    the samples at --rate show (crossing rate of the sampled sequence, Owen's
    T), and is the column the Monte-Carlo is checked against.

    Tolerance: the Monte-Carlo mean of the largest peak lies within 3 standard
    errors of the records' scatter plus 1 % of the sampled theory; the shares
    beyond k x RMS within 3 standard errors (a Poisson count inflated by
    sqrt(rate / (2 x zero-crossing rate)) for clustered samples) plus 2 %,
    where at least 400 samples are expected. Longer durations at high rates
    take long: the Monte-Carlo synthesizes records x rows x duration x rate
    samples (a warning says when that is large; lower --records or --rate).
    """
    from vibsynth import peaks as peak_stats
    from vibsynth.transforms.choice import plan_transform

    quiet = is_quiet(command_quiet)
    target = load_profile(profile, grms, level_db)
    transform = plan_transform(kurtosis, skewness, clip)
    rate_hz = default_rate_hz(target.frequency_max_hz) if rate is None else rate
    note(f"rate {rate_hz:g} Hz" + (" (the smallest common rate >= 2.56 x the top frequency)" if rate is None else ""))
    rows = 1 if transform is None else 2
    per_record = int(round(duration * rate_hz))
    total = records * rows * per_record
    if total > MC_WARN_SAMPLES:
        warn(f"the Monte-Carlo synthesizes {total / 1e6:.0f} million samples ({records} records x {rows} rows x "
             f"{per_record / 1e6:.3g} million); this can take many minutes; lower --records or --rate "
             f"(at least {RATE_MARGIN_FACTOR:g} x {target.frequency_max_hz:g} Hz) to shorten it")
    show = is_interactive_stderr() and not as_json and not quiet and total > 0
    with record_mapper(scheduler, workers, records) as mapper:
        with Progress(show, total, "Monte-Carlo") as progress:
            report = peak_stats.peak_report(target, duration, rate_hz, transform=transform, records=records,
                                            seed=seed, amplitude=amplitude, progress=progress, mapper=mapper)
    for message in report.warnings:
        warn(message)
    if as_json:
        click.echo(json.dumps(json_safe(report.to_dict()), indent=2, allow_nan=False))
    elif not quiet:
        click.echo(format_report(report))


__all__ = ["peaks"]
