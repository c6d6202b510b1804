"""Triage a whole season: a class, a calibrated confidence and a review flag per pulse.

:func:`triage_catalog` streams the catalog in chunks. Each chunk's features and
classification run together in one unit of work (serially, in joblib workers or
on a Dask cluster); rows are written in catalog order to ``<out>.partial``,
with a journal ``<out>.partial.json`` updated after every chunk. Killed at any
moment, a run restarted with ``resume=True`` truncates the partial file to the
last journalled chunk and continues; the finished file is renamed to ``out``
only at the end, so a partial file is never mistaken for a finished one and the
result is byte-identical to an uninterrupted run.

A pulse needs review when any of these holds (``review_reason``):
``low_confidence`` (confidence below ``review_below``), ``ambiguous_set`` (its
conformal set holds more than one class), ``empty_set`` (no class), ``novel``
(unlike the training pulses), ``clipped`` (a sample at full scale),
``no_vhf`` (the catalog has VHF but this pulse's record is missing),
``field_unusable`` (most of the field record missing).
"""

from __future__ import annotations

import functools
import hashlib
import json
import logging
import os
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from features import InputError, schema
from features.catalog import return_freed_memory
from features.csvio import csv_text
from features.extract import DEFAULT_CHUNK_SIZE, compute_chunk, plan_chunks, run_jobs

from . import rules
from .registry import load_model, verify_model_dir

__all__ = ["TriageSettings", "triage_catalog", "read_results", "RESULT_COLUMNS"]

logger = logging.getLogger("pulsesort")

RESULT_COLUMNS = ("event_id", "label", "confidence", "needs_review", "novel",
                  "prediction_set")
TAIL_COLUMNS = ("review_reason", "novelty_score", "model_version", "catalog_id")
BOOL_COLUMNS = ("needs_review", "novel", "clipped", "has_vhf", "field_ok")
RULES_SET_LEVEL = 0.2   # rules mode: classes with pseudo-probability >= this are in the set
#: Pulses (at most) sampled to adapt class priors and set thresholds to a season.
SAMPLE_PULSES = 10_000
SAMPLE_BLOCK = 500


@dataclass(frozen=True)
class TriageSettings:
    """What decides a chunk's rows (part of the resume journal)."""

    model_dir: str | None
    review_below: float = 0.8
    priors: tuple | None = None          # adjusted class priors (--adapt-priors)
    thresholds: tuple | None = None      # season-adapted conformal thresholds
    catalog_has_vhf: bool = True
    catalog_id: str = ""
    extra: dict = field(default_factory=dict)


@functools.lru_cache(maxsize=4)
def _cached_model(model_dir: str):
    return load_model(model_dir)


@functools.lru_cache(maxsize=4)
def _model_summary(model_dir: str) -> dict:
    """What the main process needs of a model, from its (verified) card.

    The main process only plans, adapts and writes; the workers load the model.
    Reading the card keeps scikit-learn and the model out of the main process's
    memory. Older cards without these entries fall back to loading the model.
    """
    verify_model_dir(model_dir)
    card = json.loads((Path(model_dir) / "card.json").read_text(encoding="utf-8"))
    need = ("classes", "class_priors", "conformal_thresholds", "coverage", "version")
    if all(k in card for k in need):
        classes = list(card["classes"])
        return {"classes": classes, "version": card["version"],
                "coverage": float(card["coverage"]),
                "class_priors": np.array([card["class_priors"][c] for c in classes]),
                "thresholds": np.array([card["conformal_thresholds"][c] for c in classes])}
    model, card = _cached_model(model_dir)
    return {"classes": list(model.classes_.astype(str)), "version": card["version"],
            "coverage": float(model.coverage), "class_priors": model.class_priors_,
            "thresholds": model.conformal_thresholds_}


def _quality_flags(feats: pd.DataFrame, settings: TriageSettings) -> dict:
    """Record-quality problems of each pulse of a chunk (bool arrays)."""
    return {
        "clipped": feats["clipped"].to_numpy(dtype=bool),
        "no_vhf": (~feats["has_vhf"].to_numpy(dtype=bool)) & settings.catalog_has_vhf,
        "field_unusable": ~feats["field_ok"].to_numpy(dtype=bool),
    }


def _classify(feats: pd.DataFrame, settings: TriageSettings, quality: dict):
    """Probabilities, sets, novelty and version for a chunk's features.

    Pulses with a quality problem get an empty set (they go to review anyway);
    where a season's sets must leave some pulses out to keep the stated
    coverage, these are the first, so confident pulses of good records are not
    sent to review only to make up the numbers.
    """
    if settings.model_dir is None:
        classes = np.array(rules.CLASSES)
        proba = rules.rule_proba(feats)
        sets = proba >= RULES_SET_LEVEL
        novelty = np.full(len(feats), np.nan)
        novel = rules.rule_scores(feats).max(axis=1).to_numpy() < 0.3
        return classes, proba, sets, novelty, novel, rules.RULES_VERSION
    model, card = _cached_model(settings.model_dir)
    names = list(model.feature_names_in_)
    X = feats[names].astype(float)
    proba = model.predict_proba(X)
    if settings.priors is not None:
        from .priors import adjust_priors

        proba = adjust_priors(proba, model.class_priors_, np.asarray(settings.priors))
    flagged = np.any(list(quality.values()), axis=0)
    sets = model.predict_set(X, proba=proba, thresholds=settings.thresholds, exclude=flagged)
    novelty = model.novelty_score(X)
    novel = ~(novelty <= model.novelty_threshold_)
    return model.classes_.astype(str), proba, sets, novelty, novel, card["version"]


def triage_chunk(job, settings: TriageSettings, proba_only: bool = False):
    """Features and triage rows of one chunk (a module-level function for workers)."""
    feats = compute_chunk(job)
    quality = _quality_flags(feats, settings)
    classes, proba, sets, novelty, novel, version = _classify(feats, settings, quality)
    if proba_only:
        return proba, np.any(list(quality.values()), axis=0)
    top = np.argmax(proba, axis=1)
    conf = proba[np.arange(len(top)), top]
    n_set = sets.sum(axis=1)
    reasons = {
        "low_confidence": conf < settings.review_below,
        "ambiguous_set": n_set > 1,
        "empty_set": n_set == 0,
        "novel": novel,
        **quality,
    }
    flags = np.column_stack(list(reasons.values()))
    names = np.array(list(reasons))
    reason_text = [";".join(names[row]) for row in flags]
    set_text = ["|".join(classes[row]) for row in sets]
    out = pd.DataFrame({
        "event_id": feats["event_id"].to_numpy(),
        "label": classes[top],
        "confidence": conf,
        "needs_review": flags.any(axis=1),
        "novel": novel,
        "prediction_set": set_text,
    })
    for k, c in enumerate(classes):
        out[f"p_{c}"] = proba[:, k]
    out["review_reason"] = reason_text
    out["novelty_score"] = novelty
    out["model_version"] = version
    out["catalog_id"] = settings.catalog_id
    feats = feats.reset_index(drop=True)
    out = pd.concat([out, feats.drop(columns=["event_id"])], axis=1)
    text = csv_text(out, header=False)
    counts = {"n": len(out), "n_review": int(out["needs_review"].sum()),
              "n_novel": int(novel.sum()),
              "per_class": pd.Series(classes[top]).value_counts().to_dict(),
              "reasons": {k: int(v.sum()) for k, v in reasons.items()}}
    return list(out.columns), text, counts


def _journal_key(cat, settings: TriageSettings, chunk_size: int) -> str:
    model_hash = None
    if settings.model_dir:
        sums = Path(settings.model_dir) / "SHA256SUMS"
        model_hash = hashlib.sha256(sums.read_bytes()).hexdigest() if sums.is_file() else None
    key = {"catalog": cat.content_hash, "model": model_hash, "chunk_size": chunk_size,
           "review_below": settings.review_below, "priors": settings.priors,
           "thresholds": settings.thresholds,
           "schema": schema.SCHEMA_VERSION, "rules": rules.RULES_VERSION}
    return hashlib.sha256(json.dumps(key, sort_keys=True).encode()).hexdigest()


def _write_journal(path: Path, data: dict) -> None:
    tmp = path.with_name(path.name + ".tmp")
    with open(tmp, "w") as fh:
        json.dump(data, fh)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)


def _merge_counts(total: dict, part: dict) -> None:
    total["n"] += part["n"]
    total["n_review"] += part["n_review"]
    total["n_novel"] += part["n_novel"]
    for k, v in part["per_class"].items():
        total["per_class"][k] = total["per_class"].get(k, 0) + v
    for k, v in part["reasons"].items():
        total["reasons"][k] = total["reasons"].get(k, 0) + v


def sample_bounds(n_events: int, max_pulses: int = SAMPLE_PULSES,
                  block: int = SAMPLE_BLOCK) -> list[tuple[int, int]]:
    """Row blocks spread evenly over a catalog, at most ``max_pulses`` rows in all.

    Fixed by the catalog size alone (not by --chunk-size or --jobs), so the
    season adaptation is the same however the triage is run.
    """
    if n_events <= max_pulses:
        return [(s, min(s + block, n_events)) for s in range(0, n_events, block)]
    n_blocks = max_pulses // block
    starts = np.linspace(0, n_events - block, n_blocks).astype(np.int64)
    return [(int(s), int(s) + block) for s in starts]


def season_adaptation(cat, model_dir, *, adapt_priors=False, adapt_sets=True, n_jobs=1,
                      dask_address=None, context=None):
    """Class priors (EM) and conformal thresholds of a season, from a sample of it.

    Returns
    -------
    dict
        ``priors`` (tuple or None), ``thresholds`` (tuple or None), ``n_sample``,
        ``em_iterations``.
    """
    from .conformal import season_thresholds
    from .priors import adjust_priors, estimate_priors_em

    meta = _model_summary(str(model_dir))
    out = {"priors": None, "thresholds": None, "n_sample": 0, "em_iterations": None}
    if not (adapt_priors or adapt_sets) or cat.n_events == 0:
        return out
    settings = TriageSettings(model_dir=str(model_dir), catalog_id=cat.catalog_id,
                              catalog_has_vhf=cat.vhf is not None)
    plan = plan_chunks(cat, bounds=sample_bounds(cat.n_events), context=context)
    parts = list(run_jobs(triage_chunk, plan.jobs(), n_jobs=n_jobs,
                          dask_address=dask_address, extra_args=(settings, True)))
    proba = np.vstack([p for p, _ in parts])
    flagged = np.concatenate([q for _, q in parts])
    out["n_sample"] = len(proba)
    del parts, plan
    return_freed_memory()
    if adapt_priors:
        new_priors, proba, n_iter = estimate_priors_em(proba, meta["class_priors"])
        out["priors"] = tuple(round(float(p), 12) for p in new_priors)
        out["em_iterations"] = int(n_iter)
        proba = adjust_priors(proba, meta["class_priors"], np.asarray(out["priors"]))
    if adapt_sets:
        q = season_thresholds(proba, meta["coverage"], meta["thresholds"], exclude=flagged)
        out["thresholds"] = tuple(round(float(v), 12) for v in q)
    return out


def triage_catalog(cat, out, *, model_dir=None, review_below=0.8, chunk_size=DEFAULT_CHUNK_SIZE,
                   n_jobs=1, dask_address=None, resume=False, progress=None,
                   adapt_priors=False, adapt_sets=True, stop_after_chunks=None):
    """Triage every pulse of ``cat`` into the CSV file ``out``.

    Parameters
    ----------
    cat : Catalog
    out : path
    model_dir : path, optional
        A model folder; None uses the physics rules (:mod:`classify.rules`).
    review_below : float, default=0.8
        Pulses with a lower confidence need review.
    chunk_size, n_jobs, dask_address
        See :func:`features.extract.iter_features`.
    resume : bool, default=False
        Continue an interrupted run of the same catalog, model and settings.
    adapt_priors : bool, default=False
        Estimate the season's class priors by EM (Saerens et al. 2002) and
        re-weight the probabilities before deciding (model mode only).
    adapt_sets : bool, default=True
        Adapt the conformal thresholds to the season
        (:func:`classify.models.season_thresholds`) from a sample of up to
        :data:`SAMPLE_PULSES` of its pulses (model mode only); False uses the
        training split-conformal thresholds.
    stop_after_chunks : int, optional
        Stop (as if killed) after writing this many chunks; for testing resume.

    Returns
    -------
    dict
        Summary: n, n_review, n_novel, per_class, reasons, seconds, pulses_per_s,
        model_version, priors (when adapted), out.
    """
    out = Path(out)
    partial = out.with_name(out.name + ".partial")
    journal = out.with_name(out.name + ".partial.json")
    if not 0 <= review_below <= 1:
        raise InputError(f"review_below must be in [0, 1], got {review_below}")
    t0 = time.perf_counter()
    plan = plan_chunks(cat, chunk_size)
    adapted = {"priors": None, "thresholds": None, "n_sample": 0}
    if model_dir is None:
        if adapt_priors:
            raise InputError("--adapt-priors needs a model (--model), not --rules")
    else:
        adapted = season_adaptation(cat, model_dir, adapt_priors=adapt_priors,
                                    adapt_sets=adapt_sets, n_jobs=n_jobs,
                                    dask_address=dask_address, context=plan.context)
    priors = adapted["priors"]
    settings = TriageSettings(model_dir=None if model_dir is None else str(model_dir),
                              review_below=float(review_below), priors=priors,
                              thresholds=adapted["thresholds"],
                              catalog_has_vhf=cat.vhf is not None, catalog_id=cat.catalog_id)
    key = _journal_key(cat, settings, chunk_size)
    done, offset = 0, 0
    totals = {"n": 0, "n_review": 0, "n_novel": 0, "per_class": {}, "reasons": {}}
    if resume and journal.is_file() and partial.is_file():
        state = json.loads(journal.read_text())
        if state.get("key") != key:
            raise InputError(f"{journal}: the interrupted run used another catalog, model or "
                             "settings; run without --resume to start again")
        done, offset = int(state["chunks_done"]), int(state["bytes"])
        totals = state["totals"]
        with open(partial, "r+b") as fh:
            fh.truncate(offset)
        logger.info("resuming %s at chunk %d of %d", out, done, len(plan))
    elif partial.exists():
        logger.info("%s: an unfinished run exists; starting again (use --resume to continue)",
                    partial)
    from features.extract import _progress

    bar = _progress(plan.n_pulses(done), progress, "triage")
    mode = "ab" if done else "wb"
    written = 0
    try:
        with open(partial, mode) as fh:
            for i, (columns, text, counts) in enumerate(
                    run_jobs(triage_chunk, plan.jobs(done), n_jobs=n_jobs,
                             dask_address=dask_address, extra_args=(settings,)), start=done):
                if i == 0:
                    fh.write((",".join(columns) + "\n").encode())
                fh.write(text.encode("utf-8"))
                fh.flush()
                os.fsync(fh.fileno())
                _merge_counts(totals, counts)
                _write_journal(journal, {"key": key, "chunks_done": i + 1, "bytes": fh.tell(),
                                         "totals": totals, "n_chunks": len(plan)})
                bar.update(counts["n"])
                written += 1
                if stop_after_chunks is not None and written >= stop_after_chunks:
                    return {"stopped": True, "chunks_done": i + 1}
            if not len(plan):
                header = ["event_id"]
                fh.write((",".join(header) + "\n").encode())
    finally:
        bar.close()
    os.replace(partial, out)
    journal.unlink(missing_ok=True)
    seconds = time.perf_counter() - t0
    version = (rules.RULES_VERSION if model_dir is None
               else _model_summary(str(model_dir))["version"])
    summary = dict(totals, seconds=seconds, out=str(out), model_version=version,
                   pulses_per_s=totals["n"] / seconds if seconds > 0 else float("inf"))
    if model_dir is not None:
        classes = _model_summary(str(model_dir))["classes"]
        if priors is not None:
            summary["priors"] = dict(zip(classes, priors))
        if adapted["thresholds"] is not None:
            summary["set_thresholds"] = dict(zip(classes, adapted["thresholds"]))
            summary["n_adaptation_sample"] = adapted["n_sample"]
    return summary


def read_results(path) -> pd.DataFrame:
    """Read a triage results file; booleans parsed, ids kept as strings."""
    path = Path(path)
    if not path.is_file():
        partial = path.with_name(path.name + ".partial")
        hint = " (an unfinished run exists: rerun triage with --resume)" if partial.exists() else ""
        raise InputError(f"{path}: no such results file{hint}")
    df = pd.read_csv(path, dtype={"event_id": str, "catalog_id": str, "flash_id": str,
                                  "label": str, "prediction_set": str, "review_reason": str,
                                  "model_version": str},
                     keep_default_na=False, na_values=[""])
    missing = [c for c in RESULT_COLUMNS if c not in df.columns]
    if missing:
        raise InputError(f"{path}: not a pulsesort triage results file (missing columns "
                         f"{missing})")
    for c in BOOL_COLUMNS:
        if c in df.columns and df[c].dtype != bool:   # pandas reads true/false itself
            df[c] = df[c].astype(str)
            bad = ~df[c].isin(["true", "false"])
            if bad.any():
                raise InputError(f"{path}: column {c!r} must be true/false; line "
                                 f"{int(np.flatnonzero(bad.to_numpy())[0]) + 2} has "
                                 f"{df[c][bad].iloc[0]!r}")
            df[c] = df[c].eq("true")
    for c in ("prediction_set", "review_reason", "flash_id"):
        if c in df.columns:
            df[c] = df[c].fillna("")
    if "time_utc" in df.columns:
        df["time_utc"] = pd.to_datetime(df["time_utc"], format="ISO8601", utc=True)
    return df


def print_summary(summary: dict, file=sys.stdout) -> None:
    """The end-of-run summary, for people."""
    n = summary["n"]
    print(f"triaged {n:,} pulses in {summary['seconds']:.1f} s "
          f"({summary['pulses_per_s']:,.0f} pulses/s) with {summary['model_version']}",
          file=file)
    for c, k in sorted(summary["per_class"].items(), key=lambda kv: -kv[1]):
        print(f"  {c:<20} {k:>9,}  ({100 * k / max(n, 1):5.1f} %)", file=file)
    print(f"  need review          {summary['n_review']:>9,}  "
          f"({100 * summary['n_review'] / max(n, 1):5.1f} %)", file=file)
    reasons = {k: v for k, v in summary["reasons"].items() if v}
    if reasons:
        print("    why: " + ", ".join(f"{k} {v:,}" for k, v in reasons.items()), file=file)
    print(f"  novel                {summary['n_novel']:>9,}", file=file)
    if "priors" in summary:
        print("  adapted class priors: " + ", ".join(f"{c} {p:.3f}" for c, p in
                                                     summary["priors"].items()), file=file)
    if "set_thresholds" in summary:
        print(f"  prediction sets adapted to this season on {summary['n_adaptation_sample']:,} "
              "pulses (thresholds on 1 - p: " + ", ".join(
                  f"{c} {q:.2g}" for c, q in summary["set_thresholds"].items()) + ")", file=file)
    print(f"results: {summary['out']}", file=file)
