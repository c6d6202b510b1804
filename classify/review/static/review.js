// pulsesort review page. Plain JavaScript, no libraries, nothing fetched from outside.
// Every text from the server is shown with textContent (never parsed as HTML); the plots
// are SVG elements drawn by plot.js from the numbers of the JSON answers.
"use strict";

(function () {
  const P = window.PulsePlot;
  const token = new URLSearchParams(window.location.search).get("token") || "";
  const state = { session: null, current: null, busy: false, classKeys: {}, view: null,
                  full: null, minWidth: 0, series: null, frames: new WeakMap(),
                  lookPlots: [], drag: null, helpOpen: false, lastFocus: null };
  const US = 1e6;           // seconds -> microseconds (display only)
  const VHF_FLOOR_DB = 60;  // VHF power is shown down to this far below its record's peak
  const ZOOM_STEP = 1.5;
  const COLOURS = { field_peak: "#D55E00", vhf_peak: "#009E73", trace: "#0072B2",
                    neighbour: "#2E8B57" };

  function $(id) { return document.getElementById(id); }

  function setText(node, value) { node.textContent = value == null ? "" : String(value); }

  function el(tag, cls, textValue) {
    const e = document.createElement(tag);
    if (cls) { e.className = cls; }
    if (textValue != null) { e.textContent = String(textValue); }
    return e;
  }

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

  function fmt(v, digits) {
    if (v == null) { return "n/a"; }
    return Number(v).toPrecision(digits || 3);
  }

  function fixed(v, d) { return v == null ? "n/a" : Number(v).toFixed(d); }

  function toArray(list, scale) {
    const a = new Float64Array(list ? list.length : 0);
    for (let i = 0; i < a.length; i++) {
      const v = list[i];
      a[i] = v == null ? NaN : v * (scale || 1);
    }
    return a;
  }

  // ------------------------------------------------------------------ series and view

  function prepareSeries(p) {
    const tr = p.trace;
    const s = { ft: toArray(tr.time_s, US), fy: toArray(tr.field_v_per_m), vt: null, vdb: null,
                extent: tr.extent_s ? [tr.extent_s[0] * US, tr.extent_s[1] * US] : null,
                nt: toArray(tr.neighbours_s, US), markers: [] };
    if (tr.vhf_time_s && tr.vhf_envelope) {
      const env = toArray(tr.vhf_envelope);
      let peak = 0;
      for (const v of env) { if (v > peak) { peak = v; } }
      const floor = peak * Math.pow(10, -VHF_FLOOR_DB / 10);
      s.vt = toArray(tr.vhf_time_s, US);
      s.vdb = env.map(function (v) {
        return isFinite(v) && peak > 0 ? 10 * Math.log10(Math.max(v, floor)) : NaN;
      });
    }
    for (const m of p.markers) {
      if (m.t_s != null) { s.markers.push({ kind: m.kind, label: m.label, t: m.t_s * US }); }
    }
    const ends = [s.ft[0], s.ft[s.ft.length - 1]];
    if (s.vt && s.vt.length) { ends.push(s.vt[0], s.vt[s.vt.length - 1]); }
    state.full = [Math.min(...ends), Math.max(...ends)];
    state.minWidth = s.ft.length > 1 ? 10 * (s.ft[1] - s.ft[0]) : 0.1;
    state.defaultView = [p.view_s[0] * US, p.view_s[1] * US];
    state.view = state.defaultView.slice();
    state.series = s;
  }

  // Show [a, b] µs, kept inside the record and no narrower than ten field samples.
  function setView(a, b) {
    const full = state.full;
    const w = Math.min(Math.max(b - a, state.minWidth), full[1] - full[0]);
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
    if (state.defaultView) { setView(state.defaultView[0], state.defaultView[1]); }
  }

  // ------------------------------------------------------------------ time plots

  function markTimes(f, s, withNeighbours, withMarkers) {
    if (s.extent) {
      P.band(f, s.extent[0], s.extent[1], { class: "extent", fill: "#F0B27A",
                                           "fill-opacity": 0.35 });
    }
    if (withNeighbours) {
      for (const t of s.nt) {
        if (!(t >= f.xlim[0] && t <= f.xlim[1])) { continue; }
        const x = f.x(t).toFixed(1);
        P.el("line", { class: "neighbour", x1: x, x2: x, y1: f.top, y2: f.top + 10,
                       stroke: COLOURS.neighbour, "stroke-width": 2 }, f.data);
        P.el("line", { x1: x, x2: x, y1: f.bottom - 10, y2: f.bottom,
                       stroke: COLOURS.neighbour, "stroke-width": 2 }, f.data);
      }
    }
    for (const m of withMarkers === false ? [] : s.markers) {
      P.vline(f, m.t, { class: "marker marker-" + m.kind, stroke: COLOURS[m.kind] || "#888",
                        "stroke-dasharray": "5 3", "stroke-width": 1.4 });
    }
  }

  // The frame of a plot, for the pointer; its time range and plot box as data attributes.
  function remember(container, f) {
    state.frames.set(container, f);
    container.dataset.t0Us = String(f.xlim[0]);
    container.dataset.t1Us = String(f.xlim[1]);
    container.dataset.plotLeft = String(f.left);
    container.dataset.plotRight = String(f.right);
  }

  function drawField() {
    const s = state.series;
    const v = state.view;
    const c = $("plot-field");
    const f = P.frame(c, { xlim: v, ylim: P.padded(P.range(s.ft, s.fy, v[0], v[1]), 0.08),
                           yLabel: ["E (V/m), physics convention: + = field vector up",
                                    "E (V/m), + = field vector up", "E (V/m)"],
                           title: "field change versus time" });
    markTimes(f, s, true);
    P.hline(f, 0, { stroke: "#bbb" });
    P.line(f, s.ft, s.fy, { class: "trace", stroke: COLOURS.trace });
    remember(c, f);
  }

  function drawVhf() {
    const s = state.series;
    const v = state.view;
    const c = $("plot-vhf");
    if (!s.vt) { c.hidden = true; c.replaceChildren(); return; }
    c.hidden = false;
    const f = P.frame(c, { xlim: v, ylim: P.padded(P.range(s.vt, s.vdb, v[0], v[1]), 0.08),
                           xLabel: "time from trigger (µs)",
                           yLabel: "VHF power (dB, catalog units)",
                           title: "VHF power versus time" });
    markTimes(f, s, false);
    P.line(f, s.vt, s.vdb, { class: "trace", stroke: "#444" });
    remember(c, f);
  }

  function drawOverview() {
    const s = state.series;
    const c = $("plot-overview");
    const full = state.full;
    const f = P.frame(c, { xlim: full, ylim: P.padded(P.range(s.ft, s.fy, full[0], full[1])),
                           title: "whole record" });
    P.band(f, state.view[0], state.view[1], { class: "view-band", fill: "#0072B2",
                                              "fill-opacity": 0.14 });
    markTimes(f, s, true, false);
    P.line(f, s.ft, s.fy, { stroke: COLOURS.trace, "stroke-width": 1 });
    state.frames.set(c, f);
  }

  function drawLookalikes() {
    const v = state.view;
    for (const lp of state.lookPlots) {
      const f = P.frame(lp.container, { xlim: v, ylim: P.padded(P.range(lp.t, lp.y, v[0], v[1]),
                                                                0.08),
                                        xLabel: ["time from trigger (µs)", "time (µs)"],
                                        yLabel: "E (V/m)",
                                        title: "field change of a labelled look-alike" });
      P.hline(f, 0, { stroke: "#bbb" });
      P.line(f, lp.t, lp.y, { class: "trace", stroke: COLOURS.trace });
      remember(lp.container, f);
    }
  }

  function drawTimePlots() {
    if (!state.series) { return; }
    drawField();
    drawVhf();
    drawOverview();
    drawLookalikes();
    drawAltitude();
    const w = state.view[1] - state.view[0];
    setText($("view-range"), fixed(state.view[0], 2) + " to " + fixed(state.view[1], 2) +
            " µs (" + P.fmtTick(w, w / 10) + " µs shown)");
  }

  // ------------------------------------------------------------------ legends

  function legendItem(list, swatch, label) {
    const li = el("li");
    li.appendChild(el("span", "swatch " + swatch));
    li.appendChild(el("span", "legend-text", label));
    list.appendChild(li);
  }

  function renderLegend(p) {
    const s = state.series;
    const ul = $("legend-field");
    ul.replaceChildren();
    legendItem(ul, "sw-trace", "E field");
    if (s.vt) { legendItem(ul, "sw-vhf", "VHF power"); }
    for (const m of s.markers) { legendItem(ul, "sw-" + m.kind, m.label); }
    legendItem(ul, "sw-extent", s.extent ? "pulse extent" : "pulse extent: not available");
    if (s.nt.length) { legendItem(ul, "sw-neighbour", "other pulses in the record (" +
                                  s.nt.length + ")"); }
    if (p.model.vhf_lag_s != null) { legendItem(ul, "sw-none", p.model.vhf_lag_text); }
  }

  // ------------------------------------------------------------------ sources

  function unwrapAzimuth(az) {
    const finite = az.filter(function (v) { return isFinite(v); });
    if (!finite.length) { return az; }
    const lo = Math.min(...finite);
    const hi = Math.max(...finite);
    if (hi - lo <= 180) { return az; }
    return az.map(function (v) { return v < 180 ? v + 360 : v; });
  }

  function limitsOf(arrays) {
    let lo = Infinity;
    let hi = -Infinity;
    for (const a of arrays) {
      for (const v of a) { if (isFinite(v)) { lo = Math.min(lo, v); hi = Math.max(hi, v); } }
    }
    return lo <= hi ? [lo, hi] : null;
  }

  function prepareSources(p) {
    const s = p.sources;
    if (!s) { state.src = null; return; }
    const t = toArray(s.t_s, US);
    const lim = limitsOf([t]);
    const span = lim[1] - lim[0];
    const colours = Array.from(t, function (v) {
      return P.timeColour(span > 0 ? (v - lim[0]) / span : 0);
    });
    const e = s.earlier;
    state.src = {
      t: t, tlim: lim, colours: colours, position: s.position,
      az: toArray(s.azimuth_deg), el: toArray(s.elevation_deg),
      east: toArray(s.east_m, 1e-3), north: toArray(s.north_m, 1e-3), up: toArray(s.up_m, 1e-3),
      earlier: e ? { az: toArray(e.azimuth_deg), el: toArray(e.elevation_deg),
                     east: toArray(e.east_m, 1e-3), north: toArray(e.north_m, 1e-3),
                     age: toArray(e.age_s, 1e3), n_pulses: e.n_pulses,
                     n_sources: e.n_sources } : null,
    };
  }

  function drawAltitude() {
    const s = state.src;
    const c = $("plot-altitude");
    if (!s || !s.position) { c.hidden = true; c.replaceChildren(); return; }
    c.hidden = false;
    const f = P.frame(c, { xlim: P.padded(s.tlim, 0.05), ylim: P.padded(limitsOf([s.up]), 0.1),
                           xLabel: ["time from trigger (µs)", "time (µs)"],
                           yLabel: "altitude (km)", title: "source altitude versus time" });
    P.band(f, state.view[0], state.view[1], { class: "view-band", fill: "#0072B2",
                                              "fill-opacity": 0.08 });
    P.dots(f, s.t, s.up, s.colours, { class: "own" });
    state.frames.set(c, f);
  }

  function drawSourcePlots() {
    const s = state.src;
    const box = $("sources");
    if (!s) {
      for (const id of ["plot-altitude", "plot-plan", "plot-elevation", "plot-sky",
                        "src-colourbar"]) { $(id).hidden = true; $(id).replaceChildren(); }
      const ul = $("legend-sources");
      ul.replaceChildren(el("li", "empty", "no mapped sources for this pulse"));
      box.classList.add("empty-sources");
      return;
    }
    box.classList.remove("empty-sources");
    $("src-colourbar").hidden = false;
    P.colourBar($("src-colourbar"), s.tlim[0], s.tlim[1],
                "colour: source time from trigger (µs)");
    const e = s.earlier;
    drawAltitude();
    const plan = $("plot-plan");
    const elev = $("plot-elevation");
    if (s.position) {
      plan.hidden = false;
      elev.hidden = true;
      elev.replaceChildren();
      const ex = e ? [s.east, e.east] : [s.east];
      const ny = e ? [s.north, e.north] : [s.north];
      const f = P.frame(plan, { xlim: P.padded(limitsOf(ex), 0.1),
                                ylim: P.padded(limitsOf(ny), 0.1), equal: true,
                                xLabel: ["east of the station (km)", "east (km)"],
                                yLabel: ["north of the station (km)", "north (km)"],
                                title: "plan view of the sources" });
      if (e) { P.dots(f, e.east, e.north, null, { class: "earlier", r: 2.2, fill: "#777", "fill-opacity": 0.35 }); }
      P.dots(f, s.east, s.north, s.colours, { class: "own" });
      state.frames.set(plan, f);
    } else {
      plan.hidden = true;
      plan.replaceChildren();
      elev.hidden = false;
      const f = P.frame(elev, { xlim: P.padded(s.tlim, 0.05), ylim: P.padded(limitsOf([s.el]), 0.1),
                                xLabel: ["time from trigger (µs)", "time (µs)"],
                                yLabel: "elevation (deg)",
                                title: "source elevation versus time" });
      P.dots(f, s.t, s.el, s.colours, { class: "own" });
    }
    const allAz = unwrapAzimuth(e ? Array.from(s.az).concat(Array.from(e.az)) : Array.from(s.az));
    const az = allAz.slice(0, s.az.length);
    const eaz = allAz.slice(s.az.length);
    const sky = P.frame($("plot-sky"), {
      xlim: P.padded(limitsOf([az, eaz]), 0.1),
      ylim: P.padded(limitsOf(e ? [s.el, e.el] : [s.el]), 0.1),
      xLabel: ["azimuth (deg, clockwise from north)", "azimuth (deg)"],
      yLabel: "elevation (deg)",
      title: "sources on the sky" });
    $("plot-sky").hidden = false;
    if (e) { P.dots(sky, eaz, e.el, null, { class: "earlier", r: 2.2, fill: "#777", "fill-opacity": 0.35 }); }
    P.dots(sky, az, s.el, s.colours, { class: "own" });
    const ul = $("legend-sources");
    ul.replaceChildren();
    legendItem(ul, "sw-own", "this pulse: " + s.t.length + " sources, coloured by time");
    if (e) {
      const ages = limitsOf([e.age]);
      const when = ages[0] > 0 ? fixed(ages[0], 1) + " to " + fixed(ages[1], 1) + " ms before"
        : "within the " + fixed(ages[1], 1) + " ms before";
      legendItem(ul, "sw-earlier", "mapped earlier in the flash: " + e.n_sources +
                 " sources of " + e.n_pulses + " pulse(s), " + when);
    } else {
      legendItem(ul, "sw-none", "no earlier mapped pulse in this flash");
    }
    if (s.position === "range") {
      legendItem(ul, "sw-none", "positions from the pulse's range and the source directions");
    }
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

  function renderProbabilities(m) {
    const box = $("plot-probabilities");
    if (!m.probabilities.length) { box.replaceChildren(); return; }
    P.hbars(box, m.probabilities.map(function (q) {
      return { label: q["class"], value: q.p,
               colour: m.prediction_set.indexOf(q["class"]) >= 0 ? "#0072B2" : "#A9C4DA" };
    }), { xlim: [0, 1], format: function (v) { return v.toFixed(2); },
          xLabel: "probability (dark: in the prediction set)", title: "model probabilities" });
  }

  function renderWhy(p) {
    setText($("why-label"), p.model.label ? "(" + p.model.label + ")" : "");
    const box = $("plot-why");
    if (!p.why || !p.why.length) {
      box.replaceChildren();
      box.hidden = true;
      $("why-none").hidden = false;
      return;
    }
    box.hidden = false;
    $("why-none").hidden = true;
    let m = 0;
    for (const pair of p.why) { m = Math.max(m, Math.abs(pair[1])); }
    m = m > 0 ? m * 1.1 : 1;
    P.hbars(box, p.why.map(function (pair) {
      return { label: pair[0], value: pair[1], colour: pair[1] >= 0 ? "#0072B2" : "#D55E00" };
    }), { xlim: [-m, m], format: function (v) { return (v >= 0 ? "+" : "") + fmt(v, 2); },
          xLabel: "contribution toward the class (+) or against it (-)",
          title: "why this class" });
  }

  function renderQueue(p) {
    const ul = $("review-reason");
    ul.replaceChildren();
    const words = (state.session && state.session.reasons) || {};
    for (const r of p.model.review_reason) {
      const li = el("li");
      li.appendChild(el("b", null, r.replace(/_/g, " ")));
      if (words[r]) { li.appendChild(el("span", "reason-text", ": " + words[r])); }
      ul.appendChild(li);
    }
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
          state.lookPlots.push({ container: plot, t: toArray(item.trace.time_s, US),
                                 y: toArray(item.trace.field_v_per_m) });
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
    prepareSeries(p);
    prepareSources(p);
    renderLegend(p);
    renderLookalikes(p.lookalikes);
    renderWhy(p);
    drawAll();
  }

  function drawAll() {
    if (!state.current || state.current.done) { return; }
    renderProbabilities(state.current.pulse.model);
    drawSourcePlots();
    drawTimePlots();
    renderWhy(state.current.pulse);
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
