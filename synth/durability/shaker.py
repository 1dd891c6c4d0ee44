"""Does a test fit the shaker?  Demands of a profile (and of a drive) against a rig's ratings.

Demands, each with its margin ``100 (1 - demand / rating)`` percent (negative
when the demand exceeds the rating):

- displacement peak-to-peak: ``6 sigma_d`` from the profile (the +/-3 sigma
  stroke, common practice, no source), and with a drive the actual
  peak-to-peak of the table displacement obtained by integrating the drive
  twice in the frequency domain, block by block (nothing kept below half the
  profile's lowest frequency, as a controller's drift removal would);
- velocity peak: ``3 sigma_v`` (profile) or the drive's actual largest |v|;
- acceleration peak: ``3 sigma_a`` in g (profile) or the drive's largest |a|;
- RMS force: ``(moving mass + payload) x g RMS x g0`` in N, against the rated
  random force.

The force assumes a rigid payload moving with the armature: a payload with
resonances in the band can demand much more force (apparent mass at its
resonances), and the ratings are the manufacturer's for a given
configuration (cooling, suspension, amplifier).

References
----------
Newton's second law (force = mass x acceleration) with the RMS of the
acceleration; Bendat & Piersol, "Random Data" (2010), integration of a
random acceleration in the frequency domain (velocity and displacement ASD).
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from vibsynth.errors import InputError
from vibsynth.profile.asd import STANDARD_GRAVITY_M_S2, AsdProfile

__all__ = ["ShakerRating", "Demand", "FitResult", "read_shaker", "shaker_fit", "drive_motion_peaks",
           "FIT_CAUTION"]

#: Said with every fit result.
FIT_CAUTION = (
    "The force assumes a rigid payload moving with the armature: a payload or fixture with resonances in the band "
    "can demand much more force, and every figure assumes linear behaviour of payload, fixture and shaker. "
    "Ratings are the manufacturer's for a given configuration (cooling, suspension, "
    "amplifier); the peak figures of a profile are 3-sigma estimates that a real drive exceeds from time to time. "
    "Check them with the controller's own limits and abort levels before any run, under your lab's procedures."
)

_KEYS = {
    "rated_force_rms_n": "N",
    "stroke_pk_pk_mm": "mm",
    "velocity_peak_m_s": "m/s",
    "acceleration_peak_g": "g",
    "moving_mass_kg": "kg",
}


@dataclass(frozen=True)
class ShakerRating:
    """A shaker's ratings (the RIG.toml file).

    Attributes
    ----------
    rated_force_rms_n : float
        Rated random (RMS) force, N.
    stroke_pk_pk_mm : float
        Usable stroke, peak-to-peak, mm.
    velocity_peak_m_s : float
        Rated peak velocity, m/s.
    acceleration_peak_g : float
        Rated peak acceleration, g.
    moving_mass_kg : float
        Armature plus fixture (everything that moves except the payload), kg.
    name : str
        Label.
    """

    rated_force_rms_n: float
    stroke_pk_pk_mm: float
    velocity_peak_m_s: float
    acceleration_peak_g: float
    moving_mass_kg: float
    name: str = "shaker"


def read_shaker(path) -> ShakerRating:
    """Read a rig's ratings from a TOML file.

    Parameters
    ----------
    path : str or os.PathLike
        TOML with the keys ``rated_force_rms_n``, ``stroke_pk_pk_mm``,
        ``velocity_peak_m_s``, ``acceleration_peak_g``, ``moving_mass_kg``
        (numbers > 0; ``moving_mass_kg`` >= 0) and an optional ``name``.

    Returns
    -------
    ShakerRating

    Raises
    ------
    InputError
        Missing file or key, unknown key, a value that is not a positive number.

    Examples
    --------
    >>> import tempfile, os
    >>> text = ('rated_force_rms_n = 8000\\nstroke_pk_pk_mm = 51\\nvelocity_peak_m_s = 1.8\\n'
    ...         'acceleration_peak_g = 60\\nmoving_mass_kg = 12\\n')
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     path = os.path.join(folder, "rig.toml")
    ...     _ = open(path, "w").write(text)
    ...     read_shaker(path).rated_force_rms_n
    8000.0

    References
    ----------
    TOML v1.0.0 (Python's tomllib).
    """
    where = str(path)
    try:
        data = tomllib.loads(Path(path).read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError("no such shaker file", where) from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as error:
        raise InputError(f"not valid TOML: {error}", where) from None
    unknown = sorted(set(data) - set(_KEYS) - {"name", "description"})
    if unknown:
        raise InputError(f"unknown key {unknown[0]!r}; the keys are {', '.join(_KEYS)} (and name)", where, unknown[0])
    values = {}
    for key, unit in _KEYS.items():
        if key not in data:
            raise InputError(f"missing; give the {key.replace('_', ' ')} in {unit}", where, key)
        value = data[key]
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) \
                or value < 0 or (value == 0 and key != "moving_mass_kg"):
            raise InputError(f"{value!r} must be a number > 0 ({unit})", where, key)
        values[key] = float(value)
    return ShakerRating(**values, name=str(data.get("name", Path(path).stem)))


@dataclass(frozen=True)
class Demand:
    """One demand against its rating.

    Attributes
    ----------
    quantity : str
        ``displacement_pk_pk``, ``velocity_peak``, ``acceleration_peak`` or ``force_rms``.
    basis : str
        How it was obtained (``profile 3 sigma``, ``drive actual``, ...).
    demand, rating : float
        Values in ``unit``.
    unit : str
        ``mm``, ``m/s``, ``g`` or ``N``.
    """

    quantity: str
    basis: str
    demand: float
    rating: float
    unit: str

    @property
    def margin_percent(self) -> float:
        """``100 (1 - demand / rating)``: share of the rating left over (negative: over the rating)."""
        return 100.0 * (1.0 - self.demand / self.rating)

    @property
    def fits(self) -> bool:
        """True when the demand is within the rating."""
        return self.demand <= self.rating

    def to_dict(self) -> dict:
        """Plain data."""
        return {"quantity": self.quantity, "basis": self.basis, "demand": self.demand, "rating": self.rating,
                "unit": self.unit, "margin_percent": self.margin_percent, "fits": self.fits}


@dataclass(frozen=True)
class FitResult:
    """All demands of a test on a shaker (see :func:`shaker_fit`).

    Attributes
    ----------
    demands : tuple of Demand
    force_rms_n : float
        ``(moving mass + payload) x g RMS x g0``, N.
    payload_kg : float
        Payload mass, kg.
    notes : tuple of str
        Remarks (e.g. a drive's actual stroke above the 3-sigma figure).
    """

    demands: tuple
    force_rms_n: float
    payload_kg: float
    shaker: ShakerRating
    notes: tuple = ()

    @property
    def fits(self) -> bool:
        """True when every demand is within its rating."""
        return all(d.fits for d in self.demands)

    @property
    def force_margin_percent(self) -> float:
        """Margin of the RMS force, percent."""
        return next(d.margin_percent for d in self.demands if d.quantity == "force_rms")

    def to_dict(self) -> dict:
        """Plain data with the public JSON keys of ``vibsynth fit``."""
        return {
            "fits": self.fits,
            "force_rms_n": self.force_rms_n,
            "force_margin_percent": self.force_margin_percent,
            "payload_kg": self.payload_kg,
            "moving_mass_kg": self.shaker.moving_mass_kg,
            "shaker": self.shaker.name,
            "demands": [d.to_dict() for d in self.demands],
            "notes": list(self.notes),
            "caution": FIT_CAUTION,
        }


def _motion_operators(n: int, rate_hz: float, highpass_hz: float):
    """Velocity (m/s per g) and displacement (m per g) operators on the rfft lines of an n-sample block."""
    f = np.fft.rfftfreq(n, 1.0 / rate_hz)
    # smooth high-pass: 0 below highpass/2, raised cosine up to 1 at highpass (a short impulse response)
    t = np.clip((f - 0.5 * highpass_hz) / (0.5 * highpass_hz), 0.0, 1.0)
    gain = 0.5 - 0.5 * np.cos(math.pi * t)
    omega = 2.0 * math.pi * np.where(f > 0, f, 1.0)
    velocity = np.where(f > 0, gain * STANDARD_GRAVITY_M_S2 / (1j * omega), 0.0)
    displacement = np.where(f > 0, -gain * STANDARD_GRAVITY_M_S2 / omega ** 2, 0.0)
    return velocity, displacement


def drive_motion_peaks(acceleration_g, rate_hz: float, highpass_hz: float, block_samples: int = 1 << 20) -> dict:
    """Actual peaks of a drive's table motion: acceleration, velocity and displacement, in bounded memory.

    Velocity and displacement come from integrating the acceleration in the
    frequency domain (``V = A g0 / (j 2 pi f)``, ``D = -A g0 / (2 pi f)^2``)
    with a smooth high-pass (zero below ``highpass_hz / 2``, a raised cosine up
    to one at ``highpass_hz``: no drift, no offset).  The record is processed
    in overlapping blocks (overlap-save): each block carries a margin of
    ``16 / highpass_hz`` seconds on both sides, where the operator's impulse
    response has died away, and contributes only its middle; before the first
    and after the last sample the drive is taken as zero (the table at rest).

    Parameters
    ----------
    acceleration_g : array_like or iterable of array_like
        Drive samples, g: one array or consecutive chunks (e.g. ``DriveFile.iter_chunks()``).
    rate_hz : float
        Sample rate, Hz.
    highpass_hz : float
        Lines from here up are integrated in full, Hz (> 0); use at most the
        profile's lowest frequency (the commands use half of it).
    block_samples : int
        Output samples per block (memory grows with it, not with the record).

    Returns
    -------
    dict
        ``acceleration_peak_g`` (largest |a|), ``velocity_peak_m_s`` (largest |v|),
        ``displacement_pk_pk_m`` (max minus min of the displacement),
        ``displacement_peak_m`` (largest |d|), ``samples``.

    Examples
    --------
    >>> import numpy as np
    >>> rate = 1000.0
    >>> t = np.arange(10000) / rate
    >>> a = np.sin(2 * np.pi * 10 * t) * np.sin(np.pi * t / 10.0) ** 2   # 10 Hz, 1 g at the middle
    >>> peaks = drive_motion_peaks(a, rate, 2.0, block_samples=3000)
    >>> round(peaks["displacement_pk_pk_m"] * 1e3, 2)     # about 2 g0 / (2 pi 10)^2 = 4.97 mm
    4.97

    References
    ----------
    Bendat & Piersol (2010), integration in the frequency domain; overlap-save
    block processing: A. V. Oppenheim and R. W. Schafer, "Discrete-Time
    Signal Processing", section 8.7.3.
    """
    rate = float(rate_hz)
    highpass = float(highpass_hz)
    if not (math.isfinite(rate) and rate > 0):
        raise InputError(f"rate_hz must be a finite number > 0 Hz, got {rate_hz!r}", location="rate_hz")
    if not (math.isfinite(highpass) and 0 < highpass < 0.5 * rate):
        raise InputError(f"highpass_hz must be > 0 and below half the rate, got {highpass_hz!r}", location="highpass_hz")
    if isinstance(acceleration_g, np.ndarray) or (isinstance(acceleration_g, (list, tuple))
                                                 and acceleration_g and np.isscalar(acceleration_g[0])):
        chunks = [np.asarray(acceleration_g, dtype=np.float64).ravel()]
    else:
        chunks = acceleration_g
    margin = int(math.ceil(16.0 / highpass * rate))
    length = max(int(block_samples), 1)
    operators: dict = {}
    result = {"acceleration_peak_g": 0.0, "velocity_peak_m_s": 0.0, "displacement_max": -math.inf,
              "displacement_min": math.inf, "displacement_peak_m": 0.0}

    def process(block: np.ndarray, keep: slice) -> None:
        n = block.size
        if n not in operators:
            operators.clear()
            operators[n] = _motion_operators(n, rate, highpass)
        to_velocity, to_displacement = operators[n]
        spectrum = np.fft.rfft(block)
        velocity = np.fft.irfft(spectrum * to_velocity, n=n)[keep]
        displacement = np.fft.irfft(spectrum * to_displacement, n=n)[keep]
        if velocity.size:
            result["velocity_peak_m_s"] = max(result["velocity_peak_m_s"], float(np.max(np.abs(velocity))))
            result["displacement_max"] = max(result["displacement_max"], float(np.max(displacement)))
            result["displacement_min"] = min(result["displacement_min"], float(np.min(displacement)))
            result["displacement_peak_m"] = max(result["displacement_peak_m"], float(np.max(np.abs(displacement))))

    history = np.zeros(margin)   # samples from absolute index `first` on (zeros before the record)
    first = -margin
    next_out = 0
    total = 0
    for chunk in chunks:
        x = np.asarray(chunk, dtype=np.float64).ravel()
        if not x.size:
            continue
        result["acceleration_peak_g"] = max(result["acceleration_peak_g"], float(np.max(np.abs(x))))
        total += x.size
        history = np.concatenate([history, x])
        while first + history.size - next_out >= length + margin:
            start = next_out - margin - first
            process(history[start:start + length + 2 * margin], slice(margin, margin + length))
            next_out += length
            drop = next_out - margin - first
            history = history[drop:]
            first += drop
    if total < 4:
        raise InputError("the drive needs at least 4 samples", location="acceleration_g")
    history = np.concatenate([history, np.zeros(margin)])
    while next_out < total:
        count = min(length, total - next_out)
        start = next_out - margin - first
        process(history[start:start + count + 2 * margin], slice(margin, margin + count))
        next_out += count
    return {
        "acceleration_peak_g": result["acceleration_peak_g"],
        "velocity_peak_m_s": result["velocity_peak_m_s"],
        "displacement_pk_pk_m": result["displacement_max"] - result["displacement_min"],
        "displacement_peak_m": result["displacement_peak_m"],
        "samples": total,
    }


def shaker_fit(profile: AsdProfile, shaker: ShakerRating, payload_kg: float = 0.0, drive_peaks: dict | None = None) -> FitResult:
    """What a test asks of a shaker against its ratings, each with its margin.

    Parameters
    ----------
    profile : AsdProfile
        The test ASD, g^2/Hz.
    shaker : ShakerRating
        The rig's ratings.
    payload_kg : float
        Test item mass, kg (>= 0), added to the moving mass for the force.
    drive_peaks : dict, optional
        :func:`drive_motion_peaks` of the drive; adds the drive's actual
        stroke, velocity and acceleration peaks as demands.

    Returns
    -------
    FitResult

    Examples
    --------
    >>> from vibsynth.profile.asd import AsdProfile
    >>> rig = ShakerRating(8000.0, 51.0, 1.8, 60.0, 12.0)
    >>> fit = shaker_fit(AsdProfile([20.0, 2000.0], [0.04, 0.04]), rig, payload_kg=8.0)
    >>> round(fit.force_rms_n, 1), fit.fits          # 20 kg x 8.9 g x 9.80665 m/s^2
    (1745.5, True)

    References
    ----------
    Newton's second law; 3-sigma peaks, common practice, no source.
    """
    if not isinstance(profile, AsdProfile):
        raise InputError(f"profile must be an AsdProfile, got {type(profile).__name__}", location="profile")
    payload = float(payload_kg)
    if not (math.isfinite(payload) and payload >= 0):
        raise InputError(f"payload_kg must be a number >= 0 kg, got {payload_kg!r}", location="payload_kg")
    stroke_mm = profile.displacement_peak_to_peak_3sigma_m * 1e3
    demands = [
        Demand("displacement_pk_pk", "profile, 6 sigma (+/-3 sigma)", stroke_mm, shaker.stroke_pk_pk_mm, "mm"),
        Demand("velocity_peak", "profile, 3 sigma", 3.0 * profile.velocity_rms_m_s, shaker.velocity_peak_m_s, "m/s"),
        Demand("acceleration_peak", "profile, 3 sigma", 3.0 * profile.grms, shaker.acceleration_peak_g, "g"),
    ]
    notes = []
    if drive_peaks is not None:
        drive_stroke_mm = float(drive_peaks["displacement_pk_pk_m"]) * 1e3
        demands += [
            Demand("displacement_pk_pk", "drive, actual peak-to-peak", drive_stroke_mm, shaker.stroke_pk_pk_mm, "mm"),
            Demand("velocity_peak", "drive, actual peak", float(drive_peaks["velocity_peak_m_s"]),
                   shaker.velocity_peak_m_s, "m/s"),
            Demand("acceleration_peak", "drive, actual peak", float(drive_peaks["acceleration_peak_g"]),
                   shaker.acceleration_peak_g, "g"),
        ]
        if drive_stroke_mm > stroke_mm:
            notes.append(f"the drive's actual stroke ({drive_stroke_mm:.3g} mm peak-to-peak) is "
                         f"{100 * (drive_stroke_mm / stroke_mm - 1):.0f} % above the profile's 3-sigma figure "
                         f"({stroke_mm:.3g} mm): judge the rig by the drive")
        peak = float(drive_peaks["acceleration_peak_g"])
        if peak > 3.0 * profile.grms:
            notes.append(f"the drive's largest acceleration ({peak:.3g} g, {peak / profile.grms:.2f} x RMS) is above "
                         f"the 3-sigma figure ({3 * profile.grms:.3g} g)")
    force = (shaker.moving_mass_kg + payload) * profile.grms * STANDARD_GRAVITY_M_S2
    demands.append(Demand("force_rms", "(moving + payload mass) x g RMS x g0, rigid", force,
                          shaker.rated_force_rms_n, "N"))
    return FitResult(demands=tuple(demands), force_rms_n=force, payload_kg=payload, shaker=shaker, notes=tuple(notes))
