"""vibsynth: random-vibration drive synthesis and verification (pure computation).

The scripting API in brief (every name is documented in its module)::

    from synth import read_profile, generate_samples, iter_chunks, verify_record

    profile = read_profile("parcel-conveyor")          # preset, .toml or .csv
    x = generate_samples(profile, 60.0, 2048.0, seed=4)  # g, shape (n,)
    k6 = generate_samples(profile, 60.0, 2048.0, seed=4, kurtosis=6.0)
    result = verify_record(k6, 2048.0, profile)         # independent check
    print(result.passed, result.to_dict()["statistics"]["kurtosis"])
"""

__version__ = "0.1.0"

from synth.errors import InputError, OutOfRangeError  # noqa: E402
from synth.profile import AsdProfile  # noqa: E402
from synth.profile_io import read_profile, write_profile  # noqa: E402
from synth.synthesis import generate_samples, iter_chunks  # noqa: E402
from synth.verify import Criteria, verify_record  # noqa: E402

__all__ = [
    "AsdProfile",
    "Criteria",
    "InputError",
    "OutOfRangeError",
    "generate_samples",
    "iter_chunks",
    "read_profile",
    "verify_record",
    "write_profile",
    "__version__",
]
