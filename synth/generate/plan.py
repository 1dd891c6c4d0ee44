"""The plan: everything that, with a seed, decides a record sample by sample (pure data).

:func:`plan_synthesis` checks a request against the profile and chooses the
record's layout from the options alone (never from the machine):

``periodic``
    One inverse FFT of the whole record (``N`` = record length): the finest
    resolution there is, and the record loops seamlessly.  Used when the record
    fits the memory budget option (default :data:`DEFAULT_MEMORY_BUDGET_BYTES`,
    estimated by :func:`periodic_memory_bytes`), always for ``loop=True`` and
    for velocity and displacement outputs (a record beyond the budget is then
    refused with the longest duration that fits).  A periodic record that this
    machine cannot hold is refused too (an :class:`~vibsynth.errors.InputError`
    naming a smaller budget), never switched to overlap-add behind the
    caller's back: the same options give the same samples whatever the machine's
    memory or cores.
``overlap-add``
    Independent sine-windowed frames of ``N`` samples (``N`` a power of two
    chosen from the profile's lowest frequency and narrowest segment, see
    :func:`profile_resolution_hz`), laid every ``N/2`` samples; memory does not
    grow with duration.

References
----------
Nyquist-Shannon sampling theorem; DFT line spacing ``df = fs / N`` (Bendat, J. S.
& Piersol, A. G., *Random Data*, 4th ed., Wiley 2010); Allen, J. B., "Short term
spectral analysis, synthesis, and modification by discrete Fourier transform",
IEEE Trans. ASSP 25(3), 1977 (overlap-add).
"""

from __future__ import annotations

import dataclasses
import math
import warnings as _warnings
from dataclasses import dataclass, field
from functools import cached_property
from typing import Callable

import numpy as np

from vibsynth.errors import InputError, VibsynthWarning
from vibsynth.generate import _memory
from vibsynth.generate.frames import AMPLITUDE_MODES, _band_of, _check_choice, _clean_line_spectrum, sine_window
from vibsynth.generate.highpass import SpillHighpass
from vibsynth.profile.asd import AsdProfile
from vibsynth.transforms.base import MemorylessTransform

#: The quantities a record can hold, and their units.
from vibsynth.io.quantities import QUANTITY_UNITS  # noqa: E402  (the one units table)

#: Generation modes (see the module docstring).
MODES = ("periodic", "overlap-add")

#: Working memory one periodic record may use (bytes) before overlap-add takes over: the default of
#: the ``memory_budget_bytes`` option (a fixed number, so the mode never depends on the machine).
DEFAULT_MEMORY_BUDGET_BYTES = 256 * 2**20

#: Frequency lines per feature: the frame resolution is the smaller of the lowest
#: frequency and the narrowest segment divided by this (common practice, no source).
LINES_PER_FEATURE = 8

#: Shortest overlap-add frame (samples); shorter frames cost more per sample in overhead.
MIN_FRAME_LENGTH = 8192

#: Longest overlap-add frame (samples, about 170 MB of working memory).
MAX_FRAME_LENGTH = 1 << 22

#: Rates below this multiple of the top frequency get a warning (anti-alias
#: margin; common practice, no source).  The one definition on the generation side.
from vibsynth._checks import RATE_MARGIN_FACTOR  # noqa: E402  (the one anti-alias margin)

#: Working bytes per sample of a periodic record: the spectrum (8), the record (8),
#: the inverse FFT's scratch and allocator slack; peak RSS growth measured at 45
#: bytes/sample for 2^23 samples (numpy 2.4, scipy 1.17).
PERIODIC_BYTES_PER_SAMPLE = 48
#: Extra bytes per sample for each velocity/displacement column (measured 16-20).
PERIODIC_BYTES_PER_EXTRA_QUANTITY = 20
#: Working bytes per sample of a transformed (non-Gaussian) periodic record, planning included:
#: it also holds its spectrum for the high-pass; peak RSS growth measured at 54 bytes/sample for
#: 2^23 samples (numpy 2.4, scipy 1.17).
PERIODIC_BYTES_PER_SAMPLE_TRANSFORMED = 56

#: Working bytes per sample and channel of a multi-channel periodic record (lines, record, FFT scratch;
#: taken from the single-channel figure).
PERIODIC_BYTES_PER_CHANNEL = 48
#: Bytes per sample for each entry of the per-line matrices while planning (complex, one line per two
#: samples: 8 bytes per sample for each (lines, C, C) array, two alive at the peak).  With
#: PERIODIC_BYTES_PER_CHANNEL: 288 bytes/sample estimated for 3 channels; peak RSS growth measured at
#: about 180 bytes/sample for 3 channels and 3.1e6 samples (numpy 2.4, scipy 1.17).
PERIODIC_BYTES_PER_FACTOR = 16

#: Largest record, in samples, that a plan accepts (about 54 years at 51.2 kHz; far beyond any
#: disk, but it keeps every size computation an exact integer).
MAX_RECORD_SAMPLES = 1e14


def profile_resolution_hz(profile: AsdProfile) -> float:
    """Frequency resolution (Hz) a profile needs: min(lowest frequency, narrowest segment) / 8.

    Eight lines per feature keep the lowest frequency and the narrowest notch
    or peak resolved after the overlap-add window smooths the spectrum by about
    1.5 lines (common practice, no source).

    Parameters
    ----------
    profile : AsdProfile

    Returns
    -------
    float
        Resolution in Hz.

    Examples
    --------
    >>> profile_resolution_hz(AsdProfile([20, 80, 2000], [0.01, 0.04, 0.04]))
    2.5

    References
    ----------
    Bendat & Piersol (2010): resolution bandwidth must be narrow against the
    spectral features to be resolved.
    """
    widths = np.diff(profile.frequencies_hz)
    return float(min(profile.frequency_min_hz, float(np.min(widths)))) / LINES_PER_FEATURE


def choose_frame_length(rate_hz: float, resolution_hz: float) -> int:
    """Overlap-add frame length: the smallest power of two N >= 8192 with ``rate_hz / N <= resolution_hz``.

    Parameters
    ----------
    rate_hz : float
        Sample rate in Hz.
    resolution_hz : float
        Largest acceptable line spacing in Hz.

    Returns
    -------
    int
        N in samples.

    Examples
    --------
    >>> choose_frame_length(5120.0, 2.5)
    8192

    References
    ----------
    DFT line spacing ``df = fs / N`` (Bendat & Piersol 2010).
    """
    needed = max(MIN_FRAME_LENGTH, math.ceil(float(rate_hz) / float(resolution_hz) - 1e-9))
    return 1 << (needed - 1).bit_length()


def periodic_memory_bytes(total_samples: int, quantity_count: int = 1, transformed: bool = False,
                          channel_count: int = 1) -> int:
    """Estimated working memory (bytes) of one periodic record of ``total_samples`` samples.

    Parameters
    ----------
    total_samples : int
        Record length in samples.
    quantity_count : int
        Number of columns (acceleration, velocity, displacement).
    transformed : bool
        A non-Gaussian record (memoryless transform and its frequency-domain
        high-pass): :data:`PERIODIC_BYTES_PER_SAMPLE_TRANSFORMED` per sample.
    channel_count : int
        Channels of a multi-channel record: :data:`PERIODIC_BYTES_PER_CHANNEL` per
        sample and channel (lines, record) plus :data:`PERIODIC_BYTES_PER_FACTOR`
        per sample and factor entry.

    Returns
    -------
    int
        Bytes (an estimate measured with peak RSS; see :data:`PERIODIC_BYTES_PER_SAMPLE`).

    Examples
    --------
    >>> periodic_memory_bytes(1000), periodic_memory_bytes(1000, 3), periodic_memory_bytes(1000, transformed=True)
    (48000, 88000, 56000)

    References
    ----------
    Measured for this implementation (no published source).
    """
    base = PERIODIC_BYTES_PER_SAMPLE_TRANSFORMED if transformed else PERIODIC_BYTES_PER_SAMPLE
    if int(channel_count) > 1:
        count = int(channel_count)
        return int(total_samples) * (PERIODIC_BYTES_PER_CHANNEL * count + PERIODIC_BYTES_PER_FACTOR * count * count)
    per_sample = base + PERIODIC_BYTES_PER_EXTRA_QUANTITY * (int(quantity_count) - 1)
    return int(total_samples) * per_sample



# ---------------------------------------------------------------------- plan
@dataclass(frozen=True, eq=False)
class SynthesisPlan:
    """Everything that, with a seed, determines a record sample by sample.

    Parameters
    ----------
    rate_hz : float
        Sample rate in Hz.
    total_samples : int
        Record length in samples.
    frame_length : int
        N: the record length in ``periodic`` mode; the (even) frame length in
        ``overlap-add`` mode.
    line_spectrum : numpy.ndarray, shape (N//2 + 1,)
        One-sided spectral density on the frame grid ``f_k = k rate_hz / N``
        (any unit U^2/Hz; only its shape matters when ``output_scale`` is given
        separately).  DC and Nyquist are set to 0.  For non-Gaussian drives
        this is the compensated Gaussian spectrum.
    mode : {"periodic", "overlap-add"}
    amplitude : {"fixed", "rayleigh"}
    transform : MemorylessTransform or None
        The memoryless transform ``y = g(u)`` actually applied to the
        unit-variance Gaussian stream after overlap-add (see
        :class:`vibsynth.transforms.base.MemorylessTransform`); for a
        non-Gaussian drive the one the line spectrum was pre-compensated for.
    output_scale : float or None
        Physical units (g) per unit of ``g(u)``; None: ``sqrt(sum S df)`` (the
        Gaussian record then has the line spectrum in physical units).
    quantities : tuple of str
        Columns, from ``acceleration`` (g), ``velocity`` (m/s), ``displacement`` (m);
        velocity and displacement need ``periodic`` mode and no transform.
    ramp_in_samples, ramp_out_samples : int
        Raised-cosine fade-in/out lengths in samples.
    rest_taper_samples : int
        Velocity/displacement records: length (samples) of the displacement
        taper at each end that brings all three columns to rest (0: none);
        see :func:`vibsynth.generate.frames.rest_taper`.
    warnings : tuple of str
        Advisory messages found while planning (e.g. a thin anti-alias margin).
    spill_highpass : SpillHighpass or None
        The zero-phase high-pass applied to the stream after the transform and
        before the output scale.  Overlap-add: a FIR in blocks of
        ``B = spill_highpass.block_samples``; output sample n is then stream
        sample ``n + B/2``.  Periodic (transformed records only): the exact
        frequency-domain response.  It removes the sine window's leakage and
        the transform's spill-over below the band (see :class:`SpillHighpass`).
    memory_budget_bytes : int
        The memory budget option the mode was chosen with (recorded, so the
        choice can be read off the plan).
    channels : tuple of str
        Channel names of a multi-channel record (empty: one channel).
    channel_factors : numpy.ndarray or None, complex, shape (hi - lo, C, C)
        A multi-channel record's factor ``H_k`` of each band line ``k`` in
        ``[lo, hi)`` (the non-zero lines of ``line_spectrum``, which is then
        the trace of the spectral density matrix): ``H_k H_k^H = conj(G(f_k)) df / 2``
        in g for ``irfft(norm="forward")``, G the spectral density matrix
        (``G_ab = E[conj(A) B]``).  Lines are ``H_k z_k`` with ``z_k`` C
        independent random-phase sources (see :mod:`vibsynth.generate.channels`).
    modulation : BurstEnvelope or None
        The burst model's envelope (:mod:`vibsynth.generate.modulation`): the
        Gaussian stream is multiplied by it before the spill-over high-pass.
        Not with a transform, nor with velocity/displacement columns.

    Examples
    --------
    >>> plan = SynthesisPlan(rate_hz=8.0, total_samples=8, frame_length=8, line_spectrum=[0, 1, 1, 1, 0],
    ...                      mode="periodic")
    >>> plan.resolution_hz, plan.line_variance
    (1.0, 3.0)

    References
    ----------
    See the module docstring.
    """

    rate_hz: float
    total_samples: int
    frame_length: int
    line_spectrum: np.ndarray
    mode: str = "overlap-add"
    amplitude: str = "fixed"
    transform: MemorylessTransform | None = None
    output_scale: float | None = None
    quantities: tuple = ("acceleration",)
    ramp_in_samples: int = 0
    ramp_out_samples: int = 0
    rest_taper_samples: int = 0
    warnings: tuple = field(default=())
    spill_highpass: SpillHighpass | None = None
    memory_budget_bytes: int = DEFAULT_MEMORY_BUDGET_BYTES
    channels: tuple = ()
    channel_factors: np.ndarray | None = None
    modulation: object = None

    def __post_init__(self):
        if self.modulation is not None and (self.transform is not None or len(tuple(self.quantities)) > 1):
            raise InputError(
                "the burst model modulates a Gaussian acceleration stream: it cannot follow a memoryless transform "
                "(skewness or clip) nor make velocity/displacement columns; drop one of them",
                "kurtosis_model",
            )
        object.__setattr__(self, "mode", _check_choice(self.mode, MODES, "mode"))
        object.__setattr__(self, "amplitude", _check_choice(self.amplitude, AMPLITUDE_MODES, "amplitude"))
        rate = float(self.rate_hz)
        if not (math.isfinite(rate) and rate > 0):
            raise InputError(f"rate {self.rate_hz!r} Hz must be a finite number > 0", "rate")
        total, frame = int(self.total_samples), int(self.frame_length)
        if total < 2:
            raise InputError(f"a record needs at least 2 samples, got {total}", "duration")
        if self.mode == "periodic" and frame != total:
            raise InputError(f"a periodic plan's frame length ({frame}) must equal its record length ({total})", "frame_length")
        if self.mode == "overlap-add" and (frame < 2 or frame % 2):
            raise InputError(f"an overlap-add frame length must be even and >= 2, got {frame}", "frame_length")
        if self.transform is not None and not isinstance(self.transform, MemorylessTransform):
            raise InputError(
                f"transform {self.transform!r} must implement vibsynth.transforms.base.MemorylessTransform "
                "(apply, moments, output_variance, hermite_coefficients, series_order, peak_limit)",
                "transform",
            )
        spectrum = _clean_line_spectrum(self.line_spectrum, frame)
        if not np.sum(spectrum) > 0:
            raise InputError("no frequency line with a non-zero spectrum falls on the frame grid; use a finer resolution", "line_spectrum")
        spectrum.setflags(write=False)
        quantities = tuple(self.quantities)
        if not quantities or len(set(quantities)) != len(quantities):
            raise InputError(f"quantities {quantities!r} must be a non-empty list without repeats", "quantities")
        for quantity in quantities:
            _check_choice(quantity, tuple(QUANTITY_UNITS), "quantities")
        if quantities != ("acceleration",) and quantities[0] != "acceleration":
            raise InputError("the first quantity must be acceleration", "quantities")
        if len(quantities) > 1 and (self.mode != "periodic" or self.transform is not None):
            raise InputError(
                "velocity/displacement columns are integrated from the Gaussian lines of one periodic record and cannot "
                "follow a non-Gaussian (kurtosis, skewness or clip) acceleration; drop those columns or the "
                "non-Gaussian options",
                "quantities",
            )
        ramp_in, ramp_out = int(self.ramp_in_samples), int(self.ramp_out_samples)
        if ramp_in < 0 or ramp_out < 0 or ramp_in + ramp_out > total:
            raise InputError(
                f"ramps of {ramp_in} + {ramp_out} samples do not fit a record of {total} samples", "ramp"
            )
        taper = int(self.rest_taper_samples)
        if taper and (len(quantities) == 1 or taper < 2 or 2 * taper > total):
            raise InputError(
                f"a rest taper of {taper} samples needs velocity/displacement columns and at least 2 samples, "
                f"twice of it within the {total} samples", "rest_taper")
        object.__setattr__(self, "rest_taper_samples", taper)
        scale = self.output_scale
        if scale is None:
            scale = math.sqrt(float(np.sum(spectrum)) * rate / frame)
        scale = float(scale)
        if not (math.isfinite(scale) and scale > 0):
            raise InputError(f"output scale {self.output_scale!r} must be a finite number > 0", "output_scale")
        object.__setattr__(self, "rate_hz", rate)
        object.__setattr__(self, "total_samples", total)
        object.__setattr__(self, "frame_length", frame)
        object.__setattr__(self, "line_spectrum", spectrum)
        object.__setattr__(self, "output_scale", scale)
        object.__setattr__(self, "quantities", quantities)
        object.__setattr__(self, "ramp_in_samples", ramp_in)
        object.__setattr__(self, "ramp_out_samples", ramp_out)
        object.__setattr__(self, "warnings", tuple(self.warnings))
        self._check_channels(quantities)
        highpass = self.spill_highpass
        if highpass is not None:
            if (self.mode == "overlap-add") != (highpass.half_length is not None):
                raise InputError(
                    "a spill-over FIR high-pass applies to overlap-add plans, the frequency-domain one to periodic plans",
                    "spill_highpass",
                )
            if len(quantities) > 1:
                raise InputError("velocity and displacement columns cannot follow a high-passed record", "spill_highpass")
        if highpass is not None and self.mode == "overlap-add":
            if highpass.block_samples % self.hop or highpass.rate_hz != rate:
                raise InputError(
                    f"the high-pass block ({highpass.block_samples} samples at {highpass.rate_hz:g} Hz) must be a "
                    f"multiple of the hop ({self.hop}) at the plan's rate ({rate:g} Hz)",
                    "spill_highpass",
                )

    def _check_channels(self, quantities) -> None:
        names = tuple(str(n) for n in self.channels)
        object.__setattr__(self, "channels", names)
        factors = self.channel_factors
        if factors is None:
            if names:
                raise InputError("a multi-channel plan needs its channel factors", "channel_factors")
            return
        factors = np.array(factors, dtype=np.complex128)
        lo, hi = _band_of(np.asarray(self.line_spectrum))
        if len(names) < 2 or factors.shape != (hi - lo, len(names), len(names)):
            raise InputError(
                f"channel factors of shape {factors.shape} do not match {len(names)} channels and {hi - lo} band lines",
                "channel_factors",
            )
        if self.transform is not None:
            raise InputError(
                "non-Gaussian drives (kurtosis, skewness, clip) are not implemented for multi-channel profiles; "
                "drop those options or generate each channel alone", "kurtosis",
            )
        if quantities != ("acceleration",):
            raise InputError("a multi-channel record holds acceleration only (one column per channel)", "quantities")
        factors.setflags(write=False)
        object.__setattr__(self, "channel_factors", factors)

    # ---------------------------------------------------------- geometry
    @property
    def column_count(self) -> int:
        """Columns of the record: channels of a multi-channel record, else quantities."""
        return len(self.channels) if self.channels else len(self.quantities)

    @property
    def resolution_hz(self) -> float:
        """Line spacing of the frame grid, ``rate_hz / frame_length`` (Hz)."""
        return self.rate_hz / self.frame_length

    @property
    def frequencies_hz(self) -> np.ndarray:
        """Frame grid ``k rate_hz / N`` for ``k = 0 .. N//2`` (Hz)."""
        return np.arange(self.frame_length // 2 + 1) * self.resolution_hz

    @property
    def duration_s(self) -> float:
        """Record duration ``total_samples / rate_hz`` (s)."""
        return self.total_samples / self.rate_hz

    @property
    def hop(self) -> int:
        """Overlap-add hop, N/2 samples."""
        return self.frame_length // 2

    @property
    def line_variance(self) -> float:
        """``sum S(f_k) df`` over the frame grid, in U^2 (the Gaussian record's variance)."""
        return float(np.sum(self.line_spectrum)) * self.resolution_hz

    @property
    def frame_count(self) -> int:
        """Number of frames: 1 (periodic) or ``ceil(total / hop) + 1`` (overlap-add)."""
        if self.mode == "periodic":
            return 1
        return -(-self.total_samples // self.hop) + 1

    @property
    def steady_range(self) -> tuple[int, int]:
        """Sample range ``[start, stop)`` between the ramps."""
        return self.ramp_in_samples, self.total_samples - self.ramp_out_samples

    @cached_property
    def _stream_amplitudes(self) -> np.ndarray:
        # Magnitudes for irfft(norm="forward"): sqrt(S_k / (2 sum S)) gives a unit-variance
        # stream; without a transform the physical scale is folded in as well.
        factor = 1.0 / (2.0 * float(np.sum(self.line_spectrum)))
        if self.transform is None:
            factor *= self.output_scale**2
        amplitudes = self.line_spectrum * factor
        np.sqrt(amplitudes, out=amplitudes)
        return amplitudes

    @cached_property
    def _band(self) -> tuple[int, int]:
        return _band_of(self.line_spectrum)

    @cached_property
    def _window(self) -> np.ndarray:
        return sine_window(self.frame_length)


def parse_quantities(quantities) -> tuple[tuple[str, ...], bool]:
    """Quantity names from a string (``"accel,velocity"``) or a sequence.

    Parameters
    ----------
    quantities : str or sequence of str
        Names or short forms (accel/acc, vel, disp).

    Returns
    -------
    (tuple of str, bool)
        The full names, and whether a single name was given as a string
        (the library then returns 1-D arrays).

    Examples
    --------
    >>> parse_quantities("accel,vel")
    (('acceleration', 'velocity'), False)

    References
    ----------
    None (argument parsing).
    """
    aliases = {"accel": "acceleration", "acc": "acceleration", "vel": "velocity", "disp": "displacement"}
    single = isinstance(quantities, str) and "," not in quantities
    items = [quantities] if single else (quantities.split(",") if isinstance(quantities, str) else list(quantities))
    names = []
    for item in items:
        name = str(item).strip().lower()
        name = aliases.get(name, name)
        if name not in QUANTITY_UNITS:
            raise InputError(
                f"quantity {item!r} is not one of acceleration, velocity, displacement", "quantities"
            )
        names.append(name)
    return tuple(names), single


def plan_synthesis(profile: AsdProfile, duration_s: float, rate_hz: float, **options) -> SynthesisPlan:
    """Check the request against the profile and plan the record (warnings as :class:`VibsynthWarning`).

    Parameters
    ----------
    profile : AsdProfile
        The target (g^2/Hz).
    duration_s : float
        Record duration in s (rounded to whole samples).
    rate_hz : float
        Sample rate in Hz (> 2 x the top frequency).
    **options
        ``amplitude``, ``resolution_hz``, ``loop``, ``ramp_in_s``,
        ``ramp_out_s``, ``quantities``, ``memory_budget_bytes``, ``spectrum``,
        ``transform``, ``output_scale``, ``spill_highpass``: see
        :func:`make_plan`.

    Returns
    -------
    SynthesisPlan

    Warns
    -----
    VibsynthWarning
        Each message of ``plan.warnings`` (e.g. a rate below 2.56 x the top frequency).

    Examples
    --------
    >>> profile = AsdProfile([20, 2000], [0.01, 0.01])
    >>> plan_synthesis(profile, 10.0, 5120.0, memory_budget_bytes=1).mode
    'overlap-add'

    References
    ----------
    See :func:`make_plan`.
    """
    plan = make_plan(profile, duration_s, rate_hz, **options)
    warn_all(plan.warnings, stacklevel=3)
    return plan


def warn_all(messages, stacklevel: int = 2) -> None:
    """Issue each message as a :class:`vibsynth.errors.VibsynthWarning`.

    Parameters
    ----------
    messages : iterable of str
        One-line advisory messages.
    stacklevel : int
        As for :func:`warnings.warn`, counted from the caller of this function
        (2: the caller's caller).

    Examples
    --------
    >>> import warnings
    >>> with warnings.catch_warnings(record=True) as caught:
    ...     warnings.simplefilter("always")
    ...     warn_all(["rate is thin"])
    >>> caught[0].category.__name__, str(caught[0].message)
    ('VibsynthWarning', 'rate is thin')

    References
    ----------
    Python :mod:`warnings`.
    """
    for message in messages:
        _warnings.warn(message, VibsynthWarning, stacklevel=stacklevel + 1)


def make_plan(
    profile: AsdProfile,
    duration_s: float,
    rate_hz: float,
    *,
    amplitude: str = "fixed",
    resolution_hz: float | None = None,
    loop: bool = False,
    ramp_in_s: float = 0.0,
    ramp_out_s: float = 0.0,
    quantities=("acceleration",),
    memory_budget_bytes: int = DEFAULT_MEMORY_BUDGET_BYTES,
    spectrum: Callable[[np.ndarray], np.ndarray] | None = None,
    transform: MemorylessTransform | None = None,
    output_scale: float | None = None,
    spill_highpass: bool = True,
    rest_taper_s: float | None = None,
    channel_count: int = 1,
) -> SynthesisPlan:
    """Check the request against the profile and plan the record (warnings kept in ``plan.warnings`` only).

    Parameters
    ----------
    profile : AsdProfile
        The target (g^2/Hz); sets the band, the resolution and, unless
        ``spectrum`` is given, the line spectrum.
    duration_s : float
        Record duration in s (rounded to whole samples).
    rate_hz : float
        Sample rate in Hz; must exceed twice the profile's top frequency
        (a rate below 2.56 times it adds a warning).
    amplitude : {"fixed", "rayleigh"}
        See :func:`synthesize_frame`.
    resolution_hz : float, optional
        Largest line spacing in Hz (default :func:`profile_resolution_hz`).
        Sets the overlap-add frame length and the shortest record (1/resolution).
    loop : bool
        Make one periodic record that repeats seamlessly (no ramps).
    ramp_in_s, ramp_out_s : float
        Raised-cosine fade-in and fade-out in s (0: none).
    quantities : sequence of str or str
        Columns: acceleration (g), velocity (m/s), displacement (m);
        acceleration first.
    memory_budget_bytes : int
        Working memory a periodic record may use (bytes, default 256 MiB);
        longer records use overlap-add.  Only this option decides the mode: a
        periodic record larger than half this machine's memory is refused, not
        switched.
    spectrum : callable, optional
        One-sided density (U^2/Hz) as a function of frequency (Hz) to sample on
        the frame grid instead of ``profile.evaluate`` (e.g. a compensated
        Gaussian spectrum for a non-Gaussian drive).
    transform : MemorylessTransform, optional
        Memoryless transform of the unit-variance Gaussian stream (see
        :class:`SynthesisPlan`); a transformed periodic record is budgeted at
        :data:`PERIODIC_BYTES_PER_SAMPLE_TRANSFORMED` per sample and gets the
        frequency-domain spill-over high-pass.  The spectrum is used as given:
        :func:`vibsynth.generate.design.nongaussian_plan` pre-compensates it.
    output_scale : float, optional
        Physical g per unit of the transformed stream (default ``sqrt(sum S df)``).
    spill_highpass : bool
        Overlap-add plans (and transformed periodic ones): high-pass the stream below the band
        (:class:`SpillHighpass`, default True) so that the sine window's
        leakage does not reach 0 Hz (where double integration would turn it
        into displacement far beyond the profile's).  False gives the plain
        windowed sum of frames.
    rest_taper_s : float, optional
        Velocity/displacement columns: the displacement taper at each end, s,
        that brings all three columns to rest (default
        :func:`default_rest_taper_s`; 0: none, the columns then start where the
        random phases put them).  A ramp given with these columns becomes the
        taper (the acceleration is then not faded separately).  Not with a loop.
    channel_count : int
        Channels of a multi-channel record (for the memory estimate only;
        :func:`vibsynth.generate.channels.make_channel_plan` adds the channels).

    Returns
    -------
    SynthesisPlan

    Raises
    ------
    InputError
        Rate at or below twice the top frequency, a record shorter than one
        frame at the needed resolution (the message names the minimum), ramps
        longer than the record, a loop or velocity/displacement record beyond
        the memory budget (the message names the longest that fits), a
        periodic record this machine cannot hold.

    Warns
    -----
    VibsynthWarning
        A rate below :data:`RATE_MARGIN_FACTOR` x the top frequency, a
        resolution coarser than the profile needs, frames too short for the
        spill-over high-pass (also kept in ``plan.warnings``).

    Examples
    --------
    >>> profile = AsdProfile([20, 2000], [0.01, 0.01])
    >>> plan = plan_synthesis(profile, 10.0, 5120.0)
    >>> plan.mode, plan.total_samples
    ('periodic', 51200)

    References
    ----------
    Nyquist-Shannon sampling theorem (rate > 2 f_max); DFT resolution
    ``df = fs / N`` (Bendat & Piersol 2010).
    """
    names, _ = parse_quantities(quantities)
    rate = _positive(rate_hz, "rate", "Hz")
    duration = _positive(duration_s, "duration", "s")
    top = profile.frequency_max_hz
    warnings: list[str] = []
    if rate <= 2.0 * top:
        raise InputError(
            f"rate {rate:g} Hz must exceed twice the profile's top frequency (2 x {top:g} = {2 * top:g} Hz); "
            f"use at least {RATE_MARGIN_FACTOR:g} x {top:g} = {RATE_MARGIN_FACTOR * top:g} Hz",
            "rate",
        )
    if rate < RATE_MARGIN_FACTOR * top:
        warnings.append(
            f"rate {rate:g} Hz is below {RATE_MARGIN_FACTOR:g} x the top frequency ({RATE_MARGIN_FACTOR * top:g} Hz); "
            "anti-alias filters usually need that margin (common practice)"
        )
    needed = profile_resolution_hz(profile)
    if resolution_hz is None:
        resolution = needed
    else:
        resolution = _positive(resolution_hz, "resolution", "Hz")
        if resolution > needed * (1 + 1e-9):
            warnings.append(
                f"resolution {resolution:g} Hz is coarser than the {needed:.4g} Hz the profile needs "
                "(lowest frequency and narrowest segment / 8); low-frequency and narrow features may be smeared"
            )
    samples_wanted = duration * rate
    if not (math.isfinite(samples_wanted) and samples_wanted <= MAX_RECORD_SAMPLES):
        raise InputError(
            f"duration {duration:g} s at {rate:g} Hz is {samples_wanted:.3g} samples, beyond the "
            f"{MAX_RECORD_SAMPLES:.0e} samples one record may hold; split the test into shorter records",
            "duration",
        )
    frames_wanted = rate / resolution
    if not (math.isfinite(frames_wanted) and frames_wanted <= MAX_RECORD_SAMPLES):
        raise InputError(
            f"resolution {resolution:g} Hz at {rate:g} Hz needs frames of {frames_wanted:.3g} samples, beyond the "
            f"{MAX_RECORD_SAMPLES:.0e} samples one record may hold; ask for a coarser resolution",
            "resolution",
        )
    total = int(round(samples_wanted))
    minimum = math.ceil(frames_wanted - 1e-9)
    if total < minimum:
        raise InputError(
            f"duration {duration:g} s is too short for one frame at {resolution:.4g} Hz resolution "
            f"(lowest frequency {profile.frequency_min_hz:g} Hz); give at least {minimum / rate:.6g} s",
            "duration",
        )
    ramp_in = _ramp_samples(ramp_in_s, rate, "ramp")
    ramp_out = _ramp_samples(ramp_out_s, rate, "ramp")
    if loop and (ramp_in or ramp_out):
        raise InputError("a looped record repeats seamlessly and cannot have ramps; drop the ramp or the loop", "ramp")
    taper = 0
    if len(names) > 1:
        if ramp_in or ramp_out:  # with these columns the ramp is the taper: the columns stay exact derivatives
            if rest_taper_s is not None and _ramp_samples(rest_taper_s, rate, "rest_taper") != max(ramp_in, ramp_out):
                raise InputError("with velocity/displacement columns the ramp is the rest taper; give one of them",
                                 "rest_taper")
            taper, ramp_in, ramp_out = max(ramp_in, ramp_out), 0, 0
        elif loop:
            if rest_taper_s:
                raise InputError("a looped record repeats seamlessly and cannot come to rest; drop the rest taper "
                                 "or the loop", "rest_taper")
        elif rest_taper_s is None:
            taper = int(round(default_rest_taper_s(profile) * rate))
        else:
            taper = _ramp_samples(rest_taper_s, rate, "rest_taper")
        if taper and (taper < 2 or 2 * taper > total):
            raise InputError(
                f"a rest taper of {taper / rate:g} s at each end must be at least 2 samples and fit the "
                f"{total / rate:g} s record twice; give at most {total // 2 / rate:g} s", "rest_taper")
    elif rest_taper_s:
        raise InputError("a rest taper applies to velocity/displacement columns; add them or drop the taper",
                         "rest_taper")
    if ramp_in + ramp_out > total:
        raise InputError(
            f"ramps of {ramp_in / rate:g} s + {ramp_out / rate:g} s are longer than the {total / rate:g} s record", "ramp"
        )
    try:
        budget = float(memory_budget_bytes)
    except (TypeError, ValueError, OverflowError):
        raise InputError(f"memory_budget_bytes {memory_budget_bytes!r} must be a number of bytes > 0",
                         "memory_budget_bytes") from None
    if not budget > 0:  # NaN too; an infinite budget means "periodic whenever the machine holds it"
        raise InputError(f"memory_budget_bytes {memory_budget_bytes!r} must be > 0", "memory_budget_bytes")
    budget = int(budget) if math.isfinite(budget) else budget
    transformed = transform is not None
    needs_periodic = loop or len(names) > 1
    periodic_bytes = periodic_memory_bytes(total, len(names), transformed, channel_count)
    fits = periodic_bytes <= budget
    if needs_periodic and not fits:
        longest = int(budget // periodic_memory_bytes(1, len(names), transformed, channel_count))
        why = "a looped record" if loop else "velocity/displacement columns"
        raise InputError(
            f"{why} need the whole record in memory: {total} samples need about "
            f"{periodic_bytes / 2**20:.0f} MB, above the "
            f"{budget / 2**20:.0f} MB budget; give at most {longest / rate:.6g} s or a larger memory budget",
            "duration",
        )
    if fits or needs_periodic:
        mode, frame = "periodic", total
    else:
        mode, frame = "overlap-add", choose_frame_length(rate, resolution)
        if frame > total:  # a record shorter than one frame (tiny budgets): one periodic record
            mode, frame = "periodic", total
        if frame > MAX_FRAME_LENGTH:
            raise InputError(
                f"a frame of {frame} samples ({rate:g} Hz / {resolution:.4g} Hz) is longer than "
                f"{MAX_FRAME_LENGTH} samples; use a coarser resolution (at least {rate / MAX_FRAME_LENGTH:.4g} Hz)",
                "resolution",
            )
    if mode == "periodic":
        _memory.check_machine_holds(periodic_bytes, total, rate, needs_periodic)
    df = rate / frame
    lines = frame // 2 + 1
    if spectrum is None:
        # Only lines inside the band are non-zero: evaluate those (plus a line of margin).
        lo = max(int(math.floor(profile.frequency_min_hz / df)) - 1, 0)
        hi = min(int(math.ceil(top / df)) + 2, lines)
        values = np.zeros(lines)
        values[lo:hi] = profile.line_spectrum(df, np.arange(lo, hi))
    else:
        values = np.asarray(spectrum(np.arange(lines) * df), dtype=float)
        if values.shape != (lines,):
            raise InputError(f"spectrum returned shape {values.shape}; expected {(lines,)}", "spectrum")
    first_inside = math.ceil(profile.frequency_min_hz / df - 1e-9)
    if first_inside * df > top or first_inside >= lines - (frame % 2 == 0):
        raise InputError(
            f"no frequency line of the {rate / frame:.4g} Hz grid falls inside the band "
            f"{profile.frequency_min_hz:g}-{top:g} Hz; use a finer resolution",
            "resolution",
        )
    plan = SynthesisPlan(
        rate_hz=rate,
        total_samples=total,
        frame_length=frame,
        line_spectrum=values,
        mode=mode,
        amplitude=amplitude,
        transform=transform,
        output_scale=output_scale,
        quantities=names,
        ramp_in_samples=ramp_in,
        ramp_out_samples=ramp_out,
        rest_taper_samples=taper,
        warnings=tuple(warnings),
        memory_budget_bytes=budget,
    )
    if spill_highpass and mode == "overlap-add":
        highpass = SpillHighpass.for_plan(plan, profile.frequency_min_hz)
        if highpass is None:
            warnings.append(
                f"the frames are too short to filter the overlap-add window's leakage below "
                f"{profile.frequency_min_hz:g} Hz: the record asks for more displacement than the profile; "
                "use the default resolution"
            )
        plan = dataclasses.replace(plan, spill_highpass=highpass, warnings=tuple(warnings))
    elif spill_highpass and transformed:
        plan = dataclasses.replace(plan, spill_highpass=SpillHighpass.for_plan(plan, profile.frequency_min_hz))
    return plan


#: Default rest taper: this many periods of the profile's lowest frequency at each end ...
REST_TAPER_PERIODS = 4.0


def default_rest_taper_s(profile: AsdProfile) -> float:
    """Default length of the rest taper at each end, s: :data:`REST_TAPER_PERIODS` periods of the lowest frequency.

    Long enough that the taper's own terms (``2 w' v + w'' x``, of order
    ``v / T`` and ``x / T^2``) stay well below the acceleration of the band's
    lowest frequency, short enough to leave most of a record untouched.

    Examples
    --------
    >>> default_rest_taper_s(AsdProfile([20, 2000], [0.01, 0.01]))
    0.2

    References
    ----------
    Common practice, no source (a taper of a few periods of the lowest frequency of interest).
    """
    return REST_TAPER_PERIODS / profile.frequency_min_hz


def _positive(value, what: str, unit: str) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{what} {value!r} must be a number > 0 ({unit})", what) from None
    if not (math.isfinite(number) and number > 0):
        raise InputError(f"{what} {value!r} {unit} must be a finite number > 0", what)
    return number


def _ramp_samples(ramp_s, rate: float, what: str) -> int:
    try:
        seconds = float(ramp_s or 0.0)
    except (TypeError, ValueError):
        raise InputError(f"{what} {ramp_s!r} must be a number of seconds >= 0", what) from None
    if not (math.isfinite(seconds) and seconds >= 0):
        raise InputError(f"{what} {ramp_s!r} s must be a finite number >= 0", what)
    if not seconds * rate <= MAX_RECORD_SAMPLES:
        raise InputError(f"{what} {seconds:g} s is longer than any record can be", what)
    return int(round(seconds * rate))




def rig_limit_check(profile: AsdProfile, stroke_limit_mm: float | None = None, velocity_limit_m_s: float | None = None) -> None:
    """Refuse a profile whose 3-sigma displacement or velocity exceeds a rig's limits.

    Parameters
    ----------
    profile : AsdProfile
        Target ASD in g^2/Hz.
    stroke_limit_mm : float, optional
        Shaker stroke, peak-to-peak, in mm; compared with 6 x displacement RMS.
    velocity_limit_m_s : float, optional
        Shaker velocity limit (peak) in m/s; compared with 3 x velocity RMS.

    Raises
    ------
    InputError
        Naming the need, the limit and by how much it is exceeded.

    Examples
    --------
    >>> rig_limit_check(AsdProfile([20, 2000], [0.01, 0.01]), stroke_limit_mm=50.0)

    References
    ----------
    Velocity and displacement ASD ``S_a g0^2/(2 pi f)^2`` and
    ``S_a g0^2/(2 pi f)^4`` (Bendat & Piersol 2010); the 3-sigma margin is
    common practice (no source).
    """
    if stroke_limit_mm is not None:
        limit = _positive(stroke_limit_mm, "stroke_limit_mm", "mm")
        need = profile.displacement_peak_to_peak_3sigma_m * 1e3
        if need > limit:
            raise InputError(
                f"the profile needs {need:.3g} mm peak-to-peak displacement (3 sigma), "
                f"{need - limit:.3g} mm ({need / limit:.3g} x the limit) beyond the {limit:g} mm stroke limit; "
                "refusing to write the drive",
                "stroke_limit_mm",
            )
    if velocity_limit_m_s is not None:
        limit = _positive(velocity_limit_m_s, "velocity_limit_m_s", "m/s")
        need = 3.0 * profile.velocity_rms_m_s
        if need > limit:
            raise InputError(
                f"the profile needs {need:.3g} m/s peak velocity (3 sigma), "
                f"{need - limit:.3g} m/s ({need / limit:.3g} x the limit) beyond the {limit:g} m/s velocity limit; "
                "refusing to write the drive",
                "velocity_limit_m_s",
            )


__all__ = [
    "DEFAULT_MEMORY_BUDGET_BYTES",
    "MODES",
    "QUANTITY_UNITS",
    "RATE_MARGIN_FACTOR",
    "REST_TAPER_PERIODS",
    "default_rest_taper_s",
    "SynthesisPlan",
    "choose_frame_length",
    "make_plan",
    "parse_quantities",
    "periodic_memory_bytes",
    "plan_synthesis",
    "profile_resolution_hz",
    "rig_limit_check",
    "warn_all",
]
