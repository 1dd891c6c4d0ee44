""".wav data written directly (no libsndfile per-sample conversion) and the faster PCM rounding: same bytes as before.

- ``quantize`` (add and subtract 1.5 x 2^52) equals ``numpy.rint`` - round half to even, IEEE 754-2008
  section 4.3.1 - on random values and on exact halves.
- The direct .wav writer gives, byte for byte, the file libsndfile writes (via soundfile, an independent
  encoder) from the samples the earlier path handed it: float32 ``x / scale``, or ``rint(x 2^(bits-1) / scale)``
  as int16 / left-justified int32 - for float, PCM 24 and PCM 16, odd and even lengths (RIFF chunks are
  word aligned, Microsoft/IBM RIFF WAVE format), an empty file, and the float PEAK chunk when the largest
  |sample| is negative and repeated in later chunks (libsndfile keeps its first position).
- ``DriveWriter`` and ``vibsynth generate`` give the same bytes with the direct writer and with
  libsndfile (the direct writer switched off), including the sidecar.
- A write that fails half way (a full disk) leaves no file behind and the destination as it was.

Records are synthetic (random numbers) or the invented bracket-test profile.
"""

from __future__ import annotations

import errno
import io
import os

import numpy as np
import pytest
import soundfile

from vibsynth.cli.main import main
from vibsynth.io import wavflac
from vibsynth.io.drivefile import DriveWriter, sidecar_path, write_drive

RATE_HZ = 8000
PROFILE_CSV = "frequency_hz,asd_g2_per_hz\n20,0.01\n80,0.04\n350,0.04\n2000,0.005\n"  # invented bracket test


def _libsndfile_reference(values: np.ndarray, scale: float, subtype: str, chunk: int) -> bytes:
    """The earlier path: the samples handed to libsndfile chunk by chunk, PEAK time stamp zeroed afterwards."""
    buffer = io.BytesIO()
    with soundfile.SoundFile(buffer, mode="w", samplerate=RATE_HZ, channels=1, format="WAV",
                             subtype=wavflac.SOUNDFILE_SUBTYPE[subtype]) as handle:
        for start in range(0, len(values), chunk):
            part = values[start:start + chunk]
            if subtype == "float":
                handle.write((part / scale).astype(np.float32))
            else:
                bits = wavflac.PCM_BITS[subtype]
                counts = np.rint(part * (2.0 ** (bits - 1) / scale))
                handle.write(counts.astype(np.int16) if bits == 16 else counts.astype(np.int32) << 8)
    data = bytearray(buffer.getvalue())
    wavflac._zero_peak_time_stamp_bytes(data)
    return bytes(data)


def _record(samples: int, seed: int = 0) -> np.ndarray:
    values = np.random.default_rng(seed).standard_normal(samples) * 3.0
    if samples > 40:
        peak = 1.5 * np.max(np.abs(values))
        values[[5, samples // 2, samples - 3]] = (-peak, -peak, peak)  # a repeated largest |value|, first negative
    return values


def test_quantize_equals_numpy_rint():
    rng = np.random.default_rng(1)
    values = np.concatenate([rng.standard_normal(200_000) * 4.0, np.arange(-2000, 2000) / 2.0 / 2**23 * 4.0,
                             [0.0, -0.0, 2.5, -2.5, 0.49999999999999994]])
    for factor in (2.0**23 / 4.0, 2.0**15 / 4.0, 1.0):
        np.testing.assert_array_equal(wavflac.quantize(values, factor), np.rint(values * factor))
    # beyond 2^51 the sum is no longer exact, but it stays far beyond any PCM full scale (refused, never written)
    assert abs(wavflac.quantize(np.array([3.0e15]), 1.0)[0] - 3.0e15) <= 2.0


@pytest.mark.parametrize("subtype", ["float", "pcm24", "pcm16"])
@pytest.mark.parametrize("samples, chunk", [(0, 7), (1, 7), (2, 7), (3, 2), (1001, 64), (40001, 7777)])
def test_direct_wav_bytes_equal_libsndfile(tmp_path, subtype, samples, chunk):
    assert wavflac.direct_wav_matches(subtype, RATE_HZ)
    values = _record(samples, seed=samples)
    scale = 1.001 * float(np.max(np.abs(values))) if samples else 1.0
    path = tmp_path / "d.wav"
    writer = wavflac.AudioWriter(path, str(path), "wav", subtype, RATE_HZ, scale)
    assert writer.direct
    for start in range(0, samples, chunk):
        writer.write(values[start:start + chunk, None], start)
    writer.close()
    writer.finish()
    assert path.read_bytes() == _libsndfile_reference(values, scale, subtype, chunk)
    back, rate = soundfile.read(path, dtype="float64")  # and an independent reader takes it
    assert rate == RATE_HZ and back.size == samples


@pytest.mark.parametrize("subtype", ["float", "pcm24", "pcm16"])
def test_drive_writer_same_bytes_with_and_without_the_direct_writer(tmp_path, monkeypatch, subtype):
    values = _record(50_000, seed=3)
    scale = 1.01 * float(np.max(np.abs(values)))

    def write(name):
        chunks = (values[i:i + 4096] for i in range(0, values.size, 4096))
        write_drive(tmp_path / name, chunks, rate_hz=RATE_HZ, samples=values.size, subtype=subtype, scale=scale,
                    sidecar={"seed": 3})
        return (tmp_path / name).read_bytes(), sidecar_path(tmp_path / name).read_text()

    direct = write("direct.wav")
    monkeypatch.setattr(wavflac, "direct_wav_matches", lambda *args: False)
    library = write("library.wav")
    assert direct[0] == library[0] == _libsndfile_reference(values, scale, subtype, 4096)
    assert direct[1] == library[1]


@pytest.mark.parametrize("args", [[], ["--subtype", "pcm24"], ["--subtype", "pcm16", "--kurtosis", "5"]])
def test_generate_same_bytes_with_and_without_the_direct_writer(tmp_path, monkeypatch, capsys, args):
    profile = tmp_path / "bracket.csv"
    profile.write_text(PROFILE_CSV)
    common = ["generate", str(profile), "--duration", "40", "--rate", "5120", "--seed", "4", "--memory-budget", "1",
              "--quiet", *args]
    assert main([*common, "-o", str(tmp_path / "direct.wav")]) == 0
    monkeypatch.setattr(wavflac, "direct_wav_matches", lambda *args: False)
    assert main([*common, "-o", str(tmp_path / "library.wav")]) == 0
    assert (tmp_path / "direct.wav").read_bytes() == (tmp_path / "library.wav").read_bytes()
    assert sidecar_path(tmp_path / "direct.wav").read_text() == sidecar_path(tmp_path / "library.wav").read_text()


def test_a_failed_direct_write_leaves_nothing(tmp_path, monkeypatch):
    path = tmp_path / "full.wav"
    path.write_bytes(b"an earlier file")
    calls = []
    original = wavflac.DirectWavWriter._write

    def disk_full_after_some(self, data):
        calls.append(1)
        if len(calls) > 3:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        original(self, data)

    monkeypatch.setattr(wavflac.DirectWavWriter, "_write", disk_full_after_some)
    values = _record(30_000)
    with pytest.raises(OSError) as raised:
        with DriveWriter(path, rate_hz=RATE_HZ, samples=values.size, scale=10 * float(np.max(np.abs(values)))) as writer:
            for start in range(0, values.size, 1000):
                writer.write(values[start:start + 1000])
            writer.commit()
    assert raised.value.errno == errno.ENOSPC and len(calls) > 3
    assert sorted(os.listdir(tmp_path)) == ["full.wav"] and path.read_bytes() == b"an earlier file"


@pytest.mark.parametrize("suffix, subtype", [("wav", "pcm24"), ("wav", "pcm16"), ("wav", "float"), ("flac", "pcm24"),
                                             ("npy", None)])
def test_empty_chunks_change_nothing(tmp_path, suffix, subtype):
    """A chunk of no samples, anywhere, leaves the file as without it (a pcm24 .wav raised a TypeError).
    Reference: the same writer fed the samples without empty chunks."""
    values = np.array([0.1, -0.2, 0.3, 0.05])
    empty = np.zeros((0, 1))
    scale = 1.0 if suffix == "npy" else 0.5
    options = dict(rate_hz=8000.0, samples=values.size, scale=scale)
    if subtype:
        options["subtype"] = subtype
    write_drive(tmp_path / f"with.{suffix}", [empty, values[:2], empty, values[2:], empty], **options)
    write_drive(tmp_path / f"without.{suffix}", [values], **options)
    assert (tmp_path / f"with.{suffix}").read_bytes() == (tmp_path / f"without.{suffix}").read_bytes()
