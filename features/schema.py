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

Tolerances
----------
Every numeric column states how far its value may lie from the truth and still be
right (:class:`Tolerance`, ``Feature.tolerance``); ``benchmarks/bench_feature_truth.py``
measures every column against the simulator's noise-free truth with them. A value x is
*within tolerance* of its truth t when::

    |x - t| <= rel * |t_ref| + sigma * noise + samples * dt + vhf_bins * 0.1 us + value

* ``t_ref`` is t, or the truth of another column (``rel_of``: the instants
  ``pulse_start_s`` and ``pulse_end_s`` take 10 % of the pulse's true width);
* ``dt`` is the record's field sample interval, a VHF bin the envelope's 0.1 us;
* ``noise`` is the record's noise carried to the column (``Tolerance.noise``):
  ``"field"``, the field noise sigma (V/m) times ``|t / t_peak|`` for a column
  proportional to the field (moments, currents; sigma itself for the peak);
  ``"field/peak"``, sigma / ``|t_peak|`` for a ratio to the peak; ``"vhf"``, the VHF
  noise floor (file units) times ``|t / t_vhf_peak|`` for a VHF power; ``"snr"``, 1 for
  a ratio over the noise; or the name of a standard-error column (the record's own
  value of it);
* a column in dB (``db=10`` for a power, ``db=20`` for an amplitude) is compared in
  linear units, ``10**(x/db)`` against ``10**(t/db)``;
* a value flagged as a lower bound (``bound``, e.g. ``field_censored``) is within
  tolerance when its magnitude does not exceed the truth's by more than the allowance;
* ``truth`` names the truth: ``"twin"``, the same column of the season's noise-free
  truth twin; ``"record"``, for a column about the other pulses of the record (which
  the twin leaves out), the simulator's own list of the pulses in each record (a range
  where a pulse is within the record's resolution of the level or the limits: a value
  is right within tolerance of either end or between them); ``"context"``, the same
  column of the records rendered without noise, neighbours kept;
  ``"instrument"``, for a column that depends on the station by definition, the twin
  combined with the station's stated instrument: a noise level or SNR is the twin's
  signal over the station's noise, ``n_sources`` the twin's count where the station's
  mapping saw the pulse and 0 where it was out;
* ``of`` makes a standard error (or a significance) within tolerance when the estimate
  of column ``of`` lies within ``sigma`` of these errors of its truth (a calibration).

The values are our choice (common practice, no source): generous, yet tight enough
that a wrong definition or a neighbour's peak taken for the pulse's fails them.

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

import dataclasses
from dataclasses import dataclass

import numpy as np

__all__ = ["SCHEMA_VERSION", "Feature", "FEATURES", "FIELD_PART_COLUMNS", "TRUTHS",
           "Tolerance", "VHF_BIN_S", "feature_names", "model_feature_names", "missing_groups",
           "mask_unusable_field",
           "numeric_feature_names", "format_table"]

#: Bump when a definition changes in a way that changes values. 2.1: moments, peak
#: current and range-normalised peak of sources close under the station from the exact
#: three-term inversion and its radiation term; ``net_to_path`` claimed by the noise its
#: path carries step by step. 2.2: close under an elevated source the current moment
#: peak is M's extreme over the pulse (not M at its end).
SCHEMA_VERSION = "2.2"


#: Length of one VHF envelope bin, s (as ``features.vhf.VHF_BIN_S``).
VHF_BIN_S = 0.1e-6
#: Where a tolerance's truth can come from (module notes).
TRUTHS = ("twin", "record", "context", "instrument")


@dataclass(frozen=True)
class Tolerance:
    """How far a value may be from its truth and still be right (see the module notes).

    Attributes
    ----------
    rel : float
        Fraction of ``|t|`` (or of the truth of ``rel_of``).
    sigma : float
        Multiples of the record's noise as carried to the column (``noise``).
    samples : float
        Field sample intervals of the record.
    vhf_bins : float
        VHF envelope bins of :data:`VHF_BIN_S`.
    value : float
        Absolute allowance in the column's unit (all terms 0: exact).
    noise : str
        "field", "field/peak", "vhf", "snr" or the name of a standard-error column.
    rel_of : str or None
        Column whose truth ``rel`` applies to (None: this column).
    db : {None, 10, 20}
        The column is ``db * log10`` of a power (10) or an amplitude (20), compared in
        linear units.
    bound : str or None
        Boolean column that marks the value as a lower bound of its magnitude.
    truth : {"twin", "record", "context", "instrument"}
        Where the truth comes from.
    of : str or None
        For a standard error or a significance: the column whose estimate is compared
        with its truth, allowing ``sigma`` times this column's ``noise``.
    """

    rel: float = 0.0
    sigma: float = 0.0
    samples: float = 0.0
    vhf_bins: float = 0.0
    value: float = 0.0
    noise: str = "field"
    rel_of: str | None = None
    db: int | None = None
    bound: str | None = None
    truth: str = "twin"
    of: str | None = None

    def allowed(self, truth, *, ref=None, noise=0.0, sample_s=0.0):
        """Largest allowed ``|x - t|`` (in linear units when ``db``), elementwise.

        Parameters
        ----------
        truth : array_like
            The truth t, in the column's unit (dB when ``db``).
        ref : array_like, optional
            The truth ``rel`` applies to (default: ``truth``), same unit.
        noise : array_like, default=0
            The record's noise carried to the column (linear units when ``db``).
        sample_s : array_like, default=0
            The record's field sample interval, s.

        Returns
        -------
        ndarray
            The allowance, in the column's (linear) unit.
        """
        t = self._linear(truth)
        r = t if ref is None else self._linear(ref)
        return (self.rel * np.abs(r) + self.sigma * np.asarray(noise, float)
                + self.samples * np.asarray(sample_s, float) + self.vhf_bins * VHF_BIN_S
                + self.value)

    def within(self, x, truth, *, ref=None, noise=0.0, sample_s=0.0, lower_bound=False):
        """Whether each value ``x`` lies within tolerance of ``truth`` (False where NaN).

        ``lower_bound`` (bool, elementwise) marks values that are lower bounds of their
        magnitude: those are within when ``|x|`` does not exceed ``|t|`` by more than the
        allowance. The other arguments are those of :meth:`allowed`.

        Examples
        --------
        >>> Tolerance(rel=0.1, samples=1).within([1.25e-6, 1.35e-6], 1e-6, sample_s=2e-7)
        array([ True, False])
        """
        lim = self.allowed(truth, ref=ref, noise=noise, sample_s=sample_s)
        xl, tl = self._linear(x), self._linear(truth)
        with np.errstate(invalid="ignore"):
            ok = np.where(np.asarray(lower_bound, bool), np.abs(xl) - np.abs(tl) <= lim,
                          np.abs(xl - tl) <= lim)
        return ok & np.isfinite(xl) & np.isfinite(tl)

    def _linear(self, v):
        v = np.asarray(v, float)
        if self.db is None:
            return v
        with np.errstate(over="ignore"):
            return 10.0 ** (v / self.db)

    def describe(self, unit: str = "") -> str:
        """The tolerance in words, e.g. ``"10 % + 1 sample"`` (``unit``: the column's)."""
        parts = []
        if self.rel:
            parts.append(f"{100 * self.rel:g} %" + (f" of {self.rel_of}" if self.rel_of
                                                    else ""))
        if self.sigma:
            what = {"field": "sigma", "field/peak": "sigma/peak", "vhf": "VHF floor",
                    "snr": ""}.get(self.noise, "SE")
            parts.append(f"{self.sigma:g}" + (f" {what}" if what else ""))
        if self.samples:
            parts.append(f"{self.samples:g} sample")
        if self.vhf_bins:
            parts.append(f"{self.vhf_bins:g} VHF bin")
        if self.value:
            parts.append(_with_unit(self.value, unit))
        text = " + ".join(parts) or "exact"
        if self.db:
            text += " (linear)"
        if self.of:
            text = f"{self.of} within {text}"
        if self.truth != "twin":
            text += f" [{self.truth}]"
        return text


def _with_unit(value: float, unit: str) -> str:
    if unit == "s":
        return f"{value * 1e6:g} us" if value >= 1e-7 else f"{value * 1e9:g} ns"
    return f"{value:g}" if unit in ("", "1") else f"{value:g} {unit}"


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
        "vhf", "sources", "flash" (flash_id), "field" (a usable field record:
        :data:`FIELD_PART_COLUMNS`, added after the table). Without them it is NaN;
        classifiers train on copies of pulses with such groups masked so they cope.
    tolerance : Tolerance or None
        How far the value may lie from its truth (every numeric column has one).
    """

    name: str
    unit: str
    definition: str
    group: str
    model: bool = True
    requires: frozenset = frozenset()
    tolerance: Tolerance | None = None

    @property
    def numeric(self) -> bool:
        """Whether the column holds numbers (not an id, a category or a flag)."""
        return self.unit not in ("-", "bool")


# tolerances shared by several columns (module notes; common practice, no source)
_EXACT = Tolerance()
_DURATION = Tolerance(rel=0.10, samples=1)
_INSTANT = Tolerance(rel=0.10, rel_of="width_s", samples=1)
_PEAK_TIME = Tolerance(rel=0.10, rel_of="fwhm_s", samples=1)  # a broad top's peak wanders
_AMPLITUDE = Tolerance(rel=0.10, sigma=2, bound="field_censored")
_LAG = Tolerance(value=0.1e-6, vhf_bins=1, samples=1)
_EVENTS_TIME = Tolerance(value=1e-9)  # from events.csv alone: the twin's are the same
_RECORD_TIME = Tolerance(rel=0.10, samples=1, truth="record")
_RECORD_COUNT = Tolerance(truth="record")
_CONTEXT_RATIO = Tolerance(value=0.05, sigma=1, noise="field/peak", truth="context")
# a noise-like VHF signal's power is speckled: a 0.5 us average of a few tens of samples
# still wanders by ~15 % rms, and its largest bin sits above the mean
_VHF_POWER = Tolerance(rel=0.5, sigma=2, noise="vhf", db=10, bound="vhf_censored")


FEATURES: tuple[Feature, ...] = (
    Feature("event_id", "-", "from events.csv", "id", model=False),
    # ---------------------------------------------------------------- field
    Feature("peak_field_v_per_m", "V/m", "signed peak of the catalogued pulse's initial "
            "half-cycle (physics convention, baseline line removed, decay-compensated): the "
            "largest |E| of the first lobe of the pulse at the trigger, measured within the "
            "pulse's own extent", "field", model=False, tolerance=_AMPLITUDE),
    Feature("polarity", "1", "+1 / -1: sign of the initial half-cycle", "field",
            tolerance=_EXACT),
    Feature("rise_time_s", "s", "10 % to 90 % of the peak on its leading edge (searched back "
            "from the peak, never before the previous pulse); NaN below 20 dB SNR, under one "
            "sample, where 1.25 x the crossings' time noise (noise / slope) exceeds 10 % "
            "of it + 1 sample, and at the digitizer's full scale", "field",
            tolerance=_DURATION),
    Feature("fwhm_s", "s", "full width at half maximum of the initial half-cycle; NaN below "
            "12 dB SNR, under two samples and at the digitizer's full scale", "field",
            tolerance=_DURATION),
    Feature("initial_half_cycle_s", "s", "onset (last rise through max(1 % of the peak, "
            "3 sigma of the smoothed record)) to the zero crossing; NaN for a unipolar pulse "
            "and below 20 dB SNR (the onset lost in the noise)", "field", tolerance=_DURATION),
    Feature("zero_crossing_s", "s", "peak to the zero crossing: the last fall through 0 "
            "before the (smoothed) field goes below -max(3 sigma, 2 % of the peak), re-read "
            "off a line through it; NaN for a unipolar pulse, below 20 dB SNR, where 1.25 x "
            "the crossing's time noise (noise / slope) exceeds 10 % of it + 1 sample, and "
            "at the digitizer's full scale", "field", tolerance=_DURATION),
    Feature("width_s", "s", "whole pulse duration: leading-edge 10 % point to the last fall "
            "of the (smoothed) pulse, or of its overshoot when that exceeds 10 %, below 10 % "
            "of the peak; NaN where 10 % of the peak is under 2 sigma, under two samples, "
            "where 1.25 x the crossings' time noise (noise / slope) exceeds 10 % of it + 1 "
            "sample, and at the digitizer's full scale", "field", tolerance=_DURATION),
    Feature("bipolarity", "1", "opposite-polarity overshoot peak (smoothed) / peak, 0 for a "
            "unipolar pulse; NaN below 20 dB SNR, where noise could hide an overshoot of "
            "15 %, where 1.25 x the ratio's noise exceeds 0.08, and at the digitizer's full "
            "scale", "field", tolerance=Tolerance(value=0.08)),
    Feature("range_normalized_peak_v_per_m", "V/m", "peak scaled to a ground-level source at "
            "100 km with the elevated-source geometry: x (R^3 / D^2) / 100 km, R = "
            "sqrt(D^2 + H^2); close under the source, where the radiation term does not "
            "lead the peak 5 to 1 (D^2 R < 5 c T (2 H^2 - D^2), T from onset to peak), the "
            "radiation term's own peak instead: -max dM/dt / (2 pi eps0 c^2 100 km) from "
            "the exact inversion, NaN within 5 x its noise or at full scale; NaN without "
            "range", "field",
            requires=frozenset({"range"}), tolerance=_AMPLITUDE),
    Feature("current_moment_peak_a_m", "A m", "current moment M at the zero crossing (or the "
            "end of a unipolar pulse), from the three-term inversion of the field of an "
            "elevated source (solved exactly close under it, D < sqrt(2) H; radiation-only "
            "with the D^2/R^3 geometry where a farther one does not converge); where the "
            "radiation term does not lead the peak (as range_normalized_peak), M of largest "
            "magnitude over the pulse: there the field has no crossing where M peaks; + = "
            "upward-directed current; NaN without range", "field",
            requires=frozenset({"range"}), tolerance=_AMPLITUDE),
    Feature("charge_moment_change_c_m", "C m", "int M dt from the onset to the end of the "
            "overshoot lobe (or of the pulse), same inversion; NaN without range and below "
            "20 dB SNR (onset and tail lost in the noise)", "field",
            requires=frozenset({"range"}),
            tolerance=Tolerance(rel=0.20, sigma=2, bound="field_censored")),
    Feature("peak_current_a", "A", "transmission-line estimate I = -2 pi eps0 c^2 (R^3 / D^2) "
            "E / v with v = 1.5e8 m/s (close under the source max dM/dt / v, as "
            "range_normalized_peak); + = upward-directed current; NaN without range",
            "field", requires=frozenset({"range"}), tolerance=_AMPLITUDE),
    Feature("pulse_start_s", "s", "the pulse's onset: physical time relative to the trigger",
            "field", model=False, tolerance=_INSTANT),
    Feature("pulse_end_s", "s", "end of the pulse (of its overshoot lobe when bipolar: its "
            "tail's first fall below 1 % of the peak), physical time relative to the "
            "trigger; NaN for a bipolar pulse whose smoothed tail noise (2 sigma) stands "
            "above 1 % of the peak, whose tail is still above it at the next pulse, or where "
            "1.25 x the fall's time noise (noise / slope) exceeds 10 % of width_s + 1 "
            "sample; where "
            "bipolarity is NaN; at the digitizer's full scale", "field", model=False,
            tolerance=_INSTANT),
    Feature("neighbours_before", "1", "other pulses in the record within 100 us before the "
            "peak, reaching max(5 sigma, 10 % of the peak)", "field",
            tolerance=_RECORD_COUNT),
    Feature("neighbours_after", "1", "the same within 100 us after the peak", "field",
            tolerance=_RECORD_COUNT),
    Feature("nearest_neighbour_s", "s", "time from the peak to the nearest such pulse in the "
            "record (NaN: none)", "field", tolerance=_RECORD_TIME),
    Feature("neighbour_interval_s", "s", "median interval between successive pulses of the "
            "train holding the pulse (within 100 us; NaN without neighbour)", "field",
            tolerance=_RECORD_TIME),
    Feature("largest_neighbour_ratio", "1", "largest other pulse within 100 us (any size "
            "over 5 sigma) / the peak; 0: none", "field",
            tolerance=Tolerance(rel=0.20, sigma=2, noise="field/peak", truth="record")),
    Feature("pre_level_ratio", "1", "mean field in the 2 us before the onset / the peak "
            "(a pulse riding on another's tail)", "field", tolerance=_CONTEXT_RATIO),
    Feature("baseline_slope_ratio", "1", "slope of the baseline line over 10 us / the peak, "
            "in the pulse's polarity", "field", tolerance=_CONTEXT_RATIO),
    Feature("record_before_s", "s", "record before the peak", "field", model=False,
            tolerance=_PEAK_TIME),
    Feature("record_after_s", "s", "record after the peak", "field", model=False,
            tolerance=_PEAK_TIME),
    # ---------------------------------------------------------------- vhf
    Feature("vhf_peak_db", "dB", "10 log10 of the peak of the smoothed VHF power envelope "
            "(0.1 us bins, 0.5 us moving average, then one over a quarter of the burst's top) "
            "in the pulse's window, catalog units",
            "vhf", model=False, requires=frozenset({"vhf"}),
            tolerance=_VHF_POWER),
    Feature("vhf_field_lag_s", "s", "physical time of the field peak minus that of the VHF "
            "burst (centroid of the smoothed envelope's top half above the noise floor; "
            "positive: VHF leads; searched from the onset less the rise to 2 us after the "
            "field peak); both channels delay-corrected; NaN below 3 dB VHF SNR and where "
            "the burst time's standard error (the envelope's speckle and noise through the "
            "centroid; a clipped VHF window: its stretch of clipped samples / sqrt(12)) "
            "exceeds 0.15 us, and where field_censored (the field peak's time is unknown)",
            "vhf",
            requires=frozenset({"vhf"}), tolerance=_LAG),
    Feature("vhf_lag_first_peak_s", "s", "the same to the first prominent local maximum of "
            "the field's initial half-cycle (equal to the lag when it has none before the "
            "peak)", "vhf", requires=frozenset({"vhf"}), tolerance=_LAG),
    Feature("vhf_to_field_db", "dB", "VHF peak power relative to the squared range-"
            "normalised field peak: vhf_peak_db - 20 log10(|range_normalized_peak|); in the "
            "catalog's VHF units", "vhf", model=False,
            requires=frozenset({"range", "vhf"}),
            tolerance=Tolerance(rel=0.8, sigma=2, noise="vhf", db=10,
                                bound="vhf_censored")),
    Feature("vhf_field_ratio_db", "dB", "vhf_snr_db - snr_db: VHF strength relative to the "
            "field strength, each over its own noise floor (range and gain free); a lower "
            "bound where vhf_censored; NaN where field_censored (snr_db then a lower "
            "bound, the ratio an upper one) and below 18 dB snr_db (where the field peak's "
            "noise alone moves it by over 2 dB, 2 sigma)", "vhf",
            model=False, requires=frozenset({"vhf"}),
            # compared as a power ratio (db=10) so that a clipped VHF peak counts as the
            # lower bound vhf_snr_db's own tolerance already treats it as (the magnitude
            # rule of a bound cannot judge a signed dB difference): +2 dB / -3.8 dB
            tolerance=Tolerance(rel=10 ** 0.2 - 1, db=10, bound="vhf_censored",
                                truth="instrument")),
    Feature("vhf_snr_db", "dB", "smoothed VHF envelope peak over its noise floor (median "
            "outside the window)", "vhf", requires=frozenset({"vhf"}),
            tolerance=Tolerance(rel=0.5, sigma=2, noise="snr", db=10, bound="vhf_censored",
                                truth="instrument")),
    Feature("vhf_width_s", "s", "time the envelope (0.1 us bins, 0.5 us moving average, "
            "then a quarter of the burst's top) stays above 10 % of the way from the noise "
            "floor to its peak around it; NaN below 10 dB SNR, where clipped "
            "(vhf_censored), where the burst runs off the record and where the width's "
            "standard error from the envelope's speckle exceeds 5 %", "vhf",
            requires=frozenset({"vhf"}),
            tolerance=Tolerance(rel=0.10, vhf_bins=1)),
    Feature("vhf_censored", "bool", "a raw VHF sample of the window reaches full scale: the "
            "VHF peak is a lower bound", "vhf", requires=frozenset({"vhf"})),
    # ---------------------------------------------------------------- mapping
    Feature("n_sources", "1", "mapped VHF sources of the pulse (NaN: catalog has no "
            "sources)", "mapping",
            model=False,
            requires=frozenset({"sources"}), tolerance=Tolerance(truth="instrument")),
    # The fitted rates are allowed 3 of their own standard errors, as their SE and
    # significance columns: an unbiased estimate with a known SE lies within 2 SE only
    # 95.4 % of the time (normal), and these SEs are themselves estimated from
    # n_sources - 2 degrees of freedom (Student's t: within 2 SE 82 % at 2 dof), so a
    # 2-SE allowance cannot meet the 95 % goal even for a right estimator.
    Feature("speed_m_per_s", "m/s", "speed from a robust (Huber) straight-line fit of mapped "
            "positions vs time (3-D if xyz, else from range and angles), less its noise "
            "bias: sqrt(max(|v|^2 - sum of the squared standard errors, 0)); NaN under 3 "
            "sources or without positions", "mapping",
            requires=frozenset({"range", "sources"}),
            tolerance=Tolerance(rel=0.10, sigma=3, noise="speed_se_m_per_s")),
    Feature("speed_se_m_per_s", "m/s", "standard error of that speed (delta method, from "
            "the fit's Huber covariance: residual scatter over the time spread of the "
            "sources); depends on the instrument's position noise", "mapping", model=False,
            requires=frozenset({"range", "sources"}),
            tolerance=Tolerance(sigma=3, noise="speed_se_m_per_s", of="speed_m_per_s")),
    Feature("speed_snr", "1", "speed_m_per_s / speed_se_m_per_s: how far the speed stands "
            "above its noise (0 when the motion is within the noise; the SE has n_sources - 2 "
            "degrees of freedom, so with few sources large values happen by chance); scales with "
            "the station's position noise as much as with the motion", "mapping", model=False,
            requires=frozenset({"range", "sources"}),
            tolerance=Tolerance(rel=0.10, sigma=3, noise="speed_se_m_per_s", of="speed_m_per_s")),
    Feature("vertical_speed_m_per_s", "m/s", "signed vertical component of that velocity "
            "(rate of change of altitude above the curved Earth), + upward", "mapping",
            requires=frozenset({"range", "sources"}),
            tolerance=Tolerance(rel=0.10, sigma=3, noise="vertical_speed_se_m_per_s")),
    Feature("vertical_speed_se_m_per_s", "m/s", "standard error of the vertical speed",
            "mapping", model=False,
            requires=frozenset({"range", "sources"}),
            tolerance=Tolerance(sigma=3, noise="vertical_speed_se_m_per_s",
                                of="vertical_speed_m_per_s")),
    Feature("vertical_confounded", "bool", "the pulse's positions come from range and angles "
            "(no x/y/z): all its sources sit at one range, so a motion towards or away from "
            "the station also changes the vertical speed", "mapping", model=False,
            requires=frozenset({"sources"})),
    Feature("motion_elevation_deg", "deg", "direction of the apparent motion on the sky "
            "above the horizontal (+90 straight up, 0 sideways), from the fitted azimuth and "
            "elevation rates (elevation rate x sec^2(el) vs azimuth rate); NaN unless its 95 % "
            "interval (Student's t with n_sources - 2 degrees of freedom times the delta-method "
            "SE, both axes' noise pooled) is within 10 deg: at the station's angle noise a slow or short track has no "
            "measurable direction", "mapping",
            requires=frozenset({"sources"}), tolerance=Tolerance(value=10.0)),
    Feature("angular_rate_deg_per_s", "deg/s", "angular speed on the sky from a robust fit "
            "of azimuth x cos(elevation) and elevation vs time, less its noise bias (as the "
            "speed)", "mapping",
            model=False,
            requires=frozenset({"sources"}),
            tolerance=Tolerance(rel=0.10, sigma=3, noise="angular_rate_se_deg_per_s")),
    Feature("angular_rate_se_deg_per_s", "deg/s", "standard error of the angular rate",
            "mapping", model=False,
            requires=frozenset({"sources"}),
            tolerance=Tolerance(sigma=3, noise="angular_rate_se_deg_per_s",
                                of="angular_rate_deg_per_s")),
    Feature("net_to_path", "1", "net displacement / path length of the time-ordered source "
            "track on the sky (1 = straight, near 0 = back and forth); angles only, so the "
            "same with or without xyz; NaN unless the length the angle noise adds to the path, "
            "step by step ((d - 1) sigma^2 / L for a step of length L, a step within the noise "
            "whole), is <= 5 % of it (sigma: upper 95 % bound from each source's offset to "
            "its neighbours' chord): noise alone makes a track look crooked",
            "mapping",
            requires=frozenset({"sources"}), tolerance=Tolerance(value=0.10)),
    Feature("altitude_m", "m", "median source altitude above the curved Earth: from xyz, "
            "sqrt(x^2 + y^2 + (R + z)^2) - R with R = 6.371e6 m; from range D and elevation, "
            "a / (cos(D/a) - tan(el) sin(D/a)) - a with a = 4/3 R (standard refraction)",
            "mapping",
            requires=frozenset({"range", "sources"}), tolerance=Tolerance(rel=0.10, value=200.0)),
    Feature("elevation_median_deg", "deg", "median source elevation", "mapping",
            model=False,
            requires=frozenset({"sources"}), tolerance=Tolerance(rel=0.05, value=0.5)),
    Feature("source_duration_s", "s", "time from the first to the last mapped source",
            "mapping",
            model=False,
            requires=frozenset({"sources"}), tolerance=Tolerance(value=1e-9)),
    Feature("source_range_m", "m", "median horizontal distance of the sources (xyz only)",
            "mapping", model=False,
            requires=frozenset({"sources"}), tolerance=Tolerance(rel=0.01, value=100.0)),
    Feature("breakdown_polarity", "-", "positive / negative / undetermined: the current "
            "(down for a positive initial field peak, physics convention) flows with (positive) "
            "or against (negative) the sources' vertical propagation, trusted at |v_z| / SE >= 3 "
            "(>= 6 from range and angles)", "breakdown", model=False,
            requires=frozenset({"sources"})),
    Feature("breakdown_snr", "1", "the significance |v_z| / SE that breakdown_polarity rests "
            "on", "breakdown", model=False, requires=frozenset({"sources"}),
            tolerance=Tolerance(rel=0.10, sigma=3, noise="vertical_speed_se_m_per_s",
                                of="vertical_speed_m_per_s")),
    # ---------------------------------------------------------------- context
    Feature("isolation_s", "s", "time to the nearest other catalogued pulse of the same "
            "flash (NaN if alone)", "context",
            model=False,
            requires=frozenset({"flash"}), tolerance=_EVENTS_TIME),
    Feature("isolation_any_s", "s", "time to the nearest other catalogued pulse of any "
            "flash", "context", model=False, tolerance=_EVENTS_TIME),
    Feature("time_in_flash_s", "s", "time since the first pulse of its flash (flashes "
            "grouped in time and space when the catalog gives no flash ids; NaN for a pulse "
            "without a flash or alone in it)", "context",
            requires=frozenset({"flash"}), tolerance=_EVENTS_TIME),
    Feature("flash_n_pulses", "1", "catalogued pulses in its flash (1 without flash_id; NaN "
            "when the catalog has no flash ids at all)",
            "context",
            model=False,
            requires=frozenset({"flash"}), tolerance=_EXACT),
    Feature("channel_reuse", "1", "fraction of its sources within one 300 m cell (0.3 deg on "
            "the sky without xyz) of a source mapped >= 5 ms earlier in its flash (NaN without "
            "sources, or without a flash or alone in it; NaN for every pulse when the catalog's "
            "position noise, estimated from its sources, exceeds a quarter cell: the noise, "
            "not the channel, then decides which sources meet)",
            "context",
            requires=frozenset({"flash", "sources"}), tolerance=Tolerance(value=0.10)),
    # ---------------------------------------------------------------- quality
    Feature("range_m", "m", "horizontal range used (events.csv, else the sources' median "
            "horizontal distance)", "quality", model=False,
            tolerance=Tolerance(rel=0.01, value=100.0)),
    Feature("snr_db", "dB", "20 log10(peak / noise sigma); sigma: 1.4826 MAD about the "
            "baseline line (an integer digitizer's clipped standard deviation, which holds "
            "its step^2/12), at least step/sqrt(12)",
            "quality", model=False,
            tolerance=Tolerance(rel=0.15, sigma=2, noise="snr", db=20, bound="field_censored",
                                truth="instrument")),
    Feature("field_noise_v_per_m", "V/m", "that noise sigma", "quality", model=False,
            tolerance=Tolerance(rel=0.15, truth="instrument")),
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
            "or was solved exactly (otherwise radiation-only with the D^2/R^3 geometry)", "quality", model=False),
    Feature("has_vhf", "bool", "the pulse has a usable VHF record", "quality", model=False),
    Feature("field_ok", "bool", "the field record is usable (at most half of the span "
            "missing and a peak of at least 3 sigma)", "quality", model=False),
)

#: Columns measured on the field record. A pulse whose field record is unusable
#: (``field_ok`` false: pinned at full scale all along, as a DC-coupled antenna is after
#: a close stroke's static change; mostly missing; no pulse above the noise) lacks them
#: all while its VHF, sources and flash context remain: they require the catalog part
#: "field", so classifiers train on copies with them masked (like range, VHF, sources
#: and flash ids) and classify such a pulse from what is left
#: (:func:`mask_unusable_field`).
FIELD_PART_COLUMNS = frozenset(
    {f.name for f in FEATURES if f.group == "field"}
    | {"vhf_field_lag_s", "vhf_lag_first_peak_s", "field_censored"})
FEATURES = tuple(dataclasses.replace(f, requires=f.requires | {"field"})
                 if f.name in FIELD_PART_COLUMNS else f for f in FEATURES)

_BY_NAME = {f.name: f for f in FEATURES}


def feature_names() -> list[str]:
    """All output column names, in output order (``event_id`` first)."""
    return [f.name for f in FEATURES]


def model_feature_names() -> list[str]:
    """Columns a classifier uses, in a fixed order."""
    return [f.name for f in FEATURES if f.model]


def numeric_feature_names() -> list[str]:
    """Columns that hold numbers (each with a :class:`Tolerance`), in output order."""
    return [f.name for f in FEATURES if f.numeric]


def missing_groups(names=None) -> dict[str, list[str]]:
    """For each optional catalog part, the columns of ``names`` that need it."""
    names = model_feature_names() if names is None else list(names)
    out: dict[str, list[str]] = {}
    for n in names:
        for part in sorted(_BY_NAME[n].requires):
            out.setdefault(part, []).append(n)
    return out


def mask_unusable_field(X, usable) -> None:
    """Set the :data:`FIELD_PART_COLUMNS` of ``X`` (a DataFrame of model inputs, changed
    in place) to NaN on the rows whose field record is not usable (``usable`` False):
    whatever a pinned or missing record yielded is not a measurement of the pulse."""
    bad = ~np.asarray(usable, dtype=bool)
    if not bad.any():
        return
    cols = [c for c in X.columns if c in FIELD_PART_COLUMNS]
    if cols:
        X.loc[bad, cols] = np.nan


def get(name: str) -> Feature:
    """The :class:`Feature` called ``name`` (KeyError if unknown)."""
    return _BY_NAME[name]


def format_table(markdown: bool = False) -> str:
    """The schema as an aligned text table with the tolerances (or a Markdown table)."""
    if markdown:
        lines = ["| column | unit | definition |", "|---|---|---|"]
        lines += [f"| `{f.name}` | {f.unit} | {f.definition} |" for f in FEATURES]
        return "\n".join(lines)
    w = max(len(f.name) for f in FEATURES)
    u = max(len(f.unit) for f in FEATURES)
    tol = [f.tolerance.describe(f.unit) if f.tolerance else "-" for f in FEATURES]
    t = max(len(x) for x in tol)
    rows = [f"{'column':<{w}}  {'unit':<{u}}  model  {'tolerance':<{t}}  definition"]
    for f, x in zip(FEATURES, tol, strict=True):
        rows.append(f"{f.name:<{w}}  {f.unit:<{u}}  {'yes' if f.model else 'no ':<5}  "
                    f"{x:<{t}}  {f.definition}")
    return "\n".join(rows)
