"""Durability: SDOF response, fatigue-damage and extreme-response spectra, equivalent tests, shaker fit.

Pure functions over profiles (:class:`vibsynth.profile.asd.AsdProfile`) and
drive samples; nothing here prints or writes.

- :mod:`~vibsynth.durability.sdof`: base-excited oscillator on a profile
  (Miles, exact response moments, expected peak);
- :mod:`~vibsynth.durability.filters`: ramp-invariant recursive filters for
  sampled drives, streamed;
- :mod:`~vibsynth.durability.rainflow`: ASTM E1049-85 rainflow counting, streamed;
- :mod:`~vibsynth.durability.damage`: FDS (narrow band, Dirlik, time domain) and ERS;
- :mod:`~vibsynth.durability.equivalence`: equivalent tests, test-time compression;
- :mod:`~vibsynth.durability.shaker`: demands against a shaker's ratings;
- :mod:`~vibsynth.durability.report`: one call per page (severity, fit) for any command.

The names below are imported on first use (PEP 562).
"""

from __future__ import annotations

import importlib

_LAZY = {
    "DEFAULT_Q": "vibsynth.durability.sdof",
    "sdof_response": "vibsynth.durability.sdof",
    "miles_rms_g": "vibsynth.durability.sdof",
    "response_moments": "vibsynth.durability.sdof",
    "acceleration_transmissibility_squared": "vibsynth.durability.sdof",
    "relative_displacement_gain_squared": "vibsynth.durability.sdof",
    "SdofFilterBank": "vibsynth.durability.filters",
    "smallwood_acceleration_coefficients": "vibsynth.durability.filters",
    "relative_displacement_coefficients": "vibsynth.durability.filters",
    "rainflow_cycles": "vibsynth.durability.rainflow",
    "RainflowCounter": "vibsynth.durability.rainflow",
    "TurningPoints": "vibsynth.durability.rainflow",
    "DEFAULT_B": "vibsynth.durability.damage",
    "natural_frequency_grid": "vibsynth.durability.damage",
    "narrowband_damage": "vibsynth.durability.damage",
    "dirlik_damage": "vibsynth.durability.damage",
    "profile_severity": "vibsynth.durability.damage",
    "drive_severity": "vibsynth.durability.damage",
    "equivalent_test": "vibsynth.durability.equivalence",
    "compress_profile": "vibsynth.durability.equivalence",
    "envelope_breakpoints": "vibsynth.durability.equivalence",
    "read_shaker": "vibsynth.durability.shaker",
    "shaker_fit": "vibsynth.durability.shaker",
    "drive_motion_peaks": "vibsynth.durability.shaker",
    "miles_difference": "vibsynth.durability.sdof",
    "severity_report": "vibsynth.durability.report",
    "fit_report": "vibsynth.durability.report",
    "write_severity_figures": "vibsynth.durability.figures",
    "write_equivalence_figure": "vibsynth.durability.figures",
}

__all__ = sorted(_LAZY)


def __getattr__(name: str):
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'vibsynth.durability' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
