"""`vibsynth info` and `vibsynth presets`: what a profile means in overall figures."""

from __future__ import annotations

import json

import click

from vibsynth.cli import options
from vibsynth.cli.common import METRE_PER_INCH, is_quiet, length_text, load_profile, velocity_text  # noqa: F401


def _format_info(profile, inch: bool) -> str:
    summary = profile.summary()
    lines = [f"{profile.name}: {profile.description}" if profile.description else profile.name]
    if profile.source:
        lines.append(f"from {profile.source}")
    lines.append("")
    lines.append(f"  {'frequency (Hz)':>14}  {'ASD (g^2/Hz)':>13}  {'slope (dB/oct)':>14}  {'share of g^2':>12}")
    for point in summary["breakpoints"]:
        slope = "" if point["slope_db_per_octave"] is None else f"{point['slope_db_per_octave']:+.2f}"
        share = "" if point["share_of_mean_square"] is None else f"{100 * point['share_of_mean_square']:.1f} %"
        lines.append(f"  {point['frequency']:>14.6g}  {point['asd']:>13.5g}  {slope:>14}  {share:>12}")
    lines.append("  (slope and share belong to the segment that ends at the row)")
    lines.append("")
    velocity = summary["velocity_rms"]
    displacement = summary["displacement_rms"]
    stroke = summary["displacement_peak_to_peak_3sigma"]
    if inch:
        velocity_text = f"{velocity / METRE_PER_INCH:.4g} in/s RMS"
        displacement_text = f"{displacement / METRE_PER_INCH:.4g} in RMS"
        stroke_text = f"{stroke / METRE_PER_INCH:.4g} in"
    else:
        velocity_text = f"{velocity:.4g} m/s RMS"
        displacement_text = f"{displacement * 1e3:.4g} mm RMS"
        stroke_text = f"{stroke * 1e3:.4g} mm"
    rows = [
        ("acceleration", f"{summary['grms']:.4g} g RMS  (mean-square {summary['mean_square']:.4g} g^2)"),
        ("velocity", velocity_text),
        ("displacement", displacement_text),
        ("stroke needed", f"{stroke_text} peak-to-peak (+/-3 sigma displacement)"),
        ("band", f"{summary['frequency_min']:g} to {summary['frequency_max']:g} Hz"),
        ("zero up-crossings", f"{summary['zero_upcrossing_rate']:.4g} per s (Rice)"),
        ("peaks (maxima)", f"{summary['peak_rate']:.4g} per s; irregularity factor {summary['irregularity_factor']:.3f}"),
    ]
    width = max(len(label) for label, _ in rows)
    lines += [f"  {label:<{width}}  {value}" for label, value in rows]
    return "\n".join(lines)


def _format_channel_info(profile, inch: bool) -> str:
    """A multi-channel profile: one row of figures per channel, then the pairs."""
    lines = [f"{profile.name}: {profile.description}" if profile.description else profile.name]
    if profile.source:
        lines.append(f"from {profile.source}")
    lines.append("")
    unit_v, unit_d = ("in/s", "in") if inch else ("m/s", "mm")
    lines.append(f"  {'channel':<10} {'band (Hz)':>13} {'g RMS':>8} {'velocity RMS':>14} {'stroke p-p 3s':>14} "
                 f"{'up-crossings/s':>15}")
    for name, channel in zip(profile.channel_names, profile.channels):
        summary = channel.summary()
        velocity = summary["velocity_rms"] / (METRE_PER_INCH if inch else 1.0)
        stroke = summary["displacement_peak_to_peak_3sigma"] / (METRE_PER_INCH if inch else 1e-3)
        band = f"{summary['frequency_min']:g}-{summary['frequency_max']:g}"
        lines.append(f"  {name:<10} {band:>13} {summary['grms']:>8.4g} {velocity:>9.4g} {unit_v:<4} "
                     f"{stroke:>9.4g} {unit_d:<4} {summary['zero_upcrossing_rate']:>15.4g}")
    lines.append("")
    if profile.pairs:
        lines.append("  pairs (coherence = ordinary coherence 0..1; phase = angle of G_ab = E[conj(A) B], degrees)")
        for pair in profile.pairs:
            names = f"{profile.channel_names[pair.first]}-{profile.channel_names[pair.second]}"
            if pair.frequencies_hz.size == 1:
                lines.append(f"    {names:<12} coherence {pair.coherence[0]:.3g}, phase {pair.phase_deg[0]:+.4g} deg")
            else:
                points = ", ".join(f"{f:g} Hz: {c:.3g} / {p:+.4g} deg"
                                   for f, c, p in zip(pair.frequencies_hz, pair.coherence, pair.phase_deg))
                lines.append(f"    {names:<12} {points}")
    unspecified = profile.channel_count * (profile.channel_count - 1) // 2 - len(profile.pairs)
    if unspecified:
        lines.append(f"    ({unspecified} other pair(s) incoherent)")
    return "\n".join(lines)


def _channel_info(profile, as_json: bool, inch: bool, repair: bool, write_path, quiet: bool) -> None:
    """`vibsynth info` on a multi-channel profile: figures per channel and the positive-semidefinite check."""
    from vibsynth.cli.common import fail

    if write_path:
        fail("--write holds one channel; a multi-channel profile is already its own TOML file")
    violation = profile.check_psd()
    moved = None
    if violation is not None and not repair:
        fail(f"{profile.source or profile.name}: {violation.message()}")
    if violation is not None:
        profile, moved = profile.repaired()
    if as_json:
        data = profile.summary()
        data["positive_semidefinite"] = violation is None
        data["repair"] = moved
        if violation is not None:
            data["violation"] = {"frequency_hz": violation.frequency_hz, "channels": list(violation.channels),
                                 "smallest_eigenvalue": violation.smallest_eigenvalue}
        click.echo(json.dumps(data, indent=2))
        return
    if quiet:
        return
    click.echo(_format_channel_info(profile, inch))
    grid = profile.check_grid_hz()
    if violation is None:
        click.echo(f"  spectral density matrix positive semidefinite at all {grid.size} checked frequencies "
                   f"(every breakpoint and a log grid over {profile.frequency_min_hz:g}-{profile.frequency_max_hz:g} Hz)")
    else:
        click.echo(f"  NOT positive semidefinite: {violation.message()}")
        click.echo(f"  repaired by {moved['method']}: largest move {moved['frobenius_max']:.4g} (Frobenius norm of the "
                   f"coherence matrix) at {moved['frequency_hz']:.6g} Hz; coherence changed by at most "
                   f"{moved['coherence_change_max']:.4g}, phase by at most {moved['phase_change_deg_max']:.4g} deg. "
                   "Add 'repair = true' to the profile to generate from the repaired matrix.")


@click.command()
@options.profile_argument
@options.json_output.but(help="Print the figures as JSON (keys: grms, velocity_rms, ...; SI units).")
@options.grms.but(help="First rescale the profile to this overall g RMS.")
@options.level_db.but(help="First shift the profile by DB decibels (e.g. -6 for a -6 dB test level: half the g RMS).")
@options.inch.but(help="Show velocity in in/s and displacement in inches (JSON stays SI).")
@click.option(
    "-o",
    "--write",
    "write_path",
    type=click.Path(dir_okay=False, writable=True),
    default=None,
    metavar="FILE",
    help="Also write the (rescaled) profile to FILE (.toml or .csv).",
)
@options.quiet.but(help="Print nothing but requested JSON (e.g. with --write; errors still show).")
@click.option("--repair", is_flag=True,
              help="Multi-channel profiles: where the spectral density matrix is not positive semidefinite, show the "
                   "nearest valid one (eigenvalue clipping) and how far it moved, instead of refusing.")
def info(profile, as_json, grms, level_db, inch, write_path, command_quiet, repair):
    """Overall figures of an ASD profile: g RMS, velocity, displacement, stroke.

    Prints each breakpoint with the slope (dB/octave) and the share of the
    mean-square of the segment that ends there, then the overall g RMS
    (square root of the area under the ASD, integrated exactly on log-log
    segments), velocity and displacement RMS (SI; --inch for in/s and in),
    the 3-sigma peak-to-peak displacement a shaker needs, and Rice's zero
    up-crossing and peak rates.

    A multi-channel profile ([[channels]], [[pairs]]) shows these figures per
    channel and the pairs, and checks that the spectral density matrix is
    positive semidefinite at every breakpoint and on a fine log grid; where it
    is not, one line names the frequency, the channels and the smallest
    eigenvalue, and the exit status is 2 (--repair shows the nearest valid
    matrix instead).
    """
    from vibsynth.profile.files import write_profile
    from vibsynth.profile.multichannel import MultiChannelProfile

    loaded = load_profile(profile, grms=grms, level_db=level_db)
    if isinstance(loaded, MultiChannelProfile):
        _channel_info(loaded, as_json, inch, repair, write_path, is_quiet(command_quiet))
        return
    if write_path:
        write_profile(loaded, write_path)
    mixed = getattr(loaded, "mixed", None)  # tones, narrow bands, schedule: each part's RMS, total, peak
    if as_json:
        click.echo(json.dumps({**loaded.summary(), **({"mixed": loaded.mixed.summary(loaded.grms, loaded)} if mixed else {})},
                              indent=2))
    elif not is_quiet(command_quiet):
        click.echo(_format_info(loaded, inch))
        if mixed is not None:
            click.echo(_format_mixed(mixed.summary(loaded.grms, loaded), inch))
        if write_path:
            click.echo(f"\nwrote {write_path}")


def _format_mixed(summary: dict, inch: bool = False) -> str:
    """Text lines for the mixed-mode parts of a profile."""
    lines = ["", "mixed-mode parts (the g RMS above is the random background's):"]
    for part in summary["parts"]:
        text = f"  {part['part']:<14} {part['rms_g']:.4g} g RMS"
        if part["part"].startswith("tone"):
            sweep = f" swept to {part['sweep_to_hz']:g} Hz ({part['mode']})" if "sweep_to_hz" in part else ""
            text += f", {part['peak_g']:.4g} g peak at {part['frequency_hz']:g} Hz{sweep}"
        elif part["part"].startswith("narrow"):
            table = " (peak of its table)" if "breakpoints" in part else ""
            text += (f", {part['asd_g2_per_hz']:g} g^2/Hz{table} over {part['bandwidth_hz']:g} Hz at "
                     f"{part['frequency_hz']:g} Hz")
        lines.append(text)
    lines.append(f"  total          {summary['total_rms_g']:.4g} g RMS at 0 dB; peak about {summary['peak_g']:.4g} g "
                 "(tone peaks added, plus 3 sigma of the random parts)")
    lines.append(f"  rig demand     {length_text(summary['displacement_peak_to_peak_m'], inch)} peak-to-peak, "
                 f"{velocity_text(summary['velocity_peak_m_s'], inch)} peak (tone peaks added, random parts at "
                 "3 sigma, loudest step)")
    schedule = summary["schedule"]
    if schedule is not None:
        steps = ", ".join(f"{s['level_db']:+g} dB {s['duration_s']:g} s ({rms:.3g} g RMS)"
                          for s, rms in zip(schedule["steps"], schedule["step_rms_g"]))
        lines.append(f"  schedule       {steps}; {schedule['ramp_s']:g} s transitions; {schedule['duration_s']:g} s "
                     "in all")
    return "\n".join(lines)


@click.command()
@options.json_output.but(help="Print the list as JSON.")
@options.quiet.but(help="Print nothing but requested JSON.")
def presets(as_json, command_quiet):
    """List the bundled demo profiles (invented scenarios) with band and g RMS."""
    from vibsynth.profile.files import preset_names, read_preset

    rows = []
    for name in preset_names():
        profile = read_preset(name)
        rows.append(
            {
                "name": name,
                "frequency_min": profile.frequency_min_hz,
                "frequency_max": profile.frequency_max_hz,
                "grms": profile.grms,
                "description": profile.description,
            }
        )
    if as_json:
        click.echo(json.dumps(rows, indent=2))
        return
    if is_quiet(command_quiet):
        return
    width = max(len(row["name"]) for row in rows)
    click.echo(f"{'name':<{width}}  {'band (Hz)':>12}  {'g RMS':>7}  description")
    for row in rows:
        band = f"{row['frequency_min']:g}-{row['frequency_max']:g}"
        click.echo(f"{row['name']:<{width}}  {band:>12}  {row['grms']:>7.3f}  {row['description']}")
    click.echo("All presets are invented demo data, not requirements of any real programme.")
