"""Export of current labels or of the full history as a labels file."""

from __future__ import annotations

import csv
from pathlib import Path

import pandas as pd

from features import InputError
from features.atomic import atomic_open

from . import _query
from ._importer import EXPORT_COLUMNS


def export_frame(con, store_path, catalog_id, history: bool) -> pd.DataFrame:
    """The decisions to export (see :meth:`LabelStore.export_labels`)."""
    ids = [r[0] for r in con.execute("SELECT catalog_id FROM catalogs ORDER BY 1")]
    if catalog_id is None:
        if len(ids) != 1:
            raise InputError(f"{store_path} holds {len(ids)} catalogs "
                             f"({', '.join(ids) or 'none'}); choose one with --catalog")
        catalog_id = ids[0]
    elif catalog_id not in ids:
        raise InputError(f"catalog {catalog_id!r} is not registered in {store_path}")
    dec = _query.decisions(con, [catalog_id])
    if not history:
        lat = _query.latest(con, [catalog_id])
        cur = _query.rule(lat)
        cur = cur[cur["status"] == "labelled"]
        agreed = lat[~lat["is_resolve"] & lat["label"].notna()].merge(
            cur.loc[~cur["resolved"], ["catalog_id", "event_id"]])
        keep = set(agreed["decision_id"]) | set(cur.loc[cur["resolved"], "winning_id"])
        order = {e: i for i, (e,) in enumerate(con.execute(
            "SELECT event_id FROM events WHERE catalog_id = ? ORDER BY row_index",
            (catalog_id,)))}
        dec = dec[dec["decision_id"].isin(keep)].copy()
        dec["_row"] = dec["event_id"].map(order)
        dec = dec.sort_values(["_row", "decided_at", "decision_id"])
    return dec


def write_csv(out: Path, dec: pd.DataFrame) -> None:
    """Write ``dec`` (decisions) as a labels file: to a temporary name, then renamed."""
    out.parent.mkdir(parents=True, exist_ok=True)
    with atomic_open(out, "w", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(EXPORT_COLUMNS)
        w.writerows(zip(*_columns(dec), strict=True))


def _columns(dec: pd.DataFrame) -> list[list[str]]:
    """The export columns of ``dec`` as lists of text (empty for missing values)."""
    def text(c):
        v = dec[c]
        return v.where(v.notna(), "").astype(str).tolist()

    conf = dec["confidence"]
    at = dec["decided_at"].dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
    cols = {c: text(c) for c in ("catalog_id", "event_id", "label", "analyst", "note",
                                 "origin", "model_version")}
    cols["decided_at"] = at.tolist()
    cols["confidence"] = ["" if pd.isna(x) else repr(float(x)) for x in conf]
    return [cols[c] for c in EXPORT_COLUMNS]
