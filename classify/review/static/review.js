// pulsesort review page. Plain JavaScript, no libraries, nothing fetched from outside.
// Every text from the server is shown with textContent (never parsed as HTML); the
// SVG plots are shown as <img> from blob: URLs, where SVG cannot run scripts.
"use strict";

(function () {
  const token = new URLSearchParams(window.location.search).get("token") || "";
  const state = { session: null, current: null, busy: false, blobs: [], classKeys: {} };

  function $(id) { return document.getElementById(id); }

  function setText(el, value) { el.textContent = value == null ? "" : String(value); }

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

  function showMessage(text) {
    const m = $("message");
    setText(m, text);
    m.hidden = !text;
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

  function svgUrl(svg) {
    const url = URL.createObjectURL(new Blob([svg], { type: "image/svg+xml" }));
    state.blobs.push(url);
    return url;
  }

  function setPlot(id, svg) {
    const img = $(id);
    if (!svg) { img.hidden = true; img.removeAttribute("src"); return; }
    img.src = svgUrl(svg);
    img.hidden = false;
  }

  function fmt(v, digits) {
    if (v == null) { return "n/a"; }
    return Number(v).toPrecision(digits || 3);
  }

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

  function renderLookalikes(items) {
    const strip = $("lookalike-strip");
    strip.replaceChildren();
    if (!items || items.length === 0) {
      strip.appendChild(el("p", "empty", "No labelled pulses to compare with yet."));
      return;
    }
    for (const item of items) {
      const card = el("figure", "lookalike");
      if (item.thumb) {
        const img = el("img");
        img.alt = "field change of a labelled look-alike";
        img.src = svgUrl(item.thumb);
        card.appendChild(img);
      }
      const cap = el("figcaption");
      cap.appendChild(el("b", "label", item.label));
      cap.appendChild(el("span", "eid", item.event_id));
      cap.appendChild(el("span", "dist", "distance " + fmt(item.distance, 2)));
      if (item.catalog_id !== state.session.catalog_id) {
        cap.appendChild(el("span", "cat", item.catalog_id));
      }
      card.appendChild(cap);
      strip.appendChild(card);
    }
  }

  function renderLast(last) {
    const p = $("last");
    if (!last) { setText(p, ""); return; }
    let what = last.action === "label" ? last.label : last.action;
    let line = "last decision: " + last.event_id + " \u2192 " + what;
    if (last.note) { line += " (note: " + last.note + ")"; }
    setText(p, line + "  [z to undo]");
  }

  function render(cur) {
    const old = state.blobs;
    state.blobs = [];
    state.current = cur;
    setText($("counter"), "reviewed " + cur.n_reviewed + " / queued " + cur.n_queued);
    renderLast(cur.last);
    if (cur.done) {
      $("main").hidden = true;
      $("done").hidden = false;
      document.body.dataset.event = "";
    } else {
      $("done").hidden = true;
      $("main").hidden = false;
      const p = cur.pulse;
      document.body.dataset.event = p.event_id;
      setText($("event-id"), p.event_id);
      setText($("event-time"), p.time_utc);
      setText($("flash-id"), p.flash_id || "none");
      setText($("queue-rank"), p.queue_rank + " (priority " + fmt(p.priority, 3) + ")");
      const m = p.model;
      setText($("model-version"), m.version || "n/a");
      setText($("model-label"), m.label || "n/a");
      setText($("model-confidence"), m.confidence == null ? "" :
        "(confidence " + fmt(m.confidence, 3) + ")");
      setText($("prediction-set"), m.prediction_set.length ? m.prediction_set.join(", ") :
        "empty");
      setText($("novelty"), (m.novel ? "NOVEL, " : "") + "score " + fmt(m.novelty_score, 3));
      setText($("review-reason"), m.review_reason.join(", ") || "n/a");
      setPlot("plot-field", p.plots.field);
      setPlot("plot-vhf", p.plots.vhf);
      setPlot("plot-field-context", p.plots.field_context);
      setPlot("plot-elevation", p.plots.elevation);
      setPlot("plot-sky", p.plots.sky);
      setPlot("plot-probabilities", p.plots.probabilities);
      const notes = $("notes");
      notes.replaceChildren();
      for (const n of p.notes) { notes.appendChild(el("li", null, n)); }
      renderFeatures(p.features);
      renderLookalikes(p.lookalikes);
    }
    for (const url of old) { URL.revokeObjectURL(url); }
  }

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

  function onKey(ev) {
    if (ev.ctrlKey || ev.metaKey || ev.altKey) { return; }
    const inNote = ev.target && ev.target.id === "note";
    if (inNote) {
      if (ev.key === "Escape") { ev.target.blur(); ev.preventDefault(); }
      return;
    }
    const k = ev.key;
    if (state.classKeys[k]) { decide("label", state.classKeys[k]); }
    else if (k === "u" || k === "U") { decide("unsure"); }
    else if (k === "s" || k === "S") { decide("skip"); }
    else if (k === "z" || k === "Z" || k === "Backspace") { undo(); }
    else { return; }
    ev.preventDefault();
  }

  async function start() {
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
        "(the model's labelled training pulses)" : "(labelled pulses of this catalog)");
      buildButtons(s.classes);
      render(await api("GET", "/api/current"));
    } catch (err) {
      showMessage(err.message);
    } finally {
      setPending(false);
    }
    $("btn-unsure").addEventListener("click", function () { decide("unsure"); });
    $("btn-skip").addEventListener("click", function () { decide("skip"); });
    $("btn-undo").addEventListener("click", undo);
    document.addEventListener("keydown", onKey);
  }

  document.addEventListener("DOMContentLoaded", start);
})();
