"""The interface every memoryless transform implements (a :class:`typing.Protocol`).

A memoryless transform maps a stationary standard Gaussian stream ``u``
sample by sample to ``y = g(u)`` with zero mean and unit variance.  The
generation pipeline calls it; the spectral pre-compensation
(:mod:`vibsynth.transforms.compensation`) needs only its Hermite expansion
``g = sum a_n He_n`` and its variance; reports need its moments.  This module
(and this subpackage) never imports :mod:`vibsynth.generate`.

References
----------
.. [1] S. R. Winterstein, "Nonlinear vibration models for extremes and
       fatigue", J. Eng. Mech. 114(10), 1988 (Hermite models).
.. [2] F. G. Mehler, J. Reine Angew. Math. 66, 1866 (the Hermite expansion of
       the bivariate normal, which maps correlations through ``g``).
"""

from __future__ import annotations

from typing import Protocol, runtime_checkable

import numpy as np


@runtime_checkable
class MemorylessTransform(Protocol):
    """A memoryless transform of a standard Gaussian stream, unit-variance output.

    Members
    -------
    family : str
        ``"hermite"`` or ``"clip"`` (the sidecar's ``transform.family``).
    series_order : int
        Hermite order used for the correlation mapping.
    peak_limit : float or None
        Largest possible ``|g(u)|`` (dimensionless, output RMS units), or None
        when unbounded; the pipeline clips to it again after the high-pass.
    apply(u, out=None)
        ``g(u)`` (float64 array in, same-shape float64 array out; ``out`` may be ``u``).
    moments()
        Exact mean, variance, skewness and Pearson kurtosis of ``g(U)``.
    output_variance()
        Variance of ``g(U)`` (1 by construction).
    hermite_coefficients(n_max)
        ``a_0 .. a_n_max`` of ``g = sum a_n He_n``.
    gaussian_level(y)
        ``g^-1(y)``: the Gaussian level mapped to output level ``y``
        (``±inf`` where no level reaches it).

    Examples
    --------
    >>> from vibsynth.transforms.hermite import solve_cubic_hermite
    >>> isinstance(solve_cubic_hermite(0.0, 5.0), MemorylessTransform)
    True

    References
    ----------
    Winterstein (1988); Mehler (1866).
    """

    @property
    def family(self) -> str: ...

    @property
    def series_order(self) -> int: ...

    @property
    def peak_limit(self) -> float | None: ...

    def apply(self, u, out=None) -> np.ndarray: ...

    def moments(self) -> tuple[float, float, float, float]: ...

    def output_variance(self) -> float: ...

    def hermite_coefficients(self, n_max: int) -> np.ndarray: ...

    def gaussian_level(self, y) -> np.ndarray: ...


__all__ = ["MemorylessTransform"]
