"""Private plumbing: an ordered thread-pool map and the worker counts it runs with.

Nothing here decides a sample: the results are the same, bit for bit, whatever
the number of threads.
"""

from __future__ import annotations

import collections
import os
from concurrent.futures import ThreadPoolExecutor
from typing import Callable, Iterator

import numpy as np

from vibsynth.errors import InputError

#: Working memory (bytes) that frames made ahead of use on worker threads may hold: each frame in
#: flight holds its lines and its samples (about 24 bytes per sample with the FFT's scratch).
FRAME_PREFETCH_BYTES = 64 * 2**20


def check_workers(workers) -> int:
    """Number of worker threads as a positive int (the samples never depend on it).

    Parameters
    ----------
    workers : int
        Threads that make overlap-add frames (1: all in the calling thread).

    Returns
    -------
    int

    Raises
    ------
    InputError
        Not an integer >= 1.

    References
    ----------
    None (argument check).
    """
    try:
        count = int(workers)
    except (TypeError, ValueError):
        raise InputError(f"workers {workers!r} must be an integer >= 1", "workers") from None
    if isinstance(workers, (bool, np.bool_)) or count != workers or count < 1:
        raise InputError(f"workers {workers!r} must be an integer >= 1", "workers")
    return count


def available_threads(limit: int | None = 8) -> int:
    """The CPUs this process may run on, at most ``limit`` (at least 1).

    Parameters
    ----------
    limit : int or None
        Most threads returned (None: no cap).

    Returns
    -------
    int

    Examples
    --------
    >>> 1 <= available_threads(2) <= 2, available_threads(None) >= available_threads(1)
    (True, True)

    References
    ----------
    Python ``os.sched_getaffinity`` (where available) or ``os.cpu_count``.
    """
    try:
        count = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        count = os.cpu_count() or 1
    return max(1, int(count) if limit is None else min(int(count), int(limit)))


def ordered_map(function: Callable, items, workers: int, in_flight: int) -> Iterator:
    """``function(item)`` for each item, yielded in the order of ``items``.

    With ``workers > 1`` the calls run on a pool of that many threads, at most
    ``in_flight`` of them submitted ahead of the consumer (bounded memory), so
    the consumer's own work (e.g. encoding and writing a file) overlaps with
    them.  Numpy's random draws, its ufuncs and its FFTs release the
    interpreter lock, so frames are made in parallel.  Each call must depend
    only on its item: the results are then the same as sequential calls, bit
    for bit.

    Parameters
    ----------
    function : callable
        Called once per item.
    items : iterable
        Consumed in the calling thread.
    workers : int
        Threads (1: plain sequential calls in the calling thread).
    in_flight : int
        Most calls submitted and not yet yielded (>= workers).

    Yields
    ------
    object
        ``function(item)``, in order.

    References
    ----------
    Python ``concurrent.futures.ThreadPoolExecutor``.
    """
    if workers <= 1:
        for item in items:
            yield function(item)
        return
    executor = ThreadPoolExecutor(max_workers=workers, thread_name_prefix="vibsynth")
    pending: collections.deque = collections.deque()
    try:
        for item in items:
            pending.append(executor.submit(function, item))
            if len(pending) > in_flight:
                yield pending.popleft().result()
        while pending:
            yield pending.popleft().result()
    finally:
        for future in pending:
            future.cancel()
        executor.shutdown(wait=True, cancel_futures=True)


def frame_workers(workers: int, frame_length: int) -> tuple[int, int]:
    """Threads and frames in flight for frames of ``frame_length`` samples within :data:`FRAME_PREFETCH_BYTES`.

    Parameters
    ----------
    workers : int
        Threads asked for.
    frame_length : int
        Samples per frame (or per filtered window).

    Returns
    -------
    (int, int)
        Threads to use (fewer for very long frames, at least 1) and the most
        frames in flight.

    References
    ----------
    None (resource sizing).
    """
    per_frame = 24 * max(int(frame_length), 1)
    fit = max(1, FRAME_PREFETCH_BYTES // per_frame)
    threads = max(1, min(int(workers), fit))
    return threads, max(threads, min(4 * threads, fit))


#: Samples per stretch that :func:`in_stretches` hands a memoryless stage at a time.
STAGE_STRETCH = 1 << 20


def in_stretches(stage: Callable, y: np.ndarray, workers: int) -> None:
    """``stage(y[a:b])`` for consecutive stretches of :data:`STAGE_STRETCH` samples, on up to ``workers`` threads.

    For memoryless (sample by sample) stages that change ``y`` in place, such
    as a transform or a scaling: the result does not depend on the stretches
    or the number of threads.

    Parameters
    ----------
    stage : callable
        ``stage(view)`` changes a 1-D view of ``y`` in place.
    y : numpy.ndarray
        The samples (any unit), changed in place.
    workers : int
        Threads (1: in the calling thread).

    Examples
    --------
    >>> y = np.arange(5.0)
    >>> in_stretches(lambda part: np.multiply(part, 2.0, out=part), y, 2)
    >>> y.tolist()
    [0.0, 2.0, 4.0, 6.0, 8.0]

    References
    ----------
    None (work division).
    """
    stretches = [slice(lo, lo + STAGE_STRETCH) for lo in range(0, y.shape[0], STAGE_STRETCH)]
    for _ in ordered_map(lambda part: stage(y[part]), stretches, workers, workers):
        pass
