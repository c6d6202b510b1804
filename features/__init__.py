"""pulsesort.features: read pulse catalogs and turn pulses into physical features.

The package never imports :mod:`classify`. The Python API (every name below is
importable from ``features``; each is documented where it lives):

- :func:`open_catalog` reads and validates a catalog folder (format: catalog v1) into a
  :class:`Catalog`; :func:`write_catalog` writes one from arrays;
- :func:`extract_features` computes one row of SI-unit features per pulse
  (:mod:`features.extract`);
- :func:`pulse_trace` gives one pulse's processed field and VHF as the features saw
  them, for a plot (:mod:`features.trace`);
- :mod:`schema` lists every feature with its unit and definition
  (:data:`features.schema.FEATURES`);
- :class:`InputError` (alias :class:`CatalogError`) is raised for every bad input,
  naming the file, row or key.

:func:`extract_features` and :func:`pulse_trace` are loaded on first use (PEP 562):
``import features`` does not import SciPy's signal processing.

Examples
--------
>>> import features
>>> features.schema.get("width_s").unit
's'
>>> features.open_catalog("no/such/folder")
Traceback (most recent call last):
...
features._checks.InputError: no/such/folder: no such catalog folder
"""

import logging

from . import schema
from ._checks import CatalogError, InputError
from .catalog import Catalog, open_catalog, scan_quality
from .writer import write_catalog

logger = logging.getLogger("pulsesort")
logger.addHandler(logging.NullHandler())

__all__ = ["Catalog", "CatalogError", "InputError", "open_catalog", "scan_quality", "logger",
           "write_catalog", "extract_features", "pulse_trace", "schema"]


def __getattr__(name: str):
    """Load :func:`extract_features` and :func:`pulse_trace` on first use (PEP 562)."""
    if name == "extract_features":
        from .extract import extract_features as value
    elif name == "pulse_trace":
        from .trace import pulse_trace as value
    else:
        raise AttributeError(f"module 'features' has no attribute {name!r}")
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
