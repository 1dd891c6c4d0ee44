"""The level schedule stage, and the drive duration a schedule implies.

The schedule multiplies the whole drive (random, tones and narrow bands) by
the gain of :meth:`vibsynth.profile.mixed.Schedule.gain`: each step's level
``10^(dB/20)``, with a raised-cosine transition of ``ramp_s`` at the start of
every step after the first.  The gain depends only on the sample index, so the
samples do not depend on the chunk size.

References
----------
Harris, F. J., Proc. IEEE 66(1), 1978 (raised-cosine transitions).
"""

from __future__ import annotations

import math

import numpy as np

from vibsynth.errors import InputError


def apply_schedule(x: np.ndarray, start: int, schedule, rate_hz: float) -> None:
    """Multiply samples ``start ..`` of a drive (in place) by the schedule's gain.

    Parameters
    ----------
    x : numpy.ndarray
        Samples, g (modified in place).
    start : int
        Index of ``x[0]`` in the record.
    schedule : vibsynth.profile.mixed.Schedule
    rate_hz : float
        Sample rate, Hz.

    Examples
    --------
    >>> from vibsynth.profile.mixed import Schedule
    >>> x = np.ones(3); apply_schedule(x, 0, Schedule(((-20.0, 1.0),)), 10.0); x.round(3).tolist()
    [0.1, 0.1, 0.1]

    References
    ----------
    Harris (1978), raised-cosine transitions.
    """
    t = np.arange(start, start + x.size, dtype=float) / float(rate_hz)
    x *= schedule.gain(t)


def drive_duration_s(profile, duration_s: float | None) -> float:
    """The drive's duration: the schedule's when the profile has one, else ``duration_s``.

    Parameters
    ----------
    profile : AsdProfile
    duration_s : float or None
        Requested duration, s (may be None with a schedule).

    Returns
    -------
    float
        Duration, s.

    Raises
    ------
    InputError
        No duration and no schedule, or a duration that disagrees with the schedule's.

    Examples
    --------
    >>> from vibsynth.profile.asd import AsdProfile
    >>> drive_duration_s(AsdProfile([20, 2000], [0.01, 0.01]), 5.0)
    5.0

    References
    ----------
    The schedule's duration is the sum of its steps.
    """
    schedule = getattr(getattr(profile, "mixed", None), "schedule", None)
    if schedule is None:
        if duration_s is None:
            raise InputError("no duration given; give a duration in s (or a [[schedule]] in the profile)",
                             location="duration")
        return duration_s
    total = schedule.duration_s
    if duration_s is not None and not math.isclose(float(duration_s), total, rel_tol=1e-9, abs_tol=1e-9):
        raise InputError(f"duration {duration_s:g} s differs from the profile's schedule ({total:g} s, the sum of "
                         "its steps); omit the duration", location="duration")
    return total


__all__ = ["apply_schedule", "drive_duration_s"]
