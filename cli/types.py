"""Click parameter types of the command line: every value is checked while the options are parsed.

Finite numbers (nan and +/-inf refused), tolerance bands in dB (``3`` or
``-2,3``), quantity lists (``accel,velocity``) and PROFILE arguments (a file,
a bundled preset with shell completion of its name, or ``-`` for stdin).
A refused value ends as one line naming the option, exit status 2.  Nothing
here imports numpy.
"""

from __future__ import annotations

import math
import os

import click

from vibsynth.errors import InputError


class FiniteFloat(click.types.FloatParamType):
    """A float that is a finite number (click's float accepts ``nan`` and ``inf``)."""

    name = "float"

    def convert(self, value, param, ctx):
        number = super().convert(value, param, ctx)
        if not math.isfinite(number):
            self.fail(f"{value!r} is not a finite number", param, ctx)
        return number


class FiniteFloatRange(click.FloatRange):
    """``click.FloatRange`` that also refuses nan and +/-inf (its metavar and range text unchanged)."""

    def convert(self, value, param, ctx):
        try:
            number = float(value)
        except (TypeError, ValueError):
            number = None
        if number is not None and not math.isfinite(number):
            self.fail(f"{value!r} is not a finite number", param, ctx)
        return super().convert(value, param, ctx)


#: One shared instance for plain finite floats.
FINITE = FiniteFloat()


def positive(**extra) -> FiniteFloatRange:
    """A finite float > 0 (``extra`` adds ``max``/``max_open`` etc.)."""
    return FiniteFloatRange(min=0, min_open=True, **extra)


def parse_tolerance(text) -> tuple[float, float]:
    """``"3"`` -> (-3, +3); ``"-2,3"`` or ``"-2:+3"`` -> (-2, +3) (dB); a (low, high) pair is checked as it is.

    Raises :class:`InputError` naming ``--tolerance`` with what would be right.

    Examples
    --------
    >>> parse_tolerance("3")
    (-3.0, 3.0)
    >>> parse_tolerance("-2,3")
    (-2.0, 3.0)

    References
    ----------
    None (argument parsing; +/-3 dB bands are widespread test-specification practice).
    """
    if isinstance(text, (tuple, list)):
        parts = [float(p) for p in text]
        text = ",".join(f"{p:g}" for p in parts)
    else:
        cleaned = str(text).replace(":", ",").replace(" ", "")
        try:
            parts = [float(p) for p in cleaned.split(",") if p != ""]
        except ValueError:
            raise InputError(f"'{text}' is not a tolerance; give DB (e.g. 3 for +/-3 dB) or LOW,HIGH (e.g. -2,3)",
                             "--tolerance") from None
    if len(parts) == 1:
        value = abs(parts[0])
        low, high = -value, value
    elif len(parts) == 2:
        low, high = parts
    else:
        raise InputError(f"'{text}' has {len(parts)} numbers; give DB or LOW,HIGH", "--tolerance")
    if not (math.isfinite(low) and math.isfinite(high) and low < 0 < high):
        raise InputError(f"'{text}': the band needs a negative lower and a positive upper limit in dB", "--tolerance")
    return low, high


class ToleranceBand(click.ParamType):
    """A tolerance band in dB: ``3`` for +/-3 dB, or ``LOW,HIGH`` such as ``-2,3``; converts to (low, high)."""

    name = "tolerance"

    def convert(self, value, param, ctx):
        if isinstance(value, tuple):
            return value
        try:
            return parse_tolerance(value)
        except InputError as error:
            self.fail(error.message, param, ctx)


class QuantityList(click.ParamType):
    """Comma-separated quantities (acceleration, velocity, displacement; accel/vel/disp); acceleration first."""

    name = "quantities"

    def convert(self, value, param, ctx):
        if isinstance(value, tuple):
            return value
        from vibsynth._checks import parse_quantity_names

        try:
            return parse_quantity_names(value)
        except InputError as error:
            self.fail(error.message, param, ctx)

    def shell_complete(self, ctx, param, incomplete):
        from click.shell_completion import CompletionItem

        from vibsynth._checks import QUANTITY_UNITS

        head, _, last = incomplete.rpartition(",")
        prefix = f"{head}," if head else ""
        return [CompletionItem(prefix + name) for name in QUANTITY_UNITS if name.startswith(last)]


def preset_names() -> list[str]:
    """Names of the bundled presets, read from the package data without loading the profile model."""
    from importlib import resources

    folder = resources.files("vibsynth.presets")
    return sorted(p.name[: -len(".toml")] for p in folder.iterdir() if p.name.endswith(".toml"))


class ProfileSpec(click.ParamType):
    """PROFILE: a .toml/.csv file, a bundled preset name, or ``-`` for a profile on stdin.

    The value is passed on unchanged (the profile reader reports what is wrong
    with it); the type adds shell completion of preset names and of files.
    """

    name = "profile"

    def convert(self, value, param, ctx):
        return os.fspath(value) if isinstance(value, os.PathLike) else value

    def shell_complete(self, ctx, param, incomplete):
        from click.shell_completion import CompletionItem

        items = [CompletionItem(name) for name in preset_names() if name.startswith(incomplete)]
        # files as well: the shell completes paths itself when told to
        items.append(CompletionItem(incomplete, type="file"))
        return items


__all__ = [
    "FINITE",
    "FiniteFloat",
    "FiniteFloatRange",
    "ProfileSpec",
    "QuantityList",
    "ToleranceBand",
    "parse_tolerance",
    "positive",
    "preset_names",
]
