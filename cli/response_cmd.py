"""`vibsynth response`: a base-excited oscillator on a profile (Miles beside the exact integral)."""

from __future__ import annotations

import click

from vibsynth.cli.common import load_profile
from vibsynth.cli.durability_common import Q_HELP, echo_json, library_warnings


def _why_they_differ(profile, result) -> str:
    """One or two sentences on why Miles and the exact value differ for this profile and fn."""
    import math

    fn, q = result.fn_hz, result.q
    ratio = result.rms_exact_g / result.rms_miles_g if result.rms_miles_g > 0 else math.inf
    if not profile.frequency_min_hz <= fn <= profile.frequency_max_hz:
        side = "below" if fn < profile.frequency_min_hz else "above"
        return (f"fn is {side} the profile's band, where the ASD is zero: Miles' equation gives 0 g, but the "
                f"oscillator still responds to the band {'quasi-statically' if side == 'above' else 'above its resonance'} "
                f"(exact {result.rms_exact_g:.4g} g).")
    index = min(max(int(sum(profile.frequencies_hz <= fn)) - 1, 0), len(profile.exponents) - 1)
    slope = float(profile.slopes_db_per_octave[index])
    reasons = ["Miles' equation assumes a flat ASD across the resonance, the value at fn extending over all "
               "frequencies; the exact value integrates |T|^2 x ASD over the profile's band"]
    details = []
    white = math.sqrt(1.0 + 1.0 / (q * q))
    details.append(f"the transmissibility's 1 + 1/Q^2 term adds {100 * (white - 1):.2g} % for white noise")
    if abs(slope) > 0.1:
        details.append(f"the ASD slopes at {slope:+.2f} dB/octave at fn")
    octaves_to_edge = min(math.log2(fn / profile.frequency_min_hz), math.log2(profile.frequency_max_hz / fn))
    if octaves_to_edge < 1.0:
        details.append(f"fn is {octaves_to_edge:.2f} octave from a band edge, where the ASD stops")
    near = _near_share(profile, fn, q, result.rms_exact_g ** 2)
    details.append(f"{100 * (1 - near):.3g} % of the response mean-square comes from more than half an octave "
                   "away from fn, which the oscillator follows off resonance")
    direction = "higher" if ratio >= 1 else "lower"
    return (reasons[0] + f". Here the exact value is {100 * abs(ratio - 1):.3g} % {direction}: "
            + "; ".join(details) + ".")


def _near_share(profile, fn: float, q: float, total_g2: float) -> float:
    """Share of the response mean-square from within half an octave of fn."""
    import numpy as np

    from vibsynth.durability.sdof import response_moments
    from vibsynth.profile.asd import AsdProfile

    lo = max(fn / 2 ** 0.5, profile.frequency_min_hz)
    hi = min(fn * 2 ** 0.5, profile.frequency_max_hz)
    inner = profile.frequencies_hz[(profile.frequencies_hz > lo) & (profile.frequencies_hz < hi)]
    f = np.concatenate([[lo], inner, [hi]])
    part = AsdProfile(f, profile.evaluate(f))
    return response_moments(part, fn, q, powers=(0,))[0] / total_g2


@click.command()
@click.argument("profile")
@click.option("--fn", "fn_hz", required=True, type=click.FloatRange(min=0, min_open=True), metavar="HZ",
              help="Natural frequency of the oscillator, Hz.")
@click.option("--q", "q", type=click.FloatRange(min=0.5, min_open=True), default=10.0, show_default=True,
              metavar="Q", help=Q_HELP)
@click.option("--duration", type=click.FloatRange(min=0, min_open=True), default=None, metavar="S",
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
    from vibsynth.durability.sdof import sdof_response

    loaded = load_profile(profile)
    collected: list = []
    with library_warnings(collected):
        result = sdof_response(loaded, fn_hz, q, duration_s=duration)
    data = result.to_dict()
    data["profile"] = loaded.name
    data["why_miles_differs"] = _why_they_differ(loaded, result)
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
