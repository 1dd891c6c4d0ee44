"""The exception family for bad user input, and the warning category of the library.

Every problem a user can fix (a malformed profile, an option out of range, a
drive file that disagrees with its sidecar) raises :class:`InputError`.  The
message names the file, the row or field, what is wrong and what would be
right, so the command line can print it as a single line and exit with
status 2.
"""

from __future__ import annotations


class InputError(ValueError):
    """User input that cannot be used as given.

    Parameters
    ----------
    message : str
        What is wrong and what would be right.
    source : str, optional
        The file (or option) the problem was found in.
    location : str, optional
        The row, key or field inside ``source``, e.g. ``"row 4"`` or
        ``"breakpoints[2].asd"``.
    """

    def __init__(self, message: str, source: str | None = None, location: str | None = None):
        self.message = message
        self.source = source
        self.location = location
        super().__init__(self.one_line())

    def one_line(self) -> str:
        """The whole problem as a single line: ``source: location: message``."""
        # a file or field name with a line break or other control character (a path typed as "\r") is
        # shown escaped, as Python writes it, so the problem stays on one line
        parts = [p if str(p).isprintable() else repr(str(p)) for p in (self.source, self.location) if p]
        text = " ".join(str(self.message).split())
        return ": ".join(parts + [text]) if parts else text

    def __str__(self) -> str:  # pragma: no cover - trivial
        return self.one_line()


class OutOfRangeError(InputError):
    """A requested target (kurtosis, skewness, clip level, ...) that the method cannot reach.

    The message states the reachable range.
    """


class VibsynthWarning(UserWarning):
    """Something the user should know about a result that is still usable.

    Raised with ``warnings.warn(message, VibsynthWarning, stacklevel=2)`` by the
    library (a sample rate under the usual 2.56 x margin, a target that the
    transform cannot fully reach, ...); the command line prints each as one line
    ``vibsynth: warning: ...``.  Python callers can filter or escalate them
    (``-W error::vibsynth.VibsynthWarning``).
    """
