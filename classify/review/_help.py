"""The words of the page's help: what each review reason means, how the queue's priority is made.

The reasons are those :mod:`classify.triage` writes in ``review_reason`` (its
module docstring defines them; ``tests/classify/test_review_queue.py`` checks
that every one of :data:`classify.report.REASONS` is explained here). The
priority rule is :mod:`classify.review._queue`'s, in words.
"""

from __future__ import annotations

from ._queue import NOVELTY_WEIGHT

__all__ = ["REVIEW_REASONS", "priority_rule", "priority_parts"]

#: review_reason code -> what it means, in words.
REVIEW_REASONS = {
    "low_confidence": "the model's probability for its own class is below the triage's "
                      "review threshold (0.8 unless the triage was told otherwise)",
    "ambiguous_set": "the prediction set holds two classes or more: at the chosen "
                     "coverage the model cannot rule out either",
    "empty_set": "the prediction set is empty: no class is plausible enough at the chosen "
                 "coverage (a pulse unlike the training pulses, or a record with a quality "
                 "problem)",
    "novel": "the pulse is far from the model's labelled training pulses: its novelty "
             "score (mean distance to the nearest of them) is above the model's threshold "
             "(by default, the score of the 0.1 % most unusual training pulses)",
    "clipped": "the field record reached the digitizer's full scale: the peak is cut off",
    "no_vhf": "the catalog has a VHF channel but this pulse's VHF record is missing",
    "field_unusable": "most of the field record is missing",
}


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
