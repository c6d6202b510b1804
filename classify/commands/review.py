"""``pulsesort review``: the local review page for the doubtful pulses of a triage."""

from __future__ import annotations

import argparse
import logging
import sys

from features import InputError

from ._common import positive_int

NAME = "review"
HELP = "open a local web page to decide the doubtful pulses of a triage, best first"

EPILOG = """\
The page shows one pulse at a time: field change and VHF power on a shared time
axis (zoom and pan), the whole record, the mapped sources (altitude against
time, plan view and sky when positions exist, with the channel mapped earlier
in the flash), why the pulse is in the queue, the model's probabilities, why
the model chose its class (the features' largest contributions, when the model
is found), the nearest labelled pulses of each class in question, and the key
features.
Keys: 1-9 one per class of the label store, u unsure, s skip, z or Backspace
undo the last decision, + and - zoom, arrows pan, 0 back to the pulse, ? help.
Every decision is written to the label store at once (origin 'review'), so
closing the page or stopping the server loses nothing; starting again resumes
the queue. The server listens on 127.0.0.1 only, unless --host says otherwise.
"""


#: Contributions shown in the "why this class" panel (the largest first).
WHY_FEATURES = 6


def model_attributions(model, n: int = WHY_FEATURES):
    """The "why this class" of a model, as a review session's ``attributions``.

    Parameters
    ----------
    model : classify.models.PulseClassifier
        The model behind the results.
    n : int, default=6
        Contributions per pulse.

    Returns
    -------
    callable
        ``attributions(result_row)``: the ``n`` largest contributions of the row's
        features to its class against the runner-up (natural log-odds,
        :func:`classify.explain.explain_pulses`, :func:`classify.explain.top_reasons`)
        as ``[(feature, contribution), ...]``, e.g. ``[("width_s", 0.83), ...]`` (the
        page's features table shows the values); None when the row lacks the model's
        features.
    """
    import pandas as pd

    from classify.explain import explain_pulses, top_reasons

    def attributions(res):
        X = pd.DataFrame([res])
        try:
            why = explain_pulses(model, X)
        except InputError as exc:   # results of another schema: the panel says so
            logging.getLogger("pulsesort").info("why this class: not available for %s (%s)",
                                                res.get("event_id"), exc)
            return None
        reasons = top_reasons(why, X, n=n)
        return list(zip(reasons["feature"], reasons["contribution"]))

    return attributions


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    parser.epilog = EPILOG
    parser.add_argument("results", metavar="RESULTS.csv", help="a 'pulsesort triage' output")
    parser.add_argument("--catalog", metavar="CATALOG", required=True,
                        help="the catalog folder the results were made from")
    parser.add_argument("--store", metavar="PATH", default=None,
                        help="label store file (default: $PULSESORT_STORE, else "
                             "./labels.sqlite)")
    parser.add_argument("--analyst", metavar="NAME", required=True,
                        help="who is deciding (recorded with every decision)")
    parser.add_argument("--port", type=int, default=0, metavar="P",
                        help="TCP port (default: any free port)")
    parser.add_argument("--host", default="127.0.0.1", metavar="H",
                        help="address to listen on (default 127.0.0.1: this machine only)")
    parser.add_argument("--budget", type=positive_int, default=None, metavar="N",
                        help="queue at most N pulses")
    parser.add_argument("--model", metavar="MODEL_DIR", default=None,
                        help="the model folder behind the results (for the look-alikes; "
                             "default: the results' model_version in --registry)")
    parser.add_argument("--registry", metavar="DIR", default="models",
                        help="model registry folder (default ./models)")
    parser.add_argument("--revisit", action="store_true",
                        help="queue again the pulses you marked unsure or skipped before")


def run(args) -> int:
    from classify.labels import default_store_path
    from classify.review import ReviewSession, is_loopback, make_server
    from classify.review._lookalike import card_catalog_paths, find_model
    from classify.triage import read_results
    from features import open_catalog

    if not 0 <= args.port <= 65535:
        raise InputError(f"--port must be in 0..65535, got {args.port}")
    results = read_results(args.results)
    cat = open_catalog(args.catalog)
    model, card = find_model(results, args.model, args.registry)
    store = args.store if args.store is not None else default_store_path()
    session = ReviewSession(results, cat, store, args.analyst, budget=args.budget,
                            model=model, catalog_paths=card_catalog_paths(card),
                            revisit=args.revisit,
                            attributions=None if model is None else model_attributions(model))
    try:
        server = make_server(session, args.host, args.port)
    except OSError as exc:
        raise InputError(f"cannot listen on {args.host}:{args.port} ({exc.strerror or exc})"
                         ) from None
    if not is_loopback(args.host):
        print(f"WARNING: listening on {args.host}, which is not a loopback address: other "
              "machines that can reach it may open the page (they still need the token in "
              "the address). Use the default --host 127.0.0.1 unless you mean it.",
              file=sys.stderr)
    try:  # from here on, Ctrl-C stops the server cleanly
        print(f"{session.n_queued} pulse(s) of {cat.catalog_id} queued for {args.analyst}; "
              f"decisions go to {store}")
        print("look-alikes: " + (f"the labelled training pulses of model {card['version']}"
                                 if model is not None else
                                 "the labelled pulses of this catalog in the store"))
        print("why this class: " + ("the features' contributions to the class in model "
                                    f"{card['version']}" if model is not None else
                                    "not available without the model (--model)"))
        print(f"open {server.url}")
        print("(Ctrl-C to stop; every decision is already saved)", flush=True)
        server.serve_forever()
    except KeyboardInterrupt:
        pass
    finally:
        server.server_close()
    print(f"reviewed {session.n_reviewed} of {session.n_queued} queued pulse(s)")
    return 0
