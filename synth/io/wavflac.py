"""The .wav and .flac drive formats: mono, normalised samples, physical value = sample x scale.

A reader that maps full scale to 1.0 (PCM counts divided by 2^(bits-1);
floats as stored) gets ``sample`` and the physical value is
``sample x scale``, with ``scale`` (g) in the sidecar.  The writer converts to
integer counts itself (``round(x / scale 2^(bits-1))``), so ``scale`` is
exact and a value that would not fit (a count beyond ``2^(bits-1) - 1``, or a
float sample beyond 1) is refused, never clipped.

References
----------
Microsoft/IBM RIFF WAVE format (PCM and IEEE float data, PEAK chunk); FLAC
format specification (xiph.org), verbatim subframes and frame header layout.
"""

from __future__ import annotations

import io
from pathlib import Path
from typing import Iterator

import numpy as np

from vibsynth.errors import InputError

#: Sample formats per file format; the first is the default.
SUBTYPES = {"wav": ("float", "pcm24", "pcm16"), "flac": ("pcm24", "pcm16")}

PCM_BITS = {"pcm24": 24, "pcm16": 16}
SOUNDFILE_SUBTYPE = {"float": "FLOAT", "pcm24": "PCM_24", "pcm16": "PCM_16"}
BYTES_PER_SAMPLE = {"float": 4, "pcm24": 3, "pcm16": 2}
WAV_MAX_DATA_BYTES = 2**32 - 1 - 4096  # RIFF size field is 32 bits; keep room for the header
#: FLAC bound: per-frame overhead (frame header <= 16 bytes, subframe header, byte padding, CRC-16) and the
#: smallest block size libFLAC uses at any compression level (1152 samples), plus room for metadata blocks.
FLAC_FRAME_OVERHEAD_BYTES = 20
FLAC_MIN_BLOCK_SAMPLES = 1152
FLAC_METADATA_BYTES = 64 * 1024


def estimate_bytes(file_format: str, subtype: str, samples: int) -> tuple[int, bool]:
    """Size of a .wav (exact) or .flac (upper bound) file of ``samples`` mono samples.

    Parameters
    ----------
    file_format : {"wav", "flac"}
    subtype : {"float", "pcm24", "pcm16"}
    samples : int

    Returns
    -------
    (int, bool)
        Bytes, and whether the figure is exact.

    Examples
    --------
    >>> estimate_bytes("wav", "pcm16", 10)[1]
    True

    References
    ----------
    RIFF WAVE (header measured by writing an empty file in memory; chunks
    word aligned); FLAC verbatim subframes bound the encoder's output.
    """
    count = int(samples)
    if file_format == "wav":
        import soundfile  # imported on use: a .npy/.csv job never loads libsndfile

        buffer = io.BytesIO()
        with soundfile.SoundFile(buffer, mode="w", samplerate=8000, channels=1, format="WAV",
                                 subtype=SOUNDFILE_SUBTYPE[subtype]):
            pass
        data = count * BYTES_PER_SAMPLE[subtype]
        return len(buffer.getvalue()) + data + data % 2, True
    frames = -(-count // FLAC_MIN_BLOCK_SAMPLES)
    return count * BYTES_PER_SAMPLE[subtype] + frames * FLAC_FRAME_OVERHEAD_BYTES + FLAC_METADATA_BYTES, False


def check_request(path, file_format: str, subtype: str, rate_hz: float, samples: int) -> None:
    """Refuse what .wav/.flac cannot store: a rate that is not a whole number, a .wav beyond 4 GB.

    Examples
    --------
    >>> check_request("d.flac", "flac", "pcm24", 5120.0, 100)

    References
    ----------
    RIFF WAVE (32-bit chunk sizes); FLAC STREAMINFO (integer sample rate).
    """
    rate = float(rate_hz)
    if rate != round(rate):
        raise InputError(f".{file_format} files store whole-number rates; {rate:g} Hz is not one", "rate")
    if file_format == "wav" and int(samples) * BYTES_PER_SAMPLE[subtype] > WAV_MAX_DATA_BYTES:
        longest = WAV_MAX_DATA_BYTES // BYTES_PER_SAMPLE[subtype] / rate
        raise InputError(
            f"a .wav file holds at most {longest:.0f} s of {subtype} samples at {rate:g} Hz (4 GB limit); "
            "use .flac or .npy",
            str(path),
        )


class AudioWriter:
    """Write normalised mono samples to a .wav/.flac file (used by :class:`vibsynth.io.drivefile.DriveWriter`).

    Parameters
    ----------
    temporary : pathlib.Path
        File to write (the atomic writer's temporary name).
    where : str
        Destination named in messages.
    file_format, subtype : str
    rate_hz : float
        Whole-number sample rate, Hz.
    scale : float
        g value of sample 1.0.

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "d.wav"
    >>> writer = AudioWriter(path, str(path), "wav", "pcm16", 8000.0, 2.0)
    >>> writer.write(np.array([[1.0], [-1.0]]), 0)
    >>> writer.close(); writer.finish()

    References
    ----------
    See the module docstring.
    """

    def __init__(self, temporary: Path, where: str, file_format: str, subtype: str, rate_hz: float, scale: float,
                 channels: int = 1):
        self.temporary, self.where, self.format, self.subtype = Path(temporary), where, file_format, subtype
        self.rate_hz, self.scale = float(rate_hz), float(scale)
        self.channels = int(channels)
        import soundfile

        try:
            self._handle = soundfile.SoundFile(
                str(self.temporary), mode="w", samplerate=int(round(self.rate_hz)), channels=int(channels),
                subtype=SOUNDFILE_SUBTYPE[subtype], format=file_format.upper(),
            )
        except (RuntimeError, soundfile.LibsndfileError, ValueError) as error:
            raise InputError(f"cannot write .{file_format} ({subtype}) at {self.rate_hz:g} Hz: {error}", where) from None

    def _refuse(self, values: np.ndarray, normalised: np.ndarray, limit: float, written: int) -> None:
        over = np.flatnonzero(~(np.abs(normalised) <= limit))
        if over.size:
            index = int(over[0])
            value = float(values.flat[index])
            index //= max(values.size // max(values.shape[0], 1), 1)
            raise InputError(
                f"sample {written + index} is {value:.6g} g, beyond the full scale of {self.scale:.6g} g; "
                "raise the full scale (or let it follow the record's peak) - samples are never clipped",
                self.where,
            )

    def encode(self, values: np.ndarray, written: int) -> np.ndarray:
        """Physical values (g), shape (m, channels), as the samples the file stores; nothing is written.

        ``written`` samples come before these (for messages).  Depends only on
        its arguments and the writer's format and scale, so chunks may be
        encoded ahead on other threads and handed to :meth:`write_encoded` in order.

        Returns
        -------
        numpy.ndarray
            float32 (``float``), int16 (``pcm16``) or left-justified int32
            (``pcm24``), shape (m,) or (m, channels).

        Raises
        ------
        InputError
            A value beyond full scale (never clipped).
        """
        values = values[:, 0] if self.channels == 1 else np.ascontiguousarray(values)
        with np.errstate(over="ignore"):  # a value beyond full scale is refused just below
            if self.subtype == "float":
                normalised = (values / self.scale).astype(np.float32)
                self._refuse(values, normalised, 1.0, written)
                return normalised
            bits = PCM_BITS[self.subtype]
            counts = np.rint(values * (2.0 ** (bits - 1) / self.scale))
        self._refuse(values, counts / 2.0 ** (bits - 1), (2 ** (bits - 1) - 1) / 2.0 ** (bits - 1), written)
        if bits == 16:
            return counts.astype(np.int16)
        return counts.astype(np.int32) << 8  # libsndfile stores the top 24 bits of a left-justified int32

    def write_encoded(self, samples: np.ndarray) -> None:
        """Append samples made by :meth:`encode` (libsndfile encodes them; the interpreter lock is released)."""
        self._handle.write(samples)

    def write(self, values: np.ndarray, written: int) -> None:
        """Append physical values (g), shape (m, channels); ``written`` samples came before (for messages)."""
        self.write_encoded(self.encode(values, written))

    def close(self) -> None:
        """Close the file (idempotent)."""
        if self._handle is not None:
            handle, self._handle = self._handle, None
            handle.close()

    def finish(self) -> None:
        """After closing: zero the PEAK chunk's time stamp of a .wav so equal samples give equal bytes."""
        if self.format == "wav":
            zero_peak_time_stamp(self.temporary)


def zero_peak_time_stamp(path: Path) -> None:
    """Zero the time stamp libsndfile puts in a float WAV's PEAK chunk, so equal samples give equal bytes.

    The PEAK chunk holds a version, the writing time (s since 1970) and each channel's peak
    value and position; only the time is cleared (0: unknown).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "x.wav"
    >>> _ = path.write_bytes(b"not a wav")
    >>> zero_peak_time_stamp(path)

    References
    ----------
    RIFF WAVE PEAK chunk (as written by libsndfile).
    """
    with open(path, "r+b") as handle:
        riff = handle.read(12)
        if riff[:4] != b"RIFF" or riff[8:12] != b"WAVE":
            return
        position = 12
        while True:
            handle.seek(position)
            header = handle.read(8)
            if len(header) < 8 or header[:4] == b"data":
                return
            size = int.from_bytes(header[4:], "little")
            if header[:4] == b"PEAK" and size >= 8:
                handle.seek(position + 12)  # chunk id and size (8 bytes), then the 4-byte version
                handle.write(bytes(4))
                return
            position += 8 + size + size % 2


def read_header(path: Path, file_format: str, channels: int = 1) -> tuple[float, int, str]:
    """Sample rate (Hz), sample count and sample format of a .wav/.flac file of ``channels`` channels (default mono).

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np, soundfile
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "x.flac"
    >>> soundfile.write(path, np.zeros(8), 8000, subtype="PCM_16")
    >>> read_header(path, "flac")
    (8000.0, 8, 'pcm16')

    References
    ----------
    RIFF WAVE fmt chunk; FLAC STREAMINFO.
    """
    import soundfile

    where = str(path)
    try:
        info = soundfile.info(str(path))
    except (RuntimeError, soundfile.LibsndfileError) as error:
        raise InputError(f"cannot read as .{file_format}: {error}", where) from None
    if info.channels != int(channels):
        if int(channels) == 1:
            raise InputError(f"has {info.channels} channels; a drive file has one (a multi-channel drive needs its "
                             "sidecar, which names the channels)", where)
        raise InputError(f"has {info.channels} channels; its sidecar lists {int(channels)}", where)
    subtype = {"FLOAT": "float", "DOUBLE": "float", "PCM_24": "pcm24", "PCM_16": "pcm16"}.get(
        info.subtype, info.subtype.lower())
    return float(info.samplerate), int(info.frames), subtype


def iter_chunks(path: Path, file_format: str, chunk: int, start: int, stop: int, samples: int,
                scale: float, column: int | None = 0) -> Iterator[np.ndarray]:
    """Physical values (g) of samples ``[start, stop)`` in chunks (float64, shape (m,); column None: (m, channels)).

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np, soundfile
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "x.wav"
    >>> soundfile.write(path, np.full(4, 0.5), 8000, subtype="FLOAT")
    >>> [c.tolist() for c in iter_chunks(path, "wav", 3, 0, 4, 4, 2.0)]
    [[1.0, 1.0, 1.0], [1.0]]

    References
    ----------
    libsndfile reading (PCM normalised to full scale 1.0).
    """
    import soundfile

    with soundfile.SoundFile(str(path)) as handle:
        position = start
        try:
            handle.seek(start)
        except (RuntimeError, soundfile.LibsndfileError) as error:
            raise InputError(f"cannot read .{file_format} data at sample {start}: {error}", str(path)) from None
        while position < stop:
            count = min(chunk, stop - position)
            try:
                data = handle.read(count, dtype="float64", always_2d=True)
            except (RuntimeError, soundfile.LibsndfileError) as error:
                raise InputError(
                    f"cannot read .{file_format} data after sample {position} (damaged or truncated file?): {error}",
                    str(path),
                ) from None
            if data.shape[0] != count:
                raise InputError(f"ends after {position + data.shape[0]} samples, expected {samples}", str(path))
            position += count
            yield (data if column is None else data[:, column]) * scale
