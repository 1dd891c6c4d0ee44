"""Multi-channel verification: streamed cross-spectral density matrix, coherence and phase of pairs against target.

:class:`CrossSpectralAccumulator` is Welch's method for every pair of channels
at once (periodic Hann window, 50 % overlap, segment means removed, density
scaling, one-sided): ``G_ab = E[conj(A) B]``, the convention of
:func:`scipy.signal.csd` (equal to it on the whole record, whatever the chunks).

:func:`compare_pairs` judges each specified pair's ordinary coherence
``gamma^2 = |G_ab|^2 / (G_aa G_bb)`` and phase ``angle(G_ab)`` line by line
against tolerance bands that account for the estimator at ``n_d`` averages:

- expected coherence estimate ``gamma^2 + (1 - gamma^2)^2 / n_d`` (the bias of
  the estimate, Bendat & Piersol 2010, section 9.2.3; equation number from
  memory), so an incoherent pair is expected at ``1 / n_d``, the bias floor
  (Carter, Knapp & Nuttall 1973);
- coherence band: that expectation +/- max(:data:`COHERENCE_TOLERANCE`,
  ``z`` x the random error ``sqrt(2) (1 - gamma^2) / (|gamma| sqrt(n_d))``
  (as a standard deviation of gamma^2: ``sqrt(2) (1 - gamma^2) gamma^2 / (|gamma| sqrt(n_d))``);
  near gamma^2 = 0 the standard deviation of the estimate under no
  coherence, ``1 / n_d``, is used instead);
- phase band: the target phase +/- max(:data:`PHASE_TOLERANCE_DEG`, ``z`` x
  ``sqrt(1 - gamma^2) / (|gamma| sqrt(2 n_d))`` rad), judged only where the
  target coherence is at least :data:`PHASE_MIN_COHERENCE`;

with ``z`` = :data:`BAND_SIGMAS` and ``n_d`` = half the Welch degrees of
freedom (the number of independent averages equivalent to the overlapped
segments).  A pair passes when at least :data:`PAIR_MIN_FRACTION` of its
judged lines lie inside both bands.

This module never imports the generator.

References
----------
Bendat, J. S. & Piersol, A. G., *Random Data*, 4th ed., Wiley 2010, section 9.2.3
(bias and random error of coherence and phase estimates).
Carter, G. C., Knapp, C. H. & Nuttall, A. H., "Estimation of the magnitude-squared
coherence function via overlapped fast Fourier transform processing", IEEE
Trans. Audio Electroacoust. 21(4), 1973 (E[gamma^2 estimate] = 1/n_d for
incoherent signals).
Welch, P. D., IEEE Trans. Audio Electroacoust. 15(2), 1967.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import scipy.fft
import scipy.signal

from vibsynth.analysis.welch import welch_dof
from vibsynth.errors import InputError

#: Smallest coherence half-band (absolute, gamma^2 units).
COHERENCE_TOLERANCE = 0.05
#: Smallest phase half-band, degrees.
PHASE_TOLERANCE_DEG = 5.0
#: Standard deviations of the estimate inside a band (about 99.7 % two-sided for a normal error).
BAND_SIGMAS = 3.0
#: Phase is judged only where the target coherence reaches this (below it the phase is barely defined).
PHASE_MIN_COHERENCE = 0.1
#: Fraction of a pair's judged lines that must lie inside the bands (common practice, no source).
PAIR_MIN_FRACTION = 0.95
#: Lines within this many resolutions of a channel's band edge are not judged (the Hann window's main lobe).
EDGE_RESOLUTIONS = 2


class CrossSpectralAccumulator:
    """Streaming Welch estimate of the cross-spectral density matrix of C channels.

    Parameters
    ----------
    rate_hz : float
        Sample rate, Hz.
    nperseg : int
        Segment length, samples (overlap ``nperseg // 2``).
    channels : int
        Number of channels C.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> x = rng.standard_normal((4096, 2))
    >>> acc = CrossSpectralAccumulator(1024.0, 256, 2)
    >>> acc.update(x[:1000]); acc.update(x[1000:])
    >>> f, g = acc.result()[:2]
    >>> bool(np.allclose(g[:, 0, 1], scipy.signal.csd(x[:, 0], x[:, 1], fs=1024.0, nperseg=256)[1]))
    True

    References
    ----------
    Welch (1967); Bendat & Piersol (2010), cross-spectral density estimates.
    """

    def __init__(self, rate_hz: float, nperseg: int, channels: int):
        self.rate_hz = float(rate_hz)
        self.nperseg = int(nperseg)
        self.channels = int(channels)
        if not (self.rate_hz > 0 and self.nperseg >= 2 and self.channels >= 1):
            raise InputError("rate, segment length and channel count must be positive", "nperseg")
        self.step = self.nperseg - self.nperseg // 2
        self.window = scipy.signal.get_window("hann", self.nperseg)
        self.scale = 1.0 / (self.rate_hz * float(np.sum(self.window**2)))
        self.sum = np.zeros((self.nperseg // 2 + 1, self.channels, self.channels), dtype=np.complex128)
        self.segments = 0
        self.samples = 0
        self._carry = np.zeros((0, self.channels))

    def update(self, chunk) -> None:
        """Add the next samples, shape (m, C) (any m; the result does not depend on how the record is cut).

        Examples
        --------
        See the class docstring.

        References
        ----------
        Welch (1967), segment averaging.
        """
        data = np.asarray(chunk, dtype=np.float64)
        if data.ndim == 1:
            data = data[:, None]
        if data.ndim != 2 or data.shape[1] != self.channels:
            raise InputError(f"chunk of shape {np.shape(chunk)} does not hold {self.channels} channels", "chunk")
        self.samples += data.shape[0]
        data = np.concatenate((self._carry, data)) if self._carry.size else data
        n, step = self.nperseg, self.step
        count = 0 if data.shape[0] < n else (data.shape[0] - n) // step + 1
        for start in range(0, count * step, step * 64):
            stop = min(start + step * 64, count * step)
            starts = np.arange(start, stop, step)
            segments = data[starts[:, None] + np.arange(n)[None, :]]  # (s, n, C)
            segments = segments - segments.mean(axis=1, keepdims=True)
            segments *= self.window[None, :, None]
            spectra = scipy.fft.rfft(segments, axis=1)  # (s, L, C)
            self.sum += np.einsum("sla,slb->lab", np.conj(spectra), spectra)
        self.segments += count
        self._carry = data[count * step:].copy()

    def result(self) -> tuple[np.ndarray, np.ndarray, int, float]:
        """Frequencies (Hz), the one-sided matrices ``G[k, a, b]`` (g^2/Hz), segments and Welch dof.

        Examples
        --------
        See the class docstring.

        References
        ----------
        Welch (1967); density scaling ``1 / (rate_hz sum(w^2))``; :func:`vibsynth.analysis.welch.welch_dof`.
        """
        if self.segments == 0:
            raise InputError(f"record has {self.samples} samples, fewer than one segment of {self.nperseg}",
                             location="nperseg")
        matrix = self.sum * (self.scale / self.segments)
        if self.nperseg % 2:
            matrix[1:] *= 2.0
        else:
            matrix[1:-1] *= 2.0
        frequencies = scipy.fft.rfftfreq(self.nperseg, 1.0 / self.rate_hz)
        return frequencies, matrix, self.segments, welch_dof(self.segments)


def coherence_bias(coherence, averages: float) -> np.ndarray:
    """Bias of the ordinary coherence estimate at ``averages`` independent averages: ``(1 - gamma^2)^2 / n_d``.

    Examples
    --------
    >>> float(coherence_bias(0.0, 50))
    0.02

    References
    ----------
    Bendat & Piersol (2010), section 9.2.3, bias of coherence estimates (equation number from memory).
    """
    g2 = np.asarray(coherence, dtype=float)
    return (1.0 - g2) ** 2 / float(averages)


def coherence_sigma(coherence, averages: float) -> np.ndarray:
    """Standard deviation of the ordinary coherence estimate: ``sqrt(2) (1 - gamma^2) |gamma| / sqrt(n_d)``.

    Near gamma^2 = 0 (where that vanishes) the standard deviation of the
    estimate of incoherent signals, about ``1 / n_d``, is the floor.

    Examples
    --------
    >>> round(float(coherence_sigma(0.5, 100)), 4)
    0.05

    References
    ----------
    Bendat & Piersol (2010), section 9.2.3, normalised random error of coherence
    estimates ``sqrt(2) (1 - gamma^2) / (|gamma| sqrt(n_d))`` (times gamma^2).
    """
    g2 = np.asarray(coherence, dtype=float)
    sigma = math.sqrt(2.0) * (1.0 - g2) * np.sqrt(g2) / math.sqrt(float(averages))
    return np.maximum(sigma, 1.0 / float(averages))


def phase_sigma_deg(coherence, averages: float) -> np.ndarray:
    """Standard deviation of the phase estimate, degrees: ``sqrt(1 - gamma^2) / (|gamma| sqrt(2 n_d))`` rad.

    Examples
    --------
    >>> round(float(phase_sigma_deg(0.5, 100)), 3)
    4.051

    References
    ----------
    Bendat & Piersol (2010), section 9.2.3, random error of phase estimates.
    """
    g2 = np.maximum(np.asarray(coherence, dtype=float), 1e-12)
    return np.degrees(np.sqrt(1.0 - np.minimum(g2, 1.0)) / (np.sqrt(g2) * math.sqrt(2.0 * float(averages))))


@dataclass
class PairCheck:
    """One pair's coherence and phase against target (arrays over the estimate's lines).

    Built by :func:`compare_pairs`; ``passed`` when at least :data:`PAIR_MIN_FRACTION`
    of the judged lines lie inside both the coherence and the phase band.

    Examples
    --------
    See :func:`compare_pairs`.

    References
    ----------
    Bendat & Piersol (2010), section 9.2.3.
    """

    channels: tuple
    frequencies_hz: np.ndarray = field(repr=False)
    coherence: np.ndarray = field(repr=False)
    phase_deg: np.ndarray = field(repr=False)
    target_coherence: np.ndarray = field(repr=False)
    target_phase_deg: np.ndarray = field(repr=False)
    coherence_low: np.ndarray = field(repr=False)
    coherence_high: np.ndarray = field(repr=False)
    phase_band_deg: np.ndarray = field(repr=False)
    judged: np.ndarray = field(repr=False)
    phase_judged: np.ndarray = field(repr=False)
    specified: bool = True

    @property
    def coherence_within(self) -> np.ndarray:
        """Judged lines whose coherence lies inside its band."""
        return self.judged & (self.coherence >= self.coherence_low) & (self.coherence <= self.coherence_high)

    @property
    def phase_error_deg(self) -> np.ndarray:
        """Measured minus target phase, wrapped to (-180, 180] degrees."""
        return (self.phase_deg - self.target_phase_deg + 180.0) % 360.0 - 180.0

    @property
    def phase_within(self) -> np.ndarray:
        """Lines whose phase lies inside its band (True where the phase is not judged)."""
        return ~self.phase_judged | (np.abs(self.phase_error_deg) <= self.phase_band_deg)

    @property
    def fraction_within(self) -> float:
        """Fraction of judged lines inside both bands."""
        count = int(np.sum(self.judged))
        return float(np.sum(self.coherence_within & self.phase_within & self.judged)) / count if count else float("nan")

    @property
    def passed(self) -> bool:
        """At least :data:`PAIR_MIN_FRACTION` of the judged lines inside both bands."""
        return bool(self.fraction_within >= PAIR_MIN_FRACTION)

    def to_dict(self) -> dict:
        """Summary as plain data (units in the keys): fraction within, median and 95th-percentile errors.

        Examples
        --------
        See :func:`compare_pairs` (``check.to_dict()["pass"]``).

        References
        ----------
        RFC 8259 (JSON).
        """
        judged = self.judged
        error = np.abs(self.coherence - self.target_coherence)[judged]
        phase = np.abs(self.phase_error_deg)[self.phase_judged]
        return {
            "channels": list(self.channels),
            "specified": bool(self.specified),
            "pass": self.passed,
            "lines_judged": int(np.sum(judged)),
            "fraction_within": self.fraction_within,
            "min_fraction_within": PAIR_MIN_FRACTION,
            "coherence_error_median": float(np.median(error)) if error.size else None,
            "coherence_error_95_percent": float(np.quantile(error, 0.95)) if error.size else None,
            "phase_error_median_deg": float(np.median(phase)) if phase.size else None,
            "phase_error_95_percent_deg": float(np.quantile(phase, 0.95)) if phase.size else None,
        }


def compare_pairs(frequencies_hz, matrix, dof: float, channel_names, targets, bands) -> list[PairCheck]:
    """Every pair of channels against target coherence and phase (see the module docstring for the bands).

    Parameters
    ----------
    frequencies_hz : numpy.ndarray, shape (K,)
        Estimate lines, Hz.
    matrix : numpy.ndarray, complex, shape (K, C, C)
        Estimated ``G_ab = E[conj(A) B]`` (g^2/Hz).
    dof : float
        Welch degrees of freedom of the estimate (``n_d = dof / 2``).
    channel_names : sequence of str
    targets : dict
        ``(a, b) -> (coherence(f), phase_deg(f))`` callables for the specified
        pairs (channel indices, a < b or as specified); unspecified pairs are
        judged against coherence 0.
    bands : sequence of (float, float)
        Each channel's band (Hz); a pair is judged inside both, away from the edges.

    Returns
    -------
    list of PairCheck
        One per pair of channels (specified first, in the order given).

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> x = rng.standard_normal((1 << 16, 2))
    >>> acc = CrossSpectralAccumulator(1024.0, 512, 2); acc.update(x)
    >>> f, g, _, dof = acc.result()
    >>> check = compare_pairs(f, g, dof, ("x", "y"), {}, [(10.0, 400.0), (10.0, 400.0)])[0]
    >>> check.passed, check.specified
    (True, False)

    References
    ----------
    Bendat & Piersol (2010), section 9.2.3; Carter, Knapp & Nuttall (1973).
    """
    f = np.asarray(frequencies_hz, dtype=float)
    averages = max(float(dof) / 2.0, 1.0)
    resolution = f[1] - f[0]
    diagonal = np.real(np.einsum("kaa->ka", matrix))
    checks = []
    count = len(channel_names)
    order = [tuple(k) for k in targets] + [(a, b) for a in range(count) for b in range(a + 1, count)
                                           if (a, b) not in targets and (b, a) not in targets]
    for a, b in order:
        cross = matrix[:, a, b]
        with np.errstate(divide="ignore", invalid="ignore"):
            coherence = np.abs(cross) ** 2 / (diagonal[:, a] * diagonal[:, b])
        coherence = np.nan_to_num(coherence)
        phase = np.angle(cross, deg=True)
        specified = (a, b) in targets
        if specified:
            coherence_of, phase_of = targets[(a, b)]
            target = np.clip(np.asarray(coherence_of(f), dtype=float), 0.0, 1.0)
            target_phase = np.asarray(phase_of(f), dtype=float)
        else:
            target, target_phase = np.zeros_like(f), np.zeros_like(f)
        expected = target + coherence_bias(target, averages)
        half = np.maximum(COHERENCE_TOLERANCE, BAND_SIGMAS * coherence_sigma(target, averages))
        low = max(bands[a][0], bands[b][0]) + EDGE_RESOLUTIONS * resolution
        high = min(bands[a][1], bands[b][1]) - EDGE_RESOLUTIONS * resolution
        judged = (f >= low) & (f <= high)
        phase_judged = judged & (target >= PHASE_MIN_COHERENCE)
        phase_band = np.maximum(PHASE_TOLERANCE_DEG, BAND_SIGMAS * phase_sigma_deg(target, averages))
        checks.append(PairCheck((channel_names[a], channel_names[b]), f, coherence, phase, target, target_phase,
                                expected - half, expected + half, phase_band, judged, phase_judged, specified))
    return checks


def channel_matrix_figure(frequencies_hz, matrix, channel_names, targets_asd, pair_checks, title: str = ""):
    """The matrix figure: each channel's ASD (measured and target) on the diagonal, coherence and phase off it.

    Above the diagonal: coherence (measured, target and band); below it:
    phase in degrees (measured and target, where the phase is judged).

    Parameters
    ----------
    frequencies_hz : numpy.ndarray
        Estimate lines, Hz.
    matrix : numpy.ndarray, complex, shape (K, C, C)
        Estimated cross-spectral density matrix, g^2/Hz.
    channel_names : sequence of str
    targets_asd : sequence of numpy.ndarray
        Each channel's target ASD at the lines (g^2/Hz).
    pair_checks : list of PairCheck
    title : str

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> f = np.linspace(0, 100, 11); g = np.ones((11, 2, 2), dtype=complex)
    >>> fig = channel_matrix_figure(f, g, ("x", "y"), [np.ones(11), np.ones(11)], [])
    >>> len(fig.axes)
    4

    References
    ----------
    Bendat & Piersol (2010), spectral density matrix.
    """
    from matplotlib.figure import Figure

    count = len(channel_names)
    figure = Figure(figsize=(3.2 * count + 0.6, 2.6 * count + 0.6))
    axes = figure.subplots(count, count, squeeze=False)
    f = np.asarray(frequencies_hz)
    inside = f > 0
    by_pair = {tuple(c.channels): c for c in pair_checks}
    for a in range(count):
        for b in range(count):
            ax = axes[a][b]
            ax.grid(True, which="both", alpha=0.3)
            ax.tick_params(labelsize=7)
            if a == b:
                ax.loglog(f[inside], np.real(matrix[inside, a, a]), lw=0.8, label="measured")
                target = np.asarray(targets_asd[a])
                positive = inside & (target > 0)
                ax.loglog(f[positive], target[positive], "k--", lw=0.8, label="target")
                ax.set_title(f"{channel_names[a]}: ASD (g^2/Hz)", fontsize=8)
                continue
            first, second = (a, b) if a < b else (b, a)
            names = (channel_names[first], channel_names[second])
            check = by_pair.get(names) or by_pair.get(names[::-1])
            if check is None:
                ax.set_visible(False)
                continue
            judged = check.judged
            if a < b:
                ax.semilogx(f[judged], check.coherence[judged], lw=0.7, label="measured")
                ax.semilogx(f[judged], check.target_coherence[judged], "k--", lw=0.8, label="target")
                ax.fill_between(f[judged], check.coherence_low[judged], check.coherence_high[judged], color="0.85",
                                label="band")
                ax.set_ylim(-0.02, 1.02)
                ax.set_title(f"coherence {names[0]}-{names[1]}", fontsize=8)
            else:
                shown = check.phase_judged
                ax.semilogx(f[shown], check.phase_deg[shown], ".", ms=1.5, label="measured")
                ax.semilogx(f[shown], check.target_phase_deg[shown], "k--", lw=0.8, label="target")
                ax.set_ylim(-185, 185)
                ax.set_title(f"phase {names[0]}->{names[1]} (deg)", fontsize=8)
            if a == count - 1 or (a < b and a == count - 2 and b == count - 1):
                ax.set_xlabel("frequency (Hz)", fontsize=7)
    axes[0][0].legend(fontsize=6, loc="lower left")
    if title:
        figure.suptitle(title, fontsize=9)
    figure.tight_layout()
    return figure


__all__ = [
    "BAND_SIGMAS",
    "COHERENCE_TOLERANCE",
    "CrossSpectralAccumulator",
    "PAIR_MIN_FRACTION",
    "PHASE_TOLERANCE_DEG",
    "PairCheck",
    "channel_matrix_figure",
    "coherence_bias",
    "coherence_sigma",
    "phase_sigma_deg",
    "compare_pairs",
]
