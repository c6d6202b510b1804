"""Human review: a local web page that puts the doubtful pulses before an analyst.

Library API::

    from classify.review import build_queue, ReviewSession, make_server
    queue = build_queue(results, store, "hollowmere-2031", budget=200, analyst="wren")
    session = ReviewSession(results, catalog, "labels.sqlite", "wren", budget=200)
    server = make_server(session)          # 127.0.0.1, a free port
    print(server.url)                      # http://127.0.0.1:PORT/?token=...
    server.serve_forever()

The queue rule is documented in :mod:`classify.review._queue`, what a decision
writes in :mod:`classify.review._session`, the security measures in
:mod:`classify.review._server`.
"""

from ._lookalike import LookAlikes
from ._pulse import DISPLAY_FEATURES, field_trace, pulse_view, source_track, vhf_trace
from ._queue import (
    build_queue,
    diversity_order,
    priority_scores,
    probability_columns,
    standardised_features,
)
from ._server import TOKEN_HEADER, ReviewServer, is_loopback, make_server
from ._session import ACTIONS, OutOfTurn, ReviewSession

__all__ = [
    "ACTIONS",
    "DISPLAY_FEATURES",
    "TOKEN_HEADER",
    "LookAlikes",
    "OutOfTurn",
    "ReviewServer",
    "ReviewSession",
    "build_queue",
    "diversity_order",
    "field_trace",
    "is_loopback",
    "make_server",
    "priority_scores",
    "probability_columns",
    "pulse_view",
    "source_track",
    "standardised_features",
    "vhf_trace",
]
