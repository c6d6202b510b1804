"""One pulse as the features see it: the processed field, its extent, its neighbours, VHF.

What a plot shows must agree with the table: :func:`pulse_trace` runs the same steps
as :func:`features.extract.compute_chunk` (same span of record, decay compensation,
baseline line, pulse detection, VHF envelope) on one row and returns the curves and
marks, in SI units and physical time relative to the trigger.
"""

from __future__ import annotations

import numpy as np

from .catalog import Catalog
from .extract import _column_span, _read_rows, clip_level, vhf_window_s
from .pulses import CONTEXT_S
from .vhf import VHF_SPAN_S, vhf_envelope, vhf_features, vhf_power
from .waveform import ANALYSIS_WINDOW_S, decay_compensate, field_features

__all__ = ["pulse_trace"]


def pulse_trace(catalog: Catalog, row: int, *, whole_record: bool = False) -> dict:
    """The processed field and VHF of one catalogued pulse, with its extent and neighbours.

    Parameters
    ----------
    catalog : Catalog
    row : int
        Row of the pulse in the catalog (0-based).
    whole_record : bool, default=False
        Return the field over the whole record, processed the same way (the same
        offset, decay compensation and baseline; on the analysed span the values are
        the features'), instead of the analysed span only.

    Returns
    -------
    dict
        ``time_s`` (1-D, physical time of each field sample relative to the trigger, s),
        ``field_v_per_m`` (baseline removed, decay-compensated, physics convention, V/m),
        ``extent_s`` ((start, end) of the pulse, s), ``peak_time_s``,
        ``peak_field_v_per_m``, ``neighbours_s`` and ``neighbour_peaks_v_per_m``
        (peak times and signed peaks of the other pulses in the record, within the
        features' context of :data:`features.pulses.CONTEXT_S`), ``noise_v_per_m``;
        ``vhf_time_s``, ``vhf_envelope`` (smoothed linear power in the catalog's units;
        None without VHF), ``vhf_window_s`` and ``vhf_peak_time_s``.

    Examples
    --------
    A tiny invented catalog (two pulses of the fictional station hollowmere):

    >>> import tempfile, numpy as np
    >>> from features import write_catalog
    >>> t = np.arange(2000) / 20e6 - 50e-6                       # s, 20 MS/s
    >>> field = np.vstack([np.exp(-0.5 * (t / 1e-6) ** 2),        # V/m, invented pulses
    ...                    -2 * np.exp(-0.5 * (t / 2e-6) ** 2)]).astype(np.float32)
    >>> folder = write_catalog(
    ...     tempfile.mkdtemp() + "/hollowmere-demo",
    ...     {"event_id": ["a", "b"], "time_utc": ["2031-07-14T21:03:55.000001Z",
    ...                                           "2031-07-14T21:03:55.250000Z"]},
    ...     field, field_meta={"sample_rate_hz": 20e6, "pretrigger_s": 50e-6, "units": "V/m",
    ...                        "sign_convention": "physics", "decay_time_s": None},
    ...     catalog_id="hollowmere-demo", station="hollowmere")
    >>> from features import open_catalog, pulse_trace
    >>> tr = pulse_trace(open_catalog(folder), 1)
    >>> abs(tr["peak_time_s"]) < 0.05e-6, round(tr["peak_field_v_per_m"], 2)  # s, V/m
    (True, -2.0)
    >>> tr["time_s"].shape == tr["field_v_per_m"].shape
    True
    """
    if not 0 <= int(row) < catalog.n_events:
        raise IndexError(f"row {row} is outside the catalog ({catalog.n_events} pulses)")
    row = int(row)
    fch = catalog.field
    c0, c1 = _column_span(fch, *ANALYSIS_WINDOW_S)
    seg, _ = _read_rows(fch, row, row + 1, (c0, c1))
    seg *= fch.scale * fch.sign
    rng = catalog.range_m[row:row + 1]
    f, tr = field_features(seg, fch.sample_rate_hz,
                           pretrigger_s=fch.pretrigger_s - c0 / fch.sample_rate_hz,
                           delay_s=fch.delay_s, decay_time_s=fch.decay_time_s,
                           quantum_v_per_m=fch.quantum, range_m=rng,
                           full_scale_v_per_m=clip_level(fch), return_trace=True)
    t = tr["time_s"]
    e = tr["field_v_per_m"][0]
    table, own = tr["pulses"], int(tr["own"][0])
    if whole_record:
        t, e = _whole_record(catalog, row, c0, tr)
    others = np.flatnonzero((table.row == 0) & (np.arange(len(table)) != own))
    t_span = tr["time_s"]
    t_peak = (t_span[np.clip(table.peak_col[others], 0, t_span.size - 1)] if others.size
              else t_span[:0])
    near = np.abs(t_peak - f["peak_time_s"][0]) <= CONTEXT_S
    peaks = (table.peak[others] * table.sign[others])[near] if others.size else e[:0]
    out = {
        "time_s": t,
        "field_v_per_m": e,
        "extent_s": (float(f["pulse_start_s"][0]), float(f["end_time_s"][0])),
        "peak_time_s": float(f["peak_time_s"][0]),
        "peak_field_v_per_m": float(f["peak_field_v_per_m"][0]),
        "neighbours_s": t_peak[near],
        "neighbour_peaks_v_per_m": peaks,
        "noise_v_per_m": float(tr["sigma"][0]),
        "vhf_time_s": None, "vhf_envelope": None, "vhf_window_s": None,
        "vhf_peak_time_s": float("nan"),
    }
    if catalog.vhf is not None:
        vch = catalog.vhf
        v0, v1 = _column_span(vch, VHF_SPAN_S[0] + vch.delay_s, VHF_SPAN_S[1] + vch.delay_s)
        vseg, _ = _read_rows(vch, row, row + 1, (v0, v1))
        vseg *= vch.scale
        window = vhf_window_s(f, 1)
        pre = vch.pretrigger_s - v0 / vch.sample_rate_hz
        v = vhf_features(vseg, vch.sample_rate_hz, vch.kind, window, pretrigger_s=pre,
                         delay_s=vch.delay_s, full_scale=clip_level(vch))
        env, k = vhf_envelope(vhf_power(vseg, vch.kind), vch.sample_rate_hz)
        nb = env.shape[1]
        out["vhf_time_s"] = (np.arange(nb) + 0.5) * k / vch.sample_rate_hz - pre - vch.delay_s
        out["vhf_envelope"] = env[0]
        out["vhf_window_s"] = (float(window[0][0]), float(window[1][0]))
        out["vhf_peak_time_s"] = float(v["vhf_peak_time_s"][0])
    return out


def _whole_record(catalog, row, c0, tr):
    """The whole field record processed as the analysed span was (see ``whole_record``)."""
    fch = catalog.field
    raw = fch.read_rows(row, row + 1).astype(np.float64) * (fch.scale * fch.sign)
    missing = np.isnan(raw)
    x = np.where(missing, np.nanmedian(raw) if (~missing).any() else 0.0, raw)
    x = x - tr["offset"][0]
    e0 = decay_compensate(x, fch.sample_rate_hz, fch.decay_time_s)[0]
    span = tr["compensated_v_per_m"][0]
    # decay compensation integrates from the first sample: over the span the whole
    # record's compensated field differs from the span's by a constant
    shift = float(np.mean(e0[c0:c0 + span.size] - span))
    level, slope, lo, hi = (float(v[0]) for v in tr["baseline"])
    cols = np.arange(e0.size) - c0
    e = e0 - shift - (level + slope * np.clip(cols, lo, hi))
    e[missing[0]] = np.nan
    return fch.physical_time_s(), e
