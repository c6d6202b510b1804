"""pulsesort.features: read pulse catalogs and turn pulses into physical features.

The package never imports :mod:`classify`. Public entry points:

- :func:`open_catalog` reads and validates a catalog folder (spec: catalog v1).
- :func:`extract_features` computes one row of SI-unit features per pulse.
- :data:`FEATURES` (in :mod:`features.schema`) lists every feature with its unit.
"""

import logging

logger = logging.getLogger("pulsesort")
logger.addHandler(logging.NullHandler())

from ._checks import CatalogError  # noqa: E402

__all__ = ["CatalogError", "logger"]

try:  # the reader and the feature extractor are added as they land
    from .catalog import Catalog, open_catalog  # noqa: F401,E402

    __all__ += ["Catalog", "open_catalog"]
except ImportError:  # pragma: no cover - only while the package is being built
    pass
