"""The installed version, read from the distribution's metadata (pyproject.toml is the one source)."""

from importlib import metadata

try:
    __version__ = metadata.version("vibsynth")
except metadata.PackageNotFoundError:  # pragma: no cover - running from an uninstalled tree
    __version__ = "0+unknown"
