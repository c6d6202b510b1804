"""pulsesort's version (one place; :mod:`classify` re-exports it)."""

__version__ = "0.1.0"
