"""Read side of the label store: current labels, history, conflicts, agreement, stats.

Every function takes an open :class:`sqlite3.Connection` (the caller holds a
read transaction, so all queries of one call see the same snapshot) and
returns pandas objects. The current-label rule is documented in
:mod:`classify.labels`. Labels are mapped to the store's current classes
(renames and merges, :mod:`classify.labels._classes`) before the rule is
applied, so two analysts who chose a class under its old and its new name agree.
"""

from __future__ import annotations

import itertools
import warnings

import numpy as np
import pandas as pd

from features import InputError

from . import _classes

STATUSES = ("labelled", "conflict", "unlabelled")

DECISION_COLUMNS = ("decision_id", "catalog_id", "event_id", "label", "analyst",
                    "decided_at", "origin", "note", "model_version", "confidence",
                    "batch_id", "source_file", "source_sha256", "recorded_at")
CURRENT_COLUMNS = ("catalog_id", "event_id", "label", "label_as_decided", "status", "resolved", "resolved_by",
                   "n_analysts", "analysts", "decided_at")


def _in(column: str, values) -> tuple[str, list]:
    """``column IN (?, ?, ...)`` and its parameters; an always-true clause for None."""
    if values is None:
        return "1 = 1", []
    values = list(values)
    if not values:
        return "0 = 1", []
    return f"{column} IN ({', '.join('?' * len(values))})", values


def _times(series: pd.Series) -> pd.Series:
    return pd.to_datetime(series, utc=True, format="ISO8601")


def decisions(con, catalog_ids=None, event_id=None) -> pd.DataFrame:
    """Every decision (optionally of some catalogs / one event id), in recorded order."""
    where, params = _in("d.catalog_id", catalog_ids)
    if event_id is not None:
        where += " AND d.event_id = ?"
        params.append(event_id)
    rows = con.execute(
        "SELECT d.decision_id, d.catalog_id, d.event_id, d.label, d.analyst, d.decided_at,"
        " d.origin, d.note, d.model_version, d.confidence, d.batch_id, b.source_path,"
        " b.source_sha256, d.recorded_at"
        " FROM decisions d LEFT JOIN import_batches b ON b.batch_id = d.batch_id"
        f" WHERE {where} ORDER BY d.decision_id", params).fetchall()
    df = pd.DataFrame(rows, columns=list(DECISION_COLUMNS), dtype=object)
    df["decision_id"] = df["decision_id"].astype("int64")
    df["confidence"] = df["confidence"].astype("float64")
    df["batch_id"] = df["batch_id"].astype("Int64")
    for c in ("decided_at", "recorded_at"):
        df[c] = _times(df[c])
    return df


def latest(con, catalog_ids=None, event=None) -> pd.DataFrame:
    """Each analyst's latest non-resolve decision and each event's latest resolve.

    Columns: decision_id, catalog_id, event_id, label (mapped to the current
    class), analyst, decided_at (text), origin, is_resolve (bool),
    label_as_decided (the label the decision was recorded with).
    """
    where, params = _in("catalog_id", catalog_ids)
    if event is not None:
        where += " AND catalog_id = ? AND event_id = ?"
        params += list(event)
    rows = con.execute(
        "WITH ranked AS ("
        " SELECT decision_id, catalog_id, event_id, label, analyst, decided_at, origin,"
        "  ROW_NUMBER() OVER ("
        "   PARTITION BY catalog_id, event_id, origin = 'resolve',"
        "    CASE WHEN origin = 'resolve' THEN '' ELSE analyst END"
        "   ORDER BY decided_at DESC, decision_id DESC) AS rn"
        f" FROM decisions WHERE {where})"
        " SELECT decision_id, catalog_id, event_id, label, analyst, decided_at, origin"
        " FROM ranked WHERE rn = 1", params).fetchall()
    df = pd.DataFrame(rows, columns=["decision_id", "catalog_id", "event_id", "label",
                                     "analyst", "decided_at", "origin"], dtype=object)
    df["decision_id"] = df["decision_id"].astype("int64")
    df["is_resolve"] = (df["origin"] == "resolve").to_numpy(dtype=bool)
    df["label_as_decided"] = df["label"]
    df["label"] = map_labels(df["label"].to_numpy(dtype=object), _classes.label_map(con))
    return df


def map_labels(labels, mapping) -> np.ndarray:
    """``labels`` (object array, None for none) with every name in ``mapping`` replaced.

    Vectorised: the mapping is applied to the distinct labels only.
    """
    labels = np.asarray(labels, dtype=object)
    if not mapping or not len(labels):
        return labels.copy()
    codes, uniques = pd.factorize(labels)  # a missing label gets code -1
    new = np.array([mapping.get(u, u) for u in uniques] + [None], dtype=object)
    return new[codes]


def _last_per_group(code: np.ndarray, mask: np.ndarray):
    """Positions of the last ``mask`` row of each group (rows sorted by group) and the groups."""
    idx = np.flatnonzero(mask)
    g = code[idx]
    last = np.r_[g[1:] != g[:-1], True] if len(g) else np.zeros(0, dtype=bool)
    return idx[last], g[last]


def rule(lat: pd.DataFrame) -> pd.DataFrame:
    """Apply the current-label rule to :func:`latest` rows: one row per decided event.

    Vectorised over events (a season has up to millions): rows are sorted by
    event, then time, then decision id, and each event's newest analyst
    decision, newest standing label and resolution are picked by position.
    """
    lat = lat.sort_values(["catalog_id", "event_id", "decided_at", "decision_id"],
                          kind="stable")
    cat = lat["catalog_id"].to_numpy(dtype=object)
    ev = lat["event_id"].to_numpy(dtype=object)
    n = len(lat)
    new_group = np.ones(n, dtype=bool)
    if n > 1:
        new_group[1:] = (cat[1:] != cat[:-1]) | (ev[1:] != ev[:-1])
    code = np.cumsum(new_group) - 1
    n_groups = int(new_group.sum())
    first = np.flatnonzero(new_group)
    at = lat["decided_at"].to_numpy(dtype=object)
    did = lat["decision_id"].to_numpy(dtype=np.int64)
    label = lat["label"].to_numpy(dtype=object)
    as_decided = lat["label_as_decided"].to_numpy(dtype=object) \
        if "label_as_decided" in lat else label
    analyst = lat["analyst"].to_numpy(dtype=object)
    is_res = lat["is_resolve"].to_numpy(dtype=bool)
    has_label = pd.notna(label)

    def spread(pos, groups, values, fill):
        out = np.full(n_groups, fill, dtype=object if not isinstance(fill, int) else np.int64)
        out[groups] = values[pos]
        return out

    # each event's newest analyst decision (retractions included) and its resolution
    pos, grp = _last_per_group(code, ~is_res)
    ana_at, ana_id = spread(pos, grp, at, ""), spread(pos, grp, did, -1)
    pos, grp = _last_per_group(code, is_res)
    res_at, res_id = spread(pos, grp, at, ""), spread(pos, grp, did, -1)
    res_label, res_by = spread(pos, grp, label, None), spread(pos, grp, analyst, None)
    res_as_decided = spread(pos, grp, as_decided, None)
    # standing labels: analysts' latest decisions that are not retractions
    live = ~is_res & has_label
    pos, grp = _last_per_group(code, live)
    live_at, any_label = spread(pos, grp, at, ""), spread(pos, grp, label, None)
    live_as_decided = spread(pos, grp, as_decided, None)
    lc = code[live]
    n_analysts = np.bincount(lc, minlength=n_groups)
    lab_codes, lab_names = pd.factorize(label[live])
    pairs = np.unique(lc * max(len(lab_names), 1) + lab_codes)
    n_labels = np.bincount(pairs // max(len(lab_names), 1), minlength=n_groups)
    ana_codes, _ = pd.factorize(analyst[live], sort=True)
    order = np.lexsort((ana_codes, lc))
    names = analyst[live][order].tolist()
    bounds = np.r_[0, np.cumsum(n_analysts)]
    analysts = np.empty(n_groups, dtype=object)
    analysts[:] = [tuple(names[a:b]) for a, b in zip(bounds[:-1], bounds[1:], strict=True)]

    has_res = res_id >= 0
    newer = (res_at > ana_at) | ((res_at == ana_at) & (res_id > ana_id))
    wins = has_res & ((ana_id < 0) | newer)
    status = np.where(wins | (n_labels == 1), "labelled",
                      np.where(n_labels > 1, "conflict", "unlabelled"))
    out_label = np.where(wins, res_label, np.where(n_labels == 1, any_label, None))
    out_as_decided = np.where(wins, res_as_decided,
                              np.where(n_labels == 1, live_as_decided, None))
    decided = np.where(wins, res_at, np.where(n_labels > 0, live_at, ana_at))
    return pd.DataFrame({
        "catalog_id": cat[first],
        "event_id": ev[first],
        "label": out_label.astype(object),
        "label_as_decided": out_as_decided.astype(object),
        "status": status.astype(object),
        "resolved": wins,
        "resolved_by": np.where(wins, res_by, None).astype(object),
        "n_analysts": n_analysts.astype(np.int64),
        "analysts": analysts,
        "decided_at": decided.astype(object),
        "winning_id": np.where(wins, res_id, -1),
    })


def current_labels(con, catalog_ids=None, status=None, lat=None) -> pd.DataFrame:
    """The current label of every registered event of ``catalog_ids`` (all if None).

    ``lat`` may pass in :func:`latest` of the same catalogs, already computed.
    """
    where, params = _in("catalog_id", catalog_ids)
    events = pd.DataFrame(con.execute(
        f"SELECT catalog_id, event_id FROM events WHERE {where}"
        " ORDER BY catalog_id, row_index", params).fetchall(),
        columns=["catalog_id", "event_id"], dtype=object)
    if lat is None:
        lat = latest(con, catalog_ids)
    decided = rule(lat).drop(columns="winning_id")
    df = events.merge(decided, on=["catalog_id", "event_id"], how="left", sort=False)
    df["status"] = df["status"].fillna("unlabelled")
    df["resolved"] = df["resolved"].fillna(False).astype(bool)
    df["n_analysts"] = df["n_analysts"].fillna(0).astype("int64")
    df["analysts"] = [a if isinstance(a, tuple) else () for a in df["analysts"]]
    for c in ("label", "label_as_decided"):
        df[c] = df[c].astype(object).where(df[c].notna(), None)
    df["resolved_by"] = df["resolved_by"].astype(object).where(df["resolved_by"].notna(), None)
    df["decided_at"] = _times(df["decided_at"].replace("", None))
    df = df[list(CURRENT_COLUMNS)]
    if status is not None:
        wanted = [status] if isinstance(status, str) else list(status)
        bad = [s for s in wanted if s not in STATUSES]
        if bad:
            raise InputError(f"status must be among {', '.join(STATUSES)}, got {bad!r}")
        df = df[df["status"].isin(wanted)]
    return df.reset_index(drop=True)


def conflicts(con, catalog_ids=None, long: bool = False) -> pd.DataFrame:
    """Events in conflict, one row each (or, ``long``, one row per analyst's label).

    One row per event: catalog_id, event_id, n_analysts, labels (tuple of the
    distinct standing labels, sorted), votes (tuple of ``(analyst, label)``
    sorted by analyst), decided_at (the latest of them). Long form:
    catalog_id, event_id, analyst, label, decided_at, decision_id.
    """
    lat = latest(con, catalog_ids)
    cur = rule(lat)
    bad = cur.loc[cur["status"] == "conflict", ["catalog_id", "event_id"]]
    live = lat[~lat["is_resolve"] & lat["label"].notna()]
    out = live.merge(bad, on=["catalog_id", "event_id"])
    out = out.sort_values(["catalog_id", "event_id", "analyst"])
    out = out[["catalog_id", "event_id", "analyst", "label", "decided_at", "decision_id"]]
    out = out.reset_index(drop=True)
    out["decided_at"] = _times(out["decided_at"])
    if long:
        return out
    g = out.groupby(["catalog_id", "event_id"], sort=True)
    per = pd.DataFrame({
        "n_analysts": g["analyst"].size(),
        "labels": g["label"].agg(lambda s: tuple(sorted(set(s)))),
        "decided_at": g["decided_at"].max(),
    }).reset_index()
    pairs = pd.Series(list(zip(out["analyst"], out["label"], strict=True)), index=out.index,
                      dtype=object)
    votes = pairs.groupby([out["catalog_id"], out["event_id"]], sort=True).agg(tuple)
    per.insert(4, "votes", votes.to_numpy(dtype=object) if len(per) else [])
    if per.empty:
        per = pd.DataFrame({c: pd.Series(dtype=object) for c in
                            ["catalog_id", "event_id", "n_analysts", "labels", "votes",
                             "decided_at"]})
        per["n_analysts"] = per["n_analysts"].astype("int64")
        per["decided_at"] = pd.to_datetime(per["decided_at"], utc=True)
    return per


def agreement(con, catalog_ids=None) -> pd.DataFrame:
    """Pairwise agreement between analysts on the events both have labelled.

    Resolutions are left out (a resolver is not an independent rater).
    ``kappa`` is Cohen's kappa from :func:`sklearn.metrics.cohen_kappa_score`;
    NaN when it is undefined (no common events, or both used one single class).
    """
    from sklearn.metrics import cohen_kappa_score  # only here: keeps imports light

    lat = latest(con, catalog_ids)
    live = lat[~lat["is_resolve"] & lat["label"].notna()]
    cols = ["analyst_1", "analyst_2", "n_common", "n_agree", "agreement", "kappa"]
    wide = live.pivot(index=["catalog_id", "event_id"], columns="analyst", values="label")
    rows = []
    for a, b in itertools.combinations(sorted(wide.columns), 2):
        both = wide[[a, b]].dropna()
        n = len(both)
        n_agree = int((both[a] == both[b]).sum())
        kappa = np.nan
        if n:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                kappa = float(cohen_kappa_score(both[a].to_numpy(dtype=str),
                                                both[b].to_numpy(dtype=str),
                                                replace_undefined_by=np.nan))
        rows.append((a, b, n, n_agree, n_agree / n if n else np.nan, kappa))
    df = pd.DataFrame(rows, columns=cols)
    return df.astype({"analyst_1": object, "analyst_2": object, "n_common": "int64",
                      "n_agree": "int64", "agreement": "float64", "kappa": "float64"})


def stats(con, classes, catalog_ids=None) -> dict[str, pd.DataFrame]:
    """Counts: per catalog by status, per catalog by class, per analyst by class."""
    where, params = _in("catalog_id", catalog_ids)
    cats = pd.DataFrame(con.execute(
        f"SELECT catalog_id, station, season, n_events FROM catalogs WHERE {where}"
        " ORDER BY catalog_id", params).fetchall(),
        columns=["catalog_id", "station", "season", "n_events"])
    lat = latest(con, catalog_ids)
    cur = current_labels(con, catalog_ids, lat=lat)
    status = _count(cur, ["catalog_id"], "status").reindex(
        index=cats["catalog_id"], columns=list(STATUSES), fill_value=0)
    n_dec = pd.DataFrame(con.execute(
        f"SELECT catalog_id, COUNT(*), COUNT(DISTINCT analyst) FROM decisions WHERE {where}"
        " GROUP BY catalog_id", params).fetchall(),
        columns=["catalog_id", "n_decisions", "n_analysts"]).set_index("catalog_id")
    status.columns.name = None
    per_cat = cats.set_index("catalog_id").join(status).join(n_dec)
    per_cat[["n_decisions", "n_analysts"]] = per_cat[["n_decisions", "n_analysts"]].fillna(
        0).astype("int64")
    lab = cur[cur["status"] == "labelled"]
    per_class = _count(lab, ["catalog_id"], "label").reindex(
        index=cats["catalog_id"], columns=list(classes), fill_value=0)
    per_class.columns.name = None
    per_class.insert(0, "season", cats.set_index("catalog_id")["season"])
    per_class["total"] = per_class[list(classes)].sum(axis=1)
    live = lat[~lat["is_resolve"] & lat["label"].notna()]
    per_analyst = _count(live, ["catalog_id", "analyst"], "label").reindex(
        columns=list(classes), fill_value=0)
    per_analyst.columns.name = None
    per_analyst["total"] = per_analyst.sum(axis=1)
    counts = pd.DataFrame(con.execute(
        "SELECT catalog_id, analyst, COUNT(*), SUM(origin = 'retract'), SUM(origin = 'resolve')"
        f" FROM decisions WHERE {where} GROUP BY catalog_id, analyst", params).fetchall(),
        columns=["catalog_id", "analyst", "n_decisions", "n_retractions", "n_resolutions"])
    per_analyst = counts.set_index(["catalog_id", "analyst"]).join(per_analyst, how="left")
    per_analyst = per_analyst.fillna(0).astype("int64")
    per_analyst = per_analyst[list(classes) + ["total", "n_decisions", "n_retractions",
                                               "n_resolutions"]]
    return {"catalogs": per_cat, "classes": per_class, "analysts": per_analyst.sort_index()}


def _count(df: pd.DataFrame, rows: list[str], column: str) -> pd.DataFrame:
    """Counts of ``column`` values per ``rows`` group, one column per value."""
    if df.empty:
        index = pd.MultiIndex.from_arrays([[]] * len(rows), names=rows) if len(rows) > 1 \
            else pd.Index([], name=rows[0])
        return pd.DataFrame(index=index, dtype="int64")
    return df.groupby([*rows, column], sort=True).size().unstack(column, fill_value=0)
