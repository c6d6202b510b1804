"""The feature schema: every column pulsesort computes, with its unit and definition.

This is the single list the rest of the project reads: ``pulsesort features
--list`` prints it, the README table is generated from it, the classifier takes
its inputs from the entries with ``model=True``, and model files record
:data:`SCHEMA_VERSION` so a model refuses features of another schema.

``model=False`` marks columns that are not physical properties of the pulse but
of the instrument or the catalog (absolute VHF units, noise level, clipping),
which must not steer a classifier that is meant to work on other stations.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["SCHEMA_VERSION", "Feature", "FEATURES", "feature_names", "model_feature_names",
           "missing_groups", "format_table"]

#: Bump when a definition changes in a way that changes values.
SCHEMA_VERSION = "1.2"


@dataclass(frozen=True)
class Feature:
    """One feature column.

    Attributes
    ----------
    name : str
        Column name (its unit suffix is part of the name).
    unit : str
        SI unit, or "1" for a dimensionless number, "bool" for true/false.
    definition : str
        What it is and how it is computed, in one sentence or two.
    group : str
        "field", "vhf", "mapping", "context", "quality" or "id".
    model : bool
        Whether classifiers use it.
    requires : frozenset of str
        Optional catalog parts the value depends on: "range" (range_m or x/y/z),
        "vhf", "sources", "flash" (flash_id). Without them it is NaN; classifiers
        train on copies of pulses with such groups masked so they cope.
    """

    name: str
    unit: str
    definition: str
    group: str
    model: bool = True
    requires: frozenset = frozenset()


FEATURES: tuple[Feature, ...] = (
    Feature("event_id", "-", "from events.csv", "id", model=False),
    # ---------------------------------------------------------------- field
    Feature("peak_field_v_per_m", "V/m", "signed initial peak of the field change (physics "
            "convention, baseline removed, decay-compensated): the first local maximum of |E| "
            "from 3 us before the trigger that reaches 15 % of the largest |E| within 40 us "
            "after it", "field"),
    Feature("polarity", "1", "+1 / -1: sign of the initial peak", "field"),
    Feature("rise_time_s", "s", "10 % to 90 % of the initial peak on its leading edge",
            "field"),
    Feature("fwhm_s", "s", "full width at half maximum of the initial peak", "field"),
    Feature("initial_half_cycle_s", "s", "onset (last rise through 1 % of the peak or the "
            "noise) to the first zero crossing after the peak", "field"),
    Feature("zero_crossing_s", "s", "time from the initial peak to the first zero crossing "
            "after it", "field"),
    Feature("width_s", "s", "whole pulse duration above 10 % of the absolute peak, overshoot "
            "included: leading-edge 10 % point to the last fall below 10 % of the pulse or, "
            "when the overshoot exceeds 10 %, of the overshoot", "field"),
    Feature("bipolarity", "1", "opposite-polarity overshoot peak / initial peak, absolute "
            "ratio (0 = unipolar)", "field"),
    Feature("range_normalized_peak_v_per_m", "V/m", "initial peak scaled to 100 km "
            "(x range / 100 km); NaN without range", "field",
            requires=frozenset({"range"})),
    Feature("current_moment_peak_a_m", "A m", "peak current moment from the radiation term "
            "M = -2 pi eps0 c^2 D int E dt (onset to zero crossing); + = upward-directed "
            "current; NaN without range", "field",
            requires=frozenset({"range"})),
    Feature("charge_moment_change_c_m", "C m", "int M dt from the onset to the end of the "
            "overshoot lobe; NaN without range", "field",
            requires=frozenset({"range"})),
    Feature("peak_current_a", "A", "transmission-line estimate I = -2 pi eps0 c^2 D E / v "
            "with v = 1.5e8 m/s; + = upward-directed current; NaN without range", "field",
            requires=frozenset({"range"})),
    # ---------------------------------------------------------------- vhf
    Feature("vhf_peak_db", "dB", "10 log10 of the peak VHF power within 30 us of the field "
            "peak, in the catalog's own power units", "vhf", model=False,
            requires=frozenset({"vhf"})),
    Feature("vhf_field_lag_s", "s", "physical time of the field peak minus that of the VHF "
            "power peak (positive: VHF leads); both channels delay-corrected", "vhf",
            requires=frozenset({"vhf"})),
    Feature("vhf_to_field_db", "dB", "VHF peak power relative to the squared range-"
            "normalised field peak: vhf_peak_db - 20 log10(|range_normalized_peak|); in the "
            "catalog's VHF units", "vhf", model=False,
            requires=frozenset({"range", "vhf"})),
    Feature("vhf_field_ratio_db", "dB", "vhf_snr_db - snr_db: VHF strength relative to the "
            "field strength, each over its own noise floor (range and gain free)", "vhf", model=False,
            requires=frozenset({"vhf"})),
    Feature("vhf_snr_db", "dB", "peak VHF power over the mean pre-trigger VHF power", "vhf",
            requires=frozenset({"vhf"})),
    Feature("vhf_width_s", "s", "time the VHF power (0.25 us moving average) stays above "
            "10 % of its peak around the peak", "vhf",
            requires=frozenset({"vhf"})),
    # ---------------------------------------------------------------- mapping
    Feature("n_sources", "1", "mapped VHF sources of the pulse (NaN: catalog has no "
            "sources)", "mapping",
            requires=frozenset({"sources"})),
    Feature("speed_m_per_s", "m/s", "speed from a robust (Huber) straight-line fit of mapped "
            "positions vs time (3-D if xyz, else from range and angles), less its noise "
            "bias: sqrt(max(|v|^2 - sum of the squared standard errors, 0)); NaN under 3 "
            "sources or without positions", "mapping",
            requires=frozenset({"range", "sources"})),
    Feature("speed_se_m_per_s", "m/s", "standard error of that speed (delta method, from "
            "the fit's Huber covariance: residual scatter over the time spread of the "
            "sources); depends on the instrument's position noise", "mapping", model=False,
            requires=frozenset({"range", "sources"})),
    Feature("speed_snr", "1", "speed_m_per_s / speed_se_m_per_s: how far the speed stands "
            "above its noise (0 when the motion is within the noise; the SE has n_sources - 2 "
            "degrees of freedom, so with few sources large values happen by chance)", "mapping",
            requires=frozenset({"range", "sources"})),
    Feature("vertical_speed_m_per_s", "m/s", "signed vertical component of that velocity "
            "(rate of change of altitude above the curved Earth), + upward", "mapping",
            requires=frozenset({"range", "sources"})),
    Feature("vertical_speed_se_m_per_s", "m/s", "standard error of the vertical speed",
            "mapping", model=False,
            requires=frozenset({"range", "sources"})),
    Feature("vertical_confounded", "bool", "the pulse's positions come from range and angles "
            "(no x/y/z): all its sources sit at one range, so a motion towards or away from "
            "the station also changes the vertical speed", "mapping", model=False,
            requires=frozenset({"sources"})),
    Feature("motion_elevation_deg", "deg", "direction of the apparent motion on the sky "
            "above the horizontal (+90 straight up, 0 sideways), from the fitted azimuth and "
            "elevation rates (elevation rate x sec^2(el) vs azimuth rate)", "mapping",
            requires=frozenset({"sources"})),
    Feature("angular_rate_deg_per_s", "deg/s", "angular speed on the sky from a robust fit "
            "of azimuth x cos(elevation) and elevation vs time, less its noise bias (as the "
            "speed)", "mapping",
            requires=frozenset({"sources"})),
    Feature("angular_rate_se_deg_per_s", "deg/s", "standard error of the angular rate",
            "mapping", model=False,
            requires=frozenset({"sources"})),
    Feature("net_to_path", "1", "net displacement / path length of the time-ordered source "
            "track on the sky (1 = straight, near 0 = back and forth); angles only, so the "
            "same with or without xyz",
            "mapping",
            requires=frozenset({"sources"})),
    Feature("altitude_m", "m", "median source altitude above the curved Earth: from xyz, "
            "sqrt(x^2 + y^2 + (R + z)^2) - R with R = 6.371e6 m; from range D and elevation, "
            "a / (cos(D/a) - tan(el) sin(D/a)) - a with a = 4/3 R (standard refraction)",
            "mapping",
            requires=frozenset({"range", "sources"})),
    Feature("elevation_median_deg", "deg", "median source elevation", "mapping",
            requires=frozenset({"sources"})),
    Feature("source_duration_s", "s", "time from the first to the last mapped source",
            "mapping",
            requires=frozenset({"sources"})),
    Feature("source_range_m", "m", "median horizontal distance of the sources (xyz only)",
            "mapping", model=False,
            requires=frozenset({"sources"})),
    # ---------------------------------------------------------------- context
    Feature("isolation_s", "s", "time to the nearest other catalogued pulse of the same "
            "flash (NaN if alone)", "context",
            requires=frozenset({"flash"})),
    Feature("isolation_any_s", "s", "time to the nearest other catalogued pulse of any "
            "flash", "context"),
    Feature("time_in_flash_s", "s", "time since the first pulse of its flash (NaN without "
            "flash_id)", "context",
            requires=frozenset({"flash"})),
    Feature("flash_n_pulses", "1", "catalogued pulses in its flash (1 without flash_id; NaN "
            "when the catalog has no flash ids at all)",
            "context",
            requires=frozenset({"flash"})),
    Feature("channel_reuse", "1", "fraction of its sources within one 300 m cell (0.3 deg on "
            "the sky without xyz) of a source mapped >= 5 ms earlier in its flash",
            "context",
            requires=frozenset({"flash", "sources"})),
    # ---------------------------------------------------------------- quality
    Feature("range_m", "m", "horizontal range used (events.csv, else the sources' median "
            "horizontal distance)", "quality", model=False),
    Feature("snr_db", "dB", "20 log10(|initial peak| / robust noise sigma of the pre-trigger "
            "field)", "quality", model=False),
    Feature("field_noise_v_per_m", "V/m", "robust noise sigma of the pre-trigger field",
            "quality", model=False),
    Feature("clipped", "bool", "any field or VHF sample at or beyond full scale in the "
            "analysed part of the record (baseline and analysis window)",
            "quality", model=False),
    Feature("has_vhf", "bool", "the pulse has a usable VHF record", "quality", model=False),
    Feature("field_ok", "bool", "the field record is usable (at most half of the analysis "
            "window missing and a non-zero peak)", "quality", model=False),
)

_BY_NAME = {f.name: f for f in FEATURES}


def feature_names() -> list[str]:
    """All output column names, in output order (``event_id`` first)."""
    return [f.name for f in FEATURES]


def model_feature_names() -> list[str]:
    """Columns a classifier uses, in a fixed order."""
    return [f.name for f in FEATURES if f.model]


def missing_groups(names=None) -> dict[str, list[str]]:
    """For each optional catalog part, the columns of ``names`` that need it."""
    names = model_feature_names() if names is None else list(names)
    out: dict[str, list[str]] = {}
    for n in names:
        for part in sorted(_BY_NAME[n].requires):
            out.setdefault(part, []).append(n)
    return out


def get(name: str) -> Feature:
    """The :class:`Feature` called ``name`` (KeyError if unknown)."""
    return _BY_NAME[name]


def format_table(markdown: bool = False) -> str:
    """The schema as an aligned text table (or a Markdown table)."""
    if markdown:
        lines = ["| column | unit | definition |", "|---|---|---|"]
        lines += [f"| `{f.name}` | {f.unit} | {f.definition} |" for f in FEATURES]
        return "\n".join(lines)
    w = max(len(f.name) for f in FEATURES)
    u = max(len(f.unit) for f in FEATURES)
    rows = [f"{'column':<{w}}  {'unit':<{u}}  model  definition"]
    for f in FEATURES:
        rows.append(f"{f.name:<{w}}  {f.unit:<{u}}  {'yes' if f.model else 'no ':<5}  "
                    f"{f.definition}")
    return "\n".join(rows)
