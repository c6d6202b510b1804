"""What the review page shows of one pulse: numbers in SI units, JSON-ready.

The page (``static/plot.js``, ``static/review.js``) draws everything itself from
these numbers, so the time axis can be zoomed and panned; the one place where
SI units are scaled for display is the page (microseconds, kilometres) and the
table :data:`DISPLAY_FEATURES` of the key features.

What :func:`pulse_view` holds
-----------------------------
* ``trace``: the record (:mod:`classify.review._trace`): field change and VHF
  power against physical time from the trigger, the pulse's extent and its
  neighbours.
* ``markers``: the field peak (as :func:`features.waveform.field_features`
  finds it) and the VHF peak, ``vhf_field_lag_s`` before it.
* ``view_s``: the time window first shown (:func:`zoom_window_s`).
* ``sources``: the mapped sources and the channel mapped earlier in the flash
  (:mod:`classify.review._sources`).
* ``model``, ``features``, ``notes``: the model's answer, the key features in
  display units, what is missing.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from features import waveform

from ._queue import probability_columns
from ._sources import source_view
from ._trace import field_record, record_trace, trace_json, with_extent

__all__ = ["DISPLAY_FEATURES", "field_trace", "field_peak_time_s", "zoom_window_s",
           "pulse_view", "display_value", "vhf_lag_text"]

#: Key features shown beside the plots: column, label, display unit, factor from SI.
DISPLAY_FEATURES = (
    ("width_s", "width", "µs", 1e6),
    ("fwhm_s", "FWHM", "µs", 1e6),
    ("rise_time_s", "rise time (10-90 %)", "µs", 1e6),
    ("bipolarity", "bipolarity (overshoot / peak)", "", 1.0),
    ("peak_field_v_per_m", "initial peak", "V/m", 1.0),
    ("range_normalized_peak_v_per_m", "peak at 100 km", "V/m", 1.0),
    ("range_m", "range", "km", 1e-3),
    ("speed_m_per_s", "source speed", "10⁶ m/s", 1e-6),
    ("vertical_speed_m_per_s", "vertical speed (+ up)", "10⁶ m/s", 1e-6),
    ("motion_elevation_deg", "direction of motion above horizontal", "deg", 1.0),
    ("altitude_m", "source altitude", "km", 1e-3),
    ("vhf_field_lag_s", "VHF-to-field lag (+: VHF leads)", "µs", 1e6),
    ("vhf_snr_db", "VHF peak over noise", "dB", 1.0),
    ("channel_reuse", "sources on an earlier channel", "", 1.0),
    ("isolation_s", "isolation (same flash)", "ms", 1e3),
    ("isolation_any_s", "isolation (any pulse)", "ms", 1e3),
    ("snr_db", "field SNR", "dB", 1.0),
)

#: Time shown around the trigger, in seconds (the features' analysis window).
VIEW_WINDOW_S = waveform.ANALYSIS_WINDOW_S


def display_value(value, factor: float):
    """``value * factor`` rounded to 4 significant digits; None for missing or non-finite."""
    try:
        v = float(value) * factor
    except (TypeError, ValueError):
        return None
    if not math.isfinite(v):
        return None
    return float(f"{v:.4g}")


def field_trace(catalog, row: int, window_s=VIEW_WINDOW_S):
    """The field change of one pulse over a window, for a static plot (the HTML report).

    Returns
    -------
    t_us : ndarray, shape (m,)
        Physical time from the trigger, in microseconds.
    e_v_per_m : ndarray, shape (m,)
        Baseline removed, decay-compensated, V/m, physics convention (NaN where missing).
    clipped : bool
    """
    t, e, clipped = field_record(catalog, row)
    keep = (t >= window_s[0]) & (t <= window_s[1])
    if keep.sum() < 2:
        keep = np.ones_like(t, dtype=bool)
    return t[keep] * 1e6, e[keep], clipped


def field_peak_time_s(catalog, row: int, range_m=None):
    """Physical time of the initial field peak from the trigger (s), as the features define it."""
    ch = catalog.field
    y, _ = catalog.read_field(row, row + 1)
    try:
        f = waveform.field_features(y, ch.sample_rate_hz, pretrigger_s=ch.pretrigger_s,
                                    delay_s=ch.delay_s, decay_time_s=ch.decay_time_s,
                                    quantum_v_per_m=ch.quantum,
                                    range_m=None if range_m is None else np.array([range_m]))
    except ValueError:  # a record too short for the analysis window
        return None
    t = float(f["peak_time_s"][0])
    return t if math.isfinite(t) else None


def zoom_window_s(peak_time_s, fwhm_s=None, width_s=None):
    """The time window around a pulse for the detailed plots, in seconds from the trigger.

    From ``max(10 us, 4 FWHM)`` before the field peak to ``max(30 us, 1.2 width)``
    after it (the whole analysis window when the peak is unknown); common
    practice, no source.
    """
    if peak_time_s is None:
        return VIEW_WINDOW_S
    pre = max(10e-6, 4.0 * fwhm_s) if fwhm_s is not None and fwhm_s > 0 else 10e-6
    post = max(30e-6, 1.2 * width_s) if width_s is not None and width_s > 0 else 30e-6
    return (peak_time_s - pre, peak_time_s + post)


def vhf_lag_text(lag_s) -> str:
    """``"VHF-to-field lag +0.51 µs (VHF leads)"`` from a lag in seconds (None: n/a)."""
    if lag_s is None:
        return "VHF-to-field lag: n/a"
    lead = "VHF leads" if lag_s > 0 else ("field leads" if lag_s < 0 else "simultaneous")
    return f"VHF-to-field lag {lag_s * 1e6:+.2f} µs ({lead})"


def _finite(v):
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def _text(v):
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return ""
    if v is pd.NaT:
        return ""
    return str(v)


def _markers_and_view(catalog, row, res, t_s):
    lag = _finite(res.get("vhf_field_lag_s"))
    t_peak = field_peak_time_s(catalog, row, _finite(res.get("range_m")))
    markers = []
    if t_peak is not None:
        markers.append({"kind": "field_peak", "label": "field peak", "t_s": t_peak})
        if lag is not None:
            markers.append({"kind": "vhf_peak", "label": "VHF peak", "t_s": t_peak - lag})
    full = (float(np.nanmin(t_s)), float(np.nanmax(t_s)))
    lo, hi = zoom_window_s(t_peak, _finite(res.get("fwhm_s")), _finite(res.get("width_s")))
    view = (max(full[0], lo), min(full[1], hi))
    return markers, (view if view[1] > view[0] else full), lag


def pulse_view(catalog, row: int, result: pd.Series, *, classes=None, trace=None,
               flash_codes=None) -> dict:
    """Everything the page shows of one pulse, JSON-ready (numbers finite or None).

    Parameters
    ----------
    catalog : features.catalog.Catalog
    row : int
        The event's row in the catalog.
    result : pandas.Series
        Its row of the triage results.
    classes : list of str, optional
        The store's classes; probabilities are shown for the model's classes.
    trace : callable, optional
        ``trace(catalog, row) -> dict`` with the keys of
        :data:`classify.review._trace.TRACE_KEYS`; default
        :func:`classify.review._trace.record_trace`.
    flash_codes : ndarray of int, optional
        :func:`classify.review._sources.flash_codes` of the catalog, for the
        channel mapped earlier in the flash.

    Returns
    -------
    dict
        ``event_id``, ``catalog_id``, ``time_utc``, ``flash_id``, ``model``
        (version, label, confidence, probabilities, prediction_set, novel,
        novelty_score, review_reason, vhf_lag_s, vhf_lag_text), ``trace``,
        ``markers`` (kind, label, t_s), ``view_s``, ``sources``, ``features``
        (name, label, unit, value), ``notes`` and ``classes``.
    """
    res = result.to_dict() if isinstance(result, pd.Series) else dict(result)
    pcols = probability_columns(pd.DataFrame(columns=list(res)))
    probs = [{"class": c[2:], "p": display_value(res.get(c), 1.0)} for c in pcols]
    pset = [s for s in _text(res.get("prediction_set")).split("|") if s]
    reasons = [s for s in _text(res.get("review_reason")).split(";") if s]
    tr = with_extent((trace or record_trace)(catalog, row), res)
    markers, view, lag = _markers_and_view(catalog, row, res, np.asarray(tr["time_s"]))
    sources = source_view(catalog, row, flash_codes)
    features = []
    for name, label, unit, factor in DISPLAY_FEATURES:
        if name in res:
            features.append({"name": name, "label": label, "unit": unit,
                             "value": display_value(res.get(name), factor)})
    notes = []
    if tr.get("vhf_envelope") is None:
        notes.append("no VHF record for this pulse")
    if sources is None:
        notes.append("no mapped sources for this pulse")
    elif sources["position"] is None:
        notes.append("sources without positions (no x/y/z, no range): no plan or altitude "
                     "view")
    if tr.get("clipped"):
        notes.append("the field record is clipped (a sample at full scale)")
    ev = catalog.events.iloc[row]
    novel = res.get("novel")
    return {
        "event_id": str(res.get("event_id")),
        "catalog_id": catalog.catalog_id,
        "time_utc": pd.Timestamp(ev["time_utc"]).strftime("%Y-%m-%dT%H:%M:%S.%fZ"),
        "flash_id": _text(ev.get("flash_id")),
        "model": {
            "version": _text(res.get("model_version")),
            "label": _text(res.get("label")),
            "confidence": display_value(res.get("confidence"), 1.0),
            "probabilities": probs,
            "prediction_set": pset,
            "novel": bool(novel) if isinstance(novel, (bool, np.bool_)) else novel == "true",
            "novelty_score": display_value(res.get("novelty_score"), 1.0),
            "review_reason": reasons,
            "review_why": [w for w in _text(res.get("review_why")).split("; ") if w],
            "vhf_lag_s": lag,
            "vhf_lag_text": vhf_lag_text(lag),
        },
        "trace": trace_json(tr),
        "markers": markers,
        "view_s": list(view),
        "sources": sources,
        "features": features,
        "notes": notes,
        "classes": list(classes) if classes is not None else [p["class"] for p in probs],
    }
