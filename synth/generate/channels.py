"""Multi-channel records: the spectral density matrix factored per line, colouring independent random-phase sources.

At each line ``f_k`` of the frame grid the target is the spectral density
matrix ``G(f_k)`` (``G_ab = E[conj(A) B]``, g^2/Hz; see
:class:`vibsynth.profile.multichannel.MultiChannelProfile`).  With ``M_k =
conj(G(f_k)) df / 2`` (``M_ab = E[X_a conj(X_b)]`` for the lines ``X`` of
``irfft(norm="forward")``), a factor ``H_k H_k^H = M_k`` (Cholesky, or
``V sqrt(Lambda)`` where ``M_k`` is only semidefinite) turns C independent
sources ``z_k`` with ``E[z z^H] = I`` into lines ``X_k = H_k z_k`` with
``E[X_k X_k^H] = M_k``: every channel's ASD and every pair's cross-spectrum
hold in expectation.

The sources are drawn like the single-channel lines (one standard normal pair
per line and source, from the same per-frame child of the seed):
``amplitude="fixed"`` keeps only each pair's direction (unit magnitude, uniform
phase), ``"rayleigh"`` uses the pair times sqrt(1/2) (complex Gaussian).  With
more than one source per line a channel's frame periodogram is no longer
exactly the target (the sources add with random phases); its expectation is.

Everything after the lines (overlap-add, the spill-over high-pass, ramps,
chunking) is the one pipeline of :mod:`vibsynth.generate.pipeline`, working on
(samples, channels) arrays.

References
----------
Shinozuka, M., "Simulation of multivariate and multidimensional random
processes", J. Acoust. Soc. Am. 49(1B), 1971, pp. 357-367 (spectral
representation of a vector process from a factor of its spectral matrix).
Smallwood, D. O. & Paez, T. L., "A frequency domain method for the generation of
partially coherent normal stationary time domain signals", Shock and Vibration
1(1), 1993, pp. 45-53 (Cholesky factor per line, random-phase sources, overlap-add).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from vibsynth.errors import InputError
from vibsynth.generate.plan import DEFAULT_MEMORY_BUDGET_BYTES, SynthesisPlan, make_plan
from vibsynth.profile.multichannel import MultiChannelProfile, factor_matrices


def make_channel_plan(
    profile: MultiChannelProfile,
    duration_s: float,
    rate_hz: float,
    *,
    amplitude: str = "fixed",
    resolution_hz: float | None = None,
    loop: bool = False,
    ramp_in_s: float = 0.0,
    ramp_out_s: float = 0.0,
    memory_budget_bytes: int = DEFAULT_MEMORY_BUDGET_BYTES,
) -> SynthesisPlan:
    """Plan a multi-channel record: the single-channel plan of the channels' band, plus the per-line factors.

    Parameters
    ----------
    profile : MultiChannelProfile
        Two or more channels (g^2/Hz) and their pairs.
    duration_s, rate_hz, amplitude, resolution_hz, loop, ramp_in_s, ramp_out_s, memory_budget_bytes
        As for :func:`vibsynth.generate.plan.make_plan` (acceleration only; the
        memory estimate counts every channel).

    Returns
    -------
    SynthesisPlan
        With ``channels`` and ``channel_factors`` set; ``line_spectrum`` is the
        trace of the spectral density matrix on the frame grid.

    Raises
    ------
    InputError
        As :func:`make_plan`; and a spectral density matrix that is not
        positive semidefinite at some line (one line naming the frequency,
        the channels and the smallest eigenvalue of the coherence matrix).

    Examples
    --------
    >>> from vibsynth.profile.asd import AsdProfile
    >>> flat = AsdProfile([20, 2000], [0.01, 0.01])
    >>> plan = make_channel_plan(MultiChannelProfile(("x", "y"), (flat, flat)), 2.0, 5120.0)
    >>> plan.channels, plan.channel_factors.shape[1:]
    (('x', 'y'), (2, 2))

    References
    ----------
    Shinozuka (1971); Smallwood & Paez (1993).
    """
    if not isinstance(profile, MultiChannelProfile) or profile.channel_count < 2:
        raise InputError("a multi-channel plan needs a MultiChannelProfile with two or more channels", "profile")
    channels = profile.channels

    def trace(frequencies: np.ndarray) -> np.ndarray:
        df = float(frequencies[1] - frequencies[0])
        lines = np.arange(frequencies.size)
        return np.sum([c.line_spectrum(df, lines) for c in channels], axis=0)

    plan = make_plan(
        profile.envelope(), duration_s, rate_hz, amplitude=amplitude, resolution_hz=resolution_hz, loop=loop,
        ramp_in_s=ramp_in_s, ramp_out_s=ramp_out_s, quantities=("acceleration",),
        memory_budget_bytes=memory_budget_bytes, spectrum=trace, channel_count=profile.channel_count,
    )
    df = plan.resolution_hz
    lo, hi = plan._band
    lines = np.arange(lo, hi)
    asd = np.array([c.line_spectrum(df, lines) for c in channels])  # (C, K), g^2/Hz per line
    frequencies = lines * df
    coherence = profile.coherence_matrix(frequencies)
    violation = profile.check_psd(frequencies, asd, coherence)
    if violation is not None:
        raise InputError(violation.message(), profile.source or profile.name, "pairs")
    matrix = profile.matrix(frequencies, asd * (df / 2.0), coherence)
    np.conj(matrix, out=matrix)
    factors, _ = factor_matrices(matrix)
    del matrix, coherence
    return dataclasses.replace(plan, channels=profile.channel_names, channel_factors=factors)


def draw_channel_lines(rng: np.random.Generator, plan: SynthesisPlan) -> np.ndarray:
    """Complex lines of one frame of a multi-channel plan, shape (N//2 + 1, C), in g for ``irfft(norm="forward")``.

    Draws ``C (N//2 + 1)`` standard normal pairs (source by source, every
    line, so the draws do not depend on the spectrum), shapes them into
    unit-variance sources (``fixed``: unit magnitude; ``rayleigh``: complex
    Gaussian) and multiplies each band line by its factor.

    Examples
    --------
    >>> from vibsynth.profile.asd import AsdProfile
    >>> flat = AsdProfile([20, 2000], [0.01, 0.01])
    >>> plan = make_channel_plan(MultiChannelProfile(("x", "y"), (flat, flat)), 2.0, 5120.0)
    >>> draw_channel_lines(np.random.default_rng(1), plan).shape
    (5121, 2)

    References
    ----------
    Smallwood & Paez (1993), random-phase sources coloured by a factor per line.
    """
    factors = plan.channel_factors
    count = factors.shape[1]
    size = plan.frame_length // 2 + 1
    sources = np.empty((count, size), dtype=np.complex128)
    rng.standard_normal(out=sources.view(np.float64))
    lo, hi = plan._band
    band = sources[:, lo:hi]
    if plan.amplitude == "rayleigh":
        band *= math.sqrt(0.5)
    else:
        magnitude = np.abs(band)
        zero = magnitude == 0.0
        if np.any(zero):  # probability zero; a phase of 0 keeps the amplitude exact
            band[zero] = 1.0
            magnitude[zero] = 1.0
        band /= magnitude
    lines = np.zeros((size, count), dtype=np.complex128)
    lines[lo:hi] = np.einsum("kab,bk->ka", factors, band)
    return lines


__all__ = ["draw_channel_lines", "make_channel_plan"]
