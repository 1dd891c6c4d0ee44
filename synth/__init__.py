"""vibsynth: random-vibration drive synthesis and verification (pure computation)."""

__version__ = "0.1.0"
