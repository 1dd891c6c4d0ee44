"""The profile model: closed-form integrals against numerical integration, and scaling laws."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate

from vibsynth.errors import InputError
from vibsynth.profile.asd import DB_PER_OCTAVE_DOUBLING, STANDARD_GRAVITY_M_S2, AsdProfile


@st.composite
def profiles(draw):
    count = draw(st.integers(min_value=2, max_value=7))
    log_f = sorted(set(draw(st.lists(st.floats(0.0, math.log(20000.0)), min_size=count, max_size=count))))
    # keep breakpoints at least 1 % apart so every segment is a real segment
    kept = [log_f[0]]
    for value in log_f[1:]:
        if value - kept[-1] > 0.01:
            kept.append(value)
    if len(kept) < 2:
        kept = [kept[0], kept[0] + 1.0]
    log_s = draw(st.lists(st.floats(math.log(1e-7), math.log(10.0)), min_size=len(kept), max_size=len(kept)))
    return AsdProfile(np.exp(kept), np.exp(log_s))


def numerical_moment(profile: AsdProfile, power: float) -> float:
    """Integral of f^p S(f) df by adaptive quadrature of the same log-log interpolant.

    Reference: scipy.integrate.quad (QUADPACK), integrating in ln f per segment.
    """
    total = 0.0
    f = profile.frequencies_hz
    for f1, f2 in zip(f[:-1], f[1:]):
        value, _ = integrate.quad(
            lambda log_f: math.exp(log_f * (power + 1.0)) * float(profile.evaluate(math.exp(log_f))),
            math.log(f1),
            math.log(f2),
            epsabs=0.0,
            epsrel=1e-13,
            limit=200,
        )
        total += value
    return total


@settings(max_examples=60, deadline=None)
@given(profiles(), st.sampled_from([0.0, 2.0, 4.0, -2.0, -4.0, 1.0]))
def test_closed_form_moments_match_quadrature(profile, power):
    # Reference: scipy.integrate.quad of the same interpolant, 1e-9 relative (issue requirement).
    closed = profile.spectral_moment(power)
    assert closed == pytest.approx(numerical_moment(profile, power), rel=1e-9)


@settings(max_examples=40, deadline=None)
@given(profiles())
def test_velocity_and_displacement_rms_match_quadrature(profile):
    # Velocity ASD S g0^2/(2 pi f)^2, displacement ASD S g0^2/(2 pi f)^4 (Bendat & Piersol 2010).
    velocity = STANDARD_GRAVITY_M_S2 / (2 * math.pi) * math.sqrt(numerical_moment(profile, -2.0))
    displacement = STANDARD_GRAVITY_M_S2 / (2 * math.pi) ** 2 * math.sqrt(numerical_moment(profile, -4.0))
    assert profile.velocity_rms_m_s == pytest.approx(velocity, rel=1e-9)
    assert profile.displacement_rms_m == pytest.approx(displacement, rel=1e-9)
    assert profile.displacement_peak_to_peak_3sigma_m == pytest.approx(6 * displacement, rel=1e-9)


@settings(max_examples=40, deadline=None)
@given(profiles(), st.floats(0.01, 100.0))
def test_scaling_asd_by_k_squared_scales_grms_by_k(profile, k):
    # Law: g RMS is the square root of a linear functional of the ASD.
    assert profile.scaled(k * k).grms == pytest.approx(k * profile.grms, rel=1e-12)
    assert profile.scaled_to_grms(k).grms == pytest.approx(k, rel=1e-12)


@settings(max_examples=40, deadline=None)
@given(profiles(), st.floats(0.05, 0.95), st.data())
def test_inserting_a_point_on_a_segment_changes_nothing(profile, fraction, data):
    # Law: a breakpoint placed on the log-log line leaves the interpolant, hence every integral, unchanged.
    segment = data.draw(st.integers(0, len(profile.frequencies_hz) - 2))
    f1, f2 = profile.frequencies_hz[segment], profile.frequencies_hz[segment + 1]
    f_new = math.exp(math.log(f1) + fraction * math.log(f2 / f1))
    s_new = float(profile.evaluate(f_new))
    frequencies = np.insert(profile.frequencies_hz, segment + 1, f_new)
    values = np.insert(profile.asd_g2_per_hz, segment + 1, s_new)
    refined = AsdProfile(frequencies, values)
    for power in (0.0, -2.0, -4.0, 2.0, 4.0):
        assert refined.spectral_moment(power) == pytest.approx(profile.spectral_moment(power), rel=1e-10)


@settings(max_examples=30, deadline=None)
@given(profiles())
def test_plus_3_01_db_doubles_the_mean_square(profile):
    # Definition of the decibel: 10 log10(2) = 3.0103 dB is a factor 2 in power (IEC 60027-3).
    assert profile.scaled_db(DB_PER_OCTAVE_DOUBLING).mean_square_g2 == pytest.approx(2 * profile.mean_square_g2, rel=1e-12)
    assert profile.scaled_db(-6.0).grms == pytest.approx(profile.grms * 10 ** (-6 / 20), rel=1e-12)


def test_slope_of_a_doubling_per_octave_is_3_01_db():
    # 10 log10(2) = 3.0103 dB per octave (decibel definition, IEC 60027-3).
    profile = AsdProfile([100.0, 200.0, 800.0], [0.01, 0.02, 0.08])
    assert profile.slopes_db_per_octave == pytest.approx([3.0103, 3.0103], abs=5e-5)


def test_slopes_from_the_previous_point_build_the_table():
    profile = AsdProfile.from_breakpoints([(20, 0.01, None), (80, None, 3.0), (350, 0.02, None), (2000, None, -6.0)])
    # +3 dB/octave over two octaves is +6 dB: ASD x 10^0.6 = 3.981 (decibel definition)
    assert profile.asd_g2_per_hz[1] == pytest.approx(0.01 * 10**0.6, rel=1e-12)
    assert profile.slopes_db_per_octave[0] == pytest.approx(3.0, abs=1e-12)
    assert profile.slopes_db_per_octave[2] == pytest.approx(-6.0, abs=1e-12)


def test_singular_segment_n_minus_one_is_continuous():
    # -3.0103 dB/octave is n = -1 exactly: area S1 f1 ln(f2/f1) (closed form: the integral of S1 f1 / f).
    flat_log = AsdProfile([100.0, 400.0], [0.04, 0.01])
    assert flat_log.exponents[0] == pytest.approx(-1.0, abs=1e-15)
    assert flat_log.mean_square_g2 == pytest.approx(0.04 * 100.0 * math.log(4.0), rel=1e-14)
    nearly = AsdProfile([100.0, 400.0], [0.04, 0.01 * (1 + 1e-9)])
    assert nearly.mean_square_g2 == pytest.approx(flat_log.mean_square_g2, rel=1e-8)


def test_evaluate_is_zero_outside_the_band_and_exact_on_breakpoints():
    profile = AsdProfile([20.0, 100.0, 2000.0], [0.001, 0.04, 0.01])
    values = profile.evaluate([10.0, 20.0, 100.0, 2000.0, 2500.0, -5.0, 0.0])
    assert values[0] == 0 and values[4] == 0 and values[5] == 0 and values[6] == 0
    assert values[1:4] == pytest.approx([0.001, 0.04, 0.01], rel=1e-12)


def test_flat_profile_moments_closed_form():
    # Flat S over [f1, f2]: m0 = S (f2-f1); m2 = S (f2^3-f1^3)/3; velocity from S (1/f1 - 1/f2) (calculus).
    s, f1, f2 = 0.02, 50.0, 500.0
    profile = AsdProfile([f1, f2], [s, s])
    assert profile.mean_square_g2 == pytest.approx(s * (f2 - f1), rel=1e-14)
    assert profile.spectral_moment(2.0) == pytest.approx(s * (f2**3 - f1**3) / 3, rel=1e-13)
    velocity = STANDARD_GRAVITY_M_S2 / (2 * math.pi) * math.sqrt(s * (1 / f1 - 1 / f2))
    assert profile.velocity_rms_m_s == pytest.approx(velocity, rel=1e-13)
    # Rice (1944/45): nu0 = sqrt(m2/m0)
    assert profile.zero_upcrossing_rate_hz == pytest.approx(math.sqrt((f2**3 - f1**3) / 3 / (f2 - f1)), rel=1e-13)


@pytest.mark.parametrize(
    "frequencies, values, message",
    [
        ([10.0], [0.1], "at least two"),
        ([10.0, 10.0], [0.1, 0.1], "repeats"),
        ([20.0, 10.0], [0.1, 0.1], "is below"),
        ([0.0, 10.0], [0.1, 0.1], "must be > 0"),
        ([5.0, 10.0], [0.1, -0.1], "must be > 0"),
        ([5.0, 10.0], [0.1, float("nan")], "not a finite"),
        ([5.0, float("inf")], [0.1, 0.1], "not a finite"),
    ],
)
def test_bad_tables_raise_input_error(frequencies, values, message):
    with pytest.raises(InputError, match=message):
        AsdProfile(frequencies, values)


def test_slope_on_first_point_is_refused():
    with pytest.raises(InputError, match="first breakpoint"):
        AsdProfile.from_breakpoints([(20, None, 3.0), (80, 0.01, None)])
