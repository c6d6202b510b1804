"""Human review: a local web page that puts the doubtful pulses before an analyst.

The queue rule is documented in :mod:`classify.review._queue`.
"""

from ._queue import (
    build_queue,
    diversity_order,
    priority_scores,
    probability_columns,
    standardised_features,
)

__all__ = [
    "build_queue",
    "diversity_order",
    "priority_scores",
    "probability_columns",
    "standardised_features",
]
