"""Tones (fixed or swept) and narrow bands of random, added to the random stream sample by sample.

Every sample is a closed-form function of its index ``n`` (time ``t = n / rate``):

* a tone is ``A(f(t)) cos(2 pi c(t) + phi)`` with ``c(t)`` the integral of the
  instantaneous frequency ``f`` from 0 (:meth:`vibsynth.profile.mixed.Sweep.cycles`),
  so a sweep has no phase jump anywhere, and any chunk gives the same samples;
* a narrow band is a random-phase sum of ``K`` cosines whose frequencies are
  the (swept) centre plus fixed offsets ``d_k`` spread over the band (one
  offset drawn uniformly inside each of ``K`` equal sub-bands), amplitudes
  ``sqrt(2 S B / K)`` (mean square ``S B``; with a table of its own, each
  cosine carries its sub-band's mean square), phases uniform on ``[0, 2 pi)``;
  offsets and phases come from the child ``spawn_key + (2, j)`` of the
  record's root seed (band ``j``), so the band is deterministic by seed.

These parts are added after the memoryless transform, the high-pass and the
scale (a tone must not be distorted by the transform), and before the level
schedule and the ramps (:mod:`vibsynth.generate.schedule`).

References
----------
Shinozuka, M., "Simulation of multivariate and multidimensional random
processes", J. Acoust. Soc. Am. 49(1B), 1971 (random-phase sums of cosines with
frequencies jittered inside sub-bands); IEC 60068-2-6 (2007) (sweep laws).
"""

from __future__ import annotations

import math

import numpy as np

from vibsynth.generate.seeds import child_generator
from vibsynth.generate.schedule import apply_schedule
from vibsynth.errors import InputError
from vibsynth.profile.mixed import MixedParts, NarrowBand, Tone, check_mixed_rate

#: spawn-key prefix of narrow band j: ``(NARROW_BAND_STREAM, j)``.
NARROW_BAND_STREAM = 2
#: Samples evaluated at a time (bounds the (samples x cosines) work array).
_BLOCK = 8192


def narrow_band_lines(band: NarrowBand) -> int:
    """Number of cosines in a narrow band: 4 per Hz of bandwidth, at least 64, at most 2048.

    Examples
    --------
    >>> from vibsynth.profile.mixed import Sweep
    >>> narrow_band_lines(NarrowBand(Sweep(400.0), 20.0, 0.05))
    80

    References
    ----------
    Shinozuka (1971): the line spacing sets how finely the band is drawn.
    """
    return int(min(2048, max(64, math.ceil(4.0 * band.bandwidth_hz))))


def tone_samples(tone: Tone, start: int, count: int, rate_hz: float) -> np.ndarray:
    """Samples ``start .. start + count - 1`` of a tone, g.

    Parameters
    ----------
    tone : vibsynth.profile.mixed.Tone
    start, count : int
        First sample index and number of samples.
    rate_hz : float
        Sample rate, Hz.

    Returns
    -------
    numpy.ndarray
        ``A(f(t)) cos(2 pi c(t) + phase)``, g.

    Examples
    --------
    >>> from vibsynth.profile.mixed import Sweep
    >>> x = tone_samples(Tone(Sweep(100.0), 2.0), 0, 1000, 1000.0)
    >>> round(float(np.sqrt(np.mean(x * x))), 6)
    1.414214

    References
    ----------
    Phase as the integral of the instantaneous frequency (IEC 60068-2-6, sweeps).
    """
    t = np.arange(start, start + count, dtype=float) / float(rate_hz)
    cycles = tone.sweep.cycles(t)
    cycles = cycles - np.floor(cycles)
    phase = 2.0 * np.pi * cycles + math.radians(tone.phase_deg)
    out = np.cos(phase)
    if tone.amplitude_points:
        out *= tone.amplitude_g(tone.sweep.frequency_hz(t))
    else:
        out *= tone.peak_g
    return out


def check_mixed_request(parts: MixedParts | None, rate_hz: float, quantities, loop: bool,
                        source: str = "profile") -> None:
    """Refuse what a mixed-mode drive cannot be: a looped record, velocity/displacement columns, tones at Nyquist.

    Examples
    --------
    >>> check_mixed_request(None, 1000.0, ("acceleration", "velocity"), True)  # no mixed parts: anything goes

    References
    ----------
    Nyquist-Shannon sampling theorem.
    """
    if parts is None or parts.empty:
        return
    check_mixed_rate(parts, rate_hz, source)
    if loop:
        raise InputError("a profile with tones, narrow bands or a schedule cannot make a looped record; drop loop",
                         location="loop")
    if len(tuple(quantities)) > 1:
        raise InputError("velocity/displacement columns are not made for profiles with tones, narrow bands or a "
                         "schedule; ask for acceleration only", location="quantities")


def mixed_rig_limit_check(profile, stroke_limit_mm: float | None, velocity_limit_m_s: float | None) -> None:
    """Refuse a drive whose tones, narrow bands and schedule take it beyond a rig's stroke or velocity.

    Parameters
    ----------
    profile : AsdProfile
        With ``profile.mixed`` (nothing is checked without it).
    stroke_limit_mm : float or None
        Shaker stroke, peak-to-peak, mm.
    velocity_limit_m_s : float or None
        Shaker velocity limit (peak), m/s.

    Raises
    ------
    InputError
        Naming the need and the limit (``stroke_limit_mm``, ``velocity_limit_m_s``).

    Examples
    --------
    >>> from vibsynth.profile.asd import AsdProfile
    >>> from vibsynth.profile.mixed import Sweep
    >>> p = AsdProfile([20, 2000], [0.001, 0.001], mixed=MixedParts(tones=(Tone(Sweep(5.0), 1.0),)))
    >>> mixed_rig_limit_check(p, 10.0, None)
    Traceback (most recent call last):
    ...
    vibsynth.errors.InputError: stroke_limit_mm: with its tones, narrow bands and schedule the drive may need ...

    References
    ----------
    See :meth:`vibsynth.profile.mixed.MixedParts.rig_demands`.
    """
    parts = getattr(profile, "mixed", None)
    if parts is None or parts.empty:
        return
    stroke_m, velocity_m_s = parts.rig_demands(profile)
    if stroke_limit_mm is not None and stroke_m * 1e3 > stroke_limit_mm:
        raise InputError(f"with its tones, narrow bands and schedule the drive may need {stroke_m * 1e3:.3g} mm "
                         f"peak-to-peak (tone peaks added, random parts at 3 sigma), beyond the {stroke_limit_mm:g} mm "
                         "stroke limit; refusing to write the drive", "stroke_limit_mm")
    if velocity_limit_m_s is not None and velocity_m_s > velocity_limit_m_s:
        raise InputError(f"with its tones, narrow bands and schedule the drive may need {velocity_m_s:.3g} m/s peak "
                         f"velocity (tone peaks added, random parts at 3 sigma), beyond the {velocity_limit_m_s:g} m/s "
                         "limit; refusing to write the drive", "velocity_limit_m_s")


class MixedStage:
    """Adds tones and narrow bands, then applies the level schedule, to stretches of the drive (in place).

    Parameters
    ----------
    parts : vibsynth.profile.mixed.MixedParts
    rate_hz : float
        Sample rate, Hz.
    root : numpy.random.SeedSequence
        The record's root seed sequence (narrow bands draw from its children).

    Examples
    --------
    >>> from vibsynth.profile.mixed import Sweep
    >>> stage = MixedStage(MixedParts(tones=(Tone(Sweep(50.0), 1.0),)), 1000.0, np.random.SeedSequence(1))
    >>> x = np.zeros(4); stage.apply(x, 0); float(x[0])
    1.0

    References
    ----------
    See the module docstring.
    """

    def __init__(self, parts: MixedParts, rate_hz: float, root: np.random.SeedSequence):
        self.parts = parts
        self.rate_hz = float(rate_hz)
        self._bands = []
        for index, band in enumerate(parts.narrow_bands):
            rng = child_generator(root, NARROW_BAND_STREAM, index)
            k = narrow_band_lines(band)
            width = band.bandwidth_hz / k
            low = band.offsets_hz[0]
            offsets = low + width * (np.arange(k) + rng.uniform(0.0, 1.0, k))
            phases = rng.uniform(0.0, 1.0, k)  # in cycles
            if band.shape:  # each cosine carries the mean square of its sub-band (16-point mean of the table)
                grid = low + width * (np.arange(k)[:, None] + (np.arange(16) + 0.5)[None, :] / 16.0)
                amplitude = np.sqrt(2.0 * band.asd_at_offset(grid).mean(axis=1) * width)
            else:
                amplitude = math.sqrt(2.0 * band.asd_g2_per_hz * band.bandwidth_hz / k)
            self._bands.append((band, offsets, phases, amplitude))

    def _add_band(self, x: np.ndarray, start: int, entry) -> None:
        band, offsets, phases, amplitude = entry
        for lo in range(0, x.size, _BLOCK):
            hi = min(x.size, lo + _BLOCK)
            t = np.arange(start + lo, start + hi, dtype=float) / self.rate_hz
            centre = band.sweep.cycles(t)
            centre -= np.floor(centre)
            drift = np.multiply.outer(t, offsets)
            drift -= np.floor(drift)
            drift += centre[:, None]
            drift += phases[None, :]
            x[lo:hi] += (np.cos(2.0 * np.pi * drift) * amplitude).sum(axis=1)

    def apply(self, x: np.ndarray, start: int) -> None:
        """Add the tones and bands to ``x`` (samples ``start ..``, g) and multiply by the schedule, in place."""
        for tone in self.parts.tones:
            x += tone_samples(tone, start, x.size, self.rate_hz)
        for entry in self._bands:
            self._add_band(x, start, entry)
        if self.parts.schedule is not None:
            apply_schedule(x, start, self.parts.schedule, self.rate_hz)


__all__ = ["MixedStage", "check_mixed_request", "mixed_rig_limit_check", "NARROW_BAND_STREAM", "narrow_band_lines", "tone_samples"]
