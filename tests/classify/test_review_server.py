"""Tests of the review server's HTTP API, against a real server on 127.0.0.1 (urllib)."""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import threading
import time
from collections import Counter
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from classify.cli import main
from classify.labels import LabelStore
from classify.review import (
    TOKEN_HEADER,
    ReviewSession,
    is_loopback,
    lookalike_classes,
    make_server,
    standardised_features,
)
from classify.review._server import LISTEN_BACKLOG, MAX_JSON_DEPTH, json_depth
from classify.triage import read_results
from features import open_catalog
from features.waveform import ANALYSIS_WINDOW_S

from ._review_testkit import XSS_ID, Client, triaged_catalog

ANALYST = "wren"

def _interruptible():
    """The child takes Ctrl-C (SIGINT) even when the test run itself was started with it
    ignored (a background job, nohup), as an analyst's terminal gives it."""
    signal.signal(signal.SIGINT, signal.SIG_DFL)



@pytest.fixture(scope="module")
def triaged(tmp_path_factory):
    """A simulated catalog and its real rules-mode triage (made once for this module)."""
    return triaged_catalog(tmp_path_factory.mktemp("review-server"))


@pytest.fixture
def served(triaged, tmp_path):
    """A running server on a fresh store; yields (server, client, store path, results)."""
    cat_dir, out = triaged
    results = read_results(out)
    store = tmp_path / "labels.sqlite"
    session = ReviewSession(results, open_catalog(cat_dir), store, ANALYST)
    server = make_server(session)
    server.start_background()
    yield server, Client(server), store, results
    server.shutdown()
    server.server_close()


def test_server_binds_loopback_and_prints_a_token_address(served):
    """Default bind is 127.0.0.1; the URL carries a long random token."""
    server, _, _, _ = served
    assert server.server_address[0] == "127.0.0.1"
    assert server.url.startswith(f"http://127.0.0.1:{server.port}/?token=")
    assert len(server.token) >= 32
    assert is_loopback("127.0.0.1") and is_loopback("localhost") and is_loopback("::1")
    assert not is_loopback("0.0.0.0") and not is_loopback("192.0.2.7")


def test_api_needs_the_token_for_reads_and_writes(served):
    """No token or a wrong one: 403 on every API route; with it: 200."""
    _, c, _, _ = served
    for method, path, body in [("GET", "/api/session", None), ("GET", "/api/current", None),
                               ("POST", "/api/decision", {"action": "skip"}),
                               ("POST", "/api/undo", {})]:
        for token in (None, "wrong-token"):
            status, data = c.json(method, path, body, token=token)
            assert status == 403, (method, path, token)
            assert "token" in data["error"]
    status, info = c.json("GET", "/api/session")
    assert status == 200
    assert info["analyst"] == ANALYST
    assert [k["name"] for k in info["classes"]] == ["narrow_bipolar", "stepped_leader",
                                                    "recoil", "energetic_in_cloud"]
    assert [k["key"] for k in info["classes"]] == ["1", "2", "3", "4"]


def test_host_header_is_checked_against_the_bound_address(served):
    """A foreign Host (DNS rebinding) is refused even with the token; localhost is fine."""
    server, c, _, _ = served
    for host in ("evil.example", f"evil.example:{server.port}", "127.0.0.1:1",
                 f"127.0.0.2:{server.port}"):
        status, _, _ = c.request("GET", "/api/session", headers={"Host": host})
        assert status == 421, host
        status, _, _ = c.request("GET", "/", headers={"Host": host})
        assert status == 421, host
    status, _, _ = c.request("GET", "/api/session", headers={"Host": f"localhost:{server.port}"})
    assert status == 200


def test_only_the_allow_listed_static_files_are_served(served):
    """/, plot.js, views.js, review.js and review.css exist; any other path is 404."""
    _, c, _, _ = served
    status, headers, body = c.request("GET", "/", token=None)
    assert status == 200 and headers["Content-Type"].startswith("text/html")
    assert b'<script src="/static/review.js"' in body and b'<script src="/static/plot.js"' in body
    for name in ("plot.js", "views.js", "review.js"):
        status, headers, body = c.request("GET", f"/static/{name}", token=None)
        assert status == 200 and headers["Content-Type"].startswith("text/javascript")
        assert b"innerHTML" not in body and b"textContent" in body
        rest = body.replace(b'"http://www.w3.org/2000/svg"', b"")   # SVG's namespace name
        assert b"http://" not in rest and b"https://" not in rest  # nothing from outside
    for path in ("/static/index.html", "/static/../_server.py", "/static/%2e%2e/_server.py",
                 "/..%2f..%2fetc%2fpasswd", "/etc/passwd", "/static/", "/favicon.ico",
                 "/api/../static/review.js", "/api/nothing"):
        status, headers, _ = c.request("GET", path)
        assert status == 404, path
        assert headers["Content-Type"].startswith("application/json")


def test_responses_carry_the_security_headers(served):
    """CSP without inline script, nosniff, no referrer, no caching, no framing."""
    _, c, _, _ = served
    for path in ("/", "/api/current"):
        _, headers, _ = c.request("GET", path)
        csp = headers["Content-Security-Policy"]
        assert "script-src 'self'" in csp and "unsafe-inline" not in csp
        assert "default-src 'none'" in csp and "frame-ancestors 'none'" in csp
        assert headers["X-Content-Type-Options"] == "nosniff"
        assert headers["Referrer-Policy"] == "no-referrer"
        assert headers["Cache-Control"] == "no-store"
        assert "Python" not in headers.get("Server", "")


def test_writes_must_be_same_origin_json_of_bounded_size(served):
    """Form posts, cross-origin posts and huge bodies are refused before any write."""
    server, c, store, _ = served
    eid = c.json("GET", "/api/current")[1]["pulse"]["event_id"]
    form = f"event_id={eid}&action=skip".encode()
    status, _, _ = c.request("POST", "/api/decision", raw=form,
                             headers={"Content-Type": "application/x-www-form-urlencoded"})
    assert status == 415
    status, _ = c.json("POST", "/api/decision", {"event_id": eid, "action": "skip"},
                       headers={"Origin": "http://evil.example"})
    assert status == 403
    status, _ = c.json("POST", "/api/decision", {"event_id": eid, "action": "skip"},
                       headers={"Sec-Fetch-Site": "cross-site"})
    assert status == 403
    status, _ = c.json("POST", "/api/decision",
                       {"event_id": eid, "action": "skip", "note": "x" * 70_000})
    assert status == 413
    status, _, _ = c.request("POST", "/api/decision", raw=b"[1, 2]",
                             headers={"Content-Type": "application/json"})
    assert status == 400
    status, _ = c.json("GET", "/api/decision")
    assert status == 405
    with LabelStore(store) as s:
        assert len(s.decisions()) == 0 and len(s.review_marks(history=True)) == 0


def test_decisions_go_to_the_store_at_once_with_provenance(served):
    """A label, unsure and skip are stored as they are made, with model version and confidence."""
    _, c, store, results = served
    res = results.set_index("event_id")
    status, cur = c.json("GET", "/api/current")
    assert status == 200 and cur["done"] is False and cur["n_reviewed"] == 0
    first = cur["pulse"]["event_id"]
    assert first == XSS_ID                      # the renamed pulse is the queue's first
    note = "<script>alert('n')</script> & odd tail"
    status, cur = c.json("POST", "/api/decision", {"event_id": first, "action": "label",
                                                   "label": "recoil", "note": note})
    assert status == 200 and cur["n_reviewed"] == 1
    assert cur["last"] == {"event_id": first, "action": "label", "label": "recoil",
                           "note": note}
    second = cur["pulse"]["event_id"]
    with LabelStore(store) as s:                # written already, before any other request
        d = s.decisions()
    assert len(d) == 1
    row = d.iloc[0]
    assert (row["event_id"], row["label"], row["origin"], row["analyst"], row["note"]) == \
        (first, "recoil", "review", ANALYST, note)
    assert row["model_version"] == res.at[first, "model_version"] == "rules-4"
    assert_allclose(row["confidence"], res.at[first, "p_recoil"], rtol=1e-9)
    assert row["decided_at"].tzinfo is not None
    # a second click on the same pulse is refused (409), nothing more is written
    status, data = c.json("POST", "/api/decision", {"event_id": first, "action": "label",
                                                    "label": "recoil"})
    assert status == 409 and "not the pulse to decide now" in data["error"]
    status, cur = c.json("POST", "/api/decision", {"event_id": second, "action": "unsure",
                                                   "note": "overlapping pulses"})
    third = cur["pulse"]["event_id"]
    status, cur = c.json("POST", "/api/decision", {"event_id": third, "action": "skip"})
    assert cur["n_reviewed"] == 3
    with LabelStore(store) as s:
        marks = s.review_marks(analyst=ANALYST)
        assert len(s.decisions()) == 1
    assert marks[["event_id", "mark", "note"]].values.tolist() == [
        [second, "unsure", "overlapping pulses"], [third, "skip", None]]
    assert_allclose(marks["confidence"], [res.at[second, "confidence"],
                                          res.at[third, "confidence"]], rtol=1e-9)


def test_undo_withdraws_the_last_decision_without_deleting(served):
    """Undo of a label writes a retraction; undo of unsure a 'withdrawn' mark; the pulse returns."""
    _, c, store, _ = served
    first = c.json("GET", "/api/current")[1]["pulse"]["event_id"]
    _, cur = c.json("POST", "/api/decision", {"event_id": first, "action": "label",
                                              "label": "narrow_bipolar"})
    second = cur["pulse"]["event_id"]
    c.json("POST", "/api/decision", {"event_id": second, "action": "unsure"})
    status, cur = c.json("POST", "/api/undo", {})
    assert status == 200 and cur["pulse"]["event_id"] == second and cur["n_reviewed"] == 1
    status, cur = c.json("POST", "/api/undo", {})
    assert cur["pulse"]["event_id"] == first and cur["n_reviewed"] == 0 and cur["last"] is None
    status, data = c.json("POST", "/api/undo", {})
    assert status == 400 and "nothing to undo" in data["error"]
    with LabelStore(store) as s:
        d = s.decisions()
        assert d["origin"].tolist() == ["review", "retract"]
        assert s.current_labels(status="labelled").empty
        assert s.review_marks().empty
        assert s.review_marks(history=True)["mark"].tolist() == ["unsure", "withdrawn"]


def test_bad_decisions_are_refused_with_a_message(served):
    """Unknown class or action, a non-text note: 400 and nothing written."""
    _, c, store, _ = served
    eid = c.json("GET", "/api/current")[1]["pulse"]["event_id"]
    for body, msg in [({"event_id": eid, "action": "label", "label": "ball_lightning"},
                       "unknown class"),
                      ({"event_id": eid, "action": "delete"}, "action must be one of"),
                      ({"event_id": eid, "action": "skip", "note": 5}, "note must be text"),
                      ({"event_id": eid, "action": "skip", "note": "bell\x07"},
                       "control characters")]:
        status, data = c.json("POST", "/api/decision", body)
        assert status == 400 and msg in data["error"], body
    with LabelStore(store) as s:
        assert s.decisions().empty and s.review_marks(history=True).empty


def test_pulse_view_is_complete_and_strict_json(served):
    """The current pulse: its record, markers, view, sources, probabilities, features, queue parts."""
    _, c, _, results = served
    status, cur = c.json("GET", "/api/current")        # strict JSON: NaN would raise
    p = cur["pulse"]
    tr = p["trace"]
    assert len(tr["time_s"]) == len(tr["field_v_per_m"]) > 1000
    assert np.all(np.diff(tr["time_s"]) > 0)
    assert len(tr["vhf_time_s"]) == len(tr["vhf_envelope"]) > 1000
    # the extent is the features' (pulse_start_s .. pulse_end_s of the results row)
    res = results.set_index("event_id").loc[p["event_id"]]
    assert tr["extent_s"] == pytest.approx([res["pulse_start_s"], res["pulse_end_s"]],
                                           rel=1e-5, abs=1e-12)
    assert isinstance(tr["neighbours_s"], list)
    assert tr["time_s"][0] <= p["view_s"][0] < p["view_s"][1] <= tr["time_s"][-1]
    assert [m["kind"] for m in p["markers"]] == ["field_peak", "vhf_peak"]
    lag = results.set_index("event_id").at[p["event_id"], "vhf_field_lag_s"]
    assert_allclose(p["markers"][0]["t_s"] - p["markers"][1]["t_s"], lag, rtol=1e-9)
    probs = [q["p"] for q in p["model"]["probabilities"]]
    assert_allclose(sum(probs), 1.0, atol=1e-3)
    names = {f["name"] for f in p["features"]}
    assert {"width_s", "bipolarity", "speed_m_per_s", "motion_elevation_deg",
            "range_normalized_peak_v_per_m", "isolation_s", "channel_reuse"} <= names
    width = next(f for f in p["features"] if f["name"] == "width_s")
    raw = results.set_index("event_id").at[p["event_id"], "width_s"]
    assert width["unit"] == "µs"
    if np.isfinite(raw):
        assert_allclose(width["value"], raw * 1e6, rtol=1e-3)
    assert p["model"]["version"] == "rules-4"
    q = p["queue"]
    assert_allclose(q["priority"], q["uncertainty"] + q["novelty_weight"] * q["novelty_rank"],
                    rtol=1e-12)
    assert p["sources"]["position"] == "xyz" and len(p["sources"]["up_m"]) > 0
    assert [g["class"] for g in p["lookalikes"]] and p["why"] is None
    status, info = c.json("GET", "/api/session")
    assert set(info["reasons"]) >= set(p["model"]["review_reason"])
    assert any("priority = uncertainty + 0.5 x novelty rank" in line
               for line in info["priority_rule"])


def test_reopening_resumes_the_queue(triaged, tmp_path):
    """A new session on the same store leaves out what this analyst already decided."""
    cat_dir, out = triaged
    results, cat, store = read_results(out), open_catalog(cat_dir), tmp_path / "s.sqlite"
    s1 = ReviewSession(results, cat, store, ANALYST)
    ids = []
    for action in ("label", "unsure", "skip"):
        eid = s1.current()["pulse"]["event_id"]
        ids.append(eid)
        s1.decide(eid, action, label="stepped_leader" if action == "label" else None)
    s2 = ReviewSession(results, cat, store, ANALYST)
    assert s2.n_queued == s1.n_queued - 3 and not set(ids) & set(s2.queue["event_id"])
    # the rebuilt queue goes on as the first one would have
    assert s2.queue["event_id"].tolist() == s1.queue["event_id"].tolist()[3:]
    assert s2.current()["pulse"]["event_id"] == s1.current()["pulse"]["event_id"]
    assert len(ReviewSession(results, cat, store, ANALYST, budget=6).queue) == 6
    other = ReviewSession(results, cat, store, "tamsin")
    assert ids[0] not in set(other.queue["event_id"])      # labelled: gone for everyone
    assert ids[1] in set(other.queue["event_id"])          # unsure: only wren's mark


def test_lookalikes_come_from_the_stores_labelled_pulses(triaged, tmp_path):
    """In rules mode each class group lists this catalog's labelled pulses of that class, nearest first."""
    cat_dir, out = triaged
    results, cat, store = read_results(out), open_catalog(cat_dir), tmp_path / "s.sqlite"
    s = ReviewSession(results, cat, store, ANALYST)
    assert all(g["items"] == [] for g in s.current()["pulse"]["lookalikes"])
    decided = []
    for label in ("recoil", "narrow_bipolar", "stepped_leader", "recoil", "energetic_in_cloud",
                  "narrow_bipolar"):
        eid = s.current()["pulse"]["event_id"]
        decided.append((eid, label))
        s.decide(eid, "label", label=label)
    pulse = s.current()["pulse"]
    m = pulse["model"]
    wanted = lookalike_classes(m["prediction_set"], [(q["class"], q["p"]) for q in
                                                     m["probabilities"]])
    assert [g["class"] for g in pulse["lookalikes"]] == wanted
    # brute force over the labelled pulses, in the queue's standardised feature space
    z = standardised_features(results)
    rows = {e: i for i, e in enumerate(results["event_id"])}
    zi = z[rows[pulse["event_id"]]]
    for g in pulse["lookalikes"]:
        mine = [e for e, lab in decided if lab == g["class"]]
        d = {e: float(np.sqrt(np.mean((z[rows[e]] - zi) ** 2))) for e in mine}
        expect = sorted(mine, key=lambda e: d[e])[:3]
        assert [x["event_id"] for x in g["items"]] == expect
        assert all(x["label"] == g["class"] for x in g["items"])
        assert_allclose([x["distance"] for x in g["items"]], [d[e] for e in expect],
                        rtol=1e-9)
        for x in g["items"]:           # the analysed span, as the features saw it
            t = np.array(x["trace"]["time_s"])
            lo, hi = ANALYSIS_WINDOW_S
            assert t[0] >= lo - 1e-6 and t[-1] <= hi + 1e-6
            assert len(t) == len(x["trace"]["field_v_per_m"]) > 100


def test_review_command_refuses_bad_input_with_exit_2(triaged, tmp_path, capsys):
    """A results file of another catalog, or a missing one, exits 2 with a message."""
    cat_dir, out = triaged
    other = tmp_path / "other.csv"
    other.write_text(Path(out).read_text().replace("hollowmere-2031", "elsewhere-2040"))
    code = main(["review", str(other), "--catalog", str(cat_dir), "--store",
                 str(tmp_path / "s.sqlite"), "--analyst", ANALYST])
    assert code == 2
    assert "not of the catalog given" in capsys.readouterr().err
    code = main(["review", str(tmp_path / "absent.csv"), "--catalog", str(cat_dir),
                 "--analyst", ANALYST])
    assert code == 2


def _start_cli(args, env):
    proc = subprocess.Popen([sys.executable, "-m", "classify.cli", *args], env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            preexec_fn=_interruptible)
    lines = []
    deadline = time.monotonic() + 180
    while time.monotonic() < deadline:
        line = proc.stdout.readline()
        if not line:
            break
        lines.append(line)
        if line.startswith("open http"):
            return proc, lines
    proc.kill()
    raise AssertionError(f"no address printed: {lines} {proc.stderr.read()}")


def test_review_command_prints_the_address_and_warns_off_loopback(triaged, tmp_path):
    """The CLI serves until interrupted; a non-loopback --host prints a clear warning."""
    cat_dir, out = triaged
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[2]))
    base = ["review", str(out), "--catalog", str(cat_dir), "--store",
            str(tmp_path / "s.sqlite"), "--analyst", ANALYST, "--budget", "5"]
    proc, lines = _start_cli(base, env)
    url = lines[-1].split()[1]
    assert url.startswith("http://127.0.0.1:") and "?token=" in url
    assert "5 pulse(s) of hollowmere-2031 queued for wren" in "".join(lines)
    proc.send_signal(signal.SIGINT)
    stdout, stderr = proc.communicate(timeout=120)
    assert proc.returncode == 0, stderr
    assert "reviewed 0 of 5" in stdout and "WARNING" not in stderr
    proc, lines = _start_cli(base + ["--host", "0.0.0.0"], env)
    proc.send_signal(signal.SIGINT)
    stdout, stderr = proc.communicate(timeout=120)
    assert "WARNING: listening on 0.0.0.0, which is not a loopback address" in stderr


def test_lookalikes_come_from_the_model_per_class(tmp_path):
    """With a trained model: per class, its nearest labelled training pulses of THAT class.

    Checked against scikit-learn's ``nan_euclidean_distances`` in the model's
    standardised space (arcsinh of the robustly scaled features, its documented
    ``center_`` and ``scale_``), a reference implementation independent of the
    model's own distance code.
    """
    from sklearn.metrics.pairwise import nan_euclidean_distances

    from classify.review._lookalike import card_catalog_paths, find_model

    a, b, models = tmp_path / "hollowmere-2031", tmp_path / "hollowmere-2032", tmp_path / "m"
    store = tmp_path / "labels.sqlite"
    assert main(["-q", "simulate", str(a), "--events", "200", "--seed", "3",
                 "--field-samples", "5400", "--vhf-samples", "6750"]) == 0
    assert main(["-q", "labels", "import", f"{a}.labels.csv", "--catalog", str(a),
                 "--store", str(store)]) == 0
    assert main(["-q", "train", str(a), "--store", str(store), "--out", str(models / "m1"),
                 "--max-iter", "20"]) == 0
    assert main(["-q", "simulate", str(b), "--events", "150", "--seed", "4", "--preset",
                 "next", "--field-samples", "2700", "--vhf-samples", "6750"]) == 0
    out = tmp_path / "b.csv"
    assert main(["-q", "triage", str(b), "--model", "m1", "--registry", str(models),
                 "--out", str(out)]) == 0
    results = read_results(out)
    model, card = find_model(results, registry=models)        # from model_version "m1"
    assert card["version"] == "m1"
    assert find_model(results.assign(model_version="rules-4")) == (None, None)
    session = ReviewSession(results, open_catalog(b), tmp_path / "review.sqlite", ANALYST,
                            model=model, catalog_paths=card_catalog_paths(card))
    assert session.info()["lookalike_source"] == "model"
    assert session.n_queued == int(results["needs_review"].sum()) > 0
    pulse = session.current()["pulse"]
    m = pulse["model"]
    assert [g["class"] for g in pulse["lookalikes"]] == lookalike_classes(
        m["prediction_set"], [(q["class"], q["p"]) for q in m["probabilities"]])
    ref = model.reference_
    names = list(model.feature_names_in_)
    x = results.set_index("event_id").loc[[pulse["event_id"]], names].to_numpy(float)
    zx = np.arcsinh((x - model.center_) / model.scale_)
    zr = np.arcsinh((ref[names].to_numpy(float) - model.center_) / model.scale_)
    d = nan_euclidean_distances(zx, zr)[0]
    for g in pulse["lookalikes"]:
        of_class = np.flatnonzero(ref["label"].to_numpy() == g["class"])
        best = of_class[np.argsort(d[of_class], kind="stable")][:3]
        assert [x["event_id"] for x in g["items"]] == ref["event_id"].to_numpy()[best].tolist()
        assert_allclose([x["distance"] for x in g["items"]], d[best], rtol=1e-6)
        for x in g["items"]:
            assert x["catalog_id"] == "hollowmere-2031" and x["label"] == g["class"]
            assert len(x["trace"]["time_s"]) > 100              # catalog A opened by path


def _raw_exchange(port, data: bytes) -> bytes:
    """Send raw bytes on a fresh socket; everything the server answers until it closes."""
    with socket.create_connection(("127.0.0.1", port), timeout=20) as s:
        s.sendall(data)
        chunks = []
        while True:
            b = s.recv(65536)
            if not b:
                return b"".join(chunks)
            chunks.append(b)


def test_deeply_nested_body_is_refused_with_400_and_the_server_goes_on(served):
    """60 KB of nested arrays: 400 with a one-line message (not 500), nothing written."""
    server, c, store, _ = served
    eid = c.json("GET", "/api/current")[1]["pulse"]["event_id"]
    body = b"[" * 30_000 + b"]" * 30_000
    status, headers, data = c.request("POST", "/api/decision", raw=body,
                                      headers={"Content-Type": "application/json"})
    assert status == 400 and headers["Content-Type"].startswith("application/json")
    assert json.loads(data) == {"error": f"body nested deeper than {MAX_JSON_DEPTH} levels"}
    # the same inside an object that is otherwise a valid decision
    deep = "[" * 40 + "]" * 40
    nested = f'{{"event_id": {json.dumps(eid)}, "action": "skip", "note": {deep}}}'
    status, _, data = c.request("POST", "/api/decision", raw=nested.encode(),
                                headers={"Content-Type": "application/json"})
    assert status == 400 and b"nested deeper" in data
    # brackets inside strings do not count; a shallow body still works
    status, cur = c.json("POST", "/api/decision", {"event_id": eid, "action": "skip",
                                                   "note": "[" * 100})
    assert status == 200 and cur["n_reviewed"] == 1
    with LabelStore(store) as s:
        assert s.review_marks()["note"].tolist() == ["[" * 100]


def test_json_depth_counts_brackets_outside_strings():
    """The depth scan skips strings (escaped quotes included) and counts arrays and objects."""
    assert json_depth("{}") == 1 and json_depth("1") == 0 and json_depth("") == 0
    assert json_depth('[[1], {"a": [2]}]') == 3
    assert json_depth(r'{"a": "\"[[[[", "b": [[]]}') == 3
    assert json_depth("[" * 5000) == 5000


def test_malformed_requests_get_a_status_and_a_short_json_message(served):
    """http.server's own refusals answer with a status line and one line of JSON, no traceback."""
    server, _, _, _ = served
    for raw, code in [(b"GARBAGE\r\n\r\n", 400),
                      (b"GET / HTTP/7.0\r\n\r\n", 505),
                      (b"GET /" + b"a" * 70_000 + b" HTTP/1.1\r\n\r\n", 414),
                      (b"PATCH /api/session HTTP/1.1\r\nHost: x\r\n\r\n", 501)]:
        answer = _raw_exchange(server.port, raw)
        head, _, body = answer.partition(b"\r\n\r\n")
        assert head.startswith(b"HTTP/1.") and int(head.split()[1]) == code, (raw[:20], head)
        msg = json.loads(body)["error"]
        assert msg and "\n" not in msg and "Traceback" not in msg
        assert b"Content-Security-Policy" in head


def test_two_hundred_concurrent_connections_are_all_answered(served):
    """200 clients connecting at the same moment all get an answer (listen backlog 128)."""
    server, c, _, _ = served
    assert server.request_queue_size == LISTEN_BACKLOG >= 128
    n = 200
    barrier = threading.Barrier(n)
    request = (f"GET /api/session HTTP/1.1\r\nHost: 127.0.0.1:{server.port}\r\n"
               f"{TOKEN_HEADER}: {server.token}\r\nConnection: close\r\n\r\n").encode()

    def one(_):
        barrier.wait()
        try:
            answer = _raw_exchange(server.port, request)
        except OSError as exc:  # refused, reset or no answer within the socket timeout
            return repr(exc)
        return answer.split(b"\r\n", 1)[0].decode()

    with ThreadPoolExecutor(n) as pool:
        statuses = list(pool.map(one, range(n)))
    assert statuses == ["HTTP/1.1 200 OK"] * n, Counter(statuses)


def test_class_buttons_and_lookalikes_follow_the_store_classes(triaged, tmp_path):
    """After a rename and a hide, the page offers the store's visible classes in order, and
    the rules' 'recoil' look-alikes (store mode) are the pulses labelled under 'k_change'."""
    cat_dir, out = triaged
    results, cat = read_results(out), open_catalog(cat_dir)
    store = tmp_path / "labels.sqlite"
    first = ReviewSession(results, cat, store, ANALYST)
    eid = first.current()["pulse"]["event_id"]
    first.decide(eid, "label", "recoil")
    with LabelStore(store) as s:
        s.add_class("return_stroke", "CG return stroke", analyst=ANALYST)
        s.rename_class("recoil", "k_change", analyst=ANALYST)
        s.hide_class("energetic_in_cloud")
    session = ReviewSession(results, cat, store, ANALYST)
    assert [(c["name"], c["key"]) for c in session.info()["classes"]] == [
        ("narrow_bipolar", "1"), ("stepped_leader", "2"), ("k_change", "3"),
        ("return_stroke", "4")]
    seen = 0
    for i in range(min(25, session.n_queued)):
        groups = {g["class"]: g for g in session._view(i)["lookalikes"]}
        assert "recoil" not in groups  # the rules' class, shown under its store name
        if "k_change" in groups:
            assert [it["event_id"] for it in groups["k_change"]["items"]] == [eid]
            seen += 1
    assert seen > 0
    with pytest.raises(ValueError, match="unknown class 'recoil'"):
        session.decide(session.current()["pulse"]["event_id"], "label", "recoil")
