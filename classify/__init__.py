"""pulsesort.classify: label store, classifiers, triage, review and the CLI.

Depends on :mod:`features`; never the other way round.
"""

__version__ = "0.1.0"
