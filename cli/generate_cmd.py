"""`vibsynth generate`: write a Gaussian drive file (and its sidecar) for an ASD profile."""

from __future__ import annotations

import contextlib
import signal
import sys

import click
import numpy as np
import scipy

from cli.common import DRIVE_CAUTION, is_interactive_stderr, load_profile, warn
from synth import __version__
from synth import drivefile, synthesis

#: Samples per chunk handed to the writer.
CHUNK_SAMPLES = 1 << 16

#: Records longer than this many samples show a progress bar (on a terminal).
PROGRESS_MIN_SAMPLES = 1 << 21


@contextlib.contextmanager
def _terminate_as_interrupt():
    """Turn SIGTERM into KeyboardInterrupt while writing, so temporary files are removed."""

    def _raise(signum, frame):  # noqa: ARG001
        raise KeyboardInterrupt

    try:
        previous = signal.signal(signal.SIGTERM, _raise)
    except (ValueError, OSError):  # not the main thread
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


class _Progress:
    """A click progress bar on stderr, or nothing."""

    def __init__(self, enabled: bool, length: int):
        self.bar = click.progressbar(length=length, label="generating", file=sys.stderr) if enabled else None

    def __enter__(self):
        if self.bar is not None:
            self.bar.__enter__()
        return self

    def __exit__(self, *exc):
        if self.bar is not None:
            self.bar.__exit__(*exc)

    def __call__(self, samples: int) -> None:
        if self.bar is not None:
            self.bar.update(samples)


def _parse_quantities(text: str) -> tuple[str, ...]:
    names, _ = synthesis.parse_quantities(text)
    if names[0] != "acceleration":
        names = ("acceleration",) + tuple(name for name in names if name != "acceleration")
    return names


@click.command()
@click.argument("profile")
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False), metavar="FILE",
              help="Drive file to write; the suffix picks the format: .wav, .flac, .csv or .npy. "
                   "A sidecar FILE.json is written beside it.")
@click.option("--duration", required=True, type=click.FloatRange(min=0, min_open=True), metavar="S",
              help="Duration in seconds.")
@click.option("--rate", required=True, type=click.FloatRange(min=0, min_open=True), metavar="HZ",
              help="Sample rate in Hz; must exceed twice the profile's top frequency (2.56 x is the usual margin).")
@click.option("--seed", type=click.IntRange(min=0), default=None, metavar="N",
              help="Seed of the random phases; same seed and options give identical samples. "
                   "Default: a fresh one, recorded in the sidecar.")
@click.option("--amplitude", type=click.Choice(synthesis.AMPLITUDE_MODES), default="fixed", show_default=True,
              help="fixed: random phases with line amplitudes fixed by the target, so every frame's periodogram "
                   "is the target and the re-estimated ASD sits tightly inside tolerance bands (the default, as "
                   "drive files are judged against those bands). rayleigh: Gaussian line amplitudes, making each "
                   "record a true Gaussian realisation with the usual chi-square scatter (for statistical studies).")
@click.option("--resolution", type=click.FloatRange(min=0, min_open=True), default=None, metavar="HZ",
              help="Line spacing of overlap-add frames; also sets the shortest record (1/HZ s). "
                   "Default: min(lowest frequency, narrowest segment) / 8.")
@click.option("--loop", is_flag=True,
              help="Write one periodic record that repeats seamlessly (for playback loops; no ramps).")
@click.option("--quantities", default="acceleration", show_default=True, metavar="LIST",
              help="Columns for .csv/.npy: acceleration (g), velocity (m/s), displacement (m), comma separated "
                   "(accel,velocity,displacement), integrated in the frequency domain from the same spectrum.")
@click.option("--subtype", type=click.Choice(["float", "pcm24", "pcm16"]), default=None,
              help="Sample format: .wav float (default), pcm24 or pcm16; .flac pcm24 (default) or pcm16.")
@click.option("--full-scale", "full_scale_g", type=click.FloatRange(min=0, min_open=True), default=None, metavar="G",
              help=".wav/.flac: the g value of full scale (sample 1.0). Default: the record's peak plus 0.1 %, "
                   "found by a first pass. A sample beyond a given full scale stops the run; nothing is clipped.")
@click.option("--ramp", "ramp_s", type=click.FloatRange(min=0), default=0.0, metavar="S",
              help="Raised-cosine fade-in and fade-out of S seconds each, so the rig never sees a step; "
                   "the sidecar records them and verification judges the steady part.")
@click.option("--stroke-limit", type=click.FloatRange(min=0, min_open=True), default=None, metavar="MM",
              help="Refuse to write if the profile's 3-sigma displacement (peak-to-peak) exceeds MM.")
@click.option("--velocity-limit", type=click.FloatRange(min=0, min_open=True), default=None, metavar="M_S",
              help="Refuse to write if the profile's 3-sigma velocity (peak) exceeds M_S m/s.")
@click.option("--grms", type=click.FloatRange(min=0, min_open=True), default=None, metavar="G",
              help="Rescale the profile to this overall g RMS first.")
@click.option("--level-db", type=float, default=None, metavar="DB",
              help="Shift the profile by DB decibels first (-6 dB: half the g RMS).")
@click.option("--memory-budget", "memory_budget_mb", type=click.FloatRange(min=1), default=256.0, show_default=True,
              metavar="MB",
              help="Working memory for one periodic inverse FFT of the whole record; longer records are made by "
                   "overlap-add of independent frames in constant memory.")
@click.option("--quiet", is_flag=True, help="No summary and no progress bar (warnings and the caution still show).")
def generate(profile, output, duration, rate, seed, amplitude, resolution, loop, quantities, subtype, full_scale_g,
             ramp_s, stroke_limit, velocity_limit, grms, level_db, memory_budget_mb, quiet):
    """Write a Gaussian drive time history whose spectrum is PROFILE's.

    Random phases on an inverse-FFT frequency grid: one periodic record when it
    fits the memory budget (always with --loop or velocity/displacement
    columns), else overlap-add of independent sine-windowed frames, streamed
    to the file in constant memory. The samples depend only on the seed and the
    options, not on how the record is split.

    .wav/.flac hold normalised samples; the sidecar's `scale` is the g value of
    1.0 (physical = sample x scale). .csv/.npy hold values in g (and m/s, m).

    A drive file is open-loop: play it only through a closed-loop controller
    with alarm and abort limits, within the shaker's stroke, velocity and force
    limits, following your lab's procedures, local codes and licensed practice.
    """
    target = load_profile(profile, grms, level_db)
    file_format = drivefile.drive_format(output)
    subtype = drivefile.check_subtype(file_format, subtype)
    names = _parse_quantities(quantities)
    if len(names) > 1 and file_format not in ("csv", "npy"):
        raise click.UsageError(f"--quantities {quantities} needs a .csv or .npy file; .{file_format} holds acceleration only")
    if full_scale_g is not None and file_format not in ("wav", "flac"):
        raise click.UsageError(f"--full-scale applies to .wav/.flac; .{file_format} holds values in g")
    synthesis.rig_limit_check(target, stroke_limit, velocity_limit)
    plan = synthesis.plan_synthesis(
        target,
        duration,
        rate,
        amplitude=amplitude,
        resolution_hz=resolution,
        loop=loop,
        ramp_in_s=ramp_s,
        ramp_out_s=ramp_s,
        quantities=names,
        memory_budget_bytes=int(memory_budget_mb * 2**20),
    )
    drivefile.check_drive_request(output, rate_hz=plan.rate_hz, samples=plan.total_samples,
                                  quantities=plan.quantities, subtype=subtype)
    for message in plan.warnings:
        warn(message)
    if seed is None:
        seed = int(np.random.SeedSequence().entropy % 2**53)  # exact in any JSON reader
    synthesizer = synthesis.Synthesizer(plan, seed)

    sidecar = {
        "seed": seed,
        "mode": plan.mode,
        "frame_length": plan.frame_length,
        "resolution_hz": plan.resolution_hz,
        "amplitude": plan.amplitude,
        "loop": bool(loop),
        "ramp_in_s": plan.ramp_in_samples / plan.rate_hz,
        "ramp_out_s": plan.ramp_out_samples / plan.rate_hz,
        "grms_target": target.grms,
        "grms_lines": plan.line_variance ** 0.5,
        "seed_derivation": "numpy SeedSequence(seed) children: overlap-add frame j uses spawn_key (0, j), "
                           "a periodic record spawn_key (1,); PCG64; one standard normal pair per line",
        "options": {
            "duration_s": duration,
            "rate_hz": rate,
            "seed": seed,
            "amplitude": amplitude,
            "resolution_hz": resolution,
            "loop": bool(loop),
            "quantities": list(names),
            "subtype": subtype,
            "full_scale_g": full_scale_g,
            "ramp_s": ramp_s,
            "grms": grms,
            "level_db": level_db,
            "memory_budget_mb": memory_budget_mb,
        },
        "profile": {
            "name": target.name,
            "description": target.description,
            "source": str(profile),
            "breakpoints": [
                {"frequency": float(f), "asd": float(s)} for f, s in zip(target.frequencies_hz, target.asd_g2_per_hz)
            ],
            "grms": target.grms,
            "velocity_rms_m_s": target.velocity_rms_m_s,
            "displacement_rms_m": target.displacement_rms_m,
            "displacement_peak_to_peak_3sigma_m": target.displacement_peak_to_peak_3sigma_m,
        },
        "warnings": list(plan.warnings),
        "tool": {"name": "vibsynth", "version": __version__, "numpy": np.__version__, "scipy": scipy.__version__},
    }

    needs_peak = file_format in ("wav", "flac") and full_scale_g is None
    passes = 2 if needs_peak and plan.mode == "overlap-add" else 1
    show = is_interactive_stderr() and not quiet and plan.total_samples >= PROGRESS_MIN_SAMPLES
    with _terminate_as_interrupt(), _Progress(show, passes * plan.total_samples) as progress:
        scale = 1.0
        if file_format in ("wav", "flac"):
            if full_scale_g is not None:
                scale = float(full_scale_g)
                sidecar["full_scale"] = "given"
            else:
                if plan.mode == "periodic":
                    peak = synthesizer.peak_abs()
                else:
                    peak = 0.0
                    for chunk in synthesizer.iter_chunks(CHUNK_SAMPLES):
                        peak = max(peak, float(np.max(np.abs(chunk[:, 0]))))
                        progress(len(chunk))
                scale = drivefile.full_scale_from_peak(peak)
                sidecar["full_scale"] = "peak"
                sidecar["headroom"] = drivefile.DEFAULT_HEADROOM
        written = drivefile.write_drive(
            output,
            synthesizer.iter_chunks(CHUNK_SAMPLES),
            rate_hz=plan.rate_hz,
            samples=plan.total_samples,
            quantities=plan.quantities,
            subtype=subtype,
            scale=scale,
            sidecar=sidecar,
            progress=progress,
        )

    if not quiet:
        side = drivefile.sidecar_path(output)
        scale_text = f", full scale {written['scale']:.6g} g" if file_format in ("wav", "flac") else ""
        lines = [
            f"wrote {output} (sidecar {side.name})",
            f"  samples     {plan.total_samples} at {plan.rate_hz:g} Hz ({plan.duration_s:g} s), "
            f"{file_format} {subtype}{scale_text}",
            f"  target      {target.grms:.4g} g RMS ({target.name}, {target.frequency_min_hz:g}-{target.frequency_max_hz:g} Hz); "
            f"record peak {written['peak_g']:.4g} g",
            f"  stroke      {target.displacement_peak_to_peak_3sigma_m * 1e3:.4g} mm peak-to-peak (3 sigma); "
            f"velocity {target.velocity_rms_m_s:.4g} m/s RMS ({3 * target.velocity_rms_m_s:.4g} m/s at 3 sigma)",
            f"  generation  {plan.mode}, {'record' if plan.mode == 'periodic' else 'frames'} of {plan.frame_length} "
            f"samples ({plan.resolution_hz:.4g} Hz lines), {plan.amplitude} amplitudes, seed {seed}"
            + (", loops seamlessly" if loop else "")
            + (f", ramps {ramp_s:g} s" if plan.ramp_in_samples else ""),
        ]
        click.echo("\n".join(lines))
    click.echo(DRIVE_CAUTION, err=True)


__all__ = ["generate"]
