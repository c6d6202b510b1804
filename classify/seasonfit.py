"""Fitting a trained model's decisions to a season of another station (``season_fit``).

A model trained on one station's labels meets a season of another station, another
instrument setting or another year. Where it places nearly every pulse confidently, the
season looks like its training and its decisions stand. Where it does not, the season
itself is fitted: the pulses the model places confidently (calibrated probability
>= :data:`classify.coldstart.CONFIDENT`, a one-class prediction set, not novel, the same
class with a censored value relaxed, not close under its source: :func:`close_under_source`)
and the analysts' labels of the catalog anchor the
cold start's self-training on the season (:func:`classify.coldstart.cold_start`), whose
model then classifies every pulse; the anchors keep the trained model's decisions, and
novelty stays the trained model's: it, not the rules' ``other`` (a pulse no rule class
fits), flags a pulse of a class the model does not know.

``mode`` says when: ``"always"``, ``"never"``, or ``"auto"`` (the default of
``pulsesort triage --model`` and :func:`classify.predict.predict_catalog`): fit when the
model would send more than :data:`AUTO_DOUBT_SHARE` of the usable pulses to review for
doubt (:func:`doubtful`). The results file's ``adaptation`` column says which was done
and on what share.
"""

from __future__ import annotations

import numpy as np

from features import InputError

#: ``mode="auto"`` fits the season when the trained model would send more than this share
#: of its usable pulses to review for doubt. The project's choice, no source: a model
#: doubts 0.7-1.8 % of a season like its training (own next season, stress-1 and
#: stress-3, and the other trainings of the cross-world matrix), and seasons of
#: stations it generalises to less well start at 2.7 %, where the fit gained (own
#: stress-2 0.989 -> 0.993, stress-0 0.966 -> 0.983) while it cost 0.005-0.01 on the
#: seasons below. Chosen on that matrix (run at ``18b9874``); it was 5 % (the review
#: budget) before.
AUTO_DOUBT_SHARE = 0.025

#: The values of ``season_fit``.
MODES = ("auto", "always", "never")


def season_fit_mode(value) -> str:
    """``"auto"``, ``"always"`` or ``"never"`` from a mode name or a bool.

    >>> season_fit_mode(True), season_fit_mode(False), season_fit_mode("auto")
    ('always', 'never', 'auto')
    """
    if value is True or value is False or isinstance(value, np.bool_):
        return "always" if value else "never"
    if isinstance(value, str) and value in MODES:
        return value
    raise InputError(f"season_fit: expected one of {', '.join(MODES)} (or a bool), "
                     f"got {value!r}")


def _novel(d) -> np.ndarray:
    """Pulses beyond the trained model's novelty threshold (none without one)."""
    if d["novelty_threshold"] is None:
        return np.zeros(len(d["proba"]), dtype=bool)
    return np.asarray(d["novelty"]) > d["novelty_threshold"]


def confident_rows(d) -> np.ndarray:
    """Rows the trained model places confidently: usable, calibrated probability >=
    :data:`classify.coldstart.CONFIDENT`, a one-class set, not novel, and the same top
    class with a censored value relaxed."""
    from .coldstart import CONFIDENT  # not at import: the CLI's parser reads MODES only

    proba, relaxed = np.asarray(d["proba"]), np.asarray(d["relaxed"])
    top = np.argmax(proba, axis=1)
    sure = (np.asarray(d["usable"]) & (proba.max(axis=1) >= CONFIDENT) & ~_novel(d)
            & (np.asarray(d["sets"]).sum(axis=1) == 1) & (np.argmax(relaxed, axis=1) == top))
    return np.flatnonzero(sure)


def close_under_source(table) -> np.ndarray:
    """Pulses close under their source whose radiation term is not measured: range known,
    the range-normalised peak NaN (the radiation term within its noise, or the field at
    full scale; :mod:`features.waveform`).

    Their field is the electrostatic and induction terms, whose shape and sign differ
    from the radiation field a model sees at the usual distances, so a trained model's
    confidence there is an extrapolation: they are not anchors of a season fit.
    """
    n = len(table)
    if "range_m" not in table or "range_normalized_peak_v_per_m" not in table:
        return np.zeros(n, dtype=bool)
    rng = np.asarray(table["range_m"], dtype=np.float64)
    norm = np.asarray(table["range_normalized_peak_v_per_m"], dtype=np.float64)
    ok = (np.asarray(table["field_ok"], dtype=np.float64) > 0 if "field_ok" in table
          else np.ones(n, dtype=bool))
    return ok & np.isfinite(rng) & np.isnan(norm)


def doubtful(d, review_below: float) -> np.ndarray:
    """Usable pulses the trained model would send to review for doubt: confidence below
    ``review_below``, more than one class in the prediction set (which always holds the
    most probable class, as :func:`classify.decide.decide` completes it), or novel."""
    proba = np.asarray(d["proba"])
    sets = np.array(d["sets"], dtype=bool, copy=True)
    sets[np.arange(len(proba)), np.argmax(proba, axis=1)] = True
    return np.asarray(d["usable"]) & ((proba.max(axis=1) < review_below) | _novel(d)
                                      | (sets.sum(axis=1) > 1))


def fit_to_season(d, frame, cat, settings, *, mode="auto", store=None, n_jobs=1) -> dict:
    """The trained model's decisions ``d``, fitted to the season where ``mode`` says so.

    Parameters
    ----------
    d : dict
        The trained model's decisions (:func:`classify.predict.season_decisions`).
    frame : pandas.DataFrame or callable
        The season's numeric feature columns (the triage spill's), or a function that
        returns them (called only when the season is fitted).
    cat : Catalog
        The season's catalog (its flashes group the self-training's folds).
    settings : classify.triage.TriageSettings or alike
        Its ``review_below``, ``self_training`` and ``coverage`` are used.
    mode : {"auto", "always", "never"}, default="auto"
        ``"auto"`` fits when the model would send more than :data:`AUTO_DOUBT_SHARE` of
        the usable pulses to review for doubt (:func:`doubtful`).
    store : LabelStore, optional
        Analysts' labels of this catalog: more anchors (an analyst's label wins).
    n_jobs : int, default=1

    Returns
    -------
    dict
        ``d`` itself (its ``adaptation`` text saying why no fit was made) or the fitted
        decisions, in the same form.
    """
    from . import coldstart, rules

    mode = season_fit_mode(mode)
    if mode == "never":
        return d
    usable = int(np.count_nonzero(d["usable"]))
    doubt = np.count_nonzero(doubtful(d, settings.review_below)) / usable if usable else 0.0
    share = f"the model doubts {100 * doubt:.1f} % of {usable:,} usable pulses"
    if mode == "auto" and doubt <= AUTO_DOUBT_SHARE:
        d = dict(d)
        d["adaptation"] = (f"{d['adaptation']}; no season fit ({share}, "
                           f"<= {100 * AUTO_DOUBT_SHARE:g} %)")
        return d
    table = frame() if callable(frame) else frame
    rows = confident_rows(d)
    rows = rows[~close_under_source(table)[rows]]
    top = np.argmax(np.asarray(d["proba"]), axis=1)
    fit = coldstart.cold_start(table, None, cat, settings, store=store, n_jobs=n_jobs,
                               seeds=(rows, np.asarray(d["classes"])[top[rows]]))
    if fit["version"] == rules.RULES_VERSION:  # the self-training could not run
        return d
    # the pulses the model placed confidently keep the model's decision
    cols = {c: i for i, c in enumerate(np.asarray(fit["classes"]).astype(str))}
    src = [j for j, c in enumerate(np.asarray(d["classes"]).astype(str)) if c in cols]
    dst = [cols[str(d["classes"][j])] for j in src]
    for key in ("proba", "relaxed", "sets"):
        fit[key] = np.array(fit[key], copy=True)
        block = np.zeros((rows.size, fit[key].shape[1]), dtype=fit[key].dtype)
        block[:, dst] = np.asarray(d[key])[rows][:, src]
        fit[key][rows] = block
    # the rules' "other" (fits no rule class) is not used: with a trained model, a pulse
    # of a class new to it is what its novelty score flags, while on another station the
    # rules' "other" takes pulses of known classes whose values the rules' bounds miss
    # (on the spec-literal seasons, 30-70 of 4,000 fitted pulses, nearly all of a known
    # class)
    fit["other"] = None
    fit["novelty"], fit["novelty_threshold"] = d["novelty"], d["novelty_threshold"]
    fit["version"] = f"{d['version']} + fitted on the season"
    why = "" if mode == "always" else f" ({share}, > {100 * AUTO_DOUBT_SHARE:g} %)"
    fit["adaptation"] = (f"fitted on the season{why} from {rows.size:,} pulses the model "
                         f"placed confidently: {fit['adaptation']}")
    return fit
