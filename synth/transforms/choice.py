"""Choosing the transform: from a requested kurtosis, skewness or crest factor to a :class:`MemorylessTransform`.

``hermite``
    Winterstein's cubic Hermite model solved exactly for a target skewness and
    kurtosis (:func:`vibsynth.transforms.hermite.solve_cubic_hermite`): the softening form
    for kurtosis >= 3, the inverse-polynomial (hardening) form below 3.
``clip``
    Hard clipping at ``c`` Gaussian sigma, rescaled to unit variance, with
    ``c`` solved so that the peak is the requested multiple of the output
    RMS (:func:`vibsynth.transforms.clipping.solve_clip_level`).

Errors name the parameters (``kurtosis``, ``skewness``, ``clip``).

References
----------
.. [1] S. R. Winterstein, "Nonlinear vibration models for extremes and
       fatigue", J. Eng. Mech. 114(10), 1988.
.. [2] J. H. Van Vleck and D. Middleton, "The spectrum of clipped noise",
       Proc. IEEE 54(1), 1966.
"""

from __future__ import annotations

import math

import numpy as np

from vibsynth.errors import InputError, OutOfRangeError
from vibsynth.transforms.base import MemorylessTransform

__all__ = ["gaussian_level", "plan_transform", "transform_family", "transform_record"]


def _optional_number(value, name: str) -> float | None:
    if value is None:
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} {value!r} is not a number", name) from None
    if not math.isfinite(number):
        raise InputError(f"{name} {value!r} must be a finite number", name)
    return number


def plan_transform(kurtosis: float | None = None, skewness: float | None = None, clip: float | None = None):
    """The memoryless transform that gives the requested amplitude distribution.

    Parameters
    ----------
    kurtosis : float, optional
        Target Pearson kurtosis of the drive (3 for a Gaussian; dimensionless).
        Values above 3 use the softening cubic Hermite form, values below 3 the
        hardening (inverse-polynomial) form.
    skewness : float, optional
        Target skewness (dimensionless).  Given alone, the kurtosis stays at 3.
    clip : float, optional
        Crest factor limit: every sample of the drive within ``clip`` times its
        RMS (dimensionless, 1 < clip <= 10).  Cannot be combined with
        ``kurtosis`` or ``skewness`` (clipping sets the kurtosis itself).

    Returns
    -------
    HermiteTransform, ClipTransform or None
        A unit-variance transform of a standard Gaussian, or None when nothing
        non-Gaussian was asked for (or kurtosis 3 and skewness 0).

    Raises
    ------
    InputError
        ``clip`` combined with ``kurtosis``/``skewness``, or a value that is
        not a finite number.
    OutOfRangeError
        A target no monotone transform reaches; the message states the
        reachable range (e.g. kurtosis 3 to 46.2 with the softening form and
        1.29 to 3 with the hardening form at skewness 0; crest factors above 1
        and up to 10).

    Examples
    --------
    >>> plan_transform(kurtosis=6.0).family, plan_transform(clip=3.0).family, plan_transform(kurtosis=3.0)
    ('hermite', 'clip', None)

    References
    ----------
    .. [1] S. R. Winterstein, "Nonlinear vibration models for extremes and
           fatigue", J. Eng. Mech. 114(10), 1988 (cubic Hermite model).
    .. [2] J. H. Van Vleck and D. Middleton, "The spectrum of clipped noise",
           Proc. IEEE 54(1), 1966 (clipped Gaussian).
    """
    kurtosis = _optional_number(kurtosis, "kurtosis")
    skewness = _optional_number(skewness, "skewness")
    clip = _optional_number(clip, "clip")
    if clip is not None:
        if kurtosis is not None or skewness is not None:
            given = " and ".join(n for n, v in (("kurtosis", kurtosis), ("skewness", skewness)) if v is not None)
            raise InputError(
                f"clip cannot be combined with {given}: clipping at {clip:g} x RMS sets the kurtosis itself "
                "(and keeps the skewness at 0); give either clip or kurtosis/skewness",
                "clip",
            )
        from vibsynth.transforms.clipping import solve_clip_level  # on use: a Gaussian drive never loads scipy.special

        try:
            return solve_clip_level(clip)
        except OutOfRangeError as error:
            raise OutOfRangeError(
                f"{clip:g} x RMS cannot be reached by clipping: the crest factor (peak/RMS) must be above 1 "
                "and at most 10 (beyond 10 a Gaussian record never reaches the clip level; omit clip)",
                "clip",
            ) from error
    if kurtosis is None and skewness is None:
        return None
    skew = 0.0 if skewness is None else skewness
    kurt = 3.0 if kurtosis is None else kurtosis
    if skew == 0.0 and kurt == 3.0:
        return None
    from vibsynth.transforms.hermite import reachable_kurtosis_range, solve_cubic_hermite

    try:
        return solve_cubic_hermite(skew, kurt)
    except OutOfRangeError as error:
        option = "kurtosis" if kurtosis is not None else "skewness"
        bound = 1.0 + skew * skew
        reach = reachable_kurtosis_range(skew).describe()
        if kurt <= bound:
            reach = f"every distribution has kurtosis > 1 + skewness^2 = {bound:g}; {reach}"
        raise OutOfRangeError(
            f"kurtosis {kurt:g} with skewness {skew:g} is out of reach of a monotone cubic Hermite transform: {reach}",
            option,
        ) from error


def transform_family(transform) -> str:
    """The family name of a transform, as sidecars record it.

    Parameters
    ----------
    transform : HermiteTransform or ClipTransform

    Returns
    -------
    str
        ``"hermite"`` (cubic Hermite, either form) or ``"clip"``.

    Raises
    ------
    InputError
        For any other object.

    Examples
    --------
    >>> transform_family(plan_transform(clip=3.0))
    'clip'

    References
    ----------
    Winterstein (1988), cubic Hermite model; Van Vleck & Middleton (1966), clipped Gaussian.
    """
    if isinstance(transform, MemorylessTransform) and transform.family in ("hermite", "clip"):
        return transform.family
    raise InputError(f"unknown transform {transform!r}; expected a HermiteTransform or ClipTransform", "transform")


def transform_record(transform) -> dict:
    """A transform's parameters and exact output moments as plain data (the sidecar's ``transform`` block).

    Parameters
    ----------
    transform : HermiteTransform or ClipTransform

    Returns
    -------
    dict
        ``family`` (``hermite`` or ``clip``); for ``hermite``: ``form``
        (``softening`` or ``hardening``), ``c3``, ``c4`` (dimensionless; for
        the hardening form the coefficients of ``u = z + c3 He2(z) + c4 He3(z)``),
        ``kappa``, ``mean_offset``; for ``clip``: ``clip_level_sigma`` (clip
        level in sigma of the Gaussian stream), ``crest_factor`` (peak / RMS of
        the output), ``clipped_rms_sigma``; for both: ``skewness`` and
        ``kurtosis`` (exact moments of the transformed Gaussian) and
        ``applied`` (where in the pipeline).

    Examples
    --------
    >>> transform_record(plan_transform(kurtosis=6.0))["form"]
    'softening'

    References
    ----------
    Winterstein (1988); Van Vleck & Middleton (1966).
    """
    family = transform_family(transform)
    _, _, skewness, kurtosis = transform.moments()
    record = {"family": family}
    if family == "clip":
        record.update(
            clip_level_sigma=float(transform.clip_level_sigma),
            crest_factor=float(transform.crest_factor),
            clipped_rms_sigma=float(transform.clipped_std),
            equation="y = min(max(u, -c), c) / sigma_c, u the unit-variance Gaussian stream",
        )
    else:
        record.update(
            form="hardening" if transform.hardening else "softening",
            c3=float(transform.c3),
            c4=float(transform.c4),
            kappa=float(transform.kappa),
            mean_offset=float(transform.mean_offset),
            equation=(
                "u = z + c3 (z^2 - 1) + c4 (z^3 - 3 z), y = kappa (z - mean_offset)"
                if transform.hardening
                else "y = kappa (u + c3 (u^2 - 1) + c4 (u^3 - 3 u))"
            ),
        )
    record.update(
        skewness=float(skewness),
        kurtosis=float(kurtosis),
        applied="sample by sample to the unit-variance Gaussian stream after overlap-add, "
        "then scaled to the target g RMS, then ramps",
    )
    return record


def gaussian_level(transform, y):
    """Level of the Gaussian stream that maps to output level ``y``: ``g^-1(y)``.

    Parameters
    ----------
    transform : HermiteTransform, ClipTransform or None
        None is the identity (Gaussian drive).
    y : array_like
        Output levels in units of the output RMS (dimensionless).

    Returns
    -------
    numpy.ndarray
        ``u`` with ``g(u) = y`` (sigma units of the Gaussian stream); for
        clipping ``+inf`` at or above the crest factor and ``-inf`` at or
        below minus it (no Gaussian level reaches the clipped value's far side).

    Examples
    --------
    >>> gaussian_level(None, [1.0, 2.0])
    array([1., 2.])

    References
    ----------
    Winterstein (1988): extremes of a translation process through the inverse
    of its monotone transform.
    """
    y = np.asarray(y, dtype=np.float64)
    if transform is None:
        return y.copy()
    return transform.gaussian_level(y)
