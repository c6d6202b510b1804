"""Settings and presets of the season simulator, validated once.

Every setting is a keyword of :func:`features.simulate.simulate_season`; a preset fills
in defaults and explicit keywords override it. :func:`resolve_settings` checks every
value and names the setting in its error message.
"""

from __future__ import annotations

import math
import re
from dataclasses import asdict, dataclass, fields, replace

from .._checks import InputError, check_option, is_real_number
from ._classes import ALL_CLASSES
from ._stress import stress_settings

__all__ = ["PRESETS", "Settings", "render_settings", "resolve_settings"]

_REFERENCE = dict(
    station="hollowmere", season="2031", catalog_id=None,
    field_rate_hz=20e6, field_samples=8000, pretrigger_s=1e-4,
    vhf_rate_hz=None, vhf_samples=None, vhf_pretrigger_s=None, vhf_kind="power",
    band_hz=(25e6, 85e6), units="V/m", scale=None, field_bits=16, sign_convention="physics",
    decay_time_s=1e-3, field_delay_s=0.0, vhf_delay_s=4e-7,
    field_noise_v_per_m=0.01, vhf_noise_floor=0.1, full_scale=250.0, clip_fraction=None,
    with_vhf=True, with_sources=True, with_xyz=True, with_range=True,
    class_mix={"narrow_bipolar": 0.15, "stepped_leader": 0.45, "recoil": 0.30,
               "energetic_in_cloud": 0.10},
    range_km=(10.0, 150.0), vhf_gain=1.0, missing_vhf_fraction=0.0,
    sources_per_event=20.0, angle_noise_deg=0.2, xyz_noise_m=10.0, chunk_size=1024,
    member=None, catalog_practice="every_pulse", dead_time_s=None,
    trigger_level_v_per_m=None, sferic_rate_hz=0.0, vhf_full_scale=None,
    mapping_outage_fraction=0.0, mapping_down_fraction=0.0, truth_twin=False,
)

#: Named presets: partial settings applied before the explicit keywords.
PRESETS: dict[str, dict] = {
    # the reference shape of the project brief
    "reference": {},
    # another season of the same station: other digitizer and units, other class mix
    "next": dict(
        season="2032", field_rate_hz=10e6, field_samples=4000, units="counts",
        scale=2.0 ** -6, full_scale=500.0, sign_convention="atmospheric",
        field_noise_v_per_m=0.03, vhf_gain=3.5, vhf_noise_floor=0.3, vhf_delay_s=5e-7,
        class_mix={"narrow_bipolar": 0.25, "stepped_leader": 0.35, "recoil": 0.25,
                   "energetic_in_cloud": 0.15},
        range_km=(15.0, 180.0), sources_per_event=15.0,
    ),
    # a difficult season: no range, no 3-D positions, noisier, clipped rows, short RC
    "hard": dict(
        season="2033", units="counts", scale=2.0 ** -6, field_noise_v_per_m=4 * 2.0 ** -6,
        full_scale=None, clip_fraction=0.02, decay_time_s=2e-4, vhf_delay_s=7e-7,
        with_range=False, with_xyz=False, missing_vhf_fraction=0.05, vhf_noise_floor=0.3,
        angle_noise_deg=0.4,
    ),
    # the reference station under a storm overhead: flashes within 1-20 km, where the
    # electrostatic and induction terms of the elevated channel's field rival or outweigh
    # the radiation term (their D^2/R^3 geometry vanishes beneath the source) and the
    # pulses change shape and sign. The reference season (10-150 km, uniform over the
    # area) holds none of them, so a model trained on it alone never sees these shapes.
    # Each class an equal share: the reference mix has few energetic in-cloud pulses,
    # whose long charge transfer makes the static term matter most there. Its own
    # catalog id, so both seasons can share a label store and a training run.
    "overhead": dict(catalog_id="hollowmere-2031-overhead", range_km=(1.0, 20.0),
                     class_mix={"narrow_bipolar": 0.25, "stepped_leader": 0.25,
                                "recoil": 0.25, "energetic_in_cloud": 0.25}),
    # a family of stations drawn from ranges (domain randomisation): the settings come
    # from stress_settings(member), explicit keywords override them
    "stress": {},
}


@dataclass(frozen=True)
class Settings:
    """Resolved, validated simulator settings (see ``simulate_season`` for meanings)."""

    station: str
    season: str
    catalog_id: str
    field_rate_hz: float
    field_samples: int
    pretrigger_s: float
    vhf_rate_hz: float
    vhf_samples: int
    vhf_pretrigger_s: float
    vhf_kind: str
    band_hz: tuple
    units: str
    scale: float
    field_bits: int
    sign_convention: str
    decay_time_s: float | None
    field_delay_s: float
    vhf_delay_s: float
    field_noise_v_per_m: float
    vhf_noise_floor: float
    full_scale: float | None
    clip_fraction: float | None
    with_vhf: bool
    with_sources: bool
    with_xyz: bool
    with_range: bool
    class_mix: dict
    range_km: tuple
    vhf_gain: float
    missing_vhf_fraction: float
    sources_per_event: float
    angle_noise_deg: float
    xyz_noise_m: float
    chunk_size: int
    member: int | None
    catalog_practice: str
    dead_time_s: float | None
    trigger_level_v_per_m: float | None
    sferic_rate_hz: float
    vhf_full_scale: float | None
    mapping_outage_fraction: float
    mapping_down_fraction: float
    truth_twin: bool
    preset: str = "reference"

    @property
    def field_duration_s(self) -> float:
        """Duration of a field record, in s."""
        return self.field_samples / self.field_rate_hz

    @property
    def post_trigger_s(self) -> float:
        """Duration of a field record after its trigger, in s."""
        return self.field_duration_s - self.pretrigger_s

    @property
    def station_dead_time_s(self) -> float:
        """Dead time after a trigger in s: ``dead_time_s``, else the post-trigger record."""
        return self.post_trigger_s if self.dead_time_s is None else self.dead_time_s

    @property
    def station_trigger_level_v_per_m(self) -> float:
        """Trigger level in V/m: ``trigger_level_v_per_m``, else 5 x the field noise rms
        (at least 0.05 V/m; common practice, no source)."""
        if self.trigger_level_v_per_m is not None:
            return self.trigger_level_v_per_m
        return max(5.0 * self.field_noise_v_per_m, 0.05)

    @property
    def season_year(self) -> int:
        """Calendar year of the season (its leading four digits, else 2031)."""
        match = re.match(r"(\d{4})", self.season)
        return int(match.group(1)) if match else 2031

    def as_dict(self) -> dict:
        """JSON-friendly dict of every setting."""
        out = asdict(self)
        out["band_hz"] = list(self.band_hz)
        out["range_km"] = list(self.range_km)
        return out


_NAMES = [f.name for f in fields(Settings)]


def _pos(name, value, *, integer=False, allow_zero=False):
    bad = not is_real_number(value) or (value < 0 if allow_zero else value <= 0)
    if integer and not bad:
        bad = int(value) != value
    if bad:
        what = "an integer" if integer else "a finite number"
        raise InputError(f"setting {name!r} must be {what} {'>=' if allow_zero else '>'} 0, "
                         f"got {value!r}")
    return int(value) if integer else float(value)


def _fraction(name, value):
    if not is_real_number(value) or not 0 <= value < 1:
        raise InputError(f"setting {name!r} must be a number in [0, 1), got {value!r}")
    return float(value)


def _pair(name, value):
    try:
        lo, hi = (float(v) for v in value)
    except (TypeError, ValueError):
        raise InputError(f"setting {name!r} must be two numbers (low, high), got {value!r}"
                         ) from None
    if not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo <= hi):
        raise InputError(f"setting {name!r} must satisfy 0 < low <= high, got {value!r}")
    return (lo, hi)


def _bool(name, value):
    if not isinstance(value, bool):
        raise InputError(f"setting {name!r} must be True or False, got {value!r}")
    return value


def _class_mix(value):
    if not isinstance(value, dict) or not value:
        raise InputError(f"setting 'class_mix' must be a dict class -> fraction, got {value!r}")
    mix = {}
    for key, frac in value.items():
        check_option(key, ALL_CLASSES, "setting 'class_mix' key")
        if not is_real_number(frac) or frac < 0:
            raise InputError(f"setting 'class_mix' fraction of {key!r} must be >= 0, "
                             f"got {frac!r}")
        mix[key] = float(frac)
    total = sum(mix.values())
    if total <= 0:
        raise InputError(f"setting 'class_mix' needs a fraction > 0, got {value!r}")
    return {k: mix.get(k, 0.0) / total for k in ALL_CLASSES}


def resolve_settings(preset: str = "reference", **overrides) -> Settings:
    """Merge a preset with explicit settings and validate every value.

    Parameters
    ----------
    preset : str, default="reference"
        One of :data:`PRESETS`.
    **overrides
        Explicit settings. ``None`` is a value: no RC decay for ``decay_time_s``, the
        automatic choice for ``catalog_id``, ``scale``, ``vhf_rate_hz``, ``vhf_samples``
        and ``vhf_pretrigger_s``, the other clip mode for ``full_scale`` /
        ``clip_fraction``.

    Returns
    -------
    Settings

    Raises
    ------
    ValueError
        Naming the setting, what was expected and what was given.
    """
    check_option(preset, list(PRESETS), "setting 'preset'")
    unknown = sorted(set(overrides) - set(_NAMES))
    if unknown:
        raise InputError(f"unknown setting(s) {', '.join(map(repr, unknown))}; "
                         f"known: {', '.join(n for n in _NAMES if n != 'preset')}")
    given = dict(overrides)
    if given.get("full_scale") is not None and given.get("clip_fraction") is not None:
        raise InputError("settings 'full_scale' and 'clip_fraction' exclude each other: "
                         "give the clip level or the fraction of rows to clip, not both")
    s = dict(_REFERENCE)
    s.update(PRESETS[preset])
    if preset == "stress":
        member = given.get("member")
        s.update(stress_settings(0 if member is None else member))
    elif given.get("member") is not None:
        raise InputError(f"setting 'member' applies to preset 'stress' only, got member="
                         f"{given['member']!r} with preset {preset!r}")
    if given.get("full_scale") is not None:
        s["clip_fraction"] = None
    if given.get("clip_fraction") is not None:
        s["full_scale"] = None
    if "units" in given and given["units"] == "V/m" and "scale" not in given:
        s["scale"] = None
    s.update(given)
    # from a command line the decay is text: "none" (a DC-coupled record) or a number
    if isinstance(s["decay_time_s"], str):
        text = s["decay_time_s"].strip()
        if text.lower() in ("none", "null"):
            s["decay_time_s"] = None
        else:
            try:
                s["decay_time_s"] = float(text)
            except ValueError:
                raise InputError(f"setting 'decay_time_s' must be a number of seconds or "
                                 f"'none', got {text!r}") from None

    for name in ("station", "season"):
        if not isinstance(s[name], str) or not s[name].strip():
            raise InputError(f"setting {name!r} must be a non-empty string, got {s[name]!r}")
    if s["catalog_id"] is None:
        s["catalog_id"] = f"{s['station']}-{s['season']}"
    if not isinstance(s["catalog_id"], str) or not s["catalog_id"].strip():
        raise InputError(f"setting 'catalog_id' must be a non-empty string, "
                         f"got {s['catalog_id']!r}")
    for name in ("field_rate_hz", "pretrigger_s", "vhf_gain", "sources_per_event"):
        s[name] = _pos(name, s[name])
    for name in ("field_samples", "chunk_size", "field_bits"):
        s[name] = _pos(name, s[name], integer=True)
    if not 8 <= s["field_bits"] <= 24:
        raise InputError(f"setting 'field_bits' must be in 8..24, got {s['field_bits']!r}")
    for name in ("field_delay_s", "vhf_delay_s", "field_noise_v_per_m", "vhf_noise_floor",
                 "angle_noise_deg", "xyz_noise_m"):
        s[name] = _pos(name, s[name], allow_zero=True)
    s["vhf_kind"] = check_option(s["vhf_kind"], ("power", "voltage"), "setting 'vhf_kind'")
    s["units"] = check_option(s["units"], ("V/m", "counts"), "setting 'units'")
    s["sign_convention"] = check_option(s["sign_convention"], ("physics", "atmospheric"),
                                        "setting 'sign_convention'")
    s["band_hz"] = _pair("band_hz", s["band_hz"])
    s["range_km"] = _pair("range_km", s["range_km"])
    s["class_mix"] = _class_mix(s["class_mix"])
    s["missing_vhf_fraction"] = _fraction("missing_vhf_fraction", s["missing_vhf_fraction"])
    for name in ("with_vhf", "with_sources", "with_xyz", "with_range"):
        s[name] = _bool(name, s[name])
    if s["decay_time_s"] is not None:
        s["decay_time_s"] = _pos("decay_time_s", s["decay_time_s"])
    _check_station(s)

    if s["pretrigger_s"] >= s["field_samples"] / s["field_rate_hz"]:
        raise InputError(f"setting 'pretrigger_s' ({s['pretrigger_s']!r} s) must be shorter "
                         f"than the field record ({s['field_samples']} samples at "
                         f"{s['field_rate_hz']!r} Hz)")
    voltage = s["vhf_kind"] == "voltage"
    if s["vhf_rate_hz"] is None:
        s["vhf_rate_hz"] = 250e6 if voltage else 25e6
    s["vhf_rate_hz"] = _pos("vhf_rate_hz", s["vhf_rate_hz"])
    if voltage and s["vhf_rate_hz"] <= 2 * s["band_hz"][1]:
        raise InputError(f"setting 'vhf_rate_hz' ({s['vhf_rate_hz']!r} Hz) must exceed twice "
                         f"the top of 'band_hz' ({s['band_hz'][1]!r} Hz) for vhf_kind "
                         "'voltage'")
    if s["vhf_samples"] is None:
        s["vhf_samples"] = 25000 if voltage else 10000
    s["vhf_samples"] = _pos("vhf_samples", s["vhf_samples"], integer=True)
    vhf_window = s["vhf_samples"] / s["vhf_rate_hz"]
    if s["vhf_pretrigger_s"] is None:
        s["vhf_pretrigger_s"] = min(s["pretrigger_s"], 0.5 * vhf_window)
    s["vhf_pretrigger_s"] = _pos("vhf_pretrigger_s", s["vhf_pretrigger_s"], allow_zero=True)
    if s["vhf_pretrigger_s"] >= vhf_window:
        raise InputError(f"setting 'vhf_pretrigger_s' ({s['vhf_pretrigger_s']!r} s) must be "
                         f"shorter than the VHF record ({vhf_window!r} s)")

    if s["units"] == "counts":
        if s["scale"] is None:
            s["scale"] = 2.0 ** -7
        s["scale"] = _pos("scale", s["scale"])
    else:
        if s["scale"] not in (None, 1, 1.0):
            raise InputError(f"setting 'scale' applies to units 'counts' only; with units "
                             f"'V/m' it must be 1 or None, got {s['scale']!r}")
        s["scale"] = 1.0
    if s["clip_fraction"] is not None:
        s["clip_fraction"] = _fraction("clip_fraction", s["clip_fraction"])
        s["full_scale"] = None
    elif s["full_scale"] is None:
        raise InputError("one of the settings 'full_scale' (clip level in V/m) or "
                         "'clip_fraction' must be given")
    else:
        s["full_scale"] = _pos("full_scale", s["full_scale"])
        if s["units"] == "counts" and s["full_scale"] / s["scale"] < 1:
            raise InputError(f"setting 'full_scale' ({s['full_scale']!r} V/m) is below one "
                             f"count ({s['scale']!r} V/m)")
    s["preset"] = preset
    return Settings(**{k: s[k] for k in _NAMES})


def _check_station(s):
    """Validate the trigger, sferic, VHF clip and mapping settings (in place)."""
    s["catalog_practice"] = check_option(s["catalog_practice"], ("every_pulse",
                                                                 "one_per_trigger"),
                                         "setting 'catalog_practice'")
    for name in ("dead_time_s", "trigger_level_v_per_m"):
        if s[name] is not None:
            s[name] = _pos(name, s[name], allow_zero=True)
    if s["vhf_full_scale"] is not None:
        s["vhf_full_scale"] = _pos("vhf_full_scale", s["vhf_full_scale"])
    s["sferic_rate_hz"] = _pos("sferic_rate_hz", s["sferic_rate_hz"], allow_zero=True)
    for name in ("mapping_outage_fraction", "mapping_down_fraction"):
        s[name] = _fraction(name, s[name])
    s["truth_twin"] = _bool("truth_twin", s["truth_twin"])


def render_settings(s: Settings) -> Settings:
    """The settings a season's records are rendered with: ``s`` itself, or for a truth
    twin the instrument removed (DC-coupled float64 V/m in the physics sign, no noise,
    quantisation or clipping, VHF as noise-free power, no source noise or outages).

    Rates, record lengths, pre-triggers and delays stay the station's.
    """
    if not s.truth_twin:
        return s
    return replace(s, units="V/m", scale=1.0, sign_convention="physics", decay_time_s=None,
                   field_noise_v_per_m=0.0, full_scale=None, clip_fraction=None,
                   vhf_kind="power", vhf_noise_floor=0.0, vhf_full_scale=None,
                   missing_vhf_fraction=0.0, angle_noise_deg=0.0, xyz_noise_m=0.0,
                   mapping_outage_fraction=0.0, mapping_down_fraction=0.0,
                   sferic_rate_hz=0.0)
