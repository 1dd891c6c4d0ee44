"""Checks and rules shared by the library and the command line: sample rate, duration, frequency band.

One place for each rule a request must obey before any sample is made, so that
``generate``, ``run``, ``peaks`` and ``verify`` (and Python callers) refuse the
same values with the same words.  This module imports nothing heavier than the
standard library (no numpy): the command line uses it while parsing options,
before it decides whether any computation is needed.

Errors are :class:`vibsynth.errors.InputError` naming the *parameter*
(``rate_hz``, ``duration_s``, ``band_hz``); the command line maps parameter
names to its option names.
"""

from __future__ import annotations

import math
import numbers

from vibsynth.errors import InputError

#: Sample-rate multiple of the top frequency that leaves an anti-alias filter room
#: (common practice, no source).
RATE_MARGIN_FACTOR = 2.56

#: Sample rates offered by default (Hz): the usual rates of acquisition systems and
#: sound devices (common practice, no source).
COMMON_RATES_HZ = (1024, 2048, 4096, 5120, 8192, 10240, 12800, 16384, 20480, 25600, 32768, 51200, 65536, 102400)

#: Line-amplitude models of the generator.
AMPLITUDE_MODES = ("fixed", "rayleigh")

#: Quantities a drive file can hold, with the unit of their column.
from vibsynth.io.quantities import QUANTITY_UNITS  # noqa: E402  (the one units table; no numpy)

#: Short forms accepted for the quantities.
QUANTITY_ALIASES = {"accel": "acceleration", "acc": "acceleration", "vel": "velocity", "disp": "displacement"}

#: Monte-Carlo records per row of a peak report by default.
DEFAULT_PEAK_RECORDS = 20

__all__ = [
    "AMPLITUDE_MODES",
    "COMMON_RATES_HZ",
    "DEFAULT_PEAK_RECORDS",
    "QUANTITY_ALIASES",
    "QUANTITY_UNITS",
    "RATE_MARGIN_FACTOR",
    "check_band_hz",
    "check_duration_s",
    "check_finite",
    "check_rate_hz",
    "default_rate_hz",
    "parse_quantity_names",
    "rate_margin_warning",
]


def check_finite(value, name: str, unit: str = "", *, positive: bool = False) -> float:
    """A real number that is finite (and > 0 when ``positive``), as float.

    Parameters
    ----------
    value : real
        The number to check (bools are refused).
    name : str
        Parameter name used in the error (e.g. ``"rate_hz"``).
    unit : str
        Unit shown after the value in the error (e.g. ``"Hz"``).
    positive : bool
        Also require ``value > 0``.

    Returns
    -------
    float

    Raises
    ------
    InputError
        Naming ``name``: not a number, not finite, or not > 0.

    Examples
    --------
    >>> check_finite(2.5, "duration_s", "s", positive=True)
    2.5

    References
    ----------
    IEEE 754 (nan and infinities are not finite numbers).
    """
    suffix = f" {unit}" if unit else ""
    if isinstance(value, bool):
        raise InputError(f"{name} {value!r} must be a number{suffix and ' (' + unit + ')'}", name)
    if not isinstance(value, numbers.Real):
        try:
            number = float(value)
        except (TypeError, ValueError):
            raise InputError(f"{name} {value!r} must be a number{suffix and ' (' + unit + ')'}", name) from None
    else:
        number = float(value)
    if not math.isfinite(number):
        raise InputError(f"{name} {value!r}{suffix} must be a finite number", name)
    if positive and not number > 0:
        raise InputError(f"{name} {number:g}{suffix} must be > 0", name)
    return number


def check_rate_hz(rate_hz, top_frequency_hz: float | None = None, name: str = "rate_hz") -> float:
    """A sample rate (Hz) that is finite, positive and above twice the top frequency.

    Parameters
    ----------
    rate_hz : real
        Sample rate, Hz.
    top_frequency_hz : float, optional
        Highest frequency the record must hold, Hz; the rate must exceed twice it.
    name : str
        Parameter name used in the error.

    Returns
    -------
    float
        The rate, Hz.

    Raises
    ------
    InputError
        Naming ``name``; for a rate at or below twice the top frequency the
        message gives the rate to use (2.56 x the top frequency).

    Examples
    --------
    >>> check_rate_hz(5120, 2000.0)
    5120.0

    References
    ----------
    Nyquist-Shannon sampling theorem (rate > 2 f_max); the 2.56 margin is
    common practice (no source).
    """
    rate = check_finite(rate_hz, name, "Hz", positive=True)
    if top_frequency_hz is not None:
        top = float(top_frequency_hz)
        if rate <= 2.0 * top:
            raise InputError(
                f"rate {rate:g} Hz must exceed twice the profile's top frequency (2 x {top:g} = {2 * top:g} Hz); "
                f"use at least {RATE_MARGIN_FACTOR:g} x {top:g} = {RATE_MARGIN_FACTOR * top:g} Hz",
                name,
            )
    return rate


def rate_margin_warning(rate_hz: float, top_frequency_hz: float) -> str | None:
    """The warning for a rate under 2.56 x the top frequency, or None.

    Parameters
    ----------
    rate_hz : float
        Sample rate, Hz.
    top_frequency_hz : float
        Highest frequency of the profile, Hz.

    Returns
    -------
    str or None

    Examples
    --------
    >>> rate_margin_warning(5120, 2000.0) is None
    True

    References
    ----------
    The 2.56 margin for anti-alias filters is common practice (no source).
    """
    top = float(top_frequency_hz)
    if float(rate_hz) < RATE_MARGIN_FACTOR * top:
        return (f"rate {float(rate_hz):g} Hz is below {RATE_MARGIN_FACTOR:g} x the top frequency "
                f"({RATE_MARGIN_FACTOR * top:g} Hz); anti-alias filters usually need that margin (common practice)")
    return None


def default_rate_hz(top_frequency_hz: float) -> float:
    """The default sample rate: the smallest common rate at least 2.56 x the top frequency.

    Beyond the table (above 102400 Hz) the next power of two at least
    2.56 x the top frequency.

    Parameters
    ----------
    top_frequency_hz : float
        Highest frequency of the profile, Hz (finite, > 0).

    Returns
    -------
    float
        Sample rate, Hz.

    Examples
    --------
    >>> default_rate_hz(2000.0)
    5120.0
    >>> default_rate_hz(500.0)
    2048.0

    References
    ----------
    2.56 x the top frequency is common practice for anti-alias margins (no
    source); the table holds the usual rates of acquisition systems.
    """
    top = check_finite(top_frequency_hz, "top_frequency_hz", "Hz", positive=True)
    needed = RATE_MARGIN_FACTOR * top
    for rate in COMMON_RATES_HZ:
        if rate >= needed:
            return float(rate)
    return float(2 ** math.ceil(math.log2(needed)))


def check_duration_s(duration_s, name: str = "duration_s") -> float:
    """A duration (s) that is a finite number > 0.

    Parameters
    ----------
    duration_s : real
        Duration, s.
    name : str
        Parameter name used in the error.

    Returns
    -------
    float

    Raises
    ------
    InputError
        Naming ``name``.

    Examples
    --------
    >>> check_duration_s(60)
    60.0

    References
    ----------
    None (argument checking).
    """
    return check_finite(duration_s, name, "s", positive=True)


def check_band_hz(low_hz, high_hz, name: str = "band_hz") -> tuple[float, float]:
    """A frequency band (Hz): finite, 0 < low < high.

    Parameters
    ----------
    low_hz, high_hz : real
        Band edges, Hz.
    name : str
        Parameter name used in the error.

    Returns
    -------
    (float, float)

    Raises
    ------
    InputError
        Naming ``name``.

    Examples
    --------
    >>> check_band_hz(20, 2000)
    (20.0, 2000.0)

    References
    ----------
    None (argument checking).
    """
    low = check_finite(low_hz, name, "Hz", positive=True)
    high = check_finite(high_hz, name, "Hz", positive=True)
    if not low < high:
        raise InputError(f"band {low:g}-{high:g} Hz must have its lower edge below its upper edge", name)
    return low, high


def parse_quantity_names(text) -> tuple[str, ...]:
    """Quantity names from ``"accel,velocity"`` (or a sequence), acceleration first.

    Parameters
    ----------
    text : str or sequence of str
        Names or short forms (accel/acc, vel, disp), comma separated.

    Returns
    -------
    tuple of str
        Full names in the order given; acceleration is always the first column.

    Raises
    ------
    InputError
        Naming ``quantities`` and the allowed names.

    Examples
    --------
    >>> parse_quantity_names("velocity,disp")
    ('acceleration', 'velocity', 'displacement')

    References
    ----------
    None (argument parsing).
    """
    items = text.split(",") if isinstance(text, str) else list(text)
    names: list[str] = []
    for item in items:
        name = str(item).strip().lower()
        name = QUANTITY_ALIASES.get(name, name)
        if name not in QUANTITY_UNITS:
            raise InputError(f"quantity {str(item).strip()!r} is not one of acceleration, velocity, displacement",
                             "quantities")
        names.append(name)
    return ("acceleration",) + tuple(name for name in names if name != "acceleration")
