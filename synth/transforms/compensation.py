"""Spectral pre-compensation of a Gaussian drive for a memoryless non-Gaussian transform.

A memoryless transform ``y = g(u)`` of a stationary standard Gaussian ``u``
distorts the spectrum: with ``g = sum a_n He_n`` (probabilists' Hermite
polynomials) and Mehler's identity ``E[He_m(U1) He_n(U2)] = n! rho^n delta_mn``
the output autocorrelation is

    rho_y(tau) = sum_n n! a_n^2 rho_u(tau)^n / Var(y).

The powers ``rho_u^n`` are self-convolutions of the Gaussian spectrum, so the
transform spills power outside the band and fills notches. This module maps a
Gaussian spectrum to the output spectrum (one inverse and one forward FFT), and
iterates the Gaussian spectrum until the output spectrum matches a target
(Yamazaki & Shinozuka 1988; Deodatis & Micaletti 2001; Shields, Deodatis &
Bocchini 2011):

    S_G <- S_G (S_T / S_NG)^beta   on target lines, then S_G >= 0, unit variance.

Spectra live on the one-sided FFT grid of a periodic frame of ``N`` samples:
``N/2 + 1`` lines ``f_k = k df``. Each line, DC and Nyquist included, holds
the power ``S_k df``, so the variance is ``df * sum(S)``.

References
----------
.. [1] F. Yamazaki and M. Shinozuka, "Digital generation of non-Gaussian
       stochastic fields", J. Eng. Mech. 114(7), 1988.
.. [2] G. Deodatis and R. C. Micaletti, "Simulation of highly skewed
       non-Gaussian stochastic processes", J. Eng. Mech. 127(12), 2001.
.. [3] M. D. Shields, G. Deodatis and P. Bocchini, "A simple and efficient
       methodology to approximate a general non-Gaussian stationary stochastic
       process by a translation process", Probab. Eng. Mech. 26(4), 2011.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import fft

from vibsynth.errors import InputError

__all__ = [
    "CompensationResult",
    "compensate_spectrum",
    "gaussian_correlation",
    "hermite_correlation_weights",
    "output_correlation",
    "highpass_moment_retention",
    "predict_output_asd",
]

_MAX_LINES = (1 << 20) + 1
_TINY = 1e-300


# ---------------------------------------------------------------------------
# Per-lag correlation maps
# ---------------------------------------------------------------------------


def hermite_correlation_weights(coefficients, variance: float | None = None) -> np.ndarray:
    """Normalised weights ``b_n = n! a_n^2 / Var(y)`` of the correlation map.

    Parameters
    ----------
    coefficients : array_like, shape (M + 1,)
        Hermite coefficients ``a_0 .. a_M`` of ``y = sum a_n He_n(u)``
        (units of y). ``a_0`` (the mean) does not enter.
    variance : float, optional
        Exact ``Var(y)`` (units of y squared). When it exceeds
        ``sum n! a_n^2`` (a truncated infinite series), the remainder is put
        on the next order of the same parity as the series (odd transforms
        stay odd), so that ``rho_y(0) = 1`` holds exactly. Default: the
        truncated sum itself (no remainder).

    Returns
    -------
    b : ndarray
        ``b[0] = 0``, ``b[n]`` for n >= 1, summing to 1 (dimensionless);
        may be one or two entries longer than `coefficients` (remainder).

    Examples
    --------
    >>> np.round(hermite_correlation_weights([0.0, 1.0, 0.0, 0.1]), 4)
    array([0.    , 0.9434, 0.    , 0.0566])

    References
    ----------
    .. [1] F. G. Mehler, "Ueber die Entwicklung einer Function von beliebig
           vielen Variablen nach Laplaceschen Functionen hoeherer Ordnung",
           J. Reine Angew. Math. 66, 1866 (bivariate normal expansion).
    .. [2] M. D. Shields, G. Deodatis and P. Bocchini, Probab. Eng. Mech.
           26(4), 2011.
    """
    a = np.asarray(coefficients, dtype=np.float64)
    if a.ndim != 1 or a.size < 2 or not np.all(np.isfinite(a)):
        raise InputError("must be a finite 1-D array a_0..a_M with M >= 1", location="coefficients")
    if a.size > 171:
        raise InputError(f"order {a.size - 1} is too high; at most 170", location="coefficients")
    order = np.arange(a.size)
    b = np.array([math.factorial(int(n)) for n in order], dtype=np.float64) * a * a
    b[0] = 0.0
    total = float(np.sum(b))
    if not total > 0.0:
        raise InputError("all Hermite coefficients of order >= 1 are zero", location="coefficients")
    if variance is not None:
        variance = float(variance)
        if not (math.isfinite(variance) and variance > 0.0):
            raise InputError(f"{variance!r} must be a positive finite variance", location="variance")
        remainder = variance - total
        if remainder > 1e-14 * variance:
            odd_only = not np.any(b[2::2])
            extra = 2 if (odd_only and (a.size - 1) % 2 == 1) else 1
            b = np.concatenate([b, np.zeros(extra)])
            b[-1] = remainder
            total = variance
    return b / total


def _odd_only(weights) -> bool:
    return not np.any(weights[2::2])


def _polyval(x, weights, out=None):
    """``sum_n weights[n] x^n`` by Horner's scheme (no constant term)."""
    x = np.asarray(x, dtype=np.float64)
    if out is None:
        out = np.empty_like(x)
    elif np.shares_memory(x, out):
        x = x.copy()
    if _odd_only(weights) and weights.size > 3:
        # odd polynomial: x * q(x^2), half the work
        x2 = x * x
        odd = weights[1::2]
        out.fill(odd[-1])
        for coefficient in odd[-2::-1]:
            out *= x2
            out += coefficient
        out *= x
        return out
    out.fill(weights[-1])
    for coefficient in weights[-2:0:-1]:
        out *= x
        out += coefficient
    out *= x
    return out


def output_correlation(rho_u, weights) -> np.ndarray:
    """Output correlation coefficient ``rho_y = sum_n b_n rho_u^n`` per lag.

    Parameters
    ----------
    rho_u : array_like
        Correlation coefficient of the Gaussian process at each lag, in [-1, 1].
    weights : array_like
        ``b_n`` from :func:`hermite_correlation_weights` (sum 1).

    Returns
    -------
    rho_y : ndarray
        Correlation coefficient of the transformed process (dimensionless).

    Examples
    --------
    >>> weights = hermite_correlation_weights([0.0, 1.0, 0.0, 0.1])
    >>> np.round(output_correlation(np.array([1.0, 0.5]), weights), 4)
    array([1.    , 0.4788])

    References
    ----------
    .. [1] F. G. Mehler, J. Reine Angew. Math. 66, 1866.
    .. [2] F. Yamazaki and M. Shinozuka, "Digital generation of non-Gaussian
           stochastic fields", J. Eng. Mech. 114(7), 1988.
    """
    return _polyval(rho_u, np.asarray(weights, dtype=np.float64))


def gaussian_correlation(rho_y, weights, iterations: int = 40) -> np.ndarray:
    """Invert the per-lag map: the ``rho_u`` in [-1, 1] with ``sum b_n rho_u^n = rho_y``.

    Safeguarded Newton iteration (bisection fallback inside a bracket).
    Targets below ``p(-1)`` (the most negative correlation this transform
    can produce) are mapped to -1.

    Parameters
    ----------
    rho_y : array_like
        Target output correlation coefficients (dimensionless).
    weights : array_like
        ``b_n`` from :func:`hermite_correlation_weights`.
    iterations : int, optional
        Maximum Newton/bisection steps (stops earlier once converged).

    Returns
    -------
    rho_u : ndarray
        Gaussian correlation coefficients (dimensionless).

    Examples
    --------
    >>> weights = hermite_correlation_weights([0.0, 1.0, 0.0, 0.1])
    >>> np.round(gaussian_correlation(output_correlation(np.array([1.0, 0.5]), weights), weights), 6)
    array([1. , 0.5])

    References
    ----------
    .. [1] F. Yamazaki and M. Shinozuka, "Digital generation of non-Gaussian
           stochastic fields", J. Eng. Mech. 114(7), 1988.
    """
    w = np.asarray(weights, dtype=np.float64)
    derivative = w[1:] * np.arange(1, w.size)  # p'(x) = sum n b_n x^(n-1)
    lowest = float(_polyval(np.array([-1.0]), w)[0])  # p(-1) >= -1
    target = np.clip(np.asarray(rho_y, dtype=np.float64), lowest, 1.0)
    x = target.copy()
    lo = np.full_like(x, -1.0)
    hi = np.ones_like(x)
    f = np.empty_like(x)
    slope = np.empty_like(x)
    for _ in range(iterations):
        _polyval(x, w, out=f)
        f -= target
        above = f > 0
        np.copyto(hi, x, where=above)
        np.copyto(lo, x, where=~above)
        slope.fill(derivative[-1])
        for coefficient in derivative[-2::-1]:
            slope *= x
            slope += coefficient
        with np.errstate(divide="ignore", invalid="ignore"):
            x_new = x - f / slope
        outside = ~((x_new >= lo) & (x_new <= hi))  # also catches NaN
        x_new[outside] = 0.5 * (lo[outside] + hi[outside])
        done = np.max(np.abs(x_new - x)) < 1e-13
        x = x_new
        if done:
            break
    return np.clip(x, -1.0, 1.0)


# ---------------------------------------------------------------------------
# Spectrum <-> correlation on the one-sided FFT grid
# ---------------------------------------------------------------------------


def _frame_length(lines: int) -> int:
    return 2 * (lines - 1)


def _psd_to_autocovariance(psd, df_hz):
    """Periodic autocovariance (lag 0 = df * sum(psd)) of a one-sided line spectrum."""
    n = _frame_length(psd.size)
    x = psd * (0.5 * n * df_hz)
    x[0] *= 2.0
    x[-1] *= 2.0
    return fft.irfft(x, n=n)


def _autocovariance_to_psd(r, df_hz):
    """Inverse of :func:`_psd_to_autocovariance` (real part; lines of a one-sided spectrum)."""
    n = r.size
    psd = fft.rfft(r).real
    psd *= 2.0 / (n * df_hz)
    psd[0] *= 0.5
    psd[-1] *= 0.5
    return psd


def _map_spectrum(gaussian_psd, df_hz, weights):
    """Output line spectrum (unit variance) of the transform of a unit-variance Gaussian."""
    r = _psd_to_autocovariance(gaussian_psd, df_hz)
    r /= r[0]
    rho_y = _polyval(r, weights, out=r)
    return _autocovariance_to_psd(rho_y, df_hz)


def _check_grid(asd, df_hz, name):
    asd = np.asarray(asd, dtype=np.float64)
    if asd.ndim != 1 or asd.size < 3:
        raise InputError(f"must be a 1-D array of N/2+1 >= 3 lines, got shape {asd.shape}", location=name)
    if asd.size > _MAX_LINES:
        raise InputError(f"{asd.size} lines is more than the {_MAX_LINES} supported", location=name)
    if not np.all(np.isfinite(asd)) or np.any(asd < 0.0):
        raise InputError("must be finite and non-negative on every line", location=name)
    if not np.any(asd > 0.0):
        raise InputError("is zero on every line; nothing to match", location=name)
    try:
        df_hz = float(df_hz)
    except (TypeError, ValueError):
        raise InputError(f"{df_hz!r} is not a number", location="df_hz") from None
    if not (math.isfinite(df_hz) and df_hz > 0.0):
        raise InputError(f"{df_hz!r} must be a positive line spacing in Hz", location="df_hz")
    return asd, df_hz


def _weights_for(transform, n_max):
    if n_max is None:
        n_max = int(getattr(transform, "series_order", 30))
    coefficients = transform.hermite_coefficients(n_max)
    variance = transform.output_variance() if hasattr(transform, "output_variance") else None
    weights = hermite_correlation_weights(coefficients, variance)
    truncated = float(np.sum(np.asarray(coefficients[1:]) ** 2 * [math.factorial(n) for n in range(1, n_max + 1)]))
    remainder = 0.0 if variance is None else max(0.0, 1.0 - truncated / variance)
    return weights, remainder


def predict_output_asd(gaussian_psd_per_hz, df_hz: float, transform, output_variance_g2: float, n_max: int | None = None):
    """Output ASD of ``sqrt(output_variance) * transform(u)`` for a Gaussian u of given spectrum.

    Parameters
    ----------
    gaussian_psd_per_hz : array_like, shape (N/2 + 1,)
        One-sided spectrum of the Gaussian process on lines ``k * df_hz``
        (any scale: it is normalised to unit variance first), in 1/Hz.
    df_hz : float
        Line spacing in Hz.
    transform : HermiteTransform or ClipTransform
        Any object with ``hermite_coefficients(n_max)`` of its unit-variance
        output (and optionally ``output_variance()`` and ``series_order``).
    output_variance_g2 : float
        Variance of the final output in g^2 (the square of the target g RMS).
    n_max : int, optional
        Hermite order used; default the transform's ``series_order``.

    Returns
    -------
    asd_g2_per_hz : ndarray, shape (N/2 + 1,)
        Predicted output ASD in g^2/Hz; ``df_hz * sum`` equals
        `output_variance_g2`.

    Examples
    --------
    >>> from vibsynth.transforms.hermite import HermiteTransform
    >>> psd = np.zeros(513); psd[50:200] = 1.0
    >>> out = predict_output_asd(psd, 1.0, HermiteTransform.identity(), 150.0)
    >>> bool(np.allclose(out, psd, atol=1e-9))
    True

    References
    ----------
    .. [1] F. Yamazaki and M. Shinozuka, "Digital generation of non-Gaussian
           stochastic fields", J. Eng. Mech. 114(7), 1988.
    .. [2] F. G. Mehler, J. Reine Angew. Math. 66, 1866.
    """
    psd, df_hz = _check_grid(gaussian_psd_per_hz, df_hz, "gaussian_psd_per_hz")
    weights, _ = _weights_for(transform, n_max)
    return _map_spectrum(psd, df_hz, weights) * float(output_variance_g2)


# ---------------------------------------------------------------------------
# Iterative compensation
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class CompensationResult:
    """Outcome of :func:`compensate_spectrum`.

    Attributes
    ----------
    gaussian_psd_per_hz : ndarray
        Compensated one-sided spectrum of the *unit-variance* Gaussian
        process to feed the transform, 1/Hz, on the target's grid
        (``df_hz * sum = 1``). Zero on lines where the target is zero.
    predicted_asd_g2_per_hz : ndarray
        Predicted ASD of ``target_rms * transform(u)``, g^2/Hz.
    target_asd_g2_per_hz : ndarray
        The target, g^2/Hz.
    df_hz : float
        Line spacing, Hz.
    iterations : int
        Spectral updates that produced the returned (best) spectrum.
    converged : bool
        True if `shape_residual_relative` fell below the tolerance.
    residual_relative : float
        RMS over target lines (target > 0) of ``predicted/target - 1``: what
        a verifier will see, including the uniform in-band shortfall that the
        out-of-band share forces (the overall RMS is held at the target).
    shape_residual_relative : float
        The same on the lines compensation can reach (not `spillover_lines`)
        after dividing out the uniform shortfall (the mean of
        ``predicted/target`` there): the part compensation can remove, and
        the quantity compared with the tolerance.
    residual_db : ndarray
        ``10 log10(predicted/target)`` per line, dB; NaN where the target is 0.
    max_abs_residual_db : float
        Largest ``|residual_db|`` over target lines, dB.
    out_of_band_fraction : float
        Share of the predicted output variance on lines where the target is 0.
    achievable : bool
        False when the transform's spill-over alone exceeds the target on
        some lines (by more than the excess limit) or the out-of-band share
        exceeds its limit: no memoryless transform can meet the target there.
    description : str
        One paragraph for reports: what was reached, and where and why not.
    excess_lines : ndarray of int
        Indices of target lines where predicted exceeds target by more than
        the excess limit.
    spillover_lines : ndarray of int
        Indices of target lines where the transform's spill-over (the output
        spectrum less its first-order term ``b_1 S_G``) alone reaches the
        target: compensation cannot lower them.
    series_remainder : float
        Share of the output variance beyond the Hermite order used (carried
        as one extra term so the variance is exact).

    Examples
    --------
    See :func:`compensate_spectrum`, which returns one.

    References
    ----------
    .. [1] M. D. Shields, G. Deodatis and P. Bocchini, "A simple and
           efficient methodology to approximate a general non-Gaussian
           stationary stochastic process by a translation process",
           Probab. Eng. Mech. 26(4), 2011.
    """

    gaussian_psd_per_hz: np.ndarray
    predicted_asd_g2_per_hz: np.ndarray
    target_asd_g2_per_hz: np.ndarray
    df_hz: float
    iterations: int
    converged: bool
    residual_relative: float
    shape_residual_relative: float
    residual_db: np.ndarray
    max_abs_residual_db: float
    out_of_band_fraction: float
    achievable: bool
    description: str
    excess_lines: np.ndarray = field(repr=False)
    spillover_lines: np.ndarray = field(repr=False)
    series_remainder: float = 0.0


def compensate_spectrum(
    target_asd_g2_per_hz,
    df_hz: float,
    transform,
    *,
    beta: float = 1.3,
    tolerance: float = 1e-4,
    max_iterations: int = 60,
    n_max: int | None = None,
    excess_db: float = 1.0,
    out_of_band_limit: float = 0.05,
    initial: str = "inverse",
) -> CompensationResult:
    """Gaussian spectrum whose memoryless transform has the target ASD.

    Iterates ``S_G <- S_G (S_T / S_NG)^beta`` on lines where the target is
    positive (negatives clipped to zero, renormalised to unit variance),
    where ``S_NG`` is the output spectrum predicted through the Hermite
    correlation map. The start is either the target itself or, with
    ``initial="inverse"``, the per-lag inverse of the correlation map applied
    to the target's correlation. Stops when the relative residual is below
    `tolerance`, after `max_iterations`, or when it no longer improves; the
    best iterate is returned. Where the transform's spill-over alone exceeds
    the target (steep band edges, deep notches) the result says so.

    Parameters
    ----------
    target_asd_g2_per_hz : array_like, shape (N/2 + 1,)
        One-sided target ASD in g^2/Hz on lines ``f_k = k * df_hz``,
        ``k = 0 .. N/2`` (DC to Nyquist), at most 2^20 + 1 lines.
    df_hz : float
        Line spacing in Hz (sample rate / N).
    transform : HermiteTransform or ClipTransform
        Unit-variance memoryless transform with ``hermite_coefficients``.
    beta : float, optional
        Update exponent (over-relaxation), 0 < beta <= 2. Default 1.3.
    tolerance : float, optional
        Target RMS relative error of the spectral shape over target lines
        (see ``CompensationResult.shape_residual_relative``). Default 1e-4.
    max_iterations : int, optional
        Most spectral updates. Default 60.
    n_max : int, optional
        Hermite order of the correlation map; default the transform's
        ``series_order`` (exact 3 for the softening cubic).
    excess_db : float, optional
        Predicted-over-target excess (dB) on a target line that marks the
        target as not achievable there. Default 1 dB.
    out_of_band_limit : float, optional
        Largest acceptable share of output variance off the target lines
        before the target is marked not achievable. Default 0.05.
    initial : {"inverse", "target"}, optional
        Starting Gaussian spectrum: the per-lag inverse of the correlation
        map (:func:`gaussian_correlation`) applied to the target's
        correlation (default; often needs no update at all), or the target
        shape itself.

    Returns
    -------
    CompensationResult
        Compensated Gaussian spectrum (unit variance, 1/Hz), predicted
        output ASD (g^2/Hz), residuals and the achievability verdict.

    Raises
    ------
    InputError
        For a malformed grid or parameter.

    Examples
    --------
    >>> from vibsynth.transforms.hermite import solve_cubic_hermite
    >>> target = np.zeros(1025); target[100:600] = 0.01
    >>> result = compensate_spectrum(target, 2.0, solve_cubic_hermite(0.0, 5.0))
    >>> result.achievable
    True

    References
    ----------
    .. [1] F. Yamazaki and M. Shinozuka, "Digital generation of non-Gaussian
           stochastic fields", J. Eng. Mech. 114(7), 1988.
    .. [2] G. Deodatis and R. C. Micaletti, "Simulation of highly skewed
           non-Gaussian stochastic processes", J. Eng. Mech. 127(12), 2001.
    .. [3] M. D. Shields, G. Deodatis and P. Bocchini, "A simple and
           efficient methodology to approximate a general non-Gaussian
           stationary stochastic process by a translation process",
           Probab. Eng. Mech. 26(4), 2011.
    """
    target, df_hz = _check_grid(target_asd_g2_per_hz, df_hz, "target_asd_g2_per_hz")
    if not (math.isfinite(beta) and 0.0 < beta <= 2.0):
        raise InputError(f"{beta!r} must be in (0, 2]", location="beta")
    if not (math.isfinite(tolerance) and tolerance > 0.0):
        raise InputError(f"{tolerance!r} must be positive", location="tolerance")
    if isinstance(max_iterations, bool) or not isinstance(max_iterations, (int, np.integer)) or max_iterations < 0:
        raise InputError(f"{max_iterations!r} must be a non-negative integer", location="max_iterations")
    if initial not in ("inverse", "target"):
        raise InputError(f"{initial!r} must be 'inverse' or 'target'", location="initial")

    weights, remainder = _weights_for(transform, n_max)
    band = target > 0.0
    variance_g2 = df_hz * float(np.sum(target))
    shape = target / variance_g2  # unit-variance target, 1/Hz
    shape_band = shape[band]

    def normalised(psd):
        np.maximum(psd, 0.0, out=psd)
        psd[~band] = 0.0
        psd /= df_hz * np.sum(psd)
        return psd

    if initial == "inverse":
        rho_target = _psd_to_autocovariance(shape, df_hz)
        rho_target /= rho_target[0]
        gaussian = _autocovariance_to_psd(gaussian_correlation(rho_target, weights), df_hz)
        # a line the inverse drives to zero could never recover under the multiplicative
        # update; start it 60 dB down instead (it decays further if it must)
        gaussian[band] = np.maximum(gaussian[band], 1e-6 * shape_band)
        gaussian = normalised(gaussian)
    else:
        gaussian = shape.copy()

    linear_weight = float(weights[1])
    best = None
    history = []
    iterations = 0
    while True:
        output = _map_spectrum(gaussian, df_hz, weights)
        # spill-over: everything but the first-order term b_1 S_G
        spill = output - linear_weight * gaussian
        controllable = band & (spill < shape)
        residual = _shape_residual(output, shape, controllable)
        history.append(residual)
        if best is None or residual < best[0]:
            best = (residual, gaussian.copy(), output, spill, iterations)
        if residual < tolerance or iterations >= max_iterations:
            break
        if len(history) > 8 and best[0] > 0.99 * min(history[:-8]):
            break  # no longer improving
        update = np.zeros_like(gaussian)
        update[band] = (shape_band / np.maximum(output[band], _TINY)) ** beta
        gaussian = normalised(gaussian * update)
        iterations += 1

    residual, gaussian, output, spill, best_iterations = best
    return _summarise(
        target, df_hz, variance_g2, band, gaussian, output, spill, residual, best_iterations,
        tolerance, excess_db, out_of_band_limit, remainder,
    )


def _shape_residual(output, shape, lines):
    """RMS relative error on `lines` after dividing out the mean level ratio.

    A uniform in-band shortfall equal to the out-of-band share is forced by
    holding the output variance at the target's, so it is not counted here;
    lines where the spill-over alone exceeds the target are left out too
    (nothing can fix them; they are reported separately).
    """
    if not np.any(lines):
        return math.inf
    ratio = output[lines] / shape[lines]
    return float(np.sqrt(np.mean((ratio / np.mean(ratio) - 1.0) ** 2)))


def _summarise(target, df_hz, variance_g2, band, gaussian, output, spill, shape_residual, iterations,
               tolerance, excess_db, out_of_band_limit, remainder):
    predicted = output * variance_g2
    residual = float(np.sqrt(np.mean((predicted[band] / target[band] - 1.0) ** 2)))
    residual_db = np.full(target.size, np.nan)
    residual_db[band] = 10.0 * np.log10(np.maximum(predicted[band], _TINY) / target[band])
    max_abs_db = float(np.max(np.abs(residual_db[band])))
    out_of_band = float(np.sum(np.maximum(output[~band], 0.0)) * df_hz)
    on_band = np.where(band, residual_db, 0.0)
    excess = np.flatnonzero(band & (on_band > excess_db))
    deficit = np.flatnonzero(band & (on_band < -excess_db))
    spill_lines = np.flatnonzero(band & (spill * variance_g2 >= target))
    achievable = excess.size == 0 and out_of_band <= out_of_band_limit
    converged = shape_residual < tolerance
    n_band = int(np.sum(band))

    parts = [
        f"Predicted output ASD after {iterations} compensation updates: RMS relative error "
        f"{residual:.2e} over {n_band} target lines, worst line {max_abs_db:.2f} dB; shape error "
        f"{shape_residual:.2e} on the {n_band - spill_lines.size} lines compensation can reach; "
        f"{100.0 * out_of_band:.2f}% of the output variance falls where the target is zero."
    ]
    if excess.size:
        freqs = excess * df_hz
        worst = excess[np.argmax(residual_db[excess])]
        parts.append(
            f"Not achievable on {excess.size} lines between {freqs.min():g} and {freqs.max():g} Hz "
            f"(predicted above target by more than {excess_db:g} dB, up to {residual_db[worst]:.1f} dB "
            f"at {worst * df_hz:g} Hz): on {spill_lines.size} target lines the transform's spill-over "
            "alone exceeds the target, typically at a steep band edge or in a deep notch, and no "
            "memoryless transform can remove it."
        )
    if out_of_band > out_of_band_limit:
        parts.append(
            f"Out-of-band share {100.0 * out_of_band:.1f}% exceeds the {100.0 * out_of_band_limit:g}% "
            "limit: the in-band level falls short of the target while the overall RMS matches it."
        )
    if deficit.size:
        parts.append(f"{deficit.size} target lines stay more than {excess_db:g} dB below the target.")
    if converged:
        parts.append("Converged within tolerance.")
    else:
        parts.append(f"Stopped with the shape error above the tolerance {tolerance:g}.")
    if remainder > 1e-9:
        parts.append(f"Hermite series remainder {remainder:.1e} of the variance carried as one term.")

    return CompensationResult(
        gaussian_psd_per_hz=gaussian,
        predicted_asd_g2_per_hz=predicted,
        target_asd_g2_per_hz=target,
        df_hz=df_hz,
        iterations=iterations,
        converged=converged,
        residual_relative=residual,
        shape_residual_relative=shape_residual,
        residual_db=residual_db,
        max_abs_residual_db=max_abs_db,
        out_of_band_fraction=out_of_band,
        achievable=achievable,
        description=" ".join(parts),
        excess_lines=excess,
        spillover_lines=spill_lines,
        series_remainder=remainder,
    )


def highpass_moment_retention(gaussian_psd_per_hz, highpass_response) -> tuple[float, float]:
    """Shares of the second- and third-order Hermite terms that a linear filter keeps.

    For ``y = u + a2 He2(u) + a3 He3(u)`` the leading skewness term is
    ``6 a2 E[...]`` and the leading excess-kurtosis term ``24 a3``; through a
    filter ``h`` they become ``6 a2 p2`` and ``24 a3 p3`` with
    ``p_n = sum_tau h(tau) rho(tau)^n`` (Mehler: ``E[u^2 He2(u')] = 2 rho^2``,
    ``E[u^3 He3(u')] = 6 rho^3``), i.e. the share of the spectrum of ``rho^n``
    passed by the filter's (zero-phase) response.

    Parameters
    ----------
    gaussian_psd_per_hz : array_like, shape (N/2 + 1,)
        One-sided spectrum of the Gaussian stream on the lines of a frame of N
        samples (any scale), 1/Hz.
    highpass_response : array_like, shape (N/2 + 1,)
        Real zero-phase response of the filter on the same lines.

    Returns
    -------
    p2, p3 : float
        Retained shares (dimensionless, 1 for no filter).

    Examples
    --------
    >>> psd = np.zeros(513); psd[50:200] = 1.0
    >>> highpass_moment_retention(psd, np.ones(513))
    (1.0, 1.0)

    References
    ----------
    F. G. Mehler, J. Reine Angew. Math. 66, 1866 (bivariate normal expansion);
    Winterstein (1988), leading-order moments of the cubic Hermite model.
    """
    psd = np.asarray(gaussian_psd_per_hz, dtype=np.float64)
    response = np.asarray(highpass_response, dtype=np.float64)
    n = 2 * (psd.size - 1)
    weights = np.full(psd.size, 2.0)
    weights[0] = weights[-1] = 1.0
    rho = fft.irfft(psd * weights, n=n)
    rho /= rho[0]
    shares = []
    for order in (2, 3):
        lines = fft.rfft(rho**order).real * weights
        shares.append(float(np.sum(lines * response) / np.sum(lines)))
    return shares[0], shares[1]

