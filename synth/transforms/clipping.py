"""Hard clipping of a Gaussian stream at a crest factor, with its exact Hermite expansion.

``y = min(max(u, -c), c) / sigma_c`` for a standard Gaussian ``u``: every peak
of the unit-variance output is at most ``c / sigma_c`` (the crest factor the
user asked for, peak / RMS), where ``sigma_c`` is the RMS of the clipped
Gaussian. Clipping lowers the RMS, so the Gaussian clip level ``c`` is solved
from ``c / sigma_c(c) = crest factor`` (:func:`solve_clip_level`); the caller
then scales by the target RMS and the peak/RMS ratio is kept.

Closed forms (``phi``, ``Phi``: standard normal density and distribution):

* ``E[y_c^2] = (2 Phi(c) - 1) - 2 c phi(c) + 2 c^2 (1 - Phi(c))``;
* ``E[y_c^4] = 3 (2 Phi(c) - 1) - 2 phi(c) (c^3 + 3c) + 2 c^4 (1 - Phi(c))``;
* Hermite coefficients of ``y_c = sum a_n He_n(u)``: ``a_1 = 2 Phi(c) - 1``,
  odd ``n >= 3``: ``a_n = -2 phi(c) He_{n-2}(c) / n!``, even ``n``: 0. (By
  Stein's identity ``E[g(U) He_n(U)] = E[g'(U) He_{n-1}(U)]`` with
  ``g' = 1`` on (-c, c) and ``He_{n-1} phi = -(He_{n-2} phi)'``.)

References
----------
.. [1] J. H. Van Vleck and D. Middleton, "The spectrum of clipped noise",
       Proc. IEEE 54(1), 1966 (Hermite expansion of clipped Gaussian
       noise).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

from vibsynth.errors import InputError, OutOfRangeError

__all__ = [
    "ClipTransform",
    "MAX_CREST_FACTOR",
    "clip_hermite_coefficients",
    "clipped_gaussian_kurtosis",
    "clipped_gaussian_variance",
    "solve_clip_level",
]

#: Largest crest factor accepted: beyond it a Gaussian record of any practical
#: length never reaches the clip level (P(|u| > 10) ~ 1.5e-23 per sample).
MAX_CREST_FACTOR = 10.0
_BLOCK_SAMPLES = 1 << 15
_MAX_ORDER = 150
_SQRT2 = math.sqrt(2.0)


def _phi(c: float) -> float:
    return math.exp(-0.5 * c * c) / math.sqrt(2.0 * math.pi)


def _check_level(clip_level_sigma) -> float:
    try:
        c = float(clip_level_sigma)
    except (TypeError, ValueError):
        raise InputError(f"{clip_level_sigma!r} is not a number", location="clip_level_sigma") from None
    if not (math.isfinite(c) and c > 0.0):
        raise OutOfRangeError(
            f"{clip_level_sigma!r} must be a positive finite clip level in Gaussian sigma units",
            location="clip_level_sigma",
        )
    return c


def clipped_gaussian_variance(clip_level_sigma: float) -> float:
    """Exact variance of a standard Gaussian clipped at ``±c``.

    Parameters
    ----------
    clip_level_sigma : float
        Clip level ``c`` in units of the Gaussian's standard deviation (> 0).

    Returns
    -------
    variance : float
        ``E[min(max(u, -c), c)^2] = (2 Phi(c) - 1) - 2 c phi(c) + 2 c^2 (1 - Phi(c))``
        in units of the Gaussian's variance.

    Examples
    --------
    >>> round(clipped_gaussian_variance(3.0), 6)
    0.995007

    References
    ----------
    .. [1] J. H. Van Vleck and D. Middleton, "The spectrum of clipped noise",
           Proc. IEEE 54(1), 1966.
    """
    c = _check_level(clip_level_sigma)
    inside = math.erf(c / _SQRT2)  # 2 Phi(c) - 1
    tail = 0.5 * math.erfc(c / _SQRT2)  # 1 - Phi(c)
    return inside - 2.0 * c * _phi(c) + 2.0 * c * c * tail


def clipped_gaussian_kurtosis(clip_level_sigma: float) -> float:
    """Exact Pearson kurtosis of a standard Gaussian clipped at ``±c``.

    Parameters
    ----------
    clip_level_sigma : float
        Clip level ``c`` in Gaussian sigma units (> 0).

    Returns
    -------
    kurtosis : float
        ``E[y^4] / E[y^2]^2`` (dimensionless; 3 as c -> infinity, 1 as c -> 0),
        with ``E[y^4] = 3 (2 Phi(c) - 1) - 2 phi(c) (c^3 + 3c) + 2 c^4 (1 - Phi(c))``.

    Examples
    --------
    >>> round(clipped_gaussian_kurtosis(3.0), 4)
    2.9206

    References
    ----------
    .. [1] J. H. Van Vleck and D. Middleton, "The spectrum of clipped noise",
           Proc. IEEE 54(1), 1966.
    """
    c = _check_level(clip_level_sigma)
    inside = math.erf(c / _SQRT2)
    tail = 0.5 * math.erfc(c / _SQRT2)
    m4 = 3.0 * inside - 2.0 * _phi(c) * (c**3 + 3.0 * c) + 2.0 * c**4 * tail
    return m4 / clipped_gaussian_variance(c) ** 2


def clip_hermite_coefficients(clip_level_sigma: float, n_max: int) -> np.ndarray:
    """Hermite coefficients of a standard Gaussian clipped at ``±c`` (closed form).

    Parameters
    ----------
    clip_level_sigma : float
        Clip level ``c`` in Gaussian sigma units (> 0).
    n_max : int
        Highest order, 1 <= n_max <= 150.

    Returns
    -------
    a : ndarray, shape (n_max + 1,)
        ``a[n]`` with ``min(max(u, -c), c) = sum a_n He_n(u)`` (probabilists'
        Hermite polynomials): ``a_1 = 2 Phi(c) - 1``, odd ``n >= 3``:
        ``a_n = -2 phi(c) He_{n-2}(c) / n!``, even ``n`` (and ``a_0``): 0.
        Units of the Gaussian's standard deviation.

    Examples
    --------
    >>> np.round(clip_hermite_coefficients(3.0, 3), 4)
    array([ 0.    ,  0.9973,  0.    , -0.0044])

    References
    ----------
    .. [1] J. H. Van Vleck and D. Middleton, "The spectrum of clipped noise",
           Proc. IEEE 54(1), 1966.
    """
    c = _check_level(clip_level_sigma)
    n_max = _order(n_max)
    a = np.zeros(n_max + 1)
    a[1] = math.erf(c / _SQRT2)
    # He_k(c) by the three-term recurrence, and n! as a running product
    he_prev, he_curr = 1.0, c  # He_0, He_1
    factorial = 1.0
    for n in range(2, n_max + 1):
        factorial *= n
        if n % 2 == 1:
            a[n] = -2.0 * _phi(c) * he_prev / factorial  # he_prev is He_{n-2}
        he_prev, he_curr = he_curr, c * he_curr - (n - 1) * he_prev  # He_n
        # shift: after this step he_prev = He_{n-1}, he_curr = He_n
    return a


def _order(n_max) -> int:
    if isinstance(n_max, bool) or not isinstance(n_max, (int, np.integer)) or not 1 <= n_max <= _MAX_ORDER:
        raise InputError(f"{n_max!r} must be an integer from 1 to {_MAX_ORDER}", location="n_max")
    return int(n_max)


@dataclass(frozen=True)
class ClipTransform:
    """Clip a standard Gaussian at ``±c`` and rescale to unit variance.

    Attributes
    ----------
    clip_level_sigma : float
        Clip level ``c`` in units of the Gaussian's standard deviation.

    Notes
    -----
    ``apply(u) = min(max(u, -c), c) / sigma_c`` has zero mean, unit variance
    and peak ``crest_factor = c / sigma_c`` (in units of its own RMS). Build
    it from a crest factor with :func:`solve_clip_level`.

    Examples
    --------
    >>> round(ClipTransform(3.0).crest_factor, 4)
    3.0075

    References
    ----------
    .. [1] J. H. Van Vleck and D. Middleton, "The spectrum of clipped noise",
           Proc. IEEE 54(1), 1966.
    """

    clip_level_sigma: float

    def __post_init__(self):
        _check_level(self.clip_level_sigma)

    @property
    def clipped_std(self) -> float:
        """RMS ``sigma_c`` of the clipped (not yet rescaled) Gaussian, sigma units."""
        return math.sqrt(clipped_gaussian_variance(self.clip_level_sigma))

    @property
    def crest_factor(self) -> float:
        """Peak / RMS of the output, ``c / sigma_c`` (dimensionless)."""
        return self.clip_level_sigma / self.clipped_std

    @property
    def family(self) -> str:
        """``"clip"``, as sidecars record it."""
        return "clip"

    @property
    def peak_limit(self) -> float:
        """Largest possible ``|apply(u)|``: the crest factor (output RMS units)."""
        return float(self.crest_factor)

    def gaussian_level(self, y) -> np.ndarray:
        """``g^-1(y)`` in sigma of the Gaussian: ``y sigma_c`` inside ``±crest_factor``, ``±inf`` at or beyond it.

        No Gaussian level reaches the far side of a clipped value, so the
        bounds map to infinities (the record never exceeds them).
        """
        y = np.asarray(y, dtype=np.float64)
        crest = self.crest_factor
        u = y * self.clipped_std
        u = np.where(y >= crest, np.inf, u)
        return np.where(y <= -crest, -np.inf, u)

    @property
    def series_order(self) -> int:
        """Hermite order used for correlation mapping (the series is infinite, odd orders only)."""
        return 61

    def moments(self) -> tuple[float, float, float, float]:
        """Exact mean, variance, skewness and Pearson kurtosis of the output.

        Returns
        -------
        mean, variance, skewness, kurtosis : float
            ``(0, 1, 0, clipped_gaussian_kurtosis(c))``, dimensionless.

        References
        ----------
        .. [1] J. H. Van Vleck and D. Middleton, "The spectrum of clipped
               noise", Proc. IEEE 54(1), 1966.
        """
        return 0.0, self.output_variance(), 0.0, clipped_gaussian_kurtosis(self.clip_level_sigma)

    def output_variance(self) -> float:
        """Variance of :meth:`apply`'s output for a standard Gaussian input.

        Returns
        -------
        variance : float
            Dimensionless; 1 by construction (closed form / sigma_c^2).

        References
        ----------
        .. [1] J. H. Van Vleck and D. Middleton, "The spectrum of clipped
               noise", Proc. IEEE 54(1), 1966.
        """
        return clipped_gaussian_variance(self.clip_level_sigma) / self.clipped_std**2

    def apply(self, u, out=None):
        """Clip standard Gaussian samples and rescale them to unit variance.

        Parameters
        ----------
        u : array_like of float64
            Standard Gaussian samples (dimensionless).
        out : ndarray of float64, optional
            Destination of the same shape; may be `u` itself (in-place).

        Returns
        -------
        y : ndarray of float64
            ``min(max(u, -c), c) / sigma_c``: unit variance, peak at most
            :attr:`crest_factor` (dimensionless; multiply by the target RMS in g).

        References
        ----------
        .. [1] J. H. Van Vleck and D. Middleton, "The spectrum of clipped
               noise", Proc. IEEE 54(1), 1966.
        """
        u = np.asarray(u, dtype=np.float64)
        if out is None:
            out = np.empty_like(u)
        elif not isinstance(out, np.ndarray) or out.dtype != np.float64 or out.shape != u.shape:
            raise InputError(f"out must be a float64 array of shape {u.shape}", location="out")
        c = self.clip_level_sigma
        scale = 1.0 / self.clipped_std
        if u.flags.c_contiguous and out.flags.c_contiguous:
            flat_in, flat_out = u.reshape(-1), out.reshape(-1)
            for start in range(0, flat_in.size, _BLOCK_SAMPLES):
                block = slice(start, start + _BLOCK_SAMPLES)
                np.clip(flat_in[block], -c, c, out=flat_out[block])
                flat_out[block] *= scale
        else:
            np.clip(u, -c, c, out=out)
            out *= scale
        return out

    def hermite_coefficients(self, n_max: int) -> np.ndarray:
        """Hermite coefficients of the unit-variance output (closed form / sigma_c).

        Parameters
        ----------
        n_max : int
            Highest order, 1 <= n_max <= 150.

        Returns
        -------
        a : ndarray, shape (n_max + 1,)
            ``a[n]`` of ``apply(u) = sum a_n He_n(u)`` (dimensionless).

        References
        ----------
        .. [1] J. H. Van Vleck and D. Middleton, "The spectrum of clipped
               noise", Proc. IEEE 54(1), 1966.
        """
        return clip_hermite_coefficients(self.clip_level_sigma, n_max) / self.clipped_std

    def cdf(self, y):
        """Distribution of the output: ``Phi(y sigma_c)`` inside ``±crest_factor``, atoms at the ends.

        Parameters
        ----------
        y : array_like
            Output levels (unit-variance scale, dimensionless).

        Returns
        -------
        p : ndarray
            ``P(Y <= y)``; 0 below ``-crest_factor``, 1 from ``+crest_factor`` on.

        References
        ----------
        .. [1] J. H. Van Vleck and D. Middleton, "The spectrum of clipped
               noise", Proc. IEEE 54(1), 1966.
        """
        y = np.asarray(y, dtype=np.float64)
        p = special.ndtr(y * self.clipped_std)
        return np.where(y >= self.crest_factor, 1.0, np.where(y < -self.crest_factor, 0.0, p))

    def ppf(self, p):
        """Quantile of the output: ``apply(Phi^-1(p))`` (dimensionless levels).

        Parameters
        ----------
        p : array_like
            Probabilities in (0, 1).

        Returns
        -------
        y : ndarray
            Output levels (dimensionless); saturate at ``±crest_factor``.

        References
        ----------
        .. [1] J. H. Van Vleck and D. Middleton, "The spectrum of clipped
               noise", Proc. IEEE 54(1), 1966.
        """
        return self.apply(special.ndtri(np.asarray(p, dtype=np.float64)))


def solve_clip_level(crest_factor: float) -> ClipTransform:
    """Gaussian clip level that gives a target peak/RMS after clipping.

    Clipping at ``±c`` lowers the RMS to ``sigma_c``; the output's crest factor
    is ``c / sigma_c``, which rises monotonically from 1 (c -> 0) to infinity.
    This solves ``c / sigma_c(c) = crest_factor`` (Brent's method, relative
    tolerance 1e-14). E.g. crest factor 3 needs ``c`` = 2.9923 sigma.

    Parameters
    ----------
    crest_factor : float
        Wanted peak / RMS of the output (dimensionless), ``1 < crest_factor <= 10``.

    Returns
    -------
    ClipTransform
        Transform whose unit-variance output peaks at exactly `crest_factor`.

    Raises
    ------
    OutOfRangeError
        If `crest_factor` is not in (1, 10].

    Examples
    --------
    >>> round(solve_clip_level(3.0).clip_level_sigma, 4)
    2.9923

    References
    ----------
    .. [1] R. P. Brent, "Algorithms for Minimization without Derivatives",
           Prentice-Hall, 1973 (root finding).
    .. [2] J. H. Van Vleck and D. Middleton, "The spectrum of clipped noise",
           Proc. IEEE 54(1), 1966.
    """
    try:
        target = float(crest_factor)
    except (TypeError, ValueError):
        raise InputError(f"{crest_factor!r} is not a number", location="crest_factor") from None
    if not (math.isfinite(target) and 1.0 < target <= MAX_CREST_FACTOR):
        raise OutOfRangeError(
            f"{crest_factor!r} is outside the reachable range: the crest factor (peak/RMS) of a "
            f"clipped signal must be above 1 (a square wave has exactly 1) and at most "
            f"{MAX_CREST_FACTOR:g} (beyond that a Gaussian record never reaches the clip level; "
            "omit clipping instead)",
            location="crest_factor",
        )

    def mismatch(c):
        return c / math.sqrt(clipped_gaussian_variance(c)) - target

    # c <= crest (since sigma_c <= 1) and c / sigma_c -> 1 as c -> 0
    from scipy import optimize  # here only: slow to import, and a Gaussian drive never needs it

    level = optimize.brentq(mismatch, 1e-12, target, xtol=1e-15, rtol=1e-14)
    return ClipTransform(level)
