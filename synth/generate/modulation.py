"""The burst model: a slowly varying random envelope that multiplies the Gaussian stream.

A non-Gaussian drive by amplitude modulation::

    x(t) = a(t) u(t),     E[a^2] = 1,     kurtosis(x) = 3 E[a^4]

with ``u`` the Gaussian stream at the (target) ASD and ``a`` a positive random
envelope independent of ``u`` that varies slowly against the band's lowest
period.  Here ``a`` is log-normal, ``a = c exp(sigma g)`` with ``g`` a
unit-variance Gaussian process of Gaussian correlation
``rho_g(tau) = exp(-pi tau^2 / T^2)``; ``T = burst_s`` is its integral time
scale (``integral of rho_g over all lags = T``), the duration of one burst.
For a log-normal envelope ``E[a^4] / E[a^2]^2 = exp(4 sigma^2)``, so
``sigma^2 = ln(kurtosis / 3) / 4``; ``c`` makes ``E[a^2] = 1``.

The envelope is drawn once per record (it is slow: knots every ``T / 16``) from
its own child of the record's seed (``spawn_key + (2,)``), and its realised
moments over the record are set exactly: ``sigma`` is solved so that the
record's ``mean(a^4) / mean(a^2)^2`` is ``kurtosis / 3`` and ``c`` so that
``mean(a^2) = 1``.  The record's g RMS and kurtosis therefore do not wander with
the few dozen bursts a short record holds.  Samples between knots are linear
interpolation, a function of the absolute sample index only, so any stretch of
the record is the same whatever chunk size it is read in.

Why the ASD holds: the product's autocorrelation is ``R_a(tau) R_u(tau)``, so
its ASD is the target convolved with the envelope's spectrum ``S_a``, whose
power is ``E[a^2] = 1`` and lies within about ``1 / T`` Hz of 0 Hz (a Gaussian
correlation has a Gaussian spectrum).  Each line is spread by that much and
keeps its power: for ``T = 0.8 s`` the spread is about 1 Hz, below the
resolution of any usual analysis of a band that starts at 10 Hz or more.  The
pipeline modulates the stream before the spill-over high-pass, which removes
what the spread carries below the band's lowest frequency.

Why the response keeps the peaks: an oscillator of natural frequency ``fn``
and amplification ``Q`` forgets its input in about ``Q / (pi fn)`` s; an
envelope that stays put for many such times passes through it, so the
response is ``a(t)`` times a Gaussian response and its kurtosis stays
``3 E[a^4]`` (Kihm et al. 2013).  A memoryless transform puts the peaks in
single samples instead, which the oscillator averages away.

References
----------
Smallwood, D. O., "Generating non-Gaussian vibration for testing purposes",
Sound and Vibration 39(10), 2005 (product of a Gaussian process and a slowly
varying modulating process).
Rouillard, V., "Generating road vibration test schedules", Journal of Physics:
Conference Series 181, 2009 (road vibration as Gaussian segments of varying RMS).
Kihm, F., Rizzi, S. A., Ferguson, N. S. & Halfpenny, A., "Understanding how
kurtosis is transferred from input acceleration to stress response and its
influence on fatigue life", RASD 2013 (response kurtosis of transformed and
modulated drives).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from vibsynth.errors import InputError

__all__ = ["BurstEnvelope", "burst_plan", "default_burst_s", "DEFAULT_RESONANCE_Q", "BURST_DECAY_MULTIPLE", "KNOTS_PER_BURST"]

#: Amplification of the typical resonance the default burst duration is chosen for (common practice, no source).
DEFAULT_RESONANCE_Q = 10.0
#: Default burst duration, in decay times ``Q / (pi f)`` of that resonance at the band's lowest frequency:
#: a response settles to within exp(-5) (under 1 %) of a new level in five of them.
BURST_DECAY_MULTIPLE = 5.0
#: Envelope knots per burst duration (linear interpolation between them).
KNOTS_PER_BURST = 16
#: Spawn key of the envelope's child seed sequence: ``spawn_key + (MODULATION_STREAM,)``.
MODULATION_STREAM = 2
#: Largest kurtosis the envelope is asked for (kurtosis = 3 exp(4 sigma^2)); beyond it a few samples carry the record.
MAX_BURST_KURTOSIS = 30.0


def _interpolated_means(a: np.ndarray) -> tuple[float, float]:
    """Mean of ``y^2`` and ``y^4`` over the straight lines through successive knot values ``a`` (exact)."""
    p, q = a[:-1], a[1:]
    p2, q2 = p * p, q * q
    m2 = float(np.mean(p2 + p * q + q2)) / 3.0
    m4 = float(np.mean(p2 * p2 + p2 * p * q + p2 * q2 + p * q * q2 + q2 * q2)) / 5.0
    return m2, m4


def default_burst_s(band_low_hz: float, q: float = DEFAULT_RESONANCE_Q) -> float:
    """Default burst duration: :data:`BURST_DECAY_MULTIPLE` decay times of a Q resonance at the lowest band frequency, s.

    Parameters
    ----------
    band_low_hz : float
        Lowest frequency of the profile, Hz.
    q : float
        Amplification of the resonance (default 10).

    Returns
    -------
    float
        ``5 Q / (pi band_low_hz)``, s.

    Examples
    --------
    >>> round(default_burst_s(20.0), 3)
    0.796

    References
    ----------
    Decay time of a lightly damped oscillator, ``1 / (zeta omega_n) = 2 Q / omega_n``
    (Thomson, W. T., *Theory of Vibration with Applications*, any edition).
    """
    low = float(band_low_hz)
    if not (math.isfinite(low) and low > 0):
        raise InputError(f"band_low_hz {band_low_hz!r} must be a finite frequency > 0 Hz", "band_low_hz")
    return BURST_DECAY_MULTIPLE * float(q) / (math.pi * low)


def _check_kurtosis(kurtosis) -> float:
    try:
        value = float(kurtosis)
    except (TypeError, ValueError):
        raise InputError(f"kurtosis {kurtosis!r} must be a number above 3", "kurtosis") from None
    if not (math.isfinite(value) and 3.0 < value <= MAX_BURST_KURTOSIS):
        raise InputError(
            f"kurtosis {kurtosis!r} must be above 3 and at most {MAX_BURST_KURTOSIS:g} for the burst model "
            "(bursts only raise the kurtosis; below 3 use the transform model)",
            "kurtosis",
        )
    return value


@dataclass(frozen=True)
class BurstEnvelope:
    """The burst model's envelope for one record (pure data; the samples come from a seed).

    Parameters
    ----------
    kurtosis : float
        Target Pearson kurtosis of the drive, 3 < kurtosis <= 30.
    burst_s : float
        Integral time scale ``T`` of the log-envelope's correlation, s (> 0).
    rate_hz : float
        Sample rate, Hz.
    total_samples : int
        Output record length, samples; the realised ``mean(a^2)`` and
        ``mean(a^4)`` are set over these samples.
    delay_samples : int
        Stream sample ``m`` is output sample ``m - delay_samples`` (the
        overlap-add high-pass's half-length; 0 otherwise).

    Examples
    --------
    >>> env = BurstEnvelope(kurtosis=6.0, burst_s=0.5, rate_hz=1000.0, total_samples=200_000)
    >>> a = env.values(np.random.SeedSequence(1), 0, 200_000)
    >>> round(float(np.mean(a**2)), 3), round(float(np.mean(a**4) / np.mean(a**2) ** 2), 2)
    (1.0, 2.0)

    References
    ----------
    Smallwood (2005); Kihm, Rizzi, Ferguson & Halfpenny (2013); see the module docstring.
    """

    kurtosis: float
    burst_s: float
    rate_hz: float
    total_samples: int
    delay_samples: int = 0

    def __post_init__(self):
        object.__setattr__(self, "kurtosis", _check_kurtosis(self.kurtosis))
        burst = float(self.burst_s)
        if not (math.isfinite(burst) and burst > 0):
            raise InputError(f"burst_s {self.burst_s!r} must be a finite duration > 0 s", "burst_s")
        rate = float(self.rate_hz)
        if burst * rate < 2 * KNOTS_PER_BURST:
            raise InputError(
                f"burst_s {burst:g} s is shorter than {2 * KNOTS_PER_BURST} samples at {rate:g} Hz; "
                f"give at least {2 * KNOTS_PER_BURST / rate:.3g} s",
                "burst_s",
            )
        object.__setattr__(self, "burst_s", burst)
        object.__setattr__(self, "rate_hz", rate)
        object.__setattr__(self, "total_samples", int(self.total_samples))
        object.__setattr__(self, "delay_samples", int(self.delay_samples))

    @property
    def knot_step_samples(self) -> float:
        """Spacing of the envelope's knots, samples (``burst_s / 16``)."""
        return self.burst_s * self.rate_hz / KNOTS_PER_BURST

    @property
    def log_sigma(self) -> float:
        """Standard deviation of ``ln a`` in the ensemble, ``sqrt(ln(kurtosis / 3) / 4)``."""
        return math.sqrt(math.log(self.kurtosis / 3.0) / 4.0)

    @property
    def bandwidth_hz(self) -> float:
        """Width (Hz) within which the envelope's spectrum holds 95 % of its fluctuating power (ensemble).

        The log-envelope's spectrum is Gaussian with standard deviation
        ``sqrt(2 pi) / (2 pi T)``; the envelope's own spectrum is wider by at
        most ``sqrt(4 sigma^2 + 1)`` (the series of powers of ``rho_g``); 1.96
        standard deviations hold 95 %.
        """
        width = math.sqrt(2.0 * math.pi) / (2.0 * math.pi * self.burst_s)
        return 1.96 * width * math.sqrt(1.0 + 4.0 * self.log_sigma**2)

    def knots(self, root: np.random.SeedSequence) -> tuple[np.ndarray, float, float]:
        """The envelope at its knots, and the knot of output sample 0.

        Parameters
        ----------
        root : numpy.random.SeedSequence
            The record's root seed sequence (the envelope uses its child ``spawn_key + (2,)``).

        Returns
        -------
        (numpy.ndarray, float, float)
            Envelope values at the knots (dimensionless), position (in knots)
            of output sample 0, knot step (samples).

        Examples
        --------
        >>> env = BurstEnvelope(kurtosis=4.0, burst_s=0.5, rate_hz=1000.0, total_samples=100_000)
        >>> values, origin, step = env.knots(np.random.SeedSequence(2))
        >>> step, bool(np.all(values > 0))
        (31.25, True)

        References
        ----------
        Smallwood (2005); see the module docstring.
        """
        step = self.knot_step_samples
        sd = KNOTS_PER_BURST / (2.0 * math.sqrt(math.pi))  # kernel s.d. in knots: rho_g = exp(-pi tau^2 / T^2)
        half = int(math.ceil(4.0 * sd))
        margin = int(math.ceil((self.delay_samples + 2) / step)) + 2
        count = int(math.ceil(self.total_samples / step)) + 2 * margin + 1
        sequence = np.random.SeedSequence(root.entropy, spawn_key=tuple(root.spawn_key) + (MODULATION_STREAM,))
        white = np.random.default_rng(sequence).standard_normal(count + 2 * half)
        kernel = np.exp(-0.5 * (np.arange(-half, half + 1) / sd) ** 2)
        kernel /= math.sqrt(float(np.sum(kernel**2)))
        g = np.convolve(white, kernel, mode="valid")  # unit variance in the ensemble
        inside = g[margin : margin + int(math.ceil(self.total_samples / step)) + 1]
        centre = float(np.mean(inside))
        sigma = self._realised_sigma(inside - centre)
        log_a = sigma * (g - centre)
        level = 0.5 * math.log(_interpolated_means(np.exp(log_a[margin : margin + inside.size]))[0])
        return np.exp(log_a - level), float(margin), step

    def _realised_sigma(self, g: np.ndarray) -> float:
        """sigma with ``mean(a^4) / mean(a^2)^2 = kurtosis / 3`` for ``a = exp(sigma g)`` interpolated linearly."""
        from scipy.optimize import brentq

        target = math.log(self.kurtosis / 3.0)
        shift = float(np.max(g))

        def excess(sigma):
            a = np.exp(sigma * (g - shift))  # scaled to stay finite; the ratio does not depend on the scale
            m2, m4 = _interpolated_means(a)
            return math.log(m4) - 2.0 * math.log(m2) - target

        hi = 2.0 * self.log_sigma
        while excess(hi) < 0:
            hi *= 2.0
            if hi > 50.0:
                raise InputError(
                    f"a record of {self.total_samples / self.rate_hz:g} s holds too few bursts of {self.burst_s:g} s "
                    f"to reach kurtosis {self.kurtosis:g}; give a longer duration or a shorter burst_s",
                    "burst_s",
                )
        return float(brentq(excess, 1e-9, hi, xtol=1e-12))

    def values(self, root: np.random.SeedSequence, start: int, stop: int, knots=None) -> np.ndarray:
        """Envelope at stream samples ``[start, stop)`` (dimensionless).

        Parameters
        ----------
        root : numpy.random.SeedSequence
            The record's root seed sequence.
        start, stop : int
            Stream sample range (output sample = stream sample - ``delay_samples``).
        knots : tuple, optional
            :meth:`knots` of ``root``, if already computed.

        Returns
        -------
        numpy.ndarray
            ``a`` at each sample (dimensionless), linear between knots.

        Examples
        --------
        >>> env = BurstEnvelope(kurtosis=4.0, burst_s=0.5, rate_hz=1000.0, total_samples=100_000)
        >>> root = np.random.SeedSequence(2)
        >>> bool(np.array_equal(env.values(root, 10, 20), env.values(root, 0, 40)[10:20]))
        True

        References
        ----------
        Smallwood (2005); see the module docstring.
        """
        values, origin, step = self.knots(root) if knots is None else knots
        position = (np.arange(int(start), int(stop), dtype=np.float64) - self.delay_samples) / step + origin
        return np.interp(position, np.arange(values.size, dtype=np.float64), values)

    def to_dict(self) -> dict:
        """The sidecar's ``modulation`` object (units in the keys).

        Examples
        --------
        >>> BurstEnvelope(kurtosis=6.0, burst_s=0.8, rate_hz=5120.0, total_samples=10).to_dict()["burst_s"]
        0.8

        References
        ----------
        Smallwood (2005); Kihm, Rizzi, Ferguson & Halfpenny (2013).
        """
        return {
            "model": "bursts",
            "kurtosis": self.kurtosis,
            "burst_s": self.burst_s,
            "log_envelope_sigma": self.log_sigma,
            "knot_step_s": self.knot_step_samples / self.rate_hz,
            "spread_bandwidth_hz": self.bandwidth_hz,
            "description": (
                "x = a(t) u(t): u Gaussian at the target ASD, a = c exp(sigma g(t)) log-normal with Gaussian "
                "correlation exp(-pi tau^2 / burst_s^2) of g, drawn from seed child spawn_key (2,) at knots every "
                "knot_step_s and interpolated linearly; mean(a^2) = 1 and mean(a^4) = kurtosis / 3 over the record; "
                "applied before the spill-over high-pass (Smallwood 2005; Kihm, Rizzi, Ferguson & Halfpenny 2013)"
            ),
        }


#: Fewest bursts a record should hold for its statistics to mean much (common practice, no source).
MIN_BURSTS_PER_RECORD = 20


def burst_plan(plan, band_low_hz: float, kurtosis: float, burst_s: float | None = None):
    """A Gaussian plan turned into a burst-model plan (envelope and the high-pass it needs).

    Parameters
    ----------
    plan : SynthesisPlan
        A Gaussian plan (no transform, acceleration only).
    band_low_hz : float
        Lowest frequency of the profile, Hz.
    kurtosis : float
        Target Pearson kurtosis, 3 < kurtosis <= 30.
    burst_s : float, optional
        Burst duration, s (default :func:`default_burst_s`).

    Returns
    -------
    SynthesisPlan
        With ``modulation`` set, a spill-over high-pass (periodic records get
        the exact frequency-domain one), and warnings for a record that holds
        fewer than :data:`MIN_BURSTS_PER_RECORD` bursts or bursts shorter than
        five decay times of a Q = 10 resonance at the lowest band frequency.

    Examples
    --------
    >>> from vibsynth.generate.plan import make_plan
    >>> from vibsynth.profile.asd import AsdProfile
    >>> plan = burst_plan(make_plan(AsdProfile([20, 2000], [0.01, 0.01]), 60.0, 5120.0), 20.0, 6.0)
    >>> round(plan.modulation.burst_s, 3), plan.spill_highpass is not None
    (0.796, True)

    References
    ----------
    Smallwood (2005); Kihm, Rizzi, Ferguson & Halfpenny (2013).
    """
    import dataclasses

    from vibsynth.generate.highpass import SpillHighpass

    if plan.transform is not None or len(plan.quantities) > 1:
        raise InputError(
            "the burst model modulates a Gaussian acceleration stream: it cannot follow a memoryless transform "
            "(skewness or clip) nor make velocity/displacement columns; drop one of them",
            "kurtosis_model",
        )
    burst = default_burst_s(band_low_hz) if burst_s is None else burst_s
    highpass = plan.spill_highpass
    if highpass is None:
        highpass = SpillHighpass.for_plan(plan, band_low_hz)
    delay = int(highpass.half_length) if highpass is not None and highpass.half_length is not None else 0
    envelope = BurstEnvelope(kurtosis=kurtosis, burst_s=burst, rate_hz=plan.rate_hz,
                             total_samples=plan.total_samples, delay_samples=delay)
    warnings = list(plan.warnings)
    bursts = plan.duration_s / envelope.burst_s
    if bursts < MIN_BURSTS_PER_RECORD:
        warnings.append(
            f"the record holds {bursts:.1f} bursts of {envelope.burst_s:g} s, fewer than {MIN_BURSTS_PER_RECORD}: "
            "its g RMS and kurtosis are set exactly, but its peaks depend on a few bursts; give a longer duration "
            "or a shorter burst_s"
        )
    decay = DEFAULT_RESONANCE_Q / (math.pi * float(band_low_hz))
    if envelope.burst_s < BURST_DECAY_MULTIPLE * decay:
        warnings.append(
            f"bursts of {envelope.burst_s:g} s are shorter than {BURST_DECAY_MULTIPLE:g} decay times of a Q = "
            f"{DEFAULT_RESONANCE_Q:g} resonance at {float(band_low_hz):g} Hz ({BURST_DECAY_MULTIPLE * decay:.3g} s): "
            "low-frequency responses average them and keep less of the kurtosis"
        )
    return dataclasses.replace(plan, modulation=envelope, spill_highpass=highpass, warnings=tuple(warnings))
