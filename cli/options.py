"""Options declared once and applied to every command that takes them.

``generate`` and ``run`` share the drive options (duration, rate, seed,
amplitude, ramp, rig limits, rescaling, non-Gaussian targets); ``verify`` and
``run`` share the verification options and ``--severity``; ``fit`` and ``run``
share ``--shaker`` and ``--payload-kg``; every reporting command shares
``--json``, ``--inch`` and ``--quiet``.  A command that needs a variant (``run``
defaults the duration and the rate where ``generate`` requires them) derives it
with :meth:`SharedOption.but`, so the name, type and help stay in one place.
"""

from __future__ import annotations

import click

from vibsynth._checks import AMPLITUDE_MODES, DEFAULT_PEAK_RECORDS, RATE_MARGIN_FACTOR
from vibsynth.cli import types


class SharedOption:
    """A click option declaration that can decorate several commands, or be derived with changes."""

    def __init__(self, *declarations: str, **attributes):
        self.declarations = declarations
        self.attributes = attributes

    def __call__(self, function):
        return click.option(*self.declarations, **self.attributes)(function)

    def but(self, **changes) -> "SharedOption":
        """The same option with some attributes changed (e.g. a default instead of ``required``)."""
        return SharedOption(*self.declarations, **{**self.attributes, **changes})


def apply(*options):
    """Decorate a command with several options, in the order given (as they show in --help)."""

    def decorate(function):
        for option in reversed(options):
            function = option(function)
        return function

    return decorate


# ------------------------------------------------------------------ common to reporting commands
json_output = SharedOption("--json", "as_json", is_flag=True,
                           help="Print the result as JSON on stdout (keys carry their unit: rate_hz, duration_s).")
inch = SharedOption("--inch", is_flag=True,
                    help="Print velocity in in/s and displacement in inches, and read --stroke-limit and "
                         "--velocity-limit in those units (JSON stays SI).")
quiet = SharedOption("-q", "--quiet", "command_quiet", is_flag=True,
                     help="No summary and no progress bar (warnings, errors and the drive-file caution still show; "
                          "same as `vibsynth -q`).")

# ------------------------------------------------------------------ the profile
profile_argument = click.argument("profile", type=types.ProfileSpec())
grms = SharedOption("--grms", type=types.positive(), default=None, metavar="G",
                    help="Rescale the profile to this overall g RMS first.")
level_db = SharedOption("--level-db", type=types.FINITE, default=None, metavar="DB",
                        help="Shift the profile by DB decibels first (-6 dB: half the g RMS).")

# ------------------------------------------------------------------ a drive (generate, run)
duration = SharedOption("--duration", required=False, default=None, type=types.positive(), metavar="S",
                        help="Duration of the drive in seconds (required unless the profile has a [[schedule]], "
                             "whose steps set it).")
rate = SharedOption("--rate", required=True, type=types.positive(), metavar="HZ",
                    help="Sample rate in Hz; must exceed twice the profile's top frequency "
                         f"({RATE_MARGIN_FACTOR:g} x is the usual margin).")
#: --rate where it may be omitted (run, peaks): the one default-rate rule.
rate_defaulted = rate.but(required=False, default=None,
                          help="Sample rate in Hz. Default: the smallest common rate (1024, 2048, 4096, 5120, "
                               f"8192, ... Hz) at least {RATE_MARGIN_FACTOR:g} x the profile's top frequency.")
seed = SharedOption("--seed", type=click.IntRange(min=0), default=None, metavar="N",
                    help="Seed of the random phases; same seed and options give identical samples. "
                         "Default: a fresh one, recorded in the sidecar.")
amplitude = SharedOption(
    "--amplitude", type=click.Choice(AMPLITUDE_MODES), default="fixed", show_default=True,
    help="fixed: random phases with line amplitudes fixed by the target, so every frame's periodogram "
         "is the target and the re-estimated ASD sits tightly inside tolerance bands (the default, as "
         "drive files are judged against those bands). rayleigh: Gaussian line amplitudes, making each "
         "record a true Gaussian realisation with the usual chi-square scatter (for statistical studies).")
ramp = SharedOption("--ramp", "ramp_s", type=types.FiniteFloatRange(min=0), default=0.0, metavar="S",
                    help="Raised-cosine fade-in and fade-out of S seconds each, so the rig never sees a step; "
                         "the sidecar records them and verification judges the steady part.")
stroke_limit = SharedOption("--stroke-limit", type=types.positive(), default=None, metavar="MM",
                            help="Refuse to write if the profile's 3-sigma displacement (peak-to-peak) exceeds MM "
                                 "(inches with --inch).")
velocity_limit = SharedOption("--velocity-limit", type=types.positive(), default=None, metavar="M_S",
                              help="Refuse to write if the profile's 3-sigma velocity (peak) exceeds M_S m/s "
                                   "(in/s with --inch).")
kurtosis = SharedOption(
    "--kurtosis", type=types.FINITE, default=None, metavar="K",
    help="Non-Gaussian drive with this kurtosis (3 is Gaussian; field vibration is often 4 to 8), by a "
         "cubic Hermite transform of the Gaussian stream, its spectrum pre-compensated so the ASD still "
         "meets the target. Below 3 (and for some skewed targets) the inverse (hardening) form is used. "
         "Out-of-range values are refused with the reachable range.")
skewness = SharedOption("--skewness", type=types.FINITE, default=None, metavar="S",
                        help="Non-Gaussian drive with this skewness (0 is symmetric), as --kurtosis; alone it keeps "
                             "the kurtosis at 3.")
clip = SharedOption(
    "--clip", type=types.FINITE, default=None, metavar="SIGMA",
    help="Hold every sample within SIGMA x the drive's RMS (the target g RMS), e.g. 3: the Gaussian "
         "stream is clipped and rescaled, its spectrum pre-compensated so the ASD still meets the target. "
         "Cannot be combined with --kurtosis/--skewness.")

kurtosis_model = SharedOption(
    "--kurtosis-model", type=click.Choice(["transform", "bursts"]), default=None,
    help="How --kurtosis is reached: transform (default), a memoryless transform whose peaks sit in single "
         "samples (a resonance averages them: its response is nearly Gaussian), or bursts, a slowly varying "
         "random envelope times a Gaussian drive (x = a(t) u(t), kurtosis = 3 E[a^4]) whose peaks survive a "
         "resonance, as field vibration's do. Default: the profile file's [amplitude] model, else transform.")
burst = SharedOption(
    "--burst", "burst_s", type=types.positive(), default=None, metavar="S",
    help="Burst duration of --kurtosis-model bursts, s (the envelope's time scale; recorded in the sidecar). "
         "Default: the profile file's [amplitude] burst_s, else 5 decay times of a Q = 10 resonance at the "
         "profile's lowest frequency (16 / lowest frequency).")

#: The drive options of `generate`, in help order; `run` applies the same objects (with defaults).
DRIVE_OPTIONS = (duration, rate, seed, amplitude, ramp, stroke_limit, velocity_limit, grms, level_db,
                 kurtosis, skewness, clip, kurtosis_model, burst)

# ------------------------------------------------------------------ verification (verify, run)
tolerance = SharedOption(
    "--tolerance", type=types.ToleranceBand(), default="3", show_default=True, metavar="DB|LOW,HIGH",
    help="ASD tolerance band in dB: 3 for ±3 dB, or LOW,HIGH such as -2,3 "
         "(±3 dB is widespread test-specification practice).")
grms_tolerance = SharedOption(
    "--grms-tolerance", type=types.FiniteFloatRange(min=0, max=100, min_open=True, max_open=True), default=10.0,
    show_default=True, metavar="PCT", help="g RMS tolerance in percent (±10 % is widespread practice).")
min_fraction = SharedOption(
    "--min-fraction", type=types.FiniteFloatRange(min=0, max=1, min_open=True), default=1.0, show_default=True,
    metavar="F", help="Pass when at least this fraction of judged lines is in tolerance (1: every line; "
                      "lower values relax the rule and the report says so).")
welch_resolution = SharedOption(
    "--resolution", type=types.positive(), default=None, metavar="HZ",
    help="Welch line spacing in Hz. Default: fine enough for the profile's narrowest feature (the smallest of "
         "lowest frequency / 8, band width / 16 and narrowest segment / 16), coarsened only as far as the "
         "record needs to reach --dof; a finer spacing shows narrow tones better, at fewer dof.")
dof = SharedOption(
    "--dof", type=types.FiniteFloatRange(min=2), default=None, metavar="N",
    help="Fewest statistical degrees of freedom per line (default 120): the default spacing is coarsened until "
         "the record reaches them; a longer record keeps the feature spacing with more dof. A note says when "
         "the record is too short.")

#: Paper size of report.pdf (run, verify --report).
paper = SharedOption("--paper", type=click.Choice(["a4", "letter"], case_sensitive=False), default="a4",
                     show_default=True, help="Paper size of report.pdf: A4 (595 x 842 pt) or US Letter (612 x 792 pt).")

VERIFY_OPTIONS = (tolerance, grms_tolerance, min_fraction, welch_resolution, dof)

# ------------------------------------------------------------------ peaks
records = SharedOption("--records", type=click.IntRange(min=0), default=DEFAULT_PEAK_RECORDS, show_default=True,
                       metavar="N", help="Monte-Carlo records per row (0: theory only).")

# ------------------------------------------------------------------ Monte-Carlo records on Dask (peaks, severity)
workers = SharedOption("--workers", type=click.IntRange(min=1), default=None, metavar="N",
                       help="Make the Monte-Carlo records on a local Dask cluster of N worker processes (the numbers "
                            "are the same as in one process). Needs pip install 'vibsynth[cluster]'.")
scheduler = SharedOption("--scheduler", default=None, metavar="ADDRESS",
                         help="Make the Monte-Carlo records on a running Dask scheduler (tcp://HOST:PORT).")

# ------------------------------------------------------------------ durability pages (run, verify --report, fit)
severity = SharedOption(
    "--severity", is_flag=True,
    help="Add the fatigue damage spectrum (FDS) and extreme response spectrum (ERS) of the drive against the "
         "profile's, over the drive's own duration: fds.png, ers.png, two report.pdf pages and a severity block "
         "in the JSON (as `vibsynth severity --drive`).")
shaker = SharedOption(
    "--shaker", "shaker_path", type=click.Path(dir_okay=False), default=None, metavar="RIG.toml",
    help="The rig's ratings: rated_force_rms_n, stroke_pk_pk_mm, velocity_peak_m_s, acceleration_peak_g, "
         "moving_mass_kg (armature plus fixture). Exit 1 when the test does not fit.")
payload_kg = SharedOption("--payload-kg", type=types.FiniteFloatRange(min=0), default=0.0, show_default=True,
                          metavar="M", help="Mass of the test item, kg (rigid payload, for --shaker).")
