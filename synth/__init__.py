"""vibsynth: random-vibration drive synthesis from ASD breakpoint tables, with independent verification.

The scripting API in brief (every name is documented where it is defined)::

    import vibsynth

    profile = vibsynth.read_profile("parcel-conveyor")           # preset, .toml or .csv
    x = vibsynth.generate_samples(profile, 60.0, 2048.0, seed=4)  # g, shape (n,)
    k6 = vibsynth.generate_samples(profile, 60.0, 2048.0, seed=4, kurtosis=6.0)
    result = vibsynth.verify_record(k6, 2048.0, profile)          # independent check
    print(result.passed, result.to_dict()["statistics"]["kurtosis"])

The namespace is lazy (PEP 562): ``import vibsynth`` loads neither numpy's
companions scipy and matplotlib nor the generator; each name is imported on
first use.

Subpackages (the pipeline, in the order data flows through it):

- :mod:`vibsynth.profile`: the ASD model, its closed forms, profile files and presets;
- :mod:`vibsynth.generate`: seeds, plan, frames, spill high-pass, the streaming pipeline;
- :mod:`vibsynth.transforms`: memoryless non-Gaussian transforms and spectral pre-compensation;
- :mod:`vibsynth.io`: drive-file formats, the sidecar, atomic writes;
- :mod:`vibsynth.analysis`: Welch estimation, statistics, extremes, the verifier, figures
  (independent of the generator);
- :mod:`vibsynth.jobs`: a drive, a run (generate + verify + report);
- :mod:`vibsynth.peaks`: peak statistics, theory beside Monte-Carlo.
"""

from __future__ import annotations

import importlib

from vibsynth.errors import InputError, OutOfRangeError, VibsynthWarning

#: Public name -> module that defines it (imported on first access).
_LAZY = {
    "AsdProfile": "vibsynth.profile.asd",
    "read_profile": "vibsynth.profile.files",
    "write_profile": "vibsynth.profile.files",
    "generate_samples": "vibsynth.generate.pipeline",
    "iter_chunks": "vibsynth.generate.pipeline",
    "verify_record": "vibsynth.analysis.verify",
    "Criteria": "vibsynth.analysis.verify",
}

__all__ = sorted([*_LAZY, "InputError", "OutOfRangeError", "VibsynthWarning", "__version__"])


def __getattr__(name: str):
    if name == "__version__":  # kept in vibsynth._version (pyproject.toml reads it from there)
        from vibsynth._version import __version__

        globals()["__version__"] = __version__
        return __version__
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'vibsynth' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
