"""Correlated multi-channel drives: profile, positive-semidefinite check, synthesis, files, verification.

References used here (named again beside each check):
- scipy.signal.csd / coherence / welch: the independent estimators (Welch's method); csd(a, b) returns
  G_ab = E[conj(A) B], the phase convention of the profile.
- Bendat, J. S. & Piersol, A. G., *Random Data*, 4th ed., Wiley 2010, section 9.2.3: bias of the
  coherence estimate (1 - gamma^2)^2 / n_d, random errors of coherence and phase.
- Carter, G. C., Knapp, C. H. & Nuttall, A. H., IEEE Trans. Audio Electroacoust. 21(4), 1973:
  E[coherence estimate] = 1 / n_d for incoherent Gaussian signals and n_d disjoint segments.
- Closed-form g RMS of a log-log ASD: sqrt of the area (the profile module's closed forms are checked
  against scipy.integrate in tests/test_profile_reference.py).
- numpy.fft.rfft of a periodic record: the lines themselves (exact phase relations).
The acceptance figures (coherence within 0.05, phase within 5 degrees, ASD within +/-1.5 dB on 95 % of
in-band lines, g RMS within 1 %) are those this feature promises (common practice, no source).
All profiles are invented.
"""

from __future__ import annotations

import contextlib
import io
import json
from pathlib import Path

import numpy as np
import pytest
import scipy.signal

from vibsynth.cli.main import main
from vibsynth.errors import InputError
from vibsynth.generate.channels import make_channel_plan
from vibsynth.generate.pipeline import Synthesizer, generate_samples
from vibsynth.io.drivefile import open_drive, sidecar_path
from vibsynth.profile.asd import AsdProfile
from vibsynth.profile.files import read_profile
from vibsynth.profile.multichannel import (ChannelPair, MultiChannelProfile, nearest_coherence_matrix,
                                           parse_any_toml, read_any_profile)

RATE = 5120.0
EXAMPLE = Path(__file__).parent.parent / "examples" / "three-axis-mount.toml"

THREE = """
name = "three"
[[channels]]
name = "x"
profile = "bench-flat"
[[channels]]
name = "y"
profile = "crop-drone-camera"
[[channels]]
name = "z"
[[channels.breakpoints]]
frequency = 20.0
asd = 0.01
[[channels.breakpoints]]
frequency = 2000.0
asd = 0.01
[[pairs]]
channels = ["x", "y"]
coherence = 0.8
phase_deg = 0.0
[[pairs]]
channels = ["x", "z"]
coherence = 0.5
phase_deg = 90.0
[[pairs]]
channels = ["y", "z"]
[[pairs.breakpoints]]
frequency = 20.0
coherence = 0.3
phase_deg = 75.0
[[pairs.breakpoints]]
frequency = 2000.0
coherence = 0.7
phase_deg = 105.0
"""


def _quiet_main(argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main([str(a) for a in argv])
    return status, out.getvalue(), err.getvalue()


def _log_interp(f, f_points, values):
    """Reference log-frequency interpolation, constant beyond the ends (the profile's stated rule)."""
    return np.interp(np.log(f), np.log(f_points), values)


def _targets(f):
    """Target (coherence, phase) of the three pairs at f, written out independently of the library."""
    return {
        (0, 1): (np.full_like(f, 0.8), np.zeros_like(f)),
        (0, 2): (np.full_like(f, 0.5), np.full_like(f, 90.0)),
        (1, 2): (_log_interp(f, [20.0, 2000.0], [0.3, 0.7]), _log_interp(f, [20.0, 2000.0], [75.0, 105.0])),
    }


@pytest.fixture(scope="module")
def three():
    return parse_any_toml(THREE, "three.toml")


@pytest.fixture(scope="module", params=["periodic", "overlap-add"])
def long_record(request, three):
    budget = 1e12 if request.param == "periodic" else 1.0
    plan = make_channel_plan(three, 600.0, RATE, memory_budget_bytes=budget)
    assert plan.mode == request.param
    return Synthesizer(plan, seed=11).samples()


# ------------------------------------------------------------------ accuracy against scipy.signal
def test_three_channels_reach_their_coherence_phase_asd_and_grms(three, long_record):
    x = long_record
    nperseg = 2048  # 2.5 Hz lines; 600 s gives about 3000 segments (Welch, 50 % overlap)
    f, _ = scipy.signal.welch(x[:, 0], fs=RATE, nperseg=nperseg)
    band = (f >= 25.0) & (f <= 1950.0)  # in band, two Hann main lobes away from the 20 and 2000 Hz edges
    targets = _targets(f[band])
    for (a, b), (coherence_target, phase_target) in targets.items():
        _, coherence = scipy.signal.coherence(x[:, a], x[:, b], fs=RATE, nperseg=nperseg)
        _, cross = scipy.signal.csd(x[:, a], x[:, b], fs=RATE, nperseg=nperseg)
        coherence_error = np.abs(coherence[band] - coherence_target)
        phase_error = np.abs((np.angle(cross[band], deg=True) - phase_target + 180.0) % 360.0 - 180.0)
        # 0.05 and 5 degrees on 95 % of in-band lines: this feature's acceptance figures (common practice, no source)
        assert np.mean(coherence_error <= 0.05) >= 0.95, (a, b, np.quantile(coherence_error, 0.95))
        assert np.mean(phase_error <= 5.0) >= 0.95, (a, b, np.quantile(phase_error, 0.95))
    for column, channel in enumerate(three.channels):
        _, asd = scipy.signal.welch(x[:, column], fs=RATE, nperseg=nperseg)
        error_db = 10.0 * np.log10(asd[band] / channel.evaluate(f[band]))
        assert np.mean(np.abs(error_db) <= 1.5) >= 0.95, (column, np.quantile(np.abs(error_db), 0.95))
        # g RMS within 1 % of the closed-form sqrt(area) of the channel's log-log ASD
        assert np.sqrt(np.mean(x[:, column] ** 2)) == pytest.approx(channel.grms, rel=0.01)


def test_phase_convention_is_that_of_scipy_csd():
    """phase_deg = +90: the second channel leads; scipy.signal.csd(a, b) returns angle +90 (G_ab = E[conj(A) B])."""
    flat = AsdProfile([50.0, 500.0], [0.01, 0.01])
    one = np.array([1.0])
    profile = MultiChannelProfile(("a", "b"), (flat, flat), (ChannelPair(0, 1, one, one, np.array([90.0])),))
    x = Synthesizer(make_channel_plan(profile, 20.0, 2048.0, memory_budget_bytes=1e12), seed=2).samples()
    f, cross = scipy.signal.csd(x[:, 0], x[:, 1], fs=2048.0, nperseg=1024)
    inside = (f > 60) & (f < 450)
    assert np.median(np.angle(cross[inside], deg=True)) == pytest.approx(90.0, abs=0.5)
    # swapping the arguments conjugates: csd(b, a) has angle -90
    _, swapped = scipy.signal.csd(x[:, 1], x[:, 0], fs=2048.0, nperseg=1024)
    assert np.median(np.angle(swapped[inside], deg=True)) == pytest.approx(-90.0, abs=0.5)


def test_fully_coherent_channels_reproduce_the_phase_shift_exactly():
    """Coherence 1: every line of b is the line of a times sqrt(S_b/S_a) exp(i phase) (numpy.fft.rfft of the record)."""
    a_profile = AsdProfile([20.0, 1000.0], [0.01, 0.01])
    b_profile = AsdProfile([20.0, 1000.0], [0.04, 0.04])
    phase = 37.0
    one = np.array([1.0])
    profile = MultiChannelProfile(("a", "b"), (a_profile, b_profile), (ChannelPair(0, 1, one, one, np.array([phase])),))
    plan = make_channel_plan(profile, 8.0, 4096.0, memory_budget_bytes=1e12)
    x = Synthesizer(plan, seed=5).samples()
    lines_a, lines_b = np.fft.rfft(x[:, 0]), np.fft.rfft(x[:, 1])
    f = np.fft.rfftfreq(x.shape[0], 1.0 / 4096.0)
    inside = (f > 21.0) & (f < 999.0)
    ratio = lines_b[inside] / lines_a[inside]
    np.testing.assert_allclose(np.angle(ratio, deg=True), phase, atol=1e-6)
    np.testing.assert_allclose(np.abs(ratio), 2.0, rtol=1e-9)  # sqrt(0.04 / 0.01)
    _, coherence = scipy.signal.coherence(x[:, 0], x[:, 1], fs=4096.0, nperseg=1024)
    assert np.min(coherence[(np.fft.rfftfreq(1024, 1 / 4096.0) > 30) & (np.fft.rfftfreq(1024, 1 / 4096.0) < 990)]) > 0.999


def test_incoherent_channels_sit_at_the_estimators_bias_floor():
    """No pair given: the coherence estimate averages 1/n_d over disjoint segments (Carter, Knapp & Nuttall 1973)."""
    flat = AsdProfile([20.0, 2000.0], [0.01, 0.01])
    profile = MultiChannelProfile(("x", "y"), (flat, flat))
    x = Synthesizer(make_channel_plan(profile, 200.0, RATE, memory_budget_bytes=1.0), seed=3).samples()
    nperseg = 4096
    segments = x.shape[0] // nperseg
    f, coherence = scipy.signal.coherence(x[:, 0], x[:, 1], fs=RATE, nperseg=nperseg, noverlap=0)
    inside = (f > 30) & (f < 1950)
    floor = 1.0 / segments  # E[gamma^2 estimate] = 1/n_d (Carter et al. 1973), also B&P's bias at gamma^2 = 0
    assert np.mean(coherence[inside]) == pytest.approx(floor, rel=0.2)
    assert np.quantile(coherence[inside], 0.99) < 8 * floor  # the estimate is Beta(1, n_d - 1): P(> 8/n_d) ~ e^-8


# ------------------------------------------------------------------ positive semidefinite check
def test_a_matrix_that_is_not_positive_semidefinite_is_refused(tmp_path):
    bad = THREE.replace("phase_deg = 105.0", "phase_deg = -105.0")
    profile = parse_any_toml(bad, "bad.toml")
    with pytest.raises(InputError) as caught:
        make_channel_plan(profile, 10.0, RATE)
    text = caught.value.one_line()
    assert "not positive semidefinite at" in text and "Hz" in text and "smallest eigenvalue" in text
    assert "channels x, y, z" in text and "\n" not in text
    path = tmp_path / "bad.toml"
    path.write_text(bad)
    status, out, err = _quiet_main(["info", path])
    assert status == 2 and out == "" and len(err.strip().splitlines()) == 1 and "smallest eigenvalue" in err
    drive = tmp_path / "d.flac"
    status, _, err = _quiet_main(["generate", path, "-o", drive, "--duration", 10, "--rate", RATE, "--seed", 1])
    assert status == 2 and "not positive semidefinite" in err
    assert not drive.exists() and not sidecar_path(drive).exists() and list(tmp_path.iterdir()) == [path]


def test_repair_gives_the_nearest_valid_matrix_and_says_how_far(tmp_path):
    bad = THREE.replace("phase_deg = 105.0", "phase_deg = -105.0")
    path = tmp_path / "bad.toml"
    path.write_text(bad)
    status, out, _ = _quiet_main(["info", path, "--repair"])
    assert status == 0 and "Higham 1988" in out and "largest move" in out
    fixed, moved = parse_any_toml(bad, "bad.toml").repaired()
    assert fixed.check_psd() is None and moved["frobenius_max"] > 0
    # Higham (1988): for a Hermitian matrix the nearest PSD matrix clips the negative eigenvalues; for
    # [[1, 1], [1, 1]] + a negative direction the clipped result has eigenvalues >= 0 and unit diagonal.
    matrix = np.array([[[1, 0.9, 0.9], [0.9, 1, -0.9], [0.9, -0.9, 1]]], dtype=complex)
    repaired, distance = nearest_coherence_matrix(matrix)
    assert np.linalg.eigvalsh(repaired[0])[0] >= -1e-12
    np.testing.assert_allclose(np.diag(repaired[0]).real, 1.0)
    # a valid matrix is left alone
    ok = np.array([[[1, 0.5], [0.5, 1]]], dtype=complex)
    assert np.array_equal(nearest_coherence_matrix(ok)[0], ok)
    # and generation from the repaired profile works and is checked at every line
    repaired_path = tmp_path / "fixed.toml"
    repaired_path.write_text("repair = true\n" + bad)
    drive = tmp_path / "d.npy"
    status, _, err = _quiet_main(["generate", repaired_path, "-o", drive, "--duration", 10, "--rate", RATE, "--seed", 1])
    assert status == 0, err
    assert distance[0] > 0


# ------------------------------------------------------------------ determinism and the single-channel path
@pytest.mark.parametrize("budget", [1e12, 1.0])
def test_same_seed_same_samples_whatever_the_chunks(three, budget):
    plan = make_channel_plan(three, 12.0, RATE, memory_budget_bytes=budget, ramp_in_s=0.5, ramp_out_s=0.5)
    whole = Synthesizer(plan, seed=9).samples()
    assert whole.shape == (plan.total_samples, 3)
    again = Synthesizer(make_channel_plan(three, 12.0, RATE, memory_budget_bytes=budget, ramp_in_s=0.5,
                                          ramp_out_s=0.5), seed=9).samples()
    assert np.array_equal(whole, again)
    for chunk in (1000, 4096, 65536):
        assert np.array_equal(np.concatenate(list(Synthesizer(plan, seed=9).iter_chunks(chunk))), whole)
    assert np.array_equal(Synthesizer(plan, seed=9).samples(12345, 23456), whole[12345:23456])
    assert np.array_equal(Synthesizer(plan, seed=9, workers=3).samples(), whole)
    assert not np.array_equal(Synthesizer(plan, seed=10).samples(), whole)


def test_a_one_channel_profile_gives_exactly_the_samples_of_today(tmp_path):
    path = tmp_path / "one.toml"
    path.write_text('[[channels]]\nname = "only"\nprofile = "bench-flat"\n')
    single = read_any_profile(path)
    assert isinstance(single, AsdProfile)
    reference = read_profile("bench-flat")
    for budget in (1e12, 1.0):
        a = generate_samples(single, 8.0, RATE, seed=4, memory_budget_bytes=budget)
        b = generate_samples(reference, 8.0, RATE, seed=4, memory_budget_bytes=budget)
        assert np.array_equal(a, b)
    out_a, out_b = tmp_path / "a.npy", tmp_path / "b.npy"
    assert _quiet_main(["generate", path, "-o", out_a, "--duration", 4, "--rate", RATE, "--seed", 2])[0] == 0
    assert _quiet_main(["generate", "bench-flat", "-o", out_b, "--duration", 4, "--rate", RATE, "--seed", 2])[0] == 0
    assert out_a.read_bytes() == out_b.read_bytes()


def test_non_gaussian_options_are_refused_clearly(tmp_path):
    path = tmp_path / "three.toml"
    path.write_text(THREE)
    for option in (("--kurtosis", 5), ("--clip", 3), ("--skewness", 0.3)):
        status, _, err = _quiet_main(["generate", path, "-o", tmp_path / "d.npy", "--duration", 4, "--rate", RATE,
                                      "--seed", 1, *option])
        assert status == 2 and "not implemented for multi-channel" in err and len(err.strip().splitlines()) == 1


# ------------------------------------------------------------------ files and sidecar
@pytest.mark.parametrize("suffix", ["wav", "flac", "csv", "npy"])
def test_files_hold_one_column_per_channel_and_the_sidecar_lists_them(tmp_path, suffix):
    jsonschema = pytest.importorskip("jsonschema")
    from vibsynth.io.schemas import load_schema

    path = tmp_path / "three.toml"
    path.write_text(THREE)
    drive = tmp_path / f"d.{suffix}"
    status, _, err = _quiet_main(["generate", path, "-o", drive, "--duration", 4, "--rate", RATE, "--seed", 6])
    assert status == 0, err
    side = json.loads(sidecar_path(drive).read_text())
    jsonschema.Draft202012Validator(load_schema("sidecar")).validate(side)
    assert [c["name"] for c in side["channels"]] == ["x", "y", "z"]
    assert [c["column"] for c in side["channels"]] == ["x_g", "y_g", "z_g"]
    assert all(c["scale"] == side["scale"] for c in side["channels"])  # one full scale per file
    assert {tuple(p["channels"]) for p in side["pairs"]} == {("x", "y"), ("x", "z"), ("y", "z")}
    plan = make_channel_plan(parse_any_toml(THREE), 4.0, RATE)
    expected = Synthesizer(plan, seed=6).samples()
    opened = open_drive(drive)
    assert opened.channels == ("x", "y", "z")
    data = np.concatenate(list(opened.iter_channels(5000)))
    if suffix == "npy":
        raw = np.load(drive)
        assert raw.shape == (plan.total_samples, 3) and np.array_equal(raw, expected)
    elif suffix == "csv":
        assert drive.read_text().splitlines()[0] == "time_s,x_g,y_g,z_g"
        np.testing.assert_allclose(data, expected, atol=1e-8)
    else:
        import soundfile

        assert soundfile.info(str(drive)).channels == 3
        # pcm24 (flac default) quantises to full scale / 2^23; float wav to float32 rounding
        np.testing.assert_allclose(data, expected, atol=side["scale"] * 2.0**-22)
    for index, name in enumerate(("x", "y", "z")):
        assert np.array_equal(opened.read(channel=name), data[:, index])
        assert side["channels"][index]["peak_g"] == pytest.approx(np.max(np.abs(expected[:, index])), rel=1e-6)


# ------------------------------------------------------------------ verification
def test_verify_passes_a_good_drive_and_fails_a_wrong_pair(tmp_path):
    path = tmp_path / "three.toml"
    path.write_text(THREE)
    drive = tmp_path / "d.flac"
    assert _quiet_main(["generate", path, "-o", drive, "--duration", 120, "--rate", RATE, "--seed", 8])[0] == 0
    status, out, err = _quiet_main(["verify", drive, "--json", "-o", tmp_path / "report"])
    assert status == 0, out + err
    data = json.loads(out)
    assert data["pass"] and len(data["channels"]) == 3 and len(data["pairs"]) == 3
    assert all(p["pass"] for p in data["pairs"])
    assert (tmp_path / "report" / "matrix.png").stat().st_size > 0
    # The same drive against a profile that asks x-z for coherence 0.2: the pair check must fail.
    wrong = tmp_path / "wrong.toml"
    wrong.write_text(THREE.replace("coherence = 0.5", "coherence = 0.2"))
    status, out, _ = _quiet_main(["verify", drive, "--profile", wrong])
    assert status == 1 and "pair x-z" in out and "FAIL" in out
    # the JSON says which part failed, at the top level as a single-channel verification does
    status, out, _ = _quiet_main(["verify", drive, "--profile", wrong, "--json"])
    data = json.loads(out)
    assert status == 1 and not data["pass"] and "pair x-z" in data["failed"]
    assert any(reason.startswith("pair x-z:") for reason in data["reasons"])


def test_cross_spectral_accumulator_equals_scipy_csd_in_any_chunks():
    from vibsynth.analysis.channels import CrossSpectralAccumulator

    rng = np.random.default_rng(4)
    x = rng.standard_normal((50000, 3))
    accumulator = CrossSpectralAccumulator(1000.0, 512, 3)
    for piece in np.array_split(x, [7, 700, 701, 20000]):
        accumulator.update(piece)
    f, matrix, _, _ = accumulator.result()
    for a in range(3):
        for b in range(3):
            # scipy.signal.csd: Welch, Hann, 50 % overlap, constant detrend, density, one-sided
            _, reference = scipy.signal.csd(x[:, a], x[:, b], fs=1000.0, nperseg=512)
            np.testing.assert_allclose(matrix[:, a, b], reference, rtol=1e-9, atol=1e-15)


def test_coherence_error_formulas():
    from vibsynth.analysis.channels import coherence_bias, coherence_sigma, phase_sigma_deg

    # Bendat & Piersol (2010) section 9.2.3: bias (1 - g2)^2 / n_d, sigma sqrt(2) (1 - g2) |g| / sqrt(n_d),
    # phase sigma sqrt(1 - g2) / (|g| sqrt(2 n_d)) rad; values worked by hand for g2 = 0.64, n_d = 100.
    assert float(coherence_bias(0.64, 100)) == pytest.approx(0.36**2 / 100)
    assert float(coherence_sigma(0.64, 100)) == pytest.approx(np.sqrt(2) * 0.36 * 0.8 / 10)
    assert float(phase_sigma_deg(0.64, 100)) == pytest.approx(np.degrees(0.6 / (0.8 * np.sqrt(200))))


def test_the_invented_example_is_valid_and_labelled():
    text = EXAMPLE.read_text()
    assert "INVENTED" in text.splitlines()[0]
    profile = read_any_profile(EXAMPLE)
    assert profile.channel_names == ("x", "y", "z") and profile.check_psd() is None


def test_run_writes_a_verified_multichannel_folder(tmp_path):
    folder = tmp_path / "run"
    status, out, err = _quiet_main(["run", EXAMPLE, "-o", folder, "--duration", 60, "--seed", 2, "--format", "npy",
                                    "--json"])
    assert status == 0, err
    data = json.loads(out)
    assert data["pass"] and {"drive.npy", "drive.npy.json", "profile.toml", "verify.json", "matrix.png"} <= set(
        data["files"])
    assert np.load(folder / "drive.npy").shape == (60 * 5120, 3)  # 2.56 x 2000 Hz = 5120 Hz default rate
    # profile.toml is self-contained and reads back to the same channels and pairs
    again = read_any_profile(folder / "profile.toml")
    original = read_any_profile(EXAMPLE)
    f = np.geomspace(20, 2000, 50)
    np.testing.assert_allclose(again.matrix(f), original.matrix(f), rtol=1e-12)


def test_docstring_examples_of_the_multichannel_modules_run():
    import doctest
    import importlib

    for name in ("vibsynth.profile.multichannel", "vibsynth.generate.channels", "vibsynth.analysis.channels",
                 "vibsynth.channel_jobs"):
        result = doctest.testmod(importlib.import_module(name))
        assert result.attempted > 0 and result.failed == 0, name


def test_analysis_never_imports_the_generator():
    import subprocess
    import sys

    code = ("import sys, vibsynth.analysis.channels, vibsynth.channel_jobs; "
            "print(any(m.startswith(('vibsynth.generate', 'vibsynth.transforms')) for m in sys.modules))")
    assert subprocess.run([sys.executable, "-c", code], capture_output=True, text=True).stdout.strip() == "False"


def test_channels_with_different_bands(tmp_path):
    """Channel b stops at 500 Hz: above it only a has power; the pair is judged where both have a band."""
    a = AsdProfile([20.0, 2000.0], [0.01, 0.01])
    b = AsdProfile([10.0, 500.0], [0.02, 0.02])
    one = np.array([1.0])
    profile = MultiChannelProfile(("a", "b"), (a, b), (ChannelPair(0, 1, one, 0.6 * one, np.array([-45.0])),))
    x = Synthesizer(make_channel_plan(profile, 200.0, RATE, memory_budget_bytes=1.0), seed=1).samples()
    f, asd_b = scipy.signal.welch(x[:, 1], fs=RATE, nperseg=2048)
    above = f > 560.0
    assert np.max(asd_b[above]) < 1e-6 * 0.02  # no power of b above its band (scipy.signal.welch)
    both = (f > 25.0) & (f < 490.0)
    _, coherence = scipy.signal.coherence(x[:, 0], x[:, 1], fs=RATE, nperseg=2048)
    _, cross = scipy.signal.csd(x[:, 0], x[:, 1], fs=RATE, nperseg=2048)
    # acceptance figures of this feature (common practice, no source)
    assert np.mean(np.abs(coherence[both] - 0.6) <= 0.05) >= 0.95
    assert np.mean(np.abs(np.angle(cross[both], deg=True) + 45.0) <= 5.0) >= 0.95
    for column, channel in enumerate((a, b)):
        assert np.sqrt(np.mean(x[:, column] ** 2)) == pytest.approx(channel.grms, rel=0.01)


def test_info_json_reports_the_check(tmp_path):
    path = tmp_path / "three.toml"
    path.write_text(THREE)
    status, out, _ = _quiet_main(["info", path, "--json"])
    data = json.loads(out)
    assert status == 0 and data["positive_semidefinite"] is True
    assert [c["name"] for c in data["channels"]] == ["x", "y", "z"]
    # per-channel g RMS: the closed form of each channel's own profile
    assert data["channels"][0]["grms"] == pytest.approx(read_profile("bench-flat").grms)


def test_factors_match_numpy_cholesky_and_reproduce_semidefinite_matrices():
    from vibsynth.profile.multichannel import factor_matrices

    rng = np.random.default_rng(12)
    a = rng.standard_normal((500, 4, 4)) + 1j * rng.standard_normal((500, 4, 4))
    definite = a @ np.conj(np.swapaxes(a, 1, 2))
    factors, eigen_lines = factor_matrices(definite)
    assert eigen_lines == 0
    np.testing.assert_allclose(factors, np.linalg.cholesky(definite), rtol=1e-10, atol=1e-12)  # numpy (LAPACK)
    rank_two = a[:, :, :2] @ np.conj(np.swapaxes(a[:, :, :2], 1, 2))  # semidefinite, rank 2
    factors, eigen_lines = factor_matrices(rank_two)
    assert eigen_lines == 500
    np.testing.assert_allclose(factors @ np.conj(np.swapaxes(factors, 1, 2)), rank_two, atol=1e-10)


def test_a_channel_beyond_a_given_full_scale_is_refused_naming_the_sample(tmp_path):
    path = tmp_path / "three.toml"
    path.write_text(THREE)
    drive = tmp_path / "d.wav"
    status, _, err = _quiet_main(["generate", path, "-o", drive, "--duration", 4, "--rate", RATE, "--seed", 6,
                                  "--full-scale", 5, "--subtype", "pcm16"])
    expected = Synthesizer(make_channel_plan(parse_any_toml(THREE), 4.0, RATE), seed=6).samples()
    first = int(np.flatnonzero(np.any(np.abs(expected) > 5 * (2**15 - 1) / 2**15, axis=1))[0])
    assert status == 2 and f"sample {first} is" in err and not drive.exists()
