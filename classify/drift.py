"""What changed between two catalogs: instrument settings, feature distributions, class mix.

A new season rarely looks like the last one: the station gets a new digitizer,
an antenna is moved, the storms are different. Before trusting a model on the
new season, :func:`compare_catalogs` lists

1. the **instrument changes** read from the two manifests (and the presence of
   range, flash ids, VHF and mapped sources), each with the features it is
   expected to move (:data:`SETTING_EFFECTS`), since they explain most drift
   (:mod:`classify._instrument`, re-exported here);
2. the **feature drift**, every numeric feature of the schema ranked by its
   population stability index (PSI) of B against A, with the two-sample
   Kolmogorov-Smirnov test (:func:`scipy.stats.ks_2samp`) and the change of
   its missing-value rate;

and, with a model, :func:`classify.priors.prior_shift` estimates the new
season's class mix and :func:`classify.drift_report.champion_calibration`
measures the model's calibration on the new season's labelled pulses;
:mod:`classify.drift_report` prints and draws the result.

PSI (:func:`population_stability_index`) = sum over bins of
(q_b - q_a) ln(q_b / q_a), with bins at the deciles of A's values plus one bin
for missing values (NaN), so a feature that becomes missing drifts too. An
empty bin counts as :data:`PSI_EPS`. Bands: below 0.1 stable, 0.1 to 0.25
moderate, above 0.25 major (:data:`PSI_BANDS`; common practice, no source).

References
----------
Siddiqi, N. (2006), *Credit Risk Scorecards*, Wiley: ch. 8 (the population
stability index); from memory.
"""

from __future__ import annotations

import logging
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats

from features import InputError, schema
from features._checks import describe_path_kind

from ._instrument import PRESENCE_TOL as PRESENCE_TOL
from ._instrument import (
    SETTING_EFFECTS,
    InstrumentChange,
    SettingEffect,
    instrument_changes,
    instrument_settings,
)
from .priors import PriorShift

__all__ = ["PSI_BINS", "PSI_EPS", "PSI_BANDS", "SETTING_EFFECTS", "SettingEffect",
           "InstrumentChange", "Calibration", "DriftResult", "instrument_settings",
           "instrument_changes", "population_stability_index", "psi_band", "feature_drift",
           "compare_catalogs", "read_feature_table"]

logger = logging.getLogger("pulsesort")

#: Quantile bins of catalog A's values for the PSI (deciles; common practice, no source).
PSI_BINS = 10
#: Proportion an empty PSI bin counts as, so ln(q_b / q_a) stays finite. Proportions
#: are not renormalised, so a bin empty in both catalogs adds exactly 0.
#: (common practice, no source)
PSI_EPS = 1e-4
#: PSI below the first value: stable; up to the second: moderate; above: major
#: (common practice, no source).
PSI_BANDS = (0.1, 0.25)


def population_stability_index(a, b, n_bins: int = PSI_BINS, eps: float = PSI_EPS) -> float:
    """PSI of sample ``b`` against sample ``a``, with a bin for missing values.

    Parameters
    ----------
    a, b : array-like, shape (n_a,), (n_b,)
        The values (any unit) of the reference and the new catalog; NaN = missing.
    n_bins : int, default=10
        Quantile bins of ``a``'s non-missing values (fewer when ``a`` has ties:
        every distinct edge is kept once). Bins are right-closed; the outer ones
        are open-ended.
    eps : float, default=1e-4
        Proportion an empty bin counts as (not renormalised).

    Returns
    -------
    float
        sum over bins of (q_b - q_a) ln(q_b / q_a) >= 0; 0 for identical samples.

    Examples
    --------
    >>> a = np.arange(100.0)
    >>> round(population_stability_index(a, np.r_[np.zeros(80), np.full(20, 99.0)], 2), 4)
    0.4159
    """
    a = np.asarray(a, dtype=np.float64).ravel()
    b = np.asarray(b, dtype=np.float64).ravel()
    if a.size == 0 or b.size == 0:
        raise ValueError(f"PSI needs values in both samples, got {a.size} and {b.size}")
    if int(n_bins) < 1:
        raise ValueError(f"n_bins must be >= 1, got {n_bins!r}")
    if not 0 < eps < 1:
        raise ValueError(f"eps must be in (0, 1), got {eps!r}")
    fa, fb = a[~np.isnan(a)], b[~np.isnan(b)]
    if fa.size:
        edges = np.unique(np.quantile(fa, np.linspace(0, 1, int(n_bins) + 1)[1:-1]))
    else:
        edges = np.array([])
    k = len(edges) + 1
    qa = np.append(np.bincount(np.searchsorted(edges, fa, side="left"), minlength=k),
                   a.size - fa.size) / a.size
    qb = np.append(np.bincount(np.searchsorted(edges, fb, side="left"), minlength=k),
                   b.size - fb.size) / b.size
    qa, qb = np.maximum(qa, eps), np.maximum(qb, eps)
    return float(np.sum((qb - qa) * np.log(qb / qa)))


def psi_band(psi: float) -> str:
    """``"stable"``, ``"moderate"`` or ``"major"`` (:data:`PSI_BANDS`), ``""`` for NaN."""
    if not np.isfinite(psi):
        return ""
    return "stable" if psi < PSI_BANDS[0] else ("moderate" if psi <= PSI_BANDS[1] else "major")


def _numeric(col: pd.Series) -> np.ndarray:
    if col.dtype == bool:
        return col.to_numpy(dtype=np.float64)
    return pd.to_numeric(col, errors="coerce").to_numpy(dtype=np.float64)


def feature_drift(feat_a: pd.DataFrame, feat_b: pd.DataFrame, *, changes=(),
                  n_bins: int = PSI_BINS, eps: float = PSI_EPS) -> pd.DataFrame:
    """Rank every schema feature of two feature tables by how much it drifted.

    Parameters
    ----------
    feat_a, feat_b : pandas.DataFrame
        Feature tables (:func:`features.extract.extract_features`) of A and B.
        Schema features missing from either table are skipped.
    changes : list of InstrumentChange, optional
        Used to fill ``explained_by``.
    n_bins, eps
        See :func:`population_stability_index`.

    Returns
    -------
    pandas.DataFrame
        One row per feature, most drifted first: ``rank``, ``feature``, ``unit``,
        ``model`` (used by classifiers), ``psi``, ``band``, ``ks_statistic``,
        ``ks_pvalue`` (two-sided, on the non-missing values; NaN if either side
        has none), ``missing_a``, ``missing_b`` (fractions), ``missing_change``,
        ``median_a``, ``median_b`` (in the feature's unit), ``n_a``, ``n_b``
        (non-missing values), ``explained_by`` (``;``-joined settings among
        ``changes`` expected to move it). Sorted by PSI, then KS statistic.
    """
    names = [f.name for f in schema.FEATURES if f.group != "id" and f.unit != "-"
             and f.name in feat_a.columns and f.name in feat_b.columns]
    if not names:
        raise InputError("the feature tables share no schema feature column")
    rows = []
    for name in names:
        a, b = _numeric(feat_a[name]), _numeric(feat_b[name])
        fa, fb = a[~np.isnan(a)], b[~np.isnan(b)]
        if fa.size and fb.size:
            with warnings.catch_warnings():  # exact p-value not computable: asymptotic
                warnings.simplefilter("ignore", RuntimeWarning)
                ks = stats.ks_2samp(fa, fb)
            ks_d, ks_p = float(ks.statistic), float(ks.pvalue)
        else:
            ks_d = ks_p = np.nan
        psi = population_stability_index(a, b, n_bins, eps) if a.size and b.size else np.nan
        meta = schema.get(name)
        rows.append({
            "feature": name, "unit": meta.unit, "model": meta.model, "psi": psi,
            "band": psi_band(psi), "ks_statistic": ks_d, "ks_pvalue": ks_p,
            "missing_a": 1 - fa.size / a.size if a.size else np.nan,
            "missing_b": 1 - fb.size / b.size if b.size else np.nan,
            "median_a": float(np.median(fa)) if fa.size else np.nan,
            "median_b": float(np.median(fb)) if fb.size else np.nan,
            "n_a": int(fa.size), "n_b": int(fb.size),
            "explained_by": ";".join(c.setting for c in changes if name in c.affects),
        })
    table = pd.DataFrame(rows)
    table["missing_change"] = table["missing_b"] - table["missing_a"]
    table = table.sort_values(["psi", "ks_statistic"], ascending=False, na_position="last",
                              kind="stable").reset_index(drop=True)
    table.insert(0, "rank", np.arange(1, len(table) + 1))
    cols = ["rank", "feature", "unit", "model", "psi", "band", "ks_statistic", "ks_pvalue",
            "missing_a", "missing_b", "missing_change", "median_a", "median_b", "n_a", "n_b",
            "explained_by"]
    return table[cols]


@dataclass
class Calibration:
    """A model's top-label reliability on labelled pulses of a catalog.

    Made by :func:`classify.drift_report.champion_calibration`; it lives here,
    beside :class:`DriftResult` that holds it, so that this module does not
    import the report module (which imports this one).

    Attributes
    ----------
    curve : pandas.DataFrame
        :func:`classify.stats.reliability_curve` table.
    ece : float
        Expected calibration error (top label, equal-width bins).
    n_pulses : int
        Labelled pulses scored.
    n_skipped : int
        Labelled pulses of a class the model does not know.
    """

    curve: pd.DataFrame
    ece: float
    n_pulses: int
    n_skipped: int


@dataclass
class DriftResult:
    """Everything :func:`compare_catalogs` found; see :mod:`classify.drift_report`."""

    catalog_a: str
    catalog_b: str
    n_a: int
    n_b: int
    changes: list[InstrumentChange]
    table: pd.DataFrame
    settings_a: dict = field(default_factory=dict)
    settings_b: dict = field(default_factory=dict)
    priors: PriorShift | None = None
    calibration: Calibration | None = None
    model_version: str | None = None


def compare_catalogs(cat_a, cat_b, feat_a: pd.DataFrame, feat_b: pd.DataFrame, *,
                     n_bins: int = PSI_BINS, eps: float = PSI_EPS) -> DriftResult:
    """Instrument changes and ranked feature drift of catalog B against catalog A.

    Parameters
    ----------
    cat_a, cat_b : features.Catalog
    feat_a, feat_b : pandas.DataFrame
        Their feature tables (computed, or from :func:`read_feature_table`).

    Returns
    -------
    DriftResult
        ``priors`` and ``calibration`` are left None (see
        :func:`classify.priors.prior_shift`,
        :func:`classify.drift_report.champion_calibration`).
    """
    changes = instrument_changes(cat_a, cat_b)
    table = feature_drift(feat_a, feat_b, changes=changes, n_bins=n_bins, eps=eps)
    return DriftResult(cat_a.catalog_id, cat_b.catalog_id, len(feat_a), len(feat_b), changes,
                       table, instrument_settings(cat_a), instrument_settings(cat_b))


def read_feature_table(path, catalog) -> pd.DataFrame:
    """Read a features CSV (or Parquet) written by ``pulsesort features`` for ``catalog``.

    Parameters
    ----------
    path : str or os.PathLike
    catalog : features.Catalog
        The catalog it was computed from; its event ids must match exactly.

    Returns
    -------
    pandas.DataFrame
        In the catalog's event order; booleans parsed, features as float.

    Raises
    ------
    features.InputError
        Naming the file and the column, line or event id that is wrong (or the
        file missing).
    """
    path = Path(path)
    kind = describe_path_kind(path)
    if kind is not None:
        raise InputError(f"{path}: no such features file" if kind == "missing" else
                         f"{path}: is {kind}, not a features file")
    if path.suffix == ".parquet":
        try:
            df = pd.read_parquet(path)
        except ImportError as exc:
            raise InputError(f"{path}: reading Parquet needs pyarrow "
                             "(pip install 'pulsesort[parquet]')") from exc
        except Exception as exc:  # noqa: BLE001 - pyarrow's errors for a bad file vary
            raise InputError(f"{path}: not a readable Parquet file ({str(exc)[:160]})"
                             ) from None
    else:
        try:
            df = pd.read_csv(path, dtype={"event_id": str, "flash_id": str},
                             keep_default_na=False, na_values=[""], low_memory=False)
        except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
            raise InputError(f"{path}: not a readable features CSV ({exc})") from None
    if "event_id" not in df.columns:
        raise InputError(f"{path}: no event_id column; write it with `pulsesort features`")
    names = [f.name for f in schema.FEATURES]
    missing = [c for c in names if c not in df.columns]
    if missing:
        raise InputError(f"{path}: missing feature column(s) {missing[:8]}"
                         f"{' ...' if len(missing) > 8 else ''}; write it with "
                         "`pulsesort features` of this pulsesort version")
    ids = df["event_id"].astype(str)
    dup = ids[ids.duplicated()]
    if len(dup):
        raise InputError(f"{path}: event_id {dup.iloc[0]!r} appears more than once")
    want = pd.Index(catalog.event_ids.astype(str))
    extra, lacking = ids[~ids.isin(want)], want[~want.isin(ids)]
    if len(extra) or len(lacking):
        raise InputError(
            f"{path}: its event ids do not match catalog {catalog.catalog_id!r}: "
            f"{len(lacking)} of the catalog's missing"
            f"{f' (first {lacking[0]!r})' if len(lacking) else ''}, {len(extra)} unknown"
            f"{f' (first {extra.iloc[0]!r})' if len(extra) else ''}; was it computed from "
            "another catalog?")
    df = df.set_index(ids).loc[want].reset_index(drop=True)
    for f in schema.FEATURES[1:]:
        col = df[f.name]
        if f.unit == "-":          # a text column (e.g. breakdown_polarity)
            df[f.name] = col.fillna("").astype(str)
            continue
        if f.unit == "bool":
            if col.dtype == bool:
                continue
            text = col.astype(str).str.strip().str.lower()
            bad = ~text.isin(["true", "false"])
            if bad.any():
                i = int(np.flatnonzero(bad.to_numpy())[0])
                raise InputError(f"{path}: column {f.name!r} must be true/false, got "
                                 f"{col.iloc[i]!r} (event {df['event_id'].iloc[i]!r})")
            df[f.name] = text.eq("true")
        else:
            num = pd.to_numeric(col, errors="coerce")
            bad = num.isna() & col.notna()
            if bad.any():
                i = int(np.flatnonzero(bad.to_numpy())[0])
                raise InputError(f"{path}: column {f.name!r} must be a number, got "
                                 f"{col.iloc[i]!r} (event {df['event_id'].iloc[i]!r})")
            df[f.name] = num.astype(np.float64)
    return df
