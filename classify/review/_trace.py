"""The record of one pulse for the page: field and VHF against physical time, extent, neighbours.

The page draws the record itself (zoom and pan on the time axis), so it gets
numbers, not pictures. :func:`record_trace` takes the field, the pulse's extent and
its neighbours from :func:`features.trace.pulse_trace` (``whole_record=True``): the
page shows the field exactly as the features measured it. :class:`classify.review.
ReviewSession` takes any function of ``(catalog, row)`` returning the keys of
:data:`TRACE_KEYS` (its ``trace`` parameter).

Conventions
-----------
* ``time_s``: physical arrival time at the antenna relative to the trigger
  (the channel delay removed), s, for every sample of the record.
* ``field_v_per_m``: the digitizer offset and the features' baseline line removed,
  decay-compensated (:func:`features.waveform.decay_compensate`), V/m, physics
  convention (+ = field vector up); NaN where the record is missing.
* ``vhf_time_s``, ``vhf_envelope``: linear VHF power (:func:`features.vhf.vhf_power`)
  in the catalog's power units; a record longer than :data:`MAX_VHF_POINTS`
  samples is reduced to the maximum of consecutive blocks (peaks kept), at the
  blocks' mean time.
* ``extent_s``: ``(start, end)`` of the pulse itself, s from the trigger, or None.
* ``neighbours_s``, ``neighbour_peaks_v_per_m``: times (s) and peaks (V/m) of the
  other pulses in the record that the features counted around the pulse.
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from features import waveform
from features.trace import pulse_trace
from features.vhf import vhf_power

__all__ = ["TRACE_KEYS", "MAX_VHF_POINTS", "field_record", "record_trace", "with_extent",
           "trace_json", "compact", "reduce_points"]

TRACE_KEYS = ("time_s", "field_v_per_m", "extent_s", "neighbours_s",
              "neighbour_peaks_v_per_m", "vhf_time_s", "vhf_envelope")
#: Longest VHF record sent to the page as is (longer ones are block maxima).
MAX_VHF_POINTS = 8192


def field_record(catalog, row: int):
    """The whole field record of one pulse for display.

    Returns
    -------
    t_s : ndarray, shape (m,)
        Physical time from the trigger, in seconds.
    e_v_per_m : ndarray, shape (m,)
        Baseline removed, decay-compensated, V/m, physics convention (NaN where missing).
    clipped : bool
    """
    ch = catalog.field
    y, clipped = catalog.read_field(row, row + 1)
    pre = ch.recorded_time_s() < waveform.ANALYSIS_WINDOW_S[0]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        base = np.nanmedian(y[0, pre]) if pre.sum() >= 16 else np.nanmedian(y[0])
    y = y - (0.0 if not np.isfinite(base) else base)
    missing = ~np.isfinite(y)
    e = waveform.decay_compensate(np.where(missing, 0.0, y), ch.sample_rate_hz,
                                  ch.decay_time_s)[0]
    e[missing[0]] = np.nan
    return ch.physical_time_s(), e, bool(clipped[0])


def _vhf_record(catalog, row: int):
    """``(time_s, linear power)`` of the VHF record, block maxima when long; None without one."""
    if catalog.vhf is None:
        return None
    v, _ = catalog.read_vhf(row, row + 1)
    missing = ~np.isfinite(v[0])
    if missing.all():
        return None
    p = vhf_power(v, catalog.vhf.kind)[0]
    p[missing] = np.nan
    t = catalog.vhf.physical_time_s()
    k = math.ceil(len(p) / MAX_VHF_POINTS)
    if k > 1:
        n = len(p) // k * k
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # an all-missing block is NaN
            p = np.nanmax(p[:n].reshape(-1, k), axis=1)
        t = t[:n].reshape(-1, k).mean(axis=1)
    return t, p


def record_trace(catalog, row: int) -> dict:
    """The record of one pulse with the keys of :data:`TRACE_KEYS` (module conventions).

    Parameters
    ----------
    catalog : features.catalog.Catalog
    row : int
        The event's row in the catalog.

    Returns
    -------
    dict
        ``time_s``, ``field_v_per_m`` (ndarray, shape (m,)); ``extent_s`` ((start, end)
        or None for an unusable record); ``neighbours_s``, ``neighbour_peaks_v_per_m``;
        ``vhf_time_s``, ``vhf_envelope`` (ndarray, or None without VHF); and
        ``clipped`` (bool).
    """
    tr = pulse_trace(catalog, row, whole_record=True)
    raw = catalog.field.read_rows(row, row + 1)
    clipped = bool(catalog.field.clipped_rows(raw)[0])
    extent = tr["extent_s"]
    extent = None if not all(math.isfinite(v) for v in extent) else extent
    vhf = _vhf_record(catalog, row)
    return {"time_s": tr["time_s"], "field_v_per_m": tr["field_v_per_m"], "extent_s": extent,
            "neighbours_s": np.asarray(tr["neighbours_s"]),
            "neighbour_peaks_v_per_m": np.asarray(tr["neighbour_peaks_v_per_m"]),
            "vhf_time_s": None if vhf is None else vhf[0],
            "vhf_envelope": None if vhf is None else vhf[1], "clipped": clipped}


def reduce_points(t, y, max_points: int):
    """At most ``max_points`` points of a long trace: the minimum and maximum of each block.

    Parameters
    ----------
    t, y : ndarray, shape (m,)
    max_points : int

    Returns
    -------
    t, y : ndarray
        Unchanged when ``m <= max_points``; else for each block of ``k``
        samples its minimum and its maximum in time order (NaN for an all-NaN
        block), so peaks survive.
    """
    t, y = np.asarray(t, dtype=np.float64), np.asarray(y, dtype=np.float64)
    if len(y) <= max_points:
        return t, y
    k = math.ceil(len(y) / (max_points // 2))
    n = len(y) // k * k
    tb, yb = t[:n].reshape(-1, k), y[:n].reshape(-1, k)
    nan = np.isnan(yb)
    imin = np.argmin(np.where(nan, np.inf, yb), axis=1)
    imax = np.argmax(np.where(nan, -np.inf, yb), axis=1)
    first, second = np.minimum(imin, imax), np.maximum(imin, imax)
    r = np.arange(len(yb))
    ts = np.column_stack([tb[r, first], tb[r, second]]).ravel()
    ys = np.column_stack([yb[r, first], yb[r, second]]).ravel()
    return ts, ys


def _finite(v):
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def with_extent(trace: dict, result) -> dict:
    """``trace`` with ``extent_s`` from the results row's ``pulse_start_s``/``pulse_end_s``.

    Only when the trace has no extent of its own and both columns are finite
    with start <= end; otherwise ``trace`` is returned unchanged.
    """
    if trace.get("extent_s") is not None:
        return trace
    start, end = _finite(result.get("pulse_start_s")), _finite(result.get("pulse_end_s"))
    if start is None or end is None or end < start:
        return trace
    return {**trace, "extent_s": (start, end)}


def compact(values, digits: int = 6) -> list:
    """A 1-D array as a JSON-ready list of floats with ``digits`` significant digits (None for NaN).

    Examples
    --------
    >>> compact([1.0 / 3.0, float("nan"), 2e-7])
    [0.333333, None, 2e-07]
    """
    a = np.asarray(values, dtype=np.float64).ravel()
    text = np.char.mod(f"%.{digits}g", a)
    return [float(s) if math.isfinite(v) else None for s, v in zip(text.tolist(), a)]


def trace_json(trace: dict) -> dict:
    """The trace as sent to the page: lists of floats, ``extent_s`` a pair or None.

    Raises
    ------
    ValueError
        When a trace function returned arrays of different lengths (a programming error
        upstream, reported with the key).
    """
    out = {}
    for a, b in (("time_s", "field_v_per_m"), ("vhf_time_s", "vhf_envelope"),
                 ("neighbours_s", "neighbour_peaks_v_per_m")):
        x, y = trace.get(a), trace.get(b)
        if a == "neighbours_s" and x is not None and y is None:  # times without peaks
            y = np.full(np.shape(x), np.nan)
        if x is None or y is None:
            out[a], out[b] = (None, None) if a == "vhf_time_s" else ([], [])
            continue
        x, y = np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)
        if x.shape != y.shape:
            raise ValueError(f"trace: {a!r} has shape {x.shape} but {b!r} has {y.shape}")
        out[a], out[b] = compact(x, 7), compact(y)
    ext = trace.get("extent_s")
    ext = None if ext is None else [_finite(ext[0]), _finite(ext[1])]
    out["extent_s"] = None if ext is None or None in ext else ext
    out["clipped"] = bool(trace.get("clipped", False))
    return out
