"""`vibsynth severity`: fatigue damage and extreme response spectra of a profile (and of a drive)."""

from __future__ import annotations

import click

from vibsynth.cli import types

from vibsynth.cli.common import fail, load_profile
from vibsynth.cli.durability_common import (B_HELP, DRIVE_RATE_HELP, DRIVE_SCALE_HELP, Q_HELP, echo_json,
                                            library_warnings)


@click.command()
@click.argument("profile", type=types.ProfileSpec())
@click.option("--duration", required=True, type=types.FiniteFloatRange(min=0, min_open=True), metavar="S",
              help="Exposure the specification stands for, s.")
@click.option("--drive", "drive_path", type=click.Path(dir_okay=False), default=None, metavar="FILE",
              help="Also compute the FDS/ERS of this drive file (SDOF filter, rainflow, Miner).")
@click.option("--rate", type=types.FiniteFloatRange(min=0, min_open=True), default=None, metavar="HZ", help=DRIVE_RATE_HELP)
@click.option("--scale", type=types.FiniteFloatRange(min=0, min_open=True), default=None, metavar="G", help=DRIVE_SCALE_HELP)
@click.option("--b", "b", type=types.FiniteFloatRange(min=1.0, max=30.0), default=8.0, show_default=True, metavar="B",
              help=B_HELP)
@click.option("--q", "q", type=types.FiniteFloatRange(min=0.5, min_open=True), default=10.0, show_default=True,
              metavar="Q", help=Q_HELP)
@click.option("--fn-min", type=types.FiniteFloatRange(min=0, min_open=True), default=None, metavar="HZ",
              help="Lowest natural frequency (default: the profile's lowest frequency).")
@click.option("--fn-max", type=types.FiniteFloatRange(min=0, min_open=True), default=None, metavar="HZ",
              help="Highest natural frequency (default: the profile's highest frequency).")
@click.option("--points", type=click.IntRange(min=2, max=2000), default=40, show_default=True, metavar="N",
              help="Natural frequencies in the grid (log-spaced).")
@click.option("--json", "as_json", is_flag=True, help="Print the spectra as JSON.")
@click.option("--report", "report_dir", type=click.Path(file_okay=False), default=None, metavar="DIR",
              help="Write fds.png and ers.png into DIR (created if missing).")
def severity(profile, duration, drive_path, rate, scale, b, q, fn_min, fn_max, points, as_json, report_dir):
    """Fatigue damage spectrum (FDS) and extreme response spectrum (ERS) of PROFILE.

    For each natural frequency of a log-spaced grid, a base-excited
    oscillator (Q) responds with relative displacement z. Damage per unit of
    the material constants (K = C = 1), on cycle amplitudes:
    narrow band D = nu0+ T (sqrt(2) sigma_z)^b Gamma(1 + b/2) with sigma_z
    integrated exactly over the profile (Lalanne, vol. 5), and Dirlik (1985)
    as the broadband estimate. ERS = (2 pi fn)^2 z_max / g0 in g, z_max the
    expected largest |z| in the duration (Davenport). With --drive, the same
    from the drive itself: ramp-invariant SDOF filter (Smallwood 1981),
    rainflow (ASTM E1049-85), Miner's rule; its damage is scaled from the
    drive's length to --duration (damage grows linearly in time), its ERS is
    the actual largest response.
    """
    from vibsynth.durability.damage import natural_frequency_grid
    from vibsynth.durability.report import severity_report

    loaded = load_profile(profile)
    lo = fn_min if fn_min is not None else loaded.frequency_min_hz
    hi = fn_max if fn_max is not None else loaded.frequency_max_hz
    if hi <= lo:
        fail(f"--fn-max ({hi:g} Hz) must be above --fn-min ({lo:g} Hz)")
    collected: list = []
    with library_warnings(collected):
        fn = natural_frequency_grid(lo, hi, points)
        data = severity_report(loaded, duration, drive_path=drive_path, report_dir=report_dir, fn_hz=fn, q=q, b=b,
                               rate_hz=rate, scale=scale)
    has_drive = "fds_drive" in data
    data["warnings"] = collected
    if as_json:
        echo_json(data)
        return
    click.echo(f"{loaded.name}: FDS and ERS over {duration:g} s, Q = {q:g}, b = {b:g} "
               f"(damage per unit K^b/C, m^{b:g}; amplitude-based)")
    header = f"  {'fn (Hz)':>9}  {'FDS narrow':>11}  {'FDS Dirlik':>11}  {'ERS (g)':>8}"
    if has_drive:
        header += f"  {'FDS drive':>11}  {'drive/nb':>8}  {'ERS drive':>9}"
    click.echo(header)
    for index, f in enumerate(fn):
        line = (f"  {f:>9.4g}  {data['fds_narrowband'][index]:>11.4g}  {data['fds_dirlik'][index]:>11.4g}  "
                f"{data['ers_g'][index]:>8.4g}")
        if has_drive:
            value = data["fds_drive"][index]
            if value == value:  # not NaN
                line += (f"  {value:>11.4g}  {data['fds_drive_to_narrowband'][index]:>8.3f}  "
                         f"{data['ers_drive_g'][index]:>9.4g}")
        click.echo(line)
    if has_drive:
        seconds = data["drive_duration_s"]
        click.echo(f"drive: {seconds:g} s analysed (steady part), damage scaled x {data['drive_damage_scale']:.4g} "
                   f"to {duration:g} s; its ERS is the actual largest response in {seconds:g} s")
    for path in data.get("figures", []):
        click.echo(f"wrote {path}")
