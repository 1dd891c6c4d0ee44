"""`vibsynth fit`: does the test fit the shaker? Demands against ratings, each with its margin."""

from __future__ import annotations

import click

from vibsynth.cli import types

from vibsynth.cli.common import load_profile
from vibsynth.cli.durability_common import DRIVE_RATE_HELP, DRIVE_SCALE_HELP, echo_json, library_warnings


@click.command()
@click.argument("profile", type=types.ProfileSpec())
@click.option("--shaker", "shaker_path", required=True, type=click.Path(dir_okay=False), metavar="RIG.toml",
              help="The rig's ratings: rated_force_rms_n, stroke_pk_pk_mm, velocity_peak_m_s, acceleration_peak_g, "
                   "moving_mass_kg (armature plus fixture).")
@click.option("--payload-kg", type=types.FiniteFloatRange(min=0), default=0.0, show_default=True, metavar="M",
              help="Mass of the test item, kg.")
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
    from vibsynth.durability.shaker import FIT_CAUTION

    loaded = load_profile(profile)
    collected: list = []
    with library_warnings(collected):
        result = fit_report(loaded, shaker_path, payload_kg=payload_kg, drive_path=drive_path, rate_hz=rate,
                            scale=scale)
    rig = result.shaker
    data = result.to_dict()
    data["profile"] = loaded.name
    data["warnings"] = collected
    if as_json:
        echo_json(data)
    else:
        click.echo(f"{loaded.name} ({loaded.grms:.4g} g RMS) on {rig.name}: moving mass {rig.moving_mass_kg:g} kg "
                   f"+ payload {payload_kg:g} kg")
        click.echo(f"  {'demand':<20} {'basis':<48} {'needed':>10} {'rated':>10}  {'margin':>8}")
        for d in result.demands:
            mark = "" if d.fits else "  EXCEEDS"
            click.echo(f"  {d.quantity:<20} {d.basis:<48} {d.demand:>10.4g} {d.rating:>10.4g}  "
                       f"{d.margin_percent:>7.1f} %{mark}  ({d.unit})")
        for note in result.notes:
            click.echo(f"note: {note}")
        click.echo("FITS: every demand is within its rating." if result.fits
                   else "DOES NOT FIT: at least one demand exceeds its rating.")
    click.echo(click.wrap_text("CAUTION: " + FIT_CAUTION, width=100), err=True)
    click.get_current_context().exit(0 if result.fits else 1)
