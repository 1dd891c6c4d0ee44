"""The sample cache of a drive's peak pass: the record's float64 samples in a hidden scratch file.

A .wav/.flac drive whose full scale follows the record's own peak cannot
encode its first sample before the last one is known.  A long (overlap-add)
record is therefore made in two passes: the first finds the peak, the second
quantizes and encodes.  Instead of making the record a second time, the first
pass writes each chunk's float64 values here, exactly as the generator gave
them, and the second pass reads them back in order, so the file is
byte-identical to one whose second pass recomputed the record.

Layout: raw float64 in the machine's byte order, row-major (sample, column),
no header: :data:`BYTES_PER_VALUE` x samples x columns bytes (one hour at
51.2 kHz, one column: 1,474,560,000 bytes).  Written and read by the same
process only.

Name and clean-up: ``.NAME.PID.peak-cache.partial`` beside the drive file
NAME (:func:`vibsynth.io.atomic.partial_path` with the tag
:data:`CACHE_TAG`), so it is hidden, on the destination's file system, and a
killed run's leftover is removed as stale by the next write to the same
destination (:func:`vibsynth.io.atomic.remove_stale_partials`).  The writer
removes it when done, on an error and on an interrupt (SIGTERM in the
command-line tool).

Memory: the cache is streamed through a few megabytes of pages
(:class:`vibsynth.io.atomic.StreamedPages`): the writer starts the write-back
of each stretch and lets the one before go, the reader lets go of what it has
read.  So the bytes go to the disk (1.47 GB per hour of record, written in the
background while the record is made, read back in the second pass) and, while
the disk keeps up (about 300 MB/s for two generating threads), the tool's
memory, page cache included, stays flat in the duration.  Keeping the whole
record in page cache instead cost more on the virtual machine this was
measured on (fresh pages are slow there: a one-hour .flac ran at 0.47 x the
floor's rate that way, 0.66 x streamed).  On a slower disk the pages not yet
written stay cached as before (and need no reading back), the kernel makes the
first pass wait once its dirty-page limit is reached, and the second pass waits
for the pages it reads back (at 150 MB/s up to about 10 s per hour of record).

The file is opened without truncation (it was created empty): ext4 starts
writing a file that was truncated to nothing back to disk when it is closed
(its ``auto_da_alloc`` rule), a close that would block until the disk has it.

References
----------
POSIX open(2), write(2), unlink(2), posix_fadvise(2); Linux ext4 documentation (``auto_da_alloc``
mount option); NumPy ``ndarray.tofile`` / ``numpy.fromfile``
(raw binary, no header).
"""

from __future__ import annotations

import os
import queue
import threading
from pathlib import Path
from typing import Iterator

import numpy as np

from vibsynth.io import atomic

#: Tag of the cache's temporary name (``.NAME.PID.peak-cache.partial``).
CACHE_TAG = "peak-cache"

#: Bytes per cached value (float64).
BYTES_PER_VALUE = 8

#: Chunks handed to the background writer and not yet written, at most (bounded memory).
WRITE_AHEAD_CHUNKS = 4


def cache_bytes(samples: int, columns: int = 1) -> int:
    """Size of the sample cache of a record: 8 bytes x samples x columns.

    Parameters
    ----------
    samples : int
        Samples (rows) of the record.
    columns : int
        Columns (channels of a multi-channel drive, else 1 for .wav/.flac).

    Returns
    -------
    int
        Bytes.

    Examples
    --------
    >>> cache_bytes(3600 * 51200)
    1474560000

    References
    ----------
    IEEE 754 binary64 (8 bytes per value).
    """
    return BYTES_PER_VALUE * int(samples) * max(int(columns), 1)


class SampleCache:
    """A record's samples, written once in order and read back once in order, in a hidden file.

    Parameters
    ----------
    destination : str or os.PathLike
        The drive file the cache serves; the cache lies beside it.
    columns : int
        Columns of every chunk (shape (m, columns)).

    Notes
    -----
    :meth:`write` appends chunks: a background thread writes them (at most
    :data:`WRITE_AHEAD_CHUNKS` waiting), so the caller goes on making the
    next one while the file system takes this one; a chunk must not be
    changed after it is handed over.  A write error shows at the next
    :meth:`write` or at :meth:`close`.  :meth:`iter_chunks` reads the values
    back in chunks of a given length, one at a time (constant memory, never
    the whole record); :meth:`discard` removes the file (idempotent).  As a
    context manager the file is removed on leaving the block, however it is
    left.  Stale caches of killed runs (their process gone, unchanged for
    :data:`vibsynth.io.atomic.STALE_PARTIAL_AGE_S`) are removed on creation.

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np
    >>> destination = pathlib.Path(tempfile.mkdtemp()) / "drive.flac"
    >>> with SampleCache(destination, 1) as cache:
    ...     cache.write(np.arange(5.0)[:, None])
    ...     cache.path.name.endswith(".peak-cache.partial")
    ...     [chunk[:, 0].tolist() for chunk in cache.iter_chunks(2)]
    True
    [[0.0, 1.0], [2.0, 3.0], [4.0]]
    >>> cache.path.exists()
    False

    References
    ----------
    See the module docstring.
    """

    def __init__(self, destination, columns: int = 1):
        self.destination = Path(destination)
        self.columns = max(int(columns), 1)
        self.samples = 0
        self.read_bytes = 0
        self._reader = None
        self._handle = None
        self._thread = None
        self._error = None
        self._queue: queue.Queue = queue.Queue(WRITE_AHEAD_CHUNKS)
        self.path = None
        atomic.remove_stale_partials(self.destination)
        self.path = atomic.partial_path(self.destination, CACHE_TAG)
        try:
            # "r+b", not "wb": a file truncated to nothing is flushed by ext4 when it is closed (its auto_da_alloc
            # rule for files rewritten from scratch), a close that would wait for the disk
            self._handle = open(self.path, "r+b")
            self._thread = threading.Thread(target=self._drain, name="vibsynth-sample-cache", daemon=True)
            self._thread.start()
        except BaseException:
            self.discard()
            raise

    def _drain(self) -> None:
        """The background writer: chunks from the queue to the file until None; after an error, drop the rest.

        The pages behind are let go as it goes (:class:`vibsynth.io.atomic.StreamedPages`): the cache
        keeps a few steps of pages in memory, not the whole record."""
        try:
            pages = atomic.StreamedPages(self._handle.fileno())
        except (AttributeError, OSError, ValueError):  # a file object without a descriptor: no advice
            pages = None
        written = 0
        while True:
            values = self._queue.get()
            if values is None:
                return
            if self._error is None:
                try:
                    self._handle.write(memoryview(values).cast("B"))
                    written += values.nbytes
                    if pages is not None:
                        pages.written(written)
                except BaseException as error:  # noqa: BLE001 - handed to the caller at its next write or close
                    self._error = error

    @property
    def bytes(self) -> int:
        """Bytes written so far."""
        return cache_bytes(self.samples, self.columns)

    def write(self, chunk: np.ndarray) -> None:
        """Append a chunk of float64 values, shape (m, columns) (or (m,) for one column).

        Raises
        ------
        OSError
            The file could not take an earlier chunk (a full disk, a quota).
        ValueError
            A chunk of another width, or after reading began.
        """
        if self._thread is None:
            raise ValueError("the sample cache is closed for writing")
        if self._error is not None:
            raise self._error
        values = np.ascontiguousarray(chunk, dtype=np.float64)
        if values.ndim == 1:
            values = values[:, None]
        if values.ndim != 2 or values.shape[1] != self.columns:
            raise ValueError(f"chunk of shape {np.shape(chunk)} does not match {self.columns} column(s)")
        self._queue.put(values)
        self.samples += values.shape[0]

    def close(self) -> None:
        """Finish writing (idempotent); the file stays until :meth:`discard`.

        Raises
        ------
        OSError
            The file could not take a chunk (a full disk, a quota).
        """
        if self._thread is not None:
            thread, self._thread = self._thread, None
            self._queue.put(None)
            thread.join()
        if self._handle is not None:
            handle, self._handle = self._handle, None
            handle.close()
        if self._error is not None:
            error, self._error = self._error, None
            raise error

    def iter_chunks(self, chunk_samples: int = 65536) -> Iterator[np.ndarray]:
        """The cached values in order, in fresh arrays of shape (m, columns), m <= ``chunk_samples``.

        Finishes writing and opens the file at once.  Reads one chunk
        at a time (``numpy.fromfile`` on the open file, sequentially), so
        memory stays that of one chunk whatever the record's length;
        :attr:`read_bytes` counts the bytes read so far.

        Raises
        ------
        OSError
            The file was shortened while the record was read.
        """
        chunk = int(chunk_samples)
        if chunk < 1:
            raise ValueError(f"chunk size {chunk_samples!r} must be >= 1")
        self.close()
        if self.path is None:
            raise ValueError("the sample cache has been discarded")
        if self._reader is not None:  # a second read: the first one's file is closed first
            self._reader.close()
        self._reader = open(self.path, "rb")
        self.read_bytes = 0
        return self._read(self._reader, chunk, self.path)

    def _read(self, handle, chunk: int, name: Path) -> Iterator[np.ndarray]:
        total, width = self.samples, BYTES_PER_VALUE * self.columns
        with handle:
            pages = atomic.StreamedPages(handle.fileno(), sequential=True)  # the pages behind are let go
            done = 0
            while done < total:
                count = min(chunk, total - done)
                values = np.fromfile(handle, dtype=np.float64, count=count * self.columns)
                if values.size != count * self.columns:
                    raise OSError(f"sample cache {name} ends after {done + values.size // self.columns} of {total} samples")
                done += count
                self.read_bytes = done * width
                pages.read(self.read_bytes)
                yield values.reshape(count, self.columns)

    def discard(self) -> None:
        """Close and remove the file (idempotent; a write error is dropped with the file)."""
        try:
            self.close()
        except OSError:
            pass
        finally:
            if self._reader is not None:
                reader, self._reader = self._reader, None
                reader.close()
            if self.path is not None:
                try:
                    os.unlink(self.path)
                except FileNotFoundError:
                    pass

    def __enter__(self) -> "SampleCache":
        return self

    def __exit__(self, kind, value, traceback) -> None:
        self.discard()


__all__ = ["BYTES_PER_VALUE", "CACHE_TAG", "SampleCache", "cache_bytes"]
