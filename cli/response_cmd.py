"""`vibsynth response`: a base-excited oscillator on a profile (Miles beside the exact integral)."""

from __future__ import annotations

import click

from vibsynth.cli import types

from vibsynth.cli.common import load_profile
from vibsynth.cli.durability_common import Q_HELP, echo_json, library_warnings


def _why_they_differ(profile, result, difference) -> str:
    """One or two sentences on why Miles and the exact value differ for this profile and fn."""
    fn = result.fn_hz
    if not difference.inside_band:
        side = "below" if fn < profile.frequency_min_hz else "above"
        how = "quasi-statically" if side == "above" else "above its resonance"
        return (f"fn is {side} the profile's band, where the ASD is zero: Miles' equation gives 0 g, but the "
                f"oscillator still responds to the band {how} (exact {result.rms_exact_g:.4g} g).")
    ratio = difference.exact_to_miles
    details = [f"the transmissibility's 1 + 1/Q^2 term adds {100 * (difference.white_noise_factor - 1):.2g} % "
               "for white noise"]
    if abs(difference.slope_db_per_octave) > 0.1:
        details.append(f"the ASD slopes at {difference.slope_db_per_octave:+.2f} dB/octave at fn")
    if difference.octaves_to_band_edge < 1.0:
        details.append(f"fn is {difference.octaves_to_band_edge:.2f} octave from a band edge, where the ASD stops")
    details.append(f"{100 * difference.off_resonance_share:.3g} % of the response mean-square comes from more than "
                   "half an octave away from fn, which the oscillator follows off resonance")
    direction = "higher" if ratio >= 1 else "lower"
    return ("Miles' equation assumes a flat ASD across the resonance, the value at fn extending over all "
            "frequencies; the exact value integrates |T|^2 x ASD over the profile's band. "
            f"Here the exact value is {100 * abs(ratio - 1):.3g} % {direction}: " + "; ".join(details) + ".")


@click.command()
@click.argument("profile", type=types.ProfileSpec())
@click.option("--fn", "fn_hz", required=True, type=types.FiniteFloatRange(min=0, min_open=True), metavar="HZ",
              help="Natural frequency of the oscillator, Hz.")
@click.option("--q", "q", type=types.FiniteFloatRange(min=0.5, min_open=True), default=10.0, show_default=True,
              metavar="Q", help=Q_HELP)
@click.option("--duration", type=types.FiniteFloatRange(min=0, min_open=True), default=None, metavar="S",
              help="Duration in s for the expected largest response peak (Davenport).")
@click.option("--json", "as_json", is_flag=True, help="Print the result as JSON.")
def response(profile, fn_hz, q, duration, as_json):
    """How a base-excited oscillator (fn, Q) responds to PROFILE.

    Absolute-acceleration response RMS by Miles' equation sqrt(pi/2 fn Q S(fn))
    and by exact integration of the transmissibility squared times the ASD,
    with the reason they differ here; the relative-displacement RMS; the
    response's zero up-crossing rate; with --duration, the expected largest
    response peak (Davenport 1964).
    """
    from vibsynth.durability.sdof import miles_difference, sdof_response

    loaded = load_profile(profile)
    collected: list = []
    with library_warnings(collected):
        result = sdof_response(loaded, fn_hz, q, duration_s=duration)
        difference = miles_difference(loaded, fn_hz, q)
    data = result.to_dict()
    data["profile"] = loaded.name
    data["miles_difference"] = difference.to_dict()
    data["why_miles_differs"] = _why_they_differ(loaded, result, difference)
    data["warnings"] = collected
    if as_json:
        echo_json(data)
        return
    rows = [
        ("natural frequency", f"{result.fn_hz:g} Hz, Q = {result.q:g} (damping ratio {0.5 / result.q:.3g})"),
        ("response, Miles", f"{result.rms_miles_g:.4g} g RMS"),
        ("response, exact", f"{result.rms_exact_g:.4g} g RMS"),
        ("relative displacement", f"{result.relative_displacement_rms_m * 1e3:.4g} mm RMS"),
        ("zero up-crossings", f"{result.upcrossing_rate_hz:.4g} per s"),
    ]
    if result.expected_peak_g is not None:
        rows.append(("expected largest peak", f"{result.expected_peak_g:.4g} g in {result.duration_s:g} s "
                                              f"({result.expected_peak_sigma:.2f} x RMS, Davenport)"))
    width = max(len(label) for label, _ in rows)
    click.echo(f"{loaded.name}: base-excited oscillator")
    for label, value in rows:
        click.echo(f"  {label:<{width}}  {value}")
    click.echo("")
    click.echo(click.wrap_text(data["why_miles_differs"], width=100))
