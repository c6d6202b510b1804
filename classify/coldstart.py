"""Cold start: a season's first triage without labels (rules, then self-training)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from . import rules

__all__ = ["COLDSTART_VERSION", "cold_start"]

COLDSTART_VERSION = rules.RULES_VERSION
RULES_SET_LEVEL = 0.2


def cold_start(spill, columns, cat, settings, *, store=None, n_jobs=1) -> dict:
    """Decisions of every pulse of a spilled season without a trained model."""
    frame = pd.DataFrame(np.array(spill.numeric()), columns=list(columns))
    classes = np.array(rules.CLASSES)
    proba = rules.rule_proba(frame)
    sets = proba >= RULES_SET_LEVEL
    usable = frame["field_ok"].to_numpy() > 0
    novel = rules.rule_scores(frame).max(axis=1).to_numpy() < 0.3
    return {"classes": classes, "proba": proba, "relaxed": proba, "sets": sets,
            "novelty": np.where(novel, 1.0, 0.0), "novelty_threshold": 0.5,
            "usable": usable, "coverage": 0.95 if settings.coverage is None else
            settings.coverage, "version": rules.RULES_VERSION, "adaptation": "none",
            "other": None}
