"""Instrument and cataloguing settings of each profile, and their validation.

Every key is a plain JSON value with its unit in its name. ``write_season``
takes any key as a keyword override. See the package docstring for a table.
"""

from __future__ import annotations

import copy
import math
from numbers import Real

from features import InputError

from ._classes import CLASSES, STANDARD

__all__ = ["PROFILES", "resolve"]

_BASE = {
    "practice": "every",               # "every": every pulse over the trigger level;
                                       # "records": one record per trigger, then dead time
    "classes": list(STANDARD),
    "mix": None,                       # {class: share}; None = equal shares
    "season": "2031",
    "start_utc": "2031-06-03T13:00:00",
    "storm_distance_m": [5e3, 150e3],  # storm centres, log-uniform ground distance
    "scenes_per_storm": [40, 200],
    "scene_gap_s": 12.0,               # mean quiet time between scenes
    "field_rate_hz": 20e6,
    "field_pretrigger_s": 100e-6,
    "field_record_s": 200e-6,
    "field_units": "V/m",              # or "counts"
    "field_scale_v_per_m": 1.0,        # V/m per count
    "field_sign": "physics",           # or "atmospheric"
    "field_decay_s": 1e-3,             # RC constant, or None (DC-coupled)
    "field_delay_s": 0.0,
    "field_full_scale_v_per_m": 250.0,  # or None
    "field_noise_v_per_m": 0.05,       # white noise rms; plus half as much slow (20 us) noise
    "field_oversample": None,          # None: enough sub-samples for 50 MS/s
    "trigger_v_per_m": 1.0,
    "trigger_fraction": 0.3,           # the trigger sample: first at 30 % of the pulse's peak
    "max_per_flash": 8,                # practice "every": at most this many events of one
                                       # class per flash (a random choice)
    "dead_time_s": 1e-3,               # practice "records" only
    "sferic_rate_hz": 200.0,           # distant sferics, Poisson in time
    "vhf_kind": "power",               # "power", "voltage" or None (no VHF channel)
    "vhf_rate_hz": 25e6,
    "vhf_pretrigger_s": 50e-6,
    "vhf_record_s": 100e-6,
    "vhf_band_hz": [25e6, 85e6],
    "vhf_delay_s": 4e-7,
    "vhf_gain": 1.1e5,                 # file units per (W / m^2)
    "vhf_floor": 1e-4,                 # receiver noise power, file units
    "vhf_full_scale": 1.0,
    "sources": True,
    "sources_xyz": True,
    "map_snr": 3.0,                    # a burst is mapped above snr * floor
    "map_max_range_m": 120e3,
    "map_angle_noise_deg": 0.2,
    "map_time_noise_s": 20e-9,
    "map_outage_fraction": 0.1,        # scenes with no mapped sources
    "range_column": True,
    "range_noise_fraction": 0.02,
    "flash_ids": True,
}


def _profile(**changes):
    p = copy.deepcopy(_BASE)
    p.update(changes)
    return p


#: Profile name -> settings (see the package docstring for a table).
PROFILES = {
    "plain": _profile(),
    "shifted": _profile(
        classes=list(STANDARD),
        mix={"narrow_bipolar": 0.35, "stepped_leader": 0.2, "recoil": 0.3,
             "energetic_in_cloud": 0.15},
        storm_distance_m=[20e3, 250e3], field_rate_hz=12.5e6, field_pretrigger_s=40e-6,
        field_record_s=160e-6, field_units="counts", field_scale_v_per_m=0.02,
        field_sign="atmospheric", field_decay_s=0.5e-3, field_delay_s=0.24e-6,
        field_full_scale_v_per_m=600.0, field_noise_v_per_m=0.008, trigger_v_per_m=0.6,
        vhf_rate_hz=10e6, vhf_pretrigger_s=20e-6, vhf_record_s=80e-6,
        vhf_band_hz=[60e6, 120e6], vhf_delay_s=1.1e-6, vhf_gain=4e5, sources_xyz=False,
        map_max_range_m=200e3, flash_ids=False, sferic_rate_hz=400.0),
    "harder": _profile(
        storm_distance_m=[3e3, 120e3], field_noise_v_per_m=0.125,
        field_full_scale_v_per_m=60.0, field_decay_s=1e-4, trigger_v_per_m=1.5,
        range_column=False, vhf_floor=2.5e-4, map_outage_fraction=0.3,
        map_angle_noise_deg=0.5, map_time_noise_s=50e-9),
    "records": _profile(
        practice="records", field_rate_hz=10e6, field_pretrigger_s=10e-6,
        field_record_s=400e-6, field_decay_s=None, field_full_scale_v_per_m=400.0,
        dead_time_s=1e-3, vhf_kind="voltage", vhf_rate_hz=100e6, vhf_pretrigger_s=10e-6,
        vhf_record_s=60e-6, vhf_band_hz=[30e6, 48e6], vhf_delay_s=0.6e-6, vhf_gain=7e4,
        vhf_full_scale=1.0),
    "near": _profile(
        classes=list(CLASSES), storm_distance_m=[3e3, 25e3], field_rate_hz=5e6,
        field_pretrigger_s=60e-6, field_record_s=300e-6, field_decay_s=10e-3,
        field_full_scale_v_per_m=1500.0, field_noise_v_per_m=0.2, trigger_v_per_m=5.0,
        vhf_rate_hz=5e6, vhf_pretrigger_s=60e-6, vhf_record_s=150e-6,
        vhf_band_hz=[20e6, 80e6], vhf_gain=2e4, map_max_range_m=40e3),
}


def _number(s, key, problems, *, positive=True, nullable=False, integer=False):
    v = s[key]
    if v is None and nullable:
        return
    if isinstance(v, bool) or not isinstance(v, Real) or not math.isfinite(v):
        problems.append(f"setting '{key}' must be a finite number, got {v!r}")
    elif positive and v <= 0:
        problems.append(f"setting '{key}' must be > 0, got {v!r}")
    elif not positive and v < 0:
        problems.append(f"setting '{key}' must be >= 0, got {v!r}")
    elif integer and int(v) != v:
        problems.append(f"setting '{key}' must be a whole number, got {v!r}")


def resolve(profile: str, overrides: dict) -> dict:
    """Settings of ``profile`` with ``overrides``; every problem in one InputError."""
    if profile not in PROFILES:
        raise InputError(f"profile {profile!r} is not known; profiles: "
                         f"{', '.join(sorted(PROFILES))}")
    s = copy.deepcopy(PROFILES[profile])
    problems = [f"setting {k!r} is not known; settings: {', '.join(sorted(s))}"
                for k in overrides if k not in s]
    if problems:
        raise InputError(problems)
    s.update(copy.deepcopy(overrides))
    for key, allowed in (("practice", ("every", "records")), ("field_units", ("V/m", "counts")),
                         ("field_sign", ("physics", "atmospheric")),
                         ("vhf_kind", ("power", "voltage", None))):
        if s[key] not in allowed:
            problems.append(f"setting '{key}' must be one of {allowed}, got {s[key]!r}")
    for key in ("field_rate_hz", "field_record_s", "field_scale_v_per_m", "trigger_v_per_m",
                "trigger_fraction", "dead_time_s", "vhf_rate_hz", "vhf_record_s",
                "vhf_gain", "vhf_floor", "map_snr", "map_max_range_m", "scene_gap_s"):
        _number(s, key, problems)
    for key in ("field_pretrigger_s", "vhf_pretrigger_s", "field_noise_v_per_m",
                "sferic_rate_hz", "map_angle_noise_deg", "map_time_noise_s",
                "map_outage_fraction", "range_noise_fraction", "field_delay_s", "vhf_delay_s"):
        _number(s, key, problems, positive=False)
    for key in ("field_decay_s", "field_full_scale_v_per_m", "vhf_full_scale"):
        _number(s, key, problems, nullable=True)
    _number(s, "max_per_flash", problems, integer=True)
    if s["field_oversample"] is not None:
        _number(s, "field_oversample", problems, integer=True)
    classes = s["classes"]
    if isinstance(classes, str) or not classes:
        problems.append(f"setting 'classes' must be a non-empty list of class names, "
                        f"got {classes!r}")
    else:
        bad = [c for c in classes if c not in CLASSES]
        if bad:
            problems.append(f"setting 'classes': unknown class(es) {bad}; known: "
                            f"{', '.join(CLASSES)}")
        s["classes"] = [c for c in CLASSES if c in classes]
    mix = s["mix"]
    if mix is not None:
        if not isinstance(mix, dict):
            problems.append(f"setting 'mix' must be a {{class: share}} mapping, got {mix!r}")
        else:
            for c, v in mix.items():
                if c not in s["classes"]:
                    problems.append(f"setting 'mix': class {c!r} is not among the "
                                    f"requested classes {s['classes']}")
                elif isinstance(v, bool) or not isinstance(v, Real) or not v >= 0:
                    problems.append(f"setting 'mix': share of {c!r} must be >= 0, got {v!r}")
            if not problems and sum(mix.values()) <= 0:
                problems.append("setting 'mix': the shares must not all be 0")
    for key in ("storm_distance_m", "scenes_per_storm", "vhf_band_hz"):
        v = s[key]
        if (not isinstance(v, (list, tuple)) or len(v) != 2
                or not all(isinstance(x, Real) and x > 0 for x in v) or not v[0] < v[1]):
            problems.append(f"setting '{key}' must be [low, high] with 0 < low < high, "
                            f"got {v!r}")
    if not problems and s["vhf_kind"] == "voltage" and s["vhf_band_hz"][1] > s["vhf_rate_hz"] / 2:
        problems.append("setting 'vhf_band_hz': a voltage record's band must lie below "
                        f"half of 'vhf_rate_hz' ({s['vhf_rate_hz'] / 2:g} Hz)")
    if not problems and s["field_units"] == "counts":
        fs = s["field_full_scale_v_per_m"]
        if fs is None or fs / s["field_scale_v_per_m"] > 32767:
            problems.append("setting 'field_full_scale_v_per_m' must be set and at most "
                            "32767 counts times 'field_scale_v_per_m' for int16 counts")
    if not problems and s["field_pretrigger_s"] >= s["field_record_s"]:
        problems.append("setting 'field_pretrigger_s' must be shorter than 'field_record_s'")
    if problems:
        raise InputError(problems)
    return s
