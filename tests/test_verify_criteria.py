"""The verifier catches what a test engineer would reject, and passes what should pass.

Each case alters a drive written by the project's generator (bench-flat, 60 s at 5120 Hz, seed 7,
the reproduction of the trust issue) with numpy, or builds a record that should pass.  Reference
values come from numpy/scipy computed here on the samples, or from published theory named beside
each check.  All profiles are invented demo profiles.
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest
import scipy.signal
import scipy.stats
from scipy import integrate

from vibsynth.analysis.verify import Criteria, floor_percent, verify_record
from vibsynth.cli.verify_cmd import format_verification
from vibsynth.generate.pipeline import generate_samples
from vibsynth.profile.asd import AsdProfile
from vibsynth.profile.files import preset_names, read_preset

RATE_HZ = 5120.0


@pytest.fixture(scope="module")
def base():
    profile = read_preset("bench-flat")
    x = generate_samples(profile, 60.0, RATE_HZ, seed=7)
    return profile, x


def criterion(verification, name):
    (entry,) = [c for c in verification.to_dict()["criteria"] if c["name"] == name]
    return entry


def test_base_record_passes_every_criterion(base):
    profile, x = base
    v = verify_record(x, RATE_HZ, profile)
    d = v.to_dict()
    assert v.passed, v.reasons
    names = {c["name"] for c in d["criteria"]}
    assert {"asd", "asd_bands", "asd_edges", "grms", "mean", "stationarity", "crossing_rate",
            "gaussian_kurtosis", "gaussian_tail_3_sigma", "gaussian_largest_peak"} <= names
    for entry in d["criteria"]:
        assert entry["pass"] is True
        assert any(k.startswith("measured_") for k in entry) and any(k.startswith("limit_") for k in entry)
    json.dumps(d, allow_nan=False)


# --------------------------------------------------------------------------- item 6: DC offset


def test_dc_offset_of_one_g_fails_the_mean_criterion(base):
    profile, x = base
    v = verify_record(x + 1.0, RATE_HZ, profile)
    assert v.failed == ("mean",)
    entry = criterion(v, "mean")
    # 1 g against the record's RMS about zero, computed here with numpy: 25.2 %.
    y = x + 1.0
    assert entry["measured_percent_of_rms"] == pytest.approx(100 * abs(y.mean()) / np.sqrt(np.mean(y * y)), rel=1e-9)
    assert entry["measured_percent_of_rms"] > 25 and entry["limit_percent"] == 5.0
    assert "mean" in v.reasons[0] and "5 %" in v.reasons[0]


# --------------------------------------------------------------------------- item 7: stationarity


def test_two_seconds_of_zeros_fail_stationarity_at_the_right_time(base):
    profile, x = base
    y = x.copy()
    y[int(30 * RATE_HZ):int(32 * RATE_HZ)] = 0.0
    v = verify_record(y, RATE_HZ, profile)
    assert "stationarity" in v.failed
    entry = criterion(v, "stationarity")
    assert 30.0 - entry["window_s"] < entry["measured_worst_window_start_s"] < 32.0
    assert entry["measured_worst_rms_ratio"] == 0.0
    # Chi-square limits of a window mean square with nu dof, Bonferroni over the windows
    # (Bendat & Piersol 2010; limits recomputed with scipy.stats).
    nu, windows, alpha = entry["window_dof"], entry["windows"], 1e-3
    assert entry["limit_low_rms_ratio"] == pytest.approx(math.sqrt(scipy.stats.chi2.ppf(alpha / 2 / windows, nu) / nu))
    assert entry["limit_high_rms_ratio"] == pytest.approx(math.sqrt(scipy.stats.chi2.isf(alpha / 2 / windows, nu) / nu))


def test_ten_short_dropouts_fail_stationarity(base):
    profile, x = base
    y = x.copy()
    starts = [int((3 + 5.5 * i) * RATE_HZ) for i in range(10)]
    for s in starts:
        y[s:s + int(0.1 * RATE_HZ)] = 0.0
    v = verify_record(y, RATE_HZ, profile)
    assert "stationarity" in v.failed
    entry = criterion(v, "stationarity")
    assert entry["measured_windows_outside"] >= 10
    assert any(abs(entry["measured_worst_window_start_s"] - s / RATE_HZ) <= entry["window_s"] for s in starts)


def test_window_dof_approaches_twice_the_bandwidth_time_product(base):
    # Bendat & Piersol (2010): the mean square over T of a Gaussian process with statistical bandwidth
    # B_s = (int S)^2 / int S^2 has normalized random error 1/sqrt(B_s T), i.e. about 2 B_s T chi-square dof.
    profile, x = base
    entry = criterion(verify_record(x, RATE_HZ, profile), "stationarity")
    f = np.linspace(profile.frequency_min_hz, profile.frequency_max_hz, 200001)
    s = profile.evaluate(f)
    b_s = integrate.trapezoid(s, f) ** 2 / integrate.trapezoid(s * s, f)
    assert entry["window_dof"] == pytest.approx(2 * b_s * entry["window_s"], rel=0.05)


# --------------------------------------------------------------------------- item 8: crossing rate


def test_wrong_sample_rate_fails_the_crossing_rate(base):
    profile, x = base
    v = verify_record(x, 6400.0, profile)  # a sidecar claiming 6400 Hz for a 5120 Hz record
    entry = criterion(v, "crossing_rate")
    assert entry["pass"] is False and "asd" in v.failed
    # Counted here: sign changes from below to at/above the mean, per second at the claimed rate (1112/s).
    below = x < x.mean()
    counted = np.count_nonzero(below[:-1] & ~below[1:]) / (x.size / 6400.0)
    assert entry["measured_rate_hz"] == pytest.approx(counted, rel=1e-9)
    assert entry["measured_rate_hz"] == pytest.approx(1112, abs=2)
    # Rice (1944/45) from the target, moments by scipy.integrate.quad: 913/s at 6400 Hz, sampled
    # (Sheppard's arccos formula) a few per cent lower.
    m0 = sum(integrate.quad(lambda f: float(profile.evaluate(f)), a, b)[0]
             for a, b in zip(profile.frequencies_hz[:-1], profile.frequencies_hz[1:]))
    m2 = sum(integrate.quad(lambda f: f * f * float(profile.evaluate(f)), a, b)[0]
             for a, b in zip(profile.frequencies_hz[:-1], profile.frequencies_hz[1:]))
    assert math.sqrt(m2 / m0) == pytest.approx(952.4, abs=0.5)
    assert entry["expected_rate_hz"] < math.sqrt(m2 / m0)
    assert entry["measured_error_percent"] > 15 and entry["limit_percent"] == pytest.approx(3.0)
    # The true rate passes.
    assert criterion(verify_record(x, RATE_HZ, profile), "crossing_rate")["pass"] is True


# --------------------------------------------------------------------------- item 9: Gaussian expectations


def test_clipped_gaussian_drive_fails_gaussian_expectations(base):
    profile, x = base
    sigma = x.std()
    y = np.clip(x, -2 * sigma, 2 * sigma)
    v = verify_record(y, RATE_HZ, profile)
    assert v.failed == ("gaussian",)
    k = criterion(v, "gaussian_kurtosis")
    assert k["measured_kurtosis"] == pytest.approx(scipy.stats.kurtosis(y, fisher=False), rel=1e-9)
    assert k["measured_kurtosis"] == pytest.approx(2.46, abs=0.01)
    assert k["pass"] is False
    assert criterion(v, "gaussian_tail_3_sigma")["measured_percent"] == 0.0
    peak = criterion(v, "gaussian_largest_peak")
    assert peak["pass"] is False and peak["measured_sigma"] == pytest.approx(2.08, abs=0.01)


def test_kurtosis_band_follows_the_variance_of_sample_kurtosis(base):
    # Lomnicki (1961): for a Gaussian linear process, Var(b2) ~ (24/n) sum_h rho_h^4.  Here the sum is
    # estimated from the record's own sample autocorrelation (numpy), independently of the verifier.
    profile, x = base
    k = criterion(verify_record(x, RATE_HZ, profile), "gaussian_kurtosis")
    xc = x - x.mean()
    spectrum = np.abs(np.fft.rfft(xc, 2 * xc.size)) ** 2
    acov = np.fft.irfft(spectrum)[: 4096]
    rho = acov / acov[0]
    sd = math.sqrt(24 * (1 + 2 * np.sum(rho[1:] ** 4)) / x.size)
    assert (k["limit_high_kurtosis"] - 3.0) / 4.5 == pytest.approx(sd, rel=0.1)


def test_asked_amplitude_target_replaces_the_gaussian_expectations(base):
    profile, x = base
    sigma = x.std()
    y = np.clip(x, -2 * sigma, 2 * sigma)
    clip = float(np.max(np.abs(y)) / np.sqrt(np.mean(y * y)))
    v = verify_record(y, RATE_HZ, profile, Criteria(crest_factor_limit=clip))
    assert v.passed, v.reasons
    names = {c["name"] for c in v.to_dict()["criteria"]}
    assert "crest_factor" in names and not any(n.startswith("gaussian") for n in names)


# --------------------------------------------------------------------------- item 10: a missing band at the edge


def test_missing_band_at_the_low_edge_fails():
    profile = read_preset("harbour-crane-cab")
    rate = 1024.0
    x = generate_samples(profile, 60.0, rate, seed=7)
    assert verify_record(x, rate, profile).passed
    spectrum = np.fft.rfft(x)
    spectrum[np.fft.rfftfreq(x.size, 1 / rate) < 3.4] = 0.0
    y = np.fft.irfft(spectrum, x.size)
    v = verify_record(y, rate, profile)
    assert "asd" in v.failed
    edges = criterion(v, "asd_edges")
    assert edges["pass"] is False and edges["measured_frequency_hz"] < 3.4
    assert edges["measured_max_deviation_db"] < -10


def test_band_shares_fail_a_missing_third_octave(base):
    profile, x = base
    spectrum = np.fft.rfft(x)
    f = np.fft.rfftfreq(x.size, 1 / RATE_HZ)
    spectrum[(f > 400) & (f < 500)] = 0.0
    v = verify_record(np.fft.irfft(spectrum, x.size), RATE_HZ, profile)
    bands = criterion(v, "asd_bands")
    assert bands["pass"] is False and 300 < bands["measured_band_low_hz"] < 500


# --------------------------------------------------------------------------- item 11: records that should pass


def test_notched_profile_passes_with_a_resolution_from_the_notch_width():
    # Invented: flat 0.01 g^2/Hz, 20-2000 Hz, with a 30 dB notch, +/-10 Hz, at 500 Hz.
    profile = AsdProfile([20, 490, 500, 510, 2000], [0.01, 0.01, 1e-5, 0.01, 0.01], name="invented notch")
    x = generate_samples(profile, 60.0, RATE_HZ, seed=7)
    v = verify_record(x, RATE_HZ, profile)
    assert v.passed, v.reasons
    d = v.to_dict()
    assert d["asd"]["resolution_hz"] <= 10.0 / 16
    assert abs(d["asd"]["max_deviation_db"]) < 2.0  # before: +4.49 dB at 500 Hz with 2.5 Hz lines
    # The estimate is scipy.signal.welch's at that resolution.
    n = round(RATE_HZ / d["asd"]["resolution_hz"])
    f, p = scipy.signal.welch(x, RATE_HZ, window="hann", nperseg=n, noverlap=n // 2)
    np.testing.assert_allclose(v.estimate.asd, p, rtol=1e-9, atol=1e-18)
    # A shorter record cannot afford those lines at 120 dof: the lines the Hann window smooths into the
    # notch are judged against the smoothed target (Bendat & Piersol 2010, bias of the estimate), and
    # the record still passes, with a note on the duration that would resolve the notch.
    short = verify_record(generate_samples(profile, 5.0, RATE_HZ, seed=7), RATE_HZ, profile)
    assert short.passed, short.reasons
    assert "too short" in short.to_dict()["asd"]["dof_note"]
    assert np.any(short.comparison.window_bias)
    assert not np.any(short.comparison.judged & short.comparison.window_bias)
    # A record without the notch fails on those lines.
    flat = AsdProfile([20, 2000], [0.01, 0.01])
    unnotched = verify_record(generate_samples(flat, 5.0, RATE_HZ, seed=7), RATE_HZ, profile)
    assert criterion(unnotched, "asd_edges")["pass"] is False


def test_narrow_band_is_judged_and_a_short_record_says_how_long_it_should_be():
    profile = AsdProfile([99.0, 101.0], [1.0, 1.0], name="invented 2 Hz band")
    rate = 512.0
    long = verify_record(generate_samples(profile, 60.0, rate, seed=7), rate, profile)
    assert long.passed, long.reasons
    assert long.to_dict()["asd"]["lines_judged"] >= 3
    short = verify_record(generate_samples(profile, 4.0, rate, seed=7), rate, profile)
    note = short.to_dict()["asd"]["dof_note"]
    assert "too short" in note and "99-101 Hz" in note
    needed_s = float(note.split("at least ")[1].split(" s")[0])
    # Welch (1967): 120 dof with Hann at 50 % overlap needs K with 36 K^2 / (19 K - 1) >= 120, i.e.
    # K = 64 segments of 1/resolution s, overlapping by half.
    resolution = float(note.split("lines of ")[1].split(" Hz")[0])
    k = next(k for k in range(1, 1000) if 36 * k * k / (19 * k - 1) >= 120)
    assert needed_s == pytest.approx((k + 1) / 2 / resolution, rel=0.01)


# --------------------------------------------------------------------------- item 12: rounding


def test_shares_are_rounded_down():
    assert floor_percent(1 - 3 / 12669) == "99.9"
    assert floor_percent(1 - 1 / 10**6) == "99.9"  # 99.9999 %: rounded down, never up to 100.0
    assert floor_percent(1.0) == "100.0"
    assert floor_percent(0.5) == "50.0"


def test_text_never_reads_all_within_when_lines_are_outside(base):
    profile, x = base
    v = verify_record(x, RATE_HZ, profile)
    faked = dataclasses.replace(v, comparison=dataclasses.replace(v.comparison, fraction_within_tolerance=1 - 3 / 12669))
    text = format_verification(faked, "base.npy")
    assert "100.0 %" not in text.split("ASD")[1].split("\n")[0]
    assert "99.9 % of" in text


# --------------------------------------------------------------------------- what worked before keeps working


def test_known_defects_still_fail(base):
    profile, x = base
    assert "asd" in verify_record(x * 10 ** (3 / 20), RATE_HZ, profile).failed  # 3 dB hot
    spectrum = np.fft.rfft(x)
    f = np.fft.rfftfreq(x.size, 1 / RATE_HZ)
    spectrum[(f > 300) & (f < 305)] = 0.0  # 5 Hz gap
    assert "asd" in verify_record(np.fft.irfft(spectrum, x.size), RATE_HZ, profile).failed
    t = np.arange(x.size) / RATE_HZ
    tone = x + 0.3 * math.sqrt(2) * np.sin(2 * math.pi * 500.3 * t)  # 0.3 g RMS tone
    assert "asd" in verify_record(tone, RATE_HZ, profile).failed


@pytest.mark.parametrize("name", preset_names())
def test_good_drives_of_every_preset_pass(name):
    profile = read_preset(name)
    rate = 5120.0 if profile.frequency_max_hz > 500 else 1280.0
    v = verify_record(generate_samples(profile, 20.0, rate, seed=11), rate, profile)
    assert v.passed, v.reasons


@pytest.mark.parametrize("amplitude, least", [("fixed", 20), ("rayleigh", 19)])
def test_false_alarms_over_twenty_seeds(amplitude, least):
    # Every criterion on.  Measured over 20 seeds of 20 s at 5120 Hz: fixed 20/20 and Rayleigh 20/20
    # on every preset; the design aim is at most 0.1 % false alarms per statistical criterion.
    profile = read_preset("bench-flat")
    passed = 0
    for seed in range(20):
        x = generate_samples(profile, 20.0, RATE_HZ, seed=1000 + seed, amplitude=amplitude)
        passed += verify_record(x, RATE_HZ, profile).passed
    assert passed >= least


def test_docstring_examples_run():
    import doctest

    import vibsynth.analysis.stats
    import vibsynth.analysis.verify

    for module in (vibsynth.analysis.verify, vibsynth.analysis.stats):
        result = doctest.testmod(module)
        assert result.attempted > 0 and result.failed == 0


def test_relaxed_rule_reports_the_crossing_rate_without_judging_it(base):
    profile, x = base
    spectrum = np.fft.rfft(x)
    f = np.fft.rfftfreq(x.size, 1 / RATE_HZ)
    spectrum[(f > 1500) & (f < 1800)] = 0.0  # removes high-frequency power: fewer crossings
    y = np.fft.irfft(spectrum, x.size)
    strict = verify_record(y, RATE_HZ, profile)
    assert criterion(strict, "crossing_rate")["pass"] is False and "asd" in strict.failed
    relaxed = verify_record(y, RATE_HZ, profile, Criteria(min_fraction_within=0.7, grms_tolerance_percent=20))
    entry = criterion(relaxed, "crossing_rate")
    assert entry["pass"] is False and entry["judged"] is False
    assert "not judged" in relaxed.to_dict()["rule"]["crossing_rate"]


def test_new_criteria_settings_are_checked():
    from vibsynth.errors import InputError

    for kwargs in ({"mean_limit_percent": -1.0}, {"crossing_rate_tolerance_percent": float("nan")},
                   {"false_alarm_probability": 0.0}, {"false_alarm_probability": 0.7}):
        with pytest.raises(InputError):
            Criteria(**kwargs)
    rules = Criteria().rule_text()
    assert {"mean", "stationarity", "crossing_rate", "asd_bands", "asd_edges", "gaussian"} <= rules.keys()
    assert "gaussian" not in Criteria(kurtosis_target=5.0).rule_text()


def test_a_short_dropout_fails_and_quantised_slow_records_do_not():
    # A 50 ms run of zeros in 60 s of bench-flat changes the ASD and RMS by far less than their
    # tolerances (found by an independent check), but no continuous random record repeats a value 256
    # times: the held-samples check fails it.  A 16-bit record of a 2-300 Hz profile at 51.2 kHz holds
    # values for a few tenths of a millisecond at its slow peaks and must pass.
    import warnings as _warnings

    from vibsynth import generate_samples, read_profile
    from vibsynth.analysis.verify import verify_record

    profile = read_profile("bench-flat")
    x = generate_samples(profile, 60.0, 5120.0, seed=7)
    x[300000:300256] = 0.0
    result = verify_record(x, 5120.0, profile)
    held = next(c for c in result.to_dict()["criteria"] if c["name"] == "held_samples")
    assert not result.passed and not held["pass"] and held["measured_longest_run_samples"] == 256
    slow = read_profile("harbour-crane-cab")
    with _warnings.catch_warnings():
        _warnings.simplefilter("ignore")
        y = generate_samples(slow, 60.0, 51200.0, seed=2)
    step = np.max(np.abs(y)) * 1.001 / 2**15
    y = np.round(y / step) * step  # what a 16-bit file holds
    result = verify_record(y, 51200.0, slow)
    held = next(c for c in result.to_dict()["criteria"] if c["name"] == "held_samples")
    assert held["pass"] and held["measured_longest_run_samples"] > 1
