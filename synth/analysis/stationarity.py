"""Stationarity of a record from the mean squares of successive windows: the reverse-arrangements test.

The mean square of ``N`` successive windows forms a sequence ``x_1 .. x_N``;
a reverse arrangement is a pair ``i < j`` with ``x_i > x_j``.  For independent
values of one distribution (no trend) their number ``A`` has mean
``N (N - 1) / 4`` and variance ``N (2N + 5) (N - 1) / 72``; a count far from the
mean in either direction shows a monotonic trend.  Unlike chi-square limits on
each window, the test does not assume a Gaussian record: a burst drive whose
window RMS varies by design, but without a trend, passes it when its windows
are long against the bursts (so that successive windows are nearly independent).

References
----------
Bendat, J. S. & Piersol, A. G., *Random Data: Analysis and Measurement
Procedures*, 4th ed., Wiley 2010, section 4.5.2 (reverse-arrangements test,
Table A.6) and section 12.4 (stationarity of mean-square values of successive
intervals).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from vibsynth.errors import InputError

__all__ = ["ReverseArrangements", "reverse_arrangements", "reverse_arrangements_test"]

#: Fewest windows the test is made on (Bendat & Piersol tabulate from N = 10).
MIN_WINDOWS = 10


def reverse_arrangements(values) -> int:
    """Number of reverse arrangements ``A = #{i < j : x_i > x_j}`` of a sequence.

    Parameters
    ----------
    values : array_like
        The sequence (any unit), 1-D.

    Returns
    -------
    int

    Examples
    --------
    >>> reverse_arrangements([3.0, 1.0, 2.0])
    2

    References
    ----------
    Bendat & Piersol (2010), section 4.5.2.
    """
    x = np.asarray(values, dtype=np.float64)
    if x.ndim != 1:
        raise InputError(f"values must be 1-D, got shape {x.shape}", "values")
    count = 0
    for i in range(x.size - 1):  # O(N^2) in vector steps; N is a few hundred windows at most
        count += int(np.count_nonzero(x[i] > x[i + 1 :]))
    return count


@dataclass(frozen=True)
class ReverseArrangements:
    """Result of the reverse-arrangements test.

    Attributes
    ----------
    windows : int
        N, the number of values tested.
    count : int
        A, reverse arrangements counted.
    expected : float
        ``N (N - 1) / 4``.
    std : float
        ``sqrt(N (2N + 5) (N - 1) / 72)``.
    low, high : float
        Two-sided acceptance limits on A at the significance level (normal approximation).
    significance : float
        Probability of rejecting a stationary sequence (two-sided).
    p_value : float
        Two-sided probability of a count at least this far from the mean.
    stationary : bool
        ``low <= A <= high``.
    """

    windows: int
    count: int
    expected: float
    std: float
    low: float
    high: float
    significance: float
    p_value: float
    stationary: bool

    def to_dict(self) -> dict:
        """Plain JSON-ready values.

        Examples
        --------
        >>> reverse_arrangements_test(np.arange(10.0)[::-1]).to_dict()["reverse_arrangements"]
        45

        References
        ----------
        Bendat & Piersol (2010), section 4.5.2.
        """
        return {"windows": self.windows, "reverse_arrangements": self.count, "expected": self.expected,
                "std": self.std, "limit_low": self.low, "limit_high": self.high,
                "significance": self.significance, "p_value": self.p_value, "stationary": self.stationary}


def reverse_arrangements_test(values, significance: float = 0.05) -> ReverseArrangements:
    """Reverse-arrangements test of a sequence for a monotonic trend (two-sided).

    Parameters
    ----------
    values : array_like
        Mean squares (or RMS values) of at least :data:`MIN_WINDOWS` successive windows.
    significance : float
        Probability of rejecting a sequence without trend, 0 < significance < 0.5 (default 0.05).

    Returns
    -------
    ReverseArrangements

    Examples
    --------
    >>> result = reverse_arrangements_test(np.arange(20.0))      # a steady rise: no reverse arrangement
    >>> result.count, result.stationary
    (0, False)

    References
    ----------
    Bendat & Piersol (2010), section 4.5.2 and Table A.6 (N = 20 at 5 %: 64 < A <= 125).
    """
    from scipy.stats import norm

    x = np.asarray(values, dtype=np.float64)
    if x.ndim != 1 or x.size < MIN_WINDOWS:
        raise InputError(f"the reverse-arrangements test needs at least {MIN_WINDOWS} window values, got {x.size}",
                         "values")
    if not np.all(np.isfinite(x)):
        raise InputError("window values must be finite", "values")
    alpha = float(significance)
    if not 0.0 < alpha < 0.5:
        raise InputError(f"significance {significance!r} must lie between 0 and 0.5", "significance")
    n = x.size
    count = reverse_arrangements(x)
    mean = n * (n - 1) / 4.0
    std = math.sqrt(n * (2.0 * n + 5.0) * (n - 1.0) / 72.0)
    z = float(norm.isf(alpha / 2.0))
    low, high = mean - z * std, mean + z * std
    p_value = float(2.0 * norm.sf(abs(count - mean) / std))
    return ReverseArrangements(windows=n, count=count, expected=mean, std=std, low=low, high=high,
                               significance=alpha, p_value=min(p_value, 1.0), stationary=bool(low <= count <= high))
