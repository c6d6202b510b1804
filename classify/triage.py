"""Triage a whole season: a class, a calibrated confidence and a review flag per pulse.

One pass over the waveforms. :func:`triage_catalog` works in three phases:

1. **features**: every chunk's features are computed once (serially, in joblib workers or
   on a Dask cluster) and spilled to ``<out>.partial.d/`` (:class:`features.spill.
   FeatureSpill`: numbers memory-mapped, the CSV records as text), chunk by chunk;
2. **decide**: the season is classified from the spill: class probabilities of every
   pulse (a trained model, or the cold start of :mod:`classify.coldstart`), the season's
   class mix (EM; Saerens et al. 2002), conformal thresholds adapted to the season, the
   novelty score, and censored values relaxed to see whether the class depends on them;
3. **write**: the decisions (:func:`classify.decide.decide`) and the features are written
   to ``<out>.partial`` in catalog order, with a journal ``<out>.partial.json`` updated
   after every chunk; the finished file is renamed to ``out``.

Killed at any moment, a run restarted with ``resume=True`` continues from the last
finished chunk of phase 1 or 3 and gives the byte-identical file. A run that fails with
an error (not a kill) removes its partial files.
"""

from __future__ import annotations

import functools
import hashlib
import json
import logging
import os
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from features import InputError, schema
from features.catalog import return_freed_memory
from features.csvio import csv_header, csv_rows
from features.extract import (
    DEFAULT_CHUNK_SIZE,
    WorkerStart,
    _progress,
    compute_chunk,
    plan_chunks,
    run_jobs,
)
from features.spill import FeatureSpill

from . import coldstart
from .decide import classifiable
from .predict import decision_table, predict_features, season_decisions
from .registry import load_model, verify_model_dir
from .seasonfit import fit_to_season, season_fit_mode

__all__ = ["TriageSettings", "triage_catalog", "read_results", "print_summary",
           "RESULT_COLUMNS", "SPILL_COLUMNS"]

logger = logging.getLogger("pulsesort")

RESULT_COLUMNS = ("event_id", "label", "confidence", "needs_review", "novel",
                  "prediction_set")
TAIL_COLUMNS = ("review_reason", "review_why", "novelty_score", "model_version", "adaptation",
                "catalog_id")
BOOL_COLUMNS = ("needs_review", "novel", "clipped", "has_vhf", "field_ok")
#: Numeric feature columns kept in the spill (every schema column but text ones).
SPILL_COLUMNS = tuple(f.name for f in schema.FEATURES if f.name != "event_id"
                      and f.unit != "-")
#: Rows per block of the decide phase (model inference in large batches).
DECIDE_BLOCK = 20_000
#: Most rows written to the results at once by the write phase, in whole chunks (two
#: ``fsync`` per block, ~6 ms each on a local SSD: per 256-row chunk they cost 0.9 s
#: of a 20,000-pulse season).
WRITE_ROWS = 8192


@dataclass(frozen=True)
class TriageSettings:
    """What decides the results (part of the resume journal's key)."""

    model_dir: str | None
    review_below: float = 0.8
    adapt_priors: bool = False
    adapt_sets: bool = True
    self_training: bool = True
    coverage: float | None = None
    season_fit: str = "never"


@functools.lru_cache(maxsize=4)
def _cached_model(model_dir: str):
    return load_model(model_dir)


def _fit_mode(season_fit, model_dir) -> str:
    mode = season_fit_mode(season_fit)
    if model_dir is None:
        if mode == "always":
            raise InputError("season_fit needs a trained model (model_dir); the cold start "
                             "already fits the season")
        return "never"
    return mode


def _load_in_background(model_dir: str):
    """Start loading the model (:func:`_cached_model`) in a thread; return its future.

    The load (importing scikit-learn and skops, building ~1,600 tree predictors: ~2 s
    CPU, mostly Python holding the GIL) overlaps the features phase when its work runs
    in worker processes, while this process mostly waits for their results.
    ``future.result()`` must be taken before anything else calls :func:`_cached_model`
    for that folder, so the model is loaded once.
    """
    from concurrent.futures import ThreadPoolExecutor

    pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="pulsesort-model")
    try:
        return pool.submit(_cached_model, model_dir)
    finally:
        pool.shutdown(wait=False)


def _journal_key(cat, settings: TriageSettings, chunk_size: int) -> str:
    model_hash = None
    if settings.model_dir:
        sums = Path(settings.model_dir) / "SHA256SUMS"
        model_hash = hashlib.sha256(sums.read_bytes()).hexdigest() if sums.is_file() else None
    key = {"catalog": cat.content_hash, "model": model_hash, "chunk_size": chunk_size,
           "settings": [settings.review_below, settings.adapt_priors, settings.adapt_sets,
                        settings.self_training, settings.coverage, settings.season_fit],
           "schema": schema.SCHEMA_VERSION, "coldstart": coldstart.COLDSTART_VERSION}
    return hashlib.sha256(json.dumps(key, sort_keys=True).encode()).hexdigest()


def _write_journal(path: Path, data: dict) -> None:
    tmp = path.with_name(path.name + ".tmp")
    with open(tmp, "w") as fh:
        json.dump(data, fh)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)


# ---------------------------------------------------------------------- phase 2
def _predict_rows(block, model_dir: str, spill_folder: str, columns: tuple):
    """Calibrated probabilities, relaxed probabilities and novelty of spilled rows.

    ``block`` is ``(start, stop)``. A module-level function: joblib workers and Dask
    workers run it on row blocks (:func:`classify.predict.predict_features`).
    """
    start, stop = block
    model, _ = _cached_model(model_dir)
    arr = np.load(Path(spill_folder) / "numeric.npy", mmap_mode="r")
    frame = pd.DataFrame(np.array(arr[start:stop]), columns=list(columns))
    p = predict_features(model, frame)
    return p["proba"], p["relaxed"], p["novelty"]


#: Fewest rows per thread of :func:`_predict_in_threads` (fewer rows: fewer threads).
MIN_THREAD_ROWS = 1000


def _predict_in_threads(block, n_threads: int, *args):
    """:func:`_predict_rows` of one block, its rows shared among ``n_threads`` threads here.

    Each thread predicts a contiguous part of the rows with one OpenMP thread (the tree
    walks) and one BLAS thread (the novelty products): on a machine whose other cores
    are busy, scikit-learn's OpenMP loop over all rows on every core waited at its
    barrier once per tree predictor (5 folds x 80 iterations x 4 classes) for a thread
    that was descheduled, which cost 6 s CPU and 5 s wall per 20,000 pulses (measured,
    load 4 on 2 cores); idle, the threads run as fast as OpenMP's. Every row's
    prediction is its own (trees, then a matrix product row by row), so the values are
    the same bits whatever the split (checked: probabilities, relaxed probabilities and
    novelty of 20,000 pulses).
    """
    from concurrent.futures import ThreadPoolExecutor

    from threadpoolctl import threadpool_limits

    start, stop = block
    n_threads = max(1, min(n_threads, (stop - start) // MIN_THREAD_ROWS))
    if n_threads == 1:
        return _predict_rows(block, *args)
    cuts = [start + (stop - start) * i // n_threads for i in range(n_threads + 1)]

    def part(sub):
        with threadpool_limits(1, user_api="openmp"):   # this thread's OpenMP loops
            return _predict_rows(sub, *args)

    with threadpool_limits(1, user_api="blas"), ThreadPoolExecutor(n_threads) as pool:
        parts = list(pool.map(part, zip(cuts[:-1], cuts[1:])))
    return (np.vstack([p for p, _, _ in parts]), np.vstack([r for _, r, _ in parts]),
            np.concatenate([v for _, _, v in parts]))


def _model_decisions(spill, settings: TriageSettings, n_jobs, dask_address, loading=None):
    """Everything phase 3 needs from a trained model, for every pulse of the spill
    (:func:`classify.predict.season_decisions`); ``loading`` is the future of
    :func:`_load_in_background`, if started."""
    model, card = _cached_model(settings.model_dir) if loading is None else loading.result()
    n = spill.n_events
    blocks = [(a, min(a + DECIDE_BLOCK, n)) for a in range(0, n, DECIDE_BLOCK)]
    # one block runs here, on the model already loaded: a joblib worker would import
    # scikit-learn and load the model again (seconds) for no parallelism
    local = len(blocks) <= 1 and not dask_address
    args = (settings.model_dir, str(spill.folder), SPILL_COLUMNS)
    if local and n_jobs != 1:   # the cores of the workers, as threads here
        from joblib import effective_n_jobs

        parts = [_predict_in_threads(b, effective_n_jobs(n_jobs), *args) for b in blocks]
    else:
        parts = list(run_jobs(_predict_rows, blocks, n_jobs=1 if local else n_jobs,
                              dask_address=dask_address, extra_args=args))
    proba = np.vstack([p for p, _, _ in parts]) if parts else np.zeros((0, 1))
    relaxed = np.vstack([r for _, r, _ in parts]) if parts else proba
    novelty = np.concatenate([v for _, _, v in parts]) if parts else np.zeros(0)
    del parts
    num = spill.numeric()
    usable = np.asarray(num[:, SPILL_COLUMNS.index("field_ok")]) > 0
    placeable = classifiable(pd.DataFrame({c: np.asarray(num[:, SPILL_COLUMNS.index(c)])
                                           for c in ("field_ok", "has_vhf", "n_sources")}))
    return season_decisions(
        model, {"proba": proba, "relaxed": relaxed, "novelty": novelty}, usable,
        version=card["version"], adapt_priors=settings.adapt_priors,
        adapt_sets=settings.adapt_sets, coverage=settings.coverage, placeable=placeable,
        features=lambda: pd.DataFrame(np.array(spill.numeric()), columns=list(SPILL_COLUMNS)))


# ---------------------------------------------------------------------- phase 3
def _decision_records(d, a: int, b: int, settings: TriageSettings, event_ids, catalog_id):
    return decision_table(d, settings.review_below, event_ids, catalog_id, a, b)


def _write_blocks(bounds, first: int):
    """``(i, j)``: chunks ``i:j`` written together by phase 3, from chunk ``first`` on.

    A block holds whole chunks (the journal counts chunks), at least one, and at most
    :data:`WRITE_ROWS` rows otherwise: one decision table, one write and one ``fsync``
    of the results and of the journal per block instead of per chunk.
    """
    i = first
    while i < len(bounds):
        j = i + 1
        while j < len(bounds) and bounds[j][1] - bounds[i][0] <= WRITE_ROWS:
            j += 1
        yield i, j
        i = j


def _merge_counts(total: dict, out: pd.DataFrame, reasons: dict) -> None:
    total["n"] += len(out)
    total["n_review"] += int(out["needs_review"].sum())
    total["n_novel"] += int(out["novel"].sum())
    for k, v in out["label"].value_counts().items():
        total["per_class"][str(k)] = total["per_class"].get(str(k), 0) + int(v)
    for k, v in reasons.items():
        total["reasons"][k] = total["reasons"].get(k, 0) + int(v)


def triage_catalog(cat, out, *, model_dir=None, review_below=0.8, chunk_size=DEFAULT_CHUNK_SIZE,
                   n_jobs=1, dask_address=None, resume=False, progress=None,
                   adapt_priors=False, adapt_sets=True, self_training=True, coverage=None,
                   store=None, stop_after_chunks=None, season_fit="auto"):
    """Triage every pulse of ``cat`` into the CSV file ``out``.

    Parameters
    ----------
    cat : Catalog
    out : path
    model_dir : path, optional
        A model folder; None runs the cold start (:mod:`classify.coldstart`).
    review_below : float, default=0.8
        Pulses with a lower confidence need review.
    chunk_size, n_jobs, dask_address
        See :func:`features.extract.iter_features`.
    resume : bool, default=False
        Continue an interrupted run of the same catalog, model and settings.
    adapt_priors : bool, default=False
        Estimate the season's class mix by EM from every pulse's calibrated probabilities
        and re-weight them (Saerens et al. 2002; model mode). Off by default: measured
        across stations, the estimate follows the model's miscalibration on an unseen
        station more than the real mix (the conformal sets are class-conditional, so
        their coverage does not depend on the class mix anyway).
    adapt_sets : bool, default=True
        Adapt the conformal thresholds to the season (:func:`classify.conformal.
        season_thresholds`, on every usable pulse); False uses the training thresholds.
    self_training : bool, default=True
        Cold start: after the rules, fit a model on the season's confidently ruled
        pulses and classify with it (:func:`classify.coldstart.cold_start`).
    coverage : float, optional
        Target coverage of the sets (default: the model's, or 0.95 for the cold start).
    store : LabelStore, optional
        Cold start or ``season_fit``: analysts' labels of this catalog in the store
        anchor the self-training.
    season_fit : {"auto", "always", "never"} or bool, default="auto"
        Model mode: fit the season itself, anchored by the trained model
        (:func:`classify.seasonfit.fit_to_season`): the pulses the model places
        confidently (calibrated probability >= 0.95, one-class set, not novel, the same
        class with a censored value relaxed) and the analysts' labels in ``store``
        anchor the cold start's self-training on this season, whose model then
        classifies every pulse; novelty stays the trained model's. ``"auto"`` fits when
        the model would send more than 2.5 % of the usable pulses to review for doubt (a
        season unlike the training's); True is ``"always"``, False ``"never"``. Ignored by the cold
        start (which fits the season anyway), except that ``"always"`` is refused there.
    stop_after_chunks : int, optional
        Stop (as if killed) after this many chunks of the features phase; for testing
        resume.

    Returns
    -------
    dict
        Summary: n, n_review, n_novel, per_class, reasons, seconds, pulses_per_s,
        model_version, adaptation, out.

    See Also
    --------
    classify.predict.predict_catalog : the same columns and values, in memory.

    Examples
    --------
    The rules alone (no model, no self-training) on a tiny invented catalog of the
    fictional station hollowmere:

    >>> import tempfile, numpy as np
    >>> from features import write_catalog
    >>> t = np.arange(2000) / 20e6 - 50e-6                       # s, 20 MS/s
    >>> field = np.vstack([np.exp(-0.5 * (t / 1e-6) ** 2),        # V/m, invented pulses
    ...                    -2 * np.exp(-0.5 * (t / 2e-6) ** 2)]).astype(np.float32)
    >>> folder = write_catalog(
    ...     tempfile.mkdtemp() + "/hollowmere-demo",
    ...     {"event_id": ["a", "b"], "time_utc": ["2031-07-14T21:03:55.000001Z",
    ...                                           "2031-07-14T21:03:55.250000Z"]},
    ...     field, field_meta={"sample_rate_hz": 20e6, "pretrigger_s": 50e-6, "units": "V/m",
    ...                        "sign_convention": "physics", "decay_time_s": None},
    ...     catalog_id="hollowmere-demo", station="hollowmere")
    >>> from features import open_catalog
    >>> from classify import read_results, triage_catalog
    >>> summary = triage_catalog(open_catalog(folder), folder.parent / "results.csv",
    ...                          self_training=False)
    >>> summary["n"], summary["model_version"]
    (2, 'rules-4')
    >>> read_results(summary["out"]).columns[:6].tolist()
    ['event_id', 'label', 'confidence', 'needs_review', 'novel', 'prediction_set']

    With a trained model: ``triage_catalog(cat, "results.csv", model_dir=
    classify.registry.resolve_model("current"))``.
    """
    out = Path(out)
    if not 0 <= review_below <= 1:
        raise InputError(f"review_below must be in [0, 1], got {review_below}")
    partial = out.with_name(out.name + ".partial")
    journal = out.with_name(out.name + ".partial.json")
    spill_dir = out.with_name(out.name + ".partial.d")
    settings = TriageSettings(model_dir=None if model_dir is None else str(model_dir),
                              review_below=float(review_below), adapt_priors=adapt_priors,
                              adapt_sets=adapt_sets, self_training=self_training,
                              coverage=coverage, season_fit=_fit_mode(season_fit, model_dir))
    if model_dir is not None:
        verify_model_dir(model_dir)
    t0 = time.perf_counter()
    key = _journal_key(cat, settings, chunk_size)
    if not resume:
        for p in (partial, journal):
            p.unlink(missing_ok=True)
        import shutil

        shutil.rmtree(spill_dir, ignore_errors=True)
    else:
        for f in (spill_dir / "chunks.json", journal):
            try:
                old = json.loads(f.read_text()).get("key") if f.is_file() else key
            except (OSError, ValueError):
                old = None
            if old != key:
                raise InputError(f"{f}: the interrupted run used another catalog, model or "
                                 "settings; run without --resume to start again")
    try:
        summary = _run(cat, out, partial, journal, spill_dir, key, settings, chunk_size,
                       n_jobs, dask_address, progress, store, stop_after_chunks, t0)
    except Exception:
        # an error (not a kill): nothing half-written is left behind
        import shutil

        for p in (partial, journal):
            p.unlink(missing_ok=True)
        shutil.rmtree(spill_dir, ignore_errors=True)
        raise
    return summary


def _run(cat, out, partial, journal, spill_dir, key, settings, chunk_size, n_jobs,
         dask_address, progress, store, stop_after_chunks, t0):
    # with the features computed in other processes, the model loads meanwhile (in one
    # process the loading thread would contend for the GIL: measured no faster); a model
    # that fails to load stops the run as soon as that is known
    loading = (_load_in_background(settings.model_dir) if settings.model_dir is not None
               and (n_jobs != 1 or dask_address) else None)
    spill = FeatureSpill(spill_dir, cat.n_events, SPILL_COLUMNS, key)
    done = spill.n_chunks_done
    # the workers start and import while the flash context is made (none if no chunk
    # is left to compute)
    workers = WorkerStart(n_jobs if done < len(cat.chunk_bounds(chunk_size)) else 1,
                          dask_address)
    try:
        plan = plan_chunks(cat, chunk_size)
    finally:
        workers.join()
    if done:
        logger.info("resuming %s: features of %d of %d chunks already computed", out, done,
                    len(plan))
    # phase 1: features, once
    bar = _progress(plan.n_pulses(done), progress, "features")
    try:
        for i, feats in enumerate(run_jobs(compute_chunk, plan.jobs(done), n_jobs=n_jobs,
                                           dask_address=dask_address), start=done):
            spill.write_chunk(plan.bounds[i][0], feats)
            bar.update(len(feats))
            if loading is not None and loading.done():
                loading.result()  # raises the load's error, if any
            if stop_after_chunks is not None and i + 1 - done >= stop_after_chunks \
                    and i + 1 < len(plan):
                return {"stopped": True, "chunks_done": i + 1}
    finally:
        bar.close()
    spill.sync()
    del plan
    return_freed_memory()
    # phase 2: decide
    if settings.model_dir is not None:
        d = _model_decisions(spill, settings, n_jobs, dask_address, loading)
        d = fit_to_season(
            d, lambda: pd.DataFrame(np.array(spill.numeric()), columns=list(SPILL_COLUMNS)),
            cat, settings, mode=settings.season_fit, store=store, n_jobs=n_jobs)
    else:
        d = coldstart.cold_start(spill, SPILL_COLUMNS, cat, settings, store=store,
                                 n_jobs=n_jobs)
    num = spill.numeric()
    d["censored_v"] = np.asarray(num[:, SPILL_COLUMNS.index("vhf_censored")]) > 0
    d["censored_f"] = np.asarray(num[:, SPILL_COLUMNS.index("field_censored")]) > 0
    del num
    # phase 3: write, journalled after every block of whole chunks
    state = {}
    if journal.is_file() and partial.is_file():
        try:
            state = json.loads(journal.read_text())
        except ValueError:
            state = {}
    if state.get("key") != key:
        state = {"key": key, "chunks_done": 0, "bytes": 0,
                 "totals": {"n": 0, "n_review": 0, "n_novel": 0, "per_class": {},
                            "reasons": {}}}
    bounds = list(zip([0] + spill.state["stops"][:-1], spill.state["stops"]))
    header = None
    mode = "ab" if state["chunks_done"] else "wb"
    with open(partial, mode) as fh:
        fh.truncate(state["bytes"])
        fh.seek(state["bytes"])
        for i, j in _write_blocks(bounds, state["chunks_done"]):
            a, b = bounds[i][0], bounds[j - 1][1]
            dec, reasons = _decision_records(d, a, b, settings, cat.event_ids, cat.catalog_id)
            if header is None:
                header = csv_header(list(dec.columns) + spill.feature_columns[1:]) + "\n"
            if i == 0:
                fh.write(header.encode("utf-8"))
            left = csv_rows(dec)
            right = spill.records(a, b)
            fh.write("".join(f"{x},{y}\n" for x, y in zip(left, right)).encode("utf-8"))
            fh.flush()
            os.fsync(fh.fileno())
            for c in range(i, j):  # counted chunk by chunk, as the chunks were written
                _merge_counts(state["totals"], dec.iloc[bounds[c][0] - a:bounds[c][1] - a],
                              reasons if c == i else {})
            state["chunks_done"], state["bytes"] = j, fh.tell()
            _write_journal(journal, state)
        if not bounds:
            fh.write(b"event_id\n")
    os.replace(partial, out)
    journal.unlink(missing_ok=True)
    spill.remove()
    seconds = time.perf_counter() - t0
    summary = dict(state["totals"], seconds=seconds, out=str(out), model_version=d["version"],
                   adaptation=d["adaptation"],
                   pulses_per_s=state["totals"]["n"] / seconds if seconds > 0 else float("inf"))
    if d.get("priors"):
        summary["priors"] = d["priors"]
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
                                  "review_why": str, "model_version": str, "adaptation": str},
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
    for c in ("prediction_set", "review_reason", "review_why", "flash_id", "label"):
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
        print(f"  {c or '(no class)':<20} {k:>9,}  ({100 * k / max(n, 1):5.1f} %)", file=file)
    print(f"  need review          {summary['n_review']:>9,}  "
          f"({100 * summary['n_review'] / max(n, 1):5.1f} %)", file=file)
    reasons = {k: v for k, v in summary["reasons"].items() if v}
    if reasons:
        print("    why: " + ", ".join(f"{k} {v:,}" for k, v in reasons.items()), file=file)
    print(f"  novel                {summary['n_novel']:>9,}", file=file)
    print(f"  adaptation: {summary['adaptation']}", file=file)
    print(f"results: {summary['out']}", file=file)
