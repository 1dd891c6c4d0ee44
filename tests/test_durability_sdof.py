"""SDOF response of a profile: exact integrals against scipy.integrate.quad, Miles, white-noise closed forms."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad

from vibsynth.analysis.extremes import davenport_expected_largest_peak_sigma
from vibsynth.durability.sdof import (acceleration_transmissibility_squared, miles_rms_g,
                                      relative_displacement_gain_squared, response_moments, sdof_response)
from vibsynth.errors import InputError
from vibsynth.profile.asd import STANDARD_GRAVITY_M_S2, AsdProfile
from vibsynth.profile.files import read_profile

G0 = STANDARD_GRAVITY_M_S2


def _quad_moment(profile, fn, q, kind, power):
    """Reference: scipy.integrate.quad of the same integrand on linear f, breakpoints and fn as points."""
    if kind == "acceleration":
        gain = lambda f: acceleration_transmissibility_squared(f, fn, q)  # noqa: E731
    else:
        gain = lambda f: relative_displacement_gain_squared(f, fn, q) * G0 ** 2  # noqa: E731
    lo, hi = profile.frequency_min_hz, profile.frequency_max_hz
    points = sorted({float(x) for x in profile.frequencies_hz[1:-1]} | ({fn} if lo < fn < hi else set()))
    value, _ = quad(lambda f: f ** power * gain(f) * float(profile.evaluate(f)), lo, hi, points=points or None,
                    limit=5000, epsabs=0.0, epsrel=1e-12)
    return value


@pytest.mark.parametrize("preset", ["bench-flat", "railyard-cabinet", "harbour-crane-cab"])
@pytest.mark.parametrize("fn", [3.0, 47.0, 1990.0])
@pytest.mark.parametrize("q", [2.0, 50.0])
def test_exact_response_matches_quad_to_1e6(preset, fn, q):
    profile = read_profile(preset)
    for kind, powers in (("acceleration", (0, 2, 4)), ("relative_displacement", (0, 1, 2, 4))):
        ours = response_moments(profile, fn, q, kind=kind, powers=powers)
        for power, value in zip(powers, ours):
            reference = _quad_moment(profile, fn, q, kind, power)
            assert value == pytest.approx(reference, rel=1e-6), (kind, power)


def test_transmissibility_at_resonance_is_one_plus_q_squared():
    # |T|^2 at r = 1 is (1 + (2 zeta)^2) / (2 zeta)^2 = 1 + Q^2 (Lalanne, vol. 1, transmissibility)
    for q in (2.0, 10.0, 25.0):
        assert acceleration_transmissibility_squared(80.0, 80.0, q) == pytest.approx(1.0 + q * q, rel=1e-14)


def test_miles_and_exact_converge_as_q_grows_on_a_flat_asd():
    # Miles (1954) is the light-damping limit for a locally flat ASD; for a flat band from fn/20 to 20 fn the
    # exact response differs by the (1 + 1/Q^2) term of the white-noise integral and by the band truncation,
    # both shrinking as Q grows.
    fn = 200.0
    flat = AsdProfile([fn / 20.0, fn * 20.0], [0.02, 0.02])
    errors = []
    for q in (2.0, 5.0, 10.0, 20.0, 50.0):
        response = sdof_response(flat, fn, q)
        errors.append(abs(response.rms_exact_g / response.rms_miles_g - 1.0))
    assert all(later < earlier for earlier, later in zip(errors, errors[1:])), errors
    assert errors[-1] < 0.002


def test_white_noise_closed_forms_of_the_oscillator():
    # White noise S over all frequencies: integral |T|^2 df = S fn pi/2 (Q + 1/Q) and
    # integral |Z/A|^2 df = pi Q / (2 (2 pi)^4 fn^3) (Crandall & Mark 1963, response of the oscillator to
    # white noise; from memory, rederived by residues). A band from fn/1e4 to 1e4 fn leaves out < 1e-4.
    fn, q, s = 120.0, 8.0, 0.015
    wide = AsdProfile([fn * 1e-4, fn * 1e4], [s, s])
    m0_a, = response_moments(wide, fn, q, kind="acceleration", powers=(0,))
    assert m0_a == pytest.approx(s * fn * math.pi / 2.0 * (q + 1.0 / q), rel=2e-4)
    m0_z, = response_moments(wide, fn, q, kind="relative_displacement", powers=(0,))
    assert m0_z == pytest.approx(G0 ** 2 * s * math.pi * q / (2.0 * (2.0 * math.pi) ** 4 * fn ** 3), rel=2e-4)


def test_expected_peak_is_davenport_on_the_exact_response():
    profile = read_profile("bench-flat")
    response = sdof_response(profile, 300.0, 10.0, duration_s=600.0)
    m0, m2, _ = response.acceleration_moments
    nu = math.sqrt(m2 / m0)
    # Davenport (1964) via vibsynth.analysis.extremes (reused, not copied)
    assert response.expected_peak_g == pytest.approx(davenport_expected_largest_peak_sigma(nu, 600.0) * math.sqrt(m0))
    assert response.upcrossing_rate_hz == pytest.approx(nu)
    assert 250.0 < nu < 350.0  # a Q = 10 response crosses zero near fn (Rice 1944/45)


def test_miles_is_zero_outside_the_band_and_errors_name_parameters():
    flat = AsdProfile([20.0, 2000.0], [0.01, 0.01])
    assert miles_rms_g(flat, 5000.0, 10.0) == 0.0
    with pytest.raises(InputError, match="q"):
        sdof_response(flat, 100.0, 0.3)
    with pytest.raises(InputError, match="fn_hz"):
        sdof_response(flat, -1.0, 10.0)
    with pytest.raises(InputError, match="duration_s"):
        sdof_response(flat, 100.0, 10.0, duration_s=0.0)
    assert np.isfinite(sdof_response(flat, 100.0, 10.0).relative_displacement_rms_m)


def test_miles_difference_on_white_noise():
    # White noise over a very wide band: exact/Miles = sqrt(1 + 1/Q^2) (white-noise integral above), and the
    # share of the response from beyond half an octave of fn, by scipy.integrate.quad of |T|^2
    from vibsynth.durability.sdof import miles_difference

    fn, q = 100.0, 10.0
    wide = AsdProfile([fn * 1e-4, fn * 1e4], [0.01, 0.01])
    difference = miles_difference(wide, fn, q)
    assert difference.exact_to_miles == pytest.approx(math.sqrt(1 + 1 / q ** 2), rel=2e-4)
    assert difference.slope_db_per_octave == 0.0 and difference.inside_band
    t2 = lambda f: acceleration_transmissibility_squared(f, fn, q)  # noqa: E731
    near = quad(t2, fn / math.sqrt(2), fn * math.sqrt(2), points=[fn], limit=500)[0]
    total = math.pi / 2 * fn * (q + 1 / q)  # white-noise integral (Crandall & Mark 1963)
    assert difference.off_resonance_share == pytest.approx(1 - near / total, rel=1e-3)
    outside = miles_difference(wide, fn * 1e5, q)
    assert not outside.inside_band and outside.exact_to_miles == math.inf
