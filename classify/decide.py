"""From class probabilities to decisions: a class, a prediction set, and review in words.

Used by triage (streaming), :func:`classify.predict.predict_catalog` (in memory) and the
cold start alike, so a pulse gets the same decision whichever path computed it.

A pulse goes to review only for a reason that concerns *it*, each one written out in
the results (``review_why``):

``low_confidence``
    its calibrated top probability is below the review level (``review_below``);
``ambiguous_set``
    more than one class cannot be ruled out at the stated coverage (its conformal set);
``novel``
    it is unlike every labelled pulse the model learned from (novelty score beyond the
    training pulses' own 99.9 % quantile);
``censored_decision``
    a channel reached full scale (the value is a lower bound) *and* the decision depends
    on it: with the value relaxed upwards (:data:`RELAX_VHF_DB`, :data:`RELAX_FIELD`) the
    class changes or the confidence drops below the review level. A clipped record
    whose class does not depend on how far beyond full scale it went is classified like
    any other (the strongest VHF emitters saturate receivers set sensitive enough for
    everything else: saturation is normal);
``field_unusable``
    there is no usable field record (pinned at full scale, most of it missing, or no
    pulse above 3 sigma) and no VHF record or mapped sources to go on: its set is empty
    and it has no class (a pulse with VHF or sources but no usable field record is
    classified from them, :func:`classifiable`);
``other``
    (cold start) it fits none of the classes the rules know.

A usable record's prediction set always holds its most probable class, so sets are
empty only for unusable records.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["REVIEW_REASONS", "RELAX_VHF_DB", "RELAX_FIELD", "DECISION_COLUMNS",
           "relaxed_features", "decide", "flag", "field_ok", "classifiable"]

#: Every review reason and what it means (also shown on the review page's help).
REVIEW_REASONS = {
    "low_confidence": "the most probable class has a calibrated probability below the "
                      "review level",
    "ambiguous_set": "more than one class cannot be ruled out at the stated coverage",
    "novel": "unlike every labelled pulse the model learned from",
    "censored_decision": "a channel reached full scale and the class depends on how strong "
                         "the pulse really was",
    "field_unusable": "no usable field record (pinned at full scale, most of it missing, "
                      "or no pulse above the noise) and no VHF or sources to go on: no class "
                      "is given",
    "other": "it fits none of the classes the rules know (a return stroke, an initial-"
             "breakdown pulse, a noise trigger...)",
}
#: A censored VHF peak is relaxed by this much (dB) to see whether the class depends on
#: it (a receiver rarely saturates by more than 10 dB on the strongest emitters; common
#: practice, no source).
RELAX_VHF_DB = 10.0
#: A censored field peak is relaxed by this factor (amplitude features scaled).
RELAX_FIELD = 3.0
_FIELD_AMPLITUDE = ("peak_field_v_per_m", "range_normalized_peak_v_per_m",
                    "current_moment_peak_a_m", "charge_moment_change_c_m", "peak_current_a")
#: Decision columns of a results file, in order (then ``p_<class>`` columns).
DECISION_COLUMNS = ("label", "confidence", "needs_review", "novel", "prediction_set")


def relaxed_features(X: pd.DataFrame, vhf_censored, field_censored) -> pd.DataFrame:
    """``X`` with the censored values relaxed upwards (a lower bound made larger).

    Parameters
    ----------
    X : DataFrame
        Model features (any subset of the schema's columns).
    vhf_censored, field_censored : ndarray of bool, shape (n,)

    Returns
    -------
    DataFrame
        A copy: ``vhf_snr_db`` + :data:`RELAX_VHF_DB` where the VHF was censored; the
        field amplitude columns x :data:`RELAX_FIELD` where the field was.
    """
    out = X.copy()
    v = np.asarray(vhf_censored, dtype=bool)
    f = np.asarray(field_censored, dtype=bool)
    if "vhf_snr_db" in out and v.any():
        out.loc[v, "vhf_snr_db"] = out.loc[v, "vhf_snr_db"] + RELAX_VHF_DB
    for c in _FIELD_AMPLITUDE:
        if c in out and f.any():
            out.loc[f, c] = out.loc[f, c] * RELAX_FIELD
    return out


def _join_or(names) -> str:
    names = list(names)
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " or " + names[-1]


def decide(classes, proba, sets, *, usable, review_below, coverage, novelty=None,
           novelty_threshold=None, relaxed_proba=None, censored_channel=None,
           other=None) -> pd.DataFrame:
    """Decisions of a batch of pulses.

    Parameters
    ----------
    classes : sequence of str, length k
    proba : ndarray, shape (n, k)
        Calibrated class probabilities (rows sum to 1).
    sets : ndarray of bool, shape (n, k)
        Conformal prediction sets; a usable record's set is completed with its most
        probable class, an unusable record's set is emptied.
    usable : ndarray of bool, shape (n,)
        The pulse can be placed: a usable field record, or VHF or sources to go on
        (:func:`classifiable`).
    review_below : float
        Confidence below which a pulse goes to review.
    coverage : float
        The sets' target coverage (for the words).
    novelty, novelty_threshold : ndarray (n,), float, optional
        Novelty score and its threshold (NaN or None: no novelty test).
    relaxed_proba : ndarray, shape (n, k), optional
        Probabilities with censored values relaxed (:func:`relaxed_features`); rows of
        uncensored pulses are ignored.
    censored_channel : ndarray of str, shape (n,), optional
        "" or the channel(s) at full scale ("VHF", "field", "field and VHF").
    other : ndarray of bool, shape (n,), optional
        Pulses that fit no class (cold start): label "other".

    Returns
    -------
    DataFrame, n rows
        ``label``, ``confidence``, ``needs_review``, ``novel``, ``prediction_set``
        (classes joined by "|"), ``p_<class>`` per class, ``review_reason`` (codes
        joined by ";"), ``review_why`` (the reasons in words, joined by "; ").
    """
    classes = np.asarray([str(c) for c in classes])
    p = np.asarray(proba, dtype=np.float64)
    n, k = p.shape
    usable = np.asarray(usable, dtype=bool)
    top = np.argmax(p, axis=1)
    conf = p[np.arange(n), top]
    s = np.array(sets, dtype=bool, copy=True)
    s[np.arange(n), top] |= usable
    s[~usable] = False
    n_set = s.sum(axis=1)
    nov = (np.zeros(n, dtype=bool) if novelty is None or novelty_threshold is None
           else ~(np.asarray(novelty, dtype=np.float64) <= novelty_threshold))
    reasons = {"low_confidence": usable & (conf < review_below),
               "ambiguous_set": usable & (n_set > 1),
               "novel": usable & nov,
               "censored_decision": np.zeros(n, dtype=bool),
               "field_unusable": ~usable}
    alt_top = top
    if relaxed_proba is not None and censored_channel is not None:
        rp = np.asarray(relaxed_proba, dtype=np.float64)
        cens = usable & (np.asarray(censored_channel, dtype=object) != "")
        alt_top = np.argmax(rp, axis=1)
        alt_conf = rp[np.arange(n), alt_top]
        reasons["censored_decision"] = cens & ((alt_top != top) | (alt_conf < review_below))
    label = np.where(usable, classes[top], "")
    if other is not None:
        oth = usable & np.asarray(other, dtype=bool)
        reasons["other"] = oth
        label = np.where(oth, "other", label)
    flags = np.column_stack(list(reasons.values()))
    codes = np.array(list(reasons))
    review = flags.any(axis=1)
    why = [""] * n
    reason_text = [""] * n
    for i in np.flatnonzero(review):
        parts = []
        for code in codes[flags[i]]:
            if code == "low_confidence":
                parts.append(f"confidence {conf[i]:.2f} is below the review level "
                             f"{review_below:.2f}")
            elif code == "ambiguous_set":
                parts.append(f"{n_set[i]} classes cannot be ruled out at {coverage:.0%}: "
                             f"{_join_or(classes[s[i]])}")
            elif code == "novel":
                parts.append(f"unlike every labelled pulse: the nearest are "
                             f"{float(novelty[i]):.1f} robust units away (training pulses: "
                             f"up to {float(novelty_threshold):.1f})")
            elif code == "censored_decision":
                what = censored_channel[i]
                if alt_top[i] != top[i]:
                    parts.append(f"the {what} record reached full scale: stronger than "
                                 f"recorded, it would be {classes[alt_top[i]]}")
                else:
                    parts.append(f"the {what} record reached full scale: stronger than "
                                 f"recorded, the confidence would fall below "
                                 f"{review_below:.2f}")
            elif code == "field_unusable":
                parts.append("no usable field record and no VHF or sources: no class is given")
            elif code == "other":
                parts.append("fits none of the classes the rules know")
        why[i] = "; ".join(parts)
        reason_text[i] = ";".join(codes[flags[i]])
    out = pd.DataFrame({
        "label": label,
        "confidence": np.where(usable, conf, np.nan),
        "needs_review": review,
        "novel": usable & nov,
        "prediction_set": ["|".join(classes[row]) for row in s],
    })
    for j, c in enumerate(classes):
        out[f"p_{c}"] = p[:, j]
    out["review_reason"] = reason_text
    out["review_why"] = why
    out.attrs["reasons"] = {c: int(v.sum()) for c, v in reasons.items()}
    return out


def flag(features: pd.DataFrame, name: str) -> np.ndarray:
    """A boolean column of a features or results table (absent: all False)."""
    if name not in features.columns:
        return np.zeros(len(features), dtype=bool)
    col = features[name]
    if col.dtype == bool:
        return col.to_numpy()
    if pd.api.types.is_numeric_dtype(col):
        return np.nan_to_num(col.to_numpy(dtype=np.float64), nan=0.0) > 0
    return col.astype(str).str.lower().isin(["true", "1", "1.0"]).to_numpy()


def classifiable(features: pd.DataFrame) -> np.ndarray:
    """Pulses a model can place: a usable field record (``field_ok``), or, where the
    field record is not usable (pinned at full scale, mostly missing), a VHF record
    (``has_vhf``) or mapped sources (``n_sources``) to go on. The others get an empty
    prediction set and no class (review reason ``field_unusable``).
    """
    n = len(features)
    sources = (np.nan_to_num(features["n_sources"].to_numpy(dtype=np.float64)) > 0
               if "n_sources" in features.columns else np.zeros(n, dtype=bool))
    return field_ok(features) | flag(features, "has_vhf") | sources


def field_ok(features: pd.DataFrame) -> np.ndarray:
    """``field_ok`` of a features table (True where the table has no such column)."""
    if "field_ok" not in features.columns:
        return np.ones(len(features), dtype=bool)
    return flag(features, "field_ok")
