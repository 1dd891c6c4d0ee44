"""Cubic Hermite transforms: a Gaussian stream mapped to target skewness and kurtosis.

The memoryless transform ``y = g(u)`` of a standard Gaussian ``u`` is the
cubic Hermite model of Winterstein (1988):

* "softening" form, used wherever it reaches the target (kurtosis above 3):
  ``y = kappa (u + c3 He2(u) + c4 He3(u))`` with
  ``He2(u) = u^2 - 1``, ``He3(u) = u^3 - 3u`` and
  ``kappa = (1 + 2 c3^2 + 6 c4^2)^(-1/2)``;
* "hardening" (inverse) form, for every kurtosis below 3 and for skewed
  targets above 3 that the monotone softening cubic cannot reach: the inverse form
  ``u = z + h3 He2(z) + h4 He3(z)`` solved per sample for ``z``, then
  ``y = kappa (z - mean_offset)`` standardised to zero mean, unit variance.

The coefficients are solved from the exact moment equations (not the
approximate closed forms, which overshoot), and only monotone cubics are
accepted: a cubic ``z + a (z^2-1) + b (z^3-3z)`` is strictly increasing iff
``b > 0`` and ``a^2 < 3 b (1 - 3 b)`` (or ``a = b = 0``).

All values are dimensionless: the transform works on a unit-variance Gaussian
and returns a unit-variance output; the caller scales by the target RMS (g).

References
----------
.. [1] S. R. Winterstein, "Nonlinear vibration models for extremes and
       fatigue", J. Eng. Mech. 114(10), 1988.
.. [2] S. R. Winterstein, T. C. Ude and G. Kleiven, "Springing and slow-drift
       responses: predicted extremes and fatigue vs. simulation", Proc. BOSS-94, 1994.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

from vibsynth.errors import InputError, OutOfRangeError

# Samples per block in apply()/inverse(): small enough for the working set to
# stay in cache, large enough that the Python loop costs nothing.
_BLOCK_SAMPLES = 1 << 15
# Largest |u| that matters in float64: phi(38.5) ~ 1e-323.
_U_LIMIT = 38.5
# Trapezoid points for moments of the hardening form (the integrand is an
# entire function of z, so the trapezoid rule converges geometrically).
_QUADRATURE_POINTS = 2001
# Exact-moment residual the solver must reach.
_RESIDUAL_LIMIT = 1e-10
# Below this h4 the Cardano form loses digits; a perturbative start is used.
_SMALL_H4 = 1e-9
# Largest Hermite order for which n! fits a float64 comfortably.
_MAX_ORDER = 150

__all__ = [
    "HermiteTransform",
    "KurtosisRange",
    "cubic_hermite_moments",
    "cubic_hermite_skewness_kurtosis",
    "reachable_kurtosis_range",
    "solve_cubic_hermite",
    "winterstein_1988_coefficients",
]


# ---------------------------------------------------------------------------
# Exact moments of the softening cubic
# ---------------------------------------------------------------------------


def cubic_hermite_moments(c3, c4):
    """Exact raw moments of ``z = u + c3 (u^2 - 1) + c4 (u^3 - 3u)``, u ~ N(0, 1).

    Parameters
    ----------
    c3, c4 : float or array_like
        Hermite coefficients (dimensionless); arrays broadcast.

    Returns
    -------
    m2, m3, m4 : float or ndarray
        ``E[z^2]``, ``E[z^3]``, ``E[z^4]`` (dimensionless). ``E[z] = 0``.

    Notes
    -----
    ``E[z^2] = 1 + 2 c3^2 + 6 c4^2``,
    ``E[z^3] = 8 c3^3 + c3 (6 + 36 c4 + 108 c4^2)``,
    ``E[z^4] = 3 + 24 c4 + 252 c4^2 + 1296 c4^3 + 3348 c4^4
    + c3^2 (60 + 576 c4 + 2232 c4^2) + 60 c3^4``.

    Examples
    --------
    >>> tuple(round(float(m), 4) for m in cubic_hermite_moments(0.0, 0.1))
    (1.06, 0.0, 9.5508)

    References
    ----------
    .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes and
           fatigue", J. Eng. Mech. 114(10), 1988.
    """
    c3 = np.asarray(c3, dtype=np.float64)
    c4 = np.asarray(c4, dtype=np.float64)
    m2 = 1.0 + 2.0 * c3**2 + 6.0 * c4**2
    m3 = 8.0 * c3**3 + c3 * (6.0 + 36.0 * c4 + 108.0 * c4**2)
    m4 = (
        3.0
        + 24.0 * c4
        + 252.0 * c4**2
        + 1296.0 * c4**3
        + 3348.0 * c4**4
        + c3**2 * (60.0 + 576.0 * c4 + 2232.0 * c4**2)
        + 60.0 * c3**4
    )
    if m2.ndim == 0:
        return float(m2), float(m3), float(m4)
    return m2, m3, m4


def cubic_hermite_skewness_kurtosis(c3, c4):
    """Exact skewness and (Pearson) kurtosis of the softening cubic Hermite model.

    Parameters
    ----------
    c3, c4 : float or array_like
        Hermite coefficients (dimensionless); arrays broadcast.

    Returns
    -------
    skewness, kurtosis : float or ndarray
        ``E[z^3] / E[z^2]^1.5`` and ``E[z^4] / E[z^2]^2`` (kurtosis 3 for a
        Gaussian), dimensionless.

    Examples
    --------
    >>> tuple(round(float(m), 4) for m in cubic_hermite_skewness_kurtosis(0.0, 0.1))
    (0.0, 8.5002)

    References
    ----------
    .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes and
           fatigue", J. Eng. Mech. 114(10), 1988.
    """
    m2, m3, m4 = cubic_hermite_moments(c3, c4)
    return m3 / m2**1.5, m4 / m2**2


def winterstein_1988_coefficients(skewness: float, kurtosis: float) -> tuple[float, float]:
    """Winterstein's approximate closed-form softening coefficients (c3, c4).

    ``c4 = (sqrt(1 + 1.5 (kurtosis - 3)) - 1) / 18`` and
    ``c3 = skewness / (6 (1 + 6 c4))``. They are a starting guess only: the
    exact moments they produce overshoot the target (asking kurtosis 6 gives
    about 6.41); :func:`solve_cubic_hermite` solves the exact equations.

    Parameters
    ----------
    skewness : float
        Target skewness (dimensionless).
    kurtosis : float
        Target Pearson kurtosis (dimensionless), at least 3.

    Returns
    -------
    c3, c4 : float
        Approximate Hermite coefficients (dimensionless).

    Raises
    ------
    OutOfRangeError
        If ``kurtosis < 3`` (the closed forms are for the softening case).

    Examples
    --------
    >>> tuple(round(float(c), 4) for c in winterstein_1988_coefficients(0.0, 4.0))
    (0.0, 0.0323)

    References
    ----------
    .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes and
           fatigue", J. Eng. Mech. 114(10), 1988.
    """
    skewness = _finite(skewness, "skewness")
    kurtosis = _finite(kurtosis, "kurtosis")
    if kurtosis < 3.0:
        raise OutOfRangeError(
            f"{kurtosis:g} is below 3; the 1988 closed forms cover the softening case "
            "(kurtosis >= 3) only",
            location="kurtosis",
        )
    c4 = (math.sqrt(1.0 + 1.5 * (kurtosis - 3.0)) - 1.0) / 18.0
    c3 = skewness / (6.0 * (1.0 + 6.0 * c4))
    return c3, c4


# ---------------------------------------------------------------------------
# Monotone cubic and its per-sample inverse
# ---------------------------------------------------------------------------


def _is_monotone(a3: float, a4: float) -> bool:
    """True if ``z + a3 He2(z) + a4 He3(z)`` is strictly increasing in z."""
    if a3 == 0.0 and a4 == 0.0:
        return True
    return 0.0 < a4 < 1.0 / 3.0 and a3 * a3 < 3.0 * a4 * (1.0 - 3.0 * a4)


def _cubic_forward(z, a3, a4):
    """``z + a3 (z^2-1) + a4 (z^3-3z)`` (allocating; broadcasts)."""
    return ((a4 * z + a3) * z + (1.0 - 3.0 * a4)) * z - a3


def _cubic_slope(z, a3, a4):
    """Derivative ``1 + 2 a3 z + 3 a4 (z^2 - 1)`` (allocating; broadcasts)."""
    return (3.0 * a4 * z + 2.0 * a3) * z + (1.0 - 3.0 * a4)


def _cubic_root(v, a3, a4):
    """Solve ``z + a3 (z^2-1) + a4 (z^3-3z) = v`` for real z (monotone cubic).

    Cardano's formula in its cancellation-free form (one real root, since
    the depressed cubic has p > 0 when the cubic is monotone), then two
    guarded Newton steps; for a tiny a4 a perturbative start replaces
    Cardano. Arguments broadcast; returns a new float64 array.
    """
    v = np.asarray(v, dtype=np.float64)
    a3 = np.asarray(a3, dtype=np.float64)
    a4 = np.asarray(a4, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        small = a4 < _SMALL_H4
        a = np.where(small, 1.0, a4)  # safe divisor on the small branch
        c = 1.0 - 3.0 * a
        shift = a3 / (3.0 * a)
        p = (3.0 * a * c - a3 * a3) / (3.0 * a * a)
        q = (2.0 * a3**3 - 9.0 * a * a3 * c) / (27.0 * a**3) - (a3 + v) / a
        half = 0.5 * np.abs(q)
        big = np.cbrt(half + np.sqrt(half * half + p**3 / 27.0))
        big = np.copysign(big, -q)
        z = big - p / (3.0 * big) - shift
        if np.any(small):
            guess = v - a3 * (v * v - 1.0) - a4 * (v * (v * v - 3.0))
            z = np.where(small, guess, z)
        for _ in range(2):
            f = _cubic_forward(z, a3, a4) - v
            slope = _cubic_slope(z, a3, a4)
            z_new = z - f / slope
            better = np.abs(_cubic_forward(z_new, a3, a4) - v) <= np.abs(f)
            z = np.where(better & np.isfinite(z_new), z_new, z)
    return z


def _cubic_root_block(v, out, t1, t2, a3: float, a4: float) -> None:
    """In-cache version of :func:`_cubic_root` for scalar coefficients.

    Writes the root of ``z + a3 (z^2-1) + a4 (z^3-3z) = v`` into `out`
    using only the block temporaries `t1`, `t2` (all 1-D, same length;
    `v` must not share memory with `out`, `t1` or `t2`). Cardano plus one
    Newton step (two from a perturbative start when a4 is tiny).
    """
    c = 1.0 - 3.0 * a4
    if a4 < _SMALL_H4:
        # z ~ v - a3 He2(v) - a4 He3(v), then Newton
        np.multiply(v, v, out=t1)
        t1 -= 3.0
        t1 *= v
        t1 *= -a4
        np.multiply(v, v, out=out)
        out -= 1.0
        out *= -a3
        out += t1
        out += v
        steps = 2
    else:
        shift = a3 / (3.0 * a4)
        p = (3.0 * a4 * c - a3 * a3) / (3.0 * a4 * a4)
        q0 = (2.0 * a3**3 - 9.0 * a4 * a3 * c) / (27.0 * a4**3) - a3 / a4
        np.multiply(v, -1.0 / a4, out=t1)
        t1 += q0  # q
        np.multiply(t1, t1, out=t2)
        t2 *= 0.25
        t2 += p**3 / 27.0
        np.sqrt(t2, out=t2)
        np.abs(t1, out=out)
        out *= 0.5
        out += t2
        np.cbrt(out, out=out)
        np.negative(t1, out=t1)
        np.copysign(out, t1, out=out)  # A = -sign(q) cbrt(|q|/2 + sqrt(q^2/4 + p^3/27))
        np.divide(p / 3.0, out, out=t2)
        out -= t2
        out -= shift
        steps = 1
    for _ in range(steps):
        np.multiply(out, a4, out=t1)
        t1 += a3
        t1 *= out
        t1 += c
        t1 *= out
        t1 -= a3
        t1 -= v  # f(z)
        np.multiply(out, 3.0 * a4, out=t2)
        t2 += 2.0 * a3
        t2 *= out
        t2 += c  # f'(z) > 0 for a monotone cubic
        np.maximum(t2, 1e-6, out=t2)  # no huge step at a near-flat point
        t1 /= t2
        out -= t1


# ---------------------------------------------------------------------------
# Hardening form: moments by quadrature in z
# ---------------------------------------------------------------------------


def _hardening_grid(h3, h4, points=_QUADRATURE_POINTS):
    """Nodes z, images u = g(z) and weights for E[f(Z)] = sum w f(z), Z = g^-1(U).

    ``E[f(Z)] = integral f(z) phi(g(z)) g'(z) dz``; the integrand is entire,
    so the trapezoid rule on [g^-1(-38.5), g^-1(38.5)] is exact to rounding.
    h3, h4 may be arrays of equal shape (one row of nodes per pair).
    """
    h3 = np.asarray(h3, dtype=np.float64)
    h4 = np.asarray(h4, dtype=np.float64)
    ends = _cubic_root(np.array([-_U_LIMIT, _U_LIMIT]), h3[..., None], h4[..., None])
    frac = np.linspace(0.0, 1.0, points)
    z = ends[..., :1] + (ends[..., 1:] - ends[..., :1]) * frac
    dz = ends[..., 1:] - ends[..., :1]
    u = _cubic_forward(z, h3[..., None], h4[..., None])
    w = np.exp(-0.5 * u * u) * _cubic_slope(z, h3[..., None], h4[..., None])
    w *= dz / ((points - 1) * math.sqrt(2.0 * math.pi))
    w[..., 0] *= 0.5
    w[..., -1] *= 0.5
    return z, u, w


def _hardening_standard_moments(h3, h4, points=_QUADRATURE_POINTS):
    """Mean, variance, skewness, kurtosis of Z = g^-1(U) (quadrature; broadcasts)."""
    z, _, w = _hardening_grid(h3, h4, points)
    m1 = np.sum(w * z, axis=-1)
    d = z - m1[..., None]
    d2 = d * d
    var = np.sum(w * d2, axis=-1)
    skew = np.sum(w * d2 * d, axis=-1) / var**1.5
    kurt = np.sum(w * d2 * d2, axis=-1) / var**2
    return m1, var, skew, kurt


# ---------------------------------------------------------------------------
# The transform
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class HermiteTransform:
    """A monotone cubic Hermite transform of a standard Gaussian, unit-variance output.

    Attributes
    ----------
    c3, c4 : float
        Softening (``hardening=False``): coefficients of
        ``z = u + c3 (u^2-1) + c4 (u^3-3u)``. Hardening: Winterstein's h3, h4 of
        the inverse form ``u = z + c3 (z^2-1) + c4 (z^3-3z)``. Dimensionless.
    kappa : float
        Scale making the output unit variance (dimensionless): for softening
        ``(1 + 2 c3^2 + 6 c4^2)^(-1/2)``, for hardening ``1 / std(z)``.
    mean_offset : float
        ``E[z]`` subtracted before scaling (0 for softening), dimensionless.
    hardening : bool
        Which form the coefficients belong to.

    Notes
    -----
    The output is ``y = kappa (z - mean_offset)``: zero mean, unit variance.
    Build instances with :func:`solve_cubic_hermite`, :meth:`identity`,
    :meth:`softening` or :meth:`hardening_form`.

    Examples
    --------
    >>> HermiteTransform.identity().is_identity, HermiteTransform.softening(0.0, 0.1).family
    (True, 'hermite')

    References
    ----------
    .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes and
           fatigue", J. Eng. Mech. 114(10), 1988.
    .. [2] S. R. Winterstein, T. C. Ude and G. Kleiven, "Springing and
           slow-drift responses: predicted extremes and fatigue vs.
           simulation", Proc. BOSS-94, 1994.
    """

    c3: float
    c4: float
    kappa: float
    mean_offset: float = 0.0
    hardening: bool = False

    def __post_init__(self):
        for name in ("c3", "c4", "kappa", "mean_offset"):
            value = getattr(self, name)
            if not math.isfinite(value):
                raise InputError(f"{value!r} is not a finite number", location=name)
        if not _is_monotone(self.c3, self.c4):
            raise OutOfRangeError(
                f"c3={self.c3:g}, c4={self.c4:g} is not a monotone cubic; "
                "need c4 > 0 and c3^2 < 3 c4 (1 - 3 c4), or c3 = c4 = 0",
                location="c3, c4",
            )
        if not self.kappa > 0.0:
            raise InputError(f"{self.kappa:g} must be positive", location="kappa")
        if not self.hardening:
            expected = (1.0 + 2.0 * self.c3**2 + 6.0 * self.c4**2) ** -0.5
            if abs(self.kappa - expected) > 1e-12 * expected or self.mean_offset != 0.0:
                raise InputError(
                    f"kappa={self.kappa!r}, mean_offset={self.mean_offset!r} do not "
                    f"standardise the softening cubic; need kappa={expected!r} and mean_offset=0",
                    location="kappa",
                )

    # -- construction -------------------------------------------------------

    @classmethod
    def identity(cls) -> "HermiteTransform":
        """The Gaussian case (skewness 0, kurtosis 3): ``y = u``.

        Returns
        -------
        HermiteTransform
            c3 = c4 = 0, kappa = 1 (dimensionless).

        References
        ----------
        .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes
               and fatigue", J. Eng. Mech. 114(10), 1988.
        """
        return cls(c3=0.0, c4=0.0, kappa=1.0, mean_offset=0.0, hardening=False)

    @classmethod
    def softening(cls, c3: float, c4: float) -> "HermiteTransform":
        """Softening transform ``y = kappa (u + c3 He2(u) + c4 He3(u))`` from its coefficients.

        Parameters
        ----------
        c3, c4 : float
            Hermite coefficients (dimensionless), inside the monotone region.

        Returns
        -------
        HermiteTransform
            With ``kappa = (1 + 2 c3^2 + 6 c4^2)^(-1/2)`` (unit-variance output).

        Raises
        ------
        OutOfRangeError
            If the cubic is not monotone.

        References
        ----------
        .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes
               and fatigue", J. Eng. Mech. 114(10), 1988.
        """
        c3 = float(c3)
        c4 = float(c4)
        kappa = (1.0 + 2.0 * c3 * c3 + 6.0 * c4 * c4) ** -0.5
        return cls(c3=c3, c4=c4, kappa=kappa, mean_offset=0.0, hardening=False)

    @classmethod
    def hardening_form(cls, h3: float, h4: float) -> "HermiteTransform":
        """Hardening transform ``u = z + h3 He2(z) + h4 He3(z)``, ``y = kappa (z - E[z])``.

        Parameters
        ----------
        h3, h4 : float
            Inverse-form coefficients (dimensionless), inside the monotone
            region with ``h4 > 0``.

        Returns
        -------
        HermiteTransform
            Mean offset and kappa from quadrature of ``Z = g^-1(U)``
            (trapezoid rule in z, exact to rounding for this entire integrand).

        Raises
        ------
        OutOfRangeError
            If the cubic is not monotone.

        References
        ----------
        .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes
               and fatigue", J. Eng. Mech. 114(10), 1988.
        """
        h3 = float(h3)
        h4 = float(h4)
        if not _is_monotone(h3, h4) or (h3 == 0.0 and h4 == 0.0):
            raise OutOfRangeError(
                f"h3={h3:g}, h4={h4:g} is not a monotone hardening cubic; "
                "need h4 > 0 and h3^2 < 3 h4 (1 - 3 h4)",
                location="h3, h4",
            )
        mean, var, _, _ = _hardening_standard_moments(h3, h4)
        mean = 0.0 if h3 == 0.0 else float(mean)  # odd map: exactly zero mean
        return cls(c3=h3, c4=h4, kappa=float(var) ** -0.5, mean_offset=mean, hardening=True)

    # -- properties ---------------------------------------------------------

    @property
    def is_identity(self) -> bool:
        """True for the Gaussian case (no distortion)."""
        return self.c3 == 0.0 and self.c4 == 0.0

    @property
    def family(self) -> str:
        """``"hermite"`` (either form), as sidecars record it."""
        return "hermite"

    @property
    def peak_limit(self) -> None:
        """None: a cubic Hermite output is unbounded."""
        return None

    def gaussian_level(self, y) -> np.ndarray:
        """``g^-1(y)``: the Gaussian level that maps to output level ``y`` (:meth:`inverse`, a new array)."""
        return self.inverse(np.asarray(y, dtype=np.float64))

    @property
    def series_order(self) -> int:
        """Hermite order that represents the transform for correlation mapping.

        3 for the softening cubic (exact), 1 for the identity, 40 for the
        hardening form (its series is infinite; the remainder is small and
        :mod:`vibsynth.transforms.compensation` accounts for it).
        """
        if self.is_identity:
            return 1
        return 40 if self.hardening else 3

    def moments(self) -> tuple[float, float, float, float]:
        """Exact mean, variance, skewness and Pearson kurtosis of the output.

        Closed forms for the softening cubic; quadrature (to rounding) for the
        hardening form.

        Returns
        -------
        mean, variance, skewness, kurtosis : float
            Dimensionless (mean 0 and variance 1 by construction).

        References
        ----------
        .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes
               and fatigue", J. Eng. Mech. 114(10), 1988.
        """
        if self.hardening:
            m1, var, skew, kurt = _hardening_standard_moments(self.c3, self.c4)
            mean = self.kappa * (float(m1) - self.mean_offset)
            return mean, float(var) * self.kappa**2, float(skew), float(kurt)
        m2, _, _ = cubic_hermite_moments(self.c3, self.c4)
        skew, kurt = cubic_hermite_skewness_kurtosis(self.c3, self.c4)
        return 0.0, m2 * self.kappa**2, skew, kurt

    def output_variance(self) -> float:
        """Variance of :meth:`apply`'s output for a standard Gaussian input.

        Returns
        -------
        variance : float
            Dimensionless; 1 by construction (to rounding).

        References
        ----------
        .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes
               and fatigue", J. Eng. Mech. 114(10), 1988.
        """
        return self.moments()[1]

    # -- sample-wise maps ----------------------------------------------------

    def apply(self, u, out=None):
        """Map standard Gaussian samples to the non-Gaussian output.

        Parameters
        ----------
        u : array_like of float64
            Standard Gaussian samples (zero mean, unit variance, dimensionless).
        out : ndarray of float64, optional
            Where to write the result, same shape as `u`; may be `u` itself
            (in-place). Work is done in cache-sized blocks, so no full-size
            temporary is allocated.

        Returns
        -------
        y : ndarray of float64
            Output samples, zero mean and unit variance for a standard
            Gaussian input (dimensionless; multiply by the target RMS in g).

        References
        ----------
        .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes
               and fatigue", J. Eng. Mech. 114(10), 1988.
        """
        if self.is_identity:
            return _prepare(u, out, copy=True)[1]
        if self.hardening:
            return self._blockwise(u, out, self._hardening_block)
        return self._blockwise(u, out, self._softening_block)

    def inverse(self, y, out=None):
        """Map output samples back to the Gaussian variable ``u = g^-1(y)``.

        Parameters
        ----------
        y : array_like of float64
            Output-domain values (unit-variance scale, dimensionless).
        out : ndarray of float64, optional
            Destination, same shape as `y`; may be `y` itself.

        Returns
        -------
        u : ndarray of float64
            Standard-Gaussian values with ``apply(u) == y``.

        References
        ----------
        .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes
               and fatigue", J. Eng. Mech. 114(10), 1988.
        """
        if self.is_identity:
            return _prepare(y, out, copy=True)[1]
        if self.hardening:
            return self._blockwise(y, out, self._hardening_inverse_block)
        return self._blockwise(y, out, self._softening_inverse_block)

    def cdf(self, y):
        """Cumulative distribution of the output: ``P(Y <= y) = Phi(g^-1(y))``.

        Parameters
        ----------
        y : array_like
            Output levels (unit-variance scale, dimensionless).

        Returns
        -------
        p : ndarray
            Probabilities in [0, 1].

        References
        ----------
        .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes
               and fatigue", J. Eng. Mech. 114(10), 1988.
        """
        return special.ndtr(self.inverse(np.asarray(y, dtype=np.float64)))

    def ppf(self, p):
        """Quantile of the output: ``g(Phi^-1(p))``.

        A Gaussian extreme maps through the monotone transform, so e.g. the
        output level exceeded with probability 1e-6 is ``ppf(1 - 1e-6)``, and
        a Gaussian peak of ``u_max`` sigma becomes ``apply(u_max)``.

        Parameters
        ----------
        p : array_like
            Probabilities in (0, 1).

        Returns
        -------
        y : ndarray
            Output levels (unit-variance scale, dimensionless).

        References
        ----------
        .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes
               and fatigue", J. Eng. Mech. 114(10), 1988.
        """
        return self.apply(special.ndtri(np.asarray(p, dtype=np.float64)))

    def hermite_coefficients(self, n_max: int) -> np.ndarray:
        """Coefficients a_n of the output in probabilists' Hermite polynomials.

        ``y = sum_n a_n He_n(u)``; ``a_n = E[y He_n(U)] / n!``. For the
        softening cubic they are exact: ``a_1 = kappa``, ``a_2 = kappa c3``,
        ``a_3 = kappa c4``, all others 0 (``He3(u) = u^3 - 3u`` carries the
        whole cubic term, so no ``-3 c4`` correction lands on ``a_1``). For the
        hardening form they come from quadrature.

        Parameters
        ----------
        n_max : int
            Highest order, 1 <= n_max <= 150.

        Returns
        -------
        a : ndarray, shape (n_max + 1,)
            ``a[0]`` (the mean, 0) to ``a[n_max]``, dimensionless.

        References
        ----------
        .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes
               and fatigue", J. Eng. Mech. 114(10), 1988.
        """
        n_max = _order(n_max)
        a = np.zeros(n_max + 1)
        if not self.hardening:
            values = (self.kappa, self.kappa * self.c3, self.kappa * self.c4)
            for n, value in enumerate(values, start=1):
                if n <= n_max:
                    a[n] = value
            return a
        z, u, w = _hardening_grid(self.c3, self.c4, points=4001)
        wy = w * (self.kappa * (z - self.mean_offset))
        h_prev = np.ones_like(u)
        h_curr = u.copy()
        a[0] = np.sum(wy)
        a[1] = np.sum(wy * h_curr)
        factorial = 1.0
        for n in range(2, n_max + 1):
            h_prev, h_curr = h_curr, u * h_curr - (n - 1) * h_prev
            factorial *= n
            a[n] = np.sum(wy * h_curr) / factorial
        return a

    # -- block kernels ---------------------------------------------------------

    def _blockwise(self, x, out, kernel):
        x, out = _prepare(x, out, copy=False)
        flat_in = x.reshape(-1)
        flat_out = out.reshape(-1)
        n = flat_in.size
        size = min(n, _BLOCK_SAMPLES)
        temps = (np.empty(size), np.empty(size), np.empty(size))
        for start in range(0, n, _BLOCK_SAMPLES):
            stop = min(start + _BLOCK_SAMPLES, n)
            kernel(flat_in[start:stop], flat_out[start:stop], *(t[: stop - start] for t in temps))
        return out

    def _softening_block(self, u, out, tmp, _t1, _t2):
        k = self.kappa
        # kappa * (c4 u^3 + c3 u^2 + (1 - 3 c4) u - c3) by Horner, in a cached temporary
        np.multiply(u, k * self.c4, out=tmp)
        tmp += k * self.c3
        tmp *= u
        tmp += k * (1.0 - 3.0 * self.c4)
        tmp *= u
        np.subtract(tmp, k * self.c3, out=out)

    def _softening_inverse_block(self, y, out, v, t1, t2):
        np.divide(y, self.kappa, out=v)
        _cubic_root_block(v, t1, t2, out, self.c3, self.c4)
        np.copyto(out, t1)

    def _hardening_block(self, u, out, v, t1, t2):
        np.copyto(v, u)  # u and out may be the same memory
        _cubic_root_block(v, out, t1, t2, self.c3, self.c4)
        out -= self.mean_offset
        out *= self.kappa

    def _hardening_inverse_block(self, y, out, z, _t1, _t2):
        np.divide(y, self.kappa, out=z)
        z += self.mean_offset
        # u = z + c3 (z^2 - 1) + c4 (z^3 - 3 z), Horner
        np.multiply(z, self.c4, out=out)
        out += self.c3
        out *= z
        out += 1.0 - 3.0 * self.c4
        out *= z
        out -= self.c3


def _prepare(x, out, copy):
    """Validate input/output arrays; return (input as float64, destination)."""
    x = np.asarray(x, dtype=np.float64)
    if out is None:
        out = np.array(x, copy=True) if copy else np.empty_like(x)
        if not out.flags.c_contiguous:
            out = np.ascontiguousarray(out)
        return x, out
    if not isinstance(out, np.ndarray) or out.dtype != np.float64 or out.shape != x.shape:
        raise InputError(
            f"out must be a float64 array of shape {x.shape}, got "
            f"{getattr(out, 'dtype', type(out))} {getattr(out, 'shape', '')}",
            location="out",
        )
    if not out.flags.c_contiguous:
        raise InputError("out must be C-contiguous", location="out")
    if copy and out is not x:
        np.copyto(out, x)
    if not x.flags.c_contiguous:
        x = np.ascontiguousarray(x)
    return x, out


def _order(n_max) -> int:
    if isinstance(n_max, bool) or not isinstance(n_max, (int, np.integer)) or not 1 <= n_max <= _MAX_ORDER:
        raise InputError(f"{n_max!r} must be an integer from 1 to {_MAX_ORDER}", location="n_max")
    return int(n_max)


def _finite(value, name) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{value!r} is not a number", location=name) from None
    if not math.isfinite(number):
        raise InputError(f"{value!r} must be a finite number", location=name)
    return number


# ---------------------------------------------------------------------------
# Reachable range
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class KurtosisRange:
    """Kurtosis reachable by a monotone cubic Hermite transform at one skewness.

    Attributes
    ----------
    skewness : float
        The skewness the range is for (dimensionless).
    softening : tuple of float or None
        (lowest, highest) Pearson kurtosis of the softening form, or None if
        this skewness is beyond it. Endpoints are limits, not attained.
    hardening : tuple of float or None
        The same for the hardening (inverse) form.
    max_abs_skewness_softening, max_abs_skewness_hardening : float
        Largest |skewness| each form reaches at all.

    Examples
    --------
    >>> reachable_kurtosis_range(0.0).contains(6.0)
    True

    References
    ----------
    .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes and
           fatigue", J. Eng. Mech. 114(10), 1988.
    """

    skewness: float
    softening: tuple[float, float] | None
    hardening: tuple[float, float] | None
    max_abs_skewness_softening: float
    max_abs_skewness_hardening: float

    def contains(self, kurtosis: float) -> bool:
        """True if `kurtosis` lies inside either form's range.

        Parameters
        ----------
        kurtosis : float
            Pearson kurtosis (dimensionless).

        Returns
        -------
        bool

        References
        ----------
        .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes
               and fatigue", J. Eng. Mech. 114(10), 1988.
        """
        return any(r is not None and r[0] < kurtosis < r[1] for r in (self.softening, self.hardening))

    def describe(self) -> str:
        """One-line statement of the range, for error messages and reports.

        Returns
        -------
        str
            E.g. "at skewness 0 the reachable kurtosis is 3 to 46.2
            (softening form) or 1.291 to 3 (hardening form) ...".

        References
        ----------
        .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes
               and fatigue", J. Eng. Mech. 114(10), 1988.
        """
        parts = []
        for name, r in (("softening form", self.softening), ("hardening form", self.hardening)):
            if r is not None:
                parts.append(f"{r[0]:.4g} to {r[1]:.4g} ({name})")
        if not parts:
            return (
                f"no monotone cubic Hermite transform reaches skewness {self.skewness:g}; "
                f"|skewness| must be below {self.max_abs_skewness_softening:.3g} (softening form) "
                f"or {self.max_abs_skewness_hardening:.3g} (hardening form)"
            )
        return (
            f"at skewness {self.skewness:g} the reachable kurtosis is "
            + " or ".join(parts)
            + " (approximate limits, not attained)"
        )


def _softening_family(c4, t):
    c3 = t * np.sqrt(3.0 * c4 * (1.0 - 3.0 * c4))
    return cubic_hermite_skewness_kurtosis(c3, c4)


def _hardening_family(h4, t):
    h3 = t * np.sqrt(3.0 * h4 * (1.0 - 3.0 * h4))
    _, _, skew, kurt = _hardening_standard_moments(h3, h4, points=801)
    return skew, kurt


def _family_range(family, skewness, b_grid):
    """Min/max kurtosis over the monotone region at fixed skewness, and max |skewness|.

    Rows are b = c4 (or h4) on `b_grid`, columns t in [0, 1] with
    c3 = t sqrt(3 b (1 - 3 b)). Along t the |skewness| rises to a peak
    (at or just before the edge t = 1) and may fall slightly after it; the
    target skewness is solved by bisection on each monotone branch, the
    kurtosis evaluated there, and min and max taken over all solutions.
    Kurtosis is even in t, so negative skewness mirrors positive.
    """
    target = abs(skewness)
    t_grid = np.linspace(0.0, 1.0, 33)
    rows = np.broadcast_to(b_grid[:, None], (b_grid.size, t_grid.size))
    skew, _ = family(rows, np.broadcast_to(t_grid, rows.shape))
    sign = 1.0 if np.nanmean(skew[:, -1]) >= 0 else -1.0
    skew = sign * skew
    max_abs = float(np.nanmax(skew))
    peak = np.nanargmax(skew, axis=1)
    peak_skew = skew[np.arange(b_grid.size), peak]
    kurtosis_found = []
    for rising in (True, False):
        if rising:
            rows_ok = peak_skew > target
            lo, hi = np.zeros(b_grid.size), t_grid[peak]
        else:
            rows_ok = (peak_skew > target) & (skew[:, -1] < target)
            lo, hi = t_grid[peak], np.ones(b_grid.size)
        if not np.any(rows_ok):
            continue
        b, lo, hi = b_grid[rows_ok], lo[rows_ok], hi[rows_ok]
        for _ in range(48):
            mid = 0.5 * (lo + hi)
            s_mid, _ = family(b, mid)
            below = (sign * s_mid < target) == rising
            lo = np.where(below, mid, lo)
            hi = np.where(below, hi, mid)
        _, kurt = family(b, 0.5 * (lo + hi))
        kurtosis_found.append(kurt[np.isfinite(kurt)])
    if not kurtosis_found:
        return None, max_abs
    kurt = np.concatenate(kurtosis_found)
    return (float(np.min(kurt)), float(np.max(kurt))), max_abs


def reachable_kurtosis_range(skewness: float) -> KurtosisRange:
    """Kurtosis range that monotone cubic Hermite transforms reach at a skewness.

    Computed numerically over the monotone region (``0 < c4 < 1/3``,
    ``c3^2 < 3 c4 (1 - 3 c4)``) of both the softening form (exact moments)
    and the hardening form (moments by quadrature). At skewness 0 the
    softening form spans kurtosis 3 to 46.2 (the limit ``c4 -> 1/3``,
    ``y ∝ u^3``: 10395/225) and the hardening form about 1.29 to 3 (the limit
    ``y ∝ u^(1/3)``).

    Parameters
    ----------
    skewness : float
        Target skewness (dimensionless).

    Returns
    -------
    KurtosisRange
        The ranges (approximate limits, to about 3 significant digits).

    Examples
    --------
    >>> reachable_kurtosis_range(0.0).describe()
    'at skewness 0 the reachable kurtosis is 3 to 46.2 (softening form) or 1.291 to 3 (hardening form) (approximate limits, not attained)'

    References
    ----------
    .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes and
           fatigue", J. Eng. Mech. 114(10), 1988.
    """
    skewness = _finite(skewness, "skewness")
    theta = np.linspace(0.0, 1.0, 602)[1:-1]
    b_grid = (1.0 / 3.0) * np.sin(0.5 * np.pi * theta) ** 2  # clustered at both ends
    soft, soft_max = _family_range(_softening_family, skewness, b_grid)
    hard, hard_max = _family_range(_hardening_family, skewness, b_grid[::4])
    if skewness == 0.0:
        # exact limits: c4 -> 1/3 gives y = u^3 / 3 (kurtosis 10395/225); h4 -> 1/3
        # gives y = (3u)^(1/3) (kurtosis Gamma(7/6) sqrt(pi) / Gamma(5/6)^2); c4, h4 -> 0 give 3
        soft = (3.0, 10395.0 / 225.0)
        hard = (math.gamma(7.0 / 6.0) * math.sqrt(math.pi) / math.gamma(5.0 / 6.0) ** 2, 3.0)
    return KurtosisRange(skewness, soft, hard, soft_max, hard_max)


# ---------------------------------------------------------------------------
# Solver
# ---------------------------------------------------------------------------


def _unpack(params):
    """Unconstrained (a, b) -> monotone (c3, c4): c4 = sigmoid(a)/3, c3 = tanh(b) * edge."""
    a, b = params
    c4 = (1.0 / 3.0) * special.expit(a)
    c3 = math.tanh(b) * math.sqrt(3.0 * c4 * (1.0 - 3.0 * c4))
    return c3, c4


def _pack(c3, c4):
    c4 = min(max(c4, 1e-12), 1.0 / 3.0 - 1e-9)
    edge = math.sqrt(3.0 * c4 * (1.0 - 3.0 * c4))
    t = min(max(c3 / edge, -0.999), 0.999)
    return np.array([special.logit(3.0 * c4), math.atanh(t)])


def _softening_residual(c3, c4, skewness, kurtosis):
    s, k = cubic_hermite_skewness_kurtosis(c3, c4)
    return np.array([s - skewness, k - kurtosis])


def _hardening_residual(h3, h4, skewness, kurtosis):
    _, _, s, k = _hardening_standard_moments(h3, h4)
    return np.array([float(s) - skewness, float(k) - kurtosis])


def _solve_form(residual, start, skewness, kurtosis):
    """Root of the exact moment equations in the monotone parametrisation."""

    def equations(params):
        c3, c4 = _unpack(params)
        return residual(c3, c4, skewness, kurtosis)

    symmetric = skewness == 0.0  # c3 = 0 exactly (the skewness is odd in c3)

    from scipy import optimize  # here only: slow to import, and a Gaussian drive never needs it

    starts = [start] + [(0.3 * start[0] * f, g) for f in (0.0, 1.0) for g in (0.05, 0.15, 0.3)]
    for c3_0, c4_0 in starts:
        with np.errstate(all="ignore"):
            sol = optimize.root(equations, _pack(c3_0, c4_0), method="hybr", options={"xtol": 1e-14})
        if not np.all(np.isfinite(sol.x)):
            continue
        c3, c4 = _unpack(sol.x)
        if symmetric:
            c3 = 0.0
        if _is_monotone(c3, c4) and np.max(np.abs(residual(c3, c4, skewness, kurtosis))) < _RESIDUAL_LIMIT:
            return c3, c4
    return None


def solve_cubic_hermite(skewness: float, kurtosis: float) -> HermiteTransform:
    """Cubic Hermite transform with exactly the target skewness and kurtosis.

    Solves the exact moment equations (residual below 1e-10) for the
    coefficients of a monotone cubic, starting from Winterstein's 1988
    closed forms. The softening form ``y = kappa (u + c3 He2(u) + c4 He3(u))``
    is used wherever it reaches the target; otherwise (every kurtosis below 3,
    and skewed targets above 3 beyond the monotone softening range) the
    hardening form ``u = z + h3 He2(z) + h4 He3(z)`` (solved per sample),
    standardised.
    Skewness 0 with kurtosis exactly 3 gives the identity.

    Parameters
    ----------
    skewness : float
        Target skewness of the output (dimensionless).
    kurtosis : float
        Target Pearson kurtosis of the output (dimensionless, 3 for Gaussian).

    Returns
    -------
    HermiteTransform
        Transform with zero-mean, unit-variance output of the target moments.

    Raises
    ------
    InputError
        If a target is not a finite number.
    OutOfRangeError
        If no monotone cubic reaches the target; the message states the
        reachable kurtosis range at that skewness (e.g. 3 to 46.2 for the
        softening form at skewness 0).

    Examples
    --------
    >>> transform = solve_cubic_hermite(0.0, 6.0)
    >>> round(transform.c4, 5), round(transform.moments()[3], 9)
    (0.06886, 6.0)

    References
    ----------
    .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes and
           fatigue", J. Eng. Mech. 114(10), 1988.
    .. [2] S. R. Winterstein, T. C. Ude and G. Kleiven, "Springing and
           slow-drift responses: predicted extremes and fatigue vs.
           simulation", Proc. BOSS-94, 1994.
    """
    skewness = _finite(skewness, "skewness")
    kurtosis = _finite(kurtosis, "kurtosis")
    if skewness == 0.0 and kurtosis == 3.0:
        return HermiteTransform.identity()
    bound = 1.0 + skewness * skewness
    if kurtosis <= bound:
        raise OutOfRangeError(
            f"{kurtosis:g} is impossible with skewness {skewness:g}: every distribution has "
            f"kurtosis > 1 + skewness^2 = {bound:g}",
            location="kurtosis",
        )
    soft_start = winterstein_1988_coefficients(skewness, max(kurtosis, 3.0))
    hard_start = (-skewness / 6.0, max((3.0 - kurtosis) / 24.0, 1e-4))
    forms = [("soft", soft_start), ("hard", hard_start)]
    if kurtosis < 3.0:
        forms.reverse()
    for form, start in forms:
        if form == "soft":
            if kurtosis < 3.0:
                continue  # softening kurtosis is always >= 3
            found = _solve_form(_softening_residual, start, skewness, kurtosis)
            if found is not None:
                return HermiteTransform.softening(*found)
        else:
            found = _solve_form(_hardening_residual, start, skewness, kurtosis)
            if found is not None:
                return HermiteTransform.hardening_form(*found)
    reach = reachable_kurtosis_range(skewness)
    raise OutOfRangeError(
        f"{kurtosis:g} cannot be reached with a monotone cubic Hermite transform: " + reach.describe(),
        location="kurtosis",
    )
