"""Atomic writing: every file the tool writes goes through here.

One scheme for every writer (drive files, sidecars, profiles, report.json,
verify.json, figures, the PDF): the content is written to a hidden temporary
file in the destination's folder, named ``.NAME.PID.partial`` (``.NAME.PID.N.partial``
when that name is taken; a scratch file that is never published, such as the sample cache of a
drive's peak pass, adds a tag: ``.NAME.PID.TAG.partial``), flushed to disk, and renamed over the destination
only when complete (POSIX rename(2) is atomic: a reader sees the old file or
the new one, never a mixture).  An exception removes the temporary file; a
killed process leaves the destination as it was and at most a ``.partial``
file.  The next write to the same destination removes such stale partial
files: those whose writing process no longer runs on this machine and that
have not changed for :data:`STALE_PARTIAL_AGE_S` seconds (a writer on another
machine sharing the folder keeps its file changing).

References
----------
POSIX rename(2) (atomic replacement), fsync(2), kill(2) with signal 0
(process existence check).
"""

from __future__ import annotations

import itertools
import json
import os
import re
import time
from pathlib import Path

#: A partial file of a process that no longer runs, unchanged for this long (s), is removed as stale.
STALE_PARTIAL_AGE_S = 60.0

#: Suffix of every temporary file.
PARTIAL_SUFFIX = ".partial"

#: A file streamed through the page cache (:class:`StreamedPages`: a growing temporary file, a drive's
#: sample cache) has its kernel write-back started, and the pages of the stretch before dropped, every
#: this many bytes, so the commit's fsync waits only for the last stretch and the file keeps a few
#: steps' worth of pages in memory however long it grows.
WRITE_BACK_STEP_BYTES = 4 * 2**20

#: Whether :class:`StreamedPages` lets the kernel drop pages behind the writer (and the reader);
#: False: write-back is only started early and the file's pages stay cached.
DROP_BEHIND = True

#: Every this many steps (256 MiB) the writer's advice reaches back to the file's start, so that pages
#: that were still being written when their turn came (a disk slower than the writer) are dropped too.
SWEEP_STEPS = 64


class StreamedPages:
    """Keeps a file written (or read) once from start to end to a few steps of cached pages.

    A writer calls :meth:`written` with the file's length now and then; every
    :data:`WRITE_BACK_STEP_BYTES` one advice to the kernel starts the write-back
    of the new stretch and (:data:`DROP_BEHIND`) drops the pages of the stretch
    started one step before, written to disk by then; every
    :data:`SWEEP_STEPS` steps the advice covers the file from its start, for
    pages that were still being written at their turn (the kernel keeps a page
    that is not yet on the disk, or written to again).  A reader calls
    :meth:`read` with its position: the pages behind it are dropped (read
    pages are clean).  The kernel hands the dropped pages out again for the
    next stretch.

    Why: on a virtual machine whose host takes back the guest's free memory
    (a balloon with free page reporting), a page not touched for a few seconds
    costs far more than one just freed, so a file streamed through fresh pages
    runs at the host's speed of giving memory back, not the disk's.  On the
    machine this was measured on, a 2^24-sample .npy generate (whole process)
    went from 2.07-2.16 to 1.44-1.49 x the floor (medians of 8 alternated
    runs), and a one-hour .flac with its 1.47 GB sample cache from 0.47 to 0.66
    x the floor's rate.  While the disk keeps up with the writer, the memory
    the tool takes stays flat in the duration, page cache included; on a
    slower disk the pages not yet written stay cached, as without this class,
    until the kernel's dirty-page limit makes the writer wait for the disk.
    The cost: the bytes go to the disk (where a drive file goes anyway; a
    sample cache too, so the second pass reads it back from there) and a
    reader right after the run reads the file from the disk.

    Advice only: where ``posix_fadvise`` is missing (or refused) it does nothing.

    Parameters
    ----------
    descriptor : int
        An open descriptor of the file (not closed here).
    sequential : bool
        The file will be read from start to end: say so to the kernel
        (larger read-ahead), once, now.

    Examples
    --------
    >>> import tempfile, os
    >>> with tempfile.TemporaryFile() as handle:
    ...     pages = StreamedPages(handle.fileno())
    ...     _ = handle.write(bytes(WRITE_BACK_STEP_BYTES)); handle.flush()
    ...     pages.written(WRITE_BACK_STEP_BYTES) in (0, WRITE_BACK_STEP_BYTES)  # 0 where posix_fadvise is missing
    True

    References
    ----------
    POSIX posix_fadvise(2) with POSIX_FADV_DONTNEED (Linux starts write-back of the dirty pages of the
    range and drops only clean pages) and POSIX_FADV_SEQUENTIAL; Linux free page reporting
    (virtio-balloon), Documentation/mm/free_page_reporting.
    """

    def __init__(self, descriptor: int, sequential: bool = False):
        self.descriptor = descriptor
        self.started = 0  # bytes from the start whose write-back has been started
        self.dropped = 0  # bytes from the start whose pages have been let go (as far as they were clean)
        self._steps = 0
        self._advise = getattr(os, "posix_fadvise", None)
        if sequential:
            self._quietly(0, 0, getattr(os, "POSIX_FADV_SEQUENTIAL", 0))

    def written(self, size: int) -> int:
        """The file is ``size`` bytes long now (bytes from its start); returns the bytes whose write-back has started.

        Examples
        --------
        See the class.

        References
        ----------
        POSIX posix_fadvise(2), POSIX_FADV_DONTNEED.
        """
        if self._advise is not None and size - self.started >= WRITE_BACK_STEP_BYTES:
            # one call: write-back of the new stretch starts, and the stretch started a step ago is dropped
            self._steps += 1
            if not DROP_BEHIND:
                start = self.started
            else:
                start = 0 if self._steps % SWEEP_STEPS == 0 else self.dropped
            self._quietly(start, size - start, os.POSIX_FADV_DONTNEED)
            if self._advise is None:  # refused: advice only, a file system that refuses it loses nothing
                return self.started
            if DROP_BEHIND:
                self.dropped = self.started
            self.started = size
        return self.started

    def read(self, position: int) -> None:
        """The reader has read ``position`` bytes from the start: let those pages go (every step).

        Examples
        --------
        >>> import tempfile
        >>> with tempfile.TemporaryFile() as handle:
        ...     _ = handle.write(bytes(WRITE_BACK_STEP_BYTES)); handle.flush(); _ = handle.seek(0)
        ...     pages = StreamedPages(handle.fileno(), sequential=True)
        ...     pages.read(len(handle.read()))
        ...     pages.dropped in (0, WRITE_BACK_STEP_BYTES)  # 0 where posix_fadvise is missing
        True

        References
        ----------
        POSIX posix_fadvise(2), POSIX_FADV_DONTNEED (clean pages are dropped).
        """
        if self._advise is None or not DROP_BEHIND:
            return
        if position - self.dropped >= WRITE_BACK_STEP_BYTES:
            self._quietly(self.dropped, position - self.dropped, os.POSIX_FADV_DONTNEED)
            if self._advise is not None:
                self.dropped = position

    def _quietly(self, offset: int, length: int, advice: int) -> None:
        if self._advise is None:
            return
        try:
            self._advise(self.descriptor, offset, length, advice)
        except OSError:
            self._advise = None


#: What a scratch file's tag may be (``partial_path(..., tag=...)``): lower-case words joined by ``-``.
_TAG = re.compile(r"[a-z]+(?:-[a-z]+)*")


def partial_path(destination, tag: str = "") -> Path:
    """Create (exclusively) and return a fresh temporary file for ``destination``.

    Parameters
    ----------
    destination : str or os.PathLike
        The final file.
    tag : str
        Lower-case words joined by ``-`` naming a scratch file kept beside the
        destination's temporary (``.NAME.PID.TAG.partial``); stale ones are
        removed with the destination's (:func:`remove_stale_partials`).
        Empty: the destination's own temporary.

    Returns
    -------
    pathlib.Path
        ``.NAME.PID.partial`` (or ``.NAME.PID.N.partial``; with a tag
        ``.NAME.PID[.N].TAG.partial``) beside the destination, created empty.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> temporary = partial_path(folder / "report.json")
    >>> temporary.name.startswith(".report.json.") and temporary.name.endswith(".partial")
    True
    >>> temporary.unlink()

    References
    ----------
    POSIX open(2) with O_CREAT | O_EXCL.
    """
    path = Path(destination)
    if tag and not _TAG.fullmatch(tag):
        raise ValueError(f"tag {tag!r} must be lower-case words joined by '-'")
    label = f".{tag}" if tag else ""
    for attempt in itertools.count():
        extra = f".{attempt}" if attempt else ""
        candidate = path.with_name(f".{path.name}.{os.getpid()}{extra}{label}{PARTIAL_SUFFIX}")
        try:
            descriptor = os.open(candidate, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o666)
        except FileExistsError:
            continue
        os.close(descriptor)
        return candidate
    raise AssertionError("unreachable")  # pragma: no cover


def _process_runs(pid: int) -> bool:
    try:
        os.kill(pid, 0)  # signal 0: existence and permission check only (POSIX)
    except ProcessLookupError:
        return False
    except (OSError, OverflowError):  # not ours to signal, or cannot tell: treat as running
        return True
    return True


def remove_stale_partials(destination, min_age_s: float = STALE_PARTIAL_AGE_S) -> list:
    """Remove the temporary files a killed writer left for ``destination`` (its tagged scratch files too).

    Parameters
    ----------
    destination : str or os.PathLike
        The final file whose stale partials are removed.
    min_age_s : float
        A partial file must be unchanged for this many seconds to be stale.

    Returns
    -------
    list of pathlib.Path
        The files removed (none on systems other than POSIX).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> remove_stale_partials(pathlib.Path(tempfile.mkdtemp()) / "drive.flac")
    []

    References
    ----------
    POSIX kill(2) with signal 0 (process existence check).
    """
    path = Path(destination)
    if os.name != "posix":
        return []
    pattern = re.compile(rf"\.{re.escape(path.name)}\.(\d+)(?:\.\d+)?(?:\.{_TAG.pattern})?{re.escape(PARTIAL_SUFFIX)}")
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


class AtomicFile:
    """One destination written under a temporary name, published by :meth:`commit`.

    Parameters
    ----------
    destination : str or os.PathLike
        The final file.  Stale partials of it are removed first.

    Notes
    -----
    Write to :attr:`temporary` (any library that takes a path), then call
    :meth:`commit`.  As a context manager, leaving the block by an exception,
    or without a commit, removes the temporary file.  Several files published
    together (a report's figures) are committed one after the other once all
    are complete (:func:`commit_all`).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> target = pathlib.Path(tempfile.mkdtemp()) / "note.txt"
    >>> with AtomicFile(target) as pending:
    ...     _ = pending.temporary.write_text("done")
    ...     _ = pending.commit()
    >>> target.read_text()
    'done'

    References
    ----------
    POSIX rename(2), fsync(2).
    """

    def __init__(self, destination):
        self.destination = Path(destination)
        self.committed = False
        self._watch: int | None = None  # a descriptor of the temporary, for write_back_ahead
        self._pages: StreamedPages | None = None
        remove_stale_partials(self.destination)
        self.temporary = partial_path(self.destination)

    def write_back_ahead(self) -> int:
        """Start the kernel's write-back of what the temporary file has grown by, every :data:`WRITE_BACK_STEP_BYTES`.

        Call it now and then while a writer (this process's, or a library's
        writing to :attr:`temporary` by name) appends to the file: the disk
        then works while the samples are made, and :meth:`commit`'s fsync
        waits only for the last stretch (a 128 MB drive: 60-80 ms of fsync
        down to a few ms on the machine this was measured on); the pages
        behind are let go (:class:`StreamedPages`).

        Returns
        -------
        int
            Bytes whose write-back has been started so far.

        Examples
        --------
        >>> import tempfile, pathlib
        >>> pending = AtomicFile(pathlib.Path(tempfile.mkdtemp()) / "big.bin")
        >>> _ = pending.temporary.write_bytes(bytes(WRITE_BACK_STEP_BYTES))
        >>> pending.write_back_ahead() in (0, WRITE_BACK_STEP_BYTES)  # 0 where posix_fadvise is missing
        True
        >>> pending.discard()

        References
        ----------
        See :class:`StreamedPages`.
        """
        if not self.committed and hasattr(os, "posix_fadvise"):
            try:
                if self._watch is None:
                    self._watch = os.open(self.temporary, os.O_RDONLY)
                    self._pages = StreamedPages(self._watch)
                self._pages.written(os.fstat(self._watch).st_size)
            except OSError:  # advice only: a file system that refuses it loses nothing
                pass
        return self._pages.started if self._pages is not None else 0

    def _unwatch(self) -> None:
        if self._watch is not None:
            watch, self._watch = self._watch, None
            os.close(watch)

    def sync(self) -> None:
        """Flush the temporary file to disk (fsync), before a commit that then need not wait for the disk.

        Examples
        --------
        >>> import tempfile, pathlib
        >>> pending = AtomicFile(pathlib.Path(tempfile.mkdtemp()) / "x.txt")
        >>> _ = pending.temporary.write_text("done"); pending.sync(); pending.commit(sync=False).read_text()
        'done'

        References
        ----------
        POSIX fsync(2).
        """
        self._unwatch()
        with open(self.temporary, "rb") as handle:
            os.fsync(handle.fileno())

    def commit(self, sync: bool = True) -> Path:
        """Flush the temporary file to disk and rename it over the destination; returns the destination."""
        self._unwatch()
        if sync:
            self.sync()
        os.replace(self.temporary, self.destination)
        self.committed = True
        return self.destination

    def discard(self) -> None:
        """Remove the temporary file (the destination is untouched)."""
        self._unwatch()
        if not self.committed:
            try:
                os.unlink(self.temporary)
            except FileNotFoundError:
                pass

    def __enter__(self) -> "AtomicFile":
        return self

    def __exit__(self, kind, value, traceback) -> None:
        self.discard()


def commit_all(files) -> list:
    """Commit several complete :class:`AtomicFile` s in order; returns their destinations.

    Examples
    --------
    >>> commit_all([])
    []

    References
    ----------
    POSIX rename(2).
    """
    return [pending.commit() for pending in files]


def write_bytes_atomic(destination, data: bytes) -> Path:
    """Write ``data`` to ``destination`` atomically; returns the destination.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> path = write_bytes_atomic(pathlib.Path(tempfile.mkdtemp()) / "x.bin", b"ab")
    >>> path.read_bytes()
    b'ab'

    References
    ----------
    POSIX rename(2), fsync(2).
    """
    with AtomicFile(destination) as pending:
        with open(pending.temporary, "wb") as handle:
            handle.write(data)
        return pending.commit()


def write_text_atomic(destination, text: str) -> Path:
    """Write UTF-8 ``text`` to ``destination`` atomically; returns the destination.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> write_text_atomic(pathlib.Path(tempfile.mkdtemp()) / "x.txt", "hi").read_text()
    'hi'

    References
    ----------
    POSIX rename(2), fsync(2).
    """
    return write_bytes_atomic(destination, text.encode("utf-8"))


def json_text(data) -> str:
    """The tool's JSON layout: two-space indent, no NaN/inf (RFC 8259), a final newline.

    Examples
    --------
    >>> json_text({"rate_hz": 5120.0})
    '{\\n  "rate_hz": 5120.0\\n}\\n'

    References
    ----------
    RFC 8259 (JSON).
    """
    return json.dumps(data, indent=2, allow_nan=False, default=_json_default) + "\n"


def _json_default(value):
    try:
        return float(value)
    except (TypeError, ValueError):
        return str(value)


def write_json_atomic(destination, data) -> Path:
    """Write ``data`` as JSON (:func:`json_text`) to ``destination`` atomically; returns the destination.

    Examples
    --------
    >>> import tempfile, pathlib, json
    >>> path = write_json_atomic(pathlib.Path(tempfile.mkdtemp()) / "r.json", {"schema_version": "1.0"})
    >>> json.loads(path.read_text())["schema_version"]
    '1.0'

    References
    ----------
    RFC 8259 (JSON); POSIX rename(2).
    """
    return write_text_atomic(destination, json_text(data))


__all__ = [
    "AtomicFile",
    "StreamedPages",
    "PARTIAL_SUFFIX",
    "STALE_PARTIAL_AGE_S",
    "commit_all",
    "json_text",
    "partial_path",
    "remove_stale_partials",
    "write_bytes_atomic",
    "write_json_atomic",
    "write_text_atomic",
]
