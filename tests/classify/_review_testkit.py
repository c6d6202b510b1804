"""Shared by the review and report tests: a small catalog, really triaged, and an HTTP client."""

from __future__ import annotations

import json
import urllib.error
import urllib.request
from pathlib import Path

import pandas as pd

from classify.cli import main
from classify.review import TOKEN_HEADER, build_queue
from classify.triage import read_results

#: An event id that would run if the page ever parsed data as HTML.
XSS_ID = "<script>window.__pwned=1</script><img src=x onerror=alert(1)>"


def _rename_event(folder: Path, old: str, new: str) -> None:
    """Rename one event in events.csv and sources.csv (a different, valid catalog)."""
    for name in ("events.csv", "sources.csv"):
        path = folder / name
        if not path.exists():
            continue
        df = pd.read_csv(path, dtype=str, keep_default_na=False)
        df.loc[df["event_id"] == old, "event_id"] = new
        df.to_csv(path, index=False)


def triaged_catalog(root: Path, *, events: int = 300, seed: int = 1, simulate_args=()):
    """Simulate a small catalog, rename its first queued pulse to :data:`XSS_ID`, triage it.

    ``simulate_args`` are extra options of ``pulsesort simulate`` (e.g. ``--no-xyz``).
    Returns ``(catalog_dir, results_csv)``: a real ``pulsesort triage --rules`` output.
    """
    root = Path(root)
    root.mkdir(parents=True, exist_ok=True)
    cat_dir, out = root / "hollowmere-2031", root / "results.csv"
    assert main(["-q", "simulate", str(cat_dir), "--events", str(events), "--seed", str(seed),
                 *SIMULATE_SHORT, *simulate_args]) == 0
    assert main(["-q", "triage", str(cat_dir), "--rules", "--rules-only", "--out", str(out)]) == 0
    first = build_queue(read_results(out))["event_id"].iat[0]
    _rename_event(cat_dir, first, XSS_ID)
    assert main(["-q", "triage", str(cat_dir), "--rules", "--rules-only", "--out", str(out)]) == 0
    return cat_dir, out


#: Options of ``pulsesort simulate`` for short records (fast tests).
SIMULATE_SHORT = ["--field-samples", "5400", "--vhf-samples", "6750"]  # 270 us: the analysis window fits


class Client:
    """A tiny urllib client for the review server (real HTTP on 127.0.0.1)."""

    def __init__(self, server):
        self.base = f"http://127.0.0.1:{server.port}"
        self.token = server.token

    def request(self, method, path, body=None, *, token=True, headers=None, raw=None):
        h = {TOKEN_HEADER: self.token} if token is True else (
            {TOKEN_HEADER: token} if token else {})
        data = raw
        if body is not None:
            data = json.dumps(body).encode()
            h["Content-Type"] = "application/json"
        h.update(headers or {})
        req = urllib.request.Request(self.base + path, data=data, method=method, headers=h)
        try:
            with urllib.request.urlopen(req, timeout=20) as r:
                return r.status, dict(r.headers), r.read()
        except urllib.error.HTTPError as e:
            return e.code, dict(e.headers), e.read()

    def json(self, method, path, body=None, **kw):
        status, headers, data = self.request(method, path, body, **kw)
        return status, json.loads(data.decode("utf-8"), parse_constant=_refuse)


def _refuse(name):
    raise ValueError(f"non-standard JSON constant {name}")
