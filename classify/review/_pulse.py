"""What the review page shows of one pulse: traces in display units and their SVG plots.

SI units come from :mod:`features`; this module is the one place where they are
scaled for display (microseconds, kilometres, 10^6 m/s), by the table
:data:`DISPLAY_FEATURES`. Plots are drawn by :mod:`classify.svgplot`.

Conventions of the plots
------------------------
* Time axis: physical arrival time at the antenna relative to the trigger
  (channel delay removed), in microseconds, the same for the field and the VHF;
  they show the pulse itself (:func:`zoom_window_s`), a third plot the field
  over the whole analysis window (neighbouring pulses).
* Field change: baseline (median of the record before the analysis window)
  removed, decay-compensated (:func:`features.waveform.decay_compensate`),
  in V/m, physics convention (+ = field vector up).
* VHF power: ``10 log10`` of the linear power (:func:`features.vhf.vhf_power`)
  in the catalog's own power units, floored 60 dB below its peak.
* Markers: the field peak (as :func:`features.waveform.field_features` finds
  it) and the VHF peak, which lies ``vhf_field_lag_s`` before it.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd

from features import waveform
from features.vhf import vhf_power

from .. import svgplot
from ._queue import probability_columns

__all__ = ["DISPLAY_FEATURES", "FIELD_AXIS_LABEL", "field_trace", "vhf_trace",
           "source_track", "field_peak_time_s", "zoom_window_s", "pulse_plots", "pulse_view",
           "thumbnail_svg", "display_value"]

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
    ("isolation_s", "isolation (same flash)", "ms", 1e3),
    ("isolation_any_s", "isolation (any pulse)", "ms", 1e3),
    ("snr_db", "field SNR", "dB", 1.0),
)

#: The field plot's y axis label (the sign convention is stated on the axis).
FIELD_AXIS_LABEL = "E (V/m) physics convention: + = field vector up"
TIME_AXIS_LABEL = "time from trigger (µs)"
VHF_FLOOR_DB = 60.0
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


def _window(t_s, window_s):
    keep = (t_s >= window_s[0]) & (t_s <= window_s[1])
    return keep if keep.sum() >= 2 else np.ones_like(t_s, dtype=bool)


def field_trace(catalog, row: int, window_s=VIEW_WINDOW_S):
    """The field change of one pulse for display.

    Returns
    -------
    t_us : ndarray, shape (m,)
        Physical time from the trigger, in microseconds.
    e_v_per_m : ndarray, shape (m,)
        Baseline removed, decay-compensated, V/m, physics convention (NaN where missing).
    clipped : bool
    """
    ch = catalog.field
    y, clipped = catalog.read_field(row, row + 1)
    rec = ch.recorded_time_s()
    pre = rec < window_s[0]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        base = np.nanmedian(y[0, pre]) if pre.sum() >= 16 else np.nanmedian(y[0])
    y = y - (0.0 if not np.isfinite(base) else base)
    missing = ~np.isfinite(y)
    e = waveform.decay_compensate(np.where(missing, 0.0, y), ch.sample_rate_hz,
                                  ch.decay_time_s)[0]
    e[missing[0]] = np.nan
    t = ch.physical_time_s()
    keep = _window(t, window_s)
    return t[keep] * 1e6, e[keep], bool(clipped[0])


def vhf_trace(catalog, row: int, window_s=VIEW_WINDOW_S, floor_db: float = VHF_FLOOR_DB):
    """The VHF power of one pulse in dB (catalog units), or None without a VHF channel.

    Returns
    -------
    (t_us, power_db) : tuple of ndarray, shape (m,), or None
        Physical time from the trigger in microseconds; ``10 log10`` power,
        floored ``floor_db`` below the peak (NaN where the record is missing).
    """
    if catalog.vhf is None:
        return None
    v, _ = catalog.read_vhf(row, row + 1)
    missing = ~np.isfinite(v[0])
    if missing.all():
        return None
    p = vhf_power(v, catalog.vhf.kind)[0]
    top = float(np.max(p))
    if not top > 0:
        return None
    with np.errstate(divide="ignore"):
        db = 10.0 * np.log10(np.maximum(p, top * 10 ** (-floor_db / 10)))
    db[missing] = np.nan
    t = catalog.vhf.physical_time_s()
    keep = _window(t, window_s)
    return t[keep] * 1e6, db[keep]


def source_track(catalog, row: int):
    """Mapped sources of one pulse: ``(t_us, azimuth_deg, elevation_deg)`` or None."""
    if catalog.sources is None:
        return None
    s = catalog.sources.rows(row, row + 1)
    if s.n_sources == 0:
        return None
    order = np.argsort(s.t_s, kind="stable")
    return s.t_s[order] * 1e6, s.azimuth_deg[order], s.elevation_deg[order]


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


def _lag_text(lag_s):
    if lag_s is None:
        return "VHF-to-field lag: n/a"
    lead = "VHF leads" if lag_s > 0 else ("field leads" if lag_s < 0 else "simultaneous")
    return f"VHF-to-field lag {lag_s * 1e6:+.2f} µs ({lead})"


def pulse_plots(catalog, row: int, result=None, *, width=620):
    """SVG strings of one pulse (None where there is no data).

    ``field`` and ``vhf`` share the time axis of :func:`zoom_window_s`;
    ``field_context`` is the whole analysis window; ``elevation`` (sources vs
    time) and ``sky`` (azimuth/elevation) are coloured by time.

    Parameters
    ----------
    catalog : features.catalog.Catalog
    row : int
        Row of the event in the catalog.
    result : mapping, optional
        Its triage results row (for ``vhf_field_lag_s`` and ``range_m``).
    """
    result = {} if result is None else result
    lag = _finite(result.get("vhf_field_lag_s"))
    t_us, e, clipped = field_trace(catalog, row)
    full = (float(np.nanmin(t_us)), float(np.nanmax(t_us)))
    t_peak = field_peak_time_s(catalog, row, _finite(result.get("range_m")))
    markers = []
    if t_peak is not None:
        markers.append((t_peak * 1e6, "field peak", "#D55E00"))
        if lag is not None:
            markers.append(((t_peak - lag) * 1e6, "VHF peak", "#009E73"))
    lo, hi = zoom_window_s(t_peak, _finite(result.get("fwhm_s")),
                           _finite(result.get("width_s")))
    xlim = (max(full[0], lo * 1e6), min(full[1], hi * 1e6))
    if not xlim[1] > xlim[0]:
        xlim = full
    keep = (t_us >= xlim[0]) & (t_us <= xlim[1])
    title = "Field change around the pulse" + (" (clipped)" if clipped else "")
    plots = {"field": svgplot.line_chart([(t_us[keep], e[keep], "E")], x_label=TIME_AXIS_LABEL,
                                         y_label=FIELD_AXIS_LABEL, width=width, height=330,
                                         title=title, xlim=xlim, markers=markers,
                                         zero_line=True)}
    plots["field_context"] = svgplot.line_chart(
        [(t_us, e, "E")], x_label=TIME_AXIS_LABEL, y_label="E (V/m)", width=width,
        height=150, title="Whole analysis window (grey dashes: the part shown above)", xlim=full,
        markers=[(xlim[0], None, "#888"), (xlim[1], None, "#888")], zero_line=True)
    vt = vhf_trace(catalog, row)
    if vt is not None:
        vk = (vt[0] >= xlim[0]) & (vt[0] <= xlim[1])
        vt = (vt[0][vk], vt[1][vk]) if vk.sum() >= 2 else None
    plots["vhf"] = None if vt is None else svgplot.line_chart(
        [(vt[0], vt[1], "VHF")], x_label=TIME_AXIS_LABEL, y_label="VHF power (dB)",
        width=width, height=200, title=f"VHF power; {_lag_text(lag)}", xlim=xlim,
        markers=markers)
    src = source_track(catalog, row)
    if src is None:
        plots["elevation"] = plots["sky"] = None
    else:
        ts, az, el = src
        span = float(ts[-1] - ts[0])
        colours = [svgplot.time_colour((t - ts[0]) / span if span > 0 else 0.0) for t in ts]
        sx = (min(xlim[0], float(ts[0])), max(xlim[1], float(ts[-1])))
        plots["elevation"] = svgplot.scatter_chart(
            ts, el, x_label=TIME_AXIS_LABEL, y_label="elevation (deg)", colours=colours,
            width=width, height=190, title=f"Mapped sources ({len(ts)}), coloured by time",
            xlim=sx)
        plots["sky"] = svgplot.scatter_chart(
            az, el, x_label="azimuth (deg from north, clockwise)", y_label="elevation (deg)",
            colours=colours, width=300, height=240, title="Sky (early blue, late yellow)")
    return plots


def thumbnail_svg(catalog, row: int) -> str:
    """A small field-change plot (for the look-alikes strip)."""
    t_us, e, _ = field_trace(catalog, row)
    return svgplot.line_chart([(t_us, e, "E")], x_label="µs", y_label="V/m", width=190,
                              height=110, zero_line=True)


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


def pulse_view(catalog, row: int, result: pd.Series, *, classes=None) -> dict:
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

    Returns
    -------
    dict
        ``event_id``, ``time_utc``, ``flash_id``, ``model`` (version, label,
        confidence, probabilities, prediction_set, novel, novelty_score,
        review_reason), ``features`` (label, value, unit), ``plots`` (SVG
        strings or None) and ``notes``.
    """
    res = result.to_dict() if isinstance(result, pd.Series) else dict(result)
    pcols = probability_columns(pd.DataFrame(columns=list(res)))
    probs = [{"class": c[2:], "p": display_value(res.get(c), 1.0)} for c in pcols]
    pset = [s for s in _text(res.get("prediction_set")).split("|") if s]
    reasons = [s for s in _text(res.get("review_reason")).split(";") if s]
    plots = pulse_plots(catalog, row, res)
    if probs:
        in_set = [p["class"] in pset for p in probs]
        plots["probabilities"] = svgplot.hbar_chart(
            [p["class"] for p in probs], [p["p"] or 0.0 for p in probs],
            x_label="probability", width=340, xlim=(0.0, 1.0),
            title="Probabilities (dark: in set)",
            colours=[svgplot.PALETTE[0] if s else "#9db7cc" for s in in_set])
    else:
        plots["probabilities"] = None
    features = []
    for name, label, unit, factor in DISPLAY_FEATURES:
        if name in res:
            features.append({"name": name, "label": label, "unit": unit,
                             "value": display_value(res.get(name), factor)})
    notes = []
    if plots["vhf"] is None:
        notes.append("no VHF record for this pulse")
    if plots["elevation"] is None:
        notes.append("no mapped sources for this pulse")
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
        },
        "features": features,
        "plots": plots,
        "notes": notes,
        "classes": list(classes) if classes is not None else [p["class"] for p in probs],
    }
