"""The durability commands: JSON keys, exit codes, files written, one-line errors, lazy imports."""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import vibsynth
from vibsynth.cli.main import main
from vibsynth.durability.sdof import sdof_response

RIG = Path(__file__).resolve().parents[1] / "docs" / "example-rig.toml"


def _json(capsys, argv):
    status = main(argv)
    out = capsys.readouterr().out
    return status, json.loads(out)


def test_response_json_keys_and_values(capsys):
    status, data = _json(capsys, ["response", "bench-flat", "--fn", "200", "--q", "10", "--duration", "60", "--json"])
    assert status == 0
    for key in ("fn_hz", "q", "rms_miles_g", "rms_exact_g", "relative_displacement_rms_m", "upcrossing_rate_hz",
                "expected_peak_g"):
        assert key in data
    reference = sdof_response(vibsynth.read_profile("bench-flat"), 200.0, 10.0, duration_s=60.0)
    assert data["rms_exact_g"] == pytest.approx(reference.rms_exact_g)
    # Miles (1954): sqrt(pi/2 x 200 Hz x 10 x 0.01 g^2/Hz) = 5.605 g
    assert data["rms_miles_g"] == pytest.approx(math.sqrt(math.pi / 2 * 200 * 10 * 0.01))
    assert "flat ASD" in data["why_miles_differs"]


def test_response_text_explains_the_difference(capsys):
    assert main(["response", "railyard-cabinet", "--fn", "900"]) == 0
    out = capsys.readouterr().out
    assert "Miles" in out and "exact" in out and "dB/octave" in out


def test_severity_json_with_a_drive_and_report(tmp_path, capsys):
    profile = vibsynth.read_profile("bench-flat")
    drive = tmp_path / "drive.npy"
    # 20480 Hz: the drive's FDS is given up to 0.1 x rate = 2048 Hz, the whole band
    np.save(drive, vibsynth.generate_samples(profile, 30.0, 20480.0, seed=1))
    status, data = _json(capsys, ["severity", "bench-flat", "--duration", "600", "--drive", str(drive),
                                  "--rate", "20480", "--points", "8", "--json", "--report", str(tmp_path / "rep")])
    assert status == 0
    for key in ("fn_hz", "fds_narrowband", "fds_dirlik", "ers_g", "fds_drive", "ers_drive_g"):
        assert len(data[key]) == 8, key
    ratio = np.asarray(data["fds_drive_to_narrowband"])
    assert np.all((ratio > 0.5) & (ratio < 1.5))  # a 30 s drive: same order as the specification
    assert data["drive_duration_s"] == pytest.approx(30.0)
    for name in ("fds.png", "ers.png"):
        assert (tmp_path / "rep" / name).stat().st_size > 10_000


def test_severity_without_drive(capsys):
    status, data = _json(capsys, ["severity", "railyard-cabinet", "--duration", "3600", "--fn-min", "10",
                                  "--fn-max", "500", "--points", "5", "--b", "5", "--q", "20", "--json"])
    assert status == 0 and data["fn_hz"][0] == 10.0 and data["fn_hz"][-1] == 500.0
    assert data["b"] == 5.0 and data["q"] == 20.0 and "fds_drive" not in data


def test_equivalent_writes_a_profile_that_reads_back(tmp_path, capsys):
    out = tmp_path / "test.toml"
    status, data = _json(capsys, ["equivalent", "--env", "railyard-cabinet", "36000", "--env", "harbour-crane-cab",
                                  "18000", "--test-duration", "3600", "-o", str(out), "--points", "6",
                                  "--grid-points", "20", "--json"])
    assert status == 0
    for key in ("grms", "fds_ratio_min", "ers_ratio_max", "profile_path"):
        assert key in data
    assert data["fds_ratio_min"] == pytest.approx(1.0, abs=1e-9)
    assert Path(data["profile_path"]) == out
    written = vibsynth.read_profile(str(out))
    assert written.grms == pytest.approx(data["grms"], rel=1e-9)
    assert len(written.frequencies_hz) <= 6
    assert "linear" in data["caution"]


def test_fit_exit_codes_and_caution(tmp_path, capsys):
    status, data = _json(capsys, ["fit", "bench-flat", "--shaker", str(RIG), "--payload-kg", "5", "--json"])
    assert status == 0 and data["fits"] is True
    # (12 kg + 5 kg) x g RMS x g0 (Newton's second law)
    assert data["force_rms_n"] == pytest.approx(17.0 * vibsynth.read_profile("bench-flat").grms * 9.80665)
    assert "force_margin_percent" in data
    status = main(["fit", "bench-flat", "--shaker", str(RIG), "--payload-kg", "500"])
    captured = capsys.readouterr()
    assert status == 1 and "DOES NOT FIT" in captured.out and "CAUTION" in captured.err


def test_fit_with_a_kurtosis_6_drive_reports_the_real_stroke(tmp_path, capsys):
    profile = vibsynth.read_profile("bench-flat")
    drive = tmp_path / "k6.npy"
    np.save(drive, vibsynth.generate_samples(profile, 20.0, 8192.0, seed=4, kurtosis=6.0))
    status, data = _json(capsys, ["fit", "bench-flat", "--shaker", str(RIG), "--drive", str(drive), "--rate", "8192",
                                  "--json"])
    # its largest acceleration (about 16 x RMS here) exceeds the rig's 60 g although 3 sigma (11.5 g) fits
    rows = {(d["quantity"], d["basis"].split(",")[0]): d for d in data["demands"]}
    assert rows[("acceleration_peak", "profile")]["fits"] and not rows[("acceleration_peak", "drive")]["fits"]
    assert status == 1 and data["fits"] is False
    assert any("above the profile's 3-sigma figure" in note for note in data["notes"])


@pytest.mark.parametrize("argv, needle", [
    (["response", "no-such-profile", "--fn", "100"], "no-such-profile"),
    (["response", "bench-flat", "--fn", "-3"], "--fn"),
    (["severity", "bench-flat", "--duration", "10", "--fn-min", "500", "--fn-max", "100"], "--fn-max"),
    (["severity", "bench-flat", "--duration", "10", "--drive", "missing.npy"], "missing.npy"),
    (["fit", "bench-flat", "--shaker", "missing-rig.toml"], "missing-rig.toml"),
    (["equivalent", "--env", "bench-flat", "60", "--test-duration", "10", "-o", "x.txt"], ".toml or .csv"),
])
def test_bad_input_is_one_line_and_exit_2(argv, needle, capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(argv) == 2
    err = capsys.readouterr().err.strip()
    assert needle in err and len(err.splitlines()) == 1
    assert not list(tmp_path.iterdir())


def test_command_modules_do_not_load_numpy_at_import():
    code = ("import sys; import vibsynth.cli.response_cmd, vibsynth.cli.severity_cmd, vibsynth.cli.equivalent_cmd, "
            "vibsynth.cli.fit_cmd; print(sorted(m for m in sys.modules if m.split('.')[0] in ('numpy', 'scipy')))")
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stderr
    assert result.stdout.strip() == "[]"


def test_severity_leaves_out_natural_frequencies_too_high_for_the_drive_rate(tmp_path, capsys):
    profile = vibsynth.read_profile("bench-flat")
    drive = tmp_path / "slow.npy"
    np.save(drive, vibsynth.generate_samples(profile, 20.0, 5120.0, seed=2))
    status = main(["severity", "bench-flat", "--duration", "60", "--drive", str(drive), "--rate", "5120",
                   "--points", "6", "--json"])
    captured = capsys.readouterr()
    data = json.loads(captured.out)
    assert status == 0
    # 0.1 x 5120 Hz = 512 Hz (above it the sampled peaks under-estimate the damage): the 796 and 2000 Hz
    # points of 20-2000 Hz in 6 log steps have no drive value (null), the others have one
    assert data["fds_drive"][-2:] == [None, None] and all(v is not None for v in data["fds_drive"][:-2])
    assert "0.1 x its sample rate" in captured.err and data["warnings"]
