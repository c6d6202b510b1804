"""Human review: a local web page that puts the doubtful pulses before an analyst.

Library API::

    from classify.review import build_queue, ReviewSession, make_server
    queue = build_queue(results, store, "hollowmere-2031", budget=200, analyst="wren")
    session = ReviewSession(results, catalog, "labels.sqlite", "wren", budget=200)
    server = make_server(session)          # 127.0.0.1, a free port
    print(server.url)                      # http://127.0.0.1:PORT/?token=...
    server.serve_forever()

The page's data model (what one pulse's JSON holds) is documented in
:mod:`classify.review._pulse`, the record in :mod:`classify.review._trace`, the
sources in :mod:`classify.review._sources`. The queue rule is documented in :mod:`classify.review._queue`, what a decision
writes in :mod:`classify.review._session`, the security measures in
:mod:`classify.review._server`.
"""

from ._help import REVIEW_REASONS
from ._lookalike import LookAlikes, lookalike_classes
from ._pulse import DISPLAY_FEATURES, field_trace, pulse_view
from ._queue import (
    build_queue,
    diversity_order,
    priority_scores,
    probability_columns,
    standardised_features,
)
from ._server import TOKEN_HEADER, ReviewServer, is_loopback, make_server
from ._session import ACTIONS, OutOfTurn, ReviewSession
from ._sources import source_view
from ._trace import TRACE_KEYS, record_trace

__all__ = [
    "ACTIONS",
    "DISPLAY_FEATURES",
    "REVIEW_REASONS",
    "TRACE_KEYS",
    "TOKEN_HEADER",
    "LookAlikes",
    "OutOfTurn",
    "ReviewServer",
    "ReviewSession",
    "build_queue",
    "diversity_order",
    "field_trace",
    "is_loopback",
    "lookalike_classes",
    "make_server",
    "priority_scores",
    "probability_columns",
    "pulse_view",
    "record_trace",
    "source_view",
    "standardised_features",
]
