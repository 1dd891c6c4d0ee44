"""Drive files: the streaming, atomic writer and the chunked reader over the four formats.

Formats (chosen by the file's suffix), one module each
-------------------------------------------------------
``.wav``/``.flac`` (:mod:`vibsynth.io.wavflac`)
    Mono; .wav ``float`` (32-bit float, default), ``pcm24`` or ``pcm16``;
    .flac ``pcm24`` (default) or ``pcm16``.  Normalised samples: physical
    value = sample x ``scale`` (g, in the sidecar); never clipped.
``.csv`` (:mod:`vibsynth.io.csvtable`)
    Header row, then ``time_s`` and one column per quantity
    (``acceleration_g`` and optionally ``velocity_m_s``, ``displacement_m``).
``.npy`` (:mod:`vibsynth.io.npyarray`)
    float64, shape (n,) for acceleration alone or (n, q) with columns as in
    the sidecar's ``columns`` (no time column).

Multi-channel drives (``channels`` given to the writer): acceleration only,
one column per channel: a .wav/.flac channel each (one full scale for the
file), .csv columns ``NAME_g`` after ``time_s``, .npy shape (n, channels).
The sidecar's ``channels`` names them; :meth:`DriveFile.iter_channels` reads
them together.

Atomic writing
--------------
Data and sidecar are written through :mod:`vibsynth.io.atomic` (hidden
temporary names ``.NAME.PID.partial`` in the destination folder, renamed into
place when complete), data first, sidecar last (an older sidecar is removed
just before the data is renamed, so an old sidecar never describes a new
file).  A run that stops with an exception removes its temporary files; a
killed run leaves the destination as it was (and at most a ``.partial``
file), which the next write to the same destination removes once stale.
Killed between the two renames of the commit (a few microseconds), a run
leaves the old data without a sidecar, or the new data without one; never a
sidecar describing the other file.

The sidecar is ``FILE + ".json"`` (:class:`vibsynth.io.sidecar.Sidecar`).
:func:`open_drive` reads any of the four formats back in chunks in constant
memory, checking the sidecar against the file; it does not use the generator.

References
----------
Microsoft/IBM RIFF WAVE format; FLAC format specification (xiph.org); NumPy
``.npy`` format (NEP 1); RFC 4180 (CSV); RFC 8259 (JSON).
"""

from __future__ import annotations

import dataclasses
import hashlib
import math
import os
import shutil
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterator

import numpy as np

from vibsynth.errors import InputError
from vibsynth.io import atomic, csvtable, npyarray, samplecache, wavflac
from vibsynth.io.atomic import STALE_PARTIAL_AGE_S
from vibsynth.io.quantities import COLUMN_NAMES, QUANTITY_UNITS
from vibsynth.io.sidecar import Sidecar, sidecar_path

#: File formats by suffix.
FORMATS = ("wav", "flac", "csv", "npy")

#: Sample formats per file format; the first is the default.
SUBTYPES = {**wavflac.SUBTYPES, "csv": csvtable.SUBTYPES, "npy": npyarray.SUBTYPES}

#: Headroom above the record's peak when full scale is set from the peak (0.1 %).
DEFAULT_HEADROOM = 1e-3

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
def format_bytes(count: int) -> str:
    """A byte count for people, in SI units (kB = 1000 bytes), three significant digits.

    Examples
    --------
    >>> format_bytes(17_694_720_128)
    '17.7 GB'

    References
    ----------
    SI prefixes (BIPM SI Brochure, 9th edition).
    """
    count = int(count)
    for unit, size in (("TB", 10**12), ("GB", 10**9), ("MB", 10**6), ("kB", 10**3)):
        if count >= size:
            return f"{count / size:.3g} {unit}"
    return f"{count} bytes"


_format_bytes = format_bytes


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

    Examples
    --------
    >>> estimate_file_bytes("npy", "float64", 10)
    (208, True)

    References
    ----------
    Microsoft/IBM RIFF WAVE format; NumPy NEP 1 (.npy format); FLAC format
    specification (xiph.org), verbatim subframes and frame header layout.
    """
    if file_format == "npy":
        return npyarray.estimate_bytes(samples, len(tuple(quantities)))
    if file_format in ("wav", "flac"):
        return wavflac.estimate_bytes(file_format, subtype, samples)
    return csvtable.estimate_bytes(samples, quantities, rate_hz)


def free_bytes(folder) -> int | None:
    """Bytes free to an unprivileged user in ``folder``, or None when the file system will not say.

    Examples
    --------
    >>> import tempfile
    >>> free_bytes(tempfile.gettempdir()) >= 0
    True

    References
    ----------
    POSIX statvfs (free blocks available to unprivileged users), through
    :func:`shutil.disk_usage`.
    """
    try:
        return int(shutil.disk_usage(folder).free)
    except OSError:
        return None


def storage_plan(path, file_format: str, subtype: str, samples: int, quantities=("acceleration",),
                 rate_hz: float = 1.0, channels: int = 1, peak_pass: bool = False) -> dict:
    """What writing a drive file will take on disk, and whether its folder has the room.

    Parameters
    ----------
    path : str or os.PathLike
        Destination file (its folder is probed for free space).
    file_format, subtype, samples, quantities, rate_hz
        As for :func:`estimate_file_bytes`.
    channels : int
        Acceleration columns of a multi-channel drive (each counted as large
        as one channel's file, an upper bound).
    peak_pass : bool
        The write makes a first pass for the record's peak (.wav/.flac,
        full scale from the peak, overlap-add record).  That pass keeps the
        samples in a temporary file beside the destination
        (:mod:`vibsynth.io.samplecache`, 8 bytes x samples x columns) when the
        folder holds it as well as the file and sidecar; otherwise the
        second pass makes the record again (``peak_pass`` ``"recomputed"``).

    Returns
    -------
    dict
        ``bytes`` (the file: exact for .wav/.npy, an upper bound for
        .flac/.csv), ``bytes_exact`` (bool), ``sidecar_allowance_bytes``,
        ``cache_bytes`` (the peak pass's temporary; 0 without a peak pass),
        ``peak_pass`` (None without one, ``"cached"`` or ``"recomputed"``),
        ``needed_bytes`` (file + sidecar allowance, + the cache when
        ``"cached"``: the most the write holds on disk at once), ``free_bytes``
        (None when the file system will not say) and ``fits`` (True when
        unknown).  With unknown free space the cache is planned, and a write
        that finds the disk full falls back to recomputing.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> plan = storage_plan(pathlib.Path(tempfile.mkdtemp()) / "d.npy", "npy", "float64", 10)
    >>> plan["bytes"], plan["bytes_exact"], plan["needed_bytes"] - plan["bytes"]
    (208, True, 65536)
    >>> plan = storage_plan(pathlib.Path(tempfile.mkdtemp()) / "d.flac", "flac", "pcm24", 10, peak_pass=True)
    >>> plan["cache_bytes"], plan["peak_pass"]
    (80, 'cached')

    References
    ----------
    See :func:`estimate_file_bytes` and :func:`free_bytes`.
    """
    size, exact = estimate_file_bytes(file_format, subtype, samples, quantities, rate_hz)
    if channels > 1:  # every channel as large as one acceleration file (a .csv's time column counted again)
        size, exact = channels * size, False
    needed = int(size) + SIDECAR_ALLOWANCE_BYTES
    free = free_bytes(Path(path).parent)
    cache = samplecache.cache_bytes(samples, max(int(channels), len(tuple(quantities)))) if peak_pass else 0
    mode = None
    if peak_pass:
        mode = "cached" if free is None or needed + cache <= free else "recomputed"
        if mode == "cached":
            needed += cache
    return {"bytes": int(size), "bytes_exact": bool(exact), "sidecar_allowance_bytes": SIDECAR_ALLOWANCE_BYTES,
            "cache_bytes": cache, "peak_pass": mode, "needed_bytes": needed, "free_bytes": free,
            "fits": free is None or needed <= free}


def space_refusal(path, storage: dict) -> InputError:
    """The one-line refusal for a drive file that will not fit (``storage`` from :func:`storage_plan`).

    Examples
    --------
    >>> plan = {"bytes": 10**9, "bytes_exact": True, "needed_bytes": 10**9 + 65536, "free_bytes": 10**6}
    >>> "not enough disk space" in space_refusal("/tmp/d.npy", plan).message
    True

    References
    ----------
    See :func:`storage_plan`.
    """
    needed, free = int(storage["needed_bytes"]), int(storage["free_bytes"])
    folder = Path(path).parent
    size = _format_bytes(needed) if storage["bytes_exact"] else f"up to {_format_bytes(needed)}"
    return InputError(
        f"not enough disk space: the file and its sidecar need {size} ({needed} bytes) but folder "
        f"{str(folder)!r} has {_format_bytes(free)} ({free} bytes) free; free some space, write to another "
        "folder, or ask for a shorter record",
        str(path),
    )


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

    Examples
    --------
    >>> import tempfile, pathlib
    >>> check_free_space(pathlib.Path(tempfile.mkdtemp()) / "d.npy", 1000)

    References
    ----------
    POSIX statvfs (free blocks available to unprivileged users), through
    :func:`shutil.disk_usage`.
    """
    free = free_bytes(Path(path).parent)
    if free is None:  # the file system will not say; the write itself will tell
        return
    needed = int(needed_bytes) + SIDECAR_ALLOWANCE_BYTES
    if needed > free:
        raise space_refusal(path, {"needed_bytes": needed, "free_bytes": free, "bytes_exact": exact})


def remove_stale_partials(path, min_age_s: float = STALE_PARTIAL_AGE_S) -> list:
    """Remove the temporary files a killed writer left for a drive file and its sidecar.

    Parameters
    ----------
    path : str or os.PathLike
        Destination drive file.
    min_age_s : float
        A partial file must be unchanged for this many seconds to be stale.

    Returns
    -------
    list of pathlib.Path
        The files removed.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> remove_stale_partials(pathlib.Path(tempfile.mkdtemp()) / "drive.npy")
    []

    References
    ----------
    See :func:`vibsynth.io.atomic.remove_stale_partials`.
    """
    return (atomic.remove_stale_partials(path, min_age_s)
            + atomic.remove_stale_partials(sidecar_path(path), min_age_s))


def check_drive_request(path, *, rate_hz: float, samples: int, quantities=("acceleration",), subtype=None,
                        scale: float = 1.0, check_space: bool = True, channels=()) -> dict:
    """Check that a drive file can be written as asked, before any work is done (no file is created).

    Parameters
    ----------
    path, rate_hz, samples, quantities, subtype, scale, channels
        As for :class:`DriveWriter`.
    check_space : bool
        Refuse when the folder lacks the space (False: the caller checks it,
        e.g. with :func:`storage_plan`).

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

    Examples
    --------
    >>> import tempfile, pathlib
    >>> check_drive_request(pathlib.Path(tempfile.mkdtemp()) / "d.flac", rate_hz=5120, samples=10)["subtype"]
    'pcm24'

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
    channels = tuple(str(c) for c in channels)
    if channels and (quantities != ("acceleration",) or len(channels) < 2 or len(set(channels)) != len(channels)):
        raise InputError("a multi-channel drive holds acceleration only, in two or more uniquely named channels",
                         "channels")
    if len(quantities) > 1 and file_format in ("wav", "flac"):
        raise InputError(
            f".{file_format} drive files hold acceleration only; write velocity/displacement to .csv or .npy", str(path)
        )
    rate = float(rate_hz)
    if not (math.isfinite(rate) and rate > 0):
        raise InputError(f"rate {rate_hz!r} Hz must be a finite number > 0", "rate")
    count = int(samples)
    if file_format in ("wav", "flac"):
        wavflac.check_request(path, file_format, subtype, rate, max(count, 0))
    if count < 1:
        raise InputError(f"sample count {samples!r} must be >= 1", "samples")
    scale = float(scale)
    if not (math.isfinite(scale) and scale > 0):
        raise InputError(f"scale {scale!r} must be a finite number > 0", "scale")
    if file_format in ("csv", "npy") and scale != 1.0:
        raise InputError(f".{file_format} files hold physical values; scale must be 1, not {scale:g}", "scale")
    if not path.parent.is_dir():
        raise InputError(f"folder {str(path.parent)!r} does not exist; create it first", str(path))
    if path.is_dir():
        raise InputError("is a folder; give a file name such as drive.flac", str(path))
    if check_space:
        storage = storage_plan(path, file_format, subtype, count, quantities, rate, channels=max(len(channels), 1))
        check_free_space(path, storage["bytes"], storage["bytes_exact"])
    return {"format": file_format, "subtype": subtype, "quantities": quantities, "rate_hz": rate,
            "samples": count, "scale": scale, "channels": channels}


@dataclass(frozen=True)
class PreparedChunk:
    """A chunk checked and encoded for one drive file by :meth:`DriveWriter.prepare`, not yet written.

    Attributes
    ----------
    position : int
        Index of its first sample in the file.
    count : int
        Samples (rows).
    peaks : numpy.ndarray or None
        Largest |value| of acceleration per channel (one entry for a
        single-channel drive), in g; None for an empty chunk.
    payload : numpy.ndarray
        What the format's writer stores (.wav/.flac: normalised samples or
        integer counts; .csv/.npy: the physical values).

    Examples
    --------
    See :meth:`DriveWriter.prepare`.

    References
    ----------
    See the module docstring.
    """

    position: int
    count: int
    peaks: np.ndarray | None
    payload: np.ndarray


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
    sidecar : Sidecar or dict, optional
        What the caller records (seed, options, plan, profile, ...; a dict
        gives :class:`~vibsynth.io.sidecar.Sidecar` fields); the writer fills
        in ``scale``, ``rate``, ``samples``, ``format``, ``subtype``,
        ``columns``, ``units``, ``peak_g`` and ``tool``.
    channels : sequence of str
        A multi-channel drive's channel names (acceleration only, one column
        each, in g); the sidecar's ``channels`` entries (with each channel's
        ``profile``) should be given by the caller, the writer adds
        ``column``, ``scale``, ``unit`` and ``peak_g``.  Empty: one channel.

    Notes
    -----
    Use as a context manager: leaving the block by an exception removes the
    temporary files; call :meth:`commit` to publish.  Values are physical
    (g, m/s, m), float arrays of shape (m,) or (m, q).

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "d.npy"
    >>> with DriveWriter(path, rate_hz=100.0, samples=3) as writer:
    ...     writer.write(np.array([0.1, -0.2, 0.3]))
    ...     written = writer.commit()
    >>> written["samples"], written["peak_g"]
    (3, 0.3)

    References
    ----------
    See the module docstring.
    """

    def __init__(self, path, *, rate_hz: float, samples: int, quantities=("acceleration",), subtype=None,
                 scale: float = 1.0, sidecar: "Sidecar | dict | None" = None, channels=()):
        request = check_drive_request(path, rate_hz=rate_hz, samples=samples, quantities=quantities,
                                      subtype=subtype, scale=scale, channels=channels)
        self.channels = request["channels"]
        self.path = Path(path)
        self.format = request["format"]
        self.subtype = request["subtype"]
        self.quantities = request["quantities"]
        self.rate_hz = request["rate_hz"]
        self.samples = request["samples"]
        self.scale = request["scale"]
        if sidecar is None:
            sidecar = Sidecar()
        elif isinstance(sidecar, dict):
            unknown = sorted(set(sidecar) - {f.name for f in dataclasses.fields(Sidecar)})
            if unknown:
                raise InputError(f"sidecar keys {', '.join(map(repr, unknown))} are not sidecar fields; use "
                                 "those of vibsynth.io.sidecar.Sidecar", "sidecar")
            sidecar = Sidecar(**sidecar)
        if self.channels:
            given = list(sidecar.channels or ())
            if given and [c.get("name") for c in given] != list(self.channels):
                raise InputError("the sidecar's channels do not match the channel names", "channels")
            entries = tuple(dict(c) for c in given) if given else tuple({"name": name} for name in self.channels)
            sidecar = dataclasses.replace(sidecar, channels=entries)
        self.extra = sidecar
        self._channel_peaks = np.zeros(len(self.channels))
        self.written = 0
        self._write_back_at = 0  # samples written when the temporary's write-back is next looked at
        self._peak = 0.0
        self._committed = False
        self._side: atomic.AtomicFile | None = None
        self._format_writer = None
        self._data = atomic.AtomicFile(self.path)
        try:
            self._format_writer = self._open()
        except BaseException:
            self.abort()
            raise

    def _open(self):
        temporary, where = self._data.temporary, str(self.path)
        if self.format in ("wav", "flac"):
            return wavflac.AudioWriter(temporary, where, self.format, self.subtype, self.rate_hz, self.scale,
                                       max(len(self.channels), 1))
        if self.format == "npy":
            return npyarray.NpyWriter(temporary, where, self.samples, self.width)
        from vibsynth.io.sidecar import channel_column_name

        names = [channel_column_name(c) for c in self.channels] or None
        return csvtable.CsvWriter(temporary, where, self.quantities, self.rate_hz, names)

    @property
    def width(self) -> int:
        """Data columns: one per channel of a multi-channel drive, else one per quantity."""
        return len(self.channels) if self.channels else len(self.quantities)

    def write(self, chunk) -> None:
        """Append samples: physical values, shape (m,) or (m, q) with one column per quantity (or channel)."""
        self.write_prepared(self.prepare(chunk, self.written))

    def prepare(self, chunk, position: int) -> "PreparedChunk":
        """Check a chunk that will start at sample ``position`` and encode it for the file; nothing is written.

        The result depends only on the chunk, ``position`` and the writer's
        format and scale, so chunks may be prepared ahead on other threads
        (numpy and the encoders release the interpreter lock) and handed to
        :meth:`write_prepared` in order.  :meth:`write` does both.

        Parameters
        ----------
        chunk : array_like
            Physical values, shape (m,) or (m, q) with one column per quantity (or channel).
        position : int
            Samples written before this chunk (for messages).

        Returns
        -------
        PreparedChunk

        Raises
        ------
        InputError
            A chunk of the wrong width, a value that is not finite, or (.wav/.flac)
            beyond full scale.

        Examples
        --------
        >>> import tempfile, pathlib, numpy as np
        >>> path = pathlib.Path(tempfile.mkdtemp()) / "d.flac"
        >>> with DriveWriter(path, rate_hz=8000.0, samples=2, scale=2.0) as writer:
        ...     ready = writer.prepare(np.array([1.0, -0.5]), 0)
        ...     writer.write_prepared(ready)
        ...     written = writer.commit()
        >>> ready.count, written["peak_g"]
        (2, 1.0)

        References
        ----------
        See the module docstring.
        """
        values = np.asarray(chunk, dtype=np.float64)
        if values.ndim == 1:
            values = values[:, None]
        if values.ndim != 2 or values.shape[1] != self.width:
            raise InputError(
                f"chunk of shape {np.shape(chunk)} does not match {self.width} column(s)", str(self.path)
            )
        count = values.shape[0]
        position = int(position)
        if position + count > self.samples:
            raise InputError(f"more than the announced {self.samples} samples written", str(self.path))
        peaks = None
        if count:
            # one pass each for the largest and the smallest value: their magnitudes give the peak(s), and a
            # NaN or an infinity anywhere makes one of the extremes non-finite
            extremes = np.maximum(np.max(values, axis=0), -np.min(values, axis=0))
            if not np.all(np.isfinite(extremes)):
                bad = int(np.flatnonzero(~np.all(np.isfinite(values), axis=1))[0])
                raise InputError(f"sample {position + bad} is not a finite number", str(self.path))
            peaks = extremes if self.channels else extremes[:1]
        encode = getattr(self._format_writer, "encode", None)
        payload = encode(values, position) if encode is not None else values
        return PreparedChunk(position, count, peaks, payload)

    def write_prepared(self, prepared: "PreparedChunk") -> None:
        """Append a chunk made by :meth:`prepare` (chunks in the order of their positions)."""
        if prepared.position != self.written:
            raise InputError(f"a chunk prepared for sample {prepared.position} came after {self.written} samples",
                             str(self.path))
        if self.written + prepared.count > self.samples:
            raise InputError(f"more than the announced {self.samples} samples written", str(self.path))
        if prepared.count and self.channels:
            np.maximum(self._channel_peaks, prepared.peaks, out=self._channel_peaks)
            self._peak = float(np.max(self._channel_peaks))
        elif prepared.count:
            self._peak = max(self._peak, float(prepared.peaks[0]))
        if hasattr(self._format_writer, "write_encoded"):
            self._format_writer.write_encoded(prepared.payload)
        else:
            self._format_writer.write(prepared.payload, self.written)
        self.written += prepared.count
        if self.written >= self._write_back_at:  # asked once per step's worth of float64 values, not per chunk
            self._data.write_back_ahead()
            self._write_back_at = self.written + max(1, atomic.WRITE_BACK_STEP_BYTES // (8 * self.width))

    def sidecar(self) -> Sidecar:
        """The sidecar as it will be written (the writer's own fields override the caller's)."""
        from vibsynth import __version__

        return self.extra.with_file(scale=self.scale, rate=self.rate_hz, samples=self.samples,
                                    file_format=self.format, subtype=self.subtype, quantities=self.quantities,
                                    peak_g=self._peak, tool={"name": "vibsynth", "version": __version__},
                                    channel_peaks_g=[float(p) for p in self._channel_peaks] if self.channels else None)

    def commit(self) -> dict:
        """Close the data, write the sidecar, and rename both into place (data first). Returns the sidecar's JSON."""
        if self.written != self.samples:
            raise InputError(f"{self.written} samples written, {self.samples} announced", str(self.path))
        self._close()
        self._format_writer.finish()
        sidecar = self.sidecar()
        data = sidecar.to_dict()
        final_sidecar = sidecar_path(self.path)
        self._side = atomic.AtomicFile(final_sidecar)
        self._side.temporary.write_text(sidecar.to_json(), encoding="utf-8")
        with open(self._side.temporary, "rb") as handle:
            os.fsync(handle.fileno())
        # the data reaches the disk before the old sidecar goes: the window in which an interrupt leaves an old
        # drive without its sidecar (never a drive with another drive's sidecar) is two renames, not an fsync
        self._data.sync()
        if final_sidecar.exists():
            final_sidecar.unlink()
        self._data.commit(sync=False)
        self._side.commit(sync=False)
        self._committed = True
        return data

    def _close(self) -> None:
        if self._format_writer is not None:
            self._format_writer.close()

    def abort(self) -> None:
        """Close and remove the temporary files (the destination is untouched)."""
        try:
            self._close()
        except Exception:  # noqa: BLE001 - cleaning up after a failure; the first error matters
            pass
        for pending in (self._data, self._side):
            if pending is not None:
                pending.discard()

    def __enter__(self) -> "DriveWriter":
        return self

    def __exit__(self, kind, value, traceback) -> None:
        if kind is not None or not self._committed:
            self.abort()


def write_drive(path, chunks, *, rate_hz: float, samples: int, quantities=("acceleration",), subtype=None,
                scale: float = 1.0, sidecar: dict | None = None, progress=None, channels=()) -> dict:
    """Write an iterable of chunks to a drive file with its sidecar, atomically.

    Parameters
    ----------
    path, rate_hz, samples, quantities, subtype, scale, sidecar, channels
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
                     scale=scale, sidecar=sidecar, channels=channels) as writer:
        for chunk in chunks:
            writer.write(chunk)
            if progress is not None:
                progress(len(chunk))
        return writer.commit()



def file_sha256(path) -> str:
    """SHA-256 of a file's bytes, hex (read in 1 MiB blocks: constant memory).

    What reports and batch summaries record for a drive file and its sidecar.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "x.bin"
    >>> _ = path.write_bytes(b"abc")
    >>> file_sha256(path)[:16]
    'ba7816bf8f01cfea'

    References
    ----------
    FIPS PUB 180-4, Secure Hash Standard (SHA-256).
    """
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


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
    sidecar : Sidecar or None
        The sidecar as read and validated (None when there is none).
    ramp_in_s, ramp_out_s : float
        Ramps recorded in the sidecar (0 when absent); verification judges
        the steady part between them.
    channels : tuple of str
        Channel names of a multi-channel drive (from its sidecar); empty for one channel.

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
    sidecar: Sidecar | None = field(default=None, compare=False)
    ramp_in_s: float = 0.0
    ramp_out_s: float = 0.0
    channels: tuple = ()
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
                    quantity: str = "acceleration", channel: str | None = None) -> Iterator[np.ndarray]:
        """Physical values of one quantity, samples ``[start, stop)``, in chunks of ``chunk_samples``.

        Parameters
        ----------
        chunk_samples : int
            Samples per chunk (the last may be shorter).
        start, stop : int
            Sample range (default: the whole file).
        quantity : str
            ``acceleration`` (g), ``velocity`` (m/s) or ``displacement`` (m).
        channel : str, optional
            A multi-channel drive's channel (default: the first).

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
        if self.channels:
            column = self._channel_column(channel)
        elif channel is not None:
            raise InputError(f"has one channel; there is no channel {channel!r}", str(self.path))
        if self.format in ("wav", "flac"):
            return self._finite(self._iter_audio(chunk, start, stop, column), start)
        if self.format == "npy":
            return self._finite(self._iter_npy(chunk, start, stop, column), start)
        return self._finite(self._iter_csv(chunk, start, stop, column), start)

    def _channel_column(self, channel: str | None) -> int:
        if channel is None:
            return 0
        if channel not in self.channels:
            raise InputError(f"has no channel {channel!r}; channels: {', '.join(self.channels)}", str(self.path))
        return self.channels.index(channel)

    def iter_channels(self, chunk_samples: int = 65536, start: int = 0, stop: int | None = None) -> Iterator[np.ndarray]:
        """Every channel of a multi-channel drive (g), samples ``[start, stop)``, in chunks of shape (m, channels).

        A single-channel drive gives shape (m, 1) (its acceleration).

        Examples
        --------
        >>> import tempfile, pathlib, numpy as np
        >>> path = pathlib.Path(tempfile.mkdtemp()) / "d.npy"
        >>> _ = write_drive(path, [np.ones((4, 2))], rate_hz=10.0, samples=4, channels=("x", "y"))
        >>> next(open_drive(path).iter_channels()).shape
        (4, 2)

        References
        ----------
        See the module docstring.
        """
        chunk = int(chunk_samples)
        if chunk < 1:
            raise InputError(f"chunk size {chunk_samples!r} must be >= 1", "chunk_samples")
        stop = self.samples if stop is None else int(stop)
        start = int(start)
        if not 0 <= start <= stop <= self.samples:
            raise InputError(f"sample range [{start}, {stop}) must lie inside [0, {self.samples}]", str(self.path))
        if not self.channels:
            return (c[:, None] for c in self.iter_chunks(chunk, start, stop))
        if self.format in ("wav", "flac"):
            return self._finite(self._iter_audio(chunk, start, stop, None), start)
        if self.format == "npy":
            return self._finite(self._iter_npy(chunk, start, stop, None), start)
        return self._finite(self._iter_csv(chunk, start, stop, None), start)

    def _finite(self, chunks: Iterator[np.ndarray], start: int) -> Iterator[np.ndarray]:
        position = start
        for values in chunks:
            finite = np.isfinite(values)
            if not finite.all():
                bad = int(np.argmin(finite.reshape(finite.shape[0], -1).all(axis=1)))
                raise InputError(
                    f"sample {position + bad} is {values[bad]!r}, not a finite number; a drive file holds finite values",
                    str(self.path),
                )
            position += values.shape[0]
            yield values

    def read(self, start: int = 0, stop: int | None = None, quantity: str = "acceleration",
             channel: str | None = None) -> np.ndarray:
        """The values of one quantity (or channel), samples ``[start, stop)``, as one float64 array."""
        parts = list(self.iter_chunks(1 << 20, start, stop, quantity, channel))
        return np.concatenate(parts) if parts else np.zeros(0)

    def _iter_audio(self, chunk: int, start: int, stop: int, column: int | None = 0) -> Iterator[np.ndarray]:
        return wavflac.iter_chunks(self.path, self.format, chunk, start, stop, self.samples, self.scale, column)

    def _iter_npy(self, chunk: int, start: int, stop: int, column: int) -> Iterator[np.ndarray]:
        return npyarray.iter_chunks(self.path, self._data_offset, self._dtype, self._columns_in_file, column, chunk,
                                    start, stop, self.samples, self.scale)

    def _iter_csv(self, chunk: int, start: int, stop: int, column: int) -> Iterator[np.ndarray]:
        return csvtable.iter_chunks(self.path, self._columns_in_file, column, chunk, start, stop, self.samples,
                                    self.rate_hz, self.scale)


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
    sidecar = Sidecar.read(path)
    side = str(sidecar_path(path))
    if sidecar is not None and (sidecar.format or file_format) != file_format:
        raise InputError(f"sidecar says format {sidecar.format!r} but the file is .{file_format}", side, "format")
    for given, key, what in ((rate_hz, "rate", "rate"), (scale, "scale", "scale")):
        if given is not None:
            value = float(given)
            if not (math.isfinite(value) and value > 0):
                raise InputError(f"{what} {given!r} must be a finite number > 0", what)
            recorded = getattr(sidecar, key) if sidecar is not None else None
            if recorded is not None and not math.isclose(value, float(recorded), rel_tol=1e-12):
                raise InputError(f"given {what} {value:g} disagrees with the sidecar's {float(recorded):g}", side, key)
    offset, width, dtype = 0, 1, "<f8"
    names = None
    channels = tuple(c["name"] for c in sidecar.channels) if sidecar is not None and sidecar.channels else ()
    if file_format in ("wav", "flac"):
        header_rate, count, subtype = wavflac.read_header(path, file_format, max(len(channels), 1))
        if rate_hz is not None and float(rate_hz) != header_rate:
            raise InputError(f"given rate {float(rate_hz):g} Hz disagrees with the file header's {header_rate:g} Hz", where)
        rate = header_rate
        if sidecar is None and scale is None:
            raise InputError(
                f"no sidecar {sidecar_path(path).name}; give the full scale in g (--scale) to read a .{file_format} file without one",
                where,
            )
    elif file_format == "npy":
        count, width, dtype, offset = npyarray.read_header(path)
        subtype, rate = "float64", None
    else:
        names, count = csvtable.read_header(path)
        width, subtype, rate = len(names), "text", None
    if sidecar is not None:
        rate_side = float(sidecar.rate)
        if rate is not None and rate != rate_side:
            raise InputError(f"sidecar rate {rate_side:g} Hz disagrees with the file header's {rate:g} Hz", side, "rate")
        rate = rate_side
        if int(sidecar.samples) != count:
            raise InputError(f"sidecar says {sidecar.samples} samples but the file holds {count}", side, "samples")
        scale_value = float(sidecar.scale)
    else:
        if rate is None:
            if rate_hz is None:
                raise InputError(
                    f"no sidecar {sidecar_path(path).name}; give the sample rate in Hz (--rate) to read a .{file_format} file without one",
                    where,
                )
            rate = float(rate_hz)
        scale_value = float(scale) if scale is not None else 1.0
    recorded_columns = list(sidecar.columns) if sidecar is not None else []
    if channels:
        expected = len(channels) + (1 if file_format == "csv" else 0)
        held = width if file_format != "wav" and file_format != "flac" else len(channels)
        if held != expected:
            raise InputError(f"sidecar lists {len(channels)} channels but the file holds {held} data columns", side,
                             "channels")
        if file_format == "csv" and names[1:] != recorded_columns[1:]:
            raise InputError(f"header {','.join(names)} does not name the sidecar's channel columns "
                             f"{','.join(recorded_columns)}", where)
        quantities = ("acceleration",)
    elif file_format == "csv":
        quantities = _quantities_from_names(names[1:], where)
        width = len(names)
    elif file_format == "npy":
        if width > 1 and not recorded_columns:
            raise InputError(
                f"holds {width} columns but no sidecar names them; save acceleration (g) alone as shape (n,), "
                "or give a sidecar with 'columns'",
                where,
            )
        columns = recorded_columns or [COLUMN_NAMES["acceleration"]]
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
        ramp_in_s=sidecar.ramp_in_s if sidecar is not None else 0.0,
        ramp_out_s=sidecar.ramp_out_s if sidecar is not None else 0.0,
        channels=channels,
        _data_offset=offset,
        _columns_in_file=width,
        _dtype=dtype,
    )


__all__ = [
    "COLUMN_NAMES",
    "DEFAULT_HEADROOM",
    "QUANTITY_UNITS",
    "STALE_PARTIAL_AGE_S",
    "Sidecar",
    "DriveFile",
    "DriveWriter",
    "FORMATS",
    "SUBTYPES",
    "check_drive_request",
    "check_free_space",
    "check_subtype",
    "drive_format",
    "estimate_file_bytes",
    "format_bytes",
    "free_bytes",
    "space_refusal",
    "storage_plan",
    "full_scale_from_peak",
    "open_drive",
    "remove_stale_partials",
    "sidecar_path",
    "write_drive",
]
