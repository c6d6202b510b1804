"""pulsesort.features: read pulse catalogs and turn pulses into physical features.

The package never imports :mod:`classify`. Public entry points:

- :func:`open_catalog` reads and validates a catalog folder (format: catalog v1).
- :func:`features.extract.extract_features` computes one row of SI-unit features per pulse.
- :data:`features.schema.FEATURES` lists every feature with its unit and definition.
"""

import logging

from ._checks import CatalogError, InputError
from .catalog import Catalog, open_catalog, scan_quality
from .writer import write_catalog

logger = logging.getLogger("pulsesort")
logger.addHandler(logging.NullHandler())

__all__ = ["Catalog", "CatalogError", "InputError", "open_catalog", "scan_quality", "logger",
           "write_catalog"]
