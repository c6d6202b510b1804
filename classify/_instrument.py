"""Instrument settings of a catalog and the settings that differ between two catalogs.

The first part of :func:`classify.drift.compare_catalogs`: :func:`instrument_settings`
reads a catalog's settings (and the presence of range, flash ids, VHF and mapped
sources), :func:`instrument_changes` lists those that differ, each with the features it
is expected to move (:data:`SETTING_EFFECTS`). :mod:`classify.drift` re-exports these
names.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["PRESENCE_TOL", "SETTING_EFFECTS", "SettingEffect", "InstrumentChange",
           "instrument_settings", "instrument_changes"]

#: A change in the fraction of events with range (or flash id) counts above this.
PRESENCE_TOL = 0.05

_FIELD_TIMING = ("rise_time_s", "fwhm_s", "initial_half_cycle_s", "zero_crossing_s",
                 "width_s", "pulse_start_s", "pulse_end_s")
#: Features of the pulse among its neighbours in the record (what the detector sees
#: depends on the noise, the resolution and the record's length).
_TRAIN = ("neighbours_before", "neighbours_after", "nearest_neighbour_s",
          "neighbour_interval_s", "largest_neighbour_ratio", "pre_level_ratio",
          "baseline_slope_ratio", "record_before_s", "record_after_s")
_AMPLITUDE = ("peak_field_v_per_m", "range_normalized_peak_v_per_m",
              "current_moment_peak_a_m", "charge_moment_change_c_m", "peak_current_a")
_RANGE = ("range_normalized_peak_v_per_m", "current_moment_peak_a_m",
          "charge_moment_change_c_m", "peak_current_a", "vhf_to_field_db", "speed_m_per_s",
          "vertical_speed_m_per_s", "altitude_m", "range_m")
_VHF = ("vhf_peak_db", "vhf_field_lag_s", "vhf_lag_first_peak_s", "vhf_to_field_db",
        "vhf_field_ratio_db", "vhf_snr_db", "vhf_width_s", "vhf_censored", "has_vhf")
_VHF_LEVEL = ("vhf_peak_db", "vhf_snr_db", "vhf_width_s", "vhf_to_field_db",
              "vhf_field_ratio_db")
_MAPPING = ("n_sources", "speed_m_per_s", "speed_se_m_per_s", "speed_snr",
            "vertical_speed_m_per_s", "vertical_speed_se_m_per_s", "vertical_confounded",
            "motion_elevation_deg", "angular_rate_deg_per_s", "angular_rate_se_deg_per_s",
            "net_to_path", "altitude_m", "elevation_median_deg", "source_duration_s",
            "source_range_m", "channel_reuse", "range_m", "breakdown_snr",
            "altitude_assumed")
_XYZ = ("speed_m_per_s", "speed_se_m_per_s", "speed_snr", "vertical_speed_m_per_s",
        "vertical_speed_se_m_per_s", "vertical_confounded", "motion_elevation_deg",
        "net_to_path", "altitude_m", "source_range_m", "channel_reuse", "range_m",
        "breakdown_snr")


@dataclass(frozen=True)
class SettingEffect:
    """One row of :data:`SETTING_EFFECTS`: a setting and the features it moves."""

    setting: str
    affects: tuple[str, ...]
    why: str


#: Instrument (and catalog-content) settings and the features each is expected to
#: affect, from the feature definitions in :mod:`features.waveform`,
#: :mod:`features.vhf`, :mod:`features.mapping` and :mod:`features.context`.
SETTING_EFFECTS: tuple[SettingEffect, ...] = (
    SettingEffect("field.sample_rate_hz", _FIELD_TIMING + _TRAIN + (
        "peak_field_v_per_m", "bipolarity", "field_noise_v_per_m", "snr_db"),
        "time resolution: durations near 1/rate are quantised, fast peaks under-sampled, "
        "the noise bandwidth changes"),
    SettingEffect("field.window_s", _TRAIN + (
        "width_s", "zero_crossing_s", "initial_half_cycle_s", "bipolarity",
        "charge_moment_change_c_m", "field_ok", "pulse_end_s"),
        "a shorter record cuts long pulses, late zero crossings and overshoots"),
    SettingEffect("field.pretrigger_s", _TRAIN + (
        "field_noise_v_per_m", "snr_db", "field_ok", "peak_field_v_per_m", "baseline_short"),
        "less record before the trigger for the baseline and noise (and the peak search)"),
    SettingEffect("field.decay_time_s", _TRAIN + (
        "bipolarity", "zero_crossing_s", "width_s", "initial_half_cycle_s", "fwhm_s",
        "current_moment_peak_a_m", "charge_moment_change_c_m", "peak_field_v_per_m",
        "range_normalized_peak_v_per_m", "peak_current_a", "pulse_end_s", "pulse_start_s",
        "moments_converged"),
        "RC decay compensation: the slow part of the pulse (overshoot, zero crossing, "
        "integrals) depends on the decay constant, so a changed or wrong one moves it"),
    SettingEffect("field.delay_s", ("vhf_field_lag_s", "vhf_lag_first_peak_s"),
                  "the VHF-to-field lag is measured on delay-corrected times"),
    SettingEffect("field.sign_convention", ("polarity",) + _AMPLITUDE,
                  "converted on load: drift of signed features then means a convention "
                  "declared wrongly"),
    SettingEffect("field.units", _AMPLITUDE + ("field_noise_v_per_m",),
                  "V/m vs counts x scale: a wrong calibration scales every amplitude"),
    SettingEffect("field.scale", _AMPLITUDE + ("field_noise_v_per_m",),
                  "V/m per count: a wrong calibration scales every amplitude"),
    SettingEffect("field.full_scale", (
        "clipped", "field_censored", "peak_field_v_per_m", "range_normalized_peak_v_per_m",
        "peak_current_a", "fwhm_s"),
        "clip level: more clipped rows, flattened (under-estimated, widened) peaks"),
    SettingEffect("field.dtype", _TRAIN + ("field_noise_v_per_m", "snr_db", "rise_time_s",
                                           "bipolarity", "zero_crossing_s",
                                           "initial_half_cycle_s"),
                  "integer samples floor the noise at one digitizer step"),
    SettingEffect("vhf.present", _VHF, "without a VHF channel every VHF feature is NaN"),
    SettingEffect("vhf.sample_rate_hz", ("vhf_width_s", "vhf_field_lag_s") + _VHF_LEVEL[:2]
                  + ("vhf_to_field_db", "vhf_field_ratio_db"),
                  "time resolution of the VHF power and of its peak"),
    SettingEffect("vhf.window_s", ("vhf_snr_db", "vhf_field_ratio_db", "has_vhf"),
                  "record length around the trigger: noise floor and search window"),
    SettingEffect("vhf.pretrigger_s", ("vhf_snr_db", "vhf_field_ratio_db", "has_vhf"),
                  "record before the trigger for the VHF noise floor"),
    SettingEffect("vhf.delay_s", ("vhf_field_lag_s", "vhf_lag_first_peak_s"),
                  "the VHF-to-field lag is measured on delay-corrected times"),
    SettingEffect("vhf.band_hz", _VHF_LEVEL,
                  "another pass band sees another part of the radiation spectrum"),
    SettingEffect("vhf.kind", _VHF_LEVEL + ("vhf_field_lag_s",),
                  "detected power envelope vs analytic-signal power of the voltage"),
    SettingEffect("vhf.full_scale", ("clipped", "vhf_censored", "vhf_peak_db", "vhf_snr_db"),
                  "clip level of the VHF digitizer"),
    SettingEffect("vhf.dtype", ("vhf_snr_db", "vhf_peak_db"),
                  "integer samples floor the VHF noise"),
    SettingEffect("events.range_m", _RANGE,
                  "range-normalised peaks, moments, currents and angle-only positions need "
                  "the range: NaN without it"),
    SettingEffect("events.flash_id", ("isolation_s", "time_in_flash_s", "flash_n_pulses",
                                      "channel_reuse"),
                  "flash context needs flash ids"),
    SettingEffect("sources.present", _MAPPING,
                  "without mapped sources every mapping feature is NaN"),
    SettingEffect("sources.xyz", _XYZ,
                  "3-D positions vs range and angles: speeds, altitudes, track shape"),
    SettingEffect("sources.power_db", (), "not used by any feature"),
)
_EFFECTS = {e.setting: e for e in SETTING_EFFECTS}


@dataclass(frozen=True)
class InstrumentChange:
    """A setting that differs between catalog A and catalog B."""

    setting: str
    a: object
    b: object
    affects: tuple[str, ...]
    why: str


def _fraction(mask) -> float:
    mask = np.asarray(mask, dtype=bool)
    return float(mask.mean()) if mask.size else 0.0


def instrument_settings(cat) -> dict:
    """The settings of a catalog that :data:`SETTING_EFFECTS` knows, by name.

    Parameters
    ----------
    cat : features.Catalog

    Returns
    -------
    dict
        ``"field.sample_rate_hz"`` (Hz), ``"field.window_s"`` (record length, s),
        ..., ``"vhf.present"`` (bool), ``"events.range_m"`` (fraction of events
        with a range), ``"events.flash_id"`` (fraction with a flash id),
        ``"sources.present"``, ``"sources.xyz"``, ``"sources.power_db"`` (bool).
        VHF settings are present only when the catalog has a VHF channel.
    """
    f = cat.field
    out = {
        "field.sample_rate_hz": f.sample_rate_hz, "field.window_s": f.duration_s,
        "field.pretrigger_s": f.pretrigger_s, "field.decay_time_s": f.decay_time_s,
        "field.delay_s": f.delay_s, "field.sign_convention": f.sign_convention,
        "field.units": f.units, "field.scale": f.scale, "field.full_scale": f.full_scale,
        "field.dtype": str(f.dtype), "vhf.present": cat.vhf is not None,
    }
    if cat.vhf is not None:
        v = cat.vhf
        out.update({
            "vhf.sample_rate_hz": v.sample_rate_hz, "vhf.window_s": v.duration_s,
            "vhf.pretrigger_s": v.pretrigger_s, "vhf.delay_s": v.delay_s,
            "vhf.band_hz": v.band_hz, "vhf.kind": v.kind, "vhf.full_scale": v.full_scale,
            "vhf.dtype": str(v.dtype),
        })
    src = cat.sources
    out.update({
        "events.range_m": _fraction(np.isfinite(cat.range_m)),
        "events.flash_id": _fraction(cat.events["flash_id"].to_numpy() != ""),
        "sources.present": src is not None,
        "sources.xyz": bool(cat.has_xyz),
        "sources.power_db": src is not None and src.power_db is not None,
    })
    return out


def _same(a, b) -> bool:
    if a is None or b is None:
        return a is None and b is None
    if isinstance(a, (tuple, list)) and isinstance(b, (tuple, list)):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b))
    if isinstance(a, bool) or isinstance(b, bool) or isinstance(a, str) or isinstance(b, str):
        return a == b
    return math.isclose(float(a), float(b), rel_tol=1e-9, abs_tol=0.0)


def instrument_changes(cat_a, cat_b) -> list[InstrumentChange]:
    """Settings that differ between two catalogs, in :data:`SETTING_EFFECTS` order.

    Numbers are compared to a relative 1e-9; the fractions ``events.range_m`` and
    ``events.flash_id`` count as changed when they differ by more than
    :data:`PRESENCE_TOL` or one of them is 0. VHF settings are compared only when
    both catalogs have a VHF channel (otherwise ``vhf.present`` says it).
    """
    sa, sb = instrument_settings(cat_a), instrument_settings(cat_b)
    out = []
    for eff in SETTING_EFFECTS:
        if eff.setting not in sa or eff.setting not in sb:
            continue
        a, b = sa[eff.setting], sb[eff.setting]
        if eff.setting.startswith("events."):
            changed = abs(a - b) > PRESENCE_TOL or ((a == 0) != (b == 0))
        else:
            changed = not _same(a, b)
        if changed:
            out.append(InstrumentChange(eff.setting, a, b, eff.affects, eff.why))
    return out
