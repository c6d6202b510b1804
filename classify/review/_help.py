"""The words of the page's help: what each review reason means, how the queue's priority is made.

The reasons are those triage writes in ``review_reason``, with the words of
:data:`classify.decide.REVIEW_REASONS` (one table for the results, the page and the
report). The
priority rule is :mod:`classify.review._queue`'s, in words.
"""

from __future__ import annotations

from ..decide import REVIEW_REASONS as _DECIDE_REASONS
from ._queue import NOVELTY_WEIGHT

__all__ = ["REVIEW_REASONS", "priority_rule", "priority_parts"]

#: review_reason code -> what it means, in words (the triage's own table).
REVIEW_REASONS = dict(_DECIDE_REASONS)


def priority_rule(novelty_weight: float = NOVELTY_WEIGHT) -> list[str]:
    """The queue's order in words, one sentence per item."""
    return [
        "uncertainty: how evenly the model spreads its probability over the classes "
        "(normalised entropy, 0 = one class certain, 1 = all classes equally likely)",
        "novelty rank: the fraction of this catalog's pulses with a lower novelty score "
        "(0 = the most ordinary pulse, near 1 = the most unusual)",
        f"priority = uncertainty + {novelty_weight:g} x novelty rank; the queue takes the "
        "highest priorities first, but skips ahead of near-twins of pulses already taken "
        "(a diversity pass over the standardised features), so the rank does not always "
        "follow the priority",
    ]


def priority_parts(priority, uncertainty, novelty_rank,
                   novelty_weight: float = NOVELTY_WEIGHT) -> dict:
    """The priority of one queued pulse and its two terms (JSON-ready).

    Examples
    --------
    >>> priority_parts(1.15, 0.9, 0.5)["novelty_part"]
    0.25
    """
    def num(v):
        try:
            f = float(v)
        except (TypeError, ValueError):
            return None
        return f if f == f else None

    u, n = num(uncertainty), num(novelty_rank)
    return {"priority": num(priority), "uncertainty": u, "novelty_rank": n,
            "novelty_weight": float(novelty_weight),
            "novelty_part": None if n is None else round(novelty_weight * n, 12)}
