"""Judging of ``bench_feature_truth.py``: every column of a season against its truth.

* :func:`instrument_of`: the station's true field noise sigma, VHF noise floor, sample
  interval, digitizer and mapped events, from a simulated catalog (``catalog.json``,
  ``sources.csv``).
* :func:`judge`: one row per (pulse, numeric column): the value claimed by the noisy
  season, its truth (the twin's value, the context twin's, or the instrument's, as the
  column's :class:`features.schema.Tolerance` says), the allowance and the verdict.
* :func:`judge_physical`: the physical columns against ``draw_season``'s truth.
* :func:`summarize`, :func:`summarize_physical`, :func:`by_regime`, :func:`truth_nan`,
  :func:`reproducers`: the tables; :func:`markdown_report`: all of them as Markdown.

Only the benchmark imports this module (run by hand, never by the test suite).
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from features import schema

#: The goal: this share of claims within tolerance at field SNR >= GOAL_SNR_DB.
GOAL_SHARE = 0.95
GOAL_SNR_DB = 20.0
SNR_BANDS = (("< 14 dB", -np.inf, 14.0), ("14-20 dB", 14.0, 20.0),
             ("20-30 dB", 20.0, 30.0), (">= 30 dB", 30.0, np.inf))
RANGE_BANDS = (("< 20 km", 0.0, 20e3), ("20-80 km", 20e3, 80e3), (">= 80 km", 80e3, np.inf))
DIGITIZERS = ("float", "int16")
#: The regime of the pulses that reach the digitizer's full scale (field_censored).
CENSORED = "field censored"
#: Which quantities are compared with draw_season's physical truth: (feature column,
#: truth column, how). "tolerance": the schema's tolerance of the column; "sign": the
#: sign of the column against that of the truth, claimed where breakdown_polarity is
#: determined; "polarity": breakdown_polarity against the truth's.
PHYSICAL = (
    ("current_moment_peak_a_m", "current_moment_peak_a_m", "tolerance"),
    ("charge_moment_change_c_m", "charge_moment_change_c_m", "tolerance"),
    ("altitude_m", "front_altitude_m", "tolerance"),
    ("speed_m_per_s", "front_speed_m_per_s", "tolerance"),
    ("vertical_speed_m_per_s", "front_vertical_speed_m_per_s", "sign"),
    ("breakdown_polarity", "current_direction x sign(front_vertical_speed)", "polarity"),
)


@dataclass(frozen=True)
class Instrument:
    """What the station's noise truly is (from the simulator's settings)."""

    sigma_v_per_m: float  # field noise rms with the digitizer's step^2/12, V/m
    vhf_floor: float  # mean VHF noise power, file units
    sample_s: float  # field sample interval, s
    digitizer: str  # "float" or "int16"
    mapped_ids: frozenset | None = None  # events with sources (None: no sources at all)
    vhf_window_s: tuple | None = None  # the VHF record's span about the trigger, s


def instrument_of(catalog_dir) -> Instrument:
    """The true noise of a simulated (noisy) catalog, from its ``catalog.json``."""
    man = json.loads((Path(catalog_dir) / "catalog.json").read_text(encoding="utf-8"))
    field, sim = man["field"], man["simulation"]["settings"]
    if field["units"] == "counts":
        step, digitizer = float(field["scale"]), "int16"
    else:
        step, digitizer = float(field["full_scale"]) / 2.0 ** (sim["field_bits"] - 1), "float"
    sigma = float(np.hypot(sim["field_noise_v_per_m"], step / np.sqrt(12.0)))
    mapped = None
    if "sources" in man:
        src = Path(catalog_dir) / man["sources"]["file"]
        mapped = frozenset(pd.read_csv(src, usecols=["event_id"], dtype=str)["event_id"])
    lo = -float(sim["vhf_pretrigger_s"])
    window = (lo, lo + float(sim["vhf_samples"]) / float(sim["vhf_rate_hz"]))
    return Instrument(sigma, float(sim["vhf_noise_floor"]), 1.0 / field["sample_rate_hz"],
                      digitizer, mapped, window)


def front_altitude_m(world, inst) -> np.ndarray:
    """Altitude of the sources' front at the middle of the time it is mapped, m.

    ``altitude_m`` is the median altitude of the mapped VHF sources, which the simulator
    draws uniformly in time along the front (``front_{z0,uz,speed,t0,t1}``) while its
    emission reaches the station within the VHF record: the median of a linear motion
    is its altitude at the middle of that span. This, not the field channel's mean
    height (``source_altitude_m``), is what the column measures: the sources of an
    energetic in-cloud pulse sit on its upward leader and those of a return stroke up
    the leader channel, km from the current wave's mid-height.
    """
    if inst.vhf_window_s is None:
        return np.full(len(world), np.nan)
    travel = world["slant_m"].to_numpy(dtype=float) / 299_792_458.0
    t0 = world["front_t0_s"].to_numpy(dtype=float)
    t_a = np.maximum(t0, inst.vhf_window_s[0] - travel)
    t_b = np.minimum(world["front_t1_s"].to_numpy(dtype=float), inst.vhf_window_s[1] - travel)
    mid = np.where(t_b > t_a, 0.5 * (t_a + t_b), np.nan)
    return (world["front_z0_m"].to_numpy(dtype=float) + world["front_uz"].to_numpy(dtype=float)
            * world["front_speed_m_per_s"].to_numpy(dtype=float) * (mid - t0))


def read_features(path) -> pd.DataFrame:
    """A features CSV as written by ``pulsesort features`` (empty cells are NaN)."""
    return pd.read_csv(path, keep_default_na=False, na_values=[""], low_memory=False)


def _num(s) -> np.ndarray:
    return pd.to_numeric(s, errors="coerce").to_numpy(dtype=float)


def _band(values, bands) -> np.ndarray:
    out = np.full(len(values), "", dtype=object)
    for name, lo, hi in bands:
        out[(values >= lo) & (values < hi)] = name
    return out


def _instrument_truths(twin, inst) -> dict:
    """Truths of the columns that depend on the station by definition: noise and SNRs
    (the twin's signal over the station's noise), and ``n_sources`` (the twin's count
    where the station's mapping saw the pulse, 0 where it was out)."""
    n_src = _num(twin["n_sources"])
    if inst.mapped_ids is not None:
        n_src = np.where(twin["event_id"].isin(inst.mapped_ids), n_src, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        snr = 20 * np.log10(np.abs(_num(twin["peak_field_v_per_m"])) / inst.sigma_v_per_m)
        power = np.where(twin["has_vhf"].astype(bool),
                         np.nan_to_num(10 ** (_num(twin["vhf_peak_db"]) / 10), nan=0.0),
                         np.nan)
        vhf_snr = 10 * np.log10((power + inst.vhf_floor) / inst.vhf_floor)
    return {"snr_db": snr, "field_noise_v_per_m": np.full(len(twin), inst.sigma_v_per_m),
            "vhf_snr_db": vhf_snr, "vhf_field_ratio_db": vhf_snr - snr, "n_sources": n_src}


def _carried_noise(tol, truth, noisy, twin, inst) -> np.ndarray:
    """The record's noise carried to a column (linear units for a dB column)."""
    peak = np.abs(_num(twin["peak_field_v_per_m"]))
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        t = tol._linear(truth)
        if tol.noise == "field":
            return inst.sigma_v_per_m * np.abs(t / peak)
        if tol.noise == "field/peak":
            return inst.sigma_v_per_m / peak
        if tol.noise == "vhf":
            return inst.vhf_floor * np.abs(t / 10 ** (_num(twin["vhf_peak_db"]) / 10))
    if tol.noise == "snr":
        return np.ones(len(truth))
    return _num(noisy[tol.noise])


def _frame(case, noisy, world, inst, column, truth_kind, tolerance, x, t, allowed, claim,
           within):
    snr = _num(noisy["snr_db"])
    return pd.DataFrame({
        "case": case, "event_id": noisy["event_id"].to_numpy(),
        "label": world["label"].to_numpy(), "column": column, "truth": truth_kind,
        "tolerance": tolerance, "x": x, "t": t, "allowed": allowed, "claim": claim,
        "within": within & claim, "truth_nan": claim & ~np.isfinite(t), "snr_db": snr,
        "snr_band": _band(snr, SNR_BANDS),
        "range_band": _band(world["distance_m"].to_numpy(dtype=float), RANGE_BANDS),
        "digitizer": inst.digitizer,
        "censored": np.where(noisy["field_censored"].to_numpy(dtype=bool), CENSORED, "")})


def check_aligned(noisy, *others) -> None:
    """Refuse to judge seasons whose events differ (a twin must be the same season)."""
    for other in others:
        if len(other) != len(noisy) or not (
                other["event_id"].to_numpy() == noisy["event_id"].to_numpy()).all() or (
                "time_utc" in other and not (other["time_utc"].to_numpy()
                                             == noisy["time_utc"].to_numpy()).all()):
            raise RuntimeError("the truth catalogs do not hold the noisy season's events "
                               "(event ids or times differ)")


def judge(case, noisy, twin, context, record, world, inst) -> pd.DataFrame:
    """Every numeric schema column of ``noisy`` against its truth, one row per pulse.

    Parameters
    ----------
    case : str
        Name of the season (e.g. "stress 3").
    noisy, twin, context : DataFrame
        Features of the season, of its truth twin and of its context twin (same events).
    record : DataFrame
        The neighbour columns' strict truths and their ``_lenient`` ends
        (``_neighbours.record_truth``), rows in catalog order.
    world : DataFrame
        ``draw_season`` of the season (label, distance_m).
    inst : Instrument

    Returns
    -------
    DataFrame
        Columns ``case, event_id, label, column, truth, tolerance, x, t, allowed, claim,
        within, truth_nan, snr_db, snr_band, range_band, digitizer``; ``x`` and ``t``
        are the compared values (of the ``of`` column for a standard error; for a
        "record" truth, its strict end), ``allowed`` the allowance (linear units for a
        dB column).
    """
    check_aligned(noisy, twin, context, world)
    if len(record) != len(noisy):
        raise RuntimeError(f"record truth has {len(record)} rows for {len(noisy)} events")
    inst_truth = _instrument_truths(twin, inst)
    frames = []
    for f in schema.FEATURES:
        if not f.numeric:
            continue
        tol = f.tolerance
        col = tol.of or f.name
        x = _num(noisy[col])
        claim = np.isfinite(_num(noisy[f.name])) & np.isfinite(x)
        alt = None
        if tol.truth == "instrument":
            t = inst_truth[col]
        elif tol.truth == "record":
            t, alt = _num(record[col]), _num(record[col + "_lenient"])
        else:
            t = _num((context if tol.truth == "context" else twin)[col])
        ref = None if tol.rel_of is None else _num(twin[tol.rel_of])
        bound = (noisy[tol.bound].to_numpy(dtype=bool) if tol.bound else
                 np.zeros(len(noisy), bool))
        noise = _carried_noise(tol, t, noisy, twin, inst)
        kw = dict(ref=ref, noise=noise, sample_s=inst.sample_s)
        with np.errstate(invalid="ignore"):
            within = tol.within(x, t, lower_bound=bound, **kw)
            allowed = tol.allowed(t, **kw)
            if alt is not None:  # either end of the truth's range, or between them
                kw_alt = dict(kw, noise=_carried_noise(tol, alt, noisy, twin, inst))
                within |= tol.within(x, alt, lower_bound=bound, **kw_alt)
                within |= (x >= np.fmin(t, alt)) & (x <= np.fmax(t, alt))
                t = np.where(np.isfinite(t), t, alt)
        frames.append(_frame(case, noisy, world, inst, f.name, tol.truth,
                             tol.describe(f.unit), x, t, allowed, claim, within))
    return pd.concat(frames, ignore_index=True)


def _physical_polarity(world) -> np.ndarray:
    """'positive' when the current flows with the front's vertical motion, else
    'negative' (the schema's definition of breakdown_polarity); '' without a front."""
    vz = world["front_vertical_speed_m_per_s"].to_numpy(dtype=float)
    same = np.sign(vz) * world["current_direction"].to_numpy(dtype=float)
    return np.where(same > 0, "positive", np.where(same < 0, "negative", ""))


def judge_physical(case, noisy, twin, world, inst) -> pd.DataFrame:
    """The physical columns of ``noisy`` (and, as ``source="twin"``, of the twin) against
    ``draw_season``'s truth (rows as :func:`judge`, plus ``source``)."""
    check_aligned(noisy, twin, world)
    frames = []
    truth_pol = _physical_polarity(world)
    world = world.assign(front_altitude_m=front_altitude_m(world, inst))
    for source, df in (("noisy", noisy), ("twin", twin)):
        for col, truth_col, how in PHYSICAL:
            name = f"{col} vs {truth_col}"
            if how == "tolerance":
                f = schema.get(col)
                tol = f.tolerance
                x, t = _num(df[col]), world[truth_col].to_numpy(dtype=float)
                noise = (_carried_noise(tol, t, df, twin, inst) if source == "noisy"
                         else np.zeros(len(df)))
                bound = df[tol.bound].to_numpy(dtype=bool) if tol.bound else False
                within = tol.within(x, t, noise=noise, sample_s=inst.sample_s,
                                    lower_bound=bound)
                allowed = tol.allowed(t, noise=noise, sample_s=inst.sample_s)
                claim, text = np.isfinite(x), tol.describe(f.unit)
            else:
                determined = df["breakdown_polarity"].isin(["positive", "negative"]).to_numpy()
                if how == "sign":
                    x = np.sign(_num(df[col]))
                    t = np.sign(world[truth_col].to_numpy(dtype=float))
                    text = "same sign, where breakdown_polarity is determined"
                else:
                    x = np.where(df[col] == "positive", 1.0, -1.0)
                    t = np.where(truth_pol == "positive", 1.0,
                                 np.where(truth_pol == "negative", -1.0, np.nan))
                    text = "the same"
                claim = determined & np.isfinite(x)
                within = x == t
                allowed = np.zeros(len(df))
            fr = _frame(case, noisy, world, inst, name, "physical", text, x, t, allowed,
                        claim, within)
            fr["source"] = source
            frames.append(fr)
    return pd.concat(frames, ignore_index=True)


def _share(num, den):
    return float(num) / float(den) if den else None


def summarize(j: pd.DataFrame) -> list[dict]:
    """Per column: claims, share within tolerance, NaN and false claims, at SNR >= 20 dB
    and below; ``met`` is the goal (``None`` when nothing is claimed at >= 20 dB)."""
    rows = []
    for col, g in j.groupby("column", sort=False):
        hi, lo = g[g["snr_db"] >= GOAL_SNR_DB], g[g["snr_db"] < GOAL_SNR_DB]
        claims_hi, claims_lo = int(hi["claim"].sum()), int(lo["claim"].sum())
        within = _share(hi["within"].sum(), claims_hi)
        rows.append({
            "column": col, "truth": g["truth"].iat[0], "tolerance": g["tolerance"].iat[0],
            "pulses_hi": len(hi), "claims_hi": claims_hi, "within_hi": within,
            "nan_hi": _share(len(hi) - claims_hi, len(hi)),
            "false_claims_hi": int(hi["truth_nan"].sum()),
            "pulses_lo": len(lo), "claims_lo": claims_lo,
            "within_lo": _share(lo["within"].sum(), claims_lo),
            "wrong_lo": _share((lo["claim"] & ~lo["within"]).sum(), len(lo)),
            "nan_lo": _share(len(lo) - claims_lo, len(lo)),
            "false_claims": int(g["truth_nan"].sum()),
            "met": None if within is None else within >= GOAL_SHARE,
        })
    return rows


def summarize_physical(jp: pd.DataFrame) -> list[dict]:
    """:func:`summarize` of the noisy season's physical comparisons, with the twin's
    claims and share within (all SNRs) as ``twin_claims`` and ``twin_within``."""
    rows = summarize(jp[jp["source"] == "noisy"])
    twin = jp[jp["source"] == "twin"]
    for r in rows:
        g = twin[twin["column"] == r["column"]]
        r["twin_claims"] = int(g["claim"].sum())
        r["twin_within"] = _share(g["within"].sum(), g["claim"].sum())
    return rows


def by_regime(j: pd.DataFrame) -> list[dict]:
    """Per column: the share of claims within tolerance in every SNR band, range band and
    digitizer, and among the censored pulses (with the number of claims)."""
    rows = []
    for col, g in j.groupby("column", sort=False):
        row = {"column": col}
        c = g[g["claim"]]
        for key, names in (("snr_band", [b[0] for b in SNR_BANDS]),
                           ("range_band", [b[0] for b in RANGE_BANDS]),
                           ("digitizer", DIGITIZERS), ("censored", (CENSORED,))):
            for name in names:
                sel = c[c[key] == name]
                row[name] = (_share(sel["within"].sum(), len(sel)), len(sel))
        rows.append(row)
    return rows


def truth_nan(j: pd.DataFrame) -> list[dict]:
    """Per column where the truth is NaN somewhere: how often, and how often the noisy
    season claims a value there anyway (a false claim)."""
    rows = []
    for col, g in j.groupby("column", sort=False):
        tn = ~np.isfinite(g["t"].to_numpy(dtype=float))
        if not tn.any():
            continue
        claims = int(g["claim"].sum())
        false = int(g["truth_nan"].sum())
        rows.append({"column": col, "truth": g["truth"].iat[0], "truth_nan": int(tn.sum()),
                     "false_claims": false, "false_hi": int(g["truth_nan"][
                         g["snr_db"] >= GOAL_SNR_DB].sum()),
                     "share_of_claims": _share(false, claims)})
    return rows


def reproducers(j: pd.DataFrame, columns, per_column: int = 2) -> list[dict]:
    """Misses at SNR >= 20 dB of ``columns``: the worst and the median one (by error over
    allowance), each with its case, event, values and SNR."""
    out = []
    hi = j[(j["snr_db"] >= GOAL_SNR_DB) & j["claim"] & ~j["within"]]
    for col in columns:
        g = hi[hi["column"] == col]
        if g.empty:
            continue
        with np.errstate(divide="ignore", invalid="ignore"):
            excess = np.abs(g["x"] - g["t"]) / g["allowed"]
        excess = excess.where(np.isfinite(excess), np.inf)
        g = g.assign(excess=excess).sort_values("excess", ascending=False, kind="stable")
        picks = sorted({0, len(g) // 2})[:per_column]
        for k in picks:
            r = g.iloc[k]
            out.append({"column": col, "case": r["case"], "event_id": r["event_id"],
                        "label": r["label"], "snr_db": r["snr_db"], "noisy": r["x"],
                        "truth": r["t"], "allowed": r["allowed"], "misses": len(g)})
    return out


# ------------------------------------------------------------------------ markdown
def _pct(v) -> str:
    return "-" if v is None else f"{100 * v:.1f}"


def _num_cell(v) -> str:
    if v is None or (isinstance(v, float) and not np.isfinite(v)):
        return "NaN" if isinstance(v, float) else "-"
    if isinstance(v, (int, np.integer)):
        return f"{v}"
    return f"{v:.4g}"


def _goal(met) -> str:
    return "no claims" if met is None else "met" if met else "**not met**"


def markdown_report(header: str, summary, regimes, physical, nan_rows, repro) -> str:
    """Every table of the benchmark as Markdown."""
    lines = [header, "",
             f"Goal: at field SNR >= {GOAL_SNR_DB:g} dB, >= {100 * GOAL_SHARE:g} % of the "
             "values a column claims (finite) lie within its tolerance of the truth (a "
             "claim whose truth is NaN counts as a miss); below 20 dB, NaN rather than a "
             "wrong number (`wrong < 20` = share of those pulses with a claimed value "
             "outside tolerance).", "",
             "### Every numeric column against its truth", "",
             "| column | truth | tolerance | claims >= 20 | within >= 20 (%) | NaN >= 20 (%) "
             "| false claims >= 20 | wrong < 20 (%) | NaN < 20 (%) | goal |",
             "|---|---|---|---:|---:|---:|---:|---:|---:|---|"]
    for r in summary:
        lines.append(f"| `{r['column']}` | {r['truth']} | {r['tolerance']} | "
                     f"{r['claims_hi']} | {_pct(r['within_hi'])} | {_pct(r['nan_hi'])} | "
                     f"{r['false_claims_hi']} | {_pct(r['wrong_lo'])} | {_pct(r['nan_lo'])} "
                     f"| {_goal(r['met'])} |")
    names = ([b[0] for b in SNR_BANDS] + [b[0] for b in RANGE_BANDS] + list(DIGITIZERS)
             + [CENSORED])
    lines += ["", "### Within tolerance by regime (% of claims, claims in brackets)", "",
              "| column | " + " | ".join(names) + " |",
              "|---|" + "---:|" * len(names)]
    for r in regimes:
        cells = [f"{_pct(r[n][0])} ({r[n][1]})" if r[n][1] else "-" for n in names]
        lines.append(f"| `{r['column']}` | " + " | ".join(cells) + " |")
    lines += ["", "### Against the physical truth (`draw_season`)", "",
              "The noisy season's value and, for comparison, the noise-free twin's (the "
              "method's own error).", "",
              "| quantity | tolerance | claims >= 20 | within >= 20 (%) | wrong < 20 (%) | "
              "twin: claims | twin: within (%) | goal |",
              "|---|---|---:|---:|---:|---:|---:|---|"]
    for r in physical:
        lines.append(f"| {r['column']} | {r['tolerance']} | {r['claims_hi']} | "
                     f"{_pct(r['within_hi'])} | {_pct(r['wrong_lo'])} | {r['twin_claims']} | "
                     f"{_pct(r['twin_within'])} | {_goal(r['met'])} |")
    lines += ["", "### Truth NaN (no true value; a value claimed there is a false claim)",
              "", "| column | truth | truth NaN | false claims | of them at >= 20 dB | "
              "share of the column's claims (%) |", "|---|---|---:|---:|---:|---:|"]
    for r in nan_rows:
        lines.append(f"| `{r['column']}` | {r['truth']} | {r['truth_nan']} | "
                     f"{r['false_claims']} | {r['false_hi']} | {_pct(r['share_of_claims'])} |")
    lines += ["", "### Reproducers of the misses at SNR >= 20 dB (worst, then median)", "",
              "| column | case | event_id | label | snr_db | noisy | truth | allowed "
              "(linear for dB) | misses |", "|---|---|---|---|---:|---:|---:|---:|---:|"]
    for r in repro:
        lines.append(f"| `{r['column']}` | {r['case']} | {r['event_id']} | {r['label']} | "
                     f"{r['snr_db']:.1f} | {_num_cell(r['noisy'])} | {_num_cell(r['truth'])} "
                     f"| {_num_cell(r['allowed'])} | {r['misses']} |")
    return "\n".join(lines) + "\n"
