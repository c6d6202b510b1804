"""Cold start without labels: physics rules in station-independent terms (rules v4).

Each class gets a score in [0, 1]: the geometric mean of soft criteria, each a ramp
between two thresholds (0 on one side, 1 on the other). A criterion whose quantity is
missing (NaN: no range, no VHF, no sources, no flash context, not resolved at the
record's SNR or sample rate) is left out, so a catalog is judged on what it has; a
class whose defining quantities (its shape, size or train) are all missing scores half. A pulse
whose best score is below :data:`OTHER_BELOW` fits none of the four classes and is
``other`` (a return stroke, an initial-breakdown pulse, a noise trigger...), and so is a
pulse the return-stroke criteria fit better than any class.

Every criterion is on a quantity whose meaning does not depend on the instrument or on
the cataloguing practice:

* times in seconds measured on the pulse's own extent (:mod:`features.waveform`),
  NaN where the record cannot resolve them;
* the pulse train *inside the record* (neighbours within 100 us, their interval), not
  catalogued neighbours (a station with one record per trigger never catalogues two
  steps of a train);
* the VHF strength relative to the season's own distribution (:func:`season_reference`:
  dB above the season's 25th percentile of ``vhf_snr_db``), not to a receiver's noise
  floor;
* range-normalised amplitudes and transmission-line currents (physical units) where the
  range is known; close under the source, where the radiation term is not measured
  (those two are NaN: within its noise, or a field at full scale), the current moment
  of the three-term inversion instead;
* mapped speeds only when significant (``speed_snr`` >= 3), else unknown;
* no shape criterion (half-cycle, zero crossing, bipolarity) in the near field (range
  under 5 x the source height), where the electrostatic and induction terms make a
  bipolar radiation pulse look like a unipolar step.

The thresholds, with their sources (recalled from memory unless stated):

narrow_bipolar (NBE)
    a bipolar pulse: initial half-cycle 2-10 us (typically 2-8), total width 8-40 us
    (typically 10-30; Smith et al. 1999, JGR 104; Rakov & Uman 2003 ch. 9), FWHM
    0.8-6 us, a clear
    overshoot (bipolarity >= 0.1); isolated: no comparable pulse (over a quarter to half
    its peak) within 100 us in its record (NBE studies' isolation criterion; common
    practice, no single source); VHF
    among the season's strongest, 15-25 dB above its 25th percentile (NBEs are the
    strongest VHF emitters, 10-30 dB above other in-cloud pulses; Smith et al. 1999,
    Rison et al. 2016); TL current 10-150 kA and a range-normalised peak of 2-40 V/m at
    100 km (below the EIP range); sources at 6-20 km when known; fast (>= 1e7 m/s) when
    the speed is significant.
stepped_leader
    narrow pulses: full width < 4-8 us, FWHM < 1-2 us, initial half-cycle < 2-3 us (Rakov
    & Uman 2003, ch. 4: leader pulses ~1 us wide); in a train: at least one comparable
    pulse within 100 us in its own record, 5-100 us apart (interstep intervals 10-50 us,
    Rakov & Uman 2003 ch. 4); weak VHF (< 15 dB above the season's 25th percentile);
    close under the source a current moment under 1e6-1e7 A m (a step's current of a
    few kA over a step of tens of metres, Rakov & Uman 2003 ch. 4: ~1e5 A m; computed);
    speed 1e5-2.6e6 m/s when significant (Rakov & Uman 2003, ch. 4).
recoil
    a few-us pulse (initial half-cycle 2.5-12 us, width 5-40 us, FWHM > 1 us: wider than
    leader steps, Rakov & Uman 2003 ch. 9, K-change pulses);
    moderate VHF (not the season's strongest); TL current < 60 kA and a range-
    normalised peak < 3 V/m at 100 km; fast, 1e6-3e7 m/s, when significant (dart and
    recoil leaders ~1e7 m/s; Rakov & Uman 2003 ch. 4 and 9); when the flash context is
    known: late in the flash (> 10 ms) and on channels mapped earlier (channel reuse >
    0.3; common practice, no source).
energetic_in_cloud (EIP)
    very large: TL current > 100-150 kA (EIPs are reported at ~100-400 kA; Lyu et al.
    2016, GRL) or a range-normalised peak > 10-20 V/m at 100 km, or close under the source
    a current moment > 2e7-5e7 A m (100-400 kA over a channel of some hundreds of metres
    or more; computed from those currents, no direct source); wide: initial half-cycle
    > 8 us, width > 25 us, FWHM > 3 us; bipolar; VHF weak for its size (not the season's
    strongest); at 7-14 km when known; early in its flash (< 20 ms) when known.
other: return strokes
    slow: initial half-cycle or zero crossing > 15-25 us (or, unipolar, a width > 40 us),
    FWHM > 3-5 us, a small overshoot (bipolarity < 0.25-0.45), sources reaching low (< 2-4
    km) when known, smaller than an EIP (TL current < 80-150 kA), after the leader (> 2-10
    ms into the flash) when known (Rakov & Uman 2003, ch. 4: return-stroke fields at
    50-200 km cross zero after tens of us; from memory).
other: initial-breakdown pulses
    bipolar (bipolarity > 0.2) and wide (15-60 us in all), in a train of comparable
    pulses 30-300 us apart in the record, early in the flash (< 20 ms) when known, not
    EIP-sized (TL current < 60-100 kA)
    (Rakov & Uman 2003, ch. 4: preliminary-breakdown pulses of CG flashes, 20-40 us
    wide, tens to hundreds of us apart, in the first milliseconds; from memory).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["RULES_VERSION", "CLASSES", "OTHER_BELOW", "season_reference", "rule_scores",
           "rule_proba", "other_pulses"]

RULES_VERSION = "rules-4"
CLASSES = ("energetic_in_cloud", "narrow_bipolar", "recoil", "stepped_leader")
#: Scores are turned into pseudo-probabilities by normalising ``score ** SHARPNESS``.
SHARPNESS = 3.0
#: Below this best score a pulse fits no class ("other").
OTHER_BELOW = 0.3
#: ... and so does a pulse the return-stroke or initial-breakdown criteria fit better than
#: its best class by this margin.
OTHER_MARGIN = 0.2
_FLOOR = 0.02
#: The leader's train criterion for a pulse alone in its record.
NO_TRAIN = 0.35
_COLUMNS = ("initial_half_cycle_s", "zero_crossing_s", "width_s", "fwhm_s", "bipolarity",
            "neighbours_before", "neighbours_after", "neighbour_interval_s",
            "largest_neighbour_ratio", "vhf_snr_db", "peak_current_a",
            "range_normalized_peak_v_per_m", "speed_m_per_s", "speed_snr", "altitude_m",
            "channel_reuse", "time_in_flash_s", "field_ok", "near_field",
            "current_moment_peak_a_m")


def _ramp_up(x, lo, hi, log=True):
    """0 at or below ``lo``, 1 at or above ``hi``; NaN stays NaN."""
    x = np.asarray(x, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        if log:
            x, lo, hi = np.log10(np.abs(x)), np.log10(lo), np.log10(hi)
        return np.clip((x - lo) / (hi - lo), 0.0, 1.0)


def _ramp_down(x, lo, hi, log=True):
    return 1.0 - _ramp_up(x, lo, hi, log)


def _band(x, lo0, lo1, hi0, hi1, log=True):
    return np.fmin(_ramp_up(x, lo0, lo1, log), _ramp_down(x, hi0, hi1, log))


def _combine(*criteria):
    """Geometric mean of the available criteria (NaN = not available), floored."""
    c = np.vstack(criteria)
    avail = np.isfinite(c)
    logs = np.where(avail, np.log(np.clip(c, _FLOOR, 1.0)), 0.0)
    n = avail.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(n > 0, np.exp(logs.sum(axis=0) / np.maximum(n, 1)), 0.0)


def season_reference(df: pd.DataFrame) -> dict:
    """The season's own references for the rules (from the features of all its pulses).

    Returns
    -------
    dict
        ``vhf_q25_db``: 25th percentile of ``vhf_snr_db`` over the usable pulses (NaN
        without VHF).
    """
    v = df["vhf_snr_db"].to_numpy(dtype=np.float64) if "vhf_snr_db" in df else np.zeros(0)
    v = v[np.isfinite(v)]
    return {"vhf_q25_db": float(np.percentile(v, 25)) if v.size >= 20 else np.nan}


def _get(df, reference):
    f = {c: df[c].to_numpy(dtype=np.float64) if c in df else np.full(len(df), np.nan)
         for c in _COLUMNS}
    # close to the source (range < 5 x its height) the electrostatic and induction terms
    # reshape the pulse (a bipolar radiation pulse reads as a unipolar step): its shape
    # is not the source's, so the shape criteria are left out there
    near = f["near_field"] > 0
    for c in ("initial_half_cycle_s", "zero_crossing_s", "bipolarity"):
        f[c] = np.where(near, np.nan, f[c])
    ref = season_reference(df) if reference is None else reference
    f["vhf_rel"] = f["vhf_snr_db"] - ref["vhf_q25_db"]
    sig = f["speed_snr"] >= 3.0
    f["speed"] = np.where(sig, f["speed_m_per_s"], np.nan)
    f["current"] = np.abs(f["peak_current_a"])
    f["norm_peak"] = np.abs(f["range_normalized_peak_v_per_m"])
    # close under the source where the radiation term is not measured (both NaN there:
    # within its noise, or a field at full scale) the size is the current moment of the
    # exact three-term inversion
    scaled = np.isfinite(f["current"]) | np.isfinite(f["norm_peak"])
    f["moment"] = np.where(scaled, np.nan, np.abs(f["current_moment_peak_a_m"]))
    nb = f["neighbours_before"] + f["neighbours_after"]
    f["n_neighbours"] = nb
    return f


def rule_scores(df: pd.DataFrame, reference=None) -> pd.DataFrame:
    """Per-class rule scores in [0, 1] for a table of features (one row per pulse).

    Parameters
    ----------
    df : DataFrame
        Feature columns of :mod:`features.schema` (missing columns count as NaN).
    reference : dict, optional
        :func:`season_reference` of the whole season (default: computed from ``df``).
    """
    f = _get(df, reference)
    ihc, width, fwhm, bip = (f["initial_half_cycle_s"], f["width_s"], f["fwhm_s"],
                             f["bipolarity"])
    nb = f["n_neighbours"]
    ratio = f["largest_neighbour_ratio"]
    # isolated: no comparable pulse within 100 us (a weak tail or ringing of the pulse
    # itself does not count); in a train: a comparable neighbour
    isolated = np.where(np.isfinite(nb), np.where(nb == 0, 1.0,
                                                  _ramp_down(ratio, 0.25, 0.5, log=False)),
                        np.nan)
    # (a step alone in its record is possible: weak neighbours, an early leader with
    # steps over 100 us apart; it lowers the leader score without ruling it out)
    in_train = np.where(np.isfinite(nb), np.where(nb == 0, NO_TRAIN,
                                                  np.fmax(_ramp_up(ratio, 0.15, 0.3, log=False),
                                                          NO_TRAIN)), np.nan)
    interval = f["neighbour_interval_s"]
    vhf = f["vhf_rel"]
    scores = {
        "narrow_bipolar": _combine(
            _band(ihc, 1.2e-6, 2e-6, 10e-6, 15e-6),
            _band(width, 5e-6, 8e-6, 40e-6, 60e-6),
            _band(fwhm, 0.5e-6, 0.8e-6, 6e-6, 10e-6),
            _ramp_up(bip, 0.05, 0.12, log=False),
            isolated,
            _ramp_up(vhf, 15.0, 25.0, log=False),
            _band(f["current"], 5e3, 10e3, 150e3, 250e3),
            _band(f["norm_peak"], 1.0, 2.0, 40.0, 80.0),
            _band(f["altitude_m"], 4e3, 6e3, 20e3, 24e3, log=False),
            _ramp_up(f["speed"], 3e6, 1e7),
        ),
        "stepped_leader": _combine(
            _ramp_down(width, 4e-6, 8e-6),
            _ramp_down(fwhm, 1e-6, 2e-6),
            _ramp_down(ihc, 2e-6, 3e-6),
            in_train,
            _band(interval, 2e-6, 5e-6, 100e-6, 200e-6),
            _ramp_down(vhf, 15.0, 25.0, log=False),
            _band(f["speed"], 3e4, 1e5, 2.6e6, 6e6),
            _ramp_down(f["moment"], 1e6, 1e7),
        ),
        "recoil": _combine(
            _band(ihc, 1.5e-6, 2.5e-6, 12e-6, 18e-6),
            _band(width, 3e-6, 5e-6, 40e-6, 60e-6),
            _ramp_up(fwhm, 0.8e-6, 1.2e-6),
            _ramp_down(vhf, 18.0, 26.0, log=False),
            _ramp_down(f["current"], 60e3, 100e3),
            _ramp_down(f["norm_peak"], 3.0, 6.0),
            _band(f["speed"], 4e5, 1e6, 3e7, 6e7),
            _ramp_up(f["time_in_flash_s"], 3e-3, 10e-3),
            _ramp_up(f["channel_reuse"], 0.1, 0.3, log=False),
        ),
        "energetic_in_cloud": _combine(
            _ramp_up(f["current"], 60e3, 100e3),
            _ramp_up(f["norm_peak"], 8.0, 15.0),
            _ramp_up(f["moment"], 2e7, 5e7),
            _ramp_up(ihc, 6e-6, 9e-6),
            _ramp_up(width, 18e-6, 28e-6),
            _ramp_up(fwhm, 2e-6, 4e-6),
            _ramp_up(bip, 0.05, 0.12, log=False),
            _ramp_down(vhf, 18.0, 26.0, log=False),
            _band(f["altitude_m"], 5e3, 7e3, 14e3, 17e3, log=False),
            _ramp_down(f["time_in_flash_s"], 20e-3, 60e-3),
        ),
    }
    # a class whose defining quantities are all unknown is not a fit by default: with
    # only weak side criteria left, its score is halved
    core = {"narrow_bipolar": (ihc, width, fwhm, bip, vhf),
            "stepped_leader": (width, fwhm, ihc, nb),
            "recoil": (ihc, width, fwhm),
            "energetic_in_cloud": (f["current"], f["norm_peak"], f["moment"], ihc, width,
                                   fwhm)}
    for c, qs in core.items():
        known = np.any([np.isfinite(q) for q in qs], axis=0)
        scores[c] = np.where(known, scores[c], 0.5 * scores[c])
    return pd.DataFrame({c: scores[c] for c in CLASSES}, index=df.index)


def _return_stroke_score(df, reference=None):
    f = _get(df, reference)
    slow = np.fmax(_ramp_up(f["initial_half_cycle_s"], 15e-6, 25e-6),
                   _ramp_up(f["zero_crossing_s"], 15e-6, 25e-6))
    slow = np.where(np.isnan(f["initial_half_cycle_s"]) & np.isnan(f["zero_crossing_s"]),
                    _ramp_up(f["width_s"], 40e-6, 60e-6), slow)
    return _combine(
        slow,
        _ramp_up(f["fwhm_s"], 3e-6, 5e-6),
        _ramp_down(f["bipolarity"], 0.25, 0.45, log=False),
        _ramp_down(f["altitude_m"], 2e3, 4e3, log=False),
        _ramp_down(f["current"], 80e3, 150e3),
        _ramp_up(f["time_in_flash_s"], 2e-3, 10e-3),
    )


def _initial_breakdown_score(df, reference=None):
    f = _get(df, reference)
    ratio = f["largest_neighbour_ratio"]
    train = np.where(f["n_neighbours"] > 0, _ramp_up(ratio, 0.3, 0.6, log=False), 0.0)
    train = np.where(np.isfinite(f["n_neighbours"]), train, np.nan)
    return _combine(
        _band(f["width_s"], 10e-6, 15e-6, 60e-6, 90e-6),
        _ramp_up(f["bipolarity"], 0.15, 0.3, log=False),
        train,
        _band(f["neighbour_interval_s"], 15e-6, 30e-6, 300e-6, 500e-6),
        _ramp_down(f["time_in_flash_s"], 20e-3, 50e-3),
        _ramp_down(f["current"], 60e3, 100e3),
        _ramp_down(f["norm_peak"], 8.0, 15.0),
    )


def other_pulses(df: pd.DataFrame, scores: pd.DataFrame | None = None,
                 reference=None) -> np.ndarray:
    """Pulses that fit none of the four classes (bool, one per row).

    Those whose best class score is below :data:`OTHER_BELOW`, and those the return-stroke
    or initial-breakdown criteria fit better than any class (by :data:`OTHER_MARGIN`).
    """
    s = rule_scores(df, reference) if scores is None else scores
    best = s.to_numpy().max(axis=1)
    rs = _return_stroke_score(df, reference)
    ib = _initial_breakdown_score(df, reference)
    return (best < OTHER_BELOW) | (rs > best + OTHER_MARGIN) | (ib > best + OTHER_MARGIN)


def rule_proba(df: pd.DataFrame, reference=None, scores=None) -> np.ndarray:
    """Pseudo-probabilities, shape (n_pulses, 4), columns in :data:`CLASSES` order."""
    s = (rule_scores(df, reference) if scores is None else scores).to_numpy()
    s = np.clip(s, 1e-6, 1.0) ** SHARPNESS
    return s / s.sum(axis=1, keepdims=True)
