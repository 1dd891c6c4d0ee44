"""`vibsynth equivalent`: the test ASD that does the environments' fatigue damage in the test time."""

from __future__ import annotations

import click

from vibsynth.cli import types

from vibsynth.cli.common import fail, load_profile
from vibsynth.cli.durability_common import B_HELP, Q_HELP, echo_json, library_warnings

#: Said with every equivalent test.
COMPRESSION_CAUTION = (
    "CAUTION: fatigue equivalence assumes linear behaviour and Basquin's law with the chosen b. Compressing "
    "time raises the level: beyond what the item, its fixture and the shaker take linearly (yield, contact, "
    "loosening, other failure modes than in the field) the shorter test is not equivalent. Where the test's "
    "ERS exceeds the field's, the test over-tests the extremes."
)


@click.command()
@click.option("--env", "environments", type=(str, types.FiniteFloatRange(min=0, min_open=True)), multiple=True,
              required=True, metavar="PROFILE SECONDS",
              help="A field environment and how long it lasts in s; repeat for each environment.")
@click.option("--test-duration", required=True, type=types.FiniteFloatRange(min=0, min_open=True), metavar="S",
              help="Duration of the test, s.")
@click.option("--b", "b", type=types.FiniteFloatRange(min=1.0, max=30.0), default=8.0, show_default=True, metavar="B",
              help=B_HELP)
@click.option("--q", "q", type=types.FiniteFloatRange(min=0.5, min_open=True), default=10.0, show_default=True,
              metavar="Q", help=Q_HELP)
@click.option("--points", type=click.IntRange(min=2, max=200), default=8, show_default=True, metavar="N",
              help="Breakpoints of the fitted test profile.")
@click.option("--grid-points", type=click.IntRange(min=4, max=400), default=60, show_default=True, metavar="N",
              help="Natural frequencies where the damage is matched.")
@click.option("-o", "--output", "output", type=click.Path(dir_okay=False), default=None, metavar="FILE",
              help="Write the test profile to FILE (.toml or .csv).")
@click.option("--figure", "figure_path", type=click.Path(dir_okay=False), default=None, metavar="PNG",
              help="Also draw the test profile to this PNG.")
@click.option("--json", "as_json", is_flag=True, help="Print the result as JSON.")
def equivalent(environments, test_duration, b, q, points, grid_points, output, figure_path, as_json):
    """The test ASD whose fatigue damage in --test-duration equals the environments' together.

    The environments' narrow-band FDS are summed at every natural frequency;
    the test ASD is inverted from it with the locally flat (Miles) relation,
    corrected with the exact FDS, enveloped with N breakpoints (log-log
    straight lines at or above it), and scaled so that its FDS equals the
    combined FDS at the controlling natural frequency and is not below it
    anywhere on the grid (Lalanne, vol. 5). Its ERS is compared with the
    environments' largest ERS. One environment and a shorter test is
    test-time compression: S1 = S0 (T0/T1)^(2/b).
    """
    from pathlib import Path

    from vibsynth.durability.equivalence import equivalent_test
    from vibsynth.profile.files import write_profile

    if output is not None and Path(output).suffix.lower() not in (".toml", ".csv"):
        fail(f"-o {output}: write the profile as .toml or .csv")
    loaded = [(load_profile(spec), seconds) for spec, seconds in environments]
    collected: list = []
    with library_warnings(collected):
        name = Path(output).stem if output else "equivalent-test"
        result = equivalent_test(loaded, test_duration, q=q, b=b, points=points, grid_points=grid_points, name=name)
        written = None
        if output is not None:
            written = str(write_profile(result.profile, output))
        if figure_path is not None:
            from vibsynth.durability.figures import write_equivalence_figure

            write_equivalence_figure(figure_path, result)
    data = result.to_dict()
    data["profile_path"] = written
    data["environments"] = [{"profile": p.name, "duration_s": t, "grms": p.grms} for p, t in loaded]
    data["caution"] = COMPRESSION_CAUTION
    data["warnings"] = collected
    if as_json:
        echo_json(data)
        return
    click.echo(f"Equivalent test: {test_duration:g} s at {result.profile.grms:.4g} g RMS (Q = {q:g}, b = {b:g})")
    for p, t in loaded:
        click.echo(f"  environment {p.name}: {t:g} s at {p.grms:.4g} g RMS")
    click.echo(f"  {'frequency (Hz)':>14}  {'ASD (g^2/Hz)':>13}")
    for f, s in zip(result.profile.frequencies_hz, result.profile.asd_g2_per_hz):
        click.echo(f"  {f:>14.5g}  {s:>13.5g}")
    click.echo(f"FDS test / combined: {data['fds_ratio_min']:.4f} (at {data['controlling_fn_hz']:.4g} Hz, controlling) "
               f"to {data['fds_ratio_max']:.4g}")
    click.echo(f"ERS test / environments' largest: up to {data['ers_ratio_max']:.3g} (at {data['ers_ratio_max_fn_hz']:.4g} Hz)")
    if written:
        click.echo(f"wrote {written}")
    if figure_path:
        click.echo(f"wrote {figure_path}")
    click.echo(click.wrap_text(COMPRESSION_CAUTION, width=100), err=True)
