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
    channels : int
        Channels (columns of each chunk).

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
        self._handle = None
        self._direct = None
        import soundfile

        rate = int(round(self.rate_hz))
        try:
            if can_write_directly(file_format, subtype, rate, self.channels):
                self._direct = _direct_writer(self.temporary, subtype, rate)
            else:
                self._handle = soundfile.SoundFile(
                    str(self.temporary), mode="w", samplerate=rate, channels=int(channels),
                    subtype=SOUNDFILE_SUBTYPE[subtype], format=file_format.upper(),
                )
        except (RuntimeError, soundfile.LibsndfileError, ValueError) as error:
            raise InputError(f"cannot write .{file_format} ({subtype}) at {self.rate_hz:g} Hz: {error}", where) from None

    @property
    def direct(self) -> bool:
        """True when the .wav bytes are written by :class:`DirectWavWriter` (mono .wav), False for libsndfile.

        Examples
        --------
        >>> import tempfile, pathlib
        >>> path = pathlib.Path(tempfile.mkdtemp()) / "d.flac"
        >>> writer = AudioWriter(path, str(path), "flac", "pcm24", 8000.0, 1.0, 1)
        >>> writer.direct
        False
        >>> writer.close()

        References
        ----------
        See :class:`DirectWavWriter`.
        """
        return self._direct is not None

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

    def encode(self, values: np.ndarray, written: int):
        """Physical values (g), shape (m, channels), as the samples the file stores; nothing is written.

        ``written`` samples come before these (for messages).  Depends only on
        its arguments and the writer's format and scale, so chunks may be
        encoded ahead on other threads and handed to :meth:`write_encoded` in order.

        Returns
        -------
        numpy.ndarray or EncodedWav
            float32 (``float``), int16 (``pcm16``) or left-justified int32
            (``pcm24``), shape (m,) or (m, channels), for libsndfile; for a
            direct .wav the little-endian bytes of the data chunk with the
            chunk's float peak (:class:`EncodedWav`).

        Raises
        ------
        InputError
            A value beyond full scale (never clipped).
        """
        values = values[:, 0] if self.channels == 1 else np.ascontiguousarray(values)
        with np.errstate(over="ignore", invalid="ignore"):  # a value beyond full scale is refused just below
            if self.subtype == "float":
                normalised = (values / self.scale).astype(np.float32)
                if normalised.size and not (normalised.max() <= 1.0 and -normalised.min() <= 1.0):
                    self._refuse(values, normalised, 1.0, written)
                if self._direct is not None:
                    return self._direct.encode_float(normalised)
                return normalised
            bits = PCM_BITS[self.subtype]
            counts = quantize(values, 2.0 ** (bits - 1) / self.scale)
            top = 2 ** (bits - 1) - 1
            if counts.size and not (counts.max() <= top and -counts.min() <= top):
                self._refuse(values, counts / 2.0 ** (bits - 1), top / 2.0 ** (bits - 1), written)
        if self._direct is not None:
            return self._direct.encode_counts(counts)
        if bits == 16:
            return counts.astype(np.int16)
        counts *= 256.0  # libsndfile stores the top 24 bits of a left-justified int32 (exact: a power of two)
        return counts.astype(np.int32)

    def write_encoded(self, samples) -> None:
        """Append samples made by :meth:`encode` (libsndfile or the direct writer; the interpreter lock is released)."""
        if self._direct is not None:
            self._direct.write(samples)
        else:
            self._handle.write(samples)

    def write(self, values: np.ndarray, written: int) -> None:
        """Append physical values (g), shape (m, channels); ``written`` samples came before (for messages)."""
        self.write_encoded(self.encode(values, written))

    def close(self) -> None:
        """Close the file (idempotent)."""
        if self._direct is not None:
            direct, self._direct = self._direct, None
            try:
                direct.finish()
            finally:
                direct.handle.close()
        if self._handle is not None:
            handle, self._handle = self._handle, None
            handle.close()

    def finish(self) -> None:
        """After closing: zero the PEAK chunk's time stamp of a .wav so equal samples give equal bytes."""
        if self.format == "wav":
            zero_peak_time_stamp(self.temporary)


#: Added to and taken from a float64 to round it to an integer, half to even (exact for |x| < 2^51).
_ROUNDING_SHIFT = 1.5 * 2.0**52


def quantize(values: np.ndarray, factor: float) -> np.ndarray:
    """``numpy.rint(values x factor)`` as a new float64 array, in three cheap passes.

    Adding and subtracting 1.5 x 2^52 rounds a float64 of magnitude below
    2^51 to the nearest integer, ties to even (IEEE 754 round-to-nearest
    arithmetic), exactly as ``numpy.rint`` does (up to the sign of a zero);
    larger magnitudes come out within a few units of the product, so they
    stay beyond any PCM full scale and are refused as before.  Much faster
    than ``numpy.rint`` on machines where that is not vectorised.

    Parameters
    ----------
    values : numpy.ndarray
        Physical values (g), float64.
    factor : float
        Counts per g.

    Returns
    -------
    numpy.ndarray
        float64 counts (whole numbers).

    Examples
    --------
    >>> quantize(np.array([0.5, 1.5, -2.5, 2.6]), 1.0).tolist()
    [0.0, 2.0, -2.0, 3.0]

    References
    ----------
    IEEE 754-2008, 4.3.1 (round to nearest, ties to even); D. Goldberg, "What every computer
    scientist should know about floating-point arithmetic", ACM Computing Surveys 23(1), 1991.
    """
    counts = np.multiply(values, factor)
    counts += _ROUNDING_SHIFT
    counts -= _ROUNDING_SHIFT
    return counts


class EncodedWav:
    """A chunk of a direct .wav's data: its bytes, and (float) its largest |sample| and where it first occurs.

    Examples
    --------
    >>> EncodedWav(b"", 0.0, 0, 0).count
    0

    References
    ----------
    RIFF WAVE PEAK chunk.
    """

    __slots__ = ("data", "peak", "peak_index", "count")

    def __init__(self, data, peak: float, peak_index: int, count: int):
        self.data, self.peak, self.peak_index, self.count = data, peak, peak_index, count


class DirectWavWriter:
    """Write a mono RIFF WAVE file byte for byte as libsndfile would, without its per-sample conversion.

    The header is libsndfile's own (written once for no samples, its PEAK time
    stamp zeroed); the sizes, the ``fact`` sample count and the PEAK value and
    position are filled in at :meth:`finish`, the samples are written as the
    little-endian bytes of the data chunk.  :func:`direct_wav_matches` checks
    the result against libsndfile before the writer is used.

    Parameters
    ----------
    handle : binary file
        Unbuffered, writable, seekable (an ``open(path, "wb", buffering=0)`` or
        an ``io.BytesIO``), at its start.
    subtype : {"float", "pcm24", "pcm16"}
    rate_hz : int
        Sample rate, Hz.

    Examples
    --------
    >>> import io, numpy as np
    >>> buffer = io.BytesIO()
    >>> writer = DirectWavWriter(buffer, "pcm16", 8000)
    >>> writer.write(writer.encode_counts(np.array([1.0, -2.0])))
    >>> writer.finish()
    >>> buffer.getvalue()[-4:].hex()
    '0100feff'

    References
    ----------
    Microsoft/IBM RIFF WAVE format (fmt, fact, PEAK and data chunks); libsndfile's
    WAV writer (float PEAK: the largest |sample| and its first position).
    """

    def __init__(self, handle, subtype: str, rate_hz: int):
        self.handle, self.subtype = handle, subtype
        self.header, self._fields = _wav_header_template(subtype, int(rate_hz))
        self.data_bytes = 0
        self.samples = 0
        self.peak = 0.0
        self.peak_position = 0
        self.handle.seek(len(self.header))  # the header is written last, when its sizes and PEAK are known

    def encode_float(self, normalised: np.ndarray) -> EncodedWav:
        """float32 samples (shape (m,), full scale 1.0) as data bytes, with their largest |sample| and its first index.

        Examples
        --------
        >>> import io, numpy as np
        >>> DirectWavWriter(io.BytesIO(), "float", 8000).encode_float(np.array([0.5, -0.75])).peak_index
        1

        References
        ----------
        IEEE 754 binary32, little-endian (WAVE_FORMAT_IEEE_FLOAT).
        """
        data = normalised.astype("<f4", copy=False)
        if not data.size:
            return EncodedWav(data, 0.0, 0, 0)
        magnitude = np.abs(data)
        index = int(np.argmax(magnitude))
        return EncodedWav(data, float(magnitude[index]), index, data.size)

    def encode_counts(self, counts: np.ndarray) -> EncodedWav:
        """Whole-number float64 counts (shape (m,), within the subtype's range) as data bytes.

        Examples
        --------
        >>> import io, numpy as np
        >>> bytes(DirectWavWriter(io.BytesIO(), "pcm24", 8000).encode_counts(np.array([1.0, -1.0])).data).hex()
        '010000ffffff'

        References
        ----------
        RIFF WAVE PCM: two's-complement little-endian integers, 24-bit packed in three bytes.
        """
        if self.subtype == "pcm16":
            return EncodedWav(counts.astype("<i2"), 0.0, 0, counts.size)
        packed = counts.astype("<i4").view(np.uint8).reshape(-1, 4)[:, :3]  # low three bytes, little-endian
        return EncodedWav(np.ascontiguousarray(packed), 0.0, 0, counts.size)

    def _write(self, data) -> None:
        view = memoryview(np.ascontiguousarray(data).reshape(-1)).cast("B")  # (0, 3) packed bytes: empty, castable
        while view.nbytes:
            done = self.handle.write(view)
            if done is None:  # pragma: no cover - only non-blocking files return None
                raise OSError("the file took no bytes")
            view = view[done:]

    def write(self, chunk: EncodedWav) -> None:
        """Append a chunk made by :meth:`encode_float` or :meth:`encode_counts` (in order).

        Examples
        --------
        See the class.

        References
        ----------
        RIFF WAVE data chunk.
        """
        if chunk.count and chunk.peak > self.peak:  # strictly larger: the first position of the largest stays
            self.peak, self.peak_position = chunk.peak, self.samples + chunk.peak_index
        self._write(chunk.data)
        self.data_bytes += np.asarray(chunk.data).nbytes
        self.samples += chunk.count

    def finish(self) -> None:
        """Pad the data chunk to an even length and write the final header (the handle stays open).

        Examples
        --------
        See the class.

        References
        ----------
        RIFF chunks are padded to an even size; RIFF, data, fact and PEAK fields as libsndfile writes them.
        """
        if self.data_bytes % 2:
            self._write(b"\0")
        header = bytearray(self.header)
        fields = self._fields
        header[4:8] = (len(self.header) + self.data_bytes + self.data_bytes % 2 - 8).to_bytes(4, "little")
        header[fields["data"]:fields["data"] + 4] = self.data_bytes.to_bytes(4, "little")
        if "fact" in fields:
            header[fields["fact"]:fields["fact"] + 4] = self.samples.to_bytes(4, "little")
        if "PEAK" in fields:
            offset = fields["PEAK"] + 8  # after the version and the time stamp
            header[offset:offset + 4] = np.array(self.peak, "<f4").tobytes()
            header[offset + 4:offset + 8] = self.peak_position.to_bytes(4, "little")
        end = self.handle.tell()
        self.handle.seek(0)
        self._write(header)
        self.handle.seek(end)


def _direct_writer(path: Path, subtype: str, rate_hz: int) -> "DirectWavWriter":
    """A :class:`DirectWavWriter` on ``path`` opened unbuffered for writing (the file closed again if it fails)."""
    handle = open(path, "wb", buffering=0)
    try:
        return DirectWavWriter(handle, subtype, rate_hz)
    except BaseException:
        handle.close()
        raise


def _wav_header_template(subtype: str, rate_hz: int) -> tuple[bytes, dict]:
    """libsndfile's mono .wav header for no samples (PEAK time stamp zeroed), and the offsets of its fields.

    Offsets: ``data`` (data size), ``fact`` (sample count), ``PEAK`` (chunk
    body); the header ends where the samples begin.
    """
    import soundfile

    buffer = io.BytesIO()
    with soundfile.SoundFile(buffer, mode="w", samplerate=rate_hz, channels=1, format="WAV",
                             subtype=SOUNDFILE_SUBTYPE[subtype]):
        pass
    header = bytearray(buffer.getvalue())
    if header[:4] != b"RIFF" or header[8:12] != b"WAVE":
        raise ValueError("libsndfile wrote no RIFF WAVE header")
    fields, position = {}, 12
    while position + 8 <= len(header):
        name, size = bytes(header[position:position + 4]).decode("latin-1"), int.from_bytes(header[position + 4:position + 8], "little")
        fields[name] = position + 8 if name != "data" else position + 4
        if name == "data":
            if position + 8 != len(header):
                raise ValueError("libsndfile's empty .wav has bytes after the data chunk header")
            break
        position += 8 + size + size % 2
    if "data" not in fields:
        raise ValueError("libsndfile's empty .wav has no data chunk")
    if "PEAK" in fields:
        header[fields["PEAK"] + 4:fields["PEAK"] + 8] = bytes(4)  # the time stamp, as zero_peak_time_stamp leaves it
    return bytes(header), fields


_DIRECT_WAV_CHECKED: dict = {}


def can_write_directly(file_format: str, subtype: str, rate_hz: int, channels: int = 1) -> bool:
    """Whether a file is written by :class:`DirectWavWriter`: a mono .wav whose bytes match libsndfile's.

    Parameters
    ----------
    file_format : str
        ``wav``, ``flac``, ...
    subtype : str
        ``float``, ``pcm24`` or ``pcm16``.
    rate_hz : int
        Sample rate, Hz.
    channels : int
        Channels of the file.

    Returns
    -------
    bool

    Examples
    --------
    >>> can_write_directly("flac", "pcm24", 8000)
    False

    References
    ----------
    See :func:`direct_wav_matches`.
    """
    return file_format == "wav" and int(channels) == 1 and direct_wav_matches(subtype, int(rate_hz))



def direct_wav_matches(subtype: str, rate_hz: int = 8000) -> bool:
    """Whether :class:`DirectWavWriter` writes the same bytes as libsndfile for this subtype and rate.

    Checked once per (subtype, rate) in memory on a short record with a
    repeated peak, a negative peak and an odd byte count, in three chunks;
    when anything differs (another libsndfile), .wav files are written by
    libsndfile.

    Examples
    --------
    >>> direct_wav_matches("pcm16", 8000) in (True, False)
    True

    References
    ----------
    libsndfile ``sf_write_float`` / ``sf_write_int`` / ``sf_write_short`` (WAV).
    """
    key = (subtype, int(rate_hz))
    if key not in _DIRECT_WAV_CHECKED:
        _DIRECT_WAV_CHECKED[key] = _direct_wav_check(subtype, int(rate_hz))
    return _DIRECT_WAV_CHECKED[key]


def _direct_wav_check(subtype: str, rate_hz: int) -> bool:
    import soundfile

    values = np.random.default_rng(20261204).uniform(-0.9, 0.9, 1001)
    values[[7, 400, 905]] = (-0.95, 0.95, -0.95)  # the largest |value|, first negative, repeated in later chunks
    try:
        reference = io.BytesIO()
        with soundfile.SoundFile(reference, mode="w", samplerate=rate_hz, channels=1, format="WAV",
                                 subtype=SOUNDFILE_SUBTYPE[subtype]) as handle:
            direct = io.BytesIO()
            writer = DirectWavWriter(direct, subtype, rate_hz)
            for part in np.split(values, [300, 700]):
                if subtype == "float":
                    samples = part.astype(np.float32)
                    handle.write(samples)
                    writer.write(writer.encode_float(samples))
                else:
                    counts = quantize(part, 2.0 ** (PCM_BITS[subtype] - 1))
                    handle.write(counts.astype(np.int16) if subtype == "pcm16" else counts.astype(np.int32) << 8)
                    writer.write(writer.encode_counts(counts))
        writer.finish()
    except Exception:  # noqa: BLE001 - any surprise means: leave the writing to libsndfile
        return False
    expected = bytearray(reference.getvalue())
    if subtype == "float":
        _zero_peak_time_stamp_bytes(expected)
    return bytes(expected) == direct.getvalue()


def _zero_peak_time_stamp_bytes(data: bytearray) -> None:
    """:func:`zero_peak_time_stamp` on a .wav held in memory."""
    position = 12
    while position + 8 <= len(data) and data[position:position + 4] != b"data":
        size = int.from_bytes(data[position + 4:position + 8], "little")
        if data[position:position + 4] == b"PEAK" and size >= 8:
            data[position + 12:position + 16] = bytes(4)
            return
        position += 8 + size + size % 2


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
