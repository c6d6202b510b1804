"""Show a :class:`classify.drift.DriftResult`: a terminal table and a self-contained HTML report.

The HTML report has no external resources: inline CSS and inline SVG charts
from :mod:`classify.svgplot`. It holds, in this order, the instrument changes
(with the features each is expected to move), the class-prior shift estimate
and the champion's reliability diagram on catalog B (when a model, and labels
of B, are given), the distributions of the most drifted features in A and B,
and the full ranked feature table. It is written to a temporary file and
renamed, so a reader never sees half a report.
"""

from __future__ import annotations

from html import escape
from pathlib import Path

import numpy as np
import pandas as pd

from features import InputError
from features.atomic import atomic_write

from . import __version__, svgplot
from . import stats as _stats
from .display import DISPLAY_UNITS, display_unit, display_value
from .drift import PSI_BANDS, Calibration, DriftResult, _numeric
from .priors import _model_inputs

__all__ = ["Calibration", "champion_calibration", "format_value", "format_drift_text",
           "render_drift_html", "write_drift_html"]


def champion_calibration(model, features: pd.DataFrame, labels: pd.DataFrame, *,
                         n_bins: int = 15) -> Calibration | None:
    """Reliability and ECE of ``model`` on the labelled pulses of a catalog.

    Parameters
    ----------
    model : object
        With ``classes_`` and a calibrated ``predict_proba``.
    features : pandas.DataFrame
        Feature table with ``event_id``.
    labels : pandas.DataFrame
        ``event_id``, ``label`` (e.g. ``LabelStore.current_labels([...],
        status="labelled")``).
    n_bins : int, default=15

    Returns
    -------
    Calibration or None
        None when no labelled pulse of a class the model knows is in ``features``.
    """
    classes = [str(c) for c in np.asarray(model.classes_).tolist()]
    lab = labels[["event_id", "label"]].astype({"event_id": str, "label": str})
    t = features.assign(event_id=features["event_id"].astype(str)).merge(lab, on="event_id")
    known = t["label"].isin(classes).to_numpy()
    t = t[known]
    if t.empty:
        return None
    proba = np.asarray(model.predict_proba(_model_inputs(model, t)), dtype=np.float64)
    y = t["label"].to_numpy()
    curve = _stats.reliability_curve(proba, y, n_bins, classes=classes)
    ece = _stats.expected_calibration_error(proba, y, n_bins, classes=classes)
    return Calibration(curve, ece, len(t), int((~known).sum()))


def format_value(setting: str, value) -> str:
    """A setting's value for people: display units from the name
    (:data:`classify.display.DISPLAY_UNITS`), fractions as percentages."""
    if value is None:
        return "none"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if setting.startswith("events."):
        return f"{100 * value:.0f} % of events"
    unit = next((u for s, u in (("_hz", "Hz"), ("_s", "s")) if setting.endswith(s)), "")
    if isinstance(value, (tuple, list)):
        shown = display_unit(unit)
        return "-".join(display_value(v, unit).removesuffix(" " + shown) for v in value) \
            + (f" {shown}" if shown else "")
    if isinstance(value, float):
        return display_value(value, unit, digits=6) if unit else f"{value:g}"
    return str(value)


def _num(v, fmt="{:.3g}") -> str:
    return "" if v is None or not np.isfinite(v) else fmt.format(v)


def _median_change(a, b, unit: str) -> str:
    """``"0.359 µs -> 0.41 µs"``: two medians in the unit's display unit."""
    return f"{display_value(a, unit) or '-'} -> {display_value(b, unit) or '-'}"


def format_drift_text(result: DriftResult, top: int = 10) -> str:
    """The terminal report: instrument changes first, then the ``top`` drifted features."""
    lines = [f"drift of {result.catalog_b} ({result.n_b:,} pulses) against "
             f"{result.catalog_a} ({result.n_a:,} pulses)", ""]
    if result.changes:
        lines.append(f"instrument changes ({len(result.changes)}), most drift is explained "
                     "by these:")
        w = max(len(c.setting) for c in result.changes)
        for c in result.changes:
            lines.append(f"  {c.setting:<{w}}  {format_value(c.setting, c.a)} -> "
                         f"{format_value(c.setting, c.b)}")
            if c.affects:
                lines.append(f"  {'':<{w}}  expected to move: {', '.join(c.affects)}")
    else:
        lines.append("instrument changes: none (same settings in both manifests)")
    lines.append("")
    t = result.table
    n = min(int(top), len(t))
    lines.append(f"feature drift, top {n} of {len(t)} by PSI (bands {PSI_BANDS[0]} / "
                 f"{PSI_BANDS[1]}: common practice, no source):")
    w = max([len("feature")] + [len(f) for f in t["feature"].head(n)])
    lines.append(f"  {'#':>3}  {'feature':<{w}}  {'PSI':>7}  {'band':<8}  {'KS D':>5}  "
                 f"{'KS p':>8}  {'missing A->B':>13}  {'median A -> B':<27}  explained by")
    for r in t.head(n).itertuples():
        miss = f"{100 * r.missing_a:.0f}->{100 * r.missing_b:.0f} %"
        med = _median_change(r.median_a, r.median_b, r.unit)
        lines.append(f"  {r.rank:>3}  {r.feature:<{w}}  {_num(r.psi, '{:.3f}'):>7}  "
                     f"{r.band:<8}  {_num(r.ks_statistic, '{:.2f}'):>5}  "
                     f"{_num(r.ks_pvalue, '{:.1e}'):>8}  {miss:>13}  {med:<27}  "
                     f"{r.explained_by.replace(';', ', ')}")
    if result.priors is not None:
        p = result.priors
        lines += ["", f"class-prior shift of {result.catalog_b} (EM on the calibrated "
                  f"probabilities of {p.n_pulses:,} pulses, {p.n_iter} iterations; "
                  f"model {result.model_version or '?'}):"]
        w = max(len(str(c)) for c in p.classes)
        lines.append(f"  {'class':<{w}}  {'training':>8}  {'B (EM)':>8}  {'B (mean p)':>10}")
        for c, a, b, m in zip(p.classes, p.train_priors, p.new_priors, p.mean_proba):
            lines.append(f"  {str(c):<{w}}  {100 * a:>7.1f}%  {100 * b:>7.1f}%  "
                         f"{100 * m:>9.1f}%")
    if result.calibration is not None:
        c = result.calibration
        lines += ["", f"champion calibration on {c.n_pulses:,} labelled pulses of "
                  f"{result.catalog_b}: ECE {c.ece:.3f}"
                  + (f" ({c.n_skipped} labelled pulses of unknown classes skipped)"
                     if c.n_skipped else "")]
    return "\n".join(lines)


_CSS = """body{font-family:system-ui,sans-serif;margin:1.5em auto;max-width:70em;color:#222}
table{border-collapse:collapse;margin:.5em 0 1.2em}td,th{padding:.2em .6em;border-bottom:1px
solid #ddd;text-align:left;font-size:.9em}th{background:#f3f3f3}td.n{text-align:right;
font-variant-numeric:tabular-nums;white-space:nowrap}.major{color:#b00}.moderate{color:#a60}.charts{display:flex;
flex-wrap:wrap;gap:1em}.note{color:#555;font-size:.9em}"""


def _table(header, rows, numeric=()) -> str:
    out = ["<table><tr>" + "".join(f"<th>{escape(h)}</th>" for h in header) + "</tr>"]
    for row in rows:
        cells = []
        for i, v in enumerate(row):
            cls = ' class="n"' if i in numeric else ""
            cells.append(f"<td{cls}>{v}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    return "".join(out) + "</table>"


def _histogram(name, a, b, result: DriftResult, unit: str) -> str:
    fa, fb = a[np.isfinite(a)], b[np.isfinite(b)]
    pooled = np.concatenate([fa, fb])
    if pooled.size == 0:
        return ""
    factor = 1.0 if unit in ("1", "bool", "-") else DISPLAY_UNITS.get(unit, (unit, 1.0))[1]
    fa, fb, pooled = fa * factor, fb * factor, pooled * factor
    lo, hi = np.percentile(pooled, [1, 99])
    if not hi > lo:
        lo, hi = float(pooled.min()) - 0.5, float(pooled.max()) + 0.5
    shown = display_unit(unit)
    label = f"{name} ({shown})" if shown else name
    title = (f"{name}: missing {100 * (1 - fa.size / max(a.size, 1)):.0f} % -> "
             f"{100 * (1 - fb.size / max(b.size, 1)):.0f} %")
    return svgplot.histogram_chart([np.clip(fa, lo, hi), np.clip(fb, lo, hi)], bins=30,
                                   x_label=label, y_label="density", density=True,
                                   names=[f"A {result.catalog_a}", f"B {result.catalog_b}"],
                                   range_=(float(lo), float(hi)), title=title, width=440)


def render_drift_html(result: DriftResult, feat_a: pd.DataFrame, feat_b: pd.DataFrame, *,
                      top: int = 10) -> str:
    """The HTML report as a string (see the module docstring for its contents)."""
    a_id, b_id = escape(result.catalog_a), escape(result.catalog_b)
    parts = [f"<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>drift "
             f"{b_id} vs {a_id}</title><style>{_CSS}</style></head><body>",
             f"<h1>Drift of {b_id} against {a_id}</h1>",
             f"<p>A: {a_id}, {result.n_a:,} pulses. B: {b_id}, {result.n_b:,} pulses. "
             f"pulsesort {escape(__version__)}.</p>", "<h2>Instrument changes</h2>"]
    if result.changes:
        rows = [(escape(c.setting), escape(format_value(c.setting, c.a)),
                 escape(format_value(c.setting, c.b)), escape(", ".join(c.affects)),
                 escape(c.why)) for c in result.changes]
        parts.append(_table(["setting", "A", "B", "features expected to move", "why"], rows))
    else:
        parts.append("<p>None: both manifests declare the same settings.</p>")
    keys = list(dict.fromkeys([*result.settings_a, *result.settings_b]))
    if keys:
        changed = {c.setting for c in result.changes}
        rows = [(escape(k) + (" (changed)" if k in changed else ""),
                 escape(format_value(k, result.settings_a.get(k))) if k in result.settings_a
                 else "-",
                 escape(format_value(k, result.settings_b.get(k))) if k in result.settings_b
                 else "-") for k in keys]
        parts.append("<details><summary>All settings compared</summary>"
                     + _table(["setting", "A", "B"], rows) + "</details>")
    if result.priors is not None:
        p = result.priors
        parts.append(f"<h2>Class-prior shift</h2><p class=\"note\">EM estimate (Saerens, "
                     f"Latinne &amp; Decaestecker 2002) from the calibrated probabilities of "
                     f"model {escape(str(result.model_version or '?'))} on {p.n_pulses:,} "
                     f"pulses of B ({p.n_iter} iterations); the mean probability is the "
                     "unadjusted estimate.</p>")
        rows = [(escape(str(c)), f"{100 * a:.1f} %", f"{100 * b:.1f} %", f"{100 * m:.1f} %")
                for c, a, b, m in zip(p.classes, p.train_priors, p.new_priors, p.mean_proba)]
        parts.append(_table(["class", "training", "B (EM)", "B (mean probability)"], rows,
                            numeric=(1, 2, 3)))
    if result.calibration is not None:
        c = result.calibration
        used = c.curve[c.curve["count"] > 0]
        svg = svgplot.line_chart(
            [([0, 1], [0, 1], "perfect calibration"),
             (used["mean_confidence"].to_numpy(), used["accuracy"].to_numpy(), "champion")],
            x_label="top-label confidence", y_label="accuracy", xlim=(0, 1), ylim=(0, 1),
            width=420, height=320, title=f"reliability on {c.n_pulses:,} labelled pulses of B")
        parts.append(f"<h2>Champion calibration on B</h2><p>ECE {c.ece:.3f} "
                     f"(top label, {len(c.curve)} equal-width bins).</p>{svg}")
    t = result.table
    parts.append(f"<h2>Most drifted features</h2><p class=\"note\">PSI bins: deciles of A "
                 f"plus a missing-value bin; bands {PSI_BANDS[0]} / {PSI_BANDS[1]} (common "
                 "practice, no source). Charts clip to the pooled 1-99 % range.</p>"
                 "<div class=\"charts\">")
    for r in t.head(int(top)).itertuples():
        parts.append(_histogram(r.feature, _numeric(feat_a[r.feature]),
                                _numeric(feat_b[r.feature]), result, r.unit))
    parts.append("</div><h2>All features, ranked</h2>")
    rows = [(str(r.rank), escape(r.feature), escape(r.unit), "yes" if r.model else "no",
             _num(r.psi, "{:.3f}"), f'<span class="{r.band}">{r.band}</span>',
             _num(r.ks_statistic, "{:.3f}"), _num(r.ks_pvalue, "{:.2e}"),
             f"{100 * r.missing_a:.1f} -> {100 * r.missing_b:.1f} %",
             escape(_median_change(r.median_a, r.median_b, r.unit)),
             escape(r.explained_by.replace(";", ", "))) for r in t.itertuples()]
    parts.append(_table(["#", "feature", "unit", "model", "PSI", "band", "KS D", "KS p",
                         "missing A -> B", "median A -> B", "explained by"], rows,
                        numeric=(0, 4, 6, 7, 8, 9)))
    parts.append("</body></html>\n")
    return "".join(parts)


def write_drift_html(result: DriftResult, feat_a: pd.DataFrame, feat_b: pd.DataFrame, path,
                     *, top: int = 10) -> Path:
    """Write :func:`render_drift_html` to ``path`` atomically; return the path."""
    path = Path(path)
    if path.is_dir():
        raise InputError(f"{path}: is a folder; --out names the report file")
    if not path.parent.is_dir():
        raise InputError(f"{path.parent}: no such folder for the report")
    html = render_drift_html(result, feat_a, feat_b, top=top)
    atomic_write(path, html)
    return path
