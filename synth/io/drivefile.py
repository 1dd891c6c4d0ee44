"""Drive files: streaming, atomic writers for .wav/.flac/.csv/.npy, their JSON sidecar, and a chunked reader.

Formats (chosen by the file's suffix)
-------------------------------------
``.wav``
    Mono; ``float`` (32-bit float, default), ``pcm24`` or ``pcm16``.
``.flac``
    Mono; ``pcm24`` (default) or ``pcm16``.
``.csv``
    Header row, then ``time_s`` and one column per quantity
    (``acceleration_g`` and optionally ``velocity_m_s``, ``displacement_m``);
    time with 9 decimals, values with 9 significant digits.
``.npy``
    float64, shape (n,) for acceleration alone or (n, q) with columns as in
    the sidecar's ``columns`` (no time column).

Scale
-----
``.wav``/``.flac`` hold normalised samples: a reader that maps full scale to
1.0 (PCM counts divided by 2^(bits-1); floats as stored) gets ``sample`` and
the physical value is ``sample x scale``, with ``scale`` (g) in the sidecar.
The writer converts to integer counts itself (``round(x / scale 2^(bits-1))``),
so ``scale`` is exact and a value that would not fit (a count beyond
``2^(bits-1) - 1``, or a float sample beyond 1) is refused, never clipped.
``.csv``/``.npy`` hold values in their physical units; ``scale`` is 1.

Atomic writing
--------------
Data and sidecar are written to hidden temporary names in the destination
folder (``.NAME.PID.partial``) and renamed over the destination only when
complete, data first, sidecar last (an older sidecar is removed just before
the data is renamed, so an old sidecar never describes a new file).  A run
that stops with an exception removes its temporary files; a killed run
leaves the destination as it was (and at most a ``.partial`` file).  The next
write to the same destination removes such stale partial files: those whose
writing process no longer runs on this machine and that have not changed for
:data:`STALE_PARTIAL_AGE_S` seconds (a writer on another machine sharing the
folder keeps its file changing).  Killed between the two renames of the
commit (a few microseconds), a run leaves the old data without a sidecar, or
the new data without one; never a sidecar describing the other file.

The sidecar is ``FILE + ".json"``.  :func:`open_drive` reads any of the four
formats back in chunks in constant memory, checking the sidecar against the
file; it does not use the generator.

References
----------
Microsoft/IBM RIFF WAVE format (PCM and IEEE float data); FLAC format
specification (xiph.org); NumPy ``.npy`` format (NEP 1); RFC 4180 (CSV);
RFC 8259 (JSON).
"""

from __future__ import annotations

import io
import itertools
import json
import math
import os
import re
import shutil
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterator

import numpy as np
import soundfile

from vibsynth import __version__
from vibsynth.errors import InputError

#: File formats by suffix.
FORMATS = ("wav", "flac", "csv", "npy")

#: Sample formats per file format; the first is the default.
SUBTYPES = {
    "wav": ("float", "pcm24", "pcm16"),
    "flac": ("pcm24", "pcm16"),
    "csv": ("text",),
    "npy": ("float64",),
}

#: Column name (with unit) of each quantity in csv headers and sidecars.
COLUMN_NAMES = {"acceleration": "acceleration_g", "velocity": "velocity_m_s", "displacement": "displacement_m"}
#: Unit of each quantity.
QUANTITY_UNITS = {"acceleration": "g", "velocity": "m/s", "displacement": "m"}

#: Headroom above the record's peak when full scale is set from the peak (0.1 %).
DEFAULT_HEADROOM = 1e-3

#: Version of the sidecar layout.
SIDECAR_VERSION = 1

_PCM_BITS = {"pcm24": 24, "pcm16": 16}
_SOUNDFILE_SUBTYPE = {"float": "FLOAT", "pcm24": "PCM_24", "pcm16": "PCM_16"}
_BYTES_PER_SAMPLE = {"float": 4, "pcm24": 3, "pcm16": 2}
_WAV_MAX_DATA_BYTES = 2**32 - 1 - 4096  # RIFF size field is 32 bits; keep room for the header
_CSV_TIME_FORMAT = "%.9f"
_CSV_VALUE_FORMAT = "%.9g"
#: Longest text of one value written with _CSV_VALUE_FORMAT: sign, 9 digits, point, "e-" and 3 exponent digits.
_CSV_VALUE_MAX_CHARS = 16
#: FLAC bound: per-frame overhead (frame header <= 16 bytes, subframe header, byte padding, CRC-16) and the
#: smallest block size libFLAC uses at any compression level (1152 samples), plus room for metadata blocks.
_FLAC_FRAME_OVERHEAD_BYTES = 20
_FLAC_MIN_BLOCK_SAMPLES = 1152
_FLAC_METADATA_BYTES = 64 * 1024
#: A partial file of a process that no longer runs, unchanged for this long (s), is removed as stale.
STALE_PARTIAL_AGE_S = 60.0
#: Room kept for the JSON sidecar (a few kB in practice).
SIDECAR_ALLOWANCE_BYTES = 64 * 1024


# ----------------------------------------------------------------- naming
def drive_format(path) -> str:
    """The drive format named by a file's suffix: ``wav``, ``flac``, ``csv`` or ``npy``.

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    str

    Raises
    ------
    InputError
        For any other suffix.

    References
    ----------
    File suffix conventions of the formats listed in the module docstring.
    """
    suffix = Path(path).suffix.lower().lstrip(".")
    if suffix not in FORMATS:
        raise InputError(
            f"unknown drive file type {Path(path).suffix or '(no suffix)'!r}; use .wav, .flac, .csv or .npy", str(path)
        )
    return suffix


def sidecar_path(path) -> Path:
    """The sidecar of a drive file: the file's name plus ``.json`` (``drive.flac`` -> ``drive.flac.json``)."""
    path = Path(path)
    return path.with_name(path.name + ".json")


def check_subtype(file_format: str, subtype: str | None) -> str:
    """The sample format to use (default per file format), or an InputError naming the allowed ones."""
    allowed = SUBTYPES[file_format]
    if subtype is None:
        return allowed[0]
    text = str(subtype).strip().lower()
    if text not in allowed:
        raise InputError(f"subtype {subtype!r} is not available for .{file_format}; use {', '.join(allowed)}", "subtype")
    return text


def full_scale_from_peak(peak: float, headroom: float = DEFAULT_HEADROOM) -> float:
    """Full scale (the physical value of sample 1.0) for a record whose largest |value| is ``peak``.

    Parameters
    ----------
    peak : float
        Largest absolute value in the record (g).
    headroom : float
        Fraction above the peak (default 0.001).

    Returns
    -------
    float
        ``peak (1 + headroom)`` in g (1.0 for an all-zero record).

    References
    ----------
    Peak normalisation of sampled data (no clipping by construction).
    """
    peak = float(peak)
    if not math.isfinite(peak) or peak < 0:
        raise InputError(f"record peak {peak!r} must be a finite number >= 0", "scale")
    return peak * (1.0 + float(headroom)) if peak > 0 else 1.0


# ----------------------------------------------------------------- writing
def _partial_name(path: Path, tag: str = "") -> Path:
    for attempt in itertools.count():
        extra = f".{attempt}" if attempt else ""
        candidate = path.with_name(f".{path.name}{tag}.{os.getpid()}{extra}.partial")
        try:
            descriptor = os.open(candidate, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o666)
        except FileExistsError:
            continue
        os.close(descriptor)
        return candidate
    raise AssertionError("unreachable")  # pragma: no cover


def _format_bytes(count: int) -> str:
    for unit, size in (("TB", 10**12), ("GB", 10**9), ("MB", 10**6), ("kB", 10**3)):
        if count >= size:
            return f"{count / size:.3g} {unit}"
    return f"{count} bytes"


def estimate_file_bytes(file_format: str, subtype: str, samples: int, quantities=("acceleration",),
                        rate_hz: float = 1.0) -> tuple[int, bool]:
    """Size of a drive file before it is written: exact for .wav/.npy, an upper bound for .flac/.csv.

    Parameters
    ----------
    file_format : {"wav", "flac", "csv", "npy"}
    subtype : str
        Sample format (see :data:`SUBTYPES`).
    samples : int
        Number of samples (rows).
    quantities : sequence of str
        Columns (.csv/.npy).
    rate_hz : float
        Sample rate in Hz (sets the width of the .csv time column).

    Returns
    -------
    (int, bool)
        Bytes, and whether the figure is exact (False: an upper bound).

    Notes
    -----
    .wav: the header libsndfile writes (measured by writing an empty file in
    memory) plus the sample bytes, padded to an even length (RIFF chunks are
    word aligned).  .npy: the NEP 1 header plus 8 bytes per value.  .flac:
    the size of verbatim (uncompressed) subframes, which the encoder never
    exceeds since verbatim is always one of its candidates, plus frame
    overhead and metadata.  .csv: the widest row the format strings can give.

    References
    ----------
    Microsoft/IBM RIFF WAVE format; NumPy NEP 1 (.npy format); FLAC format
    specification (xiph.org), verbatim subframes and frame header layout.
    """
    count = int(samples)
    columns = len(tuple(quantities))
    if file_format == "npy":
        buffer = io.BytesIO()
        shape = (count,) if columns == 1 else (count, columns)
        np.lib.format.write_array_header_1_0(buffer, {"descr": "<f8", "fortran_order": False, "shape": shape})
        return buffer.tell() + 8 * count * columns, True
    if file_format == "wav":
        buffer = io.BytesIO()
        with soundfile.SoundFile(buffer, mode="w", samplerate=8000, channels=1, format="WAV",
                                 subtype=_SOUNDFILE_SUBTYPE[subtype]):
            pass
        data = count * _BYTES_PER_SAMPLE[subtype]
        return len(buffer.getvalue()) + data + data % 2, True
    if file_format == "flac":
        frames = -(-count // _FLAC_MIN_BLOCK_SAMPLES)
        return (count * _BYTES_PER_SAMPLE[subtype] + frames * _FLAC_FRAME_OVERHEAD_BYTES
                + _FLAC_METADATA_BYTES), False
    last_time = len(_CSV_TIME_FORMAT % (max(count - 1, 0) / float(rate_hz)))
    header = len("time_s") + sum(1 + len(COLUMN_NAMES.get(q, q)) for q in quantities) + 1
    return header + count * (last_time + columns * (1 + _CSV_VALUE_MAX_CHARS) + 1), False


def check_free_space(path, needed_bytes: int, exact: bool = True) -> None:
    """Refuse up front when the destination's folder cannot hold a file of ``needed_bytes``.

    Parameters
    ----------
    path : str or os.PathLike
        Destination file (its folder must exist).
    needed_bytes : int
        Size of the file to write, bytes (a sidecar allowance is added).
    exact : bool
        Whether ``needed_bytes`` is exact or an upper bound (for the message).

    Raises
    ------
    InputError
        Naming the size needed, the space free and the folder.

    References
    ----------
    POSIX statvfs (free blocks available to unprivileged users), through
    :func:`shutil.disk_usage`.
    """
    folder = Path(path).parent
    try:
        free = int(shutil.disk_usage(folder).free)
    except OSError:  # the file system will not say; the write itself will tell
        return
    needed = int(needed_bytes) + SIDECAR_ALLOWANCE_BYTES
    if needed > free:
        size = _format_bytes(needed) if exact else f"up to {_format_bytes(needed)}"
        raise InputError(
            f"not enough disk space: the file and its sidecar need {size} ({needed} bytes) but folder "
            f"{str(folder)!r} has {_format_bytes(free)} ({free} bytes) free; free some space, write to another "
            "folder, or ask for a shorter record",
            str(path),
        )


def _process_runs(pid: int) -> bool:
    try:
        os.kill(pid, 0)  # signal 0: existence and permission check only (POSIX)
    except ProcessLookupError:
        return False
    except (OSError, OverflowError):  # not ours to signal, or cannot tell: treat as running
        return True
    return True


def remove_stale_partials(path, min_age_s: float = STALE_PARTIAL_AGE_S) -> list:
    """Remove the temporary files a killed writer left for this destination (see "Atomic writing").

    Parameters
    ----------
    path : str or os.PathLike
        Destination drive file.
    min_age_s : float
        A partial file must be unchanged for this many seconds to be stale.

    Returns
    -------
    list of pathlib.Path
        The files removed (none on systems other than POSIX).

    References
    ----------
    POSIX kill(2) with signal 0 (process existence check).
    """
    path = Path(path)
    if os.name != "posix":
        return []
    pattern = re.compile(rf"\.{re.escape(path.name)}(?:\.json)?\.(\d+)(?:\.\d+)?\.partial")
    removed = []
    try:
        entries = list(os.scandir(path.parent))
    except OSError:
        return removed
    now = time.time()
    for entry in entries:
        match = pattern.fullmatch(entry.name)
        if not match or int(match.group(1)) == os.getpid() or _process_runs(int(match.group(1))):
            continue
        try:
            if not entry.is_file(follow_symlinks=False) or now - entry.stat(follow_symlinks=False).st_mtime < min_age_s:
                continue
            os.unlink(entry.path)
        except OSError:
            continue
        removed.append(Path(entry.path))
    return removed


def check_drive_request(path, *, rate_hz: float, samples: int, quantities=("acceleration",), subtype=None,
                        scale: float = 1.0) -> dict:
    """Check that a drive file can be written as asked, before any work is done (no file is created).

    Parameters
    ----------
    path, rate_hz, samples, quantities, subtype, scale
        As for :class:`DriveWriter`.

    Returns
    -------
    dict
        ``format``, ``subtype``, ``quantities``, ``rate_hz``, ``samples``, ``scale`` as the writer will use them.

    Raises
    ------
    InputError
        Unknown suffix or sample format, columns the format cannot hold, a
        rate the format cannot store, a .wav beyond 4 GB, a missing folder,
        or a folder without the disk space the file needs (see
        :func:`estimate_file_bytes`).

    References
    ----------
    RIFF WAVE (32-bit chunk sizes), FLAC format specification.
    """
    path = Path(path)
    file_format = drive_format(path)
    subtype = check_subtype(file_format, subtype)
    quantities = tuple(quantities)
    for quantity in quantities:
        if quantity not in COLUMN_NAMES:
            raise InputError(f"quantity {quantity!r} is not one of {', '.join(COLUMN_NAMES)}", "quantities")
    if not quantities or quantities[0] != "acceleration":
        raise InputError("the first column must be acceleration", "quantities")
    if len(quantities) > 1 and file_format in ("wav", "flac"):
        raise InputError(
            f".{file_format} drive files hold acceleration only; write velocity/displacement to .csv or .npy", str(path)
        )
    rate = float(rate_hz)
    if not (math.isfinite(rate) and rate > 0):
        raise InputError(f"rate {rate_hz!r} Hz must be a finite number > 0", "rate")
    if file_format in ("wav", "flac") and rate != round(rate):
        raise InputError(f".{file_format} files store whole-number rates; {rate:g} Hz is not one", "rate")
    count = int(samples)
    if count < 1:
        raise InputError(f"sample count {samples!r} must be >= 1", "samples")
    scale = float(scale)
    if not (math.isfinite(scale) and scale > 0):
        raise InputError(f"scale {scale!r} must be a finite number > 0", "scale")
    if file_format in ("csv", "npy") and scale != 1.0:
        raise InputError(f".{file_format} files hold physical values; scale must be 1, not {scale:g}", "scale")
    if file_format == "wav" and count * _BYTES_PER_SAMPLE[subtype] > _WAV_MAX_DATA_BYTES:
        longest = _WAV_MAX_DATA_BYTES // _BYTES_PER_SAMPLE[subtype] / rate
        raise InputError(
            f"a .wav file holds at most {longest:.0f} s of {subtype} samples at {rate:g} Hz (4 GB limit); "
            "use .flac or .npy",
            str(path),
        )
    if not path.parent.is_dir():
        raise InputError(f"folder {str(path.parent)!r} does not exist; create it first", str(path))
    if path.is_dir():
        raise InputError("is a folder; give a file name such as drive.flac", str(path))
    check_free_space(path, *estimate_file_bytes(file_format, subtype, count, quantities, rate))
    return {"format": file_format, "subtype": subtype, "quantities": quantities, "rate_hz": rate,
            "samples": count, "scale": scale}


class DriveWriter:
    """Write one drive file chunk by chunk, then its sidecar, atomically.

    Parameters
    ----------
    path : str or os.PathLike
        Destination; the suffix chooses the format.
    rate_hz : float
        Sample rate in Hz (a whole number for .wav/.flac).
    samples : int
        Number of samples that will be written (checked at :meth:`commit`).
    quantities : sequence of str
        Columns: ``acceleration`` first, then ``velocity``/``displacement``
        (those only in .csv/.npy).
    subtype : str, optional
        Sample format (see :data:`SUBTYPES`); default per format.
    scale : float
        .wav/.flac: g value of sample 1.0 (e.g. from :func:`full_scale_from_peak`).
        .csv/.npy: must be 1.0 (values are written in physical units).
    sidecar : dict, optional
        Extra sidecar keys (seed, options, profile, ...); the writer adds
        ``unit``, ``scale``, ``rate``, ``samples``, ``duration_s``, ``format``,
        ``subtype``, ``columns``, ``units``, ``sidecar_version`` and ``tool``.

    Notes
    -----
    Use as a context manager: leaving the block by an exception removes the
    temporary files; call :meth:`commit` to publish.  Values are physical
    (g, m/s, m), float arrays of shape (m,) or (m, q).

    References
    ----------
    See the module docstring.
    """

    def __init__(self, path, *, rate_hz: float, samples: int, quantities=("acceleration",), subtype=None,
                 scale: float = 1.0, sidecar: dict | None = None):
        request = check_drive_request(path, rate_hz=rate_hz, samples=samples, quantities=quantities,
                                      subtype=subtype, scale=scale)
        self.path = Path(path)
        self.format = request["format"]
        self.subtype = request["subtype"]
        self.quantities = request["quantities"]
        self.rate_hz = request["rate_hz"]
        self.samples = request["samples"]
        self.scale = request["scale"]
        self.extra = dict(sidecar or {})
        self.written = 0
        self._peak = 0.0
        self._committed = False
        remove_stale_partials(self.path)
        self._temporary = _partial_name(self.path)
        self._sidecar_temporary: Path | None = None
        self._handle = None
        try:
            self._open()
        except BaseException:
            self.abort()
            raise

    # ---------------------------------------------------------- opening
    def _open(self) -> None:
        if self.format in ("wav", "flac"):
            try:
                self._handle = soundfile.SoundFile(
                    str(self._temporary), mode="w", samplerate=int(round(self.rate_hz)), channels=1,
                    subtype=_SOUNDFILE_SUBTYPE[self.subtype], format=self.format.upper(),
                )
            except (RuntimeError, soundfile.LibsndfileError, ValueError) as error:
                raise InputError(
                    f"cannot write .{self.format} ({self.subtype}) at {self.rate_hz:g} Hz: {error}", str(self.path)
                ) from None
        elif self.format == "npy":
            self._handle = open(self._temporary, "wb")
            shape = (self.samples,) if len(self.quantities) == 1 else (self.samples, len(self.quantities))
            header = {"descr": np.lib.format.dtype_to_descr(np.dtype("<f8")), "fortran_order": False, "shape": shape}
            np.lib.format.write_array_header_1_0(self._handle, header)
        else:
            self._handle = open(self._temporary, "w", encoding="ascii", newline="")
            names = ["time_s"] + [COLUMN_NAMES[q] for q in self.quantities]
            self._handle.write(",".join(names) + "\n")
            self._csv_row = ",".join([_CSV_TIME_FORMAT] + [_CSV_VALUE_FORMAT] * len(self.quantities)) + "\n"

    # ---------------------------------------------------------- writing
    def write(self, chunk) -> None:
        """Append samples: physical values, shape (m,) or (m, q) with one column per quantity."""
        values = np.asarray(chunk, dtype=np.float64)
        if values.ndim == 1:
            values = values[:, None]
        if values.ndim != 2 or values.shape[1] != len(self.quantities):
            raise InputError(
                f"chunk of shape {np.shape(chunk)} does not match {len(self.quantities)} column(s)", str(self.path)
            )
        count = values.shape[0]
        if self.written + count > self.samples:
            raise InputError(f"more than the announced {self.samples} samples written", str(self.path))
        if not np.all(np.isfinite(values)):
            bad = int(np.flatnonzero(~np.all(np.isfinite(values), axis=1))[0])
            raise InputError(f"sample {self.written + bad} is not a finite number", str(self.path))
        if count:
            self._peak = max(self._peak, float(np.max(np.abs(values[:, 0]))))
        if self.format in ("wav", "flac"):
            self._write_audio(values[:, 0])
        elif self.format == "npy":
            self._handle.write(np.ascontiguousarray(values if len(self.quantities) > 1 else values[:, 0], dtype="<f8").tobytes())
        else:
            times = (np.arange(self.written, self.written + count) / self.rate_hz)[:, None]
            table = np.hstack([times, values])
            self._handle.write((self._csv_row * count) % tuple(table.ravel().tolist()))
        self.written += count

    def _refuse(self, values: np.ndarray, normalised: np.ndarray, limit: float) -> None:
        over = np.flatnonzero(~(np.abs(normalised) <= limit))
        if over.size:
            index = int(over[0])
            value = float(values[index])
            raise InputError(
                f"sample {self.written + index} is {value:.6g} g, beyond the full scale of {self.scale:.6g} g; "
                "raise the full scale (or let it follow the record's peak) - samples are never clipped",
                str(self.path),
            )

    def _write_audio(self, values: np.ndarray) -> None:
        with np.errstate(over="ignore"):  # a value beyond full scale is refused just below
            if self.subtype == "float":
                normalised = (values / self.scale).astype(np.float32)
                self._refuse(values, normalised, 1.0)
                self._handle.write(normalised)
                return
            bits = _PCM_BITS[self.subtype]
            counts = np.rint(values * (2.0 ** (bits - 1) / self.scale))
        self._refuse(values, counts / 2.0 ** (bits - 1), (2 ** (bits - 1) - 1) / 2.0 ** (bits - 1))
        if bits == 16:
            self._handle.write(counts.astype(np.int16))
        else:  # libsndfile stores the top 24 bits of a left-justified int32
            self._handle.write(counts.astype(np.int32) << 8)

    # ---------------------------------------------------------- finishing
    def sidecar(self) -> dict:
        """The sidecar as it will be written (the writer's own keys override ``sidecar`` extras)."""
        data = {"sidecar_version": SIDECAR_VERSION}
        data.update(self.extra)
        data.update(
            {
                "unit": "g",
                "scale": self.scale,
                "rate": self.rate_hz,
                "samples": self.samples,
                "duration_s": self.samples / self.rate_hz,
                "format": self.format,
                "subtype": self.subtype,
                "columns": (["time_s"] if self.format == "csv" else []) + [COLUMN_NAMES[q] for q in self.quantities],
                "units": {COLUMN_NAMES[q]: QUANTITY_UNITS[q] for q in self.quantities},
                "peak_g": self._peak,
            }
        )
        data.setdefault("tool", {"name": "vibsynth", "version": __version__})
        return data

    def commit(self) -> dict:
        """Close the data, write the sidecar, and rename both into place (data first). Returns the sidecar."""
        if self.written != self.samples:
            raise InputError(f"{self.written} samples written, {self.samples} announced", str(self.path))
        self._close()
        if self.format == "wav":
            _zero_peak_time_stamp(self._temporary)
        sidecar = self.sidecar()
        self._sidecar_temporary = _partial_name(self.path, ".json")
        with open(self._sidecar_temporary, "w", encoding="utf-8") as handle:
            json.dump(sidecar, handle, indent=2, allow_nan=False)
            handle.write("\n")
            handle.flush()
            os.fsync(handle.fileno())
        with open(self._temporary, "rb") as handle:
            os.fsync(handle.fileno())
        final_sidecar = sidecar_path(self.path)
        if final_sidecar.exists():
            final_sidecar.unlink()
        os.replace(self._temporary, self.path)
        os.replace(self._sidecar_temporary, final_sidecar)
        self._committed = True
        return sidecar

    def _close(self) -> None:
        if self._handle is not None:
            handle, self._handle = self._handle, None
            handle.close()

    def abort(self) -> None:
        """Close and remove the temporary files (the destination is untouched)."""
        try:
            self._close()
        except Exception:  # noqa: BLE001 - cleaning up after a failure; the first error matters
            pass
        for temporary in (self._temporary, self._sidecar_temporary):
            if temporary is not None and not self._committed:
                try:
                    os.unlink(temporary)
                except FileNotFoundError:
                    pass

    def __enter__(self) -> "DriveWriter":
        return self

    def __exit__(self, kind, value, traceback) -> None:
        if kind is not None or not self._committed:
            self.abort()


def _zero_peak_time_stamp(path: Path) -> None:
    """Zero the time stamp libsndfile puts in a float WAV's PEAK chunk, so equal samples give equal bytes.

    The PEAK chunk holds a version, the writing time (s since 1970) and each channel's peak
    value and position; only the time is cleared (0: unknown).
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


def write_drive(path, chunks, *, rate_hz: float, samples: int, quantities=("acceleration",), subtype=None,
                scale: float = 1.0, sidecar: dict | None = None, progress=None) -> dict:
    """Write an iterable of chunks to a drive file with its sidecar, atomically.

    Parameters
    ----------
    path, rate_hz, samples, quantities, subtype, scale, sidecar
        As for :class:`DriveWriter`.
    chunks : iterable of numpy.ndarray
        Physical values, shape (m,) or (m, q).
    progress : callable, optional
        Called with the number of samples after each chunk.

    Returns
    -------
    dict
        The sidecar written.

    References
    ----------
    See the module docstring.
    """
    with DriveWriter(path, rate_hz=rate_hz, samples=samples, quantities=quantities, subtype=subtype,
                     scale=scale, sidecar=sidecar) as writer:
        for chunk in chunks:
            writer.write(chunk)
            if progress is not None:
                progress(len(chunk))
        return writer.commit()


# ----------------------------------------------------------------- reading
@dataclass(frozen=True)
class DriveFile:
    """A drive file opened for reading, with what its sidecar (or the caller) says about it.

    Attributes
    ----------
    path : pathlib.Path
    format : str
        ``wav``, ``flac``, ``csv`` or ``npy``.
    subtype : str
    rate_hz : float
        Sample rate in Hz.
    scale : float
        Physical value (g) of sample 1.0 (1 for .csv/.npy).
    samples : int
        Number of samples.
    quantities : tuple of str
        Data columns (``acceleration`` first).
    sidecar : dict or None
        The sidecar as read (None when there is none).
    ramp_in_s, ramp_out_s : float
        Ramps recorded in the sidecar (0 when absent); verification judges
        the steady part between them.

    References
    ----------
    See the module docstring.
    """

    path: Path
    format: str
    subtype: str
    rate_hz: float
    scale: float
    samples: int
    quantities: tuple
    sidecar: dict | None = field(default=None, compare=False)
    ramp_in_s: float = 0.0
    ramp_out_s: float = 0.0
    _data_offset: int = field(default=0, repr=False, compare=False)
    _columns_in_file: int = field(default=1, repr=False, compare=False)
    _dtype: str = field(default="<f8", repr=False, compare=False)

    @property
    def duration_s(self) -> float:
        """Duration ``samples / rate_hz`` in s."""
        return self.samples / self.rate_hz

    @property
    def steady_range(self) -> tuple[int, int]:
        """Samples ``[start, stop)`` between the recorded ramps."""
        start = int(round(self.ramp_in_s * self.rate_hz))
        stop = self.samples - int(round(self.ramp_out_s * self.rate_hz))
        return start, max(stop, start)

    def _column(self, quantity: str) -> int:
        if quantity not in self.quantities:
            raise InputError(
                f"has no {quantity} column; it holds {', '.join(self.quantities)}", str(self.path)
            )
        return self.quantities.index(quantity)

    def iter_chunks(self, chunk_samples: int = 65536, start: int = 0, stop: int | None = None,
                    quantity: str = "acceleration") -> Iterator[np.ndarray]:
        """Physical values of one quantity, samples ``[start, stop)``, in chunks of ``chunk_samples``.

        Parameters
        ----------
        chunk_samples : int
            Samples per chunk (the last may be shorter).
        start, stop : int
            Sample range (default: the whole file).
        quantity : str
            ``acceleration`` (g), ``velocity`` (m/s) or ``displacement`` (m).

        Yields
        ------
        numpy.ndarray
            float64, shape (m,).
        """
        chunk = int(chunk_samples)
        if chunk < 1:
            raise InputError(f"chunk size {chunk_samples!r} must be >= 1", "chunk_samples")
        stop = self.samples if stop is None else int(stop)
        start = int(start)
        if not 0 <= start <= stop <= self.samples:
            raise InputError(f"sample range [{start}, {stop}) must lie inside [0, {self.samples}]", str(self.path))
        column = self._column(quantity)
        if self.format in ("wav", "flac"):
            return self._finite(self._iter_audio(chunk, start, stop), start)
        if self.format == "npy":
            return self._finite(self._iter_npy(chunk, start, stop, column), start)
        return self._finite(self._iter_csv(chunk, start, stop, column), start)

    def _finite(self, chunks: Iterator[np.ndarray], start: int) -> Iterator[np.ndarray]:
        position = start
        for values in chunks:
            finite = np.isfinite(values)
            if not finite.all():
                bad = int(np.argmin(finite))
                raise InputError(
                    f"sample {position + bad} is {float(values[bad])!r}, not a finite number; a drive file holds finite values",
                    str(self.path),
                )
            position += values.size
            yield values

    def read(self, start: int = 0, stop: int | None = None, quantity: str = "acceleration") -> np.ndarray:
        """The values of one quantity, samples ``[start, stop)``, as one float64 array."""
        parts = list(self.iter_chunks(1 << 20, start, stop, quantity))
        return np.concatenate(parts) if parts else np.zeros(0)

    def _iter_audio(self, chunk: int, start: int, stop: int) -> Iterator[np.ndarray]:
        with soundfile.SoundFile(str(self.path)) as handle:
            position = start
            try:
                handle.seek(start)
            except (RuntimeError, soundfile.LibsndfileError) as error:
                raise InputError(f"cannot read .{self.format} data at sample {start}: {error}", str(self.path)) from None
            while position < stop:
                count = min(chunk, stop - position)
                try:
                    data = handle.read(count, dtype="float64", always_2d=True)
                except (RuntimeError, soundfile.LibsndfileError) as error:
                    raise InputError(
                        f"cannot read .{self.format} data after sample {position} (damaged or truncated file?): {error}",
                        str(self.path),
                    ) from None
                if data.shape[0] != count:
                    raise InputError(f"ends after {position + data.shape[0]} samples, expected {self.samples}", str(self.path))
                position += count
                yield data[:, 0] * self.scale

    def _iter_npy(self, chunk: int, start: int, stop: int, column: int) -> Iterator[np.ndarray]:
        dtype = np.dtype(self._dtype)
        width = self._columns_in_file
        with open(self.path, "rb") as handle:
            handle.seek(self._data_offset + start * width * dtype.itemsize)
            position = start
            while position < stop:
                count = min(chunk, stop - position)
                data = np.fromfile(handle, dtype=dtype, count=count * width)
                if data.size != count * width:
                    raise InputError(f"ends after about {position + data.size // width} samples, expected {self.samples}", str(self.path))
                position += count
                yield data.reshape(count, width)[:, column].astype(np.float64) * self.scale

    def _iter_csv(self, chunk: int, start: int, stop: int, column: int) -> Iterator[np.ndarray]:
        try:
            yield from self._iter_csv_rows(chunk, start, stop, column)
        except UnicodeDecodeError as error:
            raise InputError(f"is not a text table (byte {error.start} of a line is not UTF-8)", str(self.path)) from None

    def _iter_csv_rows(self, chunk: int, start: int, stop: int, column: int) -> Iterator[np.ndarray]:
        tolerance = 0.1 / self.rate_hz
        with open(self.path, "r", encoding="utf-8", newline="") as handle:
            lines = (line for line in handle if line.strip() and not line.lstrip().startswith("#"))
            next(lines, None)  # header
            for _ in itertools.islice(lines, start):
                pass
            position = start
            while position < stop:
                count = min(chunk, stop - position)
                block = list(itertools.islice(lines, count))
                if len(block) != count:
                    raise InputError(f"ends after {position + len(block)} rows, expected {self.samples}", str(self.path))
                try:
                    table = np.loadtxt(block, delimiter=",", ndmin=2, dtype=np.float64)
                except ValueError:
                    bad = _first_bad_row(block, self._columns_in_file)
                    raise InputError(_bad_csv_row(block, self._columns_in_file), str(self.path),
                                     f"row {position + bad + 2}") from None
                if table.shape[1] != self._columns_in_file:
                    raise InputError(
                        f"rows {position + 2}-{position + count + 1} have {table.shape[1]} columns, the header {self._columns_in_file}",
                        str(self.path),
                    )
                expected = np.arange(position, position + count) / self.rate_hz
                off = np.abs(table[:, 0] - expected) > tolerance
                if np.any(off):
                    row = int(np.flatnonzero(off)[0])
                    raise InputError(
                        f"row {position + row + 2}: time {table[row, 0]:.9g} s does not match sample "
                        f"{position + row} at {self.rate_hz:g} Hz ({expected[row]:.9g} s); the rate disagrees with the file",
                        str(self.path),
                    )
                position += count
                yield table[:, 1 + column] * self.scale


def _first_bad_row(block: list, width: int) -> int:
    for index, line in enumerate(block):
        cells = line.strip().split(",")
        try:
            [float(cell) for cell in cells]
        except ValueError:
            return index
        if len(cells) != width:
            return index
    return 0


def _bad_csv_row(block: list, width: int) -> str:
    line = block[_first_bad_row(block, width)].strip()
    cells = line.split(",")
    if len(cells) != width:
        return f"has {len(cells)} values where the header has {width} columns: {line[:60]!r}"
    return f"{line[:60]!r} is not a row of {width} numbers separated by commas"


def _read_sidecar(path: Path) -> dict | None:
    side = sidecar_path(path)
    if not side.exists():
        return None
    try:
        data = json.loads(side.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as error:
        raise InputError(f"is not valid JSON ({error})", str(side)) from None
    except RecursionError:
        raise InputError("is not a drive sidecar (JSON nested too deeply)", str(side)) from None
    if not isinstance(data, dict):
        raise InputError("must hold a JSON object", str(side))
    for key in ("unit", "scale", "rate", "samples"):
        if key not in data:
            raise InputError(f"has no {key!r} key; a drive sidecar records unit, scale, rate and samples", str(side))
    if data["unit"] != "g":
        raise InputError(f"unit {data['unit']!r} is not supported; drive files hold acceleration in g", str(side), "unit")
    for key in ("scale", "rate"):
        value = data[key]
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value <= 0:
            raise InputError(f"{key} {value!r} must be a number > 0", str(side), key)
    samples = data["samples"]
    if isinstance(samples, bool) or not isinstance(samples, int) or samples < 0:
        raise InputError(f"samples {samples!r} must be a whole number >= 0", str(side), "samples")
    for key in ("ramp_in_s", "ramp_out_s"):
        value = data.get(key, 0.0)
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value < 0:
            raise InputError(f"{key} {value!r} must be a number of seconds >= 0", str(side), key)
    duration = samples / data["rate"]
    ramps = data.get("ramp_in_s", 0.0) + data.get("ramp_out_s", 0.0)
    if ramps > duration * (1 + 1e-9):
        raise InputError(f"ramps of {ramps:g} s in all are longer than the {duration:g} s record", str(side), "ramp_in_s")
    for key, kind, what in (("format", str, "text such as \"flac\""), ("options", dict, "a JSON object"),
                            ("profile", dict, "a JSON object"), ("columns", list, "a list of column names")):
        if key in data and not isinstance(data[key], kind):
            raise InputError(f"{key} must be {what}, got {data[key]!r:.40}", str(side), key)
    if "columns" in data and not all(isinstance(name, str) for name in data["columns"]):
        raise InputError("columns must be a list of column names (text)", str(side), "columns")
    for key in ("kurtosis", "skewness", "clip"):
        value = data.get("options", {}).get(key)
        if value is not None and (isinstance(value, bool) or not isinstance(value, (int, float))
                                  or not math.isfinite(value)):
            raise InputError(f"{key} {value!r:.40} must be a finite number or null", str(side), f"options.{key}")
    return data


def _quantities_from_names(names, where: str) -> tuple:
    lookup = {name: quantity for quantity, name in COLUMN_NAMES.items()}
    quantities = []
    for index, name in enumerate(names):
        quantity = lookup.get(str(name).strip().lower())
        if quantity is None:
            quantity = "acceleration" if index == 0 else str(name).strip()
        quantities.append(quantity)
    return tuple(quantities)


def open_drive(path, rate_hz: float | None = None, scale: float | None = None) -> DriveFile:
    """Open a drive file (.wav, .flac, .csv, .npy) for chunked reading, checked against its sidecar.

    Parameters
    ----------
    path : str or os.PathLike
        The drive file; its sidecar is ``path + ".json"``.
    rate_hz : float, optional
        Sample rate in Hz, needed for .csv/.npy without a sidecar; when given
        with a sidecar (or a .wav/.flac header) it must agree.
    scale : float, optional
        g value of sample 1.0, needed for .wav/.flac without a sidecar
        (default 1 for .csv/.npy, whose values are in g); must agree with a sidecar.

    Returns
    -------
    DriveFile

    Raises
    ------
    InputError
        Missing or unreadable file; sidecar disagreeing with the file (rate,
        sample count, format); no sidecar and no ``rate_hz``/``scale`` where
        the file cannot tell.

    References
    ----------
    See the module docstring.
    """
    path = Path(path)
    where = str(path)
    file_format = drive_format(path)
    if path.is_dir():
        raise InputError("is a folder, not a drive file", where)
    if not path.is_file():
        raise InputError("no such drive file", where)
    sidecar = _read_sidecar(path)
    side = str(sidecar_path(path))
    if sidecar is not None and sidecar.get("format", file_format) != file_format:
        raise InputError(f"sidecar says format {sidecar['format']!r} but the file is .{file_format}", side, "format")
    for given, key, what in ((rate_hz, "rate", "rate"), (scale, "scale", "scale")):
        if given is not None:
            value = float(given)
            if not (math.isfinite(value) and value > 0):
                raise InputError(f"{what} {given!r} must be a finite number > 0", what)
            if sidecar is not None and not math.isclose(value, float(sidecar[key]), rel_tol=1e-12):
                raise InputError(f"given {what} {value:g} disagrees with the sidecar's {float(sidecar[key]):g}", side, key)
    offset, width, dtype = 0, 1, "<f8"
    names = None
    if file_format in ("wav", "flac"):
        try:
            info = soundfile.info(str(path))
        except (RuntimeError, soundfile.LibsndfileError) as error:
            raise InputError(f"cannot read as .{file_format}: {error}", where) from None
        if info.channels != 1:
            raise InputError(f"has {info.channels} channels; a drive file has one", where)
        header_rate, count = float(info.samplerate), int(info.frames)
        subtype = {"FLOAT": "float", "DOUBLE": "float", "PCM_24": "pcm24", "PCM_16": "pcm16"}.get(info.subtype, info.subtype.lower())
        if rate_hz is not None and float(rate_hz) != header_rate:
            raise InputError(f"given rate {float(rate_hz):g} Hz disagrees with the file header's {header_rate:g} Hz", where)
        rate = header_rate
        if sidecar is None and scale is None:
            raise InputError(
                f"no sidecar {sidecar_path(path).name}; give the full scale in g (--scale) to read a .{file_format} file without one",
                where,
            )
    elif file_format == "npy":
        with open(path, "rb") as handle:
            try:
                version = np.lib.format.read_magic(handle)
                reader = np.lib.format.read_array_header_1_0 if version == (1, 0) else np.lib.format.read_array_header_2_0
                shape, fortran, numpy_dtype = reader(handle)
            except ValueError as error:
                raise InputError(f"is not a readable .npy file ({error})", where) from None
            offset = handle.tell()
        if fortran or numpy_dtype.kind != "f" or len(shape) not in (1, 2):
            raise InputError(
                f"holds {numpy_dtype} of shape {shape}{' in Fortran order' if fortran else ''}; "
                "a drive .npy holds floats of shape (n,) or (n, columns) in C order",
                where,
            )
        count, width, dtype, subtype = int(shape[0]), (1 if len(shape) == 1 else int(shape[1])), numpy_dtype.str, "float64"
        rate = None
    else:
        header = ""
        count = 0
        try:
            with open(path, "r", encoding="utf-8", newline="") as handle:
                for line in handle:
                    if not line.strip() or line.lstrip().startswith("#"):
                        continue
                    if not header:
                        header = line
                    else:
                        count += 1
        except UnicodeDecodeError as error:
            raise InputError(f"is not a text table (byte {error.start} of a line is not UTF-8)", where) from None
        names = [cell.strip() for cell in header.strip().split(",")]
        if len(names) < 2 or names[0].lower() not in ("time_s", "time", "t", "time (s)"):
            raise InputError(
                f"header {header.strip()!r} must start with time_s and an acceleration column (g)", where, "row 1"
            )
        width, subtype, rate = len(names), "text", None
    if sidecar is not None:
        rate_side = float(sidecar["rate"])
        if rate is not None and rate != rate_side:
            raise InputError(f"sidecar rate {rate_side:g} Hz disagrees with the file header's {rate:g} Hz", side, "rate")
        rate = rate_side
        if int(sidecar["samples"]) != count:
            raise InputError(f"sidecar says {sidecar['samples']} samples but the file holds {count}", side, "samples")
        scale_value = float(sidecar["scale"])
    else:
        if rate is None:
            if rate_hz is None:
                raise InputError(
                    f"no sidecar {sidecar_path(path).name}; give the sample rate in Hz (--rate) to read a .{file_format} file without one",
                    where,
                )
            rate = float(rate_hz)
        scale_value = float(scale) if scale is not None else 1.0
    if file_format == "csv":
        quantities = _quantities_from_names(names[1:], where)
        width = len(names)
    elif file_format == "npy":
        if width > 1 and not (sidecar or {}).get("columns"):
            raise InputError(
                f"holds {width} columns but no sidecar names them; save acceleration (g) alone as shape (n,), "
                "or give a sidecar with 'columns'",
                where,
            )
        columns = (sidecar or {}).get("columns") or [COLUMN_NAMES["acceleration"]]
        if len(columns) != width:
            raise InputError(f"sidecar lists {len(columns)} columns but the file holds {width}", side, "columns")
        quantities = _quantities_from_names(columns, where)
    else:
        quantities = ("acceleration",)
    if count < 1:
        raise InputError("holds no samples", where)
    return DriveFile(
        path=path,
        format=file_format,
        subtype=subtype,
        rate_hz=rate,
        scale=scale_value,
        samples=count,
        quantities=quantities,
        sidecar=sidecar,
        ramp_in_s=float((sidecar or {}).get("ramp_in_s", 0.0)),
        ramp_out_s=float((sidecar or {}).get("ramp_out_s", 0.0)),
        _data_offset=offset,
        _columns_in_file=width,
        _dtype=dtype,
    )


__all__ = [
    "COLUMN_NAMES",
    "DEFAULT_HEADROOM",
    "DriveFile",
    "DriveWriter",
    "FORMATS",
    "SUBTYPES",
    "check_drive_request",
    "check_free_space",
    "check_subtype",
    "drive_format",
    "estimate_file_bytes",
    "full_scale_from_peak",
    "open_drive",
    "remove_stale_partials",
    "sidecar_path",
    "write_drive",
]
