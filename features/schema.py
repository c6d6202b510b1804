"""The feature schema: every column pulsesort computes, with its unit and definition.

This is the single list the rest of the project reads: ``pulsesort features
--list`` prints it, the README table is generated from it, the classifier takes
its inputs from the entries with ``model=True``, and model files record
:data:`SCHEMA_VERSION` so a model refuses features of another schema.

``model=False`` marks columns that are not physical properties of the pulse but
of the instrument, the geometry or the catalog (absolute VHF units, noise level,
clipping, the field peak and angles that depend on the range, counts of sources and
of catalogued neighbours that depend on the mapping and the cataloguing practice),
which must not steer a classifier that is meant to work on other stations.

Examples
--------
>>> from features import schema
>>> f = schema.get("rise_time_s")
>>> f.unit, f.model
('s', True)
>>> "field_noise_v_per_m" in schema.model_feature_names()   # an instrument property
False
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["SCHEMA_VERSION", "Feature", "FEATURES", "feature_names", "model_feature_names",
           "missing_groups", "format_table"]

#: Bump when a definition changes in a way that changes values.
SCHEMA_VERSION = "2.0"


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
        "field", "vhf", "mapping", "breakdown", "context", "quality" or "id".
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
    Feature("peak_field_v_per_m", "V/m", "signed peak of the catalogued pulse's initial "
            "half-cycle (physics convention, baseline line removed, decay-compensated): the "
            "largest |E| of the first lobe of the pulse at the trigger, measured within the "
            "pulse's own extent", "field", model=False),
    Feature("polarity", "1", "+1 / -1: sign of the initial half-cycle", "field"),
    Feature("rise_time_s", "s", "10 % to 90 % of the peak on its leading edge (searched back "
            "from the peak, never before the previous pulse); NaN below 20 dB SNR or under one "
            "sample", "field"),
    Feature("fwhm_s", "s", "full width at half maximum of the initial half-cycle; NaN below "
            "12 dB SNR or under two samples", "field"),
    Feature("initial_half_cycle_s", "s", "onset (last rise through max(1 % of the peak, "
            "3 sigma of the smoothed record)) to the zero crossing; NaN for a unipolar pulse "
            "and below 20 dB SNR", "field"),
    Feature("zero_crossing_s", "s", "peak to the zero crossing: the last fall through 0 "
            "before the (smoothed) field goes below -max(3 sigma, 2 % of the peak); NaN for a "
            "unipolar pulse and below 20 dB SNR", "field"),
    Feature("width_s", "s", "whole pulse duration: leading-edge 10 % point to the last fall "
            "of the (smoothed) pulse, or of its overshoot when that exceeds 10 %, below 10 % "
            "of the peak; NaN where 10 % of the peak is under 2 sigma", "field"),
    Feature("bipolarity", "1", "opposite-polarity overshoot peak (smoothed) / peak, 0 for a "
            "unipolar pulse; NaN below 20 dB SNR and where noise could hide an overshoot of "
            "15 %", "field"),
    Feature("range_normalized_peak_v_per_m", "V/m", "peak scaled to a ground-level source at "
            "100 km with the elevated-source geometry: x (R^3 / D^2) / 100 km, R = "
            "sqrt(D^2 + H^2); NaN without range", "field",
            requires=frozenset({"range"})),
    Feature("current_moment_peak_a_m", "A m", "current moment M at the zero crossing (or the "
            "end of a unipolar pulse), from the three-term inversion of the field of an "
            "elevated source (radiation-only with the D^2/R^3 geometry where it does not "
            "converge); + = upward-directed current; NaN without range", "field",
            requires=frozenset({"range"})),
    Feature("charge_moment_change_c_m", "C m", "int M dt from the onset to the end of the "
            "overshoot lobe (or of the pulse), same inversion; NaN without range", "field",
            requires=frozenset({"range"})),
    Feature("peak_current_a", "A", "transmission-line estimate I = -2 pi eps0 c^2 (R^3 / D^2) "
            "E / v with v = 1.5e8 m/s; + = upward-directed current; NaN without range",
            "field", requires=frozenset({"range"})),
    Feature("pulse_start_s", "s", "the pulse's onset: physical time relative to the trigger",
            "field", model=False),
    Feature("pulse_end_s", "s", "end of the pulse (of its overshoot lobe when bipolar), "
            "physical time relative to the trigger", "field", model=False),
    Feature("neighbours_before", "1", "other pulses in the record within 100 us before the "
            "peak, reaching max(5 sigma, 10 % of the peak)", "field"),
    Feature("neighbours_after", "1", "the same within 100 us after the peak", "field"),
    Feature("nearest_neighbour_s", "s", "time from the peak to the nearest such pulse in the "
            "record (NaN: none)", "field"),
    Feature("neighbour_interval_s", "s", "median interval between successive pulses of the "
            "train holding the pulse (within 100 us; NaN without neighbour)", "field"),
    Feature("largest_neighbour_ratio", "1", "largest other pulse within 100 us (any size "
            "over 5 sigma) / the peak; 0: none", "field"),
    Feature("pre_level_ratio", "1", "mean field in the 2 us before the onset / the peak "
            "(a pulse riding on another's tail)", "field"),
    Feature("baseline_slope_ratio", "1", "slope of the baseline line over 10 us / the peak, "
            "in the pulse's polarity", "field"),
    Feature("record_before_s", "s", "record before the peak", "field", model=False),
    Feature("record_after_s", "s", "record after the peak", "field", model=False),
    # ---------------------------------------------------------------- vhf
    Feature("vhf_peak_db", "dB", "10 log10 of the peak of the smoothed VHF power envelope "
            "(0.1 us bins, 0.5 us moving average) in the pulse's window, catalog units",
            "vhf", model=False, requires=frozenset({"vhf"})),
    Feature("vhf_field_lag_s", "s", "physical time of the field peak minus that of the VHF "
            "envelope peak (positive: VHF leads); both channels delay-corrected", "vhf",
            requires=frozenset({"vhf"})),
    Feature("vhf_lag_first_peak_s", "s", "the same to the first prominent local maximum of "
            "the field's initial half-cycle (equal to the lag when it has none before the "
            "peak)", "vhf", requires=frozenset({"vhf"})),
    Feature("vhf_to_field_db", "dB", "VHF peak power relative to the squared range-"
            "normalised field peak: vhf_peak_db - 20 log10(|range_normalized_peak|); in the "
            "catalog's VHF units", "vhf", model=False,
            requires=frozenset({"range", "vhf"})),
    Feature("vhf_field_ratio_db", "dB", "vhf_snr_db - snr_db: VHF strength relative to the "
            "field strength, each over its own noise floor (range and gain free)", "vhf",
            model=False, requires=frozenset({"vhf"})),
    Feature("vhf_snr_db", "dB", "smoothed VHF envelope peak over its noise floor (median "
            "outside the window)", "vhf", requires=frozenset({"vhf"})),
    Feature("vhf_width_s", "s", "time the smoothed envelope stays above 10 % of its peak "
            "around it; NaN below 10 dB SNR", "vhf", requires=frozenset({"vhf"})),
    Feature("vhf_censored", "bool", "a raw VHF sample of the window reaches full scale: the "
            "VHF peak is a lower bound", "vhf", requires=frozenset({"vhf"})),
    # ---------------------------------------------------------------- mapping
    Feature("n_sources", "1", "mapped VHF sources of the pulse (NaN: catalog has no "
            "sources)", "mapping",
            model=False,
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
            model=False,
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
            model=False,
            requires=frozenset({"sources"})),
    Feature("source_duration_s", "s", "time from the first to the last mapped source",
            "mapping",
            model=False,
            requires=frozenset({"sources"})),
    Feature("source_range_m", "m", "median horizontal distance of the sources (xyz only)",
            "mapping", model=False,
            requires=frozenset({"sources"})),
    Feature("breakdown_polarity", "-", "positive / negative / undetermined: the current "
            "(down for a positive initial field peak, physics convention) flows with (positive) "
            "or against (negative) the sources' vertical propagation, trusted at |v_z| / SE >= 3 "
            "(>= 6 from range and angles)", "breakdown", model=False,
            requires=frozenset({"sources"})),
    Feature("breakdown_snr", "1", "the significance |v_z| / SE that breakdown_polarity rests "
            "on", "breakdown", model=False, requires=frozenset({"sources"})),
    # ---------------------------------------------------------------- context
    Feature("isolation_s", "s", "time to the nearest other catalogued pulse of the same "
            "flash (NaN if alone)", "context",
            model=False,
            requires=frozenset({"flash"})),
    Feature("isolation_any_s", "s", "time to the nearest other catalogued pulse of any "
            "flash", "context", model=False),
    Feature("time_in_flash_s", "s", "time since the first pulse of its flash (flashes "
            "grouped in time and space when the catalog gives no flash ids; NaN for a pulse "
            "without a flash or alone in it)", "context",
            requires=frozenset({"flash"})),
    Feature("flash_n_pulses", "1", "catalogued pulses in its flash (1 without flash_id; NaN "
            "when the catalog has no flash ids at all)",
            "context",
            model=False,
            requires=frozenset({"flash"})),
    Feature("channel_reuse", "1", "fraction of its sources within one 300 m cell (0.3 deg on "
            "the sky without xyz) of a source mapped >= 5 ms earlier in its flash (NaN without "
            "sources, or without a flash or alone in it)",
            "context",
            requires=frozenset({"flash", "sources"})),
    # ---------------------------------------------------------------- quality
    Feature("range_m", "m", "horizontal range used (events.csv, else the sources' median "
            "horizontal distance)", "quality", model=False),
    Feature("snr_db", "dB", "20 log10(peak / noise sigma); sigma: 1.4826 MAD about the "
            "baseline line, with step^2/12 of an integer digitizer in quadrature",
            "quality", model=False),
    Feature("field_noise_v_per_m", "V/m", "that noise sigma", "quality", model=False),
    Feature("field_censored", "bool", "a field sample of the pulse's extent reaches full scale "
            "(the peak is a lower bound)", "quality"),
    Feature("clipped", "bool", "any field or VHF sample at or beyond full scale in the "
            "analysed part of the record", "quality", model=False),
    Feature("baseline_short", "bool", "under 10 us of record before the pulse for its "
            "baseline (a level only, or none)", "quality", model=False),
    Feature("altitude_assumed", "bool", "no source altitude: 8 km assumed for the geometry",
            "quality", model=False),
    Feature("near_field", "bool", "range under 5 x the source altitude: the induction and "
            "electrostatic terms matter", "quality", model=False),
    Feature("moments_converged", "bool", "the three-term moment inversion converged "
            "(otherwise radiation-only with the D^2/R^3 geometry)", "quality", model=False),
    Feature("has_vhf", "bool", "the pulse has a usable VHF record", "quality", model=False),
    Feature("field_ok", "bool", "the field record is usable (at most half of the span "
            "missing and a peak of at least 3 sigma)", "quality", model=False),
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
