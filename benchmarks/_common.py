"""Shared helpers of the benchmark scripts (run by hand, never by the test suite).

* :class:`TreeRSSSampler`: a thread that polls ``VmRSS`` in ``/proc/<pid>/status`` of
  one or more root processes and all their descendants (joblib/loky workers, Dask
  nannies and workers) every 20 ms and keeps the peak of the **sum**.
* :func:`run_measured`: run a command as a subprocess, timed, with its process tree
  sampled.
* :func:`pulsesort`: the ``pulsesort`` command line of this venv, for
  :func:`run_measured`.
* :func:`floor_pass`: the floor of a catalog pass (memory-mapped read of the arrays
  plus one analytic-signal envelope per VHF row); ``python benchmarks/_common.py floor
  CATALOG --jobs N`` runs it as a subprocess so it can be sampled like the commands.
* :class:`Cluster`: a ``distributed.LocalCluster`` of worker processes on 127.0.0.1, in
  its own process tree (``python benchmarks/_common.py cluster``).
* :func:`machine_info`, :func:`print_table`, :func:`markdown_table`, :func:`write_json`,
  :class:`Workdir`, :func:`check_disk`, :func:`catalog_bytes`, :func:`warm_cache`.

Linux only (``/proc``). Only the standard library, numpy and scipy are imported at
module level, so the floor subprocess starts as light as it can.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import shutil
import subprocess
import sys
import tempfile
import threading
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

__all__ = ["TreeRSSSampler", "Measurement", "run_measured", "pulsesort", "reported_rate",
           "floor_pass", "run_floor", "simulate", "simulate_args", "machine_info",
           "print_table", "markdown_table", "write_json", "Workdir", "Cluster", "check_disk",
           "catalog_bytes", "warm_cache", "base_parser", "fmt_bytes", "Timer", "MB"]

MB = 1024 * 1024
POLL_S = 0.02
PAGE_CACHE_BLOCK = 64 * MB


# --------------------------------------------------------------------------- memory
def _rss_bytes(pid: int) -> int:
    """VmRSS of one process in bytes (0 if it is gone or a zombie)."""
    try:
        with open(f"/proc/{pid}/status", "rb") as fh:
            for line in fh:
                if line.startswith(b"VmRSS:"):
                    return int(line.split()[1]) * 1024
    except (FileNotFoundError, ProcessLookupError, PermissionError):
        pass
    return 0


def _parent_map() -> dict[int, list[int]]:
    """ppid -> child pids, from /proc/<pid>/stat (no /proc/*/children on every kernel)."""
    children: dict[int, list[int]] = {}
    for name in os.listdir("/proc"):
        if not name.isdigit():
            continue
        try:
            with open(f"/proc/{name}/stat", "rb") as fh:
                stat = fh.read()
        except (FileNotFoundError, ProcessLookupError, PermissionError):
            continue
        # the command name is in parentheses and may hold spaces: split after the last ')'
        rest = stat[stat.rfind(b")") + 2:].split()
        if len(rest) > 1:
            children.setdefault(int(rest[1]), []).append(int(name))
    return children


def tree_pids(roots) -> list[int]:
    """The root pids and all their descendants."""
    kids = _parent_map()
    out, todo = [], list(roots)
    seen = set()
    while todo:
        pid = todo.pop()
        if pid in seen:
            continue
        seen.add(pid)
        out.append(pid)
        todo.extend(kids.get(pid, ()))
    return out


class TreeRSSSampler:
    """Peak of the summed resident memory of process trees, sampled every 20 ms.

    Parameters
    ----------
    roots : list of int
        Root pids; their descendants are found anew at every poll.
    interval_s : float, default=0.02

    Attributes
    ----------
    peak_bytes : int
        Largest sum of ``VmRSS`` over the trees seen so far (file-backed pages of
        memory-mapped arrays that are resident count, as the kernel counts them).
    peak_processes : int
        Number of processes in the trees at that peak.
    n_samples : int
    """

    def __init__(self, roots, interval_s: float = POLL_S):
        self.roots = [int(r) for r in roots]
        self.interval_s = float(interval_s)
        self.peak_bytes = 0
        self.peak_processes = 0
        self.n_samples = 0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._loop, daemon=True)

    def sample(self) -> int:
        pids = tree_pids(self.roots)
        total = sum(_rss_bytes(p) for p in pids)
        self.n_samples += 1
        if total > self.peak_bytes:
            self.peak_bytes, self.peak_processes = total, len(pids)
        return total

    def _loop(self):
        while not self._stop.is_set():
            self.sample()
            self._stop.wait(self.interval_s)

    def start(self) -> TreeRSSSampler:
        self._thread.start()
        return self

    def stop(self) -> int:
        self._stop.set()
        self._thread.join()
        return self.peak_bytes

    def __enter__(self):
        return self.start()

    def __exit__(self, *exc):
        self.stop()


class Timer:
    """``with Timer() as t: ...``; then ``t.seconds`` (wall clock, perf_counter)."""

    def __enter__(self):
        self._t0 = time.perf_counter()
        self.seconds = float("nan")
        return self

    def __exit__(self, *exc):
        self.seconds = time.perf_counter() - self._t0


@dataclass
class Measurement:
    """One measured subprocess."""

    command: list
    seconds: float
    peak_rss_bytes: int
    peak_processes: int
    returncode: int
    stdout: str = field(repr=False, default="")
    stderr: str = field(repr=False, default="")
    #: User + system CPU seconds of the process and of the children it waited for
    #: (joblib/loky workers and process pools are joined before exit), NaN if unknown.
    #: On a machine shared with other work this moves less than the wall time.
    cpu_seconds: float = float("nan")

    @property
    def peak_rss_mb(self) -> float:
        return self.peak_rss_bytes / MB

    def as_dict(self) -> dict:
        d = asdict(self)
        d.pop("stdout")
        d.pop("stderr")
        d["command"] = [str(c) for c in self.command]
        d["peak_rss_mb"] = self.peak_rss_mb
        return d


def run_measured(cmd, *, cwd=None, env=None, extra_roots=(), check=True,
                 echo=True) -> Measurement:
    """Run ``cmd`` (a list), timing it and sampling its process tree's peak RSS.

    Parameters
    ----------
    cmd : list of str
    cwd, env
        As for :class:`subprocess.Popen` (``env`` is merged over ``os.environ``).
    extra_roots : list of int
        More process trees whose memory counts (e.g. a Dask cluster doing the work).
    check : bool, default=True
        Raise ``RuntimeError`` (with the command's stderr) on a non-zero exit.
    echo : bool, default=True
        Print the command line before running it.
    """
    cmd = [str(c) for c in cmd]
    if echo:
        print("$ " + " ".join(cmd), flush=True)
    full_env = dict(os.environ)
    full_env.update(env or {})
    with tempfile.TemporaryFile() as out, tempfile.TemporaryFile() as err:
        t0 = time.perf_counter()
        ru0 = resource.getrusage(resource.RUSAGE_CHILDREN)
        proc = subprocess.Popen(cmd, cwd=cwd, env=full_env, stdout=out, stderr=err,
                                stdin=subprocess.DEVNULL)
        sampler = TreeRSSSampler([proc.pid, *extra_roots]).start()
        rc = proc.wait()
        seconds = time.perf_counter() - t0
        ru1 = resource.getrusage(resource.RUSAGE_CHILDREN)
        cpu = (ru1.ru_utime - ru0.ru_utime) + (ru1.ru_stime - ru0.ru_stime)
        sampler.stop()
        out.seek(0)
        err.seek(0)
        stdout = out.read().decode("utf-8", "replace")
        stderr = err.read().decode("utf-8", "replace")
    m = Measurement(cmd, seconds, sampler.peak_bytes, sampler.peak_processes, rc, stdout,
                    stderr, cpu)
    if check and rc != 0:
        raise RuntimeError(f"command failed with exit {rc}: {' '.join(cmd)}\n"
                           f"{stderr[-4000:]}")
    return m


def reported_rate(stdout: str) -> float | None:
    """The ``(N pulses/s)`` a pulsesort command printed about its own work, if any."""
    import re

    found = re.findall(r"\(([\d,]+) pulses/s\)", stdout)
    return float(found[-1].replace(",", "")) if found else None


def pulsesort(*args) -> list[str]:
    """The command line ``pulsesort ARGS`` of this interpreter's environment."""
    exe = Path(sys.executable).with_name("pulsesort")
    head = [str(exe)] if exe.is_file() else [sys.executable, "-m", "classify.cli"]
    return head + [str(a) for a in args]


def simulate_args(out, events: int, seed: int, preset: str = "reference",
                  **settings) -> list[str]:
    """``pulsesort simulate`` arguments for simulator settings given as keywords.

    ``field_rate_hz=10e6`` becomes ``--field-rate-hz 10000000.0``; ``class_mix`` a dict;
    ``with_range=False`` becomes ``--no-range``; ``band_hz``/``range_km`` pairs.
    """
    args = ["simulate", str(out), "--events", str(events), "--seed", str(seed),
            "--preset", preset, "--overwrite"]
    for key, value in settings.items():
        if key.startswith("with_"):
            args.append(("--" if value else "--no-") + key[5:])
        elif key == "class_mix":
            args += ["--class-mix", ",".join(f"{k}={v}" for k, v in value.items())]
        elif isinstance(value, (tuple, list)):
            args += ["--" + key.replace("_", "-"), *map(str, value)]
        else:
            args += ["--" + key.replace("_", "-"), "none" if value is None else str(value)]
    return args


def simulate(out, events: int, seed: int, preset: str = "reference", **settings
             ) -> Measurement:
    """Run ``pulsesort simulate`` (a catalog folder plus ``OUT.labels.csv``), measured."""
    return run_measured(pulsesort(*simulate_args(out, events, seed, preset, **settings)))


# --------------------------------------------------------------------------- floor
def _floor_chunk(field_file: str, vhf_file: str | None, start: int, stop: int) -> float:
    """Read rows [start, stop) of the memory-mapped arrays; envelope of every VHF row.

    The field rows are read in full (their largest absolute sample, as a clip check
    would); every VHF row gets ``abs(scipy.signal.hilbert(row))`` over its whole record
    (the analytic-signal envelope), else the field rows get it when there is no VHF.
    Returns a checksum so nothing can be skipped.
    """
    from scipy.signal import hilbert

    f = np.load(field_file, mmap_mode="r")
    rows = np.asarray(f[start:stop], dtype=np.float64)
    total = float(np.abs(rows).max(axis=1).sum())
    if vhf_file is not None:
        v = np.load(vhf_file, mmap_mode="r")
        rows = np.asarray(v[start:stop], dtype=np.float64)
    env = np.abs(hilbert(rows, axis=1))
    return total + float(env.max(axis=1).sum())


def floor_pass(catalog_dir, *, n_jobs: int = 1, chunk_size: int = 512) -> dict:
    """Time the floor of one pass over a catalog, in chunks of rows, on ``n_jobs`` processes.

    Reads ``catalog.json`` directly (no pulsesort import) and returns
    ``{"seconds", "n_rows", "checksum", "envelope_of"}``. Two or more jobs use a
    ``concurrent.futures.ProcessPoolExecutor`` (fork): the lightest worker pool there is.
    """
    catalog_dir = Path(catalog_dir)
    man = json.loads((catalog_dir / "catalog.json").read_text(encoding="utf-8"))
    field_file = str(catalog_dir / man["field"]["file"])
    vhf_file = str(catalog_dir / man["vhf"]["file"]) if man.get("vhf") else None
    n = int(np.load(field_file, mmap_mode="r").shape[0])
    bounds = [(s, min(s + chunk_size, n)) for s in range(0, n, chunk_size)]
    t0 = time.perf_counter()
    if n_jobs == 1:
        checksum = sum(_floor_chunk(field_file, vhf_file, a, b) for a, b in bounds)
    else:
        import multiprocessing as mp
        from concurrent.futures import ProcessPoolExecutor

        with ProcessPoolExecutor(n_jobs, mp_context=mp.get_context("fork")) as pool:
            futs = [pool.submit(_floor_chunk, field_file, vhf_file, a, b) for a, b in bounds]
            checksum = sum(f.result() for f in futs)
    seconds = time.perf_counter() - t0
    return {"seconds": seconds, "n_rows": n, "checksum": checksum,
            "envelope_of": "vhf" if vhf_file else "field"}


def run_floor(catalog_dir, *, n_jobs: int = 1, chunk_size: int = 512) -> Measurement:
    """:func:`floor_pass` in a subprocess, timed and RSS-sampled like a command.

    The returned measurement's ``stdout`` holds the JSON of :func:`floor_pass`.
    """
    cmd = [sys.executable, str(Path(__file__).resolve()), "floor", str(catalog_dir),
           "--jobs", str(n_jobs), "--chunk-size", str(chunk_size)]
    return run_measured(cmd)


def warm_cache(catalog_dir) -> float:
    """Read every file of a catalog once (untimed runs then start from the page cache).

    Returns the seconds it took. Without this the first timed run would pay the disk.
    """
    t0 = time.perf_counter()
    for p in sorted(Path(catalog_dir).iterdir()):
        if p.is_file():
            with open(p, "rb") as fh:
                while fh.read(PAGE_CACHE_BLOCK):
                    pass
    return time.perf_counter() - t0


# --------------------------------------------------------------------------- machine
def machine_info() -> dict:
    """CPU model, cores, RAM, OS and library versions of this machine."""
    cpu = platform.processor() or "?"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    ram = None
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemTotal:"):
                ram = int(line.split()[1]) * 1024
                break
    except OSError:
        pass
    versions = {"python": platform.python_version(), "numpy": np.__version__}
    for mod in ("scipy", "pandas", "sklearn", "joblib", "distributed"):
        try:
            versions[mod] = __import__(mod).__version__
        except ImportError:
            versions[mod] = None
    try:
        import classify

        versions["pulsesort"] = getattr(classify, "__version__", None)
    except ImportError:
        versions["pulsesort"] = None
    return {"cpu": cpu, "cores": os.cpu_count(),
            "cores_usable": len(os.sched_getaffinity(0)),
            "ram_gb": None if ram is None else round(ram / 1024 ** 3, 1),
            "os": platform.platform(), "load_average_1min": os.getloadavg()[0],
            "omp_num_threads": os.environ.get("OMP_NUM_THREADS"), "versions": versions}


def format_machine(info: dict) -> str:
    v = info["versions"]
    libs = ", ".join(f"{k} {val}" for k, val in v.items() if val)
    return (f"machine: {info['cpu']}, {info['cores']} cores ({info['cores_usable']} usable), "
            f"{info['ram_gb']} GB RAM; load {info['load_average_1min']:.2f} at start; "
            f"OMP_NUM_THREADS={info['omp_num_threads'] or 'unset'}\n{libs}")


# --------------------------------------------------------------------------- output
def fmt_bytes(n) -> str:
    return "-" if n is None else f"{n / MB:,.0f} MB"


def _cell(v) -> str:
    if v is None:
        return "-"
    if isinstance(v, bool):
        return "yes" if v else "NO"
    if isinstance(v, float):
        if v != v:
            return "-"
        if abs(v) >= 1000:
            return f"{v:,.0f}"
        if abs(v) >= 100:
            return f"{v:.0f}"
        if abs(v) > 1:
            return f"{v:.2f}"
        return f"{v:.4f}"
    if isinstance(v, int):
        return f"{v:,}"
    return str(v)


def print_table(rows: list[dict], columns: list[str], title: str | None = None,
                file=None) -> str:
    """Print ``rows`` (dicts) as a plain aligned table; return the text."""
    cells = [[_cell(r.get(c)) for c in columns] for r in rows]
    widths = [max([len(c)] + [len(row[i]) for row in cells]) for i, c in enumerate(columns)]
    lines = []
    if title:
        lines.append(title)
    lines.append("  ".join(c.ljust(w) if i == 0 else c.rjust(w)
                           for i, (c, w) in enumerate(zip(columns, widths))))
    lines.append("  ".join("-" * w for w in widths))
    for row in cells:
        lines.append("  ".join(v.ljust(w) if i == 0 else v.rjust(w)
                               for i, (v, w) in enumerate(zip(row, widths))))
    text = "\n".join(lines)
    print(text, file=file or sys.stdout, flush=True)
    return text


def markdown_table(rows: list[dict], columns: list[str]) -> str:
    """``rows`` (dicts) as a Markdown table, cells formatted as by :func:`print_table`."""
    lines = ["| " + " | ".join(columns) + " |",
             "|" + "|".join("---" if i == 0 else "---:" for i in range(len(columns))) + "|"]
    for r in rows:
        lines.append("| " + " | ".join(_cell(r.get(c)).replace("|", "\\|") for c in columns)
                     + " |")
    return "\n".join(lines)


def _jsonable(x):
    if isinstance(x, dict):
        return {str(k): _jsonable(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_jsonable(v) for v in x]
    if isinstance(x, np.generic):
        return x.item()
    if isinstance(x, float) and x != x:
        return None
    if isinstance(x, Path):
        return str(x)
    return x


def write_json(path, payload: dict) -> Path:
    """Write ``payload`` as JSON (temp file + rename)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.tmp")
    tmp.write_text(json.dumps(_jsonable(payload), indent=2) + "\n", encoding="utf-8")
    os.replace(tmp, path)
    print(f"numbers written to {path}")
    return path


# --------------------------------------------------------------------------- workdir
def base_parser(description: str) -> argparse.ArgumentParser:
    """An argument parser with the options every benchmark script has."""
    p = argparse.ArgumentParser(description=description,
                                formatter_class=argparse.ArgumentDefaultsHelpFormatter)
    p.add_argument("--workdir", default=None,
                   help="work folder for catalogs and outputs (default: a new temp folder)")
    p.add_argument("--keep", action="store_true",
                   help="keep the big catalogs (and a temp work folder) at the end")
    p.add_argument("--json", metavar="PATH", default=None, help="also write the numbers here")
    return p


class Workdir:
    """The benchmark's work folder; big catalogs in it are deleted at the end unless keep.

    ``with Workdir(args.workdir, keep=args.keep) as wd: cat = wd.big("ref")`` gives a
    path that will be removed (catalog folder and its ``.labels.csv``) on exit; a temp
    work folder is removed altogether.
    """

    def __init__(self, path=None, *, keep=False, prefix="pulsesort-bench-"):
        self.temporary = path is None
        self.root = Path(tempfile.mkdtemp(prefix=prefix) if path is None else path).resolve()
        self.root.mkdir(parents=True, exist_ok=True)
        self.keep = keep
        self._big: list[Path] = []

    def big(self, name: str) -> Path:
        p = self.root / name
        self._big.append(p)
        return p

    def cleanup(self) -> None:
        if self.keep:
            print(f"kept work folder {self.root}")
            return
        if self.temporary:
            shutil.rmtree(self.root, ignore_errors=True)
            return
        for p in self._big:
            shutil.rmtree(p, ignore_errors=True)
            for suffix in (".labels.csv", ".truth.csv"):    # the spec-literal writer's too
                Path(str(p) + suffix).unlink(missing_ok=True)

    def __enter__(self):
        print(f"work folder: {self.root}")
        return self

    def __exit__(self, *exc):
        self.cleanup()


def catalog_bytes(n_events: int, field_samples: int, vhf_samples: int | None, *,
                  field_itemsize: int = 4, vhf_itemsize: int = 4,
                  sources_per_event: float = 20.0) -> int:
    """Rough size of a simulated catalog on disk (arrays + ~80 B per source + events)."""
    arrays = n_events * (field_samples * field_itemsize + (vhf_samples or 0) * vhf_itemsize)
    return int(arrays + n_events * (sources_per_event * 80 + 150))


def check_disk(folder, need_bytes: int, margin: float = 1.2) -> int:
    """Exit with a clear message unless ``folder``'s file system has room for ``need_bytes``."""
    free = shutil.disk_usage(folder).free
    print(f"disk: {free / 1e9:.1f} GB free in {folder}, need about "
          f"{need_bytes / 1e9:.1f} GB", flush=True)
    if free < need_bytes * margin:
        raise SystemExit(f"not enough disk space in {folder}: {free / 1e9:.1f} GB free, about "
                         f"{need_bytes * margin / 1e9:.1f} GB needed (use --workdir elsewhere "
                         "or fewer --events)")
    return free


def _main(argv=None) -> int:
    p = argparse.ArgumentParser(description="benchmark helpers run as subprocesses")
    sub = p.add_subparsers(dest="what", required=True)
    f = sub.add_parser("floor", help="time the floor pass over a catalog; print JSON")
    f.add_argument("catalog")
    f.add_argument("--jobs", type=int, default=1)
    f.add_argument("--chunk-size", type=int, default=512)
    k = sub.add_parser("cluster", help="run a dask.distributed LocalCluster on 127.0.0.1; "
                       "print its address; stop when standard input closes")
    k.add_argument("--workers", type=int, default=2)
    args = p.parse_args(argv)
    if args.what == "cluster":
        from distributed import LocalCluster

        with LocalCluster(n_workers=args.workers, threads_per_worker=1, processes=True,
                          host="127.0.0.1", dashboard_address=None,
                          worker_dashboard_address=None) as cluster:
            print(cluster.scheduler_address, flush=True)
            sys.stdin.read()
        return 0
    res = floor_pass(args.catalog, n_jobs=args.jobs, chunk_size=args.chunk_size)
    print(json.dumps(res))
    return 0


class Cluster:
    """A LocalCluster of ``workers`` processes on loopback, in its own process tree.

    ``with Cluster(2) as cl: run_measured(cmd + ["--dask", cl.address],
    extra_roots=[cl.pid])`` counts the scheduler's and workers' memory with the command's.
    """

    def __init__(self, workers: int = 2):
        self.workers = workers

    def __enter__(self):
        cmd = [sys.executable, str(Path(__file__).resolve()), "cluster", "--workers",
               str(self.workers)]
        self.proc = subprocess.Popen(cmd, stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                                     text=True)
        self.address = self.proc.stdout.readline().strip()
        if not self.address.startswith("tcp://"):
            self.proc.kill()
            raise RuntimeError(f"the LocalCluster did not start (got {self.address!r})")
        self.pid = self.proc.pid
        print(f"LocalCluster of {self.workers} worker processes at {self.address}", flush=True)
        return self

    def __exit__(self, *exc):
        self.proc.stdin.close()
        try:
            self.proc.wait(timeout=60)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()


if __name__ == "__main__":
    sys.exit(_main())
