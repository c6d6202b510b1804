// pulsesort review page: what is drawn of one pulse (its record, sources, bars), from the
// numbers of the pulse JSON, with plot.js. Exposes window.PulseViews for review.js; the
// page state (view, frames, pointer) stays in review.js.
"use strict";

(function () {
  const P = window.PulsePlot;
  const US = 1e6;           // seconds -> microseconds (display only)
  const VHF_FLOOR_DB = 60;  // VHF power is shown down to this far below its record's peak
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

  // ------------------------------------------------------------------ record

  // The pulse's record in display units (µs, dB) and its time limits.
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
    s.full = [Math.min(...ends), Math.max(...ends)];
    s.minWidth = s.ft.length > 1 ? 10 * (s.ft[1] - s.ft[0]) : 0.1;
    s.defaultView = [p.view_s[0] * US, p.view_s[1] * US];
    return s;
  }

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

  function drawField(c, s, v) {
    const f = P.frame(c, { xlim: v, ylim: P.padded(P.range(s.ft, s.fy, v[0], v[1]), 0.08),
                           yLabel: ["E (V/m), physics convention: + = field vector up",
                                    "E (V/m), + = field vector up", "E (V/m)"],
                           title: "field change versus time" });
    markTimes(f, s, true);
    P.hline(f, 0, { stroke: "#bbb" });
    P.line(f, s.ft, s.fy, { class: "trace", stroke: COLOURS.trace });
    return f;
  }

  function drawVhf(c, s, v) {
    if (!s.vt) { c.hidden = true; c.replaceChildren(); return null; }
    c.hidden = false;
    const f = P.frame(c, { xlim: v, ylim: P.padded(P.range(s.vt, s.vdb, v[0], v[1]), 0.08),
                           xLabel: "time from trigger (µs)",
                           yLabel: "VHF power (dB, catalog units)",
                           title: "VHF power versus time" });
    markTimes(f, s, false);
    P.line(f, s.vt, s.vdb, { class: "trace", stroke: "#444" });
    return f;
  }

  function drawOverview(c, s, v) {
    const full = s.full;
    const f = P.frame(c, { xlim: full, ylim: P.padded(P.range(s.ft, s.fy, full[0], full[1])),
                           title: "whole record" });
    P.band(f, v[0], v[1], { class: "view-band", fill: "#0072B2", "fill-opacity": 0.14 });
    markTimes(f, s, true, false);
    P.line(f, s.ft, s.fy, { stroke: COLOURS.trace, "stroke-width": 1 });
    return f;
  }

  // A labelled look-alike's field change (lp.t in µs, lp.y in V/m) on the pulse's time axis.
  function drawLookalike(c, lp, v) {
    const f = P.frame(c, { xlim: v, ylim: P.padded(P.range(lp.t, lp.y, v[0], v[1]), 0.08),
                           xLabel: ["time from trigger (µs)", "time (µs)"], yLabel: "E (V/m)",
                           title: "field change of a labelled look-alike" });
    P.hline(f, 0, { stroke: "#bbb" });
    P.line(f, lp.t, lp.y, { class: "trace", stroke: COLOURS.trace });
    return f;
  }

  // ------------------------------------------------------------------ legends

  function legendItem(list, swatch, label) {
    const li = el("li");
    li.appendChild(el("span", "swatch " + swatch));
    li.appendChild(el("span", "legend-text", label));
    list.appendChild(li);
  }

  function renderLegend(ul, s, p) {
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

  // The pulse's sources in display units (µs, km), coloured by time; null without any.
  function prepareSources(p) {
    const s = p.sources;
    if (!s) { return null; }
    const t = toArray(s.t_s, US);
    const lim = limitsOf([t]);
    const span = lim[1] - lim[0];
    const colours = Array.from(t, function (v) {
      return P.timeColour(span > 0 ? (v - lim[0]) / span : 0);
    });
    const e = s.earlier;
    return {
      t: t, tlim: lim, colours: colours, position: s.position,
      az: toArray(s.azimuth_deg), el: toArray(s.elevation_deg),
      east: toArray(s.east_m, 1e-3), north: toArray(s.north_m, 1e-3), up: toArray(s.up_m, 1e-3),
      earlier: e ? { az: toArray(e.azimuth_deg), el: toArray(e.elevation_deg),
                     east: toArray(e.east_m, 1e-3), north: toArray(e.north_m, 1e-3),
                     age: toArray(e.age_s, 1e3), n_pulses: e.n_pulses,
                     n_sources: e.n_sources } : null,
    };
  }

  function drawAltitude(c, s, v) {
    if (!s || !s.position) { c.hidden = true; c.replaceChildren(); return null; }
    c.hidden = false;
    const f = P.frame(c, { xlim: P.padded(s.tlim, 0.05), ylim: P.padded(limitsOf([s.up]), 0.1),
                           xLabel: ["time from trigger (µs)", "time (µs)"],
                           yLabel: "altitude (km)", title: "source altitude versus time" });
    P.band(f, v[0], v[1], { class: "view-band", fill: "#0072B2", "fill-opacity": 0.08 });
    P.dots(f, s.t, s.up, s.colours, { class: "own" });
    return f;
  }

  // Colour bar, plan view or elevation-time, sky, and their legend (altitude: drawAltitude).
  function drawSources(s) {
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
      if (e) { P.dots(f, e.east, e.north, null, { class: "earlier", r: 2.2, fill: "#777",
                                               "fill-opacity": 0.35 }); }
      P.dots(f, s.east, s.north, s.colours, { class: "own" });
    } else {
      plan.hidden = true;
      plan.replaceChildren();
      elev.hidden = false;
      const f = P.frame(elev, { xlim: P.padded(s.tlim, 0.05),
                                ylim: P.padded(limitsOf([s.el]), 0.1),
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
    if (e) { P.dots(sky, eaz, e.el, null, { class: "earlier", r: 2.2, fill: "#777",
                                               "fill-opacity": 0.35 }); }
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

  // ------------------------------------------------------------------ bars

  function renderProbabilities(box, m) {
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

  window.PulseViews = {
    US: US, el: el, setText: setText, fmt: fmt, fixed: fixed, toArray: toArray,
    prepareSeries: prepareSeries, drawField: drawField, drawVhf: drawVhf,
    drawOverview: drawOverview, drawLookalike: drawLookalike, renderLegend: renderLegend,
    prepareSources: prepareSources, drawAltitude: drawAltitude, drawSources: drawSources,
    renderProbabilities: renderProbabilities, renderWhy: renderWhy,
  };
})();
