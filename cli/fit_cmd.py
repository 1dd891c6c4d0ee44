"""`vibsynth fit`: does the test fit the shaker? Demands against ratings, each with its margin."""

from __future__ import annotations

import click

from vibsynth.cli import options, types

from vibsynth.cli.common import load_profile
from vibsynth.cli.durability_common import DRIVE_RATE_HELP, DRIVE_SCALE_HELP, echo_json, library_warnings


@click.command()
@click.argument("profile", type=types.ProfileSpec())
@options.shaker.but(required=True)
@options.payload_kg
@click.option("--drive", "drive_path", type=click.Path(dir_okay=False), default=None, metavar="FILE",
              help="Also judge this drive file by its actual peaks (stroke after double integration).")
@click.option("--rate", type=types.FiniteFloatRange(min=0, min_open=True), default=None, metavar="HZ", help=DRIVE_RATE_HELP)
@click.option("--scale", type=types.FiniteFloatRange(min=0, min_open=True), default=None, metavar="G", help=DRIVE_SCALE_HELP)
@click.option("--json", "as_json", is_flag=True, help="Print the result as JSON.")
def fit(profile, shaker_path, payload_kg, drive_path, rate, scale, as_json):
    """Does PROFILE (and its drive) fit the shaker? Exit 0 when it fits, 1 when it does not.

    Demands against the rig's ratings, each with its margin 100 (1 - demand/rating) %:
    displacement peak-to-peak (+/-3 sigma from the profile; with --drive the
    drive's actual peak-to-peak after double integration), velocity and
    acceleration peaks (3 sigma; with --drive the actual peaks), and the RMS
    force (moving mass + payload) x g RMS x g0 against the rated random force
    (rigid payload).
    """
    from vibsynth.durability.report import fit_report

    loaded = load_profile(profile)
    collected: list = []
    with library_warnings(collected):
        result = fit_report(loaded, shaker_path, payload_kg=payload_kg, drive_path=drive_path, rate_hz=rate,
                            scale=scale)
    data = result.to_dict()
    data["profile"] = loaded.name
    data["warnings"] = collected
    if as_json:
        echo_json(data)
    else:
        click.echo(format_fit(result, loaded))
    echo_fit_caution()
    click.get_current_context().exit(0 if result.fits else 1)


def format_fit(result, profile) -> str:
    """The fit table as text: one line per demand (needed, rated, margin), the notes, the verdict."""
    rig = result.shaker
    lines = [f"{profile.name} ({profile.grms:.4g} g RMS) on {rig.name}: moving mass {rig.moving_mass_kg:g} kg "
             f"+ payload {result.payload_kg:g} kg",
             f"  {'demand':<20} {'basis':<48} {'needed':>10} {'rated':>10}  {'margin':>8}"]
    for d in result.demands:
        mark = "" if d.fits else "  EXCEEDS"
        lines.append(f"  {d.quantity:<20} {d.basis:<48} {d.demand:>10.4g} {d.rating:>10.4g}  "
                     f"{d.margin_percent:>7.1f} %{mark}  ({d.unit})")
    lines += [f"note: {note}" for note in result.notes]
    lines.append("FITS: every demand is within its rating." if result.fits
                 else "DOES NOT FIT: at least one demand exceeds its rating.")
    return "\n".join(lines)


def echo_fit_caution() -> None:
    """The shaker-fit caution on stderr (rigid payload, linear behaviour, the manufacturer's ratings)."""
    from vibsynth.durability.shaker import FIT_CAUTION

    click.echo(click.wrap_text("CAUTION: " + FIT_CAUTION, width=100), err=True)
