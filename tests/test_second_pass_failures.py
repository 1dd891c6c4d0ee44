"""The second pass of a .wav/.flac drive, read from its peak-pass sample cache: same bytes, nothing left on failure.

- An overlap-add .wav (float, PCM 24, PCM 16) whose second pass reads the cache is byte-identical, sidecar
  included, to the one whose second pass made the record again; an independent reader (libsndfile, through
  soundfile) sees the whole record.  Byte identity of the direct .wav writer against libsndfile is in
  tests/test_direct_wav.py; .flac and the cache's own behaviour in tests/test_peak_cache.py.
- A refused sample, a full disk and an interrupt during the second pass leave the folder empty (the cache
  and the temporary are removed).

Profile: the invented bracket test (20-2000 Hz).
"""

from __future__ import annotations

import errno
import json
import os
import warnings
from pathlib import Path

import pytest
import soundfile

from vibsynth import jobs
from vibsynth.errors import InputError, VibsynthWarning
from vibsynth.io import drivefile, samplecache, wavflac
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


def _folder(path: Path) -> list:
    return sorted(p.name for p in path.iterdir())


@pytest.mark.parametrize("subtype", [None, "pcm24", "pcm16"])
def test_wav_from_the_cache_is_the_same_file_as_made_again(tmp_path, subtype):
    runs = {}
    for run in ("cached", "recomputed"):
        folder = tmp_path / run
        folder.mkdir()
        prepared = _prepare(folder / "drive.wav", subtype)
        jobs.write_prepared_drive(prepared, peak_cache=run == "cached")
        assert _folder(folder) == ["drive.wav", "drive.wav.json"]
        runs[run] = ((folder / "drive.wav").read_bytes(), json.loads(sidecar_path(folder / "drive.wav").read_text()))
    assert runs["cached"] == runs["recomputed"]
    info = soundfile.info(str(tmp_path / "cached" / "drive.wav"))
    assert info.frames == runs["cached"][1]["samples"]


@pytest.mark.parametrize("failure", ["refused sample", "disk full", "interrupt"])
def test_a_failure_in_the_second_pass_leaves_nothing(tmp_path, monkeypatch, failure):
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
    caches = []
    original_read = samplecache.SampleCache.iter_chunks

    def reading(cache, *args, **kwargs):  # the second pass read a cache that lay in the folder
        caches.append((cache.path.name, cache.path.exists()))
        return original_read(cache, *args, **kwargs)

    monkeypatch.setattr(samplecache.SampleCache, "iter_chunks", reading)
    with pytest.raises(expected):
        jobs.write_prepared_drive(_prepare(tmp_path / "drive.wav"))
    (name, existed), = caches
    assert existed and name.endswith(".peak-cache.partial")
    assert _folder(tmp_path) == []  # the cache and the drive's temporary are gone
