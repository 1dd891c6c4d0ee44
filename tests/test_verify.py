"""Checks of the verifier (vibsynth.analysis.verify) against closed-form theory and reference libraries.

The records are built here, independently of the project's generator, with
numpy's inverse real FFT: |X_k| = N sqrt(S(f_k) df / 2) with uniform random
phases ("fixed" amplitudes), or with complex Gaussian X_k of that mean square
("Rayleigh" amplitudes, a true Gaussian record).  Both make the variance of
the record sum S(f_k) df.  All profiles are invented test profiles.
"""

from __future__ import annotations

import dataclasses
import json
import math
import re

import numpy as np
import pytest
import scipy.signal
import scipy.stats
from scipy import integrate

from vibsynth.errors import InputError
from vibsynth.profile.asd import AsdProfile
from vibsynth.analysis.verify import Criteria, compare_asd, sampled_upcrossing_rate_hz, verify_record
from vibsynth.analysis.welch import DEFAULT_TARGET_DOF, welch_asd

EULER_GAMMA = 0.5772156649015329  # Euler's constant (Abramowitz & Stegun 6.1.3)


def bench_profile() -> AsdProfile:
    """Invented profile: 20 Hz 0.01 g^2/Hz, +6 dB/oct to 80 Hz, 0.04 at 500 Hz, -6 dB/oct to 2000 Hz."""
    return AsdProfile.from_breakpoints(
        [(20.0, 0.01, None), (80.0, None, 6.0), (500.0, 0.04, None), (2000.0, None, -6.0)],
        name="invented bench profile",
    )


def low_profile() -> AsdProfile:
    """Invented profile topping out at 400 Hz (about 20 samples per cycle at 8192 Hz)."""
    return AsdProfile.from_breakpoints(
        [(20.0, 0.01, None), (80.0, None, 6.0), (300.0, 0.04, None), (400.0, None, -6.0)],
        name="invented low-band profile",
    )


def random_phase_record(profile, rate_hz, n, rng, amplitudes="fixed", level_db=0.0, notch_hz=None, records=None):
    """Record(s) in g whose spectrum is ``profile`` (scaled by level_db, optionally notched), via numpy's irfft."""
    f = np.fft.rfftfreq(n, 1.0 / rate_hz)
    df = rate_hz / n
    s = profile.evaluate(f) * 10.0 ** (level_db / 10.0)
    s[0] = s[-1] = 0.0  # DC and Nyquist carry nothing
    if notch_hz is not None:
        s[(f >= notch_hz[0]) & (f <= notch_hz[1])] = 0.0
    magnitude = n * np.sqrt(s * df / 2.0)
    shape = (f.size,) if records is None else (records, f.size)
    if amplitudes == "fixed":
        spectrum = magnitude * np.exp(1j * rng.uniform(0.0, 2.0 * np.pi, shape))
    else:
        spectrum = magnitude * (rng.standard_normal(shape) + 1j * rng.standard_normal(shape)) / math.sqrt(2.0)
    return np.fft.irfft(spectrum, n, axis=-1)


def quad_moment(profile, power):
    """integral f^power S(f) df by scipy.integrate.quad, segment by segment (reference, not the closed form)."""
    f = profile.frequencies_hz
    return sum(
        integrate.quad(lambda v: v**power * float(profile.evaluate(v)), a, b, limit=200)[0]
        for a, b in zip(f[:-1], f[1:])
    )


def assert_close_tree(a, b, rel):
    """Same keys and types; integers, strings and booleans equal; floats equal to ``rel``."""
    if isinstance(a, dict):
        assert a.keys() == b.keys()
        for key in a:
            assert_close_tree(a[key], b[key], rel)
    elif isinstance(a, list):
        assert len(a) == len(b)
        for x, y in zip(a, b):
            assert_close_tree(x, y, rel)
    elif isinstance(a, float) and not isinstance(a, bool):
        assert b == pytest.approx(a, rel=rel, abs=1e-12)
    else:
        assert a == b


RATE_HZ = 8192.0
# 64 Welch segments of 2048 samples at 50 % overlap: the finest default resolution
# (4 Hz) just reaches the default 120 dof, the least the default allows.
N_DEFAULT_DOF = 63 * 1024 + 2048


# --------------------------------------------------------------------------- verdicts


@pytest.mark.parametrize("amplitudes", ["fixed", "rayleigh"])
@pytest.mark.parametrize("seed", range(6))
def test_good_record_passes_default_criteria_at_default_dof(amplitudes, seed):
    profile = bench_profile()
    x = random_phase_record(profile, RATE_HZ, N_DEFAULT_DOF, np.random.default_rng(seed), amplitudes)
    v = verify_record(x, RATE_HZ, profile)
    d = v.to_dict()
    assert v.passed, v.reasons
    assert d["failed"] == [] and d["reasons"] == []
    # The default picks the finest resolution that still gives 120 dof (the project's own default; 120 dof is common practice, no source).
    assert DEFAULT_TARGET_DOF <= d["asd"]["dof"] < 2 * DEFAULT_TARGET_DOF
    # Welch (1967), Hann at 50 % overlap with K segments: nu = 2K / (1 + (1 - 1/K)/18).
    k = d["asd"]["segments"]
    assert k == 64
    assert d["asd"]["dof"] == pytest.approx(2 * k / (1 + (1 - 1 / k) / 18), rel=1e-12)
    # The estimate compared is scipy.signal.welch's (Hann, 50 % overlap, density), line for line.
    nperseg = round(RATE_HZ / d["asd"]["resolution_hz"])
    f_ref, p_ref = scipy.signal.welch(x, RATE_HZ, window="hann", nperseg=nperseg, noverlap=nperseg // 2)
    c = v.comparison
    np.testing.assert_allclose(c.frequencies_hz, f_ref, rtol=1e-12)
    np.testing.assert_allclose(c.measured_g2_per_hz, p_ref, rtol=1e-9, atol=1e-18)
    judged = c.judged
    np.testing.assert_allclose(
        c.deviation_db[judged], 10 * np.log10(p_ref[judged] / profile.evaluate(f_ref[judged])), atol=1e-9
    )
    # Measured worst deviations over 6 seeds at 121 dof: fixed 0.6-1.0 dB, Rayleigh 1.3-2.6 dB (60 seeds).
    assert abs(d["asd"]["max_deviation_db"]) < 3.0


def test_rayleigh_record_scatter_matches_the_chi_square_confidence_band():
    # For a Gaussian record, a Welch line is distributed as S chi2(nu)/nu (Bendat & Piersol), so the
    # target lies outside the reported 90 % interval on about 10 % of the lines.
    profile = bench_profile()
    outside, lines = 0, 0
    for seed in range(4):
        x = random_phase_record(profile, RATE_HZ, N_DEFAULT_DOF, np.random.default_rng(100 + seed), "rayleigh")
        v = verify_record(x, RATE_HZ, profile)
        low_db, high_db = v.to_dict()["asd"]["confidence_90_percent_db"]
        nu = v.estimate.dof
        # Interval of true/estimate: [nu / chi2.ppf(0.95), nu / chi2.ppf(0.05)] (scipy.stats reference).
        assert low_db == pytest.approx(10 * math.log10(nu / scipy.stats.chi2.ppf(0.95, nu)), rel=1e-12)
        assert high_db == pytest.approx(10 * math.log10(nu / scipy.stats.chi2.ppf(0.05, nu)), rel=1e-12)
        c = v.comparison
        true_over_estimate_db = -c.deviation_db[c.judged]
        outside += int(np.count_nonzero((true_over_estimate_db < low_db) | (true_over_estimate_db > high_db)))
        lines += int(np.count_nonzero(c.judged))
    assert outside / lines == pytest.approx(0.10, abs=0.025)


def test_record_3_5_db_hot_fails_both_asd_and_grms():
    profile = bench_profile()
    x = random_phase_record(profile, RATE_HZ, 2**19, np.random.default_rng(1), level_db=3.5)
    v = verify_record(x, RATE_HZ, profile)
    d = v.to_dict()
    assert not v.passed
    assert d["failed"] == ["asd", "grms"]
    assert any(r.startswith("ASD") for r in d["reasons"]) and any(r.startswith("g RMS") for r in d["reasons"])
    # +3.5 dB of ASD is a factor 10^(3.5/20) = 1.496 on g RMS (decibel definition, IEC 60050).
    assert d["grms_error_percent"] == pytest.approx(100 * (10 ** (3.5 / 20) - 1), abs=0.3)
    assert d["asd"]["max_deviation_db"] > 3.0
    assert d["asd"]["fraction_within_tolerance"] < 0.05


def test_record_2_db_hot_passes_asd_but_fails_grms():
    profile = bench_profile()
    x = random_phase_record(profile, RATE_HZ, 2**19, np.random.default_rng(2), level_db=2.0)
    v = verify_record(x, RATE_HZ, profile)
    d = v.to_dict()
    # 2 dB is within +/-3 dB on every line, but 10^(2/20) = 1.259: +25.9 % g RMS, beyond +/-10 %.
    assert d["failed"] == ["grms"]
    assert len(d["reasons"]) == 1 and "+25.9 %" in d["reasons"][0]
    assert d["grms_error_percent"] == pytest.approx(100 * (10 ** (2 / 20) - 1), abs=0.3)
    assert d["asd"]["fraction_within_tolerance"] == 1.0
    assert 1.0 < d["asd"]["max_deviation_db"] < 3.0


def _notched():
    profile = bench_profile()
    x = random_phase_record(profile, RATE_HZ, 2**19, np.random.default_rng(3), notch_hz=(200.0, 300.0))
    return profile, x


def test_notched_record_fails_asd_only_and_names_the_band():
    profile, x = _notched()
    v = verify_record(x, RATE_HZ, profile)
    d = v.to_dict()
    assert d["failed"] == ["asd"]
    (reason,) = d["reasons"]
    ranges = [(float(a), float(b)) for a, b in re.findall(r"at (\d+(?:\.\d+)?)-(\d+(?:\.\d+)?) Hz", reason)]
    assert ranges and all(195 <= a <= b <= 305 for a, b in ranges)
    worst_hz = float(re.search(r"worst [-+]\d+\.\d+ dB at (\d+(?:\.\d+)?) Hz", reason).group(1))
    assert 200 <= worst_hz <= 300 and 200 <= d["asd"]["max_deviation_frequency_hz"] <= 300
    for low, high in d["asd"]["outside_ranges_hz"]:
        assert 200 - 2 * 4.0 <= low <= high <= 300 + 2 * 4.0
    # g RMS falls by the notch's share of the mean square (integrated with scipy.integrate.quad): -7.3 %.
    removed = integrate.quad(lambda f: float(profile.evaluate(f)), 200.0, 300.0)[0]
    expected = 100 * (math.sqrt(1 - removed / quad_moment(profile, 0)) - 1)
    assert d["grms_error_percent"] == pytest.approx(expected, abs=0.3)
    assert abs(expected) < 10


def test_relaxed_rule_changes_the_verdict_and_says_so():
    profile, x = _notched()
    strict = verify_record(x, RATE_HZ, profile).to_dict()
    fraction = strict["asd"]["fraction_within_tolerance"]
    # 100 Hz of 1980 Hz judged at 4 Hz resolution: about 25 of 492 lines outside, 95 % within.
    assert 0.93 < fraction < 0.96
    assert "relaxed" not in json.dumps(strict["rule"])
    assert strict["rule"]["verdict"].startswith("default")

    relaxed = verify_record(x, RATE_HZ, profile, Criteria(min_fraction_within=0.9)).to_dict()
    assert relaxed["pass"] is True
    assert "relaxed" in relaxed["rule"]["asd"] and "90 %" in relaxed["rule"]["asd"]
    assert relaxed["rule"]["verdict"].startswith("relaxed")
    assert relaxed["asd"]["min_fraction_within"] == 0.9

    too_strict = verify_record(x, RATE_HZ, profile, Criteria(min_fraction_within=0.97)).to_dict()
    assert too_strict["failed"] == ["asd"]
    assert "97 % required" in too_strict["reasons"][0]


@pytest.mark.parametrize("level_db", [-2.0, 2.0])
def test_asymmetric_tolerance_band(level_db):
    profile = bench_profile()
    x = random_phase_record(profile, RATE_HZ, 2**19, np.random.default_rng(4), level_db=level_db)
    loose_grms = {"grms_tolerance_percent": 30.0}  # isolate the ASD rule: 2 dB is -20.6 / +25.9 % g RMS
    tight_below = verify_record(x, RATE_HZ, profile, Criteria(-1.5, 3.0, **loose_grms))
    tight_above = verify_record(x, RATE_HZ, profile, Criteria(-3.0, 1.5, **loose_grms))
    if level_db < 0:  # 2 dB cold: outside -1.5 dB, inside -3 dB
        assert tight_below.failed == ("asd",) and tight_above.passed
    else:
        assert tight_above.failed == ("asd",) and tight_below.passed
    assert tight_below.to_dict()["asd"]["tolerance_db"] == [-1.5, 3.0]
    assert "-1.5/+3 dB" in tight_below.to_dict()["rule"]["asd"]


# --------------------------------------------------------------------------- edge lines


def test_edge_lines_are_reported_not_judged():
    rate = 4096.0
    profile = AsdProfile([100.0, 1000.0], [0.02, 0.02], name="invented flat band")
    x = random_phase_record(profile, rate, 2**19, np.random.default_rng(5))
    criteria = Criteria(-2.0, 2.0)
    v = verify_record(x, rate, profile, criteria, resolution_hz=4.0)
    c, d = v.comparison, v.to_dict()
    assert v.passed, v.reasons
    # Lines at 100, 104 and 996, 1000 Hz lie within two 4 Hz widths of an edge.
    assert d["asd"]["lines_near_edge_not_judged"] == 4
    np.testing.assert_array_equal(c.frequencies_hz[c.edge], [100.0, 104.0, 996.0, 1000.0])
    assert not np.any(c.judged & c.edge)
    # The line on the edge sees half of the (symmetric) Hann spectral window filled:
    # 10 log10(1/2) = -3.01 dB for a flat spectrum (Harris 1978, window symmetry).
    for edge_hz in (100.0, 1000.0):
        i = int(np.flatnonzero(c.frequencies_hz == edge_hz)[0])
        assert c.deviation_db[i] == pytest.approx(10 * math.log10(0.5), abs=0.4)
    # Judging them instead fails the same record, at the edges.
    strict = verify_record(x, rate, profile, dataclasses.replace(criteria, edge_exclusion_resolutions=0.0),
                           resolution_hz=4.0)
    assert strict.failed == ("asd",)
    assert re.search(r"at (100|1000) Hz", strict.reasons[0])


def test_band_too_narrow_for_the_resolution_is_an_input_error():
    rate = 8192.0
    profile = AsdProfile([1000.0, 1010.0], [0.05, 0.05], name="invented narrow band")
    x = random_phase_record(profile, rate, 2**17, np.random.default_rng(6))
    with pytest.raises(InputError, match="too coarse"):
        verify_record(x, rate, profile, resolution_hz=4.0)
    with pytest.raises(InputError, match="too coarse"):
        compare_asd(welch_asd(x, rate, 2048), profile)


def test_narrow_band_far_from_zero_gets_a_fine_enough_default_resolution():
    # A 50 Hz wide band at 1 kHz: the default resolution follows the band width, not only 1/8 of
    # the lowest frequency (which would give 125 Hz and no judged line).
    rate = 8192.0
    profile = AsdProfile([1000.0, 1050.0], [0.05, 0.05], name="invented narrow band")
    x = random_phase_record(profile, rate, 2**20, np.random.default_rng(7))
    d = verify_record(x, rate, profile).to_dict()
    assert d["pass"], d["reasons"]
    assert d["asd"]["resolution_hz"] <= 50.0 / 8
    assert d["asd"]["lines_judged"] >= 5


# --------------------------------------------------------------------------- ramps


def raised_cosine_ramps(x, ramp_samples):
    w = 0.5 * (1.0 - np.cos(np.pi * np.arange(ramp_samples) / ramp_samples))
    y = x.copy()
    y[:ramp_samples] *= w
    y[-ramp_samples:] *= w[::-1]
    return y


@pytest.mark.parametrize("duration_s", [5.0, 20.0])
def test_ramps_are_skipped_when_asked(duration_s):
    rate, ramp_s = 4096.0, 1.0
    profile = low_profile()
    n, ramp = int(duration_s * rate), int(ramp_s * rate)
    x = raised_cosine_ramps(random_phase_record(profile, rate, n, np.random.default_rng(8)), ramp)
    # Mean square of a raised-cosine ramp relative to full level (scipy.integrate.quad; 3/8 exactly).
    ramp_ms = integrate.quad(lambda u: (0.5 * (1 - math.cos(math.pi * u))) ** 2, 0.0, 1.0)[0]
    assert ramp_ms == pytest.approx(3 / 8, rel=1e-9)
    expected_error = 100 * (math.sqrt(1 - 2 * ramp_s * (1 - ramp_ms) / duration_s) - 1)

    # Unskipped ramps make the record non-stationary: by default the verifier says so, with the worst
    # window inside a ramp (Bendat & Piersol 2010, chi-square limits of short-window mean squares) ...
    default = verify_record(x, rate, profile)
    assert "stationarity" in default.failed
    (stationarity,) = [c for c in default.to_dict()["criteria"] if c["name"] == "stationarity"]
    worst_s = stationarity["measured_worst_window_start_s"]
    assert worst_s < ramp_s or worst_s > duration_s - ramp_s - stationarity["window_s"]
    assert stationarity["measured_worst_rms_ratio"] < stationarity["limit_low_rms_ratio"]
    # ... so the g RMS effect of the ramps is looked at with the stationarity and Gaussian checks off.
    unskipped = verify_record(x, rate, profile, Criteria(stationarity=False, gaussian=False))
    assert unskipped.grms_error_percent == pytest.approx(expected_error, abs=1.5)
    if duration_s == 5.0:
        # 2 x 1 s of ramp in 5 s: -13.4 % g RMS, beyond +/-10 % (ASD only -1.25 dB: still in tolerance).
        assert expected_error < -10
        assert unskipped.failed == ("grms",)
    else:
        # The same ramps in 20 s cost only -3.2 %: not long enough to fail.
        assert -10 < expected_error
        assert unskipped.passed

    skipped = verify_record(x, rate, profile, skip_start_samples=ramp, skip_end_samples=ramp)
    assert skipped.passed, skipped.reasons
    assert abs(skipped.grms_error_percent) < 2.0
    s = skipped.to_dict()["statistics"]
    assert s["samples"] == n - 2 * ramp
    assert s["duration_s"] == pytest.approx(duration_s - 2 * ramp_s)
    assert s["skipped_start_samples"] == ramp and s["skipped_end_samples"] == ramp
    # The excerpt keeps the record's own time axis and holds the largest sample of the judged part.
    assert skipped.excerpt_t_s[0] >= ramp_s and skipped.excerpt_t_s[-1] <= duration_s - ramp_s
    indices = np.round(skipped.excerpt_t_s * rate).astype(int)
    np.testing.assert_array_equal(skipped.excerpt_g, x[indices])
    assert np.max(np.abs(skipped.excerpt_g)) == s["peak"] == np.max(np.abs(x[ramp:n - ramp]))


# --------------------------------------------------------------------------- crossings and peaks


def test_counted_upcrossings_match_rice_when_finely_sampled():
    profile = low_profile()  # top 400 Hz at 8192 Hz: about 20 samples per cycle
    x = random_phase_record(profile, RATE_HZ, 2**21, np.random.default_rng(9), "rayleigh")
    s = verify_record(x, RATE_HZ, profile).statistics
    # Rice (1944/45): nu0 = sqrt(m2/m0), moments integrated here with scipy.integrate.quad.
    rice = math.sqrt(quad_moment(profile, 2) / quad_moment(profile, 0))
    assert s["zero_upcrossing_rate_rice_hz"] == pytest.approx(rice, rel=1e-6)
    counted = s["zero_upcrossing_rate_hz"]
    assert counted == pytest.approx(rice, rel=0.01)  # measured: -0.4 .. +0.2 %
    assert counted == pytest.approx(s["zero_upcrossing_rate_sampled_theory_hz"], rel=0.01)
    assert s["zero_upcrossing_rate_sampled_theory_hz"] == pytest.approx(rice, rel=0.002)


@pytest.mark.parametrize("amplitudes", ["fixed", "rayleigh"])
def test_counted_upcrossings_at_four_times_oversampling_follow_the_sampled_formula(amplitudes):
    profile = bench_profile()  # top 2000 Hz at 8192 Hz: 4.1 samples per cycle
    x = random_phase_record(profile, RATE_HZ, 2**21, np.random.default_rng(10), amplitudes)
    s = verify_record(x, RATE_HZ, profile).statistics
    counted, rice = s["zero_upcrossing_rate_hz"], s["zero_upcrossing_rate_rice_hz"]
    sampled = s["zero_upcrossing_rate_sampled_theory_hz"]
    # Sheppard (1899): a sign change between samples has probability arccos(rho_1)/pi.
    assert counted == pytest.approx(sampled, rel=0.01)  # measured: within 0.15 %
    assert abs(counted / rice - 1) > 0.02  # measured: Rice's continuous rate is 2.8-3.0 % high
    # The formula, from the record itself: its lag-1 correlation in Sheppard's arccos formula.
    xc = x - x.mean()
    rho_1 = float(np.dot(xc[:-1], xc[1:]) / np.dot(xc, xc))
    assert sampled == pytest.approx(RATE_HZ * math.acos(rho_1) / (2 * math.pi), rel=0.005)


def test_sampled_upcrossing_rate_tends_to_rice():
    profile = low_profile()
    rice = profile.zero_upcrossing_rate_hz
    errors = [abs(sampled_upcrossing_rate_hz(profile, rate) / rice - 1) for rate in (1000.0, 4000.0, 64000.0)]
    assert errors[0] > errors[1] > errors[2]
    assert errors[2] < 1e-4  # Rice (1944/45) is the continuous-time limit
    with pytest.raises(InputError):
        sampled_upcrossing_rate_hz(profile, 0.0)


def test_davenport_expected_largest_absolute_value_uses_twice_the_crossing_rate():
    rate, n, records = 8192.0, 2**13, 400
    profile = AsdProfile([10.0, 200.0], [0.04, 0.04], name="invented flat band")
    xs = random_phase_record(profile, rate, n, np.random.default_rng(1964), "rayleigh", records=records)
    nu0 = math.sqrt(quad_moment(profile, 2) / quad_moment(profile, 0))  # Rice, scipy.integrate.quad moments
    duration = n / rate

    def davenport(cycles):  # Davenport (1964): sqrt(2 ln N) + 0.5772 / sqrt(2 ln N)
        root = math.sqrt(2 * math.log(cycles))
        return root + EULER_GAMMA / root

    largest_abs, largest_up = [], []
    for x in xs:
        s = verify_record(x, rate, profile).statistics
        assert s["largest_peak_sigma"] == pytest.approx(np.max(np.abs(x - x.mean())) / x.std(), rel=1e-9)
        assert s["davenport_expected_peak_sigma"] == pytest.approx(davenport(2 * nu0 * duration), rel=1e-6)
        largest_abs.append(s["largest_peak_sigma"])
        largest_up.append((s["maximum"] - s["mean"]) / s["std"])
    mean_abs, mean_up = float(np.mean(largest_abs)), float(np.mean(largest_up))
    # |x| exceeds a when x or -x up-crosses a: 2 nu0 T crossings.  Measured: -1.0 %.
    assert mean_abs == pytest.approx(davenport(2 * nu0 * duration), rel=0.03)
    # The one-sided count nu0 T would be wrong for |x| (measured +5.2 %) ...
    assert mean_abs / davenport(nu0 * duration) - 1 > 0.03
    # ... and is right for the largest positive value (measured -1.3 %).
    assert mean_up == pytest.approx(davenport(nu0 * duration), rel=0.03)


def test_moments_equal_scipy_stats_on_the_judged_samples():
    profile = bench_profile()
    rng = np.random.default_rng(11)
    u = random_phase_record(profile, RATE_HZ, 2**18, rng, "rayleigh")
    u = u / u.std()
    x = 2.0 * (u + 0.15 * (u**2 - 1) + 0.04 * u**3) + 0.3  # skewed, heavy-tailed, offset
    skip_start, skip_end = 1000, 777
    s = verify_record(x, RATE_HZ, profile, skip_start_samples=skip_start, skip_end_samples=skip_end,
                      criteria=Criteria(grms_tolerance_percent=99)).statistics
    y = x[skip_start:x.size - skip_end]
    assert s["skewness"] == pytest.approx(scipy.stats.skew(y), rel=1e-9)
    assert s["kurtosis"] == pytest.approx(scipy.stats.kurtosis(y, fisher=False), rel=1e-9)
    assert s["kurtosis"] > 3.5 and s["skewness"] > 0.5
    assert s["mean"] == pytest.approx(np.mean(y), rel=1e-12)
    assert s["rms"] == pytest.approx(np.sqrt(np.mean(y * y)), rel=1e-12)
    assert s["peak"] == np.max(np.abs(y))
    assert s["crest_factor"] == pytest.approx(np.max(np.abs(y)) / np.sqrt(np.mean(y * y)), rel=1e-12)
    # exceedances against the Gaussian two-sided tail erfc(k/sqrt 2) (Abramowitz & Stegun 26.2)
    for row in s["exceedance"]:
        k = row["k_sigma"]
        assert row["measured_fraction"] == np.count_nonzero(np.abs(y - y.mean()) > k * y.std()) / y.size
        assert row["gaussian_fraction"] == pytest.approx(2 * scipy.stats.norm.sf(k), rel=1e-12)


# --------------------------------------------------------------------------- report contract


def test_to_dict_has_the_contract_keys_and_is_strict_json():
    profile = bench_profile()
    x = random_phase_record(profile, RATE_HZ, 2**18, np.random.default_rng(12), "rayleigh")
    v = verify_record(x, RATE_HZ, profile)
    d = v.to_dict()
    text = json.dumps(d, allow_nan=False)
    assert json.loads(text) == d
    for key in ("pass", "grms_target", "grms_measured", "grms_error_percent", "asd", "statistics", "rule", "failed"):
        assert key in d
    for key in ("tolerance_db", "max_deviation_db", "fraction_within_tolerance", "dof", "resolution_hz"):
        assert key in d["asd"]
    for key in ("rms", "mean", "skewness", "kurtosis", "crest_factor", "peak", "samples", "duration_s"):
        assert key in d["statistics"]
    assert d["grms_target"] == pytest.approx(math.sqrt(quad_moment(profile, 0)), rel=1e-6)  # scipy.integrate
    assert d["grms_measured"] == pytest.approx(np.sqrt(np.mean(x * x)), rel=1e-12)
    assert d["grms_error_percent"] == pytest.approx(100 * (d["grms_measured"] / d["grms_target"] - 1), rel=1e-12)
    assert d["statistics"]["samples"] == x.size
    assert d["statistics"]["duration_s"] == pytest.approx(x.size / RATE_HZ)
    assert d["asd"]["resolution_hz"] == RATE_HZ / (2 * (v.estimate.frequencies_hz.size - 1))


def test_to_dict_writes_non_finite_numbers_as_null():
    profile = bench_profile()
    x = random_phase_record(profile, RATE_HZ, 2**17, np.random.default_rng(13))
    v = verify_record(x, RATE_HZ, profile)
    # A judged line with no power at all reads -inf dB; the JSON report must still be valid.
    broken = dataclasses.replace(
        v,
        comparison=dataclasses.replace(v.comparison, max_deviation_db=-math.inf),
        statistics={**v.statistics, "kurtosis": math.nan},
    )
    d = json.loads(json.dumps(broken.to_dict(), allow_nan=False))
    assert d["asd"]["max_deviation_db"] is None and d["statistics"]["kurtosis"] is None


def test_chunked_source_gives_the_same_result_as_the_array():
    profile = bench_profile()
    rng = np.random.default_rng(14)
    x = random_phase_record(profile, RATE_HZ, 2**18 + 12345, rng, "rayleigh")
    cuts = np.sort(rng.choice(np.arange(1, x.size), size=300, replace=False))
    cuts = np.concatenate(([0], cuts[:100], cuts[100:101], cuts[100:], [x.size]))  # one empty chunk
    chunks = [x[a:b] for a, b in zip(cuts[:-1], cuts[1:])] + [x[:0]]
    assert any(c.size == 0 for c in chunks) and len(chunks) > 300
    calls = []

    def source():
        calls.append(1)
        return iter(chunks)

    kwargs = {"skip_start_samples": 5000, "skip_end_samples": 3001}
    whole = verify_record(x, RATE_HZ, profile, **kwargs)
    chunked = verify_record(source, RATE_HZ, profile, n_samples=x.size, **kwargs)
    assert len(calls) == 2  # two passes
    assert_close_tree(whole.to_dict(), chunked.to_dict(), rel=1e-9)
    np.testing.assert_array_equal(whole.excerpt_g, chunked.excerpt_g)
    np.testing.assert_array_equal(whole.histogram_density, chunked.histogram_density)
    np.testing.assert_allclose(whole.estimate.asd, chunked.estimate.asd, rtol=1e-9)

    with pytest.raises(InputError, match="n_samples"):
        verify_record(source, RATE_HZ, profile)
    with pytest.raises(InputError, match="expected"):
        verify_record(source, RATE_HZ, profile, n_samples=x.size + 10)


# --------------------------------------------------------------------------- bad input


def test_bad_input_raises_input_error():
    profile = bench_profile()
    x = random_phase_record(profile, RATE_HZ, 2**15, np.random.default_rng(15))
    with pytest.raises(InputError, match="one channel"):
        verify_record(np.stack([x, x], axis=1), RATE_HZ, profile)
    column = verify_record(x[:, None], RATE_HZ, profile)  # a single column is one channel
    assert column.statistics["samples"] == x.size
    with pytest.raises(InputError, match="skip_start_samples"):
        verify_record(x, RATE_HZ, profile, skip_start_samples=-1)
    with pytest.raises(InputError, match="nothing left"):
        verify_record(x, RATE_HZ, profile, skip_start_samples=x.size // 2, skip_end_samples=x.size // 2)
    with pytest.raises(InputError, match="top frequency"):
        verify_record(x, 3000.0, profile)
    with pytest.raises(InputError, match="rate"):
        verify_record(x, float("nan"), profile)
    bad = x.copy()
    bad[1234] = np.nan
    with pytest.raises(InputError, match="1234"):
        verify_record(bad, RATE_HZ, profile)
    with pytest.raises(InputError, match="constant"):
        verify_record(np.full(2**15, 0.5), RATE_HZ, profile)
    for kwargs in (
        {"tolerance_low_db": 1.0},
        {"tolerance_high_db": -1.0},
        {"grms_tolerance_percent": 0.0},
        {"min_fraction_within": 0.0},
        {"min_fraction_within": 1.5},
        {"edge_exclusion_resolutions": -1.0},
        {"kurtosis_target": 0.0},
        {"crest_factor_limit": -3.0},
        {"skewness_tolerance": float("nan")},
    ):
        with pytest.raises(InputError):
            Criteria(**kwargs)


def test_amplitude_targets_are_judged_when_given():
    profile = bench_profile()
    x = random_phase_record(profile, RATE_HZ, 2**18, np.random.default_rng(16), "rayleigh")
    s = verify_record(x, RATE_HZ, profile).statistics
    ok = verify_record(x, RATE_HZ, profile, Criteria(kurtosis_target=3.0, skewness_target=0.0,
                                                      crest_factor_limit=s["crest_factor"]))
    assert ok.passed, ok.reasons
    bad = verify_record(x, RATE_HZ, profile, Criteria(kurtosis_target=5.0, skewness_target=0.5,
                                                       crest_factor_limit=3.0))
    assert bad.failed == ("kurtosis", "skewness", "crest_factor")
    assert {"kurtosis", "skewness", "crest_factor"} <= bad.to_dict()["rule"].keys()


def test_expected_largest_sample_at_2_56_samples_per_cycle():
    # At 2.56 samples per cycle of the top frequency the samples miss the crests: the mean
    # largest |x| of many true Gaussian records (Rayleigh amplitudes, built here with numpy)
    # matches the sampled-sequence theory (Poisson crossings with Owen's T; Owen 1956,
    # Cramer & Leadbetter 1967) within 2 %, while Davenport's continuous-signal value
    # (Davenport 1964, 2 nu0 T) is several percent high.
    profile = AsdProfile([20.0, 200.0], [0.01, 0.01])
    rate, n, records = 512.0, 1 << 14, 120
    f = np.fft.rfftfreq(n, 1 / rate)
    amplitude = n * np.sqrt(profile.evaluate(f) * (rate / n) / 2)
    rng = np.random.default_rng(20261202)
    largest = []
    for _ in range(records):
        lines = amplitude * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)) / np.sqrt(2)
        x = np.fft.irfft(lines, n)
        largest.append(np.max(np.abs(x - x.mean())) / x.std())
    result = verify_record(x, rate, profile)
    s = result.statistics
    measured = float(np.mean(largest))
    assert measured == pytest.approx(s["expected_peak_sampled_sigma"], rel=0.02)
    assert s["davenport_expected_peak_sigma"] > 1.03 * measured
