"""Pieces shared by the durability commands (response, severity, equivalent, fit); no numpy at import."""

from __future__ import annotations

import contextlib
import json
import warnings

import click

from vibsynth.cli.common import json_safe, warn

#: Options every durability command shares, with their defaults and the reason for them.
Q_HELP = "Amplification Q of the oscillator (damping ratio 1/(2Q)). Default 10: common practice, no source."
B_HELP = ("Basquin fatigue exponent b of the damage (D ~ stress^b). Default 8: common practice for structural "
          "metals in test tailoring, no source; use your material's value.")


@contextlib.contextmanager
def library_warnings(collected: list):
    """Collect the library's VibsynthWarnings (messages appended to ``collected``) and print each as one line."""
    from vibsynth.errors import VibsynthWarning

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", VibsynthWarning)
        yield
    for item in caught:
        if issubclass(item.category, VibsynthWarning):
            message = " ".join(str(item.message).split())
            if message not in collected:
                collected.append(message)
    for message in collected:
        warn(message)


def echo_json(data: dict) -> None:
    """Print a dict as JSON (NaN/inf as null)."""
    click.echo(json.dumps(json_safe(data), indent=2))


DRIVE_RATE_HELP = "Sample rate of the drive in Hz, for a .csv/.npy without a sidecar."
DRIVE_SCALE_HELP = "g value of full scale, for a .wav/.flac without a sidecar."
