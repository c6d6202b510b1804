"""Turn a catalog into one row of physical features per pulse, chunk by chunk.

The unit of work is a chunk of consecutive rows (:class:`ChunkJob`). A job
carries only what its rows need (channel descriptions, the row range, the
chunk's sources and the flash context), opens the memory-mapped arrays itself
and returns a DataFrame, so the same function runs serially, in joblib worker
processes (``n_jobs``) or on a Dask cluster (``dask_address``), and gives
identical rows whichever runs it: the chunk boundaries depend only on
``chunk_size``. The running itself (:func:`run_jobs`) lives in
:mod:`features._parallel` and is re-exported here.
"""

from __future__ import annotations

import dataclasses
import logging
import os
import threading
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from . import schema
from ._checks import InputError
from ._parallel import _progress, run_jobs
from ._tables import SourceTable
from .catalog import Catalog, Channel, return_freed_memory
from .context import flash_context
from .csvio import csv_text, format_for_csv
from .mapping import breakdown_polarity, source_features
from .vhf import (
    MIN_RATIO_FIELD_SNR_DB,
    VHF_LEAD_S,
    VHF_MAX_WINDOW_S,
    VHF_MIN_LEAD_S,
    VHF_SPAN_S,
    VHF_TRAIL_S,
    vhf_features,
)
from .waveform import ANALYSIS_WINDOW_S, PEAK_SEARCH_S, field_features

if TYPE_CHECKING:
    from .augment import StationVariant

# features.augment (station variants, for training only) imports scipy.signal, which
# takes most of a worker's start-up: it is imported where a variant is used.

__all__ = ["ChunkJob", "ChunkPlan", "DEFAULT_CHUNK_SIZE", "compute_chunk", "plan_chunks",
           "iter_features", "WorkerStart",
           "extract_features", "run_jobs", "write_csv_rows", "format_for_csv"]

logger = logging.getLogger("pulsesort")

#: Rows per chunk: a worker's arrays stay in tens of MB at the reference shape
#: (8,000 field + 10,000 VHF samples per row), so two workers and the main
#: process triage a million-pulse season in under 1 GB.
DEFAULT_CHUNK_SIZE = 256
#: Rows whose field and VHF features are computed at once within a chunk: enough to
#: spread the fixed cost of a call (about 3 ms of NumPy calls) thin, few enough that
#: the (rows, samples) work arrays stay a few MB (measured best of 64, 128 and 256 at
#: the reference shape). Values do not depend on it: every feature is computed row by
#: row (the tests compare chunk sizes and row blocks byte for byte).
ROWS_AT_ONCE = 128
EVENT_PASS_THROUGH = ("time_utc", "flash_id")
#: Names of triage output columns; an events.csv column of the same name (or
#: starting with ``p_``) is carried through as ``events_<name>``.
RESERVED_COLUMNS = frozenset({"catalog_id", "label", "confidence", "needs_review", "novel",
                              "prediction_set", "review_reason", "novelty_score",
                              "model_version", "group", "season", "station"})


@dataclass(frozen=True)
class ChunkJob:
    """Everything one chunk of rows needs; small and picklable."""

    start: int
    stop: int
    field: Channel
    vhf: Channel | None
    event_id: np.ndarray
    range_m: np.ndarray
    sources: SourceTable | None
    context: dict
    extras: pd.DataFrame
    variant: StationVariant | None = None


def _column_span(ch: Channel, before_s: float, after_s: float) -> tuple[int, int]:
    """Samples of a record from ``before_s`` to ``after_s`` around the trigger.

    The whole record when that span holds fewer than 16 samples (a trigger
    outside the record).
    """
    i0 = int(np.floor((ch.pretrigger_s + before_s) * ch.sample_rate_hz))
    i1 = int(np.ceil((ch.pretrigger_s + after_s) * ch.sample_rate_hz)) + 1
    i0, i1 = max(i0, 0), min(i1, ch.n_samples)
    if i1 - i0 < 16:
        return 0, ch.n_samples
    return i0, i1


def _read_raw(ch: Channel, start: int, stop: int, cols: tuple[int, int]):
    """The analysed span of some rows in file units, and whether it has clipped samples.

    Only that span is read: a clipped sample elsewhere in the record (a bigger
    neighbour long after the pulse) does not touch this pulse's features.
    """
    raw = ch.read_rows(start, stop, columns=cols)
    return raw, ch.clipped_rows(raw)


def _read_rows(ch: Channel, start: int, stop: int, cols: tuple[int, int]):
    """As :func:`_read_raw`, the rows as float64 (still in file units)."""
    raw, clipped = _read_raw(ch, start, stop, cols)
    return raw.astype(np.float64), clipped


def _scaled(raw: np.ndarray, factor: float) -> np.ndarray:
    """File-unit rows as float64 times ``factor`` (the channel's scale and sign).

    One pass: the rows are cast to float64 inside the product, so every value is the
    float64 product of the float64 sample and ``factor``, as a cast and then ``*=``.
    """
    return np.multiply(raw, float(factor), dtype=np.float64)


def _by_row_blocks(func, x: np.ndarray, factor: float | None, per_row: dict,
                   **kwargs) -> dict:
    """``func`` over blocks of :data:`ROWS_AT_ONCE` rows of ``x``, its outputs joined.

    Each block is ``x[a:b]``, or with a ``factor`` ``_scaled(x[a:b], factor)`` (file
    units to physical ones); ``per_row`` holds the other per-row arguments (arrays, or
    tuples of arrays), sliced alike; ``kwargs`` are passed unchanged. Every feature is
    computed row by row (a row's values never depend on the rows beside it), so the
    blocks change only the speed.
    """
    n = x.shape[0]
    parts = []
    for a in range(0, max(n, 1), ROWS_AT_ONCE):   # one (empty) block for no rows
        b = min(a + ROWS_AT_ONCE, n)
        block = x[a:b] if factor is None else _scaled(x[a:b], factor)
        args = {k: tuple(p[a:b] for p in v) if isinstance(v, tuple) else v[a:b]
                for k, v in per_row.items()}
        parts.append(func(block, **args, **kwargs))
    if len(parts) == 1:
        return parts[0]
    return {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}


def clip_level(ch: Channel) -> float | None:
    """The level (channel units after ``scale``) at which a channel's samples are clipped.

    The smaller of the declared ``full_scale`` and, for int16 files, the largest count.
    """
    levels = [] if ch.full_scale is None else [float(ch.full_scale)]
    if ch.dtype == np.int16:
        levels.append(32767.0 * ch.scale)
    return min(levels) if levels else None


def vhf_window_s(f: dict, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Where each pulse's VHF peak is searched: around its rise, between neighbours.

    Physical time relative to the trigger, s (see :mod:`features.vhf`): from the onset
    less the pulse's own rise (onset to field peak), at least :data:`VHF_MIN_LEAD_S` and
    at most :data:`VHF_LEAD_S`, to :data:`VHF_TRAIL_S` after the field peak (the VHF of
    breakdown accompanies the current's rise, Rakov & Uman 2003, from memory; a long
    pulse's tail, e.g. a stepped-leader step's, holds its neighbours' bursts, not its
    own), never beyond half-way to a neighbouring pulse, at most
    :data:`VHF_MAX_WINDOW_S` long. Rows without a usable field pulse search around the
    trigger (``PEAK_SEARCH_S``).
    """
    onset, end = f["pulse_start_s"], f["end_time_s"]
    peak = np.fmax(f["peak_time_s"], onset)
    prev_end, next_start = f["prev_end_s"], f["next_start_s"]
    lead = np.clip(np.nan_to_num(peak - onset, nan=VHF_LEAD_S), VHF_MIN_LEAD_S, VHF_LEAD_S)
    lo = onset - lead
    lo = np.where(np.isfinite(prev_end), np.maximum(lo, 0.5 * (prev_end + onset)), lo)
    hi = np.minimum(np.fmin(peak, end) + VHF_TRAIL_S, onset + VHF_MAX_WINDOW_S)
    hi = np.where(np.isfinite(next_start), np.minimum(hi, 0.5 * (end + next_start)), hi)
    ok = np.isfinite(lo) & np.isfinite(hi)
    lo = np.where(ok, lo, PEAK_SEARCH_S[0] - VHF_LEAD_S)
    hi = np.where(ok, hi, PEAK_SEARCH_S[1])
    return lo, hi


#: glibc ``mallopt`` parameters (``M_TRIM_THRESHOLD``, ``M_MMAP_THRESHOLD``) and the
#: values :func:`_keep_work_memory` gives them, bytes.
_MALLOPT = ((-1, 256 * 1024 ** 2), (-3, 64 * 1024 ** 2))
_work_memory_kept = False


def _keep_work_memory() -> None:
    """Let this process's allocator keep the memory of freed work arrays (glibc only).

    By default glibc hands arrays of a few MB out as fresh memory maps and returns them
    (or the top of its heap) to the system when they are freed: every step of every
    chunk then page-faults its arrays back in, which cost a joblib worker 70 faults and
    a quarter of its time per pulse (measured). Arrays up to 64 MB now come from the
    heap, which keeps up to 256 MB of freed memory for the next chunk. Once per process;
    elsewhere than glibc it does nothing.
    """
    global _work_memory_kept
    if _work_memory_kept:
        return
    _work_memory_kept = True
    import ctypes
    import ctypes.util

    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        for param, value in _MALLOPT:
            libc.mallopt(param, value)
    except (OSError, AttributeError):  # not glibc
        pass


def _nearer(x, ch, job, range_m, mapping):
    """A variant's share of the chunk's strong, far pulses seen from nearer
    (:mod:`features._nearer`): rows, moved, new ranges and (old ranges, heights)."""
    from ._nearer import move_chunk_nearer

    x, moved, near_m = move_chunk_nearer(x, ch, range_m, mapping["altitude_m"],
                                         job.variant.near_share, [job.variant.seed, job.start, 8])
    return x, moved, near_m, (np.asarray(range_m), np.asarray(mapping["altitude_m"]))


def compute_chunk(job: ChunkJob) -> pd.DataFrame:
    """Features of the rows of one :class:`ChunkJob`, as a DataFrame in schema order."""
    _keep_work_memory()
    n = job.stop - job.start
    fch = job.field
    mapping = source_features(job.sources, job.range_m, n)
    rng = np.where(np.isfinite(job.range_m), job.range_m, mapping["source_range_m"])

    c0, c1 = _column_span(fch, *ANALYSIS_WINDOW_S)
    raw, fclip = _read_raw(fch, job.start, job.stop, (c0, c1))
    # the span read is the channel from its column c0 on
    fch = dataclasses.replace(fch, pretrigger_s=fch.pretrigger_s - c0 / fch.sample_rate_hz,
                              n_samples=raw.shape[1])
    moved = None
    if job.variant is not None:   # the same pulses as another station records them
        from .augment import apply_field, apply_vhf

        rng_v = np.random.default_rng([job.variant.seed, job.start])
        # (the variant's rows are physical already: factor None below)
        raw = _scaled(raw, fch.scale * fch.sign)
        if job.variant.near_share:
            raw, moved, near_m, far_m = _nearer(raw, fch, job, rng, mapping)
            if moved.any():
                sources = None if job.sources is None else job.sources.without_events(moved)
                mapping = source_features(sources, near_m, n)
                rng = np.where(np.isfinite(near_m), near_m, mapping["source_range_m"])
        raw, fch = apply_field(raw, fch, job.variant, rng_v)
        level = clip_level(fch)
        fclip = np.zeros(n, bool) if level is None else (np.abs(raw) >= level * (1 - 1e-9)
                                                          ).any(axis=1)
        factor = None
    else:
        factor = fch.scale * fch.sign
    f = _by_row_blocks(field_features, raw, factor,
                       {"range_m": rng, "altitude_m": mapping["altitude_m"]},
                       sample_rate_hz=fch.sample_rate_hz, pretrigger_s=fch.pretrigger_s,
                       delay_s=fch.delay_s, decay_time_s=fch.decay_time_s,
                       quantum_v_per_m=fch.quantum, full_scale_v_per_m=clip_level(fch))
    del raw
    vclip = np.zeros(n, dtype=bool)
    if job.vhf is not None:
        vch = job.vhf
        v0, v1 = _column_span(vch, VHF_SPAN_S[0] + vch.delay_s, VHF_SPAN_S[1] + vch.delay_s)
        vraw, vclip = _read_raw(vch, job.start, job.stop, (v0, v1))
        if job.variant is not None:
            vraw = _scaled(vraw, vch.scale)
            if moved is not None and moved.any():
                from ._nearer import nearer_vhf

                vraw[moved] = nearer_vhf(vraw[moved], vch.kind,
                                         vch.pretrigger_s - v0 / vch.sample_rate_hz,
                                         vch.sample_rate_hz, far_m[0][moved], far_m[1][moved],
                                         rng[moved])
            vraw, vch = apply_vhf(vraw, vch, job.variant, rng_v)
            vlevel = clip_level(vch)
            vclip = np.zeros(n, bool) if vlevel is None else (np.abs(vraw) >= vlevel * (
                1 - 1e-6)).any(axis=1)
            factor = None
        else:
            factor = vch.scale
        v = _by_row_blocks(vhf_features, vraw, factor,
                           {"window_s": vhf_window_s(f, n)},
                           sample_rate_hz=vch.sample_rate_hz, kind=vch.kind,
                           pretrigger_s=vch.pretrigger_s - v0 / vch.sample_rate_hz,
                           delay_s=vch.delay_s, full_scale=clip_level(vch))
        del vraw
    else:
        v = {k: np.full(n, np.nan) for k in ("vhf_peak_db", "vhf_peak_time_s", "vhf_snr_db",
                                             "vhf_width_s")}
        v["vhf_ok"] = np.zeros(n, dtype=bool)
        v["vhf_censored"] = np.zeros(n, dtype=bool)

    polarity_label, polarity_snr = breakdown_polarity(
        f["polarity"], mapping["vertical_speed_m_per_s"], mapping["vertical_speed_se_m_per_s"],
        mapping["vertical_confounded"], n_sources=mapping["n_sources"])
    with np.errstate(divide="ignore", invalid="ignore"):
        norm_db = 20 * np.log10(np.abs(f["range_normalized_peak_v_per_m"]))
    cols = {
        "event_id": job.event_id,
        **f,
        "vhf_peak_db": v["vhf_peak_db"],
        # a clipped field's peak time and SNR are not known (features.vhf)
        "vhf_field_lag_s": np.where(f["field_censored"], np.nan,
                                    f["peak_time_s"] - v["vhf_peak_time_s"]),
        "vhf_lag_first_peak_s": np.where(f["field_censored"], np.nan,
                                         f["first_peak_time_s"] - v["vhf_peak_time_s"]),
        "vhf_to_field_db": v["vhf_peak_db"] - np.where(np.isfinite(norm_db), norm_db, np.nan),
        "vhf_field_ratio_db": np.where(f["field_censored"]
                                       | ~(f["snr_db"] >= MIN_RATIO_FIELD_SNR_DB), np.nan,
                                       v["vhf_snr_db"] - f["snr_db"]),
        "vhf_snr_db": v["vhf_snr_db"],
        "vhf_width_s": v["vhf_width_s"],
        "vhf_censored": v["vhf_censored"],
        **mapping,
        "breakdown_polarity": polarity_label,
        "breakdown_snr": polarity_snr,
        **job.context,
        "range_m": rng,
        "clipped": fclip | vclip,
        "has_vhf": v["vhf_ok"],
    }
    out = pd.DataFrame({name: cols[name] for name in schema.feature_names()})
    for name in EVENT_PASS_THROUGH:
        if name in job.extras:
            out.insert(1 + EVENT_PASS_THROUGH.index(name), name, job.extras[name].to_numpy())
    for name in job.extras.columns:
        if name not in EVENT_PASS_THROUGH:
            taken = name in out.columns or name in RESERVED_COLUMNS or name.startswith("p_")
            out[f"events_{name}" if taken else name] = job.extras[name].to_numpy()
    out.index = pd.RangeIndex(job.start, job.stop)
    return out


def _worker_ready(_job) -> int:
    """Nothing: run in a worker, its unpickling imports this module (and so the features)."""
    return os.getpid()


class WorkerStart:
    """Start the joblib workers of ``n_jobs`` and their imports while this process works.

    A worker imports the feature code when its first job arrives (~0.7 s CPU); started
    here, in a thread, the workers import while this process computes the flash context
    (and, in triage, loads the model), and the jobs of :func:`run_jobs` find them ready:
    joblib reuses its worker pool when the next call asks for the same settings, which
    :func:`run_jobs` always does. Call :meth:`join` before :func:`run_jobs` (one joblib
    call at a time). Serial runs (``n_jobs=1``) and Dask start nothing.
    """

    def __init__(self, n_jobs: int = 1, dask_address: str | None = None):
        self.error: BaseException | None = None
        self._thread = None
        if n_jobs != 1 and not dask_address:
            from joblib import effective_n_jobs

            n = effective_n_jobs(n_jobs)
            self._thread = threading.Thread(target=self._run, args=(n_jobs, n), daemon=True,
                                            name="pulsesort-workers")
            self._thread.start()

    def _run(self, n_jobs: int, n: int) -> None:
        try:
            for _ in run_jobs(_worker_ready, range(n), n_jobs=n_jobs, extra_args=()):
                pass
        except BaseException as exc:  # the real jobs will meet it again, and raise it
            self.error = exc

    def join(self) -> None:
        """Wait until the workers have started (an error is left to the real jobs)."""
        if self._thread is not None:
            self._thread.join()
            self._thread = None


def catalog_context(catalog: Catalog) -> dict:
    """The flash context of every pulse of a catalog (:func:`features.context.flash_context`).

    A catalog that gives no flash ids at all gets its flashes grouped in time and space
    first (:func:`features.flashes.group_flashes`, documented thresholds), so a station
    that does not group flashes still has each pulse's time in its flash and channel
    reuse.
    """
    codes = None
    flash = catalog.events["flash_id"].astype(str)
    if catalog.n_events and not (flash != "").any():
        from .flashes import group_flashes, pulse_positions_m

        codes = group_flashes(catalog.time_ns, pulse_positions_m(catalog))
    context = flash_context(catalog.events, catalog.time_ns, catalog.sources, codes)
    return_freed_memory()
    return context


class ChunkPlan(Sequence):
    """The chunks of a catalog as a lazy sequence of :class:`ChunkJob` objects.

    Jobs are built when they are taken (``plan[i]``, iteration), so planning a
    million-pulse season costs the flash context and nothing per chunk.
    """

    def __init__(self, catalog: Catalog, bounds: list[tuple[int, int]], context=None,
                 variants=None):
        self.catalog = catalog
        self.bounds = list(bounds)
        if variants is not None and len(variants) != len(self.bounds):
            raise ValueError(f"one station variant per chunk: {len(self.bounds)} chunks, "
                             f"{len(variants)} variants")
        self.variants = variants
        if context is None:
            context = catalog_context(catalog)
        self.context = context
        self._extra_columns = [c for c in catalog.events.columns
                               if c not in ("event_id", "range_m")]

    def __len__(self) -> int:
        return len(self.bounds)

    def __getitem__(self, i):
        if isinstance(i, slice):
            return [self[j] for j in range(*i.indices(len(self)))]
        start, stop = self.bounds[i]
        cat = self.catalog
        return ChunkJob(
            start=start, stop=stop, field=cat.field, vhf=cat.vhf,
            event_id=cat.event_ids[start:stop], range_m=cat.range_m[start:stop].copy(),
            sources=None if cat.sources is None else cat.sources.rows(start, stop),
            context={k: v[start:stop] for k, v in self.context.items()},
            extras=cat.events.iloc[start:stop][self._extra_columns].reset_index(drop=True),
            variant=None if self.variants is None else self.variants[i],
        )

    def n_pulses(self, first: int = 0) -> int:
        """Pulses in the chunks from ``first`` on."""
        return sum(b - a for a, b in self.bounds[first:])

    def jobs(self, first: int = 0):
        """Iterate the jobs from chunk ``first`` on, building each when it is needed."""
        return (self[i] for i in range(first, len(self)))


def plan_chunks(catalog: Catalog, chunk_size: int = DEFAULT_CHUNK_SIZE,
                bounds: list[tuple[int, int]] | None = None, context=None,
                variants=None) -> ChunkPlan:
    """Split ``catalog`` into chunks of ``chunk_size`` rows (or explicit ``bounds``).

    Returns a lazy :class:`ChunkPlan`; the flash context is computed here, once
    (or taken from ``context``, e.g. another plan's ``.context``). ``variants`` gives
    one :class:`features.augment.StationVariant` (or None) per chunk.
    """
    return ChunkPlan(catalog, catalog.chunk_bounds(chunk_size) if bounds is None else bounds,
                     context, variants)


def iter_features(catalog: Catalog, *, chunk_size: int = DEFAULT_CHUNK_SIZE, n_jobs: int = 1,
                  dask_address: str | None = None, progress: bool | None = None,
                  start_chunk: int = 0, variant_seed: int | None = None,
                  context=None) -> Iterator[pd.DataFrame]:
    """Yield the feature rows of ``catalog`` chunk by chunk, in catalog order.

    Parameters
    ----------
    catalog : Catalog
    chunk_size : int, default=512
        Rows per chunk (the unit of work and of output).
    n_jobs : int, default=1
        joblib worker processes (-1: one per core).
    dask_address : str, optional
        Address of a ``dask.distributed`` scheduler; overrides ``n_jobs``.
    progress : bool, optional
        Show a progress bar on stderr (default: on a terminal, for > 20,000 pulses).
    start_chunk : int, default=0
        Skip the chunks before this one (to resume an interrupted run).
    variant_seed : int, optional
        Compute the features of the pulses as other stations would record them: every
        chunk gets a station drawn by :func:`features.augment.draw_variant` from this
        seed (training augmentation).
    context : dict, optional
        The flash context of the catalog if already computed (a plan's ``.context``).
    """
    workers = WorkerStart(n_jobs, dask_address)   # they import while the context is made
    try:
        variants = None
        if variant_seed is not None:
            from .augment import draw_variant

            rng = np.random.default_rng(variant_seed)
            variants = [draw_variant(rng) for _ in catalog.chunk_bounds(chunk_size)]
        plan = plan_chunks(catalog, chunk_size, context=context, variants=variants)
    finally:
        workers.join()
    jobs = plan.jobs(start_chunk)
    bar = _progress(plan.n_pulses(start_chunk), progress, "features")
    try:
        for df in run_jobs(compute_chunk, jobs, n_jobs=n_jobs, dask_address=dask_address):
            bar.update(len(df))
            yield df
    finally:
        bar.close()


def extract_features(catalog: Catalog, **kwargs) -> pd.DataFrame:
    """All feature rows of ``catalog`` in one DataFrame.

    Parameters
    ----------
    catalog : Catalog
        An open catalog (:func:`features.open_catalog`).
    **kwargs
        ``chunk_size``, ``n_jobs``, ``dask_address``, ``progress``... of
        :func:`iter_features`; the values do not depend on them.

    Returns
    -------
    pandas.DataFrame
        One row per pulse in catalog order: ``event_id`` then every column of
        :data:`features.schema.FEATURES`, each in its SI unit (the suffix of its name:
        ``_s`` seconds, ``_v_per_m`` V/m, ``_m_per_s`` m/s...), then the events'
        ``time_utc`` and ``flash_id``.

    Examples
    --------
    A tiny invented catalog (two pulses of the fictional station hollowmere):

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
    >>> from features import extract_features, open_catalog
    >>> F = extract_features(open_catalog(folder))
    >>> F["event_id"].tolist(), F["polarity"].tolist()
    (['a', 'b'], [1.0, -1.0])
    >>> F["peak_field_v_per_m"].round(2).tolist()            # V/m
    [1.0, -2.0]
    """
    parts = list(iter_features(catalog, **kwargs))
    if not parts:
        return pd.DataFrame(columns=schema.feature_names())
    return pd.concat(parts)


def write_csv_rows(df: pd.DataFrame, handle, header: bool) -> None:
    """Append ``df`` to an open text handle in pulsesort's CSV dialect."""
    handle.write(csv_text(df, header=header))


def write_features(catalog: Catalog, out_path, **kwargs) -> Path:
    """Write the features of ``catalog`` to a CSV file, atomically.

    Rows are streamed to ``<out>.partial`` and renamed to ``out_path`` only when
    every chunk is written, so an interrupted run never leaves a file that looks
    finished. Parquet is written instead when ``out_path`` ends in ``.parquet``
    (needs the optional ``pyarrow``).
    """
    out_path = Path(out_path)
    tmp = out_path.with_name(out_path.name + ".partial")
    if out_path.suffix == ".parquet":
        try:
            import pyarrow  # noqa: F401
        except ImportError as exc:
            raise InputError("Parquet output needs the optional extra: "
                             "pip install 'pulsesort[parquet]'") from exc
        df = extract_features(catalog, **kwargs)
        df.to_parquet(tmp, index=False)
        os.replace(tmp, out_path)
        return out_path
    try:
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            for i, df in enumerate(iter_features(catalog, **kwargs)):
                write_csv_rows(df, fh, header=i == 0)
            if catalog.n_events == 0:
                fh.write(",".join(schema.feature_names()) + "\n")
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, out_path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return out_path
