// filtertwin preview window: talks to the listen process over one WebSocket.
// Our own code, no library; see LICENSE.txt.
"use strict";

const $ = id => document.getElementById(id);
const WAY_COLOURS = { low: "#c8691c", mid: "#2f8a43", high: "#2b6cb0", sum: "#1d232b" };
const page = { state: null, live: null, fresh: false, liveCount: 0, envelope: null, socket: null, drawn: 0 };

function el(tag, attrs, ...children) {
  const node = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs || {})) {
    if (k === "class") node.className = v;
    else if (k.startsWith("on")) node.addEventListener(k.slice(2), v);
    else if (v !== false && v !== null && v !== undefined) node.setAttribute(k, v === true ? "" : v);
  }
  for (const c of children) node.append(c instanceof Node ? c : document.createTextNode(c));
  return node;
}

function send(cmd, ...args) {
  if (page.socket && page.socket.readyState === WebSocket.OPEN) {
    page.socket.send(JSON.stringify({ cmd, args: args.map(String) }));
  }
}

function hz(v) {
  if (v === null || v === undefined) return "–";
  return v >= 1000 ? (v / 1000).toPrecision(4) + " kHz" : v.toPrecision(4) + " Hz";
}
// fixed decimals, and never "-0.0" (a value that rounds to zero is shown without a sign)
const num = (v, d = 3) => (v === null || v === undefined) ? "–" : Number(v).toFixed(d).replace(/^-(0\.?0*)$/, "$1");
const dbfs = p => p > 0 ? (20 * Math.log10(p)).toFixed(1) : "-inf";

// --- what is heard -------------------------------------------------------------------------

function renderChoices(s) {
  const box = $("candidates");
  box.replaceChildren(el("span", { class: "label" }, "candidate"));
  s.candidates.forEach((c, i) => {
    // as the terminal's fidelity line puts it: the twin is within X dB (at F) of the analog model
    const each = c.fidelity.map(f => `${f.filter}: within ${num(f.max_db, 3)} dB (at ${hz(f.at_hz)}) and ` +
      `${num(f.max_deg, 2)}° (at ${hz(f.at_deg_hz)}) of the analog model`);
    const worst = c.fidelity.reduce((a, f) => (f.max_db > a.max_db ? f : a));
    const where = (c.fidelity.length > 1 ? `${worst.filter}, ` : "") + `at ${hz(worst.at_hz)}`;
    box.append(el("button", {
      class: "cand" + (s.selected === i ? " on" : ""), "data-candidate": c.label,
      title: `${c.title}\ndigital twin against the analog circuit:\n${each.join("\n")}`,
      onclick: () => send("select", c.label),
    }, el("b", {}, `${c.label} · ${c.name}`),
      el("small", { "data-fidelity": c.label }, `twin within ${num(worst.max_db, 3)} dB of analog (${where})` +
        (c.match_db !== null ? ` · level match ${num(c.match_db, 1)} dB` : ""))));
  });
  box.append(el("button", {
    class: "cand" + (s.selected === null ? " on" : ""), "data-candidate": "bypass",
    onclick: () => send("bypass"),
  }, el("b", {}, "bypass"), el("small", {}, "the input, unfiltered")));

  const ways = $("ways");
  ways.replaceChildren();
  const heard = s.selected === null ? null : s.candidates[s.selected];
  if (heard) {
    ways.append(el("span", { class: "label" }, "solo"));
    for (const w of ["sum", ...heard.ways]) {
      ways.append(el("button", { class: s.solo === w ? "on" : "", "data-solo": w,
        onclick: () => send("solo", w) }, w === "sum" ? "all ways" : `${w} (${heard.filters[heard.ways.indexOf(w)]})`));
    }
    if (heard.ways.length > 1) {
      ways.append(el("span", { class: "label" }, "mute"));
      for (const w of heard.ways) {
        ways.append(el("button", { class: s.muted.includes(w) ? "on" : "", "data-mute": w,
          onclick: () => send("mute", w) }, w));
      }
    }
  }
  $("capture-box").hidden = !s.capture;
  $("capture").classList.toggle("on", s.capture === "on");
  $("noise-box").hidden = !s.noise;
  $("noise").classList.toggle("on", s.noise === "on");
  $("noise").dataset.state = s.noise;
}

// --- the circuit: stage cards ----------------------------------------------------------------

function partRow(card, p) {
  const step = change => () => send("part", card.way, card.stage, p.name, change);
  return el("div", { class: "part" },
    el("span", { class: "name" }, p.name),
    el("span", { class: "value", "data-part": `${card.way}-${card.stage}-${p.name}` }, p.text),
    el("button", { title: `one ${p.series} value down`, "data-step": `${card.way}-${card.stage}-${p.name}-down`,
      onclick: step("-1") }, "−"),
    el("button", { title: `one ${p.series} value up`, "data-step": `${card.way}-${card.stage}-${p.name}-up`,
      onclick: step("+1") }, "+"),
    el("span", { class: "series" }, p.series));
}

function stageCard(card) {
  const q = v => (v === null ? "–" : num(v, 3));
  return el("div", { class: "card", "data-card": `${card.way}-${card.stage}`, "data-label": card.label },
    el("h3", {}, card.title),
    el("div", { class: "kind" }, card.kind + (card.gain && card.gain !== 1 ? `, K ${num(card.gain, 3)}` : "")),
    ...card.parts.map(p => partRow(card, p)),
    el("div", { class: "numbers" },
      el("span", { class: "h" }, ""), el("span", { class: "h" }, "f0"), el("span", { class: "h" }, "Q"),
      el("span", { class: "h" }, "target"), el("span", {}, hz(card.target_f0_hz)), el("span", {}, q(card.target_q)),
      el("span", { class: "h" }, "as built"),
      el("span", { "data-f0": `${card.way}-${card.stage}`, "data-value": card.built_f0_hz }, hz(card.built_f0_hz)),
      el("span", { "data-q": `${card.way}-${card.stage}`, "data-value": card.built_q }, q(card.built_q))),
    el("div", { class: "flags" },
      `internal peak ${num(card.peak_db, 1)} dB`,
      card.clip_input_dbfs !== null ? ` · clips above ${num(card.clip_input_dbfs, 1)} dBFS input` : "",
      el("span", { class: "flag", "data-clip-flag": card.label, hidden: !card.clipping,
        title: "the amplifier reached its output swing within the last second" }, "clipping"),
      el("span", { class: "flag", "data-slew-flag": card.label, hidden: !card.slewing,
        title: "the amplifier's output was held to its slew rate within the last second" }, "slewing")));
}

// the clip and slew flags follow the live meters (stages named as the status line names them)
function lightFlags(m) {
  for (const card of document.querySelectorAll("[data-label]")) {
    const label = card.dataset.label;
    const clip = m.clipping.includes(label), slew = m.slewing.includes(label);
    card.classList.toggle("clip", clip);
    card.classList.toggle("slew", slew);
    card.querySelector("[data-clip-flag]").hidden = !clip;
    card.querySelector("[data-slew-flag]").hidden = !slew;
  }
}

function renderCircuit(s) {
  const rows = $("rows");
  rows.replaceChildren();
  const heard = s.selected === null ? null : s.candidates[s.selected];
  $("circuit-title").textContent = heard ? `stages of ${heard.label} · ${heard.name}` : "bypass: no stages";
  $("undo").disabled = !s.can_undo;
  $("redo").disabled = !s.can_redo;
  if (!heard) return;
  heard.ways.forEach((way, k) => {
    const row = el("div", { class: `way-row way-${way}` }, el("div", { class: "way-tag" }, way), el("span", { class: "end" }, "in"));
    for (const card of s.cards.filter(c => c.way === way)) {
      row.append(el("div", { class: "wire" }), stageCard(card));
    }
    row.append(el("div", { class: "wire" }), el("span", { class: "end" }, "out"));
    const corner = heard.corners[k];
    if (corner.movable) {
      const input = el("input", { type: "text", value: corner.corner_hz.map(f => f.toPrecision(4)).join(" "),
        "aria-label": `corner of ${way}`, "data-corner": way });
      row.append(el("div", { class: "corner" }, el("span", { class: "small" }, "corner Hz"), input,
        el("button", { onclick: () => send("corner", way, ...input.value.trim().split(/\s+/)) }, "move")));
    }
    rows.append(row);
  });
}

// --- plots -----------------------------------------------------------------------------------

function responsePlot() {
  const s = page.state;
  const canvas = $("response");
  if (!s || !s.response) { Plot.draw(canvas, { xMin: 10, xMax: 24000, yMin: -60, yMax: 10, series: [] }); return; }
  const view = $("response-view").value;
  const key = { magnitude: ["analog_db", "dB"], phase: ["phase_deg", "degrees"], delay: ["delay_s", "ms"] }[view];
  const scale = view === "delay" ? 1000 : 1;
  const pick = c => c[key[0]].map(v => (v === null ? null : v * scale));
  const curves = [...s.response.ways, s.response.sum];
  const series = [];
  const bands = [];
  if (view === "magnitude" && $("envelope").checked && page.envelope && page.envelope.version === s.version) {
    for (const e of page.envelope.ways) bands.push({ x: s.f_hz, lo: e.min_db, hi: e.max_db, color: WAY_COLOURS[e.way] + "33" });
  }
  if (view === "magnitude" && s.ghost) {
    for (const g of [...s.ghost.ways, s.ghost.sum]) series.push({ x: s.f_hz, y: g.analog_db, color: "#b9b4aa", width: 2.5 });
  }
  for (const c of curves) {
    const colour = WAY_COLOURS[c.way] || "#555";
    series.push({ x: s.f_hz, y: pick(c), color: colour, width: c.way === "sum" ? 2.4 : 1.8 });
    if (view === "magnitude" && $("twin").checked) series.push({ x: s.f_hz, y: c.twin_db, color: colour, width: 1, dash: [5, 4] });
  }
  let yMin = -60, yMax = 10;
  if (view !== "magnitude") {
    const all = curves.flatMap(pick).filter(v => v !== null && isFinite(v));
    yMin = Math.min(...all); yMax = Math.max(...all);
    if (yMax - yMin < 1e-6) { yMin -= 1; yMax += 1; }
    const pad = 0.05 * (yMax - yMin); yMin -= pad; yMax += pad;
  } else {
    const top = Math.max(...s.response.sum.analog_db, ...s.response.ways.flatMap(c => c.analog_db));
    yMax = Math.ceil((top + 3) / 10) * 10; yMin = yMax - 70;
  }
  Plot.draw(canvas, { xMin: s.f_hz[0], xMax: s.f_hz[s.f_hz.length - 1], yMin, yMax, yLabel: key[1], series, bands });
  canvas.dataset.drawn = String(s.version) + ":" + view;
  const legend = $("response-key");
  legend.replaceChildren(...curves.map(c => el("span", {}, el("span", { class: "swatch", style: `background:${WAY_COLOURS[c.way] || "#555"}` }), c.way)),
    el("span", {}, "solid: analog as built; dashed: twin" + (s.ghost ? "; grey: before the last edit" : "")));
}

function spectrumPlot() {
  const live = page.live;
  if (!live || !live.spectrum) return;
  const sp = live.spectrum;
  Plot.draw($("spectrum"), {
    xMin: sp.f_hz[0], xMax: sp.f_hz[sp.f_hz.length - 1], yMin: -120, yMax: 0, yLabel: "dBFS",
    series: [{ x: sp.f_hz, y: sp.in_db, color: "#9aa3ad", width: 1.2 }, { x: sp.f_hz, y: sp.out_db, color: "#1f6f8b", width: 1.6 }],
  });
  page.drawn += 1;
  $("spectrum").dataset.frames = String(page.drawn);
}

// --- meters ----------------------------------------------------------------------------------

function meterLevel(peak) {
  const db = peak > 0 ? 20 * Math.log10(peak) : -120;
  return [Math.max(0, Math.min(1, (db + 60) / 60)), db > -1.5];
}

function meter(name) {
  const value = el("span", {}, "");
  const fill = el("div", { class: "fill" });
  const node = el("div", { class: "meter", "data-meter": name },
    el("div", { class: "row" }, el("span", {}, name), value), el("div", { class: "bar" }, fill));
  return { node, value, fill };
}

// the meters are made once per set of ways and then only their numbers and widths change
function renderMeters(m) {
  const names = ["output", ...m.way_peaks.map(([w]) => w)];
  if (!page.meters || page.meters.key !== names.join()) {
    const rows = names.map(meter);
    $("meter-rows").replaceChildren(...rows.map(r => r.node));
    page.meters = { key: names.join(), rows };
  }
  const peaks = [m.output_peak, ...m.way_peaks.map(([, p]) => p)];
  page.meters.rows.forEach((row, i) => {
    const [fraction, hot] = meterLevel(peaks[i]);
    row.value.textContent = `${dbfs(peaks[i])} dBFS`;
    row.fill.style.width = `${(100 * fraction).toFixed(1)}%`;
    row.fill.classList.toggle("hot", hot);
  });
  const facts = [
    ["limiter", m.limit_db < -0.05 ? `${num(m.limit_db, 1)} dB` : "0 dB"],
    ["clipping", m.clipping.length ? m.clipping.join(", ") : "none"],
    ["slewing", m.slewing.length ? m.slewing.join(", ") : "none"],
    ["xruns", String(m.xruns) + (m.starved_frames ? ` (${m.starved_frames} late frames)` : "")],
    ["callback", `${num(100 * m.callback_load, 1)} % (max ${num(100 * m.callback_max_load, 0)} %)`],
    ["latency", m.latency_s === null ? "–" : `${num(1000 * m.latency_s, 1)} ms`],
    ["level", `${num(m.level_db, 1)} dB` + (m.ramp < 0.999 ? ` (ramp ${num(100 * m.ramp, 0)} %)` : "")],
    ["ADC capture", page.state && page.state.capture ? page.state.capture : "not set up"],
    ["circuit noise", page.state && page.state.noise ? page.state.noise : "–"],
  ];
  if (!page.facts) {
    page.facts = facts.map(([k]) => { const dd = el("dd", {}, ""); $("facts").append(el("dt", {}, k), dd); return dd; });
  }
  facts.forEach(([, v], i) => { if (page.facts[i].textContent !== v) page.facts[i].textContent = v; });
  lightFlags(m);
  if (m.loop_s) {
    page.loopS = m.loop_s;
    $("loop-fill").style.left = `${(100 * m.position_s / m.loop_s).toFixed(2)}%`;
    const [a, b] = m.region_s;
    $("loop-region").style.left = `${(100 * a / m.loop_s).toFixed(2)}%`;
    $("loop-region").style.width = `${(100 * (b - a) / m.loop_s).toFixed(2)}%`;
    $("loop-text").dataset.position = String(m.position_s);
    $("loop-text").textContent = `at ${num(m.position_s, 1)} s of ${num(m.loop_s, 1)} s` +
      (b - a < m.loop_s - 1e-3 ? `, looping ${num(a, 1)} to ${num(b, 1)} s` : "");
  } else {
    $("loop-text").textContent = "live input";
  }
}

// --- blind trials ----------------------------------------------------------------------------

function renderBlind(b) {
  document.body.classList.toggle("blind", !b.finished);
  $("blind").hidden = false;
  $("blind-title").textContent = b.finished ? "blind trials: result" : `blind trial ${b.trial} of ${b.trials}`;
  const listen = $("blind-listen"), answer = $("blind-answer");
  listen.replaceChildren(); answer.replaceChildren();
  if (!b.finished) {
    $("blind-help").textContent = b.kind === "abx"
      ? "Listen to A, B and X as often as you like, then say which one X is."
      : "Listen to 1 and 2, then choose the one you prefer.";
    listen.append(el("span", { class: "label" }, "listen"));
    for (const button of b.buttons) {
      listen.append(el("button", { class: b.heard === button ? "on" : "", "data-listen": button,
        onclick: () => send("listen", button) }, button));
    }
    answer.append(el("span", { class: "label" }, b.kind === "abx" ? "X is" : "I prefer"));
    for (const choice of (b.kind === "abx" ? ["A", "B"] : ["1", "2"])) {
      answer.append(el("button", { "data-answer": choice, onclick: () => send("answer", choice) }, choice));
    }
    $("blind-result").textContent = `${b.answered} answered`;
  } else {
    $("blind-help").textContent = "";
    const s = b.score;
    $("blind-result").replaceChildren(
      el("p", {}, `${s.hits} of ${s.trials} ` + (b.kind === "abx" ? "right" : "for the first design")),
      el("p", { "data-p-value": String(s.p_value) }, `exact binomial p = ${s.p_value.toPrecision(4)}`),
      el("p", {}, s.text));
  }
}

// --- messages --------------------------------------------------------------------------------

function onState(s) {
  page.state = s;
  if (s.blind && !s.blind.finished) {
    // nothing that could tell X apart: the page holds no candidate, plot or meter
    for (const id of ["candidates", "ways", "rows", "meter-rows", "facts", "response-key"]) $(id).replaceChildren();
    page.meters = null; page.facts = null;
    $("hearing").textContent = `blind trial ${s.blind.trial} of ${s.blind.trials}`;
    renderBlind(s.blind);
    return;
  }
  if (s.blind) renderBlind(s.blind); else $("blind").hidden = true;
  document.body.classList.remove("blind");
  const heard = s.selected === null ? "bypass" : `${s.candidates[s.selected].label} · ${s.candidates[s.selected].name}`;
  $("hearing").textContent = `hearing ${heard}`;
  $("level").value = s.level_db;
  $("level-value").textContent = `${num(s.level_db, 1)} dB`;
  renderChoices(s);
  renderCircuit(s);
  if (page.live) lightFlags(page.live.meters);
  responsePlot();
  if ($("envelope").checked && (!page.envelope || page.envelope.version !== s.version) && s.selected !== null) send("envelope");
}

function said(text) {
  const box = $("said");
  const lines = (box.dataset.lines ? JSON.parse(box.dataset.lines) : []).concat([text]).slice(-6);
  box.dataset.lines = JSON.stringify(lines);
  box.textContent = lines.join("\n");
}

function connect() {
  const url = location.href.replace(/^http/, "ws").replace(/[?#].*$/, "").replace(/\/?$/, "/") + "ws";
  const socket = new WebSocket(url);
  page.socket = socket;
  socket.onmessage = event => {
    const msg = JSON.parse(event.data);
    if (msg.type === "state") onState(msg);
    else if (msg.type === "live") {
      if (msg.blind) { page.live = null; return; }
      page.live = msg;
      page.fresh = true;
      if (++page.liveCount % 2 === 0) renderMeters(msg.meters);  // meters at half the rate
    } else if (msg.type === "said") said(msg.text);
    else if (msg.type === "envelope") { page.envelope = msg; responsePlot(); }
    else if (msg.type === "ended") { $("ended").hidden = false; $("ended").dataset.reason = msg.reason; }
  };
  socket.onclose = () => { $("ended").hidden = false; };
}

function frame() {
  if (page.live && page.fresh) { page.fresh = false; spectrumPlot(); }  // only new data
  requestAnimationFrame(frame);
}

$("level").addEventListener("change", e => send("level", e.target.value));
$("level").addEventListener("input", e => { $("level-value").textContent = `${num(Number(e.target.value), 1)} dB`; });
$("undo").addEventListener("click", () => send("undo"));
$("redo").addEventListener("click", () => send("redo"));
$("save").addEventListener("click", () => { const name = $("save-name").value.trim(); if (name) send("save_as", name); });
$("stop").addEventListener("click", () => send("quit"));
$("loop").addEventListener("click", e => {
  if (!page.loopS) return;
  const box = $("loop").getBoundingClientRect();
  send("jump", (page.loopS * (e.clientX - box.left) / box.width).toFixed(3));
});
$("loop-set").addEventListener("click", () => send("loop", $("loop-start").value.trim() || "0", $("loop-end").value.trim() || String(page.loopS || 0)));
$("loop-all").addEventListener("click", () => send("loop", "all"));
$("capture").addEventListener("click", () => send("capture"));
$("noise").addEventListener("click", () => send("noise"));
$("response-view").addEventListener("change", responsePlot);
$("twin").addEventListener("change", responsePlot);
$("envelope").addEventListener("change", () => { if ($("envelope").checked) send("envelope"); responsePlot(); });
window.addEventListener("resize", responsePlot);
connect();
requestAnimationFrame(frame);
