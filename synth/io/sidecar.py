"""The drive-file sidecar: one dataclass that builds, validates, writes and reads ``FILE.json``.

A sidecar makes a drive file self-describing: ``unit``, ``scale`` (g value of
full scale 1.0), ``rate`` (Hz), ``seed``, the options that decided the
samples and the target profile (these six names are the published contract),
plus what the writer and the plan know about the file.  Every other key
follows the tool's JSON rule: a unit suffix on each physical quantity
(``ramp_in_s``, ``peak_g``, ``frequency_hz``), no key at two levels, ``null``
rather than empty text, and a ``schema_version``; the JSON Schema is
``vibsynth/schemas/sidecar.schema.json``.

Layout (schema version :data:`SCHEMA_VERSION`)::

    schema_version, unit, scale, rate, seed, samples, duration_s, format, subtype,
    columns, units, peak_g, full_scale_from, full_scale_headroom_fraction,
    ramp_in_s, ramp_out_s,
    options {amplitude, resolution_hz, loop, quantities, full_scale_g, ramp_s, kurtosis, ...},
    plan {mode, frame_length_samples, line_spacing_hz, grms_lines_g, seed_derivation, spill_highpass},
    profile {name, description, source, breakpoints [{frequency_hz, asd_g2_per_hz}],
             grms_g, velocity_rms_m_s, displacement_rms_m, displacement_peak_to_peak_3sigma_m},
    transform, compensation (non-Gaussian drives; else null), warnings, tool,
    channels (multi-channel drives: [{name, column, scale, unit, peak_g, profile}]; else null),
    pairs (multi-channel drives: [{channels, frequency_hz, coherence, phase_deg}]; else null)

A multi-channel drive has one data column per channel (a .wav/.flac channel,
a .csv column ``NAME_g``, a .npy column); .wav/.flac files have one full scale
for all channels (``scale``, repeated in each channel's entry).  Its top-level
``profile`` is the planning envelope (every channel's band and breakpoints,
the channels' ASDs summed); each channel's own target is ``channels[i].profile``.
    transform, compensation (non-Gaussian drives; else null), [modulation (burst model only)], warnings, tool

The reader also accepts the layout written by version 0.1 (``sidecar_version``
1, flat plan keys, ``breakpoints`` of ``{frequency, asd}``) and converts it.

References
----------
RFC 8259 (JSON); JSON Schema draft 2020-12.
"""

from __future__ import annotations

import dataclasses
import json
import math
from dataclasses import dataclass, field
from pathlib import Path

from vibsynth.errors import InputError
from vibsynth.io.quantities import COLUMN_NAMES, QUANTITY_UNITS

#: Version of the sidecar layout written by this module.
SCHEMA_VERSION = 2

#: Version numbers of earlier layouts the reader converts.
LEGACY_VERSIONS = (1,)

#: The compensation keys copied into a verify report (what the generator predicted).
COMPENSATION_REPORT_KEYS = ("achievable", "worst_in_band_deviation_db", "worst_in_band_deviation_frequency_hz",
                            "residual_relative", "out_of_band_fraction", "iterations", "converged", "description")

#: Old (0.1) key -> new key inside ``options``.
_OPTION_RENAMES = {"memory_budget_mb": "memory_budget_mib", "grms": "rescale_grms_g", "level_db": "rescale_level_db"}
#: Old (0.1) options that are now top-level keys only.
_OPTION_DROPPED = ("seed", "rate_hz", "subtype", "duration_s")


def sidecar_path(path) -> Path:
    """The sidecar of a drive file: the file's name plus ``.json`` (``drive.flac`` -> ``drive.flac.json``).

    Examples
    --------
    >>> sidecar_path("out/drive.flac").name
    'drive.flac.json'

    References
    ----------
    The sidecar naming rule of the drive-file contract.
    """
    path = Path(path)
    return path.with_name(path.name + ".json")


def channel_column_name(name: str) -> str:
    """The data column of a channel: its name with the unit suffix ``_g``.

    Examples
    --------
    >>> channel_column_name("x")
    'x_g'

    References
    ----------
    The unit-suffix rule of the sidecar (see the module docstring).
    """
    return f"{name}_g"


def profile_block(profile, source: str | None) -> dict:
    """The sidecar's ``profile`` block for an :class:`~vibsynth.profile.asd.AsdProfile` (breakpoints in Hz, g^2/Hz).

    Examples
    --------
    >>> from vibsynth.profile.asd import AsdProfile
    >>> block = profile_block(AsdProfile([20, 2000], [0.01, 0.01], name="flat"), "flat.toml")
    >>> block["breakpoints"][0]
    {'frequency_hz': 20.0, 'asd_g2_per_hz': 0.01}

    References
    ----------
    Closed-form g RMS, velocity and displacement of a log-log ASD (see
    :mod:`vibsynth.profile.asd`).
    """
    block = {
        "name": profile.name,
        "description": profile.description or None,
        "source": source or None,
        "breakpoints": [{"frequency_hz": float(f), "asd_g2_per_hz": float(s)}
                        for f, s in zip(profile.frequencies_hz, profile.asd_g2_per_hz)],
        "grms_g": profile.grms,
        "velocity_rms_m_s": profile.velocity_rms_m_s,
        "displacement_rms_m": profile.displacement_rms_m,
        "displacement_peak_to_peak_3sigma_m": profile.displacement_peak_to_peak_3sigma_m,
    }
    mixed = getattr(profile, "mixed", None)
    if mixed is not None:  # tones, narrow bands, level schedule (vibsynth.profile.mixed); absent otherwise
        block["mixed"] = {**mixed.to_dict(), "random_grms_g": profile.grms,
                          "total_grms_g": mixed.total_rms_g(profile.grms), "tone_peak_sum_g": mixed.peak_sum_g}
    return block


@dataclass(frozen=True)
class Sidecar:
    """Everything recorded beside a drive file (see the module docstring for the JSON layout).

    Parameters
    ----------
    unit : str
        Unit of the data, always ``g``.
    scale : float or None
        g value of sample 1.0 (1 for .csv/.npy); set by the writer.
    rate : float or None
        Sample rate, Hz; set by the writer.
    samples : int or None
        Number of samples; set by the writer (``duration_s`` is ``samples / rate``, s).
    format, subtype : str or None
        File and sample format; set by the writer.
    columns : tuple of str
        Column names (``time_s`` first in a .csv).
    units : dict
        Unit of each data column.
    seed : int or None
        Seed of the random phases.
    peak_g : float or None
        Largest |acceleration| in the file, g.
    full_scale_from : {"given", "peak"} or None
        How full scale was chosen (.wav/.flac).
    full_scale_headroom_fraction : float or None
        Headroom above the peak when ``full_scale_from`` is ``peak``.
    ramp_in_s, ramp_out_s : float
        Raised-cosine fades, s.
    options, plan, profile, transform, compensation : dict or None
        The request, the plan's decisions, the target, the non-Gaussian
        transform and its spectral compensation.
    modulation : dict or None
        The burst model's envelope (model, kurtosis, ``burst_s`` time scale,
        ...); None for other drives (and the key is then left out).
    warnings : tuple of str
    tool : dict or None
        Name and versions of the writing software.
    channels : tuple of dict or None
        A multi-channel drive's channels, in column order: ``name``,
        ``column``, ``scale`` (g of sample 1.0), ``unit``, ``peak_g``,
        ``profile`` (that channel's target); None for a single channel.
    pairs : tuple of dict or None
        A multi-channel drive's specified pairs: ``channels`` [a, b],
        ``frequency_hz``, ``coherence`` (ordinary, 0..1), ``phase_deg`` (angle of
        ``G_ab = E[conj(A) B]``); None for a single channel.
    schema_version : int
    legacy : bool
        Read from an earlier layout (not written).

    Examples
    --------
    >>> side = Sidecar(scale=1.0, rate=5120.0, samples=10, format="npy", subtype="float64",
    ...                columns=("acceleration_g",), units={"acceleration_g": "g"}, seed=3)
    >>> Sidecar.from_dict(side.to_dict()) == side
    True

    References
    ----------
    RFC 8259 (JSON); JSON Schema draft 2020-12 (``sidecar.schema.json``).
    """

    unit: str = "g"
    scale: float | None = None
    rate: float | None = None
    samples: int | None = None
    format: str | None = None
    subtype: str | None = None
    columns: tuple = ()
    units: dict = field(default_factory=dict)
    seed: int | None = None
    peak_g: float | None = None
    full_scale_from: str | None = None
    full_scale_headroom_fraction: float | None = None
    ramp_in_s: float = 0.0
    ramp_out_s: float = 0.0
    options: dict | None = None
    plan: dict | None = None
    profile: dict | None = None
    transform: dict | None = None
    compensation: dict | None = None
    modulation: dict | None = None
    warnings: tuple = ()
    tool: dict | None = None
    channels: tuple | None = None
    pairs: tuple | None = None
    schema_version: int = SCHEMA_VERSION
    legacy: bool = field(default=False, compare=False)

    @property
    def duration_s(self) -> float | None:
        """``samples / rate`` in s (None until the writer has set both)."""
        if self.samples is None or not self.rate:
            return None
        return self.samples / self.rate

    # ------------------------------------------------------------ building
    def with_file(self, *, scale: float, rate: float, samples: int, file_format: str, subtype: str, quantities,
                  peak_g: float, tool: dict | None = None, channel_peaks_g=None) -> "Sidecar":
        """This sidecar completed with what the writer knows (scale, rate, samples, format, columns, peak).

        Examples
        --------
        >>> Sidecar(seed=1).with_file(scale=1.0, rate=100.0, samples=5, file_format="csv", subtype="text",
        ...                           quantities=("acceleration",), peak_g=0.5).columns
        ('time_s', 'acceleration_g')

        References
        ----------
        See the module docstring.
        """
        if self.channels:
            names = tuple(channel_column_name(c["name"]) for c in self.channels)
            peaks = list(channel_peaks_g) if channel_peaks_g is not None else [None] * len(names)
            channels = tuple({**c, "column": name, "scale": float(scale), "unit": "g", "peak_g": peak}
                             for c, name, peak in zip(self.channels, names, peaks))
            return dataclasses.replace(
                self, scale=float(scale), rate=float(rate), samples=int(samples), format=file_format, subtype=subtype,
                columns=(("time_s",) if file_format == "csv" else ()) + names,
                units={name: "g" for name in names}, peak_g=float(peak_g), channels=channels,
                tool=self.tool if self.tool is not None else tool,
            )
        names = tuple(COLUMN_NAMES[q] for q in quantities)
        return dataclasses.replace(
            self, scale=float(scale), rate=float(rate), samples=int(samples), format=file_format, subtype=subtype,
            columns=(("time_s",) if file_format == "csv" else ()) + names,
            units={COLUMN_NAMES[q]: QUANTITY_UNITS[q] for q in quantities}, peak_g=float(peak_g),
            tool=self.tool if self.tool is not None else tool,
        )

    # ------------------------------------------------------------ JSON
    def to_dict(self) -> dict:
        """The JSON object written to ``FILE.json`` (schema version :data:`SCHEMA_VERSION`).

        Examples
        --------
        >>> list(Sidecar().to_dict())[:4]
        ['schema_version', 'unit', 'scale', 'rate']

        References
        ----------
        RFC 8259.
        """
        data = {
            "schema_version": SCHEMA_VERSION,
            "unit": self.unit,
            "scale": self.scale,
            "rate": self.rate,
            "seed": self.seed,
            "samples": self.samples,
            "duration_s": self.duration_s,
            "format": self.format,
            "subtype": self.subtype,
            "columns": list(self.columns),
            "units": dict(self.units),
            "peak_g": self.peak_g,
            "full_scale_from": self.full_scale_from,
            "full_scale_headroom_fraction": self.full_scale_headroom_fraction,
            "ramp_in_s": self.ramp_in_s,
            "ramp_out_s": self.ramp_out_s,
            "options": self.options,
            "plan": self.plan,
            "profile": self.profile,
            "transform": self.transform,
            "compensation": self.compensation,
            "warnings": list(self.warnings),
            "tool": self.tool,
            "channels": None if self.channels is None else [dict(c) for c in self.channels],
            "pairs": None if self.pairs is None else [dict(p) for p in self.pairs],
        }
        if self.modulation is not None:  # only burst-model drives carry it (older readers never see the key)
            data["modulation"] = self.modulation
        return data

    @classmethod
    def from_dict(cls, data, where: str = "sidecar") -> "Sidecar":
        """Validate a sidecar object (this layout or the 0.1 layout) and build the dataclass.

        Parameters
        ----------
        data : object
            The parsed JSON.
        where : str
            The sidecar file, named in messages.

        Raises
        ------
        InputError
            Naming the key, what is wrong and what would be right.

        Examples
        --------
        >>> Sidecar.from_dict({"unit": "g", "scale": 1, "rate": 100, "samples": 4}).rate
        100.0

        References
        ----------
        See the module docstring.
        """
        if not isinstance(data, dict):
            raise InputError("must hold a JSON object", where)
        legacy = "schema_version" not in data
        if legacy:
            data = _from_layout_0_1(data)
        _validate(data, where)
        return cls(
            unit=data["unit"],
            scale=float(data["scale"]),
            rate=float(data["rate"]),
            samples=int(data["samples"]),
            format=data.get("format"),
            subtype=data.get("subtype") if isinstance(data.get("subtype"), str) else None,
            columns=tuple(data.get("columns") or ()),
            units=dict(data["units"]) if isinstance(data.get("units"), dict) else {},
            seed=data.get("seed") if isinstance(data.get("seed"), int) and not isinstance(data.get("seed"), bool)
            else None,
            peak_g=_number_or_none(data.get("peak_g")),
            full_scale_from=data.get("full_scale_from") if isinstance(data.get("full_scale_from"), str) else None,
            full_scale_headroom_fraction=_number_or_none(data.get("full_scale_headroom_fraction")),
            ramp_in_s=float(data.get("ramp_in_s") or 0.0),
            ramp_out_s=float(data.get("ramp_out_s") or 0.0),
            options=data.get("options"),
            plan=data.get("plan") if isinstance(data.get("plan"), dict) else None,
            profile=data.get("profile"),
            transform=data.get("transform") if isinstance(data.get("transform"), dict) else None,
            compensation=data.get("compensation") if isinstance(data.get("compensation"), dict) else None,
            modulation=data.get("modulation") if isinstance(data.get("modulation"), dict) else None,
            warnings=tuple(str(w) for w in data.get("warnings") or () if isinstance(w, str))
            if isinstance(data.get("warnings"), list) else (),
            tool=data.get("tool") if isinstance(data.get("tool"), dict) else None,
            channels=tuple(data["channels"]) if isinstance(data.get("channels"), list) else None,
            pairs=tuple(data["pairs"]) if isinstance(data.get("pairs"), list) else None,
            legacy=legacy,
        )

    def to_json(self) -> str:
        """The sidecar as JSON text (two-space indent, final newline).

        Examples
        --------
        >>> '"schema_version": 2' in Sidecar().to_json()
        True

        References
        ----------
        RFC 8259.
        """
        from vibsynth.io.atomic import json_text

        return json_text(self.to_dict())

    @classmethod
    def read(cls, drive_path) -> "Sidecar | None":
        """The sidecar of the drive file ``drive_path``, validated; None when there is none.

        Examples
        --------
        >>> import tempfile, pathlib
        >>> Sidecar.read(pathlib.Path(tempfile.mkdtemp()) / "none.npy") is None
        True

        References
        ----------
        See the module docstring.
        """
        side = sidecar_path(drive_path)
        if not side.exists():
            return None
        try:
            data = json.loads(side.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, json.JSONDecodeError) as error:
            raise InputError(f"is not valid JSON ({error})", str(side)) from None
        except RecursionError:
            raise InputError("is not a drive sidecar (JSON nested too deeply)", str(side)) from None
        return cls.from_dict(data, str(side))

    # ------------------------------------------------------------ what readers need
    def option(self, name: str):
        """One recorded option (None when absent).

        Examples
        --------
        >>> Sidecar(options={"clip": 3.0}).option("clip")
        3.0

        References
        ----------
        See the module docstring.
        """
        return (self.options or {}).get(name)

    def amplitude_targets(self) -> dict:
        """The amplitude targets the drive was asked for: ``kurtosis``, ``skewness``, ``clip`` (floats or None).

        Examples
        --------
        >>> Sidecar(options={"kurtosis": 6}).amplitude_targets()
        {'kurtosis': 6.0, 'skewness': None, 'clip': None}

        References
        ----------
        Pearson kurtosis and skewness; crest factor (peak / RMS).
        """
        result = {}
        for key in ("kurtosis", "skewness", "clip"):
            value = self.option(key)
            result[key] = float(value) if value is not None else None
        return result

    def compensation_summary(self) -> dict | None:
        """What the generator predicted for a non-Gaussian drive (:data:`COMPENSATION_REPORT_KEYS`), or None.

        Examples
        --------
        >>> Sidecar(compensation={"achievable": True, "method": "x"}).compensation_summary()
        {'achievable': True}

        References
        ----------
        Yamazaki & Shinozuka (1988), iterative spectral correction.
        """
        if not isinstance(self.compensation, dict):
            return None
        return {key: self.compensation.get(key) for key in COMPENSATION_REPORT_KEYS if key in self.compensation}

    def target_profile(self, where: str):
        """The target recorded in the sidecar as an :class:`~vibsynth.profile.asd.AsdProfile` (g^2/Hz).

        Parameters
        ----------
        where : str
            The drive file, named when there is no profile.

        Raises
        ------
        InputError
            No profile, or breakpoints that are not a list of ``{frequency_hz, asd_g2_per_hz}``.

        Examples
        --------
        >>> side = Sidecar(profile={"name": "flat", "breakpoints": [
        ...     {"frequency_hz": 20, "asd_g2_per_hz": 0.01}, {"frequency_hz": 2000, "asd_g2_per_hz": 0.01}]})
        >>> round(side.target_profile("d.npy").grms, 3)
        4.45

        References
        ----------
        See :mod:`vibsynth.profile.asd`.
        """
        from vibsynth.profile.asd import AsdProfile

        side = f"{where}.json"
        if not isinstance(self.profile, dict):
            raise InputError("has no sidecar with a profile; give the target with --profile PROFILE", where)
        record = self.profile
        try:
            points = record["breakpoints"]
            frequencies = [float(p["frequency_hz"]) for p in points]
            values = [float(p["asd_g2_per_hz"]) for p in points]
        except (KeyError, TypeError, ValueError):
            raise InputError("profile.breakpoints must be a list of {frequency_hz, asd_g2_per_hz}", side,
                             "profile") from None
        mixed = None
        if record.get("mixed") is not None:
            from vibsynth.profile.mixed import MixedParts

            if not isinstance(record["mixed"], dict):
                raise InputError("profile.mixed must be a JSON object", side, "profile.mixed")
            mixed = MixedParts.from_dict(record["mixed"], side)
        return AsdProfile(frequencies, values, name=str(record.get("name") or "sidecar profile"),
                          description=str(record.get("description") or ""), source=side, mixed=mixed)


def _number_or_none(value):
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    return float(value)


def _validate(data: dict, side: str) -> None:
    for key in ("unit", "scale", "rate", "samples"):
        if key not in data:
            raise InputError(f"has no {key!r} key; a drive sidecar records unit, scale, rate and samples", side)
    if data["unit"] != "g":
        raise InputError(f"unit {data['unit']!r} is not supported; drive files hold acceleration in g", side, "unit")
    for key in ("scale", "rate"):
        value = data[key]
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value <= 0:
            raise InputError(f"{key} {value!r} must be a number > 0", side, key)
    samples = data["samples"]
    if isinstance(samples, bool) or not isinstance(samples, int) or samples < 0:
        raise InputError(f"samples {samples!r} must be a whole number >= 0", side, "samples")
    for key in ("ramp_in_s", "ramp_out_s"):
        value = data.get(key, 0.0)
        if value is None:
            continue
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value < 0:
            raise InputError(f"{key} {value!r} must be a number of seconds >= 0", side, key)
    duration = samples / data["rate"]
    ramps = (data.get("ramp_in_s") or 0.0) + (data.get("ramp_out_s") or 0.0)
    if ramps > duration * (1 + 1e-9):
        raise InputError(f"ramps of {ramps:g} s in all are longer than the {duration:g} s record", side, "ramp_in_s")
    for key, kind, what in (("format", str, "text such as \"flac\""), ("options", dict, "a JSON object"),
                            ("profile", dict, "a JSON object"), ("columns", list, "a list of column names")):
        if data.get(key) is not None and not isinstance(data[key], kind):
            raise InputError(f"{key} must be {what}, got {data[key]!r:.40}", side, key)
    if data.get("columns") is not None and not all(isinstance(name, str) for name in data["columns"]):
        raise InputError("columns must be a list of column names (text)", side, "columns")
    channels = data.get("channels")
    if channels is not None:
        if (not isinstance(channels, list) or len(channels) < 2
                or not all(isinstance(c, dict) and isinstance(c.get("name"), str) for c in channels)):
            raise InputError("channels must be null or a list of two or more objects with a 'name'", side, "channels")
        names = [c["name"] for c in channels]
        if len(set(names)) != len(names):
            raise InputError(f"channel names {names!r} must be unique", side, "channels")
    modulation = data.get("modulation")
    if modulation is not None:
        if not isinstance(modulation, dict):
            raise InputError(f"modulation must be a JSON object or absent, got {modulation!r:.40}", side, "modulation")
        burst = modulation.get("burst_s")
        if isinstance(burst, bool) or not isinstance(burst, (int, float)) or not math.isfinite(burst) or burst <= 0:
            raise InputError(f"burst_s {burst!r:.40} must be a duration > 0 s", side, "modulation.burst_s")
    for key in ("kurtosis", "skewness", "clip"):
        value = (data.get("options") or {}).get(key)
        if value is not None and (isinstance(value, bool) or not isinstance(value, (int, float))
                                  or not math.isfinite(value)):
            raise InputError(f"{key} {value!r:.40} must be a finite number or null", side, f"options.{key}")


def _from_layout_0_1(data: dict) -> dict:
    """The 0.1 layout (``sidecar_version`` 1 or none) converted to this one; unknown values are left for validation."""
    new = {key: data[key] for key in ("unit", "scale", "rate", "samples", "duration_s", "seed", "format", "subtype", "columns",
                                      "units", "peak_g", "ramp_in_s", "ramp_out_s", "transform", "compensation",
                                      "warnings", "tool") if key in data}
    new["schema_version"] = data.get("sidecar_version", 1)
    new["full_scale_from"] = data.get("full_scale")
    new["full_scale_headroom_fraction"] = data.get("headroom")
    plan = {}
    for old, key in (("mode", "mode"), ("frame_length", "frame_length_samples"), ("resolution_hz", "line_spacing_hz"),
                     ("grms_lines", "grms_lines_g"), ("seed_derivation", "seed_derivation"),
                     ("spill_highpass", "spill_highpass")):
        if old in data:
            plan[key] = data[old]
    new["plan"] = plan or None
    options = data.get("options")
    if isinstance(options, dict):
        options = {_OPTION_RENAMES.get(k, k): v for k, v in options.items() if k not in _OPTION_DROPPED}
        for key in ("amplitude", "loop"):
            if key in data and key not in options:
                options[key] = data[key]
    if "options" in data:
        new["options"] = options
    profile = data.get("profile")
    if isinstance(profile, dict):
        profile = dict(profile)
        if "grms" in profile:
            profile["grms_g"] = profile.pop("grms")
        points = profile.get("breakpoints")
        if isinstance(points, list):
            profile["breakpoints"] = [
                {"frequency_hz": p.get("frequency"), "asd_g2_per_hz": p.get("asd")} if isinstance(p, dict) else p
                for p in points
            ]
        for key in ("description", "source"):
            if profile.get(key) == "":
                profile[key] = None
    if "profile" in data:
        new["profile"] = profile
    return new


__all__ = ["COMPENSATION_REPORT_KEYS", "SCHEMA_VERSION", "Sidecar", "channel_column_name", "profile_block",
           "sidecar_path"]
