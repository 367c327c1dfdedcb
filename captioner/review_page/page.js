"use strict";
// Review page logic. Every piece of data reaches the DOM through textContent or
// attributes set by property, never as markup, so cue text cannot become HTML.
// Speed: typing touches only its own cue; the timeline draws only the visible stretch,
// and list rows off screen are skipped by the browser (content-visibility).
(function () {
  const data = JSON.parse(document.getElementById("review-data").textContent);
  const SVG = "http://www.w3.org/2000/svg";
  const MIN_SPAN_MS = 2000, SNAP_MS = 10, MIN_CUE_MS = 100;
  const LANE = { waveTop: 0, waveHeight: 44, curveTop: 48, curveHeight: 90 };  // inside the svg (px)
  const DASHES = ["", "6 3", "2 3", "8 3 2 3"];  // past the palette, a concept gets a dash pattern too
  const byId = (id) => document.getElementById(id);
  const palette = data.palette;

  // ---- text and time ------------------------------------------------------------
  const pad = (n, w) => String(n).padStart(w, "0");
  function clock(ms) {
    const whole = Math.max(0, Math.round(ms));
    const h = Math.floor(whole / 3600000), m = Math.floor(whole / 60000) % 60;
    const s = Math.floor(whole / 1000) % 60, t = whole % 1000;
    return (h ? h + ":" + pad(m, 2) : pad(m, 2)) + ":" + pad(s, 2) + "." + pad(t, 3);
  }
  function stamp(ms, comma) {
    const whole = Math.max(0, Math.round(ms));
    const text = pad(Math.floor(whole / 3600000), 2) + ":" + pad(Math.floor(whole / 60000) % 60, 2) + ":" +
      pad(Math.floor(whole / 1000) % 60, 2) + "." + pad(whole % 1000, 3);
    return comma ? text.replace(".", ",") : text;
  }
  function parseClock(text) {
    const match = /^\s*(?:(?:(\d+):)?(\d{1,2}):)?(\d{1,2})(?:[.,](\d{1,3}))?\s*$/.exec(text);
    if (!match) return null;
    const [, h, m, s, frac] = match;
    return ((+(h || 0) * 60 + +(m || 0)) * 60 + +s) * 1000 + (frac ? +frac.padEnd(3, "0") : 0);
  }
  // WebVTT cue-text tags (W3C WebVTT: c, i, b, u, ruby, rt, v, lang, and timestamps) stay tags;
  // any other "<" or ">" is text and is escaped on save.
  const VTT_TAG = /^<(?:\/?(?:[cibu]|ruby|rt|v|lang)(?:\.[^\s<>.&]+)*(?:[ \t][^<>]*)?|(?:\d{2,}:)?\d{2}:\d{2}\.\d{3})>$/;
  const SRT_TAG = /^<\/?(?:[ibu]|font(?:\s[^<>]*)?)>$/i;
  const escapeText = (text) => text.replace(/&/g, "&amp;").replace(/</g, "&lt;").replace(/>/g, "&gt;");
  const pieces = (line) => line.split(/(<[^<>]*>)/);
  function vttLine(line) {
    return pieces(line).map((p, n) => (n % 2 && VTT_TAG.test(p) ? p : n % 2 && SRT_TAG.test(p) ? "" : escapeText(p))).join("");
  }
  function srtLine(line) {
    return pieces(line).map((p, n) => (n % 2 && !SRT_TAG.test(p) && VTT_TAG.test(p) ? "" : p)).join("");
  }
  const lines = (text) => text.replace(/\r/g, "").split("\n").filter((line) => line.trim());
  const vttPayload = (text) => lines(text).map(vttLine).join("\n") || "&nbsp;";
  const plain = (text) => pieces(text).filter((p, n) => !(n % 2 && (VTT_TAG.test(p) || SRT_TAG.test(p)))).join("");

  function bytes(base64) {
    const raw = atob(base64), out = new Uint8Array(raw.length);
    for (let i = 0; i < raw.length; i++) out[i] = raw.charCodeAt(i);
    return out;
  }

  // ---- state, undo and redo -----------------------------------------------------------
  let nextKey = 1;
  let cues = data.cues.map((c) => ({ ...c, key: nextKey++, fromEvent: null }));
  let promoted = new Set();
  let selectedKey = cues.length ? cues[0].key : null;
  let stateId = 0, savedId = 0, nextStateId = 1;
  const undoStack = [], redoStack = [];
  let typingKey = null;  // consecutive keystrokes in one cue are one undo step
  const snapshot = () => ({ cues: cues.map((c) => ({ ...c })), promoted: [...promoted], selectedKey, stateId });

  function record(label, typing) {
    if (!(typing && typingKey === typing)) {
      undoStack.push({ ...snapshot(), label });
      if (undoStack.length > 500) undoStack.shift();
      redoStack.length = 0;
    }
    typingKey = typing || null;
    stateId = nextStateId++;
    markDirty();
  }
  function restore(from, to, verb) {
    const state = from.pop();
    if (!state) return;
    to.push({ ...snapshot(), label: state.label });
    cues = state.cues.map((c) => ({ ...c }));
    promoted = new Set(state.promoted);
    selectedKey = state.selectedKey;
    stateId = state.stateId;
    typingKey = null;
    rebuild();
    markDirty();
    say(verb + ": " + state.label + ".");
  }
  const undo = () => restore(undoStack, redoStack, "Undid");
  const redo = () => restore(redoStack, undoStack, "Redid");
  const dirty = () => stateId !== savedId;
  function markDirty() {
    byId("unsaved").hidden = !dirty();
    byId("undo").disabled = !undoStack.length;
    byId("redo").disabled = !redoStack.length;
    document.title = (dirty() ? "• " : "") + "Review: " + data.media.name;
  }
  window.addEventListener("beforeunload", (event) => {
    if (!dirty()) return;
    event.preventDefault();
    event.returnValue = "";  // the browser asks before the edits are lost
  });

  const sorted = () => cues.slice().sort((a, b) => a.start_ms - b.start_ms || a.end_ms - b.end_ms || a.key - b.key);
  const cueByKey = (key) => cues.find((c) => c.key === key);
  const selected = () => cueByKey(selectedKey);

  // ---- messages: an error stays until the field it is about is right ------------------------
  const errors = new Map();
  function say(message) {
    const status = byId("status");
    status.textContent = errors.size ? [...errors.values()].pop() : message;
    status.classList.toggle("error", errors.size > 0);
  }
  function fail(where, message) { errors.set(where, message); say(message); }
  function clearError(where) { if (errors.delete(where)) say(errors.size ? "" : "Fixed."); }

  // ---- player and live track ----------------------------------------------------------
  const player = document.createElement(data.media.kind === "audio" ? "audio" : "video");
  player.controls = true;
  player.preload = "auto";
  player.src = data.media.src;
  player.setAttribute("aria-label", "Media: " + data.media.name);
  byId("player-box").appendChild(player);
  const liveTrack = player.addTextTrack("captions", "Sound captions (edited)", "en");
  liveTrack.mode = "showing";
  const liveCues = new Map();
  const nowMs = () => player.currentTime * 1000;

  function refreshTrack() {
    for (const old of Array.from(liveTrack.cues || [])) liveTrack.removeCue(old);
    liveCues.clear();
    for (const cue of sorted()) {
      // VTTCue text is WebVTT cue text: tags show as styling, everything else literally
      const live = new VTTCue(cue.start_ms / 1000, cue.end_ms / 1000, vttPayload(cue.text));
      liveCues.set(cue.key, live);
      liveTrack.addCue(live);
    }
  }
  let lastShowing = null;
  function refreshNowShowing() {
    const ms = nowMs();
    const text = cues.filter((c) => c.start_ms <= ms && ms < c.end_ms).sort((a, b) => a.start_ms - b.start_ms)
      .map((c) => plain(c.text)).join("\n");
    if (text !== lastShowing) { byId("now-showing").textContent = text; lastShowing = text; }
    placePlayhead();
  }
  function seek(ms) {
    player.currentTime = ms / 1000;
    reveal(ms);
    refreshNowShowing();
  }
  function durationMs() {
    const fromPlayer = isFinite(player.duration) ? player.duration * 1000 : 0;
    const lastCue = cues.reduce((top, c) => Math.max(top, c.end_ms), 0);
    return Math.max(data.duration_ms || 0, fromPlayer, lastCue, MIN_SPAN_MS);
  }

  // ---- timeline: a view onto [view.start, view.start + view.span) --------------------------
  const timeline = byId("timeline");
  const view = { start: 0, span: Math.min(durationMs(), 60000) };
  const curves = data.curves || { hop_ms: 0, patch_ms: 0, order: [], concepts: {} };
  const order = curves.order || Object.keys(curves.concepts);
  const curveData = Object.fromEntries(order.map((name) => [name, bytes(curves.concepts[name])]));
  const peaks = data.waveform ? new Int8Array(bytes(data.waveform.peaks).buffer) : null;
  // drawn relative to the loudest peak, so a quiet soundtrack still shows its shape
  let loudest = 1;
  for (const value of peaks || []) loudest = Math.max(loudest, Math.abs(value));
  const conceptColour = (name) => { const n = order.indexOf(name); return n < 0 ? "" : palette[n % palette.length]; };
  const conceptDash = (name) => DASHES[Math.floor(Math.max(0, order.indexOf(name)) / palette.length) % DASHES.length];
  const widthPx = () => timeline.clientWidth || 800;
  const msPerPx = () => view.span / widthPx();
  const xOf = (ms) => (ms - view.start) / msPerPx();

  function setView(start, span) {
    const total = durationMs();
    view.span = Math.min(total, Math.max(MIN_SPAN_MS, span));
    view.start = Math.min(Math.max(0, start), Math.max(0, total - view.span));
    drawTimeline();
  }
  function zoom(factor, anchorMs) {
    const anchor = anchorMs === undefined ? Math.min(Math.max(nowMs(), view.start), view.start + view.span) : anchorMs;
    const share = (anchor - view.start) / view.span;
    const span = view.span * factor;
    setView(anchor - share * Math.min(durationMs(), Math.max(MIN_SPAN_MS, span)), span);
  }
  // bring a time into view (a seek, the playhead while playing); leaves some context before it
  function reveal(ms) {
    if (ms < view.start || ms > view.start + view.span * 0.95) setView(ms - view.span * 0.1, view.span);
  }

  const playhead = document.createElement("div");
  playhead.className = "playhead";
  function placePlayhead() {
    const x = xOf(nowMs());
    playhead.hidden = x < 0 || x > widthPx();
    playhead.style.left = x + "px";
  }

  function tickStep() {
    const steps = [100, 200, 500, 1000, 2000, 5000, 10000, 15000, 30000, 60000, 120000, 300000, 600000, 900000, 1800000, 3600000];
    return steps.find((s) => s / msPerPx() >= 90) || steps[steps.length - 1];
  }
  function svgNode(name, attributes) {
    const node = document.createElementNS(SVG, name);
    for (const [key, value] of Object.entries(attributes)) node.setAttribute(key, value);
    return node;
  }
  function wavePath() {
    if (!peaks) return "";
    const hop = data.waveform.hop_ms, windows = peaks.length / 2, width = widthPx();
    const mid = LANE.waveTop + LANE.waveHeight / 2, scale = LANE.waveHeight / 2 / loudest;
    const top = [], bottom = [];
    for (let x = 0; x < width; x++) {
      const from = Math.max(0, Math.floor((view.start + x * msPerPx()) / hop));
      const to = Math.min(windows, Math.max(from + 1, Math.floor((view.start + (x + 1) * msPerPx()) / hop)));
      if (from >= windows) break;
      let low = 127, high = -127;
      for (let w = from; w < to; w++) { low = Math.min(low, peaks[2 * w]); high = Math.max(high, peaks[2 * w + 1]); }
      top.push(x + "," + (mid - high * scale).toFixed(1));
      bottom.push(x + "," + (mid - low * scale).toFixed(1));
    }
    return top.length ? "M" + top.join("L") + "L" + bottom.reverse().join("L") + "Z" : "";
  }
  function curvePoints(values) {
    // the highest score in each pixel column: a short peak never vanishes at a wide zoom
    const hop = curves.hop_ms, half = curves.patch_ms / 2, width = widthPx(), per = msPerPx();
    const first = Math.max(0, Math.floor((view.start - half) / hop) - 1);
    const last = Math.min(values.length - 1, Math.ceil((view.start + view.span - half) / hop) + 1);
    const columns = new Int16Array(width + 3).fill(-1);  // column x + 1: one spare pixel each side
    for (let i = first; i <= last; i++) {
      const x = Math.min(width + 2, Math.max(0, Math.round((i * hop + half - view.start) / per) + 1));
      if (values[i] > columns[x]) columns[x] = values[i];
    }
    const base = LANE.curveTop + LANE.curveHeight, scale = (LANE.curveHeight - 2) / 255, out = [];
    for (let x = 0; x < columns.length; x++) if (columns[x] >= 0) out.push((x - 1) + "," + (base - columns[x] * scale).toFixed(1));
    return out.join(" ");
  }

  // The lanes are made once; a redraw changes their shapes and swaps only the visible blocks.
  const ruler = document.createElement("div");
  ruler.className = "ruler";
  const svg = svgNode("svg", { preserveAspectRatio: "none", "aria-hidden": "true" });
  const wave = peaks ? svg.appendChild(svgNode("path", { class: "wave", fill: "var(--wave)" })) : null;
  const curveLines = new Map(order.map((name) => [name, svg.appendChild(svgNode("polyline", {
    fill: "none", stroke: conceptColour(name), "stroke-dasharray": conceptDash(name), "data-concept": name,
  }))]));
  const labels = [["waveform", "21px"], ["scores", "69px"], ["dialogue", "163px"], ["cues", "208px"]].map(([label, top]) => {
    const tag = document.createElement("span");
    tag.className = "lane-label";
    tag.style.top = top;
    tag.textContent = label;
    return tag;
  });
  timeline.replaceChildren(ruler, svg, ...labels, playhead);
  let shown = [];  // the dialogue spans and cue blocks in view

  function drawTimeline() {
    const width = widthPx(), end = view.start + view.span;
    const step = tickStep(), ticks = [];
    for (let t = Math.ceil(view.start / step) * step; t < end; t += step) {
      const tick = document.createElement("span");
      tick.className = "tick";
      tick.style.left = xOf(t) + "px";
      tick.textContent = step < 1000 ? clock(t) : clock(t).replace(/\.000$/, "");
      ticks.push(tick);
    }
    ruler.replaceChildren(...ticks);
    svg.setAttribute("viewBox", "0 0 " + width + " 140");
    if (wave) wave.setAttribute("d", wavePath());
    const focusConcept = (selected() || {}).concept;
    for (const [name, line] of curveLines) {
      line.setAttribute("points", curvePoints(curveData[name]));
      line.setAttribute("stroke-width", name === focusConcept ? "3" : "1.6");
    }
    for (const node of shown) node.remove();
    shown = [];
    for (const [start, stop] of data.dialogue || []) {
      if (stop < view.start || start > end) continue;
      const span = document.createElement("div");
      span.className = "speech-span";
      span.style.left = xOf(start) + "px";
      span.style.width = Math.max(1, (stop - start) / msPerPx()) + "px";
      span.title = "dialogue " + clock(start) + "–" + clock(stop);
      shown.push(span);
    }
    for (const cue of sorted()) if (cue.end_ms >= view.start && cue.start_ms <= end) shown.push(cueBlock(cue));
    playhead.before(...shown);
    placePlayhead();
    const pan = byId("pan");
    pan.max = String(Math.max(0, durationMs() - view.span));
    pan.value = String(view.start);
    byId("view-range").textContent = clock(view.start) + " – " + clock(end);
  }

  function cueBlock(cue) {
    const block = document.createElement("button");
    block.type = "button";
    block.className = "cue-block";
    block.dataset.key = cue.key;
    placeBlock(block, cue);
    const label = document.createElement("span");
    label.className = "cue-label";
    label.textContent = plain(cue.text.split("\n")[0]);
    const startEdge = document.createElement("span"), endEdge = document.createElement("span");
    startEdge.className = "cue-edge start";
    endEdge.className = "cue-edge end";
    block.append(startEdge, label, endEdge);
    block.setAttribute("aria-label", clock(cue.start_ms) + " " + plain(cue.text));
    if (cue.concept) block.style.setProperty("--concept", conceptColour(cue.concept));
    if (cue.key === selectedKey) block.setAttribute("aria-current", "true");
    block.addEventListener("click", () => { if (!dragged) select(cue.key, true); dragged = false; });
    for (const [edge, part] of [[startEdge, "start"], [endEdge, "end"]]) {
      edge.addEventListener("pointerdown", (event) => startDrag(event, cue, part, block));
    }
    return block;
  }
  function placeBlock(block, cue) {
    block.style.left = xOf(cue.start_ms) + "px";
    block.style.width = Math.max(6, (cue.end_ms - cue.start_ms) / msPerPx()) + "px";
  }
  const blockOf = (key) => timeline.querySelector('.cue-block[data-key="' + key + '"]');

  // ---- dragging a cue edge --------------------------------------------------------------
  let dragged = false;
  function startDrag(event, cue, part, block) {
    event.preventDefault();
    event.stopPropagation();
    const from = event.clientX, original = cue[part + "_ms"];
    let recorded = false;
    block.setPointerCapture(event.pointerId);
    const move = (e) => {
      const raw = original + (e.clientX - from) * msPerPx();
      let ms = Math.round(raw / SNAP_MS) * SNAP_MS;
      ms = part === "start" ? Math.min(Math.max(0, ms), cue.end_ms - MIN_CUE_MS) : Math.max(ms, cue.start_ms + MIN_CUE_MS);
      if (ms === cue[part + "_ms"]) return;
      if (!recorded) { record("drag the " + part + " of a cue"); recorded = true; }
      dragged = true;
      cue[part + "_ms"] = ms;
      placeBlock(block, cue);
      say((part === "start" ? "Start " : "End ") + clock(ms));
    };
    const up = () => {
      block.removeEventListener("pointermove", move);
      block.removeEventListener("pointerup", up);
      block.removeEventListener("pointercancel", up);
      if (recorded) { selectedKey = cue.key; rebuild(); }
      setTimeout(() => { dragged = false; }, 0);  // the block may be gone before its click arrives
    };
    block.addEventListener("pointermove", move);
    block.addEventListener("pointerup", up);
    block.addEventListener("pointercancel", up);
  }

  timeline.addEventListener("click", (event) => {
    if (event.target === timeline || event.target.closest(".ruler, svg, .speech-span")) {
      const box = timeline.getBoundingClientRect();
      seek(view.start + (event.clientX - box.left) * msPerPx());
    }
  });
  // Ctrl+wheel zooms at the pointer, a sideways (or Shift+) wheel pans; a plain wheel scrolls the page
  timeline.addEventListener("wheel", (event) => {
    const box = timeline.getBoundingClientRect();
    const sideways = event.shiftKey || Math.abs(event.deltaX) > Math.abs(event.deltaY);
    if (!event.ctrlKey && !sideways) return;
    event.preventDefault();
    if (event.ctrlKey) zoom(event.deltaY > 0 ? 1.25 : 0.8, view.start + (event.clientX - box.left) * msPerPx());
    else setView(view.start + (event.deltaX || event.deltaY) * msPerPx(), view.span);
  }, { passive: false });
  byId("pan").addEventListener("input", (event) => setView(+event.target.value, view.span));
  byId("zoom-in").addEventListener("click", () => zoom(0.5));
  byId("zoom-out").addEventListener("click", () => zoom(2));
  byId("zoom-all").addEventListener("click", () => setView(0, durationMs()));
  new ResizeObserver(() => drawTimeline()).observe(timeline);

  // ---- legend -------------------------------------------------------------------------
  function renderLegend() {
    const items = order.map((name) => {
      const item = document.createElement("span");
      const swatch = document.createElement("span");
      swatch.className = "swatch";
      swatch.style.borderTopColor = conceptColour(name);
      swatch.style.borderTopStyle = conceptDash(name) ? "dashed" : "solid";
      item.append(swatch, document.createTextNode(name));
      return item;
    });
    byId("legend").replaceChildren(...items);
  }

  // ---- cue list -------------------------------------------------------------------------
  function timeField(labelText, cue, part) {
    const label = document.createElement("label");
    const input = document.createElement("input");
    input.type = "text";
    input.inputMode = "decimal";
    input.className = "cue-" + part;
    input.value = clock(cue[part + "_ms"]);
    const where = cue.key + ":" + part;
    input.addEventListener("change", () => {
      const ms = parseClock(input.value);
      const start = part === "start" ? ms : cue.start_ms, end = part === "end" ? ms : cue.end_ms;
      if (ms === null || !(end > start)) {
        input.setAttribute("aria-invalid", "true");
        fail(where, "Cue at " + clock(cue.start_ms) + ": times read like 01:02.500, and the end comes after the start.");
        return;
      }
      input.removeAttribute("aria-invalid");
      clearError(where);
      if (ms === cue[part + "_ms"]) return;
      record("change the " + part + " of a cue");
      cue[part + "_ms"] = ms;
      selectedKey = cue.key;
      rebuild(cue.key, part);
    });
    label.append(document.createTextNode(labelText), input);
    return [label, input];
  }

  function cueRow(cue) {
    const row = document.createElement("li");
    row.className = "cue-row";
    row.dataset.key = cue.key;
    if (cue.concept) row.style.setProperty("--concept", conceptColour(cue.concept));
    if (cue.key === selectedKey) row.setAttribute("aria-current", "true");
    const head = document.createElement("div");
    head.className = "row-head";
    const go = document.createElement("button");
    go.type = "button";
    go.className = "seek";
    go.textContent = "Go to " + clock(cue.start_ms);
    go.addEventListener("click", () => select(cue.key, true));
    const remove = document.createElement("button");
    remove.type = "button";
    remove.className = "delete";
    remove.textContent = "Delete";
    remove.setAttribute("aria-label", "Delete cue at " + clock(cue.start_ms));
    remove.addEventListener("click", () => deleteCue(cue.key));
    const ident = document.createElement("span");
    ident.className = "cue-id";
    ident.textContent = (cue.identifier ? "id " + cue.identifier : cue.fromEvent ? "added from " + cue.fromEvent : "added by hand") +
      (cue.concept ? " · " + cue.concept : "");
    head.append(go, remove, ident);
    const times = document.createElement("div");
    times.className = "times";
    const [startLabel, startInput] = timeField("Start", cue, "start");
    const [endLabel, endInput] = timeField("End", cue, "end");
    times.append(startLabel, endLabel);
    const text = document.createElement("textarea");
    text.className = "cue-text";
    text.value = cue.text;
    text.rows = Math.max(2, cue.text.split("\n").length);
    text.setAttribute("aria-label", "Text of cue at " + clock(cue.start_ms));
    text.addEventListener("input", () => typed(cue, text.value));
    text.addEventListener("focus", () => select(cue.key, false, true));
    row.append(head, times, text);
    return [row, { start: startInput, end: endInput, text: text, seek: go }];
  }

  // one keystroke: the cue's own text, its live cue and its block; nothing else is redrawn
  function typed(cue, value) {
    record("edit the text of a cue", cue.key);
    cue.text = value;
    const live = liveCues.get(cue.key);
    if (live) live.text = vttPayload(value);
    const block = blockOf(cue.key);
    if (block) {
      block.querySelector(".cue-label").textContent = plain(value.split("\n")[0]);
      block.setAttribute("aria-label", clock(cue.start_ms) + " " + plain(value));
    }
    refreshNowShowing();
  }

  function renderList(focusKey, focusPart) {
    let toFocus = null;
    const rows = sorted().map((cue) => {
      const [row, fields] = cueRow(cue);
      if (cue.key === focusKey) toFocus = fields[focusPart] || null;
      return row;
    });
    byId("cue-list").replaceChildren(...rows);
    byId("cue-count").textContent = "(" + cues.length + ")";
    if (toFocus) toFocus.focus();
  }

  function rebuild(focusKey, focusPart) {
    refreshTrack();
    drawTimeline();
    renderList(focusKey, focusPart);
    renderDropped();
    refreshNowShowing();
  }

  function select(key, andSeek, quiet) {
    const before = (selected() || {}).concept;
    selectedKey = key;
    const cue = cueByKey(key);
    if (cue && andSeek) seek(cue.start_ms);
    for (const el of document.querySelectorAll(".cue-row[data-key], .cue-block[data-key]")) {
      if (+el.dataset.key === key) el.setAttribute("aria-current", "true"); else el.removeAttribute("aria-current");
    }
    if (cue && cue.concept !== before) drawTimeline();  // its concept's curve is drawn bolder
    if (!quiet) {
      const row = document.querySelector('.cue-row[data-key="' + key + '"]');
      if (row) revealRow(row);
    }
  }
  // Wide screens scroll the cue column on its own: move only it, so the player stays in view.
  function revealRow(row) {
    const column = row.closest(".side");
    if (column && getComputedStyle(column).overflowY === "auto") {
      const top = row.offsetTop - column.offsetTop;
      if (top < column.scrollTop || top + row.offsetHeight > column.scrollTop + column.clientHeight) column.scrollTop = top - 8;
    } else {
      row.scrollIntoView({ block: "nearest" });
    }
  }

  function deleteCue(key) {
    const gone = cueByKey(key);
    if (!gone) return;
    record("delete a cue");
    cues = cues.filter((c) => c.key !== key);
    if (gone.fromEvent) promoted.delete(gone.fromEvent);
    const rest = sorted();
    selectedKey = rest.length ? (rest.find((c) => c.start_ms >= gone.start_ms) || rest[rest.length - 1]).key : null;
    rebuild(selectedKey, "seek");
    say("Deleted the cue at " + clock(gone.start_ms) + ".");
  }
  function splitCue() {
    const cue = selected(), at = Math.round(nowMs() / SNAP_MS) * SNAP_MS;
    if (!cue || at - cue.start_ms < MIN_CUE_MS || cue.end_ms - at < MIN_CUE_MS) {
      say("To split, put the playhead inside the selected cue, at least 0.1 s from its ends.");
      return;
    }
    record("split a cue");
    const second = { ...cue, start_ms: at, key: nextKey++, identifier: "", fromEvent: null };
    cue.end_ms = at;
    cues.push(second);
    selectedKey = second.key;
    rebuild(second.key, "text");
    say("Split at " + clock(at) + ".");
  }
  function mergeCue() {
    const list = sorted(), at = list.findIndex((c) => c.key === selectedKey);
    if (at < 0 || at + 1 >= list.length) { say("Select a cue that has a next cue to merge with."); return; }
    record("merge two cues");
    const [first, second] = [list[at], list[at + 1]];
    first.end_ms = Math.max(first.end_ms, second.end_ms);
    first.text = first.text + "\n" + second.text;
    cues = cues.filter((c) => c.key !== second.key);
    if (second.fromEvent) promoted.delete(second.fromEvent);
    rebuild(first.key, "text");
    say("Merged into the cue at " + clock(first.start_ms) + ".");
  }

  // ---- dropped candidates -----------------------------------------------------------------
  function renderDropped() {
    const rows = data.dropped.map((candidate) => {
      const row = document.createElement("li");
      row.className = "dropped-row";
      if (candidate.concept) row.style.setProperty("--concept", conceptColour(candidate.concept));
      const head = document.createElement("div");
      head.className = "row-head";
      const listen = document.createElement("button");
      listen.type = "button";
      listen.textContent = "Go to " + clock(candidate.start_ms);
      listen.addEventListener("click", () => seek(candidate.start_ms));
      const add = document.createElement("button");
      add.type = "button";
      add.className = "promote";
      add.textContent = promoted.has(candidate.id) ? "Added" : "Add as cue";
      add.disabled = promoted.has(candidate.id);
      add.addEventListener("click", () => promote(candidate));
      const text = document.createElement("span");
      text.className = "suggested";
      text.textContent = candidate.text;
      head.append(listen, add, text);
      const reason = document.createElement("p");
      reason.className = "reason";
      reason.textContent = "Dropped by the " + candidate.rule + " rule: " + candidate.reason + " (peak score " +
        candidate.peak_score + ", " + clock(candidate.start_ms) + "–" + clock(candidate.end_ms) + ")";
      row.append(head, reason);
      return row;
    });
    byId("dropped-list").replaceChildren(...rows);
    byId("dropped-count").textContent = "(" + data.dropped.length + ")";
  }
  function promote(candidate) {
    record("add a dropped candidate");
    const cue = { start_ms: candidate.start_ms, end_ms: Math.max(candidate.end_ms, candidate.start_ms + 1),
      text: candidate.text, identifier: "", settings: "", concept: candidate.concept, key: nextKey++, fromEvent: candidate.id };
    cues.push(cue);
    promoted.add(candidate.id);
    selectedKey = cue.key;
    rebuild(cue.key, "text");
    say("Added " + candidate.text + " at " + clock(cue.start_ms) + ".");
  }

  // ---- keys: one table drives both the handler and the list shown on the page --------------
  function step(direction) {
    const list = sorted();
    if (!list.length) return;
    const at = list.findIndex((c) => c.key === selectedKey);
    const next = at < 0 ? 0 : Math.min(list.length - 1, Math.max(0, at + direction));
    select(list[next].key, true);
    const block = blockOf(list[next].key);
    if (block) block.focus();
  }
  function setTime(part, ms) {
    const cue = selected();
    if (!cue) return;
    const value = Math.max(0, Math.round(ms));
    if (part === "start" ? value >= cue.end_ms : value <= cue.start_ms) {
      say("The " + part + " would pass the other end of the cue; nothing changed.");
      return;
    }
    record("move the " + part + " of a cue");
    cue[part + "_ms"] = value;
    rebuild();
    const block = blockOf(cue.key);
    if (block) block.focus();
    say((part === "start" ? "Start " : "End ") + clock(value));
  }
  const nudge = (part, delta) => { const cue = selected(); if (cue) setTime(part, cue[part + "_ms"] + delta); };
  const playPause = () => (player.paused ? player.play() : player.pause());
  const KEYS = [
    { keys: ["Space"], match: (e) => e.key === " ", what: "play or pause", run: playPause },
    { keys: ["Ctrl+Enter"], ctrl: true, match: (e) => e.key === "Enter", what: "play or pause, even while typing", run: playPause },
    { keys: ["a", "d"], match: (e) => e.key === "a" || e.key === "d", what: "previous / next cue (the player moves there)", run: (e) => step(e.key === "d" ? 1 : -1) },
    { keys: ["c"], match: (e) => e.key === "c", what: "play the selected cue from its start", run: () => { const cue = selected(); if (cue) { seek(cue.start_ms); return player.play(); } } },
    { keys: ["q", "w"], match: (e) => e.key === "q" || e.key === "w", what: "start 100 ms earlier / later (with Shift: 10 ms)", run: (e) => nudge("start", e.key === "q" ? -100 : 100) },
    { keys: ["Q", "W"], hidden: true, match: (e) => e.key === "Q" || e.key === "W", run: (e) => nudge("start", e.key === "Q" ? -10 : 10) },
    { keys: ["e", "r"], match: (e) => e.key === "e" || e.key === "r", what: "end 100 ms earlier / later (with Shift: 10 ms)", run: (e) => nudge("end", e.key === "e" ? -100 : 100) },
    { keys: ["E", "R"], hidden: true, match: (e) => e.key === "E" || e.key === "R", run: (e) => nudge("end", e.key === "E" ? -10 : 10) },
    { keys: ["s", "f"], match: (e) => e.key === "s" || e.key === "f", what: "start / end of the selected cue at the playhead", run: (e) => setTime(e.key === "s" ? "start" : "end", nowMs()) },
    { keys: ["x"], match: (e) => e.key === "x", what: "split the selected cue at the playhead", run: splitCue },
    { keys: ["m"], match: (e) => e.key === "m", what: "merge the selected cue with the next one", run: mergeCue },
    { keys: ["Enter"], match: (e) => e.key === "Enter" && e.target.classList.contains("cue-block"), what: "type in the selected cue's text", run: () => { const field = document.querySelector('.cue-row[data-key="' + selectedKey + '"] .cue-text'); if (field) field.focus(); } },
    { keys: ["Delete"], match: (e) => e.key === "Delete", what: "delete the selected cue", run: () => { if (selectedKey !== null) deleteCue(selectedKey); } },
    { keys: ["+", "-"], match: (e) => e.key === "+" || e.key === "=" || e.key === "-", what: "zoom the timeline in / out", run: (e) => zoom(e.key === "-" ? 2 : 0.5) },
    { keys: ["0"], match: (e) => e.key === "0", what: "show the whole file", run: () => setView(0, durationMs()) },
    { keys: ["Ctrl+Z"], ctrl: true, match: (e) => e.key.toLowerCase() === "z" && !e.shiftKey, what: "undo", run: undo },
    { keys: ["Ctrl+Shift+Z", "Ctrl+Y"], ctrl: true, match: (e) => (e.key.toLowerCase() === "z" && e.shiftKey) || e.key.toLowerCase() === "y", what: "redo", run: redo },
    { keys: ["Ctrl+S"], ctrl: true, match: (e) => e.key.toLowerCase() === "s", what: data.save ? "save to " + data.captions.name : "download the track", run: () => (data.save ? saveInPlace() : download(data.captions.format)) },
  ];
  function renderKeys() {
    const items = [];
    for (const entry of KEYS.filter((k) => !k.hidden)) {
      const term = document.createElement("dt");
      entry.keys.forEach((name, n) => {
        if (n) term.append(" / ");
        const kbd = document.createElement("kbd");
        kbd.textContent = name;
        term.appendChild(kbd);
      });
      const what = document.createElement("dd");
      what.textContent = entry.what;
      items.push(term, what);
    }
    byId("key-list").replaceChildren(...items);
  }
  document.addEventListener("keydown", (event) => {
    const target = event.target;
    const typing = target instanceof HTMLInputElement && target.type !== "range" && target.type !== "checkbox" ||
      target instanceof HTMLTextAreaElement;
    const ctrl = event.ctrlKey || event.metaKey;
    if (typing && event.key === "Escape") { target.blur(); return; }
    if (event.altKey || (typing && !ctrl)) return;
    // Space and Enter keep working on ordinary buttons and controls; on a cue block they are ours
    const control = (target instanceof HTMLButtonElement && !target.classList.contains("cue-block")) ||
      target instanceof HTMLMediaElement || target instanceof HTMLInputElement || target.tagName === "SUMMARY";
    if (control && (event.key === " " || event.key === "Enter") && !ctrl) return;
    const entry = KEYS.find((k) => !!k.ctrl === ctrl && k.match(event));
    if (!entry) return;
    event.preventDefault();
    const result = entry.run(event);
    if (result && result.catch) result.catch(() => {});
  });

  // ---- saving -----------------------------------------------------------------------------
  function exportText(format) {
    const list = sorted();
    if (format === "srt") {
      return list.map((c, i) => (i + 1) + "\n" + stamp(c.start_ms, true) + " --> " + stamp(c.end_ms, true) + "\n" +
        (lines(c.text).map(srtLine).join("\n") || " ") + "\n").join("\n");
    }
    const blocks = ["WEBVTT"].concat(data.captions.notes, data.captions.header_blocks);
    for (const c of list) {
      const timing = stamp(c.start_ms) + " --> " + stamp(c.end_ms) + (c.settings ? " " + c.settings : "");
      // an identifier may not hold "-->" or a line break (W3C WebVTT); drop a damaged one
      const ident = c.identifier && !/-->|\n/.test(c.identifier) ? c.identifier + "\n" : "";
      blocks.push(ident + timing + "\n" + vttPayload(c.text));
    }
    return blocks.join("\n\n") + "\n";
  }
  function download(format) {
    const text = exportText(format);
    const name = data.captions.stem + "." + format;
    const url = URL.createObjectURL(new Blob([text], { type: format === "srt" ? "application/x-subrip" : "text/vtt" }));
    const link = document.createElement("a");
    link.href = url;
    link.download = name;
    document.body.appendChild(link);
    link.click();
    link.remove();
    setTimeout(() => URL.revokeObjectURL(url), 10000);
    savedId = stateId;
    markDirty();
    say("Downloaded " + cues.length + " cue(s) as " + name + " (your browser's download folder).");
  }
  let saving = false;
  async function saveInPlace() {
    if (saving) return;
    saving = true;
    const id = stateId;
    try {
      const response = await fetch(data.save.url, {
        method: "POST", headers: { "Content-Type": "application/json" },
        body: JSON.stringify({ text: exportText(data.save.format), cues: cues.length, version: data.save.version }),
      });
      const answer = await response.json();
      if (!response.ok) { fail("save", "Not saved: " + answer.error + "."); return; }
      data.save.version = answer.version;
      savedId = id;
      clearError("save");
      markDirty();
      say("Saved " + answer.cues + " cue(s) to " + answer.name + ".");
    } catch (problem) {
      fail("save", "Not saved: the review server did not answer (is `captioner review --serve` still running?).");
    } finally {
      saving = false;
    }
  }

  byId("save-vtt").addEventListener("click", () => download("vtt"));
  byId("save-srt").addEventListener("click", () => download("srt"));
  byId("undo").addEventListener("click", undo);
  byId("redo").addEventListener("click", redo);
  byId("split").addEventListener("click", splitCue);
  byId("merge").addEventListener("click", mergeCue);
  if (data.save) {
    const button = byId("save");
    button.hidden = false;
    button.textContent = "Save to " + data.captions.name;
    button.addEventListener("click", saveInPlace);
  }
  // follow playback: the playhead moves every frame, and the view pages along with it
  function follow() {
    refreshNowShowing();
    if (byId("follow").checked) reveal(nowMs());
    if (!player.paused) requestAnimationFrame(follow);
  }
  player.addEventListener("play", () => requestAnimationFrame(follow));
  player.addEventListener("timeupdate", refreshNowShowing);
  player.addEventListener("seeked", refreshNowShowing);
  player.addEventListener("loadedmetadata", () => setView(view.start, view.span));

  document.title = "Review: " + data.media.name;
  byId("page-title").textContent = "Sound-caption review: " + data.media.name;
  renderLegend();
  renderKeys();
  rebuild();
  markDirty();
  say(cues.length + " cue(s) from " + data.captions.name + (data.save ? "; saves go straight to that file." : "."));
  performance.mark("review-ready");

  // for scripted checks and the benchmark
  window.soundCaptionReview = Object.freeze({
    exportText: exportText, cueCount: () => cues.length, dirty: dirty,
    view: () => ({ start: view.start, span: view.span }), setView: setView,
  });
})();
