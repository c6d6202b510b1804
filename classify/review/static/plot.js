// pulsesort review page: small SVG charts drawn from numbers (no libraries, nothing fetched).
// Elements are made with createElementNS and text with textContent: no markup is ever
// parsed. Exposes window.PulsePlot for review.js.
"use strict";

(function () {
  const NS = "http://www.w3.org/2000/svg";
  const FONT_PX = 11;
  const CHAR_PX = 6.8;      // generous width of one character at FONT_PX (layout estimate)
  let clipCount = 0;

  function el(tag, attrs, parent) {
    const e = document.createElementNS(NS, tag);
    for (const k of Object.keys(attrs || {})) {
      if (attrs[k] != null) { e.setAttribute(k, String(attrs[k])); }
    }
    if (parent) { parent.appendChild(e); }
    return e;
  }

  function text(parent, x, y, value, attrs) {
    const t = el("text", Object.assign({ x: x.toFixed(1), y: y.toFixed(1) }, attrs || {}),
                 parent);
    t.textContent = value;
    return t;
  }

  function textWidth(s) { return CHAR_PX * String(s).length; }

  // The first of the labels (a string or a list, longest first) that fits in width px.
  function fitting(labels, width) {
    const list = Array.isArray(labels) ? labels : [labels];
    for (const s of list) { if (textWidth(s) <= width) { return s; } }
    return list[list.length - 1];
  }

  // ------------------------------------------------------------------ numbers

  function niceStep(span, n) {
    const raw = span / Math.max(n, 1);
    const mag = Math.pow(10, Math.floor(Math.log10(raw)));
    for (const m of [1, 2, 2.5, 5, 10]) { if (m * mag >= raw * (1 - 1e-9)) { return m * mag; } }
    return 10 * mag;
  }

  // About n round values covering [lo, hi] (multiples of 1, 2, 2.5 or 5 times 10^k).
  function ticks(lo, hi, n) {
    if (!(isFinite(lo) && isFinite(hi)) || !(hi > lo)) { return { values: [], step: 1 }; }
    const step = niceStep(hi - lo, n);
    const values = [];
    for (let k = Math.ceil(lo / step - 1e-9); k * step <= hi + 1e-9 * step; k++) {
      values.push(Math.abs(k) < 1e-12 ? 0 : k * step);
      if (values.length > 60) { break; }
    }
    return { values: values, step: step };
  }

  // Ticks for an axis of px pixels: about one per `spacing` px, at least two when their
  // labels fit, and never labels closer than their size (size(label) in px along the axis).
  function axisTicks(lo, hi, px, spacing, size) {
    const fits = function (t) {
      if (t.values.length < 2) { return true; }
      const biggest = Math.max(...t.values.map(function (v) { return size(fmtTick(v, t.step)); }));
      return t.step / (hi - lo) * px >= biggest + 8;
    };
    const n0 = Math.max(1, Math.floor(px / spacing));
    let sparse = null;
    for (let n = n0; n >= 1 && !sparse; n--) {
      const t = ticks(lo, hi, n);
      if (fits(t)) { sparse = t; }
    }
    if (sparse && sparse.values.length >= 2) { return sparse; }
    for (let n = n0 + 1; n <= n0 + 8; n++) {  // too few: denser, if the labels fit
      const t = ticks(lo, hi, n);
      if (t.values.length >= 2 && fits(t)) { return t; }
    }
    return sparse || { values: [], step: 1 };
  }

  function decimals(step) {
    let d = Math.max(0, -Math.floor(Math.log10(Math.abs(step)) + 1e-9));
    while (d < 12 && Math.abs(Math.round(step * Math.pow(10, d)) - step * Math.pow(10, d)) >
           1e-6 * Math.pow(10, d) * Math.abs(step)) { d++; }
    return d;
  }

  function fmtTick(v, step) {
    if (v === 0) { return "0"; }
    const a = Math.abs(step);
    if (a >= 1e5 || a < 1e-4) { return v.toExponential(1); }
    return v.toFixed(decimals(step));
  }

  // Index of the first element of the sorted array xs that is >= v.
  function lowerBound(xs, v) {
    let lo = 0;
    let hi = xs.length;
    while (lo < hi) {
      const mid = (lo + hi) >> 1;
      if (xs[mid] < v) { lo = mid + 1; } else { hi = mid; }
    }
    return lo;
  }

  // [min, max] of the finite ys whose x lies in [x0, x1] (null when none).
  function range(xs, ys, x0, x1) {
    let lo = Infinity;
    let hi = -Infinity;
    const i1 = Math.min(xs.length, lowerBound(xs, x1) + 1);
    for (let i = lowerBound(xs, x0); i < i1; i++) {
      const y = ys[i];
      if (y != null && isFinite(y) && xs[i] <= x1) {
        if (y < lo) { lo = y; }
        if (y > hi) { hi = y; }
      }
    }
    return lo <= hi ? [lo, hi] : null;
  }

  // Limits padded by a fraction of the span; a flat or missing range gets a unit span.
  function padded(lim, pad) {
    if (!lim) { return [0, 1]; }
    let lo = lim[0];
    let hi = lim[1];
    if (!(hi > lo)) {
      const d = Math.abs(lo) > 0 ? Math.abs(lo) * 0.5 : 0.5;
      lo -= d;
      hi += d;
    }
    const p = (hi - lo) * (pad == null ? 0.06 : pad);
    return [lo - p, hi + p];
  }

  // Dark blue (0) to magenta to yellow (1): the colour of a source by its time.
  function timeColour(frac) {
    const f = Math.min(Math.max(isFinite(frac) ? frac : 0, 0), 1);
    const stops = [[0, [13, 8, 135]], [0.5, [204, 71, 120]], [1, [240, 200, 30]]];
    for (let i = 0; i < stops.length - 1; i++) {
      const a = stops[i];
      const b = stops[i + 1];
      if (f <= b[0]) {
        const w = (f - a[0]) / (b[0] - a[0]);
        const c = a[1].map(function (v, j) { return Math.round(v + w * (b[1][j] - v)); });
        return "rgb(" + c.join(",") + ")";
      }
    }
    return "rgb(240,200,30)";
  }

  // ------------------------------------------------------------------ frame

  // Axes in a container sized by CSS. opt: xlim, ylim, xLabel, yLabel (a string, or a list
  // of them longest first: the first that fits is used), title (aria), equal (same units
  // per pixel on both axes). Returns the mapping.
  function frame(container, opt) {
    container.replaceChildren();
    const W = Math.max(160, Math.floor(container.clientWidth));
    const H = Math.max(50, Math.floor(container.clientHeight));
    const svg = el("svg", { width: W, height: H, viewBox: "0 0 " + W + " " + H,
                            "font-family": "system-ui, sans-serif", "font-size": FONT_PX,
                            role: "img", "aria-label": opt.title || "" },
                   container);
    const top = opt.yLabel ? 26 : 8;
    const bottom = H - (opt.xLabel ? 34 : 20);
    let xlim = opt.xlim.slice();
    let ylim = opt.ylim.slice();
    const ySize = function () { return 14; };
    const yt = axisTicks(ylim[0], ylim[1], bottom - top, 34, ySize);
    const ylabels = yt.values.map(function (v) { return fmtTick(v, yt.step); });
    const left = Math.ceil(Math.max(30, 12 + Math.max(0, ...ylabels.map(textWidth))));
    const right = W - 14;
    if (opt.equal) {  // same km per pixel on both axes: widen the narrower span
      const sx = (xlim[1] - xlim[0]) / (right - left);
      const sy = (ylim[1] - ylim[0]) / (bottom - top);
      if (sx > sy) {
        const c = (ylim[0] + ylim[1]) / 2;
        const h = sx * (bottom - top) / 2;
        ylim = [c - h, c + h];
      } else {
        const c = (xlim[0] + xlim[1]) / 2;
        const h = sy * (right - left) / 2;
        xlim = [c - h, c + h];
      }
    }
    const f = {
      svg: svg, W: W, H: H, left: left, right: right, top: top, bottom: bottom,
      xlim: xlim, ylim: ylim,
      x: function (v) { return left + (v - xlim[0]) / (xlim[1] - xlim[0]) * (right - left); },
      y: function (v) { return bottom - (v - ylim[0]) / (ylim[1] - ylim[0]) * (bottom - top); },
      xinv: function (px) { return xlim[0] + (px - left) / (right - left) * (xlim[1] - xlim[0]); },
    };
    const ytk = opt.equal ? axisTicks(ylim[0], ylim[1], bottom - top, 34, ySize) : yt;
    const axis = el("g", { class: "axis", stroke: "#555", "stroke-width": 1 }, svg);
    el("line", { x1: left, y1: bottom, x2: right, y2: bottom }, axis);
    el("line", { x1: left, y1: bottom, x2: left, y2: top }, axis);
    const labels = el("g", { class: "labels", fill: "#222" }, svg);
    const xt = axisTicks(xlim[0], xlim[1], right - left, 90, textWidth);
    const xfmt = fmtTick;
    let corner = false;  // an x tick label reaches left of the y axis
    for (const v of xt.values) {
      const px = f.x(v);
      el("line", { x1: px, y1: bottom, x2: px, y2: bottom + 4 }, axis);
      const s = xfmt(v, xt.step);
      const w = textWidth(s) / 2;
      const anchor = px + w > W ? "end" : (px - w < 0 ? "start" : "middle");
      corner = corner || (anchor === "middle" && px - w < left - 2);
      text(labels, px, bottom + 15, s, { "text-anchor": anchor, class: "tick" });
    }
    for (const v of ytk.values) {
      const py = f.y(v);
      el("line", { x1: left - 4, y1: py, x2: left, y2: py }, axis);
      if (corner && py > bottom - 4) { continue; }  // its label would meet the x tick label
      text(labels, left - 6, py + 4, fmtTick(v, ytk.step), { "text-anchor": "end",
                                                             class: "tick" });
    }
    if (opt.xLabel) {
      const s = fitting(opt.xLabel, W - 8);
      const cx = Math.min(Math.max((left + right) / 2, 4 + textWidth(s) / 2), W - 4 - textWidth(s) / 2);
      text(labels, cx, H - 4, s, { "text-anchor": "middle", class: "axis-label" });
    }
    if (opt.yLabel) {
      const x0 = Math.max(2, left - 24);
      text(labels, x0, 12, fitting(opt.yLabel, W - x0 - 4), { class: "axis-label" });
    }
    const id = "clip" + (++clipCount);
    const cp = el("clipPath", { id: id }, el("defs", {}, svg));
    el("rect", { x: left, y: top, width: right - left, height: bottom - top }, cp);
    f.data = el("g", { "clip-path": "url(#" + id + ")" }, svg);
    return f;
  }

  // ------------------------------------------------------------------ marks

  function hline(f, v, attrs) {
    if (v < f.ylim[0] || v > f.ylim[1]) { return; }
    el("line", Object.assign({ x1: f.left, x2: f.right, y1: f.y(v), y2: f.y(v) }, attrs),
       f.data);
  }

  function vline(f, v, attrs) {
    el("line", Object.assign({ x1: f.x(v), x2: f.x(v), y1: f.top, y2: f.bottom }, attrs),
       f.data);
  }

  function band(f, a, b, attrs) {
    const x0 = Math.max(f.left, Math.min(f.x(a), f.x(b)));
    const x1 = Math.min(f.right, Math.max(f.x(a), f.x(b)));
    if (x1 <= x0) { return null; }
    return el("rect", Object.assign({ x: x0, y: f.top, width: x1 - x0, height: f.bottom - f.top },
                                    attrs), f.data);
  }

  // A line through (xs, ys) within the x limits, at most two points per pixel column
  // (the minimum and maximum of the samples in it), broken where a sample is missing.
  function line(f, xs, ys, attrs) {
    const n = xs.length;
    if (n === 0) { return null; }
    const i0 = Math.max(0, lowerBound(xs, f.xlim[0]) - 1);
    const i1 = Math.min(n - 1, lowerBound(xs, f.xlim[1]));
    const px = Math.max(1, f.right - f.left);
    const parts = [];
    let pen = "M";
    function put(i) {
      const y = ys[i];
      if (y == null || !isFinite(y)) { pen = "M"; return; }
      parts.push(pen + f.x(xs[i]).toFixed(1) + " " + f.y(y).toFixed(1));
      pen = "L";
    }
    if (i1 - i0 + 1 <= 2 * px) {
      for (let i = i0; i <= i1; i++) { put(i); }
    } else {
      let col = -1;
      let lo = -1;
      let hi = -1;
      const flush = function () {
        if (lo < 0) { return; }
        if (lo === hi) { put(lo); } else if (lo < hi) { put(lo); put(hi); } else { put(hi); put(lo); }
      };
      for (let i = i0; i <= i1; i++) {
        const c = Math.floor(f.x(xs[i]));
        if (c !== col) { flush(); col = c; lo = -1; hi = -1; }
        const y = ys[i];
        if (y == null || !isFinite(y)) { flush(); lo = -1; hi = -1; pen = "M"; continue; }
        if (lo < 0 || y < ys[lo]) { lo = i; }
        if (hi < 0 || y > ys[hi]) { hi = i; }
      }
      flush();
    }
    return el("path", Object.assign({ d: parts.join(""), fill: "none", stroke: "#0072B2",
                                      "stroke-width": 1.3, "stroke-linejoin": "round" }, attrs),
              f.data);
  }

  function dots(f, xs, ys, colours, attrs) {
    const a = Object.assign({ fill: "#0072B2", r: 3 }, attrs || {});
    const r = a.r;
    delete a.r;
    const g = el("g", a, f.data);
    for (let i = 0; i < xs.length; i++) {
      const x = xs[i];
      const y = ys[i];
      if (x == null || y == null || !isFinite(x) || !isFinite(y)) { continue; }
      el("circle", { cx: f.x(x).toFixed(1), cy: f.y(y).toFixed(1), r: r,
                     fill: colours ? colours[i] : null }, g);
    }
    return g;
  }

  // A horizontal colour bar of time, ticks below in the unit of t0, t1.
  function colourBar(container, t0, t1, label) {
    container.replaceChildren();
    const W = Math.max(160, Math.floor(container.clientWidth));
    const H = 50;
    const svg = el("svg", { width: W, height: H, viewBox: "0 0 " + W + " " + H,
                            "font-family": "system-ui, sans-serif", "font-size": FONT_PX,
                            role: "img", "aria-label": label }, container);
    const left = 16;
    const right = W - 16;
    const n = 48;
    for (let i = 0; i < n; i++) {
      el("rect", { x: (left + (right - left) * i / n).toFixed(1), y: 4,
                   width: ((right - left) / n + 0.6).toFixed(1), height: 12,
                   fill: timeColour((i + 0.5) / n) }, svg);
    }
    const span = t1 > t0 ? t1 - t0 : 1;
    const tk = axisTicks(t0, t0 + span, right - left, 80, textWidth);
    for (const v of tk.values) {
      const px = left + (v - t0) / span * (right - left);
      el("line", { x1: px, x2: px, y1: 16, y2: 20, stroke: "#555" }, svg);
      text(svg, px, 30, fmtTick(v, tk.step), { "text-anchor": "middle", class: "tick" });
    }
    text(svg, (left + right) / 2, H - 5, label, { "text-anchor": "middle", class: "axis-label" });
    return svg;
  }

  // Horizontal bars: items [{label, value, colour}], xlim [lo, hi]; signed bars grow
  // from 0 both ways. Labels left of the bars, values right of them.
  function hbars(container, items, opt) {
    container.replaceChildren();
    const row = 20;
    const labelW = Math.ceil(Math.max(40, ...items.map(function (it) {
      return textWidth(it.label);
    })) + 10);
    const W = Math.max(200, Math.floor(container.clientWidth));
    const H = 10 + row * items.length + (opt.xLabel ? 18 : 4);
    const svg = el("svg", { width: W, height: H, viewBox: "0 0 " + W + " " + H,
                            "font-family": "system-ui, sans-serif", "font-size": FONT_PX,
                            role: "img", "aria-label": opt.title || "" }, container);
    const left = labelW;
    const right = W - 52;
    const lim = opt.xlim;
    const x = function (v) { return left + (v - lim[0]) / (lim[1] - lim[0]) * (right - left); };
    const zero = x(Math.max(lim[0], Math.min(0, lim[1])));
    items.forEach(function (it, i) {
      const y0 = 6 + row * i;
      const v = it.value == null || !isFinite(it.value) ? 0 : it.value;
      const xv = x(Math.max(lim[0], Math.min(lim[1], v)));
      el("rect", { x: Math.min(zero, xv).toFixed(1), y: y0 + 3, width: Math.abs(xv - zero).toFixed(1),
                   height: row - 7, fill: it.colour || "#0072B2" }, svg);
      text(svg, left - 6, y0 + row / 2 + 3, it.label, { "text-anchor": "end" });
      const shown = it.value == null ? "n/a" : (opt.format ? opt.format(it.value) : String(it.value));
      text(svg, Math.max(xv, zero) + 4, y0 + row / 2 + 3, shown, { class: "value" });
    });
    el("line", { x1: zero, x2: zero, y1: 4, y2: 8 + row * items.length, stroke: "#555" }, svg);
    if (opt.xLabel) {
      // centred under the bars, but kept inside the plot when long labels narrow them
      const half = textWidth(opt.xLabel) / 2 + 2;
      const cx = Math.max(half, Math.min((left + right) / 2, W - half));
      text(svg, cx, H - 4, opt.xLabel, { "text-anchor": "middle", class: "axis-label" });
    }
    return svg;
  }

  window.PulsePlot = {
    el: el, text: text, ticks: ticks, axisTicks: axisTicks, fmtTick: fmtTick, lowerBound: lowerBound, range: range,
    padded: padded, timeColour: timeColour, frame: frame, hline: hline, vline: vline,
    band: band, line: line, dots: dots, colourBar: colourBar, hbars: hbars,
  };
})();
