"""Crash safety: kill -9 (SIGKILL) at random moments during `generate` and `verify --report`.

A killed run cannot clean up, so what it leaves is what the file system holds at that
instant.  The writers only ever write under hidden temporary names and publish with an
atomic rename (POSIX rename(2): the destination is either the old file or the new one,
never a mixture), so after any kill:

- the drive file is absent, or byte-identical to the old file that was there before, or
  (if the run had finished) complete and readable;
- its sidecar is absent, the old one, or the complete new one describing the new file;
  never half-written and never describing the other file;
- report figures (PNG, PDF) and verify.json under their final names are absent, old, or
  complete (PNG ends with its IEND chunk, PNG specification 11.2.5; PDF ends with %%EOF,
  ISO 32000-1 7.5.5; JSON parses, RFC 8259);
- anything else left is a hidden temporary ('.' + name + '.partial...'): a SIGKILL cannot be
  caught, so these leftovers are unavoidable.  The next write to the same destination
  removes the stale drive partials (vibsynth.io.drivefile.remove_stale_partials), checked here on
  the real leftovers of a kill.

Kill moments come from a seeded generator: one at a random time after the start (imports,
planning, the peak pass) and the others when the temporary file has grown to a random
fraction of its expected size.  The profile is invented.
"""

from __future__ import annotations

import contextlib
import io
import json
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from vibsynth.cli.main import main
from vibsynth.io.drivefile import estimate_file_bytes, open_drive, sidecar_path

PROFILE_CSV = "frequency_hz,asd_g2_per_hz\n20,0.01\n80,0.04\n350,0.04\n2000,0.005\n"  # invented bracket test
RATE = 51200
DURATION_S = 60  # 3.07e6 samples: a few seconds of work, overlap-add with the small memory budget below
REPORT_FILES = ("asd.png", "amplitude.png", "excerpt.png", "rms.png", "report.pdf", "verify.json")
OLD_BYTES = b"old file, placed before the run\n"
POSIX_ONLY = pytest.mark.skipif(os.name != "posix", reason="SIGKILL and rename(2) semantics are POSIX")


def _quiet_main(argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main([str(a) for a in argv])
    return status, out.getvalue(), err.getvalue()


def _start(argv) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "vibsynth", *map(str, argv)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


def _kill_when(child: subprocess.Popen, ready, timeout_s: float = 120.0) -> bool:
    """SIGKILL the child as soon as ``ready()`` is true; False if it finished first."""
    deadline = time.monotonic() + timeout_s
    while child.poll() is None:
        if ready():
            child.kill()  # SIGKILL
            child.wait(timeout=30)
            return True
        if time.monotonic() > deadline:
            child.kill()
            child.wait(timeout=30)
            raise AssertionError("the moment to kill never came")
        time.sleep(0.005)
    return False


def _partials(folder: Path) -> list[Path]:
    return [p for p in folder.iterdir() if p.name.startswith(".") and ".partial" in p.name]


def _largest_partial_size(folder: Path) -> int:
    sizes = []
    for p in _partials(folder):
        with contextlib.suppress(FileNotFoundError):
            sizes.append(p.stat().st_size)
    return max(sizes, default=0)


@pytest.fixture(scope="module")
def profile_path(tmp_path_factory):
    path = tmp_path_factory.mktemp("crash-profile") / "bracket.csv"
    path.write_text(PROFILE_CSV)
    return path


def _check_drive_after_kill(folder: Path, destination: Path, old: bool, finished: bool) -> None:
    side = sidecar_path(destination)
    if finished:
        drive = open_drive(destination)  # complete: the sidecar parses and agrees with the file
        assert drive.samples == DURATION_S * RATE
        assert drive.read(stop=1000).size == 1000
        return
    if old:
        assert destination.read_bytes() == OLD_BYTES
        assert not side.exists() or side.read_bytes() == OLD_BYTES  # gone only inside the commit's rename window
    else:
        assert not destination.exists()
        assert not side.exists()
    leftovers = sorted(p.name for p in folder.iterdir())
    expected = {"drive" + destination.suffix, side.name} if old else set()
    for name in leftovers:
        assert name in expected or (name.startswith(".") and ".partial" in name), leftovers


@POSIX_ONLY
@pytest.mark.parametrize("suffix, seed", [("flac", 1), ("wav", 2)])
def test_generate_killed_at_random_moments_leaves_the_destination_as_it_was(tmp_path, profile_path, suffix, seed):
    rng = np.random.default_rng(seed)
    samples = DURATION_S * RATE
    # .wav: the exact size; .flac: half a byte per sample, well below what this band-limited record compresses to
    # (about 1 byte per sample), so every fraction drawn below is reached before the run ends.
    expected_bytes = estimate_file_bytes("wav", "float", samples)[0] if suffix == "wav" else samples // 2
    moments = [("time", rng.uniform(0.2, 1.5))] + [("size", rng.uniform(0.05, 0.9)) for _ in range(2)]
    outcomes = []
    folder = None
    for index, (kind, value) in enumerate(moments):
        folder = tmp_path / f"kill{index}"
        folder.mkdir()
        destination = folder / f"drive.{suffix}"
        old = index % 2 == 1
        if old:
            destination.write_bytes(OLD_BYTES)
            sidecar_path(destination).write_bytes(OLD_BYTES)
        child = _start(["generate", profile_path, "-o", destination, "--duration", DURATION_S, "--rate", RATE,
                        "--seed", 7, "--memory-budget", 4, "--quiet"])
        started = time.monotonic()
        if kind == "time":
            killed = _kill_when(child, lambda: time.monotonic() - started >= value)
        else:
            killed = _kill_when(child, lambda: _largest_partial_size(folder) >= value * expected_bytes)
        assert killed or child.returncode == 0
        # a kill that lands after the commit (the process still exiting) finds the run finished: a new sidecar
        # under its final name is only ever renamed there after the data (see vibsynth.io.drivefile)
        side = sidecar_path(destination)
        committed = killed and side.exists() and side.read_bytes() != OLD_BYTES
        _check_drive_after_kill(folder, destination, old, finished=not killed or committed)
        outcomes.append((kind, killed, [p.name for p in _partials(folder)]))
    # At least one kill landed while the drive was being written: it left a hidden partial file.
    assert any(partials for _, killed, partials in outcomes if killed), outcomes

    # The next run to the same destination removes the stale partials of the killed one.
    for index in range(len(moments)):
        folder = tmp_path / f"kill{index}"
        stale = _partials(folder)
        if not stale:
            continue
        long_ago = time.time() - 3600
        for path in stale:
            os.utime(path, (long_ago, long_ago))
        destination = folder / f"drive.{suffix}"
        status, _, err = _quiet_main(["generate", profile_path, "-o", destination, "--duration", 1, "--rate", RATE,
                                      "--seed", 7, "--quiet"])
        assert status == 0, err
        assert _partials(folder) == []
        assert open_drive(destination).samples == RATE
        break


def _complete_report_file(path: Path) -> bool:
    data = path.read_bytes()
    if path.suffix == ".png":
        return data.startswith(b"\x89PNG\r\n\x1a\n") and data.endswith(b"IEND\xaeB`\x82")
    if path.suffix == ".pdf":
        return data.startswith(b"%PDF-") and data.rstrip().endswith(b"%%EOF")
    return "pass" in json.loads(data)


@pytest.fixture(scope="module")
def drive_to_verify(tmp_path_factory, profile_path):
    path = tmp_path_factory.mktemp("crash-drive") / "drive.npy"
    status, _, err = _quiet_main(["generate", profile_path, "-o", path, "--duration", 10, "--rate", 5120, "--seed", 4,
                                  "--quiet"])
    assert status == 0, err
    return path


@POSIX_ONLY
def test_verify_report_killed_at_random_moments_leaves_no_half_written_figure(tmp_path, drive_to_verify):
    rng = np.random.default_rng(3)
    # One kill at a random time; two while figures are being written (a temporary is there): at once, and after a
    # random delay (into the later figures, the PDF or the renames).
    moments = [("time", rng.uniform(0.3, 4.0)), ("figures", 0.0), ("figures", rng.uniform(0.0, 0.8))]
    killed_while_writing = 0
    for index, (kind, value) in enumerate(moments):
        report = tmp_path / f"report{index}"
        report.mkdir()
        old = index % 2 == 1
        if old:
            for name in REPORT_FILES:
                (report / name).write_bytes(OLD_BYTES)
        child = _start(["verify", drive_to_verify, "--report", report])
        started = time.monotonic()
        seen = {}

        def ready():
            if kind == "time":
                return time.monotonic() - started >= value
            if "at" not in seen and _partials(report):
                seen["at"] = time.monotonic()
            return "at" in seen and time.monotonic() - seen["at"] >= value

        killed = _kill_when(child, ready)
        if not killed:
            assert child.returncode in (0, 1)
        killed_while_writing += bool(killed and kind == "figures")
        for name in REPORT_FILES:
            path = report / name
            if not path.exists():
                assert killed and not old, name
            elif path.read_bytes() != OLD_BYTES:
                assert _complete_report_file(path), name
        for path in report.iterdir():
            assert path.name in REPORT_FILES or (path.name.startswith(".") and ".partial" in path.name), path.name
        assert drive_to_verify.exists() and sidecar_path(drive_to_verify).exists()
    assert killed_while_writing >= 1


@POSIX_ONLY
def test_stale_partial_cleanup_spares_running_and_recent_writers(tmp_path, profile_path):
    """Only partials of this destination, of a process that is gone, unchanged for a minute, are removed."""
    gone = subprocess.Popen([sys.executable, "-c", "pass"])
    gone.wait()  # its pid names no running process now
    running = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        names = {
            f".drive.npy.{gone.pid}.partial": False,  # stale: removed
            f".drive.npy.json.{gone.pid}.2.partial": False,  # stale sidecar partial: removed
            f".drive.npy.{running.pid}.partial": True,  # its writer still runs
            f".other.npy.{gone.pid}.partial": True,  # another destination's
            f"drive.npy.{gone.pid}.partial": True,  # not a name the writer makes
        }
        long_ago = time.time() - 3600
        for name in names:
            (tmp_path / name).write_bytes(b"x")
            os.utime(tmp_path / name, (long_ago, long_ago))
        recent = tmp_path / f".drive.npy.{gone.pid}.7.partial"  # the writer may be on another machine: kept
        recent.write_bytes(b"x")
        status, _, err = _quiet_main(["generate", profile_path, "-o", tmp_path / "drive.npy", "--duration", 1,
                                      "--rate", RATE, "--seed", 7, "--quiet"])
        assert status == 0, err
        for name, kept in names.items():
            assert (tmp_path / name).exists() == kept, name
        assert recent.exists()
    finally:
        running.kill()
        running.wait()
