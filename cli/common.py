"""Shared pieces of the command line: error reporting, profile loading, cautions."""

from __future__ import annotations

import math
import sys

import click


#: Printed (to stderr) whenever a drive file is written (one text, kept in the library).
from vibsynth.io.caution import DRIVE_CAUTION  # noqa: E402,F401


def fail(message: str) -> "NoReturn":  # noqa: F821
    """Raise a click usage error that the entry point prints as one line (exit 2)."""
    raise click.UsageError(" ".join(str(message).split()))


def load_profile(spec: str, grms: float | None = None, level_db: float | None = None):
    """Read a profile (file or preset name) and apply an optional rescale."""
    from vibsynth.profile.files import read_profile

    profile = read_profile(spec)
    if grms is not None and level_db is not None:
        fail("give --grms or --level-db, not both")
    if grms is not None:
        profile = profile.scaled_to_grms(grms)
    if level_db is not None:
        profile = profile.scaled_db(level_db)
    return profile


def warn(message: str) -> None:
    """One warning line on stderr."""
    click.echo(f"vibsynth: warning: {message}", err=True)


def is_interactive_stderr() -> bool:
    """True when stderr is a terminal (progress bars are shown only then)."""
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):
        return False


class Progress:
    """A click progress bar on stderr (counting samples), or nothing when disabled."""

    def __init__(self, enabled: bool, length: int, label: str):
        self.bar = click.progressbar(length=length, label=label, file=sys.stderr) if enabled else None

    def __enter__(self):
        if self.bar is not None:
            self.bar.__enter__()
        return self

    def __exit__(self, *exc):
        if self.bar is not None:
            self.bar.__exit__(*exc)

    def __call__(self, samples: int) -> None:
        if self.bar is not None:
            self.bar.update(samples)


def json_safe(value):
    """Replace NaN/inf (not valid JSON) with None, recursively through dicts and lists."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_safe(v) for v in value]
    return value
