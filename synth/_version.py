"""The version of vibsynth: the one source (pyproject.toml reads it at build time).

A literal, so that finding it costs nothing at start-up (importlib.metadata takes
longer to import than the rest of a drive job's own modules).
"""

__version__ = "0.2.0"
