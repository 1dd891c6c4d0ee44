"""`vibsynth severity`: fatigue damage and extreme response spectra of a profile (and of a drive)."""

from __future__ import annotations

import click

from vibsynth.cli.common import fail, load_profile
from vibsynth.cli.durability_common import (B_HELP, DRIVE_RATE_HELP, DRIVE_SCALE_HELP, Q_HELP, echo_json,
                                            library_warnings, read_drive_chunks)

#: The drive's FDS is computed for natural frequencies up to this fraction of its sample rate.
DRIVE_FN_FRACTION = 0.3


@click.command()
@click.argument("profile")
@click.option("--duration", required=True, type=click.FloatRange(min=0, min_open=True), metavar="S",
              help="Exposure the specification stands for, s.")
@click.option("--drive", "drive_path", type=click.Path(dir_okay=False), default=None, metavar="FILE",
              help="Also compute the FDS/ERS of this drive file (SDOF filter, rainflow, Miner).")
@click.option("--rate", type=click.FloatRange(min=0, min_open=True), default=None, metavar="HZ", help=DRIVE_RATE_HELP)
@click.option("--scale", type=click.FloatRange(min=0, min_open=True), default=None, metavar="G", help=DRIVE_SCALE_HELP)
@click.option("--b", "b", type=click.FloatRange(min=1.0, max=30.0), default=8.0, show_default=True, metavar="B",
              help=B_HELP)
@click.option("--q", "q", type=click.FloatRange(min=0.5, min_open=True), default=10.0, show_default=True,
              metavar="Q", help=Q_HELP)
@click.option("--fn-min", type=click.FloatRange(min=0, min_open=True), default=None, metavar="HZ",
              help="Lowest natural frequency (default: the profile's lowest frequency).")
@click.option("--fn-max", type=click.FloatRange(min=0, min_open=True), default=None, metavar="HZ",
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
    from pathlib import Path

    import numpy as np

    from vibsynth.durability.damage import drive_severity, natural_frequency_grid, profile_severity

    loaded = load_profile(profile)
    lo = fn_min if fn_min is not None else loaded.frequency_min_hz
    hi = fn_max if fn_max is not None else loaded.frequency_max_hz
    if hi <= lo:
        fail(f"--fn-max ({hi:g} Hz) must be above --fn-min ({lo:g} Hz)")
    if report_dir is not None and Path(report_dir).exists() and not Path(report_dir).is_dir():
        fail(f"--report {report_dir}: exists and is not a folder")
    collected: list = []
    drive = None
    with library_warnings(collected):
        fn = natural_frequency_grid(lo, hi, points)
        spec = profile_severity(loaded, duration, fn, q=q, b=b)
        data = {"profile": loaded.name, **spec.to_dict()}
        if drive_path is not None:
            opened, chunks, samples = read_drive_chunks(drive_path, rate, scale)
            usable = fn <= DRIVE_FN_FRACTION * opened.rate_hz
            if not usable.any():
                fail(f"--drive {drive_path}: its sample rate {opened.rate_hz:g} Hz is too low for natural frequencies "
                     f"from {lo:g} Hz (the drive's FDS needs fn <= {DRIVE_FN_FRACTION} x rate)")
            if not usable.all():
                collected.append(f"the drive's FDS/ERS is computed up to {DRIVE_FN_FRACTION} x its sample rate "
                                 f"({DRIVE_FN_FRACTION * opened.rate_hz:g} Hz); higher natural frequencies are left out")
            drive = drive_severity(chunks, opened.rate_hz, fn[usable], q=q, b=b)
            scale_to_spec = duration / drive.duration_s
            full = np.full(fn.size, np.nan)
            fds_drive = full.copy()
            fds_drive[usable] = drive.fds * scale_to_spec
            raw = full.copy()
            raw[usable] = drive.fds
            ers_drive = full.copy()
            ers_drive[usable] = drive.ers_g
            short = profile_severity(loaded, drive.duration_s, fn, q=q, b=b)
            data.update({
                "drive": str(drive_path),
                "drive_duration_s": drive.duration_s,
                "drive_rate_hz": opened.rate_hz,
                "fds_drive": fds_drive.tolist(),
                "fds_drive_unscaled": raw.tolist(),
                "fds_drive_to_narrowband": (fds_drive / spec.fds_narrowband).tolist(),
                "ers_drive_g": ers_drive.tolist(),
                "ers_g_over_drive_duration": short.ers_g.tolist(),
            })
        figures = []
        if report_dir is not None:
            from vibsynth.durability.figures import write_severity_figures

            folder = Path(report_dir)
            folder.mkdir(parents=True, exist_ok=True)
            figures = write_severity_figures(
                folder, spec, drive, label=loaded.name,
                drive_fds_scaled=None if drive is None else drive.fds * (duration / drive.duration_s),
                ers_over_drive_duration_g=None if drive is None else np.asarray(data["ers_g_over_drive_duration"]))
            data["figures"] = [str(p) for p in figures]
    data["warnings"] = collected
    if as_json:
        echo_json(data)
        return
    click.echo(f"{loaded.name}: FDS and ERS over {duration:g} s, Q = {q:g}, b = {b:g} "
               f"(damage per unit K^b/C, m^{b:g}; amplitude-based)")
    header = f"  {'fn (Hz)':>9}  {'FDS narrow':>11}  {'FDS Dirlik':>11}  {'ERS (g)':>8}"
    if drive is not None:
        header += f"  {'FDS drive':>11}  {'drive/nb':>8}  {'ERS drive':>9}"
    click.echo(header)
    for index, f in enumerate(fn):
        line = (f"  {f:>9.4g}  {spec.fds_narrowband[index]:>11.4g}  {spec.fds_dirlik[index]:>11.4g}  "
                f"{spec.ers_g[index]:>8.4g}")
        if drive is not None:
            value = data["fds_drive"][index]
            if value == value:  # not NaN
                line += (f"  {value:>11.4g}  {data['fds_drive_to_narrowband'][index]:>8.3f}  "
                         f"{data['ers_drive_g'][index]:>9.4g}")
        click.echo(line)
    if drive is not None:
        click.echo(f"drive: {drive.duration_s:g} s analysed (steady part), damage scaled x {duration / drive.duration_s:.4g} "
                   f"to {duration:g} s; its ERS is the actual largest response in {drive.duration_s:g} s")
    for path in figures:
        click.echo(f"wrote {path}")
