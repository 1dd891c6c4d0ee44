"""Drive files (vibsynth.io.drivefile): round trips, exact scale, refusal to clip, atomic writes, sidecar checks.

References used below:
- PCM quantisation: a value rounded to the nearest of 2^(bits-1) steps per full
  scale is within half a step (IEC 60908 / any sampled-data text); float32
  rounding is within half an ulp, 2^-24 relative (IEEE 754).
- WAV/FLAC read back through soundfile (libsndfile), an independent reader;
  .npy through numpy.load; .csv through numpy.loadtxt.

Records are synthetic (random numbers), not drive data of any real product.
"""

from __future__ import annotations

import json
import os

import numpy as np
import pytest
import soundfile

from vibsynth.io.drivefile import DriveWriter, full_scale_from_peak, open_drive, sidecar_path, write_drive
from vibsynth.errors import InputError

RATE_HZ = 8000


def _record(samples=40000, columns=1, seed=0):
    rng = np.random.default_rng(seed)
    data = rng.standard_normal((samples, columns)) * np.array([5.0, 0.05, 2e-4][:columns])
    return data[:, 0] if columns == 1 else data


def _write(path, data, chunk=7777, **kwargs):
    kwargs.setdefault("rate_hz", RATE_HZ)
    kwargs.setdefault("samples", len(data))
    chunks = (data[i : i + chunk] for i in range(0, len(data), chunk))
    return write_drive(path, chunks, **kwargs)


# Half a quantisation step, as a fraction of full scale (see module docstring).
HALF_STEP = {"float": 2.0**-24, "pcm24": 0.5 / 2**23, "pcm16": 0.5 / 2**15}


@pytest.mark.parametrize(
    "name, subtype",
    [("d.wav", None), ("d.wav", "pcm24"), ("d.wav", "pcm16"), ("d.flac", None), ("d.flac", "pcm16")],
)
def test_audio_round_trip_within_quantisation(tmp_path, name, subtype):
    data = _record()
    scale = full_scale_from_peak(np.max(np.abs(data)))
    path = tmp_path / name
    side = _write(path, data, subtype=subtype, scale=scale, sidecar={"seed": 1})
    drive = open_drive(path)
    assert drive.samples == data.size and drive.rate_hz == RATE_HZ and drive.scale == scale
    back = drive.read()
    assert np.max(np.abs(back - data)) <= HALF_STEP[drive.subtype] * scale * (1 + 1e-9)
    # An independent reader (libsndfile via soundfile) sees normalised samples: physical = sample x scale.
    raw, rate = soundfile.read(path, dtype="float64")
    assert rate == RATE_HZ and np.max(np.abs(raw)) <= 1.0
    np.testing.assert_array_equal(raw * side["scale"], back)
    if drive.subtype != "float":
        bits = 24 if drive.subtype == "pcm24" else 16
        counts = raw * 2 ** (bits - 1)
        np.testing.assert_array_equal(counts, np.round(counts))  # the scale is exact: whole counts
    assert json.loads(sidecar_path(path).read_text())["seed"] == 1


def test_csv_and_npy_round_trip_with_columns(tmp_path):
    data = _record(columns=3)
    quantities = ("acceleration", "velocity", "displacement")
    _write(tmp_path / "b.csv", data, quantities=quantities)
    _write(tmp_path / "b.npy", data, quantities=quantities)
    csv_drive = open_drive(tmp_path / "b.csv")
    npy_drive = open_drive(tmp_path / "b.npy")
    assert csv_drive.quantities == quantities == npy_drive.quantities
    for index, quantity in enumerate(quantities):
        # 9 significant digits in the csv: relative error <= 5e-9.
        column = data[:, index]
        np.testing.assert_allclose(csv_drive.read(quantity=quantity), column, rtol=5e-9, atol=1e-300)
        np.testing.assert_array_equal(npy_drive.read(quantity=quantity), column)
    np.testing.assert_array_equal(np.load(tmp_path / "b.npy"), data)  # numpy's own reader
    table = np.loadtxt(tmp_path / "b.csv", delimiter=",", skiprows=1)
    np.testing.assert_allclose(table[:, 0], np.arange(len(data)) / RATE_HZ, rtol=0, atol=5e-10)
    header = (tmp_path / "b.csv").read_text().splitlines()[0]
    assert header == "time_s,acceleration_g,velocity_m_s,displacement_m"


def test_chunked_reading_matches_whole_read(tmp_path):
    data = _record(samples=30001)
    for name in ("c.npy", "c.csv", "c.flac"):
        scale = 1.0 if name.endswith(("npy", "csv")) else full_scale_from_peak(np.max(np.abs(data)))
        _write(tmp_path / name, data, scale=scale)
        drive = open_drive(tmp_path / name)
        whole = drive.read()
        for chunk in (97, 4096, 100000):
            pieces = list(drive.iter_chunks(chunk, start=123, stop=29000))
            assert all(len(p) <= chunk for p in pieces)
            np.testing.assert_array_equal(np.concatenate(pieces), whole[123:29000])


def test_values_beyond_full_scale_are_refused_not_clipped(tmp_path):
    data = _record()
    peak = np.max(np.abs(data))
    path = tmp_path / "clip.flac"
    with pytest.raises(InputError, match="never clipped"):
        _write(path, data, scale=0.9 * peak)
    assert not path.exists() and not sidecar_path(path).exists()
    assert os.listdir(tmp_path) == []  # no temporary left behind
    with pytest.raises(InputError, match="beyond the full scale"):
        _write(tmp_path / "clip.wav", data, scale=0.9 * peak, subtype="float")


def test_failed_write_leaves_existing_destination_as_it_was(tmp_path):
    path = tmp_path / "keep.npy"
    old = _record(samples=1000, seed=1)
    _write(path, old)
    before = path.read_bytes(), sidecar_path(path).read_text()

    def failing_chunks():
        yield _record(samples=500, seed=2)
        raise RuntimeError("generator stopped")

    with pytest.raises(RuntimeError):
        write_drive(path, failing_chunks(), rate_hz=RATE_HZ, samples=1000)
    assert (path.read_bytes(), sidecar_path(path).read_text()) == before
    assert sorted(os.listdir(tmp_path)) == ["keep.npy", "keep.npy.json"]


def test_writer_checks_the_announced_sample_count(tmp_path):
    with pytest.raises(InputError, match="announced"):
        with DriveWriter(tmp_path / "short.npy", rate_hz=RATE_HZ, samples=100) as writer:
            writer.write(np.zeros(50))
            writer.commit()
    assert os.listdir(tmp_path) == []


def test_sidecar_disagreeing_with_file_is_an_input_error(tmp_path):
    data = _record(samples=2000)
    path = tmp_path / "s.wav"
    _write(path, data, scale=full_scale_from_peak(np.max(np.abs(data))))
    side = sidecar_path(path)
    original = json.loads(side.read_text())
    for key, value, message in (("rate", 4000.0, "rate"), ("samples", 1999, "samples"), ("format", "flac", "format")):
        side.write_text(json.dumps({**original, key: value}))
        with pytest.raises(InputError, match=message):
            open_drive(path)
    side.write_text(json.dumps(original))
    with pytest.raises(InputError, match="disagrees"):
        open_drive(path, rate_hz=RATE_HZ / 2)
    with pytest.raises(InputError, match="disagrees"):
        open_drive(path, scale=original["scale"] * 2)
    side.write_text("{not json")
    with pytest.raises(InputError, match="JSON"):
        open_drive(path)


def test_missing_sidecar_needs_rate_or_scale(tmp_path):
    data = _record(samples=2000)
    scale = full_scale_from_peak(np.max(np.abs(data)))
    for name, kwargs in (("m.wav", {"scale": scale}), ("m.npy", {}), ("m.csv", {})):
        path = tmp_path / name
        _write(path, data, **kwargs)
        sidecar_path(path).unlink()
        with pytest.raises(InputError, match="no sidecar"):
            open_drive(path)
    np.testing.assert_allclose(open_drive(tmp_path / "m.wav", scale=scale).read(), data, atol=scale * 2**-24)
    np.testing.assert_array_equal(open_drive(tmp_path / "m.npy", rate_hz=RATE_HZ).read(), data)
    with pytest.raises(InputError, match="rate disagrees"):
        open_drive(tmp_path / "m.csv", rate_hz=RATE_HZ * 1.01).read()
    np.testing.assert_allclose(open_drive(tmp_path / "m.csv", rate_hz=RATE_HZ).read(), data, rtol=5e-9)


def test_foreign_npy_saved_by_numpy_reads_with_a_rate(tmp_path):
    data = _record(samples=3000).astype(np.float32)
    np.save(tmp_path / "foreign.npy", data)
    drive = open_drive(tmp_path / "foreign.npy", rate_hz=1000.0)
    np.testing.assert_array_equal(drive.read(), data.astype(np.float64))


def test_format_limits_are_input_errors(tmp_path):
    with pytest.raises(InputError, match="4 GB"):
        DriveWriter(tmp_path / "huge.wav", rate_hz=51200, samples=2**31, scale=1.0)
    with pytest.raises(InputError, match="whole-number"):
        DriveWriter(tmp_path / "odd.flac", rate_hz=1000.5, samples=10, scale=1.0)
    with pytest.raises(InputError, match="acceleration only"):
        DriveWriter(tmp_path / "v.wav", rate_hz=1000, samples=10, quantities=("acceleration", "velocity"))
    with pytest.raises(InputError, match="does not exist"):
        DriveWriter(tmp_path / "nowhere" / "x.npy", rate_hz=1000, samples=10)
    with pytest.raises(InputError, match="unknown drive file type"):
        DriveWriter(tmp_path / "x.mp3", rate_hz=1000, samples=10)
    assert os.listdir(tmp_path) == []


def test_ramps_recorded_in_sidecar_give_the_steady_range(tmp_path):
    data = _record(samples=8000)
    _write(tmp_path / "r.npy", data, sidecar={"ramp_in_s": 0.25, "ramp_out_s": 0.125})
    drive = open_drive(tmp_path / "r.npy")
    assert drive.steady_range == (2000, 7000)


@pytest.mark.parametrize("suffix", ["npy", "flac"])
def test_write_back_ahead_starts_the_disk_early_and_leaves_the_bytes_and_no_descriptor(tmp_path, monkeypatch, suffix):
    """Every 4 MiB (here 64 KiB) of a growing drive file the writer asks the kernel to start writing it
    back and to drop the stretch it started one step before, every SWEEP_STEPS-th time (here 4) from the
    file's start (posix_fadvise DONTNEED); the file is the
    same bytes as without it, and no descriptor is left open.
    Reference: numpy.load / soundfile.read of the published file, and a write with the advice disabled."""
    from vibsynth.io import atomic

    monkeypatch.setattr(atomic, "WRITE_BACK_STEP_BYTES", 1 << 16)
    monkeypatch.setattr(atomic, "SWEEP_STEPS", 4)  # a short file: a sweep from the start every fourth step
    calls = []
    advise = getattr(os, "posix_fadvise", None)
    if advise is not None:
        monkeypatch.setattr(os, "posix_fadvise", lambda fd, offset, length, how: calls.append((offset, length)) or
                            advise(fd, offset, length, how))
    data = _record(samples=200000, seed=3)
    scale = full_scale_from_peak(float(np.max(np.abs(data)))) if suffix == "flac" else 1.0
    open_before = len(os.listdir("/proc/self/fd")) if os.path.isdir("/proc/self/fd") else None
    _write(tmp_path / f"ahead.{suffix}", data, scale=scale)
    if open_before is not None:
        assert len(os.listdir("/proc/self/fd")) == open_before
    if advise is not None:  # each call reaches a step further, and starts where the call before the last ended
        ends = [offset + length for offset, length in calls]  # (every SWEEP_STEPS-th call starts at 0)
        assert len(calls) > atomic.SWEEP_STEPS and calls[0][0] == calls[1][0] == 0
        assert all(b - a >= 1 << 16 for a, b in zip(ends, ends[1:]))
        assert [call[0] for call in calls[2:]] == [0 if (k + 1) % atomic.SWEEP_STEPS == 0 else ends[k - 2]
                                                   for k in range(2, len(calls))]
    monkeypatch.setattr(atomic, "WRITE_BACK_STEP_BYTES", 1 << 62)
    _write(tmp_path / f"plain.{suffix}", data, scale=scale)
    assert (tmp_path / f"ahead.{suffix}").read_bytes() == (tmp_path / f"plain.{suffix}").read_bytes()
