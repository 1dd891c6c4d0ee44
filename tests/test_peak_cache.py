"""The peak pass's sample cache: a .wav/.flac overlap-add drive whose full scale follows its peak is generated once.

- Byte-identical files with the cache and without it (the record made a second time), for .flac PCM 24,
  .wav float and PCM 16, and a three-channel .flac; the cached run makes the record once, the other twice.
- The cache is a hidden ``.NAME.PID.peak-cache.partial`` file beside the output (vibsynth.io.atomic's
  partial-file convention), read back in chunks no longer than the writer's, and gone after success,
  after a refused write, after an interrupt (in-process and SIGTERM to a child), after a failed cache
  write (the run falls back to recomputing, with a warning), and after a SIGKILL once the stale
  clean-up of the next write to the same destination has run.
- The space check counts it: 8 bytes per sample and column (IEEE 754 binary64); a folder that holds
  the file but not the cache as well makes the write recompute instead (dry run: ``peak_pass``
  ``"recomputed"``), and the file is the same.

Profiles are invented (a bracket test, 20-2000 Hz; the three-axis example of examples/).
"""

from __future__ import annotations

import errno
import json
import os
import re
import shutil
import signal
import subprocess
import sys
import time
import warnings
from collections import namedtuple
from pathlib import Path

import numpy as np
import pytest

from vibsynth import jobs
from vibsynth.cli.main import main
from vibsynth.errors import InputError, VibsynthWarning
from vibsynth.generate import pipeline
from vibsynth.io import atomic, drivefile, samplecache
from vibsynth.io.drivefile import open_drive, sidecar_path
from vibsynth.profile.multichannel import read_any_profile

PROFILE_CSV = "frequency_hz,asd_g2_per_hz\n20,0.01\n80,0.04\n350,0.04\n2000,0.005\n"  # invented bracket test
RATE = 5120.0
DURATION_S = 40.0  # 204800 samples; overlap-add under a 1 MiB budget, several chunks of CHUNK_SAMPLES
THREE_AXIS = Path(__file__).parent.parent / "examples" / "three-axis-mount.toml"
POSIX_ONLY = pytest.mark.skipif(os.name != "posix", reason="signals and stale-partial clean-up are POSIX")
_Usage = namedtuple("_Usage", "total used free")
CACHE_NAME = re.compile(r"\.drive\.(flac|wav)\.(\d+)\.peak-cache\.partial")


@pytest.fixture()
def profile_path(tmp_path_factory):
    path = tmp_path_factory.mktemp("profile") / "bracket.csv"
    path.write_text(PROFILE_CSV)
    return path


def _prepare(profile_source, output: Path, subtype=None, duration_s=DURATION_S, **options):
    request = jobs.DriveRequest(str(output), duration_s, RATE, seed=5, subtype=subtype, memory_budget_mb=1.0,
                                **options)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", VibsynthWarning)
        return jobs.prepare_drive(read_any_profile(str(profile_source)), request)


class _Spy:
    """Counts generation passes and records what the cache reader hands out (and where the cache lies)."""

    def __init__(self, monkeypatch):
        self.generation_passes = 0
        self.cache_chunks = []
        self.cache_paths = []
        spy = self
        make, read = pipeline.Synthesizer.iter_chunks, samplecache.SampleCache.iter_chunks

        def counting(synthesizer, *args, **kwargs):
            spy.generation_passes += 1
            return make(synthesizer, *args, **kwargs)

        def recording(cache, *args, **kwargs):
            spy.cache_paths.append((cache.path, cache.path.exists(), cache.path.stat().st_size))
            for chunk in read(cache, *args, **kwargs):
                spy.cache_chunks.append(chunk.shape)
                yield chunk

        monkeypatch.setattr(pipeline.Synthesizer, "iter_chunks", counting)
        monkeypatch.setattr(samplecache.SampleCache, "iter_chunks", recording)


def _folder(path: Path) -> list:
    return sorted(p.name for p in path.iterdir())


# ----------------------------------------------------------------------------- same bytes, one generation pass
@pytest.mark.parametrize("suffix, subtype", [("flac", None), ("wav", None), ("wav", "pcm16")])
def test_cached_and_recomputed_second_pass_give_the_same_bytes(tmp_path, profile_path, monkeypatch, suffix, subtype):
    spy = _Spy(monkeypatch)
    cached_dir, recomputed_dir = tmp_path / "cached", tmp_path / "recomputed"
    cached_dir.mkdir()
    recomputed_dir.mkdir()
    cached = _prepare(profile_path, cached_dir / f"drive.{suffix}", subtype)
    assert cached.plan.mode == "overlap-add" and cached.passes == 2 and cached.peak_pass == "cached"
    written = jobs.write_prepared_drive(cached)
    assert spy.generation_passes == 1  # the second pass read the cache
    samples = cached.plan.total_samples
    # the cache lay beside the output under a hidden partial name of this process, 8 bytes per sample
    (path, existed, size), = spy.cache_paths
    match = CACHE_NAME.fullmatch(path.name)
    assert existed and path.parent == cached_dir and match and int(match.group(2)) == os.getpid()
    assert size == 8 * samples  # IEEE 754 binary64: 8 bytes per value
    # read back in chunks no longer than the writer's, never as one array
    assert len(spy.cache_chunks) == -(-samples // jobs.CHUNK_SAMPLES) > 1
    assert max(rows for rows, _ in spy.cache_chunks) == jobs.CHUNK_SAMPLES
    assert sum(rows for rows, _ in spy.cache_chunks) == samples
    assert _folder(cached_dir) == [f"drive.{suffix}", f"drive.{suffix}.json"]  # the cache is gone

    spy.generation_passes = 0
    recomputed = _prepare(profile_path, recomputed_dir / f"drive.{suffix}", subtype)
    jobs.write_prepared_drive(recomputed, peak_cache=False)
    assert spy.generation_passes == 2 and len(spy.cache_paths) == 1  # made again; no cache this time
    assert (cached_dir / f"drive.{suffix}").read_bytes() == (recomputed_dir / f"drive.{suffix}").read_bytes()
    assert json.loads(sidecar_path(cached_dir / f"drive.{suffix}").read_text()) == \
        json.loads(sidecar_path(recomputed_dir / f"drive.{suffix}").read_text())
    assert written["full_scale_from"] == "peak"
    # full scale is the record's peak plus the headroom, the peak read back from the file's own samples
    values = open_drive(cached_dir / f"drive.{suffix}").read()
    assert written["scale"] == pytest.approx(written["peak_g"] * (1 + drivefile.DEFAULT_HEADROOM), rel=1e-12)
    assert np.max(np.abs(values)) <= written["scale"]


@pytest.mark.skipif(not hasattr(os, "posix_fadvise") or not os.path.isdir("/proc/self/fd"),
                    reason="page advice (posix_fadvise) and descriptor names (/proc) are Linux")
def test_the_cache_lets_its_pages_go_behind_the_writer_and_the_reader(tmp_path, profile_path, monkeypatch):
    """The sample cache is streamed through a few steps of pages (vibsynth.io.atomic.StreamedPages):
    its writer advises POSIX_FADV_DONTNEED over [the stretch before, the new end) every step (write-back
    of the new stretch, drop of the one before; every SWEEP_STEPS-th step from the file's start), its
    reader over what it has read; the drive file is the same bytes as with the pages kept (DROP_BEHIND
    off), with no advice at all (posix_fadvise missing) and with the advice refused (OSError).
    Reference: POSIX posix_fadvise(2); bytes compared with runs that keep the pages."""
    monkeypatch.setattr(atomic, "WRITE_BACK_STEP_BYTES", 1 << 16)
    monkeypatch.setattr(atomic, "SWEEP_STEPS", 3)  # the record is short: a sweep from the start every third step
    advise = os.posix_fadvise
    calls = []

    def recording(fd, offset, length, advice):
        calls.append((os.readlink(f"/proc/self/fd/{fd}"), offset, length, advice))
        return advise(fd, offset, length, advice)

    monkeypatch.setattr(os, "posix_fadvise", recording)
    (tmp_path / "streamed").mkdir()
    streamed = _prepare(profile_path, tmp_path / "streamed" / "drive.flac")
    jobs.write_prepared_drive(streamed)
    cache_bytes = 8 * streamed.plan.total_samples
    on_cache = [c for c in calls if ".peak-cache.partial" in c[0]]
    drops = [(offset, length) for _, offset, length, advice in on_cache if advice == os.POSIX_FADV_DONTNEED]
    assert any(advice == os.POSIX_FADV_SEQUENTIAL for *_, advice in on_cache)  # the reader says it reads in order
    ends = [offset + length for offset, length in drops]
    # the writer's calls, then the reader's: each reaches further, and the reader's ranges join up
    turn = next(i for i in range(1, len(ends)) if ends[i] < ends[i - 1])
    writer, reader = drops[:turn], drops[turn:]
    assert len(writer) > atomic.SWEEP_STEPS and writer[0][0] == 0 and ends[turn - 1] > cache_bytes - 2 * (1 << 16)
    # each drops the stretch before its last; every SWEEP_STEPS-th reaches back to the start
    assert [call[0] for call in writer[2:]] == [0 if (k + 1) % atomic.SWEEP_STEPS == 0 else ends[k - 2]
                                                for k in range(2, len(writer))]
    assert len(reader) >= 4 and reader[0][0] == 0
    assert all(a[0] + a[1] == b[0] for a, b in zip(reader, reader[1:]))
    assert reader[-1][0] + reader[-1][1] > cache_bytes - 2 * (1 << 16)

    monkeypatch.setattr(atomic, "DROP_BEHIND", False)
    (tmp_path / "kept").mkdir()
    kept = _prepare(profile_path, tmp_path / "kept" / "drive.flac")
    jobs.write_prepared_drive(kept)
    assert (tmp_path / "streamed" / "drive.flac").read_bytes() == (tmp_path / "kept" / "drive.flac").read_bytes()

    def refused(fd, offset, length, advice):
        raise OSError(errno.EINVAL, os.strerror(errno.EINVAL))

    for case, patch in (("refused", lambda: monkeypatch.setattr(os, "posix_fadvise", refused)),
                        ("missing", lambda: monkeypatch.delattr(os, "posix_fadvise"))):
        patch()
        folder = tmp_path / case
        folder.mkdir()
        jobs.write_prepared_drive(_prepare(profile_path, folder / "drive.flac"))
        assert _folder(folder) == ["drive.flac", "drive.flac.json"]  # the cache is gone, nothing half-written
        assert (folder / "drive.flac").read_bytes() == (tmp_path / "kept" / "drive.flac").read_bytes()


def test_three_channel_drive_is_the_same_with_and_without_the_cache(tmp_path, monkeypatch):
    spy = _Spy(monkeypatch)
    first, second = tmp_path / "a", tmp_path / "b"
    first.mkdir()
    second.mkdir()
    cached = _prepare(THREE_AXIS, first / "drive.flac", duration_s=20.0)
    assert cached.plan.mode == "overlap-add" and cached.peak_pass == "cached"
    assert cached.storage["cache_bytes"] == 8 * 3 * cached.plan.total_samples  # one float64 per channel and sample
    jobs.write_prepared_drive(cached)
    assert spy.generation_passes == 1 and {shape[1] for shape in spy.cache_chunks} == {3}
    jobs.write_prepared_drive(_prepare(THREE_AXIS, second / "drive.flac", duration_s=20.0), peak_cache=False)
    assert (first / "drive.flac").read_bytes() == (second / "drive.flac").read_bytes()
    assert _folder(first) == _folder(second) == ["drive.flac", "drive.flac.json"]


# ----------------------------------------------------------------------------- space: counted, or recompute
def test_dry_run_counts_the_cache(tmp_path, profile_path, capsys):
    destination = tmp_path / "drive.flac"
    status = main(["generate", str(profile_path), "-o", str(destination), "--duration", str(DURATION_S), "--rate",
                   str(int(RATE)), "--seed", "5", "--memory-budget", "1", "--dry-run", "--json"])
    out, err = capsys.readouterr()
    assert status == 0, err
    report = json.loads(out)
    samples = int(DURATION_S * RATE)
    assert report["passes"] == 2 and report["peak_pass"] == "cached"
    assert report["cache_bytes"] == 8 * samples  # IEEE 754 binary64
    assert report["needed_bytes"] == report["bytes"] + drivefile.SIDECAR_ALLOWANCE_BYTES + 8 * samples
    assert _folder(tmp_path) == []
    status = main(["generate", str(profile_path), "-o", str(destination), "--duration", str(DURATION_S), "--rate",
                   str(int(RATE)), "--seed", "5", "--memory-budget", "1", "--dry-run"])
    out, _ = capsys.readouterr()
    assert status == 0 and "temporary file for the second" in out and "1.64 MB" in out  # 1,638,400 bytes

    # one pass (a given full scale, a periodic record, .npy): no cache, nothing extra counted
    for extra in (["--full-scale", "20"], ["--memory-budget", "256"]):
        status = main(["generate", str(profile_path), "-o", str(destination), "--duration", str(DURATION_S),
                       "--rate", str(int(RATE)), "--seed", "5", "--memory-budget", "1", *extra, "--dry-run", "--json"])
        report = json.loads(capsys.readouterr()[0])
        assert status == 0 and report["passes"] == 1 and report["peak_pass"] is None and report["cache_bytes"] == 0
        assert report["needed_bytes"] == report["bytes"] + drivefile.SIDECAR_ALLOWANCE_BYTES


def test_a_folder_without_room_for_the_cache_recomputes(tmp_path, profile_path, capsys, monkeypatch):
    samples = int(DURATION_S * RATE)
    file_bytes = drivefile.estimate_file_bytes("flac", "pcm24", samples)[0]
    free = file_bytes + drivefile.SIDECAR_ALLOWANCE_BYTES + 8 * samples - 1  # one byte short of file + cache
    monkeypatch.setattr(shutil, "disk_usage", lambda path: _Usage(10**12, 10**12 - free, free))
    destination = tmp_path / "out" / "drive.flac"
    destination.parent.mkdir()
    argv = ["generate", str(profile_path), "-o", str(destination), "--duration", str(DURATION_S), "--rate",
            str(int(RATE)), "--seed", "5", "--memory-budget", "1"]
    status = main([*argv, "--dry-run", "--json"])
    out, err = capsys.readouterr()
    report = json.loads(out)
    assert status == 0 and report["fits"] is True and report["peak_pass"] == "recomputed"
    assert report["needed_bytes"] == file_bytes + drivefile.SIDECAR_ALLOWANCE_BYTES  # the cache is not counted
    status = main([*argv, "--dry-run"])
    out, _ = capsys.readouterr()
    assert "the record is made twice" in out

    spy = _Spy(monkeypatch)
    assert main([*argv, "--quiet"]) == 0
    capsys.readouterr()
    assert spy.generation_passes == 2 and spy.cache_paths == []
    reference = tmp_path / "reference.flac"
    monkeypatch.undo()
    assert main([*argv[:3], str(reference), *argv[4:], "--quiet"]) == 0  # room enough: cached
    capsys.readouterr()
    assert reference.read_bytes() == destination.read_bytes()


def test_storage_plan_chooses_the_cache_only_when_it_fits(tmp_path, monkeypatch):
    destination = tmp_path / "drive.wav"
    size = drivefile.estimate_file_bytes("wav", "float", 1000)[0] + drivefile.SIDECAR_ALLOWANCE_BYTES
    for free, mode, fits in ((size + 8000, "cached", True), (size + 7999, "recomputed", True),
                             (size - 1, "recomputed", False), (None, "cached", True)):
        monkeypatch.setattr(drivefile, "free_bytes", lambda folder, free=free: free)
        plan = drivefile.storage_plan(destination, "wav", "float", 1000, peak_pass=True)
        assert (plan["peak_pass"], plan["fits"], plan["cache_bytes"]) == (mode, fits, 8000), free
        assert plan["needed_bytes"] == size + (8000 if mode == "cached" else 0)
    assert drivefile.storage_plan(destination, "wav", "float", 1000)["peak_pass"] is None


# ----------------------------------------------------------------------------- gone after every ending
def test_a_refused_second_pass_leaves_nothing(tmp_path, profile_path, monkeypatch):
    # a full scale below the peak: the writer refuses the first sample beyond it (never clips)
    monkeypatch.setattr(drivefile, "full_scale_from_peak", lambda peak, headroom=0.0: peak / 2)
    prepared = _prepare(profile_path, tmp_path / "drive.flac")
    with pytest.raises(InputError, match="beyond the full scale"):
        jobs.write_prepared_drive(prepared)
    assert _folder(tmp_path) == []


@pytest.mark.parametrize("where", ["peak pass", "second pass"])
def test_an_interrupt_leaves_nothing(tmp_path, profile_path, monkeypatch, where):
    calls = []
    if where == "peak pass":
        original = samplecache.SampleCache.write

        def write(cache, chunk):
            calls.append(cache.path)
            if len(calls) == 2:
                raise KeyboardInterrupt  # what the command's SIGTERM handler raises
            return original(cache, chunk)

        monkeypatch.setattr(samplecache.SampleCache, "write", write)
    else:
        original = drivefile.DriveWriter.write_prepared

        def write(writer, ready):
            calls.append(ready.position)
            if len(calls) == 2:
                raise KeyboardInterrupt
            return original(writer, ready)

        monkeypatch.setattr(drivefile.DriveWriter, "write_prepared", write)
    prepared = _prepare(profile_path, tmp_path / "drive.wav")
    with pytest.raises(KeyboardInterrupt):
        jobs.write_prepared_drive(prepared)
    assert len(calls) == 2
    assert _folder(tmp_path) == []


class _SmallDisk:
    """A file opened for writing that takes ``room`` bytes, then fails as a full disk does (ENOSPC)."""

    def __init__(self, path, mode, room):
        self._file, self._room = open(path, mode), room

    def write(self, data):
        size = memoryview(data).nbytes
        if size > self._room:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        self._room -= size
        return self._file.write(data)

    def close(self):
        self._file.close()


@pytest.mark.parametrize("room_chunks", [0.5, 2.5])
def test_a_cache_that_cannot_be_written_falls_back_to_recomputing(tmp_path, profile_path, monkeypatch, room_chunks):
    # the disk fills on the first chunk, or later (the error then shows at a later write or at the close)
    spy = _Spy(monkeypatch)
    room = int(room_chunks * 8 * jobs.CHUNK_SAMPLES)
    monkeypatch.setattr(samplecache, "open", lambda path, mode="r": _SmallDisk(path, mode, room)
                        if "w" in mode or "+" in mode else open(path, mode), raising=False)  # opened for writing
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    with pytest.warns(VibsynthWarning, match="made again for the second pass"):
        jobs.write_prepared_drive(_prepare(profile_path, tmp_path / "a" / "drive.flac"))
    assert spy.generation_passes == 2 and spy.cache_chunks == []
    assert _folder(tmp_path / "a") == ["drive.flac", "drive.flac.json"]
    monkeypatch.undo()
    jobs.write_prepared_drive(_prepare(profile_path, tmp_path / "b" / "drive.flac"))
    assert (tmp_path / "a" / "drive.flac").read_bytes() == (tmp_path / "b" / "drive.flac").read_bytes()


def _child(destination: Path, profile_path: Path) -> subprocess.Popen:
    # 300 s at 51.2 kHz under a 4 MiB budget: overlap-add, a 123 MB cache, a few seconds of work
    return subprocess.Popen([sys.executable, "-m", "vibsynth", "generate", str(profile_path), "-o", str(destination),
                             "--duration", "300", "--rate", "51200", "--seed", "7", "--memory-budget", "4", "--quiet"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)


def _wait_for_cache(folder: Path, child: subprocess.Popen) -> Path:
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        for path in folder.iterdir():
            if CACHE_NAME.fullmatch(path.name) and path.stat().st_size > 0:
                return path
        if child.poll() is not None:
            raise AssertionError(f"the run ended before its cache appeared: {child.communicate()}")
        time.sleep(0.005)
    child.kill()
    raise AssertionError("no cache appeared")


@POSIX_ONLY
def test_sigterm_removes_the_cache(tmp_path, profile_path):
    folder = tmp_path / "out"
    folder.mkdir()
    child = _child(folder / "drive.flac", profile_path)
    cache = _wait_for_cache(folder, child)
    assert int(CACHE_NAME.fullmatch(cache.name).group(2)) == child.pid
    child.send_signal(signal.SIGTERM)
    child.communicate(timeout=60)
    assert child.returncode != 0
    assert _folder(folder) == []


@POSIX_ONLY
def test_a_killed_runs_cache_is_removed_by_the_next_write(tmp_path, profile_path, capsys):
    folder = tmp_path / "out"
    folder.mkdir()
    destination = folder / "drive.flac"
    child = _child(destination, profile_path)
    cache = _wait_for_cache(folder, child)
    child.kill()  # SIGKILL: nothing can be cleaned up
    child.communicate(timeout=60)
    assert cache.exists() and not destination.exists()
    # a recent leftover may belong to a writer on another machine: kept; unchanged for a minute: stale
    assert cache in [folder / name for name in _folder(folder)]
    long_ago = time.time() - 2 * atomic.STALE_PARTIAL_AGE_S
    os.utime(cache, (long_ago, long_ago))
    status = main(["generate", str(profile_path), "-o", str(destination), "--duration", "2", "--rate", "5120",
                   "--seed", "7", "--quiet"])
    assert status == 0, capsys.readouterr().err
    assert _folder(folder) == ["drive.flac", "drive.flac.json"]


# ----------------------------------------------------------------------------- the naming convention
def test_tagged_partials_follow_the_atomic_convention(tmp_path):
    destination = tmp_path / "drive.flac"
    plain = atomic.partial_path(destination)
    tagged = atomic.partial_path(destination, samplecache.CACHE_TAG)
    assert plain.name == f".drive.flac.{os.getpid()}.partial"
    assert tagged.name == f".drive.flac.{os.getpid()}.peak-cache.partial"
    assert atomic.partial_path(destination, samplecache.CACHE_TAG).name == \
        f".drive.flac.{os.getpid()}.1.peak-cache.partial"
    with pytest.raises(ValueError):
        atomic.partial_path(destination, "../x")
    gone = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    dead = int(gone.stdout)
    names = {f".drive.flac.{dead}.peak-cache.partial": False, f".drive.flac.{dead}.3.peak-cache.partial": False,
             f".other.flac.{dead}.peak-cache.partial": True, f".drive.flac.peak-cache.{dead}.partial": True}
    long_ago = time.time() - 3600
    for name in names:
        (tmp_path / name).write_bytes(b"x")
        os.utime(tmp_path / name, (long_ago, long_ago))
    removed = drivefile.remove_stale_partials(destination)
    assert sorted(p.name for p in removed) == sorted(name for name, kept in names.items() if not kept)
    for name, kept in names.items():
        assert (tmp_path / name).exists() == kept, name
    assert plain.exists() and tagged.exists()  # this process's own are never stale


# ----------------------------------------------------------------------------- progress over the two passes
def test_time_left_weighs_the_cheaper_second_pass(monkeypatch, capsys):
    """Lines count samples of both passes; the time left weighs the second pass by its cost (a fake clock)."""
    from vibsynth.cli import common, generate_cmd

    clock = [100.0]
    monkeypatch.setattr(common.time, "monotonic", lambda: clock[0])
    monkeypatch.setattr(common, "PROGRESS_MIN_INTERVAL_S", 0.0)
    weight = generate_cmd.SECOND_PASS_COST["cached"]
    with common.Progress(True, 2000, "generating", "lines", "writing d.flac", (1.0, weight)) as progress:
        clock[0] += 20.0
        progress(1000)  # the first pass done in 20 s: the second should take about 20 x weight s
        clock[0] += 20.0 * weight / 2
        progress(500)
    lines = capsys.readouterr().err.splitlines()
    assert lines[1].startswith("vibsynth: writing d.flac:  50 % (1000 of 2000 samples, 20 s")
    assert lines[1].endswith(f"about {20.0 * weight:.0f} s left)")
    assert lines[2].endswith(f"about {20.0 * weight / 2:.0f} s left)")  # the rate held: half of it left
    assert common.Progress(False, 2000, "x", pass_weights=(1.0, weight)).work(1500) == pytest.approx(1 + weight / 2)
    assert common.Progress(False, 2000, "x").work(1500) == pytest.approx(0.75)  # one pass: plain fraction


def test_generate_says_how_the_second_pass_gets_its_samples(tmp_path, profile_path, capsys, monkeypatch):
    from vibsynth.cli import common, generate_cmd

    monkeypatch.setattr(generate_cmd, "PROGRESS_MIN_SAMPLES", 1000)
    monkeypatch.setattr(common, "PROGRESS_MIN_SAMPLES", 1000)
    monkeypatch.setattr(common, "PROGRESS_MIN_INTERVAL_S", 0.0)
    status = main(["generate", str(profile_path), "-o", str(tmp_path / "drive.flac"), "--duration", str(DURATION_S),
                   "--rate", str(int(RATE)), "--seed", "5", "--memory-budget", "1"])
    err = capsys.readouterr().err
    assert status == 0, err
    assert "2 passes over the record (the first keeps the samples in a 1.64 MB temporary file" in err
    lines = [line for line in err.splitlines() if "% (" in line]
    assert lines[-1].startswith("vibsynth: writing ") and "the file from the samples kept" in lines[-1]
    assert f"100 % ({2 * int(DURATION_S * RATE)} of {2 * int(DURATION_S * RATE)} samples" in lines[-1]


def test_the_cache_modules_examples_run_as_written():
    import doctest

    for module in (samplecache, atomic):
        result = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
        assert result.attempted > 0 and result.failed == 0, module.__name__
