"""Parallel execution of per-chunk work: serially, in joblib workers or on Dask.

:func:`run_jobs` yields ``func(job)`` for every job in order, whichever runs it, and
:func:`_progress` is the progress bar shared by feature extraction and triage.
:mod:`features.extract` re-exports both.
"""

from __future__ import annotations

import os
import sys

from ._checks import InputError

__all__ = ["run_jobs"]


def _progress(total: int, enabled: bool | None, desc: str):
    from tqdm.auto import tqdm

    if enabled is None:
        enabled = sys.stderr.isatty() and total > 20_000
    return tqdm(total=total, unit="pulse", desc=desc, disable=not enabled, file=sys.stderr,
                smoothing=0.1)


def _run_dask(func, jobs, address, extra_args=()):
    try:
        from distributed import Client
    except ImportError as exc:  # pragma: no cover - depends on the extra
        raise InputError("--dask needs the optional extra: pip install 'pulsesort[dask]'"
                         ) from exc
    with Client(address) as client:
        window = max(4, 4 * len(client.nthreads()))
        pending = iter(jobs)
        futures = []
        for job in pending:
            futures.append(client.submit(func, job, *extra_args, pure=False))
            if len(futures) >= window:
                break
        while futures:
            head = futures.pop(0)
            yield head.result()
            job = next(pending, None)
            if job is not None:
                futures.append(client.submit(func, job, *extra_args, pure=False))


def run_jobs(func, jobs, *, n_jobs: int = 1, dask_address: str | None = None,
             extra_args: tuple = ()):
    """Yield ``func(job, *extra_args)`` for every job, in order, serially or in parallel.

    ``func`` must be importable by name (a module-level function) so that
    joblib's worker processes and Dask workers can run it.

    Each joblib worker may use ``cores // n_jobs`` threads (at least one) in the
    thread pools of NumPy's BLAS and of OpenMP, so that ``n_jobs`` workers use that
    many cores and not ``n_jobs x cores`` competing threads. Dask workers are started
    by the cluster: a nanny sets ``OMP_NUM_THREADS``, ``MKL_NUM_THREADS`` and
    ``OPENBLAS_NUM_THREADS`` to 1 in its worker's environment (Dask's default
    ``distributed.nanny.pre-spawn-environ``).
    """
    if dask_address:
        yield from _run_dask(func, jobs, dask_address, extra_args)
    elif n_jobs == 1:
        for job in jobs:
            yield func(job, *extra_args)
    else:
        from joblib import Parallel, delayed, effective_n_jobs, parallel_config

        workers = effective_n_jobs(n_jobs)
        threads = max((os.cpu_count() or 1) // workers, 1)
        with parallel_config(backend="loky", inner_max_num_threads=threads):
            par = Parallel(n_jobs=workers, return_as="generator", pre_dispatch="2*n_jobs")
            yield from par(delayed(func)(job, *extra_args) for job in jobs)
