"""`vibsynth severity`: fatigue damage and extreme response spectra of a profile (and of a drive)."""

from __future__ import annotations

import click

from vibsynth.cli import options, types

from vibsynth.cli.common import (Progress, fail, is_interactive_stderr, is_quiet, load_profile, record_mapper,
                                 warn)
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
@options.records.but(default=0, show_default=True,
                     help="Also synthesize N Gaussian records of the profile (as `vibsynth generate` makes drives) "
                          "and report the scatter of their FDS and ERS per natural frequency (0: none; at least 2).")
@click.option("--record-duration", type=types.FiniteFloatRange(min=0, min_open=True), default=None, metavar="S",
              help="Length of each record, s (default: --duration). Shorter records run faster: their damage is "
                   "scaled to --duration, their ERS is the largest response in S seconds.")
@click.option("--record-rate", type=types.FiniteFloatRange(min=0, min_open=True), default=None, metavar="HZ",
              help="Sample rate of the records, Hz. Default: the smallest common rate at least 2.56 x the "
                   "profile's top frequency and at least 10 x the highest natural frequency.")
@options.seed.but(default=0, show_default=True, help="Seed of the records (record i uses spawn key i).")
@options.amplitude.but(help="Line amplitudes of the records: fixed (default) as drive files, so the scatter is "
                            "that of the drives `vibsynth generate` makes; rayleigh for true Gaussian realisations "
                            "(a larger scatter).")
@options.workers
@options.scheduler
@click.option("--json", "as_json", is_flag=True, help="Print the spectra as JSON.")
@click.option("--report", "report_dir", type=click.Path(file_okay=False), default=None, metavar="DIR",
              help="Write fds.png and ers.png into DIR (created if missing); with --records they show the "
                   "records' 5-95 % and min-max bands.")
def severity(profile, duration, drive_path, rate, scale, b, q, fn_min, fn_max, points, records, record_duration,
             record_rate, seed, amplitude, workers, scheduler, as_json, report_dir):
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

    With --records N, N Gaussian records of --record-duration seconds are
    synthesized in memory by the drive pipeline (record i from spawn key i
    of --seed, as `vibsynth peaks` makes its records), each analysed as a
    drive, and the scatter across records is reported per natural
    frequency: mean, standard deviation, 5 % and 95 % points, min and max of
    the FDS (scaled to --duration) and of the ERS (largest |z| in a record,
    beside Davenport's expected value with both signs counted). The numbers
    are the same, bit for bit, in one process or on Dask (--workers,
    --scheduler).
    """
    from vibsynth.durability.damage import natural_frequency_grid
    from vibsynth.durability.report import severity_report

    loaded = load_profile(profile)
    lo = fn_min if fn_min is not None else loaded.frequency_min_hz
    hi = fn_max if fn_max is not None else loaded.frequency_max_hz
    if hi <= lo:
        fail(f"--fn-max ({hi:g} Hz) must be above --fn-min ({lo:g} Hz)")
    if records == 1:
        fail("--records 1 gives no scatter; give 2 or more (or 0 for none)")
    collected: list = []
    with library_warnings(collected):
        fn = natural_frequency_grid(lo, hi, points)
        scatter = _records_scatter(loaded, duration, fn, q, b, records, record_duration, record_rate, seed,
                                   amplitude, workers, scheduler, as_json) if records else None
        data = severity_report(loaded, duration, drive_path=drive_path, report_dir=report_dir, fn_hz=fn, q=q, b=b,
                               rate_hz=rate, scale=scale, scatter=scatter)
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
    if scatter is not None:
        click.echo(format_scatter(scatter, data))
    for path in data.get("figures", []):
        click.echo(f"wrote {path}")


#: Above this many sample x natural-frequency steps (records x samples x fn), a runtime warning is printed
#: (measured on a 2-core test machine: about 0.2 us each, so several minutes).
SCATTER_WARN_STEPS = 2_000_000_000


def _records_scatter(profile, duration, fn, q, b, records, record_duration, record_rate, seed, amplitude, workers,
                     scheduler, as_json):
    """The records' FDS/ERS scatter, made here or on Dask, with a progress bar on a terminal."""
    from vibsynth.durability.report import DRIVE_FN_FRACTION
    from vibsynth.scatter import default_record_rate_hz, severity_scatter

    length = duration if record_duration is None else record_duration
    rate_hz = default_record_rate_hz(profile, float(fn.max())) if record_rate is None else record_rate
    per_record = int(round(length * rate_hz))
    total = records * per_record
    steps = total * int((fn <= DRIVE_FN_FRACTION * rate_hz).sum())
    if steps > SCATTER_WARN_STEPS:
        warn(f"the scatter filters {records} records of {per_record / 1e6:.3g} million samples through "
             f"{int((fn <= DRIVE_FN_FRACTION * rate_hz).sum())} oscillators; this can take many minutes; lower "
             "--records, --record-duration or --points (or spread it with --workers)")
    show = is_interactive_stderr() and not as_json and not is_quiet()
    with record_mapper(scheduler, workers, records) as mapper:
        with Progress(show, total, "records") as progress:
            return severity_scatter(profile, duration, records, record_duration_s=record_duration,
                                    record_rate_hz=rate_hz, seed=seed, fn_hz=fn, q=q, b=b, amplitude=amplitude,
                                    progress=progress, mapper=mapper)


def format_scatter(scatter, data: dict) -> str:
    """The records' FDS and ERS scatter as two text tables."""
    b = scatter.b
    lines = [
        "",
        f"{scatter.records} records ({scatter.amplitude} amplitudes) of {scatter.record_duration_s:g} s at "
        f"{scatter.rate_hz:g} Hz, seed {scatter.seed} (record i: spawn key i)",
        f"FDS of the records (m^{b:g}, scaled x {scatter.damage_scale:.4g} to {scatter.duration_s:g} s): "
        "mean, std, 5 % and 95 % points, min, max; the mean over the narrow band and over Dirlik",
        f"  {'fn (Hz)':>9}  {'mean':>10}  {'std':>10}  {'5 %':>10}  {'95 %':>10}  {'min':>10}  {'max':>10}  "
        f"{'mean/nb':>7}  {'mean/Dk':>7}",
    ]
    for index, f in enumerate(scatter.fn_hz):
        row = [data[f"fds_records_{key}"][index] for key in ("mean", "std", "p05", "p95", "min", "max")]
        if row[0] != row[0]:  # NaN: above 0.1 x rate
            continue
        lines.append(f"  {f:>9.4g}  " + "  ".join(f"{v:>10.4g}" for v in row)
                     + f"  {data['fds_records_mean_to_narrowband'][index]:>7.3f}"
                     + f"  {data['fds_records_mean_to_dirlik'][index]:>7.3f}")
    lines += [
        f"ERS of the records (g, largest |z| in {scatter.record_duration_s:g} s): mean, std, 5 %, 95 %, min, max; "
        "expected from Davenport (2 nu0 T crossings): mean, std",
        f"  {'fn (Hz)':>9}  {'mean':>8}  {'std':>7}  {'5 %':>8}  {'95 %':>8}  {'min':>8}  {'max':>8}  "
        f"{'expected':>8}  {'std':>7}",
    ]
    for index, f in enumerate(scatter.fn_hz):
        row = [data[f"ers_records_{key}_g"][index] for key in ("mean", "std", "p05", "p95", "min", "max")]
        if row[0] != row[0]:
            continue
        lines.append(f"  {f:>9.4g}  {row[0]:>8.4g}  {row[1]:>7.3g}  " + "  ".join(f"{v:>8.4g}" for v in row[2:])
                     + f"  {data['ers_records_expected_g'][index]:>8.4g}"
                     + f"  {data['ers_records_expected_std_g'][index]:>7.3g}")
    return "\n".join(lines)
