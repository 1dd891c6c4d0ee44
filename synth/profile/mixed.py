"""Mixed-mode parts of a profile: tones (fixed or swept), narrow bands of random, and a level schedule.

TOML sections (all optional; a profile without them is a plain random profile)::

    schedule_ramp_s = 2.0           # raised-cosine transition between steps, s (default 1 s)

    [[tones]]
    frequency = 120.0               # Hz (start frequency of a sweep)
    peak_g = 1.5                    # amplitude, g peak (or rms_g = ..., g RMS = peak / sqrt 2)
    phase_deg = 0.0                 # optional, phase at t = 0, degrees (cosine)

    [[tones]]                       # a swept tone
    frequency = 60.0
    peak_g = 0.8
    sweep_to = 240.0                # Hz: above `frequency` sweeps up, below sweeps down
    sweep_octaves_per_minute = 1.0  # logarithmic sweep ... (or sweep_hz_per_second = 2.0, linear)
    sweep_mode = "there-and-back"   # "one-way" (then holds at sweep_to) or "there-and-back" (repeated)
    [[tones.amplitude]]             # optional: amplitude along the sweep (log-log in frequency)
    frequency = 60.0
    peak_g = 0.8
    [[tones.amplitude]]
    frequency = 240.0
    peak_g = 2.0

    [[narrow_bands]]                # random of flat ASD over [centre - bw/2, centre + bw/2]
    frequency = 400.0               # centre, Hz (start centre of a sweep; sweep keys as for tones)
    bandwidth = 20.0                # Hz
    asd = 0.05                      # g^2/Hz

    [[narrow_bands]]                # or a small table of its own (linear in the offset from the centre)
    frequency = 900.0
    [[narrow_bands.breakpoints]]
    offset_hz = -15.0
    asd = 0.0
    [[narrow_bands.breakpoints]]
    offset_hz = 0.0
    asd = 0.08
    [[narrow_bands.breakpoints]]
    offset_hz = 15.0
    asd = 0.0

    [[schedule]]                    # steps in order; the drive lasts the sum of the durations
    level_db = -6.0
    duration_s = 30.0

Each step after the first begins with its transition (inside the step): the
gain goes from the previous step's level to this one's along a raised cosine
``a + (b - a) (1 - cos(pi tau / T)) / 2`` (``a``, ``b`` linear amplitude
factors ``10^(dB/20)``).  The schedule multiplies the whole drive (random,
tones and narrow bands).  Rescaling a profile (``level_db``/``grms`` of the
file or the command line) scales the random background only; tones and narrow
bands keep their stated amplitudes.

Instantaneous frequency of a sweep from ``f0`` towards ``f1`` (law per leg):
logarithmic ``f(t) = f0 2^(r t)``, ``r`` in octaves per second (sign of the
direction); linear ``f(t) = f0 + s t``, ``s`` in Hz/s.  The phase is
``2 pi`` times the integral of ``f``, in closed form, so any sample is computed
from its index alone.

References
----------
Logarithmic and linear sweep laws and their phase integrals: IEC 60068-2-6
(2007), sinusoidal vibration (sweep rate in octaves per minute); TOML v1.0.0.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from vibsynth.errors import InputError

#: Default transition between schedule steps, s (common practice, no source).
DEFAULT_SCHEDULE_RAMP_S = 1.0

TOP_KEYS = ("tones", "narrow_bands", "schedule", "schedule_ramp_s")
_SWEEP_KEYS = ("sweep_to", "sweep_octaves_per_minute", "sweep_hz_per_second", "sweep_mode")
_TONE_KEYS = ("frequency", "peak_g", "rms_g", "phase_deg", "amplitude") + _SWEEP_KEYS
_BAND_KEYS = ("frequency", "bandwidth", "asd", "breakpoints") + _SWEEP_KEYS
_STEP_KEYS = ("level_db", "duration_s")
SWEEP_MODES = ("one-way", "there-and-back")


# ------------------------------------------------------------------ sweep law
@dataclass(frozen=True)
class Sweep:
    """A frequency law: fixed, or swept from ``start_hz`` to ``end_hz`` (log or linear), once or there and back.

    Parameters
    ----------
    start_hz : float
        Frequency at t = 0, Hz.
    end_hz : float or None
        Far end of the sweep, Hz (None: a fixed frequency).
    law : {"log", "linear"}
        Logarithmic (``rate`` in octaves per minute) or linear (Hz per second).
    rate : float
        Sweep rate (> 0): octaves/min (log) or Hz/s (linear).
    mode : {"one-way", "there-and-back"}
        One-way holds at ``end_hz`` after the sweep; there-and-back returns
        to ``start_hz`` along the mirrored law and repeats.

    Examples
    --------
    >>> s = Sweep(100.0, 200.0, "log", 1.0)
    >>> round(float(s.frequency_hz(np.array([30.0]))[0]), 6)  # half an octave in 30 s
    141.421356

    References
    ----------
    IEC 60068-2-6 (2007): logarithmic sweep in octaves per minute.
    """

    start_hz: float
    end_hz: float | None = None
    law: str = "log"
    rate: float = 1.0
    mode: str = "one-way"

    @property
    def swept(self) -> bool:
        """True when the frequency changes."""
        return self.end_hz is not None and self.end_hz != self.start_hz

    @property
    def _signed_rate(self) -> float:
        """Octaves per second (log) or Hz per second (linear), signed by the direction."""
        sign = 1.0 if self.end_hz > self.start_hz else -1.0
        return sign * (self.rate / 60.0 if self.law == "log" else self.rate)

    @property
    def leg_s(self) -> float:
        """Duration of one leg (start to end), s; 0 for a fixed frequency."""
        if not self.swept:
            return 0.0
        if self.law == "log":
            return abs(math.log2(self.end_hz / self.start_hz)) / (self.rate / 60.0)
        return abs(self.end_hz - self.start_hz) / self.rate

    def _leg_frequency(self, tau):
        r = self._signed_rate
        if self.law == "log":
            return self.start_hz * np.exp2(r * tau)
        return self.start_hz + r * tau

    def _leg_cycles(self, tau):
        """Cycles (phase / 2 pi) accumulated from 0 to tau on the up leg (closed form)."""
        r = self._signed_rate
        if self.law == "log":
            k = r * math.log(2.0)
            return self.start_hz * np.expm1(k * tau) / k
        return self.start_hz * tau + 0.5 * r * tau * tau

    def _fold(self, t):
        """(leg time, cycles before it, sign) for times t; the leg time lies in [0, leg_s]."""
        leg = self.leg_s
        leg_cycles = float(self._leg_cycles(leg))
        if self.mode == "one-way":
            return np.minimum(t, leg), None, leg, leg_cycles
        period = 2.0 * leg
        k = np.floor(t / period)
        tau = t - k * period
        return tau, k, leg, leg_cycles

    def frequency_hz(self, t_s) -> np.ndarray:
        """Instantaneous frequency at times ``t_s`` (s), Hz."""
        t = np.asarray(t_s, dtype=float)
        if not self.swept:
            return np.full(t.shape, float(self.start_hz))
        tau, k, leg, _ = self._fold(t)
        if k is None:
            return self._leg_frequency(tau)
        return self._leg_frequency(np.where(tau <= leg, tau, 2.0 * leg - tau))

    def cycles(self, t_s) -> np.ndarray:
        """Phase / (2 pi) at times ``t_s`` (s): the integral of the instantaneous frequency from 0, cycles.

        Fixed frequency: ``f t``.  Returned as cycles so callers can reduce
        modulo 1 before multiplying by ``2 pi``.
        """
        t = np.asarray(t_s, dtype=float)
        if not self.swept:
            return float(self.start_hz) * t
        tau, k, leg, leg_cycles = self._fold(t)
        if k is None:
            return self._leg_cycles(tau) + np.where(t > leg, float(self.end_hz) * (t - leg), 0.0)
        back = 2.0 * leg_cycles - self._leg_cycles(np.maximum(2.0 * leg - tau, 0.0))
        return k * 2.0 * leg_cycles + np.where(tau <= leg, self._leg_cycles(np.minimum(tau, leg)), back)

    def range_hz(self) -> tuple[float, float]:
        """Lowest and highest frequency the law visits, Hz."""
        if not self.swept:
            return float(self.start_hz), float(self.start_hz)
        return float(min(self.start_hz, self.end_hz)), float(max(self.start_hz, self.end_hz))

    def to_dict(self) -> dict:
        """Plain data (sidecar)."""
        if not self.swept:
            return {"frequency_hz": float(self.start_hz)}
        key = "rate_octaves_per_minute" if self.law == "log" else "rate_hz_per_s"
        return {"frequency_hz": float(self.start_hz), "sweep_to_hz": float(self.end_hz), "law": self.law,
                key: float(self.rate), "mode": self.mode}

    @classmethod
    def from_dict(cls, data: dict) -> "Sweep":
        """Inverse of :meth:`to_dict`."""
        if "sweep_to_hz" not in data:
            return cls(float(data["frequency_hz"]))
        law = data["law"]
        rate = data["rate_octaves_per_minute"] if law == "log" else data["rate_hz_per_s"]
        return cls(float(data["frequency_hz"]), float(data["sweep_to_hz"]), law, float(rate), data["mode"])


# ----------------------------------------------------------------------- parts
@dataclass(frozen=True)
class Tone:
    """A sine tone: ``A(f(t)) cos(2 pi cycles(t) + phase)``.

    Parameters
    ----------
    sweep : Sweep
        The frequency law (fixed or swept).
    peak_g : float
        Amplitude, g peak (at the start frequency when ``amplitude_points`` is given).
    phase_deg : float
        Phase at t = 0, degrees.
    amplitude_points : tuple of (frequency_hz, peak_g)
        Optional amplitude along a sweep, interpolated log-log in frequency
        (held constant outside the points).

    Examples
    --------
    >>> round(Tone(Sweep(50.0), 2.0).rms_g, 6)
    1.414214

    References
    ----------
    Sine RMS = peak / sqrt(2).
    """

    sweep: Sweep
    peak_g: float
    phase_deg: float = 0.0
    amplitude_points: tuple = ()

    @property
    def frequency_hz(self) -> float:
        """Start (or fixed) frequency, Hz."""
        return float(self.sweep.start_hz)

    @property
    def max_peak_g(self) -> float:
        """Largest amplitude along the law, g."""
        if not self.amplitude_points:
            return float(self.peak_g)
        lo, hi = self.sweep.range_hz()
        f = np.geomspace(lo, hi, 512) if hi > lo else np.array([lo])
        return float(np.max(self.amplitude_g(f)))

    @property
    def rms_g(self) -> float:
        """RMS of the tone (fixed amplitude: peak / sqrt 2; along a sweep: from its time-average), g."""
        if not self.amplitude_points or not self.sweep.swept:
            return float(self.peak_g) / math.sqrt(2.0)
        leg = self.sweep.leg_s
        t = np.linspace(0.0, leg, 2049)
        a = self.amplitude_g(self.sweep.frequency_hz(t))
        return float(math.sqrt(np.mean(a * a) / 2.0))

    def amplitude_g(self, frequency_hz) -> np.ndarray:
        """Amplitude (g peak) at instantaneous frequencies ``frequency_hz`` (Hz)."""
        f = np.asarray(frequency_hz, dtype=float)
        if not self.amplitude_points:
            return np.full(f.shape, float(self.peak_g))
        points = np.array(self.amplitude_points, dtype=float)
        return np.exp(np.interp(np.log(f), np.log(points[:, 0]), np.log(points[:, 1])))

    def to_dict(self) -> dict:
        """Plain data (sidecar)."""
        out = {**self.sweep.to_dict(), "peak_g": float(self.peak_g), "rms_g": self.rms_g,
               "phase_deg": float(self.phase_deg)}
        if self.amplitude_points:
            out["amplitude"] = [{"frequency_hz": float(f), "peak_g": float(a)} for f, a in self.amplitude_points]
        return out

    @classmethod
    def from_dict(cls, data: dict) -> "Tone":
        """Inverse of :meth:`to_dict`."""
        points = tuple((float(p["frequency_hz"]), float(p["peak_g"])) for p in data.get("amplitude", ()))
        return cls(Sweep.from_dict(data), float(data["peak_g"]), float(data.get("phase_deg", 0.0)), points)


@dataclass(frozen=True)
class NarrowBand:
    """Random over a band that moves with a (possibly swept) centre frequency.

    Parameters
    ----------
    sweep : Sweep
        The centre frequency law, Hz.
    bandwidth_hz : float
        Width of the band, Hz (with ``shape``: its span).
    asd_g2_per_hz : float
        Flat ASD over ``centre +/- bandwidth / 2``, g^2/Hz (with ``shape``: its largest value).
    shape : tuple of (offset_hz, asd_g2_per_hz)
        Optional breakpoint table of the band's own ASD against the offset
        from the centre (Hz, increasing; negative below the centre),
        interpolated linearly in the offset (the table moves with the centre,
        so it keeps its shape along a sweep).  Its mean square is then the
        trapezoid area, exact for linear interpolation.

    Examples
    --------
    >>> round(NarrowBand(Sweep(400.0), 20.0, 0.05).rms_g, 6)
    1.0
    >>> round(NarrowBand(Sweep(400.0), 20.0, 0.1, ((-10.0, 0.0), (0.0, 0.1), (10.0, 0.0))).rms_g, 6)
    1.0

    References
    ----------
    Mean square = integral of the one-sided ASD over the band (Bendat & Piersol 2010).
    """

    sweep: Sweep
    bandwidth_hz: float
    asd_g2_per_hz: float
    shape: tuple = ()

    @property
    def frequency_hz(self) -> float:
        """Start (or fixed) centre frequency, Hz."""
        return float(self.sweep.start_hz)

    @property
    def offsets_hz(self) -> tuple[float, float]:
        """Lowest and highest offset from the centre, Hz."""
        if self.shape:
            return float(self.shape[0][0]), float(self.shape[-1][0])
        return -self.bandwidth_hz / 2.0, self.bandwidth_hz / 2.0

    def asd_at_offset(self, offset_hz) -> np.ndarray:
        """The band's ASD at offsets from the centre (Hz), g^2/Hz (0 outside the band)."""
        d = np.asarray(offset_hz, dtype=float)
        lo, hi = self.offsets_hz
        if not self.shape:
            return np.where((d >= lo) & (d <= hi), self.asd_g2_per_hz, 0.0)
        points = np.array(self.shape, dtype=float)
        return np.interp(d, points[:, 0], points[:, 1], left=0.0, right=0.0)

    def frequency_range_hz(self) -> tuple[float, float]:
        """Lowest and highest frequency the band reaches along its law, Hz."""
        lo, hi = self.sweep.range_hz()
        d_lo, d_hi = self.offsets_hz
        return lo + d_lo, hi + d_hi

    @property
    def rms_g(self) -> float:
        """RMS, g: sqrt(ASD x bandwidth), or the square root of the table's (trapezoid, exact) area."""
        if not self.shape:
            return math.sqrt(self.asd_g2_per_hz * self.bandwidth_hz)
        points = np.array(self.shape, dtype=float)
        area = float(np.sum(np.diff(points[:, 0]) * (points[1:, 1] + points[:-1, 1]) / 2.0))
        return math.sqrt(area)

    def to_dict(self) -> dict:
        """Plain data (sidecar)."""
        out = {**self.sweep.to_dict(), "bandwidth_hz": float(self.bandwidth_hz),
               "asd_g2_per_hz": float(self.asd_g2_per_hz), "rms_g": self.rms_g}
        if self.shape:
            out["breakpoints"] = [{"offset_hz": float(d), "asd_g2_per_hz": float(a)} for d, a in self.shape]
        return out

    @classmethod
    def from_dict(cls, data: dict) -> "NarrowBand":
        """Inverse of :meth:`to_dict`."""
        shape = tuple((float(p["offset_hz"]), float(p["asd_g2_per_hz"])) for p in data.get("breakpoints", ()))
        return cls(Sweep.from_dict(data), float(data["bandwidth_hz"]), float(data["asd_g2_per_hz"]), shape)


@dataclass(frozen=True)
class Schedule:
    """Level steps ``(level_db, duration_s)`` with raised-cosine transitions of ``ramp_s`` inside each later step.

    Examples
    --------
    >>> s = Schedule(((-6.0, 10.0), (0.0, 10.0)), ramp_s=2.0)
    >>> s.duration_s, [round(float(g), 4) for g in s.gain(np.array([0.0, 10.0, 11.0, 12.0]))]
    (20.0, [0.5012, 0.5012, 0.7506, 1.0])

    References
    ----------
    Raised-cosine (Hann) transition: Harris, F. J., "On the use of windows for
    harmonic analysis with the discrete Fourier transform", Proc. IEEE 66(1), 1978.
    """

    steps: tuple
    ramp_s: float = DEFAULT_SCHEDULE_RAMP_S

    @property
    def duration_s(self) -> float:
        """Sum of the step durations, s."""
        return float(sum(d for _, d in self.steps))

    @property
    def starts_s(self) -> np.ndarray:
        """Start time of each step, s."""
        return np.concatenate([[0.0], np.cumsum([d for _, d in self.steps])[:-1]])

    @property
    def factors(self) -> np.ndarray:
        """Linear amplitude factor of each step, 10^(level_db / 20)."""
        return 10.0 ** (np.array([level for level, _ in self.steps], dtype=float) / 20.0)

    def gain(self, t_s) -> np.ndarray:
        """Amplitude factor at times ``t_s`` (s); the last step's level holds beyond the end."""
        t = np.asarray(t_s, dtype=float)
        starts, factors = self.starts_s, self.factors
        index = np.clip(np.searchsorted(starts, t, side="right") - 1, 0, len(starts) - 1)
        out = factors[index]
        if self.ramp_s > 0 and len(starts) > 1:
            tau = t - starts[index]
            inside = (index > 0) & (tau < self.ramp_s)
            if np.any(inside):
                a = factors[np.maximum(index - 1, 0)]
                u = 0.5 * (1.0 - np.cos(np.pi * np.clip(tau, 0.0, self.ramp_s) / self.ramp_s))
                out = np.where(inside, a + (out - a) * u, out)
        return out

    def plateaus_s(self) -> list[tuple[float, float]]:
        """(start, stop) of each step without its transition, s."""
        out = []
        for k, (start, (_, duration)) in enumerate(zip(self.starts_s, self.steps)):
            lead = self.ramp_s if k > 0 else 0.0
            out.append((float(start + lead), float(start + duration)))
        return out

    def to_dict(self) -> dict:
        """Plain data (sidecar)."""
        return {"ramp_s": float(self.ramp_s),
                "steps": [{"level_db": float(level), "duration_s": float(d)} for level, d in self.steps]}

    @classmethod
    def from_dict(cls, data: dict) -> "Schedule":
        """Inverse of :meth:`to_dict`."""
        return cls(tuple((float(s["level_db"]), float(s["duration_s"])) for s in data["steps"]), float(data["ramp_s"]))


@dataclass(frozen=True)
class MixedParts:
    """The mixed-mode parts of a profile (any may be empty).

    Examples
    --------
    >>> parts = MixedParts(tones=(Tone(Sweep(100.0), 1.0), Tone(Sweep(300.0), 2.0)))
    >>> round(parts.total_rms_g(1.0), 4), parts.peak_sum_g
    (1.8708, 3.0)

    References
    ----------
    Mean squares of independent parts add; sine RMS = peak / sqrt(2).
    """

    tones: tuple = ()
    narrow_bands: tuple = ()
    schedule: Schedule | None = None

    @property
    def empty(self) -> bool:
        """True when there is nothing beyond the random background."""
        return not self.tones and not self.narrow_bands and self.schedule is None

    @property
    def additive(self) -> bool:
        """True when tones or narrow bands are added to the random stream."""
        return bool(self.tones or self.narrow_bands)

    @property
    def peak_sum_g(self) -> float:
        """Sum of the tones' largest amplitudes, g (their peaks can coincide)."""
        return float(sum(t.max_peak_g for t in self.tones))

    def total_rms_g(self, random_rms_g: float) -> float:
        """RMS of the sum at 0 dB, g: sqrt(random^2 + sum tone^2 + sum band^2)."""
        ms = random_rms_g**2 + sum(t.rms_g**2 for t in self.tones) + sum(b.rms_g**2 for b in self.narrow_bands)
        return math.sqrt(ms)

    def rig_demands(self, profile) -> tuple[float, float]:
        """Peak-to-peak displacement (m) and peak velocity (m/s) the whole drive may need.

        Tones add their peaks (``A g0 / (2 pi f)`` and ``A g0 / (2 pi f)^2`` at
        the lowest frequency of a sweep, the largest amplitude); the random
        parts (broadband, and each narrow band at its lowest centre) add in
        quadrature at 3 sigma; the loudest schedule step scales the sum.

        Examples
        --------
        >>> from vibsynth.profile.asd import AsdProfile
        >>> p = AsdProfile([20, 2000], [1e-12, 1e-12])
        >>> stroke, velocity = MixedParts(tones=(Tone(Sweep(10.0), 1.0),)).rig_demands(p)
        >>> round(stroke * 1e3, 3), round(velocity, 4)  # 2 x 9.80665 / (2 pi 10)^2 m; 9.80665 / (2 pi 10) m/s
        (4.968, 0.1561)

        References
        ----------
        Sine displacement and velocity from acceleration, A/(2 pi f)^2 and
        A/(2 pi f); random parts: Bendat & Piersol (2010), 3 sigma common practice (no source).
        """
        g0 = 9.80665  # standard gravity, m/s^2 (CGPM 1901)
        disp_ms = profile.displacement_rms_m**2
        vel_ms = profile.velocity_rms_m_s**2
        for band in self.narrow_bands:
            omega = 2.0 * math.pi * max(band.frequency_range_hz()[0], 1e-9)  # its lowest frequency: the most stroke
            vel_ms += (band.rms_g * g0 / omega) ** 2
            disp_ms += (band.rms_g * g0 / omega**2) ** 2
        stroke = 6.0 * math.sqrt(disp_ms)
        velocity = 3.0 * math.sqrt(vel_ms)
        for tone in self.tones:
            omega = 2.0 * math.pi * tone.sweep.range_hz()[0]
            stroke += 2.0 * tone.max_peak_g * g0 / omega**2
            velocity += tone.max_peak_g * g0 / omega
        top = float(np.max(self.schedule.factors)) if self.schedule is not None else 1.0
        return stroke * top, velocity * top

    def summary(self, random_grms_g: float, profile=None) -> dict:
        """Each part's RMS, the total and the peak, as plain data (``vibsynth info --json`` key ``mixed``).

        ``peak_g`` is the sum of the tones' largest amplitudes plus three
        standard deviations of the random parts (broadband and narrow bands,
        Gaussian): tones add their peaks, as their crests can coincide.
        With ``profile`` (the random background), also
        ``displacement_peak_to_peak_m`` and ``velocity_peak_m_s`` from
        :meth:`rig_demands`.  Units: g, Hz, s, dB, m, m/s (in the key names).
        """
        random_ms = random_grms_g**2 + sum(b.rms_g**2 for b in self.narrow_bands)
        parts = [{"part": "random", "rms_g": random_grms_g}]
        for k, tone in enumerate(self.tones):
            row = {"part": f"tone {k + 1}", **tone.to_dict(), "peak_g": tone.max_peak_g}
            parts.append(row)
        for k, band in enumerate(self.narrow_bands):
            parts.append({"part": f"narrow band {k + 1}", **band.to_dict()})
        total = self.total_rms_g(random_grms_g)
        out = {"parts": parts, "total_rms_g": total, "peak_g": self.peak_sum_g + 3.0 * math.sqrt(random_ms),
               "tone_peak_sum_g": self.peak_sum_g, "schedule": None}
        if profile is not None:
            stroke, velocity = self.rig_demands(profile)
            out["displacement_peak_to_peak_m"] = stroke
            out["velocity_peak_m_s"] = velocity
        if self.schedule is not None:
            out["schedule"] = {**self.schedule.to_dict(), "duration_s": self.schedule.duration_s,
                               "step_rms_g": [total * f for f in self.schedule.factors.tolist()]}
        return out

    def to_dict(self) -> dict:
        """Plain data (the sidecar's ``profile.mixed`` block)."""
        return {"tones": [t.to_dict() for t in self.tones],
                "narrow_bands": [b.to_dict() for b in self.narrow_bands],
                "schedule": None if self.schedule is None else self.schedule.to_dict()}

    @classmethod
    def from_dict(cls, data: dict, where: str = "sidecar") -> "MixedParts":
        """Inverse of :meth:`to_dict`; a malformed block raises :class:`InputError`."""
        try:
            return cls(tuple(Tone.from_dict(t) for t in data.get("tones") or ()),
                       tuple(NarrowBand.from_dict(b) for b in data.get("narrow_bands") or ()),
                       None if data.get("schedule") is None else Schedule.from_dict(data["schedule"]))
        except (KeyError, TypeError, ValueError, AttributeError):
            raise InputError("profile.mixed is malformed; expected tones, narrow_bands and schedule as written "
                             "by vibsynth", where, "profile.mixed") from None


# --------------------------------------------------------------------- parsing
def _number(value, source, location, what, positive=False) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"{what} must be a number, got {value!r}", source, location)
    number = float(value)
    if not math.isfinite(number):
        raise InputError(f"{what} must be a finite number, got {value!r}", source, location)
    if positive and number <= 0:
        raise InputError(f"{what} must be > 0, got {value!r}", source, location)
    return number


def _tables(data, key, source) -> list:
    items = data.get(key, [])
    if not isinstance(items, list) or not all(isinstance(p, dict) for p in items):
        raise InputError(f"'{key}' must be an array of tables ([[{key}]])", source, key)
    return items


def _check_keys(table, allowed, source, location):
    from vibsynth.profile.files import _suggest

    for key in table:
        if key not in allowed:
            raise InputError(f"unknown key '{key}'; {_suggest(key, allowed)}", source, location)


def _sweep(table, source, location) -> Sweep:
    if "frequency" not in table:
        raise InputError("missing 'frequency' (Hz)", source, location)
    start = _number(table["frequency"], source, location + ".frequency", "frequency (Hz)", positive=True)
    keys = [k for k in _SWEEP_KEYS if k in table]
    if not keys:
        return Sweep(start)
    if "sweep_to" not in table:
        raise InputError(f"'{keys[0]}' needs 'sweep_to' (Hz, the far end of the sweep)", source, location)
    end = _number(table["sweep_to"], source, location + ".sweep_to", "sweep_to (Hz)", positive=True)
    rates = [k for k in ("sweep_octaves_per_minute", "sweep_hz_per_second") if k in table]
    if len(rates) != 1:
        raise InputError("give exactly one of 'sweep_octaves_per_minute' (logarithmic) or 'sweep_hz_per_second' "
                         "(linear)", source, location)
    rate = _number(table[rates[0]], source, f"{location}.{rates[0]}", rates[0], positive=True)
    mode = table.get("sweep_mode", "one-way")
    if mode not in SWEEP_MODES:
        raise InputError(f"sweep_mode {mode!r} is not one of {', '.join(SWEEP_MODES)}", source,
                         location + ".sweep_mode")
    if end == start:
        raise InputError(f"sweep_to {end:g} Hz equals the start frequency; drop the sweep keys for a fixed "
                         "frequency", source, location + ".sweep_to")
    law = "log" if rates[0] == "sweep_octaves_per_minute" else "linear"
    return Sweep(start, end, law, rate, mode)


def parse_mixed(data: dict, source: str = "<toml>") -> MixedParts | None:
    """The mixed-mode sections of a parsed TOML profile (None when it has none).

    Parameters
    ----------
    data : dict
        The TOML document as :func:`tomllib.loads` returns it.
    source : str
        File name for error messages.

    Returns
    -------
    MixedParts or None

    Raises
    ------
    InputError
        A malformed section, naming the table and key.

    Examples
    --------
    >>> parts = parse_mixed({"tones": [{"frequency": 50.0, "peak_g": 1.0}],
    ...                      "schedule": [{"level_db": -6.0, "duration_s": 5.0}, {"level_db": 0.0, "duration_s": 5.0}]})
    >>> parts.tones[0].frequency_hz, parts.schedule.duration_s
    (50.0, 10.0)

    References
    ----------
    TOML v1.0.0 (arrays of tables); see the module docstring for the keys.
    """
    if not any(key in data for key in TOP_KEYS):
        return None
    tones = []
    for index, table in enumerate(_tables(data, "tones", source)):
        location = f"tones[{index + 1}]"
        _check_keys(table, _TONE_KEYS, source, location)
        sweep = _sweep(table, source, location)
        given = [k for k in ("peak_g", "rms_g") if k in table]
        points = ()
        if "amplitude" in table:
            rows = table["amplitude"]
            if not isinstance(rows, list) or not all(isinstance(r, dict) for r in rows) or len(rows) < 2:
                raise InputError("'amplitude' must be at least two tables ([[tones.amplitude]]) of frequency and "
                                 "peak_g", source, location + ".amplitude")
            pts = []
            for k, row in enumerate(rows):
                where = f"{location}.amplitude[{k + 1}]"
                _check_keys(row, ("frequency", "peak_g"), source, where)
                if "frequency" not in row or "peak_g" not in row:
                    raise InputError("each amplitude point needs 'frequency' (Hz) and 'peak_g' (g)", source, where)
                pts.append((_number(row["frequency"], source, where + ".frequency", "frequency (Hz)", True),
                            _number(row["peak_g"], source, where + ".peak_g", "peak_g (g)", True)))
                if k and pts[-1][0] <= pts[-2][0]:
                    raise InputError("amplitude frequencies must be strictly increasing", source, where)
            points = tuple(pts)
        if len(given) > 1:
            raise InputError("give 'peak_g' or 'rms_g', not both", source, location)
        if given:
            value = _number(table[given[0]], source, f"{location}.{given[0]}", given[0] + " (g)", positive=True)
            peak = value if given[0] == "peak_g" else value * math.sqrt(2.0)
        elif points:
            peak = float(np.exp(np.interp(math.log(sweep.start_hz), np.log([p[0] for p in points]),
                                          np.log([p[1] for p in points]))))
        else:
            raise InputError("missing 'peak_g' (g peak) or 'rms_g' (g RMS)", source, location)
        phase = _number(table.get("phase_deg", 0.0), source, location + ".phase_deg", "phase_deg (degrees)")
        tones.append(Tone(sweep, peak, phase, points))
    bands = []
    for index, table in enumerate(_tables(data, "narrow_bands", source)):
        location = f"narrow_bands[{index + 1}]"
        _check_keys(table, _BAND_KEYS, source, location)
        sweep = _sweep(table, source, location)
        shape = ()
        if "breakpoints" in table:
            if "bandwidth" in table or "asd" in table:
                raise InputError("give 'bandwidth' and 'asd' (a flat band) or [[narrow_bands.breakpoints]] (a table "
                                 "of offset_hz and asd), not both", source, location)
            rows = table["breakpoints"]
            if not isinstance(rows, list) or not all(isinstance(r, dict) for r in rows) or len(rows) < 2:
                raise InputError("'breakpoints' must be at least two tables ([[narrow_bands.breakpoints]]) of "
                                 "offset_hz and asd", source, location + ".breakpoints")
            pts = []
            for k, row in enumerate(rows):
                where = f"{location}.breakpoints[{k + 1}]"
                _check_keys(row, ("offset_hz", "asd"), source, where)
                if "offset_hz" not in row or "asd" not in row:
                    raise InputError("each breakpoint needs 'offset_hz' (Hz from the centre) and 'asd' (g^2/Hz)",
                                     source, where)
                pts.append((_number(row["offset_hz"], source, where + ".offset_hz", "offset_hz (Hz)"),
                            _number(row["asd"], source, where + ".asd", "asd (g^2/Hz)")))
                if pts[-1][1] < 0:
                    raise InputError(f"asd {pts[-1][1]:g} must be >= 0 g^2/Hz", source, where + ".asd")
                if k and pts[-1][0] <= pts[-2][0]:
                    raise InputError("offsets must be strictly increasing", source, where + ".offset_hz")
            shape = tuple(pts)
            width = shape[-1][0] - shape[0][0]
            asd = max(a for _, a in shape)
            if asd <= 0:
                raise InputError("the band's ASD is zero everywhere; give a positive 'asd' somewhere", source,
                                 location + ".breakpoints")
            if sweep.range_hz()[0] + shape[0][0] <= 0:
                raise InputError(f"the lowest offset {shape[0][0]:g} Hz reaches below 0 Hz from the centre "
                                 f"{sweep.range_hz()[0]:g} Hz", source, location + ".breakpoints")
        else:
            for key in ("bandwidth", "asd"):
                if key not in table:
                    raise InputError(f"missing '{key}' ({'Hz' if key == 'bandwidth' else 'g^2/Hz'}), or give "
                                     "[[narrow_bands.breakpoints]]", source, location)
            width = _number(table["bandwidth"], source, location + ".bandwidth", "bandwidth (Hz)", positive=True)
            asd = _number(table["asd"], source, location + ".asd", "asd (g^2/Hz)", positive=True)
            if width >= 2.0 * sweep.range_hz()[0]:
                raise InputError(f"bandwidth {width:g} Hz must be below twice the lowest centre frequency "
                                 f"({2 * sweep.range_hz()[0]:g} Hz)", source, location + ".bandwidth")
        bands.append(NarrowBand(sweep, width, asd, shape))
    schedule = None
    steps = _tables(data, "schedule", source)
    if "schedule_ramp_s" in data and not steps:
        raise InputError("'schedule_ramp_s' needs [[schedule]] steps", source, "schedule_ramp_s")
    if steps:
        ramp = _number(data.get("schedule_ramp_s", DEFAULT_SCHEDULE_RAMP_S), source, "schedule_ramp_s",
                       "schedule_ramp_s (s)")
        if ramp < 0:
            raise InputError(f"schedule_ramp_s must be >= 0 s, got {ramp:g}", source, "schedule_ramp_s")
        parsed = []
        for index, table in enumerate(steps):
            location = f"schedule[{index + 1}]"
            _check_keys(table, _STEP_KEYS, source, location)
            for key in _STEP_KEYS:
                if key not in table:
                    raise InputError(f"missing '{key}' ({'dB' if key == 'level_db' else 's'})", source, location)
            level = _number(table["level_db"], source, location + ".level_db", "level_db (dB)")
            if not -60.0 <= level <= 20.0:
                raise InputError(f"level_db {level:g} dB must lie between -60 and +20 dB", source,
                                 location + ".level_db")
            duration = _number(table["duration_s"], source, location + ".duration_s", "duration_s (s)", True)
            if index and duration <= ramp:
                raise InputError(f"duration_s {duration:g} s must exceed schedule_ramp_s ({ramp:g} s): the "
                                 "transition lies inside the step it leads into", source, location + ".duration_s")
            parsed.append((level, duration))
        schedule = Schedule(tuple(parsed), ramp)
    return MixedParts(tuple(tones), tuple(bands), schedule)


def format_mixed_toml(parts: MixedParts | None) -> str:
    """The mixed-mode sections as TOML text (empty for None), readable by :func:`parse_mixed`.

    Examples
    --------
    >>> print(format_mixed_toml(MixedParts(tones=(Tone(Sweep(50.0), 1.0),))).strip())
    [[tones]]
    frequency = 50.0
    peak_g = 1.0
    phase_deg = 0.0

    References
    ----------
    TOML v1.0.0.
    """
    if parts is None:
        return ""
    lines = []

    def sweep_lines(sweep):
        out = [f"frequency = {float(sweep.start_hz)!r}"]
        if sweep.swept:
            key = "sweep_octaves_per_minute" if sweep.law == "log" else "sweep_hz_per_second"
            out += [f"sweep_to = {float(sweep.end_hz)!r}", f"{key} = {float(sweep.rate)!r}",
                    f'sweep_mode = "{sweep.mode}"']
        return out

    for tone in parts.tones:
        lines += ["", "[[tones]]", *sweep_lines(tone.sweep), f"peak_g = {float(tone.peak_g)!r}",
                  f"phase_deg = {float(tone.phase_deg)!r}"]
        for f, a in tone.amplitude_points:
            lines += ["[[tones.amplitude]]", f"frequency = {float(f)!r}", f"peak_g = {float(a)!r}"]
    for band in parts.narrow_bands:
        lines += ["", "[[narrow_bands]]", *sweep_lines(band.sweep)]
        if band.shape:
            for d, a in band.shape:
                lines += ["[[narrow_bands.breakpoints]]", f"offset_hz = {float(d)!r}", f"asd = {float(a)!r}"]
        else:
            lines += [f"bandwidth = {float(band.bandwidth_hz)!r}", f"asd = {float(band.asd_g2_per_hz)!r}"]
    if parts.schedule is not None:
        for level, duration in parts.schedule.steps:
            lines += ["", "[[schedule]]", f"level_db = {float(level)!r}", f"duration_s = {float(duration)!r}"]
    return "\n".join(lines) + "\n"


def check_mixed_rate(parts: MixedParts | None, rate_hz: float, source: str = "profile") -> None:
    """Refuse tones or narrow bands that reach the Nyquist frequency ``rate_hz / 2``.

    Examples
    --------
    >>> check_mixed_rate(MixedParts(tones=(Tone(Sweep(100.0), 1.0),)), 1000.0)

    References
    ----------
    Nyquist-Shannon sampling theorem.
    """
    if parts is None:
        return
    for kind, items in (("tones", parts.tones), ("narrow_bands", parts.narrow_bands)):
        for index, item in enumerate(items):
            top = item.frequency_range_hz()[1] if kind == "narrow_bands" else item.sweep.range_hz()[1]
            if top >= rate_hz / 2:
                raise InputError(f"reaches {top:g} Hz, at or above half the sample rate ({rate_hz / 2:g} Hz); "
                                 f"use a rate above {2 * top:g} Hz", source, f"{kind}[{index + 1}]")


__all__ = ["DEFAULT_SCHEDULE_RAMP_S", "MixedParts", "NarrowBand", "Schedule", "Sweep", "Tone", "check_mixed_rate",
           "format_mixed_toml", "parse_mixed"]
