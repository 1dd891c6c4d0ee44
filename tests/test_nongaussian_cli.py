"""`vibsynth generate --kurtosis/--skewness/--clip` and `vibsynth verify` on the files they write.

External references used below:
- scipy.stats.kurtosis (fisher=False) and scipy.stats.skew on the written samples;
- scipy.signal.welch for the written record's ASD;
- the closed-form g RMS of the (invented) profile (AsdProfile);
- the issue's acceptance values (kurtosis within 5 %, crest factor at most c + 1 %).

The profiles are invented breakpoint tables.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import scipy.signal
import scipy.stats

from vibsynth.cli.main import main
from vibsynth.io.drivefile import open_drive, sidecar_path
from vibsynth.profile.files import read_profile

GENTLE_CSV = "frequency_hz,asd_g2_per_hz\n20,0.01\n40,0.04\n600,0.04\n1000,0.01\n"  # invented
STEEP_CSV = "frequency_hz,asd_g2_per_hz\n20,0.001\n40,0.04\n600,0.04\n1000,0.001\n"  # invented, 16 dB skirts
RATE = 4096


@pytest.fixture
def gentle(tmp_path):
    path = tmp_path / "gentle.csv"
    path.write_text(GENTLE_CSV)
    return path


def _generate(capsys, *argv):
    status = main(["generate", *map(str, argv)])
    out, err = capsys.readouterr()
    return status, out, err


def _verify_json(capsys, *argv):
    status = main(["verify", *map(str, argv), "--json"])
    out, err = capsys.readouterr()
    return status, json.loads(out), err


def test_kurtosis_drive_meets_its_asd_and_kurtosis_and_verify_checks_both(tmp_path, gentle, capsys):
    drive = tmp_path / "k6.flac"
    status, out, err = _generate(capsys, gentle, "-o", drive, "--duration", 300, "--rate", RATE, "--seed", 5,
                                 "--kurtosis", 6, "--memory-budget", 1)
    assert status == 0, err
    assert "kurtosis 6" in out and "pre-compensated" in out
    assert "CAUTION" in err
    side = json.loads(sidecar_path(drive).read_text())
    assert side["options"]["kurtosis"] == 6.0 and side["options"]["clip"] is None
    assert side["transform"]["family"] == "hermite" and side["transform"]["c3"] == 0.0
    assert side["transform"]["requested_kurtosis"] == pytest.approx(6.0)
    comp = side["compensation"]
    for key in ("iterations", "residual_relative", "achievable", "description", "worst_in_band_deviation_db",
                "spill_highpass", "grid_resolution_hz"):
        assert key in comp, key
    assert comp["achievable"] is True
    x = open_drive(drive).read()
    profile = read_profile(gentle)
    # the samples in the file: kurtosis within 5 % (scipy.stats), RMS within 2 % of the closed-form g RMS
    assert scipy.stats.kurtosis(x, fisher=False) == pytest.approx(6.0, rel=0.05)
    assert np.sqrt(np.mean(x**2)) == pytest.approx(profile.grms, rel=0.02)
    f, p = scipy.signal.welch(x, fs=RATE, nperseg=2048)
    inside = (f >= 24) & (f <= 996)
    assert np.max(np.abs(10 * np.log10(p[inside] / profile.evaluate(f[inside])))) < 1.0
    # verify judges kurtosis against the sidecar and surfaces the predicted residual
    status, report, err = _verify_json(capsys, drive, "--tolerance", 1.5)
    assert status == 0, report["reasons"]
    assert "kurtosis" in report["rule"]
    assert report["statistics"]["kurtosis"] == pytest.approx(6.0, rel=0.05)
    assert report["compensation"]["achievable"] is True
    assert report["compensation"]["worst_in_band_deviation_db"] == pytest.approx(comp["worst_in_band_deviation_db"])
    # the text report shows it too
    assert main(["verify", str(drive)]) == 0
    assert "compensation" in capsys.readouterr().out


def test_verify_fails_a_drive_whose_kurtosis_is_not_what_the_sidecar_asked(tmp_path, gentle, capsys):
    drive = tmp_path / "k4.npy"
    status, _, err = _generate(capsys, gentle, "-o", drive, "--duration", 120, "--rate", RATE, "--seed", 1,
                               "--kurtosis", 4)
    assert status == 0, err
    side_path = sidecar_path(drive)
    side = json.loads(side_path.read_text())
    side["options"]["kurtosis"] = 6.0  # as if the file had been asked for 6
    side_path.write_text(json.dumps(side))
    status, report, _ = _verify_json(capsys, drive)
    assert status == 1 and "kurtosis" in report["failed"]


def test_skewed_drive_is_judged_on_skewness(tmp_path, gentle, capsys):
    drive = tmp_path / "skew.npy"
    status, _, err = _generate(capsys, gentle, "-o", drive, "--duration", 200, "--rate", RATE, "--seed", 2,
                               "--skewness", 0.5, "--kurtosis", 4)
    assert status == 0, err
    x = np.load(drive)
    assert scipy.stats.skew(x) == pytest.approx(0.5, abs=0.05)
    assert scipy.stats.kurtosis(x, fisher=False) == pytest.approx(4.0, rel=0.05)
    status, report, _ = _verify_json(capsys, drive)
    assert status == 0, report["reasons"]
    assert "skewness" in report["rule"] and "kurtosis" in report["rule"]


@pytest.mark.parametrize("crest", [3.0, 2.5])
def test_clip_holds_every_sample_within_c_times_the_target_rms(tmp_path, gentle, capsys, crest):
    drive = tmp_path / "clip.flac"
    status, out, err = _generate(capsys, gentle, "-o", drive, "--duration", 120, "--rate", RATE, "--seed", 3,
                                 "--clip", crest, "--ramp", 1)
    assert status == 0, err
    assert f"within {crest:g} x RMS" in out
    profile = read_profile(gentle)
    side = json.loads(sidecar_path(drive).read_text())
    assert side["transform"]["peak_limit_g"] == pytest.approx(crest * profile.grms)
    x = open_drive(drive).read()
    # 24-bit FLAC: one count of full scale is the rounding of a sample
    assert np.max(np.abs(x)) <= crest * profile.grms + side["scale"] / 2**23
    status, report, _ = _verify_json(capsys, drive)
    assert status == 0, report["reasons"]
    cf = report["statistics"]["crest_factor"]
    assert crest * 0.99 <= cf <= crest * 1.01  # issue acceptance: at most c (+1 %), not far below


def test_out_of_range_targets_exit_2_with_the_reachable_range(tmp_path, gentle, capsys):
    cases = [
        (["--kurtosis", 60], "3 to 46.2"),
        (["--kurtosis", 1.1], "1.291 to 3"),
        (["--skewness", 3], "reachable kurtosis"),
        (["--clip", 0.9], "above 1 and at most 10"),
        (["--clip", 3, "--kurtosis", 5], "cannot be combined"),
        (["--kurtosis", 5, "--quantities", "accel,velocity"], "velocity/displacement"),
    ]
    for options, text in cases:
        drive = tmp_path / "x.csv"
        status, _, err = _generate(capsys, gentle, "-o", drive, "--duration", 10, "--rate", RATE, *options)
        assert status == 2, options
        lines = err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("vibsynth: error:") and text in lines[0], err
        assert not drive.exists()


def test_unreachable_target_warns_in_one_line_and_is_recorded(tmp_path, capsys):
    steep = tmp_path / "steep.csv"
    steep.write_text(STEEP_CSV)
    drive = tmp_path / "k8.npy"
    status, _, err = _generate(capsys, steep, "-o", drive, "--duration", 60, "--rate", RATE, "--seed", 4,
                               "--kurtosis", 8)
    assert status == 0, err
    warnings = [line for line in err.splitlines() if "cannot be fully compensated" in line]
    assert len(warnings) == 1 and warnings[0].startswith("vibsynth: warning:")
    side = json.loads(sidecar_path(drive).read_text())
    assert side["compensation"]["achievable"] is False
    assert any("cannot be fully compensated" in w for w in side["warnings"])
    status, report, _ = _verify_json(capsys, drive)
    assert report["compensation"]["achievable"] is False


def test_same_seed_same_non_gaussian_samples(tmp_path, gentle, capsys):
    args = ["--duration", 40, "--rate", RATE, "--seed", 9, "--kurtosis", 5, "--memory-budget", 1]
    _generate(capsys, gentle, "-o", tmp_path / "a.npy", *args)
    _generate(capsys, gentle, "-o", tmp_path / "b.npy", *args)
    assert np.array_equal(np.load(tmp_path / "a.npy"), np.load(tmp_path / "b.npy"))


def test_gaussian_drive_sidecar_has_no_transform(tmp_path, gentle, capsys):
    drive = tmp_path / "g.npy"
    status, _, err = _generate(capsys, gentle, "-o", drive, "--duration", 10, "--rate", RATE, "--seed", 1)
    assert status == 0, err
    side = json.loads(sidecar_path(drive).read_text())
    assert side["transform"] is None and side["options"]["kurtosis"] is None
    status, report, _ = _verify_json(capsys, drive)
    assert "compensation" not in report and "kurtosis" not in report["rule"]
