"""Feature columns in display units for figures and reports (no plotting library).

Shared by :mod:`classify.figures` (matplotlib) and :mod:`classify.report` (own SVG),
so the report needs no optional extra.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from features import InputError

from .explain import display_spec
from .review._queue import probability_columns

__all__ = ["MAIN_FEATURES", "PAIR_FEATURES", "LOG_SPAN", "MAX_LABEL_CHARS",
           "feature_values", "result_classes"]

#: Features of the distribution panels; ``True`` shows the absolute value (signed peaks).
MAIN_FEATURES = (("width_s", False), ("initial_half_cycle_s", False), ("rise_time_s", False),
                 ("bipolarity", False), ("range_normalized_peak_v_per_m", True),
                 ("vhf_snr_db", False), ("speed_m_per_s", False), ("nearest_neighbour_s", False))
#: Features of the pairwise scatter.
PAIR_FEATURES = (("width_s", False), ("bipolarity", False),
                 ("range_normalized_peak_v_per_m", True), ("nearest_neighbour_s", False))
#: Log axes when all values are > 0 and the 99th percentile is this many times the 1st
#: (about one and a half decades; common practice, no source).
LOG_SPAN = 30.0
#: Longest axis label text before the unit (a qualifier in parentheses is dropped).
MAX_LABEL_CHARS = 22




def result_classes(results: pd.DataFrame) -> list[str]:
    """The model's classes (``p_`` columns), then any other label seen."""
    classes = [c[2:] for c in probability_columns(results)]
    return classes + sorted(set(results["label"].astype(str)) - set(classes))


def feature_values(results: pd.DataFrame, name: str, absolute: bool = False):
    """A feature column in display units, with its axis label and whether to use log axes.

    Parameters
    ----------
    results : pandas.DataFrame
        Triage results (or any table with the feature's SI column).
    name : str
        Feature name (SI unit suffix).
    absolute : bool, default=False
        Show ``|value|`` (for signed peaks).

    Returns
    -------
    values : ndarray of float, shape (n_rows,)
        In display units; NaN where missing.
    label : str
        Axis label with the unit in parentheses, e.g. ``"width (µs)"`` (a
        qualifier of the display label moves behind a comma, or is dropped when
        the label would exceed :data:`MAX_LABEL_CHARS`).
    log : bool
        True when every finite value is > 0 and they span :data:`LOG_SPAN`.
    """
    if name not in results.columns:
        raise InputError(f"the results have no column {name!r} (a feature of the schema)")
    label, unit, factor = display_spec(name)
    if " (" in label:       # "rise time (10-90 %)" -> "rise time, 10-90 %" or "rise time"
        head, _, qual = label.partition(" (")
        label = f"{head}, {qual.rstrip(')')}"
        label = label if len(label) <= MAX_LABEL_CHARS else head
    v = pd.to_numeric(results[name], errors="coerce").to_numpy(dtype=np.float64) * factor
    if absolute:
        v = np.abs(v)
        label = f"|{label}|"
    finite = v[np.isfinite(v)]
    log = bool(finite.size >= 2 and (finite > 0).all()
               and np.percentile(finite, 99) >= LOG_SPAN * np.percentile(finite, 1))
    return v, f"{label} ({unit})", log
