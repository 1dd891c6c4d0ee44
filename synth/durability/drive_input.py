"""The one place where the durability code opens a drive file (so it can be re-pointed in one line)."""

from __future__ import annotations

__all__ = ["open_drive_samples"]


def open_drive_samples(path, rate_hz: float | None = None, scale: float | None = None):
    """Open a drive file for chunked reading of its acceleration (g).

    Parameters
    ----------
    path : str or os.PathLike
        Drive file (.wav, .flac, .csv, .npy) with or without its sidecar.
    rate_hz : float, optional
        Sample rate in Hz, for files that cannot tell.
    scale : float, optional
        g value of full scale, for audio files without a sidecar.

    Returns
    -------
    object
        With ``rate_hz`` (Hz), ``samples``, ``steady_range`` (start, stop)
        and ``iter_chunks(chunk_samples, start, stop)`` yielding float64 g.

    Examples
    --------
    >>> import numpy as np, tempfile, os
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     path = os.path.join(folder, "x.npy")
    ...     np.save(path, np.zeros(100))
    ...     drive = open_drive_samples(path, rate_hz=1000.0)
    ...     drive.samples
    100

    References
    ----------
    :func:`vibsynth.io.drivefile.open_drive`.
    """
    from vibsynth.io.drivefile import open_drive

    return open_drive(path, rate_hz=rate_hz, scale=scale)
