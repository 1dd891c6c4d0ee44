"""`vibsynth run`: the whole job in one command."""

import json

import numpy as np
import pytest
from scipy import signal

from vibsynth.cli.main import main
from vibsynth.io.drivefile import open_drive
from vibsynth.profile.files import read_profile

EXPECTED_FILES = {
    "drive.flac", "drive.flac.json", "profile.toml", "report.json", "report.pdf",
    "asd.png", "amplitude.png", "excerpt.png", "rms.png",
}


def test_run_with_no_argument_in_an_empty_folder(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    status = main(["run"])
    captured = capsys.readouterr()
    assert status == 0, captured.err
    folder = tmp_path / "vibsynth-run-parcel-conveyor"
    assert {p.name for p in folder.iterdir()} == EXPECTED_FILES
    assert "CAUTION" in captured.err and "abort limits" in captured.err
    report = json.loads((folder / "report.json").read_text())
    assert report["verification"]["pass"] is True
    assert (folder / "asd.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert (folder / "report.pdf").read_bytes()[:5] == b"%PDF-"
    # Independent check of the drive against the target with the reference estimator
    # (scipy.signal.welch): g RMS of the record within 1 % of the profile's closed-form value.
    drive = open_drive(folder / "drive.flac")
    x = drive.read()
    target = read_profile("parcel-conveyor")
    assert np.sqrt(np.mean(x**2)) == pytest.approx(target.grms, rel=0.01)
    f, pxx = signal.welch(x, fs=drive.rate_hz, nperseg=2048)
    band = (f > 10) & (f < 450)
    deviation = 10 * np.log10(pxx[band] / target.evaluate(f[band]))
    assert np.max(np.abs(deviation)) < 1.5


def test_run_failing_verification_exits_1(tmp_path, capsys):
    # a 0.5 dB band cannot hold a Rayleigh-amplitude record at modest dof: the verdict must say FAIL
    status = main(["run", "bench-flat", "-o", str(tmp_path / "out"), "--duration", "20", "--seed", "1",
                   "--amplitude", "rayleigh", "--tolerance", "0.5", "--dof", "40"])
    captured = capsys.readouterr()
    assert status == 1
    assert "FAIL (asd)" in captured.out
    assert "did NOT pass" in captured.err


def test_run_bad_profile_leaves_no_folder(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    status = main(["run", "no-such-preset"])
    assert status == 2
    assert len(capsys.readouterr().err.strip().splitlines()) == 1
    assert list(tmp_path.iterdir()) == []
    status = main(["run", "bench-flat", "--rate", "3000"])  # below 2 x 2000 Hz
    assert status == 2
    assert list(tmp_path.iterdir()) == []
