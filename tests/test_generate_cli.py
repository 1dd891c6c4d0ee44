"""`vibsynth generate`: files, sidecar, cautions, refusals, memory and kill safety.

References used below:
- scipy.signal.welch (reference estimator) for the written record's spectrum.
- Closed-form g RMS / velocity / displacement of the (invented) profile via AsdProfile.
- Peak resident memory from resource.getrusage (POSIX getrusage, ru_maxrss in KiB on Linux).

The profile is an invented breakpoint table.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest
import scipy.signal
import soundfile

from vibsynth.cli.common import DRIVE_CAUTION
from vibsynth.cli.main import main
from vibsynth.io.drivefile import open_drive, sidecar_path
from vibsynth.profile.files import read_profile

PROFILE_CSV = "frequency_hz,asd_g2_per_hz\n20,0.01\n80,0.04\n350,0.04\n2000,0.005\n"  # invented bracket test
REPO = Path(__file__).resolve().parents[1]


@pytest.fixture
def profile_path(tmp_path):
    path = tmp_path / "bracket.csv"
    path.write_text(PROFILE_CSV)
    return path


def _run(capsys, *argv):
    status = main(["generate", *map(str, argv)])
    out, err = capsys.readouterr()
    return status, out, err


def _files(folder):
    return sorted(p.name for p in Path(folder).iterdir())


@pytest.mark.parametrize("suffix", ["wav", "flac", "csv", "npy"])
def test_generate_writes_file_sidecar_summary_and_caution(tmp_path, profile_path, capsys, suffix):
    out_path = tmp_path / f"drive.{suffix}"
    status, out, err = _run(capsys, profile_path, "-o", out_path, "--duration", 20, "--rate", 5120, "--seed", 4)
    assert status == 0, err
    assert DRIVE_CAUTION in err
    assert "wrote" in out and "g RMS" in out and "mm peak-to-peak" in out and "m/s RMS" in out
    side = json.loads(sidecar_path(out_path).read_text())
    for key in ("unit", "scale", "rate", "seed", "samples", "duration_s", "format", "subtype", "options", "profile",
                "tool", "ramp_in_s", "ramp_out_s", "plan", "schema_version"):
        assert key in side, key
    assert "mode" in side["plan"] and "frame_length_samples" in side["plan"] and "amplitude" in side["options"]
    assert side["unit"] == "g" and side["rate"] == 5120 and side["seed"] == 4 and side["samples"] == 20 * 5120
    assert side["tool"]["name"] == "vibsynth"
    profile = read_profile(profile_path)
    drive = open_drive(out_path)
    record = drive.read()
    # Overall g RMS against the closed-form value (AsdProfile.grms).
    assert np.sqrt(np.mean(record**2)) == pytest.approx(profile.grms, rel=0.01)
    if suffix in ("wav", "flac"):
        assert np.max(np.abs(record)) <= side["scale"]  # full scale from the record's own peak
        assert side["scale"] == pytest.approx(side["peak_g"] * 1.001, rel=1e-12)


def test_same_seed_same_samples_and_unseeded_run_can_be_remade(tmp_path, profile_path, capsys):
    args = ["--duration", 10, "--rate", 5120]
    _run(capsys, profile_path, "-o", tmp_path / "a.npy", *args, "--seed", 9)
    _run(capsys, profile_path, "-o", tmp_path / "b.npy", *args, "--seed", 9)
    assert np.array_equal(np.load(tmp_path / "a.npy"), np.load(tmp_path / "b.npy"))
    status, out, _ = _run(capsys, profile_path, "-o", tmp_path / "c.npy", *args)
    assert status == 0
    seed = json.loads(sidecar_path(tmp_path / "c.npy").read_text())["seed"]
    _run(capsys, profile_path, "-o", tmp_path / "d.npy", *args, "--seed", seed)
    assert np.array_equal(np.load(tmp_path / "c.npy"), np.load(tmp_path / "d.npy"))
    assert not np.array_equal(np.load(tmp_path / "a.npy"), np.load(tmp_path / "c.npy"))


def test_csv_quantities_are_consistent_columns(tmp_path, profile_path, capsys):
    path = tmp_path / "base.csv"
    status, _, err = _run(capsys, profile_path, "-o", path, "--duration", 30, "--rate", 5120, "--seed", 2,
                          "--quantities", "accel,velocity,displacement")
    assert status == 0, err
    assert path.read_text().splitlines()[0] == "time_s,acceleration_g,velocity_m_s,displacement_m"
    drive = open_drive(path)
    profile = read_profile(profile_path)
    velocity = drive.read(quantity="velocity")
    displacement = drive.read(quantity="displacement")
    # Closed-form velocity / displacement RMS (Bendat & Piersol) within 2 %.
    assert np.sqrt(np.mean(velocity**2)) == pytest.approx(profile.velocity_rms_m_s, rel=0.02)
    assert np.sqrt(np.mean(displacement**2)) == pytest.approx(profile.displacement_rms_m, rel=0.02)
    side = json.loads(sidecar_path(path).read_text())
    assert side["columns"] == ["time_s", "acceleration_g", "velocity_m_s", "displacement_m"]
    assert side["plan"]["mode"] == "periodic"


def test_loop_and_ramp_are_recorded(tmp_path, profile_path, capsys):
    status, _, _ = _run(capsys, profile_path, "-o", tmp_path / "loop.flac", "--duration", 8, "--rate", 5120,
                        "--seed", 1, "--loop")
    assert status == 0
    side = json.loads(sidecar_path(tmp_path / "loop.flac").read_text())
    assert side["options"]["loop"] is True and side["plan"]["mode"] == "periodic"
    assert side["plan"]["frame_length_samples"] == 8 * 5120
    status, _, _ = _run(capsys, profile_path, "-o", tmp_path / "ramp.npy", "--duration", 8, "--rate", 5120,
                        "--seed", 1, "--ramp", 1.5)
    assert status == 0
    drive = open_drive(tmp_path / "ramp.npy")
    assert drive.ramp_in_s == 1.5 and drive.ramp_out_s == 1.5
    record = drive.read()
    assert record[0] == 0.0 and record[-1] == 0.0
    assert drive.steady_range == (int(1.5 * 5120), 8 * 5120 - int(1.5 * 5120))


def test_quiet_prints_no_summary_but_keeps_the_caution(tmp_path, profile_path, capsys):
    status, out, err = _run(capsys, profile_path, "-o", tmp_path / "q.wav", "--duration", 5, "--rate", 5120,
                            "--seed", 1, "--quiet")
    assert status == 0 and out == ""
    # stderr is not a terminal here: no progress bar, only the caution line.
    assert err.strip() == DRIVE_CAUTION


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--rate", 3000], "twice the profile's top frequency"),
        (["--rate", 5120, "--duration", 0.2], "at least 0.4 s"),
        (["--rate", 5120, "--stroke-limit", 0.1], "beyond the 0.1 mm stroke limit"),
        (["--rate", 5120, "--velocity-limit", 0.01], "velocity limit"),
        (["--rate", 5120, "--quantities", "accel,velocity"], ".csv or .npy"),
        (["--rate", 5120, "--subtype", "float", "-o", "{tmp}/x.flac"], "subtype"),
        (["--rate", 5120, "--ramp", 6], "ramp"),
        (["--rate", 5120, "--full-scale", 1.0], "never clipped"),
        (["--rate", 5120, "--grms", 2, "--level-db", -3], "not both"),
    ],
)
def test_bad_input_is_one_line_exit_2_and_no_files(tmp_path, profile_path, capsys, extra, message):
    args = [profile_path, "-o", tmp_path / "bad.wav", "--duration", 10, "--seed", 1]
    extra = [str(item).replace("{tmp}", str(tmp_path)) for item in extra]
    status, out, err = _run(capsys, *args, *extra)
    assert status == 2
    assert message in err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert _files(tmp_path) == ["bracket.csv"]


def test_thin_rate_margin_warns(tmp_path, profile_path, capsys):
    status, _, err = _run(capsys, profile_path, "-o", tmp_path / "w.npy", "--duration", 5, "--rate", 4500, "--seed", 1)
    assert status == 0
    assert "warning" in err and "2.56" in err
    assert json.loads(sidecar_path(tmp_path / "w.npy").read_text())["warnings"]


def test_written_drive_matches_target_through_scipy_welch(tmp_path, profile_path, capsys):
    path = tmp_path / "long.flac"
    status, _, _ = _run(capsys, profile_path, "-o", path, "--duration", 400, "--rate", 5120, "--seed", 3,
                        "--memory-budget", 8)
    assert status == 0
    assert json.loads(sidecar_path(path).read_text())["plan"]["mode"] == "overlap-add"
    record = open_drive(path).read()
    profile = read_profile(profile_path)
    frequencies, estimate = scipy.signal.welch(record, 5120, nperseg=4096)  # reference estimator
    band = (frequencies >= 20) & (frequencies <= 2000)
    error_db = 10 * np.log10(estimate[band] / profile.evaluate(frequencies[band]))
    assert np.mean(np.abs(error_db) <= 1.0) >= 0.95


# ------------------------------------------------------------ subprocesses
def _child(script: str, *args, **kwargs):
    env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    return subprocess.Popen([sys.executable, "-c", textwrap.dedent(script), *map(str, args)], env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, **kwargs)


# Linux keeps the peak RSS of the image a process was exec'ed from (here: this test process) in
# ru_maxrss; a small launcher in between makes the measuring child start from a small image.
_LAUNCH = "import subprocess, sys; sys.exit(subprocess.call(sys.argv[1:]))"


def _measured_child(script: str, *args):
    return _child(_LAUNCH, sys.executable, "-c", textwrap.dedent(script), *args)


_MEASURE = """
    import resource, sys
    from vibsynth.cli.main import main
    status = main(sys.argv[1:])
    print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)  # KiB on Linux
    sys.exit(status)
"""


@pytest.mark.slow
def test_streaming_memory_does_not_grow_with_duration(tmp_path, profile_path):
    peaks = {}
    # 5.1e6 and 3.6e7 samples at 51.2 kHz (the long record alone is 275 MB of float64); both long enough to be
    # made in stretches on the worker threads, whose few fixed buffers (24 MB on 2 threads) do not grow with duration
    for seconds in (100, 700):
        out = tmp_path / f"m{seconds}.npy"
        child = _measured_child(_MEASURE, "generate", profile_path, "-o", out, "--duration", seconds, "--rate", 51200,
                       "--seed", 1, "--quiet", "--memory-budget", 4)
        stdout, stderr = child.communicate(timeout=300)
        assert child.returncode == 0, stderr
        peaks[seconds] = int(stdout.split()[-1]) * 1024
        assert out.stat().st_size > seconds * 51200 * 8
        out.unlink()
    assert peaks[700] < 256 * 2**20
    assert peaks[700] - peaks[100] < 24 * 2**20


def _wait_for_partial(folder: Path, child, timeout_s: float = 60.0) -> Path:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        partial = [p for p in folder.iterdir() if p.name.endswith(".partial")]
        if partial and partial[0].stat().st_size > 100_000:
            return partial[0]
        if child.poll() is not None:
            raise AssertionError(f"child ended early: {child.communicate()}")
        time.sleep(0.05)
    child.kill()
    raise AssertionError("no temporary file appeared")


@pytest.mark.parametrize("existing", [False, True], ids=["new", "existing"])
def test_killed_run_leaves_destination_as_it_was(tmp_path, profile_path, existing):
    destination = tmp_path / "drive.csv"
    if existing:
        destination.write_text("old drive\n")
        sidecar_path(destination).write_text("{}\n")
    child = _child("import sys; from vibsynth.cli.main import main; sys.exit(main(sys.argv[1:]))", "generate", profile_path,
                   "-o", destination, "--duration", 3000, "--rate", 5120, "--seed", 1, "--quiet")
    _wait_for_partial(tmp_path, child)
    child.send_signal(signal.SIGKILL)
    child.communicate(timeout=30)
    if existing:
        assert destination.read_text() == "old drive\n"
        assert sidecar_path(destination).read_text() == "{}\n"
    else:
        assert not destination.exists() and not sidecar_path(destination).exists()


def test_terminated_run_removes_its_temporary_files(tmp_path, profile_path):
    destination = tmp_path / "drive.csv"
    child = _child("import sys; from vibsynth.cli.main import main; sys.exit(main(sys.argv[1:]))", "generate", profile_path,
                   "-o", destination, "--duration", 3000, "--rate", 5120, "--seed", 1, "--quiet")
    _wait_for_partial(tmp_path, child)
    child.send_signal(signal.SIGTERM)
    child.communicate(timeout=30)
    assert child.returncode != 0
    assert _files(tmp_path) == ["bracket.csv"]


def test_progress_bar_only_on_a_terminal(tmp_path, profile_path, capsys, monkeypatch):
    import vibsynth.cli.generate_cmd as generate_cmd

    args = [profile_path, "-o", tmp_path / "p.npy", "--duration", 420, "--rate", 5120, "--seed", 1,
            "--memory-budget", 8]  # 2.15e6 samples: long enough for a bar
    status, _, err = _run(capsys, *args)
    assert status == 0 and "generating" not in err  # stderr is not a terminal under pytest
    monkeypatch.setattr(generate_cmd, "is_interactive_stderr", lambda: True)
    status, _, err = _run(capsys, *args)
    assert status == 0 and "generating" in err
    status, _, err = _run(capsys, *args, "--quiet")
    assert status == 0 and "generating" not in err


def test_given_full_scale_is_recorded_exactly(tmp_path, profile_path, capsys):
    path = tmp_path / "fs.wav"
    status, _, _ = _run(capsys, profile_path, "-o", path, "--duration", 5, "--rate", 5120, "--seed", 1,
                        "--subtype", "pcm16", "--full-scale", 50)
    assert status == 0
    side = json.loads(sidecar_path(path).read_text())
    assert side["scale"] == 50.0 and side["full_scale_from"] == "given" and side["subtype"] == "pcm16"
    raw, _ = soundfile.read(path, dtype="float64")
    np.testing.assert_array_equal(raw * 50.0, open_drive(path).read())
    assert np.max(np.abs(raw)) < 1.0
