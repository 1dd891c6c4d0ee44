"""Checks of record input shared by the streaming estimators: sample rate and sample chunks."""

from __future__ import annotations

import math
import numbers

import numpy as np

from vibsynth.errors import InputError


def check_rate_hz(rate_hz: float, name: str = "rate_hz") -> float:
    """A sample rate in Hz as a float, or an InputError naming ``name``.

    Parameters
    ----------
    rate_hz : float
        Samples per second, finite and > 0.
    name : str
        The field or option to name in the error.

    Returns
    -------
    float
        The rate in Hz.

    References
    ----------
    None (input validation).
    """
    if isinstance(rate_hz, bool) or not isinstance(rate_hz, numbers.Real):
        raise InputError(f"{name} must be a number of samples per second, got {rate_hz!r}", location=name)
    rate = float(rate_hz)
    if not math.isfinite(rate) or rate <= 0.0:
        raise InputError(f"{name} must be a finite sample rate > 0 Hz, got {rate_hz!r}", location=name)
    return rate


def as_samples(chunk, first_index: int) -> np.ndarray:
    """A 1-D float64 view/copy of ``chunk``; refuses complex, N-D and non-finite data.

    Parameters
    ----------
    chunk : array_like
        Samples of one channel, in the record's unit (e.g. g).
    first_index : int
        Index of the chunk's first sample in the whole record (for messages).

    Returns
    -------
    numpy.ndarray
        float64, shape (m,), same unit.

    References
    ----------
    None (input validation).
    """
    arr = np.asarray(chunk)
    if arr.ndim != 1:
        raise InputError(
            f"samples must be a 1-D array (one channel), got an array of shape {arr.shape}",
            location="chunk",
        )
    if np.iscomplexobj(arr):
        raise InputError("samples must be real numbers, got complex values", location="chunk")
    try:
        arr = np.asarray(arr, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError("samples must be real numbers", location="chunk") from None
    if arr.size and not np.isfinite(np.add.reduce(arr)):
        bad = np.flatnonzero(~np.isfinite(arr))
        if bad.size:  # (otherwise the sum overflowed on finite values; that is allowed)
            raise InputError(
                f"sample {first_index + int(bad[0])} is {arr[bad[0]]!r}; every sample must be a finite number",
                location=f"sample {first_index + int(bad[0])}",
            )
    return arr
