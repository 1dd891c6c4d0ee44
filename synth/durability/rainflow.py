"""Rainflow cycle counting to ASTM E1049-85, streamed over a record chunk by chunk.

Two stages, both keeping only a small state between chunks:

1. :class:`TurningPoints` reduces the samples to their peaks and valleys
   (reversals).  The first sample of the record counts as a reversal and the
   last one is emitted at :meth:`TurningPoints.finish`; runs of equal values
   are one point.
2. :class:`RainflowCounter` applies the three-point rainflow method of
   ASTM E1049-85 section 5.4.4 to the reversals as they come: with X the
   range between the newest two points and Y the range before it, while
   ``X >= Y`` it counts Y as one cycle and drops its two points, unless Y
   contains the starting point, in which case it counts Y as a half cycle
   and drops the starting point.  At :meth:`RainflowCounter.finish` each
   range left on the stack is counted as a half cycle (the residue).

Why not a general-purpose package: the counter must run over drives of any
length in constant memory (the stack holds the residue only) and feed many
oscillators at once; this implementation is pure numpy + Python and streams.

References
----------
ASTM E1049-85 (Reapproved 2017), "Standard Practices for Cycle Counting in
Fatigue Analysis", section 5.4.4 (rainflow counting) and its Fig. 6 example.
"""

from __future__ import annotations

import numpy as np

from vibsynth.errors import InputError

__all__ = ["TurningPoints", "RainflowCounter", "rainflow_cycles", "turning_points"]


class TurningPoints:
    """Peaks and valleys of a record given in chunks.

    Parameters
    ----------
    refine : bool
        Replace each interior peak or valley by the vertex of the parabola
        through it and its two neighbouring samples (default False: the sample
        values as they are).  For a sampled continuous response this recovers
        the peak between samples: at 8 samples per cycle the sampled peaks of a
        sine are on average 2.6 % low (19 % low in damage at b = 8), the
        parabola's vertex 0.3 % low on average and 0.85 % at worst.

    Examples
    --------
    >>> tp = TurningPoints()
    >>> tp.feed([0.0, 1.0, 2.0]).tolist() + tp.feed([1.0, 1.0, 3.0]).tolist() + tp.finish().tolist()
    [0.0, 2.0, 1.0, 3.0]

    References
    ----------
    ASTM E1049-85 (2017), section 3 (peak, valley, reversal).
    """

    def __init__(self, refine: bool = False):
        self.refine = bool(refine)
        self._last = None        # last sample seen (the running extreme of the current run)
        self._before = None      # the sample before it
        self._direction = 0.0    # +1 rising, -1 falling, 0 not yet known

    def feed(self, chunk) -> np.ndarray:
        """Reversals confirmed by the next samples.

        Parameters
        ----------
        chunk : array_like
            Next samples (any unit), 1-D.

        Returns
        -------
        numpy.ndarray
            The reversals (same unit), in order.
        """
        x = np.asarray(chunk, dtype=np.float64).ravel()
        if x.size == 0:
            return np.zeros(0)
        emitted = []
        if self._last is None:
            emitted.append(x[:1])
            self._last = float(x[0])
        before = self._last if self._before is None else self._before
        values = np.concatenate([[self._last], x])
        step = np.diff(values)
        moving = np.flatnonzero(step != 0.0)
        self._before = float(values[-2])
        self._last = float(values[-1])
        if moving.size == 0:
            return np.concatenate(emitted) if emitted else np.zeros(0)
        signs = np.sign(step[moving])
        previous = np.concatenate([[self._direction], signs[:-1]])
        turns = np.flatnonzero((signs != previous) & (previous != 0.0))
        # a turn before moving[k]: the reversal is the value where the earlier run ended, values[moving[k]]
        at = moving[turns]
        found = values[at]
        if self.refine and at.size:
            left = np.where(at >= 1, values[np.maximum(at - 1, 0)], before)
            right = values[at + 1]
            curvature = left - 2.0 * found + right
            safe = np.where(curvature != 0.0, curvature, 1.0)
            shift = np.where(curvature != 0.0, 0.5 * (left - right) / safe, 0.0)
            shift = np.clip(shift, -0.5, 0.5)
            found = found - 0.25 * (left - right) * shift
        emitted.append(found)
        self._direction = float(signs[-1])
        return np.concatenate(emitted)

    def finish(self) -> np.ndarray:
        """The last sample, which ends the final run (empty if nothing was fed or it was already emitted)."""
        if self._last is None or self._direction == 0.0:
            return np.zeros(0)
        self._direction = 0.0
        return np.array([self._last])


def turning_points(values) -> np.ndarray:
    """Peaks and valleys of a whole record (first and last samples included).

    Parameters
    ----------
    values : array_like
        Samples (any unit), 1-D.

    Returns
    -------
    numpy.ndarray
        The reversals, same unit.

    Examples
    --------
    >>> turning_points([0, 1, 1, 3, 2, 2, -1, 0]).tolist()
    [0.0, 3.0, -1.0, 0.0]

    References
    ----------
    ASTM E1049-85 (2017), section 3.
    """
    tp = TurningPoints()
    return np.concatenate([tp.feed(values), tp.finish()])


class RainflowCounter:
    """ASTM E1049-85 three-point rainflow counting over reversals given in chunks.

    Counted cycles are handed back by :meth:`feed` and :meth:`finish` (and not
    kept), so memory holds only the stack of open ranges.

    Examples
    --------
    The standard's Fig. 6 example (ASTM E1049-85, 5.4.4):

    >>> counter = RainflowCounter()
    >>> r1, c1 = counter.feed([-2, 1, -3, 5, -1, 3, -4, 4, -2])
    >>> r2, c2 = counter.finish()
    >>> sorted(zip(np.concatenate([r1, r2]).tolist(), np.concatenate([c1, c2]).tolist()))
    [(3.0, 0.5), (4.0, 0.5), (4.0, 1.0), (6.0, 0.5), (8.0, 0.5), (8.0, 0.5), (9.0, 0.5)]

    References
    ----------
    ASTM E1049-85 (Reapproved 2017), section 5.4.4 and Fig. 6.
    """

    def __init__(self):
        self._stack: list[float] = []
        self._start = 0  # index in the stack of the starting point S (always 0 while it is there)
        self._has_start = True

    def feed(self, reversals):
        """Count the cycles that the next reversals close.

        Parameters
        ----------
        reversals : array_like
            Next peaks and valleys (alternating), 1-D.

        Returns
        -------
        ranges : numpy.ndarray
            Range (peak minus valley, >= 0) of each counted cycle, same unit as the input.
        counts : numpy.ndarray
            1.0 for a full cycle, 0.5 for a half cycle.
        """
        points = np.asarray(reversals, dtype=np.float64).ravel()
        stack = self._stack
        ranges: list[float] = []
        counts: list[float] = []
        has_start = self._has_start
        for point in points.tolist():
            stack.append(point)
            while len(stack) >= 3:
                x = abs(stack[-1] - stack[-2])
                y = abs(stack[-2] - stack[-3])
                if x < y:
                    break
                if len(stack) == 3 and has_start:
                    # Y contains the starting point: half cycle, drop S, the next point becomes the start
                    ranges.append(y)
                    counts.append(0.5)
                    del stack[0]
                else:
                    ranges.append(y)
                    counts.append(1.0)
                    del stack[-3:-1]
        self._has_start = has_start
        return np.asarray(ranges, dtype=np.float64), np.asarray(counts, dtype=np.float64)

    def finish(self):
        """Count the residue: each range still on the stack as a half cycle; the counter is then empty.

        Returns
        -------
        ranges, counts : numpy.ndarray
            As for :meth:`feed` (counts all 0.5).
        """
        stack = np.asarray(self._stack, dtype=np.float64)
        self._stack = []
        ranges = np.abs(np.diff(stack))
        return ranges, np.full(ranges.size, 0.5)


def rainflow_cycles(values):
    """Rainflow count of a whole record: ranges and counts (ASTM E1049-85, 5.4.4).

    Parameters
    ----------
    values : array_like
        Samples (any unit), 1-D; reduced to reversals first.

    Returns
    -------
    ranges : numpy.ndarray
        Cycle ranges, same unit as ``values``.
    counts : numpy.ndarray
        1.0 (full cycle) or 0.5 (half cycle) for each range.

    Examples
    --------
    >>> ranges, counts = rainflow_cycles([-2, 1, -3, 5, -1, 3, -4, 4, -2])
    >>> float(np.sum(counts[ranges == 4.0]))
    1.5

    References
    ----------
    ASTM E1049-85 (Reapproved 2017), section 5.4.4 and Fig. 6.
    """
    x = np.asarray(values, dtype=np.float64)
    if x.ndim != 1:
        raise InputError(f"values must be 1-D, got shape {x.shape}", location="values")
    counter = RainflowCounter()
    r1, c1 = counter.feed(turning_points(x))
    r2, c2 = counter.finish()
    return np.concatenate([r1, r2]), np.concatenate([c1, c2])
