"""Cold start without labels: physics rules from published pulse criteria.

Each class gets a score in (0, 1]: the geometric mean of soft criteria, each a
ramp between two thresholds on a logarithmic axis (0 on one side, 1 on the
other). A criterion whose feature is missing (NaN) is left out, so a catalog
without range or VHF is judged on what it has. Scores become pseudo-
probabilities by normalising ``score ** SHARPNESS``; they are not calibrated
and the output says so (``model_version = "rules-<n>"``).

The thresholds, with their sources (values recalled from memory unless stated):

narrow_bipolar (NBE; compact intracloud discharge)
    initial half-cycle 1.5-10 us (2-8 us typical), a full width of 8 us or more
    (10-30 us typical) and a clear overshoot (bipolarity > 0.15): Smith et al.
    (1999, JGR 104, 4189); Rakov & Uman (2003, ch. 9); at the start of an
    intracloud flash or alone (they often initiate one), not on an old channel
    (time in flash < 5-50 ms, channel reuse < 0.2-0.5: common practice, no
    source); isolated in time: no other catalogued pulse within about
    100 us (isolation criterion of NBE studies; the exact window varies,
    common practice); VHF far stronger than other in-cloud pulses (10-30 dB):
    here a VHF peak 20-30 dB over the noise floor (common practice, no
    source); TL peak current below the EIP range.
stepped_leader
    narrow, mostly unipolar pulses (width < 3 us, bipolarity < 0.3):
    Rakov & Uman (2003, ch. 4, leader pulses ~1 us wide); in trains with
    10-30 us intervals (isolation within the flash < 100 us); leader speeds
    1e5 to 2.6e6 m/s (Rakov & Uman 2003, ch. 4; 2e5 m/s typical); no retracing
    of old channels.
recoil
    fast: 1e6 to 1e8 m/s (dart and recoil leaders, ~1e7 m/s typical; Rakov &
    Uman 2003, ch. 4 and 9); retrace channels mapped earlier in the flash
    (channel_reuse > 0.5); late in the flash (> 10 ms: common practice, no
    source).
energetic_in_cloud (EIP)
    very large current-equivalent peak: TL peak current > 150 kA (EIPs are
    reported above ~200 kA; Lyu et al. 2016, GRL; from memory), bipolar, with an
    initial half-cycle longer than NBEs (> 8 us), early in the flash (< 20 ms).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["RULES_VERSION", "CLASSES", "rule_scores", "rule_proba"]

RULES_VERSION = "rules-2"
CLASSES = ("energetic_in_cloud", "narrow_bipolar", "recoil", "stepped_leader")
SHARPNESS = 3.0
_FLOOR = 0.02


def _ramp_up(x, lo, hi, log=True):
    """0 at or below ``lo``, 1 at or above ``hi``; NaN stays NaN."""
    x = np.asarray(x, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        if log:
            x, lo, hi = np.log10(np.abs(x)), np.log10(lo), np.log10(hi)
        r = np.clip((x - lo) / (hi - lo), 0.0, 1.0)
    return r


def _ramp_down(x, lo, hi, log=True):
    return 1.0 - _ramp_up(x, lo, hi, log)


def _band(x, lo0, lo1, hi0, hi1):
    return np.fmin(_ramp_up(x, lo0, lo1), _ramp_down(x, hi0, hi1))


def _combine(*criteria):
    """Geometric mean of the available criteria (NaN = not available), floored."""
    c = np.vstack(criteria)
    avail = np.isfinite(c)
    logs = np.where(avail, np.log(np.clip(c, _FLOOR, 1.0)), 0.0)
    n = avail.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(n > 0, np.exp(logs.sum(axis=0) / np.maximum(n, 1)), 0.5)


def rule_scores(df: pd.DataFrame, vhf_reference_db=None) -> pd.DataFrame:
    """Per-class rule scores in (0, 1] for a table of features (one row per pulse).

    Parameters
    ----------
    df : DataFrame
        Feature columns of :mod:`features.schema` (missing columns count as NaN).
    vhf_reference_db : float, optional
        A typical VHF SNR of the catalog (e.g. its median). Given, "strong VHF"
        means 3-8 dB above it; otherwise 20-30 dB above the noise floor.
    """
    f = {c: df[c].to_numpy(dtype=np.float64) if c in df else np.full(len(df), np.nan)
         for c in ("initial_half_cycle_s", "bipolarity", "width_s", "isolation_any_s",
                   "isolation_s", "vhf_snr_db", "peak_current_a", "speed_m_per_s",
                   "channel_reuse", "time_in_flash_s")}
    vhf = f["vhf_snr_db"]
    if vhf_reference_db is None:
        strong_vhf = _ramp_up(vhf, 20.0, 30.0, log=False)
    else:
        strong_vhf = _ramp_up(vhf - vhf_reference_db, 3.0, 8.0, log=False)
    current = np.abs(f["peak_current_a"])
    ihc = f["initial_half_cycle_s"]
    bip = f["bipolarity"]
    # isolation: a pulse alone in the catalog has none -> treat as very isolated
    iso_any = np.where(np.isnan(f["isolation_any_s"]), 1.0, f["isolation_any_s"])
    iso_flash = np.where(np.isnan(f["isolation_s"]), 1.0, f["isolation_s"])
    reuse = f["channel_reuse"]
    t_in = f["time_in_flash_s"]
    speed = f["speed_m_per_s"]
    scores = {
        "narrow_bipolar": _combine(
            _band(ihc, 1.0e-6, 1.5e-6, 8e-6, 12e-6),
            _ramp_up(f["width_s"], 4e-6, 8e-6),
            _ramp_up(bip, 0.08, 0.15),
            _ramp_up(iso_any, 30e-6, 100e-6),
            strong_vhf,
            _ramp_down(current, 120e3, 200e3),
            _ramp_down(t_in, 5e-3, 50e-3),
            _ramp_down(reuse, 0.2, 0.5, log=False),
        ),
        "stepped_leader": _combine(
            _ramp_down(f["width_s"], 3e-6, 6e-6),
            _ramp_down(bip, 0.3, 0.5),
            _ramp_down(iso_flash, 100e-6, 500e-6),
            _band(speed, 3e4, 1e5, 2.6e6, 6e6),
            _ramp_down(reuse, 0.3, 0.6, log=False),
        ),
        "recoil": _combine(
            _band(speed, 4e5, 1.5e6, 1e8, 3e8),
            _ramp_up(reuse, 0.2, 0.5, log=False),
            _ramp_up(t_in, 3e-3, 10e-3),
            _ramp_down(current, 80e3, 150e3),
        ),
        "energetic_in_cloud": _combine(
            _ramp_up(current, 100e3, 150e3),
            _ramp_up(bip, 0.08, 0.15),
            _ramp_up(ihc, 6e-6, 9e-6),
            _ramp_down(t_in, 20e-3, 60e-3),
        ),
    }
    return pd.DataFrame({c: scores[c] for c in CLASSES}, index=df.index)


def rule_proba(df: pd.DataFrame, vhf_reference_db=None) -> np.ndarray:
    """Pseudo-probabilities, shape (n_pulses, 4), columns in :data:`CLASSES` order."""
    s = rule_scores(df, vhf_reference_db).to_numpy() ** SHARPNESS
    return s / s.sum(axis=1, keepdims=True)
