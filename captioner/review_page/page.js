"use strict";
// Review page logic. Every piece of data reaches the DOM through textContent or
// attributes set by property, never as markup, so cue text cannot become HTML.
(function () {
  const data = JSON.parse(document.getElementById("review-data").textContent);
  const NUDGE_MS = 100;
  const COLOURS = ["#1f77b4", "#b45309", "#15803d", "#9d174d", "#6d28d9", "#0e7490", "#854d0e", "#be123c"];
  const SVG = "http://www.w3.org/2000/svg";
  const byId = (id) => document.getElementById(id);

  let nextKey = 1;
  const cues = data.cues.map((c) => ({ ...c, key: nextKey++, fromEvent: null }));
  const promoted = new Set();
  let selectedKey = cues.length ? cues[0].key : null;

  // ---- time helpers -------------------------------------------------------
  function clock(ms) {
    const whole = Math.max(0, Math.round(ms));
    const h = Math.floor(whole / 3600000), m = Math.floor(whole / 60000) % 60;
    const s = Math.floor(whole / 1000) % 60, t = whole % 1000;
    const pad = (n, w) => String(n).padStart(w, "0");
    return (h ? h + ":" + pad(m, 2) : pad(m, 2)) + ":" + pad(s, 2) + "." + pad(t, 3);
  }
  function stamp(ms, comma) {
    const whole = Math.max(0, Math.round(ms));
    const pad = (n, w) => String(n).padStart(w, "0");
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
  function sorted() { return cues.slice().sort((a, b) => a.start_ms - b.start_ms || a.end_ms - b.end_ms || a.key - b.key); }
  function durationMs() {
    const fromPlayer = isFinite(player.duration) ? player.duration * 1000 : 0;
    const lastCue = cues.reduce((top, c) => Math.max(top, c.end_ms), 0);
    return Math.max(data.duration_ms || 0, fromPlayer, lastCue, 1000);
  }
  const percent = (ms) => (100 * ms / durationMs()) + "%";

  // ---- player and live track ----------------------------------------------
  const player = document.createElement(data.media.kind === "audio" ? "audio" : "video");
  player.controls = true;
  player.preload = "auto";
  player.src = data.media.src;
  player.setAttribute("aria-label", "Media: " + data.media.name);
  byId("player-box").appendChild(player);
  const liveTrack = player.addTextTrack("captions", "Sound captions (edited)", data.captions.language || "en");
  liveTrack.mode = "showing";

  function vttEscape(text) { return text.replace(/&/g, "&amp;").replace(/</g, "&lt;").replace(/>/g, "&gt;"); }

  function refreshTrack() {
    for (const old of Array.from(liveTrack.cues || [])) liveTrack.removeCue(old);
    for (const cue of sorted()) {
      // VTTCue text is WebVTT cue markup, so escape it to show the text literally
      liveTrack.addCue(new VTTCue(cue.start_ms / 1000, cue.end_ms / 1000, vttEscape(cue.text)));
    }
    refreshNowShowing();
  }
  function refreshNowShowing() {
    const ms = player.currentTime * 1000;
    byId("now-showing").textContent = sorted().filter((c) => c.start_ms <= ms && ms < c.end_ms).map((c) => c.text).join("\n");
    playhead.style.left = percent(ms);
  }

  function seek(ms) { player.currentTime = ms / 1000; refreshNowShowing(); }

  // ---- timeline -------------------------------------------------------------
  const timeline = byId("timeline");
  const playhead = document.createElement("div");
  playhead.className = "playhead";

  function renderTimeline() {
    timeline.replaceChildren();
    const total = durationMs();
    timeline.style.width = Math.max(100, total / 1000 * 1.5) + "rem";
    const svg = document.createElementNS(SVG, "svg");
    svg.setAttribute("viewBox", "0 0 " + total + " 100");
    svg.setAttribute("preserveAspectRatio", "none");
    svg.setAttribute("aria-hidden", "true");
    const curves = data.curves || { hop_ms: 0, patch_ms: 0, concepts: {} };
    const legend = byId("legend");
    legend.replaceChildren();
    Object.keys(curves.concepts).forEach((concept, n) => {
      const colour = COLOURS[n % COLOURS.length];
      const points = curves.concepts[concept].map((score, i) =>
        (i * curves.hop_ms + curves.patch_ms / 2) + "," + (100 - score * 96).toFixed(1));
      const line = document.createElementNS(SVG, "polyline");
      line.setAttribute("points", points.join(" "));
      line.setAttribute("fill", "none");
      line.setAttribute("stroke", colour);
      line.setAttribute("stroke-width", "2");
      line.setAttribute("vector-effect", "non-scaling-stroke");
      svg.appendChild(line);
      const item = document.createElement("span");
      const swatch = document.createElement("span");
      swatch.className = "swatch";
      swatch.style.background = colour;
      item.append(swatch, document.createTextNode(concept));
      legend.appendChild(item);
    });
    timeline.appendChild(svg);
    for (const [label, top] of [["score", "0.1rem"], ["dialogue", "7.3rem"], ["cues", "11.7rem"]]) {
      const tag = document.createElement("span");
      tag.className = "lane-label";
      tag.style.top = top;
      tag.textContent = label;
      timeline.appendChild(tag);
    }
    for (const [start, end] of data.dialogue || []) {
      const span = document.createElement("div");
      span.className = "speech-span";
      span.style.left = percent(start);
      span.style.width = percent(end - start);
      span.title = "dialogue " + clock(start) + "–" + clock(end);
      timeline.appendChild(span);
    }
    for (const cue of sorted()) {
      const block = document.createElement("button");
      block.type = "button";
      block.className = "cue-block";
      block.dataset.key = cue.key;
      block.style.left = percent(cue.start_ms);
      block.style.width = percent(cue.end_ms - cue.start_ms);
      block.textContent = cue.text.split("\n")[0];
      block.setAttribute("aria-label", clock(cue.start_ms) + " " + cue.text);
      if (cue.key === selectedKey) block.setAttribute("aria-current", "true");
      block.addEventListener("click", () => select(cue.key, true));
      timeline.appendChild(block);
    }
    timeline.appendChild(playhead);
  }

  // ---- cue list -------------------------------------------------------------
  function field(labelText, value, onCommit) {
    const label = document.createElement("label");
    const input = document.createElement("input");
    input.type = "text";
    input.inputMode = "decimal";
    input.value = clock(value);
    input.addEventListener("change", () => onCommit(input));
    label.append(document.createTextNode(labelText), input);
    return [label, input];
  }

  function renderList(focusKey, focusPart) {
    const list = byId("cue-list");
    list.replaceChildren();
    let toFocus = null;
    for (const cue of sorted()) {
      const row = document.createElement("li");
      row.className = "cue-row";
      row.dataset.key = cue.key;
      if (cue.key === selectedKey) row.setAttribute("aria-current", "true");
      const head = document.createElement("div");
      head.className = "row-head";
      const play = document.createElement("button");
      play.type = "button";
      play.className = "seek";
      play.textContent = "Go to " + clock(cue.start_ms);
      play.addEventListener("click", () => select(cue.key, true));
      const remove = document.createElement("button");
      remove.type = "button";
      remove.className = "delete";
      remove.textContent = "Delete";
      remove.setAttribute("aria-label", "Delete cue at " + clock(cue.start_ms));
      remove.addEventListener("click", () => deleteCue(cue.key));
      const ident = document.createElement("span");
      ident.className = "cue-id";
      ident.textContent = cue.identifier ? "id " + cue.identifier : (cue.fromEvent ? "added from " + cue.fromEvent : "added by hand");
      head.append(play, remove, ident);

      const times = document.createElement("div");
      times.className = "times";
      const commitTime = (part) => (input) => {
        const ms = parseClock(input.value);
        const start = part === "start" ? ms : cue.start_ms;
        const end = part === "end" ? ms : cue.end_ms;
        if (ms === null || !(end > start)) {
          input.setAttribute("aria-invalid", "true");
          say("Times must read like 01:02.500 and the end must come after the start.");
          return;
        }
        input.removeAttribute("aria-invalid");
        cue[part + "_ms"] = ms;
        changed(cue.key, part);
      };
      const [startLabel, startInput] = field("Start", cue.start_ms, commitTime("start"));
      const [endLabel, endInput] = field("End", cue.end_ms, commitTime("end"));
      startInput.className = "cue-start";
      endInput.className = "cue-end";
      times.append(startLabel, endLabel);

      const text = document.createElement("textarea");
      text.className = "cue-text";
      text.value = cue.text;
      text.rows = Math.max(2, cue.text.split("\n").length);
      text.setAttribute("aria-label", "Text of cue at " + clock(cue.start_ms));
      text.addEventListener("input", () => { cue.text = text.value; refreshTrack(); renderTimeline(); });
      text.addEventListener("focus", () => select(cue.key, false, true));

      row.append(head, times, text);
      list.appendChild(row);
      if (cue.key === focusKey) toFocus = { start: startInput, end: endInput, text: text, seek: play }[focusPart] || null;
    }
    byId("cue-count").textContent = "(" + cues.length + ")";
    if (toFocus) toFocus.focus();
  }

  function changed(key, part) {
    refreshTrack();
    renderTimeline();
    renderList(key, part);
  }

  function select(key, andSeek, quiet) {
    selectedKey = key;
    const cue = cues.find((c) => c.key === key);
    if (cue && andSeek) seek(cue.start_ms);
    for (const el of document.querySelectorAll("[data-key]")) {
      if (+el.dataset.key === key) el.setAttribute("aria-current", "true"); else el.removeAttribute("aria-current");
    }
    if (!quiet) {
      const row = document.querySelector('.cue-row[data-key="' + key + '"]');
      if (row) reveal(row);
    }
  }

  // Wide screens scroll the cue column on its own: move only it, so the player stays in view.
  function reveal(row) {
    const column = row.closest(".side");
    if (column && getComputedStyle(column).overflowY === "auto") {
      const top = row.getBoundingClientRect().top - column.getBoundingClientRect().top + column.scrollTop;
      if (top < column.scrollTop || top + row.offsetHeight > column.scrollTop + column.clientHeight) column.scrollTop = top - 8;
    } else {
      row.scrollIntoView({ block: "nearest" });
    }
  }

  function deleteCue(key) {
    const index = cues.findIndex((c) => c.key === key);
    if (index < 0) return;
    const [gone] = cues.splice(index, 1);
    if (gone.fromEvent) { promoted.delete(gone.fromEvent); renderDropped(); }
    const rest = sorted();
    selectedKey = rest.length ? (rest.find((c) => c.start_ms >= gone.start_ms) || rest[rest.length - 1]).key : null;
    say("Deleted the cue at " + clock(gone.start_ms) + ".");
    changed(selectedKey, "seek");
  }

  // ---- dropped candidates -------------------------------------------------------
  function renderDropped() {
    const list = byId("dropped-list");
    list.replaceChildren();
    for (const candidate of data.dropped) {
      const row = document.createElement("li");
      row.className = "dropped-row";
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
      list.appendChild(row);
    }
    byId("dropped-count").textContent = "(" + data.dropped.length + ")";
  }

  function promote(candidate) {
    const cue = { start_ms: candidate.start_ms, end_ms: Math.max(candidate.end_ms, candidate.start_ms + 1),
      text: candidate.text, identifier: "", settings: "", key: nextKey++, fromEvent: candidate.id };
    cues.push(cue);
    promoted.add(candidate.id);
    selectedKey = cue.key;
    renderDropped();
    say("Added " + candidate.text + " at " + clock(cue.start_ms) + ".");
    changed(cue.key, "text");
  }

  // ---- keyboard -------------------------------------------------------------
  function step(direction) {
    const list = sorted();
    if (!list.length) return;
    const at = list.findIndex((c) => c.key === selectedKey);
    const next = at < 0 ? 0 : Math.min(list.length - 1, Math.max(0, at + direction));
    select(list[next].key, true);
    const block = timeline.querySelector('.cue-block[data-key="' + list[next].key + '"]');
    if (block) block.focus();
  }
  function nudge(part, delta) {
    const cue = cues.find((c) => c.key === selectedKey);
    if (!cue) return;
    const value = Math.max(0, cue[part + "_ms"] + delta);
    if (part === "start" ? value >= cue.end_ms : value <= cue.start_ms) return;
    cue[part + "_ms"] = value;
    refreshTrack();
    renderTimeline();
    renderList();
    const block = timeline.querySelector('.cue-block[data-key="' + cue.key + '"]');
    if (block) block.focus();
    say((part === "start" ? "Start " : "End ") + clock(value));
  }
  document.addEventListener("keydown", (event) => {
    const target = event.target;
    const typing = target instanceof HTMLInputElement || target instanceof HTMLTextAreaElement;
    if (typing) { if (event.key === "Escape") target.blur(); return; }
    if (event.ctrlKey || event.metaKey || event.altKey) return;
    const onControl = target instanceof HTMLButtonElement || target instanceof HTMLMediaElement || target.tagName === "SUMMARY";
    const actions = {
      k: () => (player.paused ? player.play() : player.pause()),
      " ": onControl ? null : () => (player.paused ? player.play() : player.pause()),
      n: () => step(1), p: () => step(-1),
      "[": () => nudge("start", -NUDGE_MS), "]": () => nudge("start", NUDGE_MS),
      "{": () => nudge("end", -NUDGE_MS), "}": () => nudge("end", NUDGE_MS),
    };
    const action = actions[event.key];
    if (action) { event.preventDefault(); const result = action(); if (result && result.catch) result.catch(() => {}); }
  });

  // ---- saving -----------------------------------------------------------------
  function exportText(format) {
    const list = sorted();
    if (format === "srt") {
      return list.map((c, i) => (i + 1) + "\n" + stamp(c.start_ms, true) + " --> " + stamp(c.end_ms, true) + "\n" +
        c.text.replace(/\r/g, "").replace(/\n{2,}/g, "\n").trim() + "\n").join("\n");
    }
    const blocks = ["WEBVTT"].concat(data.captions.notes, data.captions.header_blocks);
    for (const c of list) {
      const lines = c.text.replace(/\r/g, "").split("\n").filter((line) => line.trim()).map(vttEscape);
      const timing = stamp(c.start_ms) + " --> " + stamp(c.end_ms) + (c.settings ? " " + c.settings : "");
      // an identifier may not hold "-->" or a line break (W3C WebVTT); drop a damaged one
      const ident = c.identifier && !/-->|\n/.test(c.identifier) ? c.identifier + "\n" : "";
      blocks.push(ident + timing + "\n" + (lines.join("\n") || "&nbsp;"));
    }
    return blocks.join("\n\n") + "\n";
  }
  function save(format) {
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
    say("Saved " + cues.length + " cue(s) as " + name + " (your browser's download folder).");
  }
  function say(message) { byId("status").textContent = message; }

  byId("save-vtt").addEventListener("click", () => save("vtt"));
  byId("save-srt").addEventListener("click", () => save("srt"));
  player.addEventListener("timeupdate", refreshNowShowing);
  player.addEventListener("seeked", refreshNowShowing);
  player.addEventListener("loadedmetadata", () => { renderTimeline(); refreshNowShowing(); });

  document.title = "Review: " + data.media.name;
  byId("page-title").textContent = "Sound-caption review: " + data.media.name;
  refreshTrack();
  renderTimeline();
  renderList();
  renderDropped();
  say(cues.length + " cue(s) from " + data.captions.name + ".");

  // for scripted checks: the text "save" would download, and the cue count
  window.soundCaptionReview = Object.freeze({ exportText: exportText, cueCount: () => cues.length });
})();
