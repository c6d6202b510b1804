"""A self-contained HTML summary of a triage, for a group meeting.

One file, no scripts, no external resources: inline CSS and inline SVG charts
(:mod:`classify.svgplot`). Sections: what was triaged, class counts per hour
of the season (``time_utc``, UTC hours), the distributions of the main
features per predicted class, the confidence histogram per predicted class,
the review load (how many pulses need review and why), and, with the catalog,
a few example field changes per class (the most confident pulses that need no
review; field change as on the review page). Every text from the data is
HTML-escaped.

Classes: the model's (the results' ``p_`` columns, in the model's order), then
any other label seen, then, given the label store's classes, the store's
visible classes the results lack (with no pulses: the model does not know them
yet). With the store, the class table also says what each class is in the
store now (a class of the store, hidden, renamed or merged into another, or not
a store class).

Examples
--------
>>> from classify.report import write_report
>>> write_report("results.csv", "report.html", catalog="hollowmere-2031")  # doctest: +SKIP
"""

from __future__ import annotations

import logging
from datetime import datetime, timezone
from html import escape
from pathlib import Path

import numpy as np
import pandas as pd

from features import InputError
from features.atomic import atomic_write

from . import svgplot
from ._feature_values import MAIN_FEATURES, feature_values, result_classes
from .decide import REVIEW_REASONS

logger = logging.getLogger("pulsesort")

__all__ = ["result_classes", "report_classes", "store_status", "hourly_counts", "review_load", "distribution_samples",
           "build_report", "write_report"]

#: Review reasons, in the order the triage checks them.
REASONS = tuple(REVIEW_REASONS)
MAX_HOUR_ROWS = 200
_REQUIRED = ("event_id", "label", "confidence", "needs_review", "time_utc")


def report_classes(results: pd.DataFrame, store_classes=None) -> list[str]:
    """The report's classes: :func:`result_classes`, then the store's classes not among them.

    Parameters
    ----------
    results : pandas.DataFrame
        Triage results.
    store_classes : list of str, optional
        The label store's visible classes (``LabelStore.classes()``), in its order.
    """
    classes = result_classes(results)
    return classes + [c for c in (store_classes or []) if c not in classes]


def store_status(name: str, store_classes, class_map) -> str:
    """What class ``name`` of a report is in the label store now, in words.

    ``store_classes`` are the store's visible classes; ``class_map`` maps every
    name the store ever had to the class in use it stands for now
    (``LabelStore.class_map()``).
    """
    now = class_map.get(name)
    if now is None:
        return "not a store class"
    if now != name:
        return f"now {now} (renamed or merged)"
    return "store class" if name in store_classes else "hidden in the store"


def hourly_counts(results: pd.DataFrame, classes=None) -> pd.DataFrame:
    """Pulses per predicted class in every UTC hour from the first to the last pulse.

    Parameters
    ----------
    results : pandas.DataFrame
        Triage results with ``time_utc`` (datetime64 UTC) and ``label``.
    classes : list of str, optional
        The columns, in order (default :func:`result_classes`).

    Returns
    -------
    pandas.DataFrame
        Index: hour start (UTC), every hour of the span (quiet hours are 0);
        one int64 column per class, in the model's class order.
    """
    t = pd.to_datetime(results["time_utc"], utc=True)
    hours = t.dt.floor("h")
    classes = result_classes(results) if classes is None else list(classes)
    if len(results) == 0:
        return pd.DataFrame(columns=classes, dtype="int64")
    table = pd.crosstab(hours, results["label"].astype(str))
    span = pd.date_range(hours.min(), hours.max(), freq="h")
    table = table.reindex(index=span, columns=classes, fill_value=0).astype("int64")
    table.index.name = "hour_utc"
    table.columns.name = None
    return table


def review_load(results: pd.DataFrame) -> pd.DataFrame:
    """How many pulses need review for each reason (a pulse may have several).

    Returns
    -------
    pandas.DataFrame
        Index: reason; columns ``n`` (pulses with that reason) and ``share``
        (of all pulses, in [0, 1]).
    """
    reasons = results.get("review_reason", pd.Series([""] * len(results))).fillna("")
    sets = reasons.astype(str).str.split(";")
    found = sorted({r for s in sets for r in s if r} - set(REASONS))
    rows = []
    for r in list(REASONS) + found:
        n = int(sets.map(lambda s, r=r: r in s).sum())
        rows.append((r, n, n / len(results) if len(results) else 0.0))
    return pd.DataFrame(rows, columns=["reason", "n", "share"]).set_index("reason")


def distribution_samples(results: pd.DataFrame, name: str, absolute: bool = False,
                         classes=None):
    """One feature's values per predicted class, as the report's histograms show them.

    Values are in display units (:func:`classify._feature_values.feature_values`);
    where they span decades the histogram is of their base-10 logarithm.

    Returns
    -------
    samples : list of ndarray
        Finite values of each class, in the order of ``classes`` (default
        :func:`result_classes`).
    x_label : str
        With the unit in parentheses, e.g. ``"width (µs)"`` or
        ``"log10 of width (µs)"``.
    """

    classes = result_classes(results) if classes is None else classes
    v, label, log = feature_values(results, name, absolute)
    labels = results["label"].astype(str).to_numpy()
    if log:
        v, label = np.log10(v), f"log10 of {label}"
    return [v[(labels == c) & np.isfinite(v)] for c in classes], label


def _distributions(results, classes) -> str:

    figs = []
    for name, absolute in MAIN_FEATURES:
        if name not in results.columns:
            continue
        samples, x_label = distribution_samples(results, name, absolute, classes)
        if not any(len(s) for s in samples):
            continue
        figs.append('<div class="dist">' + svgplot.histogram_chart(
            samples, bins=30, x_label=x_label, y_label="pulses", width=300,
            height=200) + "</div>")
    if not figs:
        return ""
    key = " ".join(f'<span style="color:{svgplot.PALETTE[i % len(svgplot.PALETTE)]}">'
                   f"&#9632; {escape(c)}</span>" for i, c in enumerate(classes))
    return f'<p class="key">{key}</p><div class="examples">' + "".join(figs) + "</div>"


def _table(header, rows, cls=""):
    head = "".join(f"<th>{escape(str(h))}</th>" for h in header)
    body = "".join("<tr>" + "".join(f"<td>{escape(str(v))}</td>" for v in r) + "</tr>"
                   for r in rows)
    return f'<table class="{cls}"><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>'


def _examples(results, catalog, classes, per_class):
    from .review._pulse import field_trace

    rows = {e: i for i, e in enumerate(map(str, catalog.event_ids))}
    parts = []
    for c in classes:
        mine = results[results["label"].astype(str) == c]
        if mine.empty:
            continue
        sure = mine.sort_values(["needs_review", "confidence"], ascending=[True, False],
                                kind="stable")
        figs = []
        for _, r in sure.head(per_class).iterrows():
            eid = str(r["event_id"])
            if eid not in rows:
                continue
            t_us, e, _ = field_trace(catalog, rows[eid])
            svg = svgplot.line_chart([(t_us, e, "E")], x_label="time from trigger (µs)",
                                     y_label="E (V/m), + = field up", width=300, height=170,
                                     zero_line=True)
            cap = (f"{escape(eid)}<br>confidence {float(r['confidence']):.2f}"
                   f"{' (needs review)' if r['needs_review'] else ''}")
            figs.append(f'<figure>{svg}<figcaption>{cap}</figcaption></figure>')
        if figs:
            parts.append(f"<h3>{escape(c)}</h3><div class=\"examples\">{''.join(figs)}</div>")
    return "".join(parts)


def build_report(results: pd.DataFrame, *, catalog=None, title=None,
                 examples_per_class: int = 3, store_classes=None, class_map=None) -> str:
    """The report as one HTML string (see the module docstring for its sections).

    Parameters
    ----------
    results : pandas.DataFrame
        Triage results as :func:`classify.triage.read_results` returns them.
    catalog : features.catalog.Catalog, optional
        The catalog of the results, for example waveforms.
    title : str, optional
    examples_per_class : int, default=3
    store_classes : list of str, optional
        The label store's visible classes (``LabelStore.classes()``): listed too.
    class_map : dict, optional
        The store's ``LabelStore.class_map()``: with it, the class table says what
        each class is in the store now.
    """
    missing = [c for c in _REQUIRED if c not in results.columns]
    if missing:
        raise InputError(f"the results table lacks column(s) {missing}; is it a "
                         "'pulsesort triage' output?")
    n = len(results)
    needs = results["needs_review"].astype(bool)
    classes = report_classes(results, store_classes)
    cids = sorted(set(results.get("catalog_id", pd.Series([], dtype=str)).dropna()
                      .astype(str)))
    versions = sorted(set(results.get("model_version", pd.Series([], dtype=str)).dropna()
                          .astype(str)))
    if catalog is not None and cids and cids != [catalog.catalog_id]:
        raise InputError(f"the results are of catalog(s) {', '.join(cids)}, not of "
                         f"{catalog.catalog_id} at {catalog.path}")
    title = title or f"Triage of {', '.join(cids) or 'a catalog'}"
    t = pd.to_datetime(results["time_utc"], utc=True)
    now = datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    facts = [("pulses", f"{n:,}"),
             ("model", ", ".join(versions) or "n/a"),
             ("first pulse (UTC)", f"{t.min():%Y-%m-%d %H:%M:%S}" if n else "n/a"),
             ("last pulse (UTC)", f"{t.max():%Y-%m-%d %H:%M:%S}" if n else "n/a"),
             ("need review", f"{int(needs.sum()):,} ({needs.mean() * 100 if n else 0:.1f} %)"),
             ("report written", now)]
    if catalog is not None:
        facts[1:1] = [("station", catalog.station or "n/a"), ("season", catalog.season or "n/a")]
    if versions and all(v.startswith("rules-") for v in versions):
        facts.append(("note", "physics rules (no trained model): the confidences are not "
                              "calibrated probabilities"))
    out = [f"<h1>{escape(title)}</h1>", _table(["", ""], facts, "facts")]

    counts = results["label"].astype(str).value_counts()
    conf = results.groupby(results["label"].astype(str))["confidence"].mean()
    rev = needs.groupby(results["label"].astype(str)).sum()
    out.append("<h2>Classes</h2>")
    header = ["class", "pulses", "share", "mean confidence", "need review"]
    rows = [[c, int(counts.get(c, 0)), f"{counts.get(c, 0) / n * 100 if n else 0:.1f} %",
             f"{conf.get(c, np.nan):.2f}" if c in conf else "n/a", int(rev.get(c, 0))]
            for c in classes]
    if class_map is not None:
        header.append("in the label store")
        for r in rows:
            r.append(store_status(r[0], store_classes or [], class_map))
    out.append(_table(header, rows, "num"))

    hours = hourly_counts(results, classes)
    out.append("<h2>Class counts per hour of the season</h2>")
    if len(hours):
        start = hours.index[0]
        x = (hours.index - start) / pd.Timedelta(hours=1)
        stacks = [(hours[c].to_numpy(float), c) for c in classes]
        out.append(svgplot.stacked_bar_chart(
            np.asarray(x, float), stacks, x_label=f"hours since {start:%Y-%m-%d %H:%M} UTC",
            y_label="pulses per hour", width=900, height=280))
        active = hours[hours.sum(axis=1) > 0]
        rows = [(f"{h:%Y-%m-%d %H:00}", *map(int, active.loc[h]), int(active.loc[h].sum()))
                for h in active.index[:MAX_HOUR_ROWS]]
        out.append(f"<p>{len(active)} hour(s) with pulses out of {len(hours)}"
                   f"{f'; the first {MAX_HOUR_ROWS} are listed' if len(active) > MAX_HOUR_ROWS else ''}"
                   ".</p>")
        out.append(_table(["hour (UTC)", *classes, "total"], rows, "num hours"))

    dists = _distributions(results, classes)
    if dists:
        out.append("<h2>Feature distributions per class</h2>")
        out.append("<p>Main features of the pulses of each predicted class (display units; "
                   "a base-10 logarithm where the values span decades).</p>")
        out.append(dists)

    out.append("<h2>Confidence</h2>")
    samples = [results.loc[results["label"].astype(str) == c, "confidence"] for c in classes]
    out.append(svgplot.histogram_chart(samples, bins=20,  # every class: same colours as above
                                       x_label="confidence of the predicted class",
                                       y_label="pulses", names=classes,
                                       range_=(0.0, 1.0), width=640, height=260))

    load = review_load(results)
    out.append("<h2>Review load</h2>")
    out.append(f"<p>{int(needs.sum()):,} of {n:,} pulses need review; "
               f"{int(results.get('novel', pd.Series(False, index=results.index)).sum()):,} "
               "are novel (unlike the training pulses). A pulse may have several reasons.</p>")
    shown = load[load["n"] > 0]
    if len(shown):
        out.append(svgplot.hbar_chart(list(shown.index), shown["n"].to_numpy(float),
                                      x_label="pulses", width=640, value_format="{:.0f}"))
    out.append(_table(["reason", "pulses", "share"],
                      [(r, int(v["n"]), f"{v['share'] * 100:.1f} %") for r, v in load.iterrows()],
                      "num"))

    out.append("<h2>Example waveforms</h2>")
    if catalog is None:
        out.append("<p>Give the catalog (<code>--catalog</code>) to see example field "
                   "changes.</p>")
    else:
        out.append("<p>The most confident pulses of each class that need no review; field "
                   "change, physics convention (+ = field vector up).</p>")
        out.append(_examples(results, catalog, classes, examples_per_class))
    body = "\n".join(out)
    return (f'<!doctype html>\n<html lang="en"><head><meta charset="utf-8">'
            f"<title>{escape(title)}</title><style>{_CSS}</style></head>"
            f"<body>\n{body}\n</body></html>\n")


_CSS = """
body{font:14px/1.45 system-ui,sans-serif;color:#222;max-width:1000px;margin:1.5em auto;
padding:0 1em}h1{font-size:1.4em}h2{font-size:1.15em;margin-top:1.6em;border-bottom:1px solid
#ddd}h3{font-size:1em}table{border-collapse:collapse;margin:.5em 0}th,td{padding:.15em .6em;
border-bottom:1px solid #eee;text-align:left}table.num td+td{text-align:right;
font-variant-numeric:tabular-nums}table.facts th{display:none}.examples{display:flex;
flex-wrap:wrap;gap:.6em}figure{margin:0}figcaption{font-size:.85em;color:#555;
overflow-wrap:anywhere;max-width:300px}
""".strip()


def write_report(results_path, out, *, catalog=None, title=None, store=None) -> Path:
    """Read a results file and write its HTML report atomically (temp file + rename).

    Parameters
    ----------
    results_path : path
        A ``pulsesort triage`` output.
    out : path
        The HTML file to write (its folder must exist).
    catalog : path or Catalog, optional
        The catalog folder, for example waveforms.
    store : path or classify.labels.LabelStore, optional
        The label store whose classes the report also lists (read only).

    Returns
    -------
    pathlib.Path
        ``out``.
    """
    from features import open_catalog

    from .triage import read_results

    out = Path(out)
    if not out.parent.is_dir():
        raise InputError(f"{out.parent}: no such folder for the report")
    results = read_results(results_path)
    if catalog is not None and not hasattr(catalog, "catalog_id"):
        catalog = open_catalog(catalog)
    store_classes = class_map = None
    if store is not None:
        from .labels import LabelStore

        if isinstance(store, LabelStore):
            store_classes, class_map = store.classes(), store.class_map()
        else:
            with LabelStore(store, create=False) as s:
                store_classes, class_map = s.classes(), s.class_map()
    html = build_report(results, catalog=catalog, title=title, store_classes=store_classes,
                        class_map=class_map)
    atomic_write(out, html)
    logger.info("report of %d pulses written to %s", len(results), out)
    return out
