// pulsesort review page. Plain JavaScript, no libraries, nothing fetched from outside.
// Every text from the server is shown with textContent (never parsed as HTML); the plots
// are SVG elements drawn by views.js and plot.js from the numbers of the JSON answers.
// This file holds the page's state: the pulse on screen, the time axis shown (zoom and
// pan), the decisions, the keys and the help.
"use strict";

(function () {
  const P = window.PulsePlot;
  const V = window.PulseViews;
  const token = new URLSearchParams(window.location.search).get("token") || "";
  const state = { session: null, current: null, busy: false, classKeys: {}, view: null,
                  series: null, src: null, frames: new WeakMap(),
                  lookPlots: [], drag: null, helpOpen: false, lastFocus: null };
  const US = V.US;
  const ZOOM_STEP = 1.5;

  function $(id) { return document.getElementById(id); }

  const setText = V.setText;
  const el = V.el;
  const fmt = V.fmt;
  const fixed = V.fixed;

  function setPending(on) {
    state.busy = on;
    document.body.dataset.pending = on ? "1" : "0";
  }

  function showMessage(msg) {
    const m = $("message");
    setText(m, msg);
    m.hidden = !msg;
  }

  async function api(method, path, body) {
    const opts = { method: method, headers: { "X-Review-Token": token }, cache: "no-store",
                   credentials: "same-origin" };
    if (body !== undefined) {
      opts.headers["Content-Type"] = "application/json";
      opts.body = JSON.stringify(body);
    }
    const r = await fetch(path, opts);
    let data = null;
    try { data = await r.json(); } catch (e) { data = null; }
    if (!r.ok) { throw new Error((data && data.error) || ("HTTP " + r.status)); }
    return data;
  }

  // ------------------------------------------------------------------ view

  // Show [a, b] µs, kept inside the record and no narrower than ten field samples.
  function setView(a, b) {
    const full = state.series.full;
    const w = Math.min(Math.max(b - a, state.series.minWidth), full[1] - full[0]);
    let lo = a;
    let hi = b;
    if (w !== b - a) {
      const c = (a + b) / 2;
      lo = c - w / 2;
      hi = c + w / 2;
    }
    if (lo < full[0]) { lo = full[0]; hi = lo + w; }
    if (hi > full[1]) { hi = full[1]; lo = hi - w; }
    state.view = [lo, hi];
    drawTimePlots();
  }

  function zoom(factor, centre) {
    if (!state.view) { return; }
    const a = state.view[0];
    const b = state.view[1];
    const c = centre == null ? (a + b) / 2 : centre;
    setView(c - (c - a) * factor, c + (b - c) * factor);
  }

  function pan(frac) {
    if (!state.view) { return; }
    const d = (state.view[1] - state.view[0]) * frac;
    setView(state.view[0] + d, state.view[1] + d);
  }

  function resetView() {
    if (state.series) { setView(state.series.defaultView[0], state.series.defaultView[1]); }
  }

  // ------------------------------------------------------------------ time plots

  // The frame of a plot, for the pointer; its time range and plot box as data attributes.
  function remember(container, f) {
    state.frames.set(container, f);
    container.dataset.t0Us = String(f.xlim[0]);
    container.dataset.t1Us = String(f.xlim[1]);
    container.dataset.plotLeft = String(f.left);
    container.dataset.plotRight = String(f.right);
  }

  function drawTimePlots() {
    const s = state.series;
    if (!s) { return; }
    const v = state.view;
    remember($("plot-field"), V.drawField($("plot-field"), s, v));
    const vhf = V.drawVhf($("plot-vhf"), s, v);
    if (vhf) { remember($("plot-vhf"), vhf); }
    state.frames.set($("plot-overview"), V.drawOverview($("plot-overview"), s, v));
    for (const lp of state.lookPlots) {
      remember(lp.container, V.drawLookalike(lp.container, lp, v));
    }
    V.drawAltitude($("plot-altitude"), state.src, v);
    const w = v[1] - v[0];
    setText($("view-range"), fixed(v[0], 2) + " to " + fixed(v[1], 2) +
            " µs (" + P.fmtTick(w, w / 10) + " µs shown)");
  }

  // ------------------------------------------------------------------ side panels

  function renderFeatures(rows) {
    const body = $("feature-rows");
    body.replaceChildren();
    for (const f of rows) {
      const tr = el("tr");
      tr.appendChild(el("th", null, f.label));
      tr.appendChild(el("td", "num", f.value == null ? "n/a" : String(f.value)));
      tr.appendChild(el("td", "unit", f.unit));
      body.appendChild(tr);
    }
  }

  function renderQueue(p) {
    const ul = $("review-reason");
    ul.replaceChildren();
    const words = (state.session && state.session.reasons) || {};
    const why = p.model.review_why || [];
    p.model.review_reason.forEach((r, i) => {
      // this pulse's own reason in words (from the triage), else the reason's meaning
      const li = el("li");
      li.appendChild(el("b", null, r.replace(/_/g, " ")));
      const text = why.length === p.model.review_reason.length ? why[i] : words[r];
      if (text) { li.appendChild(el("span", "reason-text", ": " + text)); }
      ul.appendChild(li);
    });
    if (!p.model.review_reason.length) { ul.appendChild(el("li", null, "n/a")); }
    const q = p.queue || {};
    let line = "queue rank " + p.queue_rank + " of " + state.current.n_queued;
    if (q.priority != null) {
      line += " · priority " + fixed(q.priority, 2) + " = " + fixed(q.uncertainty, 2) +
        " uncertainty + " + fixed(q.novelty_part, 2) + " novelty (" + q.novelty_weight +
        " × novelty rank " + fixed(q.novelty_rank, 2) + ")";
    }
    setText($("queue-rank"), line);
  }

  function renderLookalikes(groups) {
    const box = $("lookalike-groups");
    box.replaceChildren();
    state.lookPlots = [];
    const any = groups.some(function (g) { return g.items.length > 0; });
    if (!any) {
      box.appendChild(el("p", "empty", "No labelled pulses of these classes to compare with yet."));
      return;
    }
    const pset = state.current.pulse.model.prediction_set;
    for (const g of groups) {
      const sec = el("div", "la-group");
      const h = el("h3", null, g["class"]);
      h.appendChild(el("span", "la-why", pset.indexOf(g["class"]) >= 0 ?
        " in the prediction set" : " among the two most probable classes"));
      sec.appendChild(h);
      const row = el("div", "la-row");
      if (!g.items.length) { row.appendChild(el("p", "empty", "no labelled pulse of this class")); }
      for (const item of g.items) {
        const card = el("figure", "lookalike");
        if (item.trace) {
          const plot = el("div", "plot la-plot time-plot");
          card.appendChild(plot);
          state.lookPlots.push({ container: plot, t: V.toArray(item.trace.time_s, US),
                                 y: V.toArray(item.trace.field_v_per_m) });
          attachTimeControls(plot);
        } else {
          card.appendChild(el("p", "empty", "record not available (its catalog is not here)"));
        }
        const cap = el("figcaption");
        cap.appendChild(el("b", "label", item.label));
        cap.appendChild(el("span", "eid", item.event_id));
        cap.appendChild(el("span", "dist", "distance " + fmt(item.distance, 2)));
        if (item.catalog_id !== state.session.catalog_id) {
          cap.appendChild(el("span", "cat", item.catalog_id));
        }
        card.appendChild(cap);
        row.appendChild(card);
      }
      sec.appendChild(row);
      box.appendChild(sec);
    }
  }

  function renderLast(last) {
    const p = $("last");
    if (!last) { setText(p, "no decision yet in this session"); return; }
    const what = last.action === "label" ? last.label : last.action;
    let line = "last decision: " + last.event_id + " \u2192 " + what;
    if (last.note) { line += " (note: " + last.note + ")"; }
    setText(p, line + "  [z to undo]");
  }

  function render(cur) {
    state.current = cur;
    setText($("counter"), "reviewed " + cur.n_reviewed + " / queued " + cur.n_queued);
    renderLast(cur.last);
    if (cur.done) {
      $("main").hidden = true;
      $("done").hidden = false;
      document.body.dataset.event = "";
      state.series = null;
      return;
    }
    $("done").hidden = true;
    $("main").hidden = false;
    const p = cur.pulse;
    document.body.dataset.event = p.event_id;
    setText($("event-id"), p.event_id);
    setText($("event-time"), p.time_utc);
    setText($("flash-id"), p.flash_id || "none");
    const m = p.model;
    setText($("model-version"), m.version || "n/a");
    setText($("model-label"), m.label || "n/a");
    setText($("model-confidence"), m.confidence == null ? "" :
      "(confidence " + fmt(m.confidence, 3) + ")");
    setText($("prediction-set"), m.prediction_set.length ? m.prediction_set.join(", ") :
      "empty");
    setText($("novelty"), (m.novel ? "NOVEL, " : "") + "score " + fmt(m.novelty_score, 3));
    renderQueue(p);
    const notes = $("notes");
    notes.replaceChildren();
    for (const n of p.notes) { notes.appendChild(el("li", null, n)); }
    renderFeatures(p.features);
    state.series = V.prepareSeries(p);
    state.view = state.series.defaultView.slice();
    state.src = V.prepareSources(p);
    V.renderLegend($("legend-field"), state.series, p);
    renderLookalikes(p.lookalikes);
    drawAll();
  }

  function drawAll() {
    if (!state.current || state.current.done) { return; }
    V.renderProbabilities($("plot-probabilities"), state.current.pulse.model);
    V.drawSources(state.src);
    drawTimePlots();
    V.renderWhy(state.current.pulse);
  }

  // ------------------------------------------------------------------ decisions

  async function run(action) {
    if (state.busy) { return; }
    setPending(true);
    try {
      render(await action());
      showMessage("");
    } catch (err) {
      showMessage(err.message);
    } finally {
      setPending(false);
    }
  }

  function decide(action, label) {
    const cur = state.current;
    if (!cur || cur.done) { return; }
    const note = $("note").value;
    run(async function () {
      const out = await api("POST", "/api/decision", {
        event_id: cur.pulse.event_id, action: action, label: label || null, note: note });
      $("note").value = "";
      return out;
    });
  }

  function undo() {
    run(function () { return api("POST", "/api/undo", {}); });
  }

  function buildButtons(classes) {
    const box = $("class-buttons");
    box.replaceChildren();
    for (const c of classes) {
      const b = el("button", "class-button");
      b.type = "button";
      if (c.key) {
        b.appendChild(el("kbd", null, c.key));
        state.classKeys[c.key] = c.name;
      }
      b.appendChild(document.createTextNode(" " + c.name));
      b.addEventListener("click", function () { decide("label", c.name); });
      box.appendChild(b);
    }
  }

  // ------------------------------------------------------------------ help

  function buildHelp(s) {
    const keys = $("help-keys");
    for (const c of s.classes.slice().reverse()) {
      if (!c.key) { continue; }
      const tr = el("tr");
      const th = el("th");
      th.appendChild(el("kbd", null, c.key));
      tr.appendChild(th);
      tr.appendChild(el("td", null, "label the pulse " + c.name));
      keys.insertBefore(tr, keys.firstChild);
    }
    const dl = $("help-reasons");
    dl.replaceChildren();
    for (const code of Object.keys(s.reasons || {})) {
      dl.appendChild(el("dt", null, code.replace(/_/g, " ")));
      dl.appendChild(el("dd", null, s.reasons[code]));
    }
    const ul = $("help-priority");
    ul.replaceChildren();
    for (const line of s.priority_rule || []) { ul.appendChild(el("li", null, line)); }
  }

  function openHelp() {
    state.lastFocus = document.activeElement;
    $("help").hidden = false;
    state.helpOpen = true;
    document.body.dataset.help = "1";
    $("help-close").focus();
  }

  function closeHelp() {
    $("help").hidden = true;
    state.helpOpen = false;
    document.body.dataset.help = "0";
    if (state.lastFocus && state.lastFocus.focus) { state.lastFocus.focus(); }
  }

  // ------------------------------------------------------------------ input

  function attachTimeControls(container) {
    container.addEventListener("wheel", function (ev) {
      const f = state.frames.get(container);
      if (!f || !state.view) { return; }
      ev.preventDefault();
      const r = container.getBoundingClientRect();
      const centre = f.xinv(ev.clientX - r.left);
      zoom(ev.deltaY > 0 ? ZOOM_STEP : 1 / ZOOM_STEP, centre);
    }, { passive: false });
    container.addEventListener("pointerdown", function (ev) {
      const f = state.frames.get(container);
      if (!f || ev.button !== 0) { return; }
      state.drag = { x: ev.clientX, view: state.view.slice(), px: f.right - f.left };
      container.setPointerCapture(ev.pointerId);
    });
    container.addEventListener("pointermove", function (ev) {
      const d = state.drag;
      if (!d) { return; }
      const shift = -(ev.clientX - d.x) / d.px * (d.view[1] - d.view[0]);
      setView(d.view[0] + shift, d.view[1] + shift);
    });
    const stop = function () { state.drag = null; };
    container.addEventListener("pointerup", stop);
    container.addEventListener("pointercancel", stop);
  }

  function onOverviewClick(ev) {
    const c = $("plot-overview");
    const f = state.frames.get(c);
    if (!f || !state.view) { return; }
    const t = f.xinv(ev.clientX - c.getBoundingClientRect().left);
    const w = state.view[1] - state.view[0];
    setView(t - w / 2, t + w / 2);
  }

  function onKey(ev) {
    if (ev.ctrlKey || ev.metaKey || ev.altKey) { return; }
    const k = ev.key;
    if (state.helpOpen) {
      if (k === "Escape" || k === "?") { closeHelp(); ev.preventDefault(); }
      return;
    }
    const inNote = ev.target && ev.target.id === "note";
    if (inNote) {
      if (k === "Escape") { ev.target.blur(); ev.preventDefault(); }
      return;
    }
    if (k === "?") { openHelp(); }
    else if (state.classKeys[k]) { decide("label", state.classKeys[k]); }
    else if (k === "u" || k === "U") { decide("unsure"); }
    else if (k === "s" || k === "S") { decide("skip"); }
    else if (k === "z" || k === "Z" || k === "Backspace") { undo(); }
    else if (k === "+" || k === "=") { zoom(1 / ZOOM_STEP); }
    else if (k === "-" || k === "_") { zoom(ZOOM_STEP); }
    else if (k === "ArrowLeft") { pan(-0.25); }
    else if (k === "ArrowRight") { pan(0.25); }
    else if (k === "0") { resetView(); }
    else { return; }
    ev.preventDefault();
  }

  let resizePending = false;
  function onResize() {
    if (resizePending) { return; }
    resizePending = true;
    window.requestAnimationFrame(function () { resizePending = false; drawAll(); });
  }

  async function start() {
    $("btn-help").addEventListener("click", openHelp);
    $("help-close").addEventListener("click", closeHelp);
    $("help").addEventListener("click", function (ev) { if (ev.target === $("help")) { closeHelp(); } });
    document.addEventListener("keydown", onKey);
    if (!token) {
      showMessage("This address has no session token: open the address printed by " +
                  "'pulsesort review'.");
      setPending(false);
      return;
    }
    setPending(true);
    try {
      const s = await api("GET", "/api/session");
      state.session = s;
      setText($("catalog-id"), s.catalog_id);
      setText($("analyst"), s.analyst);
      setText($("lookalike-source"), s.lookalike_source === "model" ?
        "(nearest labelled training pulses of the model, per class)" :
        "(nearest labelled pulses of this catalog, per class)");
      buildButtons(s.classes);
      buildHelp(s);
      render(await api("GET", "/api/current"));
    } catch (err) {
      showMessage(err.message);
    } finally {
      setPending(false);
    }
    $("btn-unsure").addEventListener("click", function () { decide("unsure"); });
    $("btn-skip").addEventListener("click", function () { decide("skip"); });
    $("btn-undo").addEventListener("click", undo);
    $("zoom-in").addEventListener("click", function () { zoom(1 / ZOOM_STEP); });
    $("zoom-out").addEventListener("click", function () { zoom(ZOOM_STEP); });
    $("pan-left").addEventListener("click", function () { pan(-0.25); });
    $("pan-right").addEventListener("click", function () { pan(0.25); });
    $("zoom-reset").addEventListener("click", resetView);
    attachTimeControls($("plot-field"));
    attachTimeControls($("plot-vhf"));
    $("plot-overview").addEventListener("click", onOverviewClick);
    window.addEventListener("resize", onResize);
  }

  document.addEventListener("DOMContentLoaded", start);
})();
