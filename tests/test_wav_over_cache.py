"""A mono .wav drive written over its own peak-pass sample cache: same bytes, nothing left behind on failure.

- The second pass of an overlap-add .wav (float, PCM 24, PCM 16) takes the cache's file over as the drive's
  temporary and writes behind the reader; the file is byte-identical to the one written to a fresh temporary
  and to the one whose second pass made the record again, sidecar included.  Byte identity of the direct
  writer itself against libsndfile is in tests/test_direct_wav.py.
- .flac is not written over its cache (libsndfile empties the file it opens), and the cache is removed as before.
- A refused sample, a full disk and an interrupt during that second pass leave the folder empty.
- The writer refuses to write past the bytes already read (it would destroy samples not yet encoded).
- ``AtomicFile(adopt=...)``: an adopted scratch file is published by the commit or removed by the discard,
  and removed when the temporary cannot be made (POSIX rename(2) semantics).

Profile: the invented bracket test (20-2000 Hz).
"""

from __future__ import annotations

import errno
import io
import json
import os
import warnings
from pathlib import Path

import numpy as np
import pytest
import soundfile

from vibsynth import jobs
from vibsynth.errors import InputError, VibsynthWarning
from vibsynth.io import atomic, drivefile, samplecache, wavflac
from vibsynth.io.drivefile import sidecar_path
from vibsynth.profile.asd import AsdProfile

PROFILE = AsdProfile([20, 80, 350, 2000], [0.01, 0.04, 0.04, 0.005], name="invented-bracket")
RATE = 5120.0
DURATION_S = 40.0  # 204800 samples: overlap-add under a 1 MiB budget, four chunks of jobs.CHUNK_SAMPLES


def _prepare(output: Path, subtype=None):
    request = jobs.DriveRequest(str(output), DURATION_S, RATE, seed=11, subtype=subtype, memory_budget_mb=1.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", VibsynthWarning)
        prepared = jobs.prepare_drive(PROFILE, request)
    assert prepared.plan.mode == "overlap-add" and prepared.peak_pass == "cached"
    return prepared


def _spy_hand_over(monkeypatch) -> list:
    handed = []
    original = samplecache.SampleCache.hand_over

    def hand_over(cache):
        path = cache.path
        handed.append((path.name, path.stat().st_size, cache.read_bytes))
        return original(cache)

    monkeypatch.setattr(samplecache.SampleCache, "hand_over", hand_over)
    return handed


def _folder(path: Path) -> list:
    return sorted(p.name for p in path.iterdir())


@pytest.mark.parametrize("subtype", [None, "pcm24", "pcm16"])
def test_wav_written_over_its_cache_is_the_same_file(tmp_path, monkeypatch, subtype):
    handed = _spy_hand_over(monkeypatch)
    runs = {}
    for run in ("over-cache", "fresh-file", "recomputed"):
        folder = tmp_path / run
        folder.mkdir()
        prepared = _prepare(folder / "drive.wav", subtype)
        with monkeypatch.context() as patch:
            if run == "fresh-file":
                patch.setattr(drivefile.DriveWriter, "recycles", lambda writer, cache: False)
            jobs.write_prepared_drive(prepared, peak_cache=run != "recomputed")
        assert _folder(folder) == ["drive.wav", "drive.wav.json"]
        runs[run] = ((folder / "drive.wav").read_bytes(), json.loads(sidecar_path(folder / "drive.wav").read_text()))
        if run == "over-cache":
            samples = prepared.plan.total_samples
            # handed over once, before a sample was read: the cache's hidden name, 8 bytes per sample
            (name, size, read), = handed
            assert name.endswith(".peak-cache.partial") and size == 8 * samples and read == 0
    assert len(handed) == 1
    assert runs["over-cache"][0] == runs["fresh-file"][0] == runs["recomputed"][0]
    assert runs["over-cache"][1] == runs["fresh-file"][1] == runs["recomputed"][1]
    # an independent reader sees the whole record, none of the cache's bytes after it
    info = soundfile.info(str(tmp_path / "over-cache" / "drive.wav"))
    assert info.frames == runs["over-cache"][1]["samples"]


def test_flac_is_not_written_over_its_cache(tmp_path, monkeypatch):
    handed = _spy_hand_over(monkeypatch)
    jobs.write_prepared_drive(_prepare(tmp_path / "drive.flac"))
    assert handed == [] and _folder(tmp_path) == ["drive.flac", "drive.flac.json"]


@pytest.mark.parametrize("failure", ["refused sample", "disk full", "interrupt"])
def test_a_failure_while_writing_over_the_cache_leaves_nothing(tmp_path, monkeypatch, failure):
    handed = _spy_hand_over(monkeypatch)
    if failure == "refused sample":  # a full scale below the peak: refused, never clipped
        monkeypatch.setattr(drivefile, "full_scale_from_peak", lambda peak, headroom=0.0: peak / 2)
        expected = InputError
    else:
        calls = []
        original = wavflac.DirectWavWriter._write

        def failing(writer, data):
            calls.append(1)
            if len(calls) == 3:
                if failure == "disk full":
                    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
                raise KeyboardInterrupt  # what the command's SIGTERM handler raises
            original(writer, data)

        monkeypatch.setattr(wavflac.DirectWavWriter, "_write", failing)
        expected = OSError if failure == "disk full" else KeyboardInterrupt
    with pytest.raises(expected):
        jobs.write_prepared_drive(_prepare(tmp_path / "drive.wav"))
    assert len(handed) == 1 and _folder(tmp_path) == []


def test_the_writer_refuses_to_pass_the_bytes_read():
    handle = io.BytesIO(bytes(4096))  # "cache" bytes, 1000 of them read so far
    writer = wavflac.DirectWavWriter(handle, "pcm16", 8000, overwrite_behind=lambda: 1000)
    writer.write(writer.encode_counts(np.zeros(400)))  # header + 800 bytes: within what was read
    with pytest.raises(RuntimeError, match="not yet read"):
        writer.write(writer.encode_counts(np.zeros(100)))
    assert handle.getvalue()[len(writer.header) + 800:] == bytes(4096 - len(writer.header) - 800)  # untouched


def test_a_finished_wav_over_older_bytes_is_cut_after_its_data():
    reference = io.BytesIO()
    fresh = wavflac.DirectWavWriter(reference, "pcm24", 8000)
    recycled_buffer = io.BytesIO(b"\x7f" * 10_000)
    recycled = wavflac.DirectWavWriter(recycled_buffer, "pcm24", 8000, overwrite_behind=lambda: 10_000)
    for writer in (fresh, recycled):
        writer.write(writer.encode_counts(np.arange(-5.0, 6.0)))  # 11 samples: 33 bytes and a pad byte
        writer.finish()
    assert recycled_buffer.getvalue() == reference.getvalue()
    assert len(reference.getvalue()) == len(fresh.header) + 34


def test_an_adopted_scratch_file_is_published_or_removed(tmp_path, monkeypatch):
    destination = tmp_path / "out.bin"
    scratch = atomic.partial_path(destination, "scratch-data")
    scratch.write_bytes(b"kept")
    with atomic.AtomicFile(destination, adopt=scratch) as pending:
        assert not scratch.exists() and pending.temporary.read_bytes() == b"kept"
        pending.commit()
    assert destination.read_bytes() == b"kept" and _folder(tmp_path) == ["out.bin"]

    scratch = atomic.partial_path(destination, "scratch-data")
    with atomic.AtomicFile(destination, adopt=scratch):
        pass  # left without a commit: the adopted file goes with the temporary
    assert _folder(tmp_path) == ["out.bin"] and destination.read_bytes() == b"kept"

    scratch = atomic.partial_path(destination, "scratch-data")

    def no_temporary(*args, **kwargs):
        raise OSError(errno.EACCES, os.strerror(errno.EACCES))

    monkeypatch.setattr(atomic, "partial_path", no_temporary)
    with pytest.raises(OSError):
        atomic.AtomicFile(destination, adopt=scratch)
    assert _folder(tmp_path) == ["out.bin"]
