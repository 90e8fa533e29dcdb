// The bench's live page. It follows the daemon through two ways in: the
// event stream (pushed, resumed from the last id seen) and the status call
// (asked at most once a second). Everything it keeps is bounded: the trace
// covers the last minutes, the event list and the points table are capped,
// and the whole-run chart is a fixed number of buckets from the daemon.
"use strict";

const STATUS_EVERY_MS = 1000;     // never ask the daemon more often
const TRACE_SECONDS = 600;        // the live trace's span
const TRACE_MAX = 2000;           // samples kept per instrument at most
const EVENTS_MAX = 300;           // lines kept in the event list
const POINTS_MAX = 5000;          // rows kept in the points table
const OVERVIEW_BUCKETS = 600;
const OVERVIEW_EVERY_MS = 30000;
const REPORT_EVERY_MS = 10000;

const ended = new Set(["finished", "failed", "stopped"]);

const state = {
  status: null,
  unitsPa: { Pa: 1 },
  run: null,            // id of the run shown
  runState: "",
  lastEventId: null,    // last event id seen on the stream
  trace: new Map(),     // instrument → {t: [], pa: []}
  roles: new Map(),     // instrument → role
  points: new Map(),    // point key → {point, missed}
  missed: new Map(),    // step index → message
  steps: new Map(),     // step index → {text, target}
  stepCount: 0,
  currentStep: -1,
  targetPa: null,
  result: null,         // the report's result once it could be worked out
  reportAt: 0,
  overviewAt: 0,
  latestKey: "",        // the point captured last while the page watched
  topPa: 1e5,           // the largest pressure seen, for the number of decimals
};

// ---- helpers ----------------------------------------------------------

const $ = (id) => document.getElementById(id);

function el(tag, attrs, ...kids) {
  const e = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs || {})) {
    if (k === "class") e.className = v; else e.setAttribute(k, v);
  }
  for (const k of kids) e.append(k instanceof Node ? k : document.createTextNode(String(k)));
  return e;
}

function unit() { return (state.status && state.status.unit) || "Pa"; }
function toUnit(pa, u) { const f = state.unitsPa[u || unit()]; return f ? pa / f : pa; }

// fmt shows a pressure in the device's unit with a fixed number of
// decimals: six significant digits at the largest pressure seen, so that
// readings, targets and errors line up and a 0.01 % reference still shows
// its last digit.
function fmt(pa, u) {
  if (pa === null || pa === undefined || !isFinite(pa)) return "—";
  const top = Math.max(toUnit(state.topPa, u), 1e-9);
  const decimals = Math.min(8, Math.max(0, 5 - Math.floor(Math.log10(top))));
  const text = toUnit(pa, u).toFixed(decimals);
  return (Number(text) === 0 ? text.replace("-", "") : text) + " " + (u || unit());
}

function seenPa(pa) { if (isFinite(pa)) state.topPa = Math.max(state.topPa, Math.abs(pa)); }

// traced says whether an instrument's readings go on the pressure trace:
// a source has none, and an ambient instrument reads the room (°C, %RH,
// the barometer's absolute pressure), not the bench's pressure.
function traced(role) { return role !== "source" && role !== "ambient"; }

// ambientText shows an ambient instrument's reading in its own unit as it
// gave it, fixed digits: 0.01 of a temperature, 0.1 %RH, 1 Pa of a
// barometer in its unit (the daemon's status prints the same).
function ambientText(i) {
  let decimals = 2;
  if (i.quantity === "humidity") decimals = 1;
  else if (i.quantity === "barometric" && state.unitsPa[i.raw_unit]) {
    decimals = Math.min(9, Math.max(0, Math.ceil(Math.log10(state.unitsPa[i.raw_unit]) - 1e-9)));
  }
  const text = i.raw.toFixed(decimals);
  return (Number(text) === 0 ? text.replace("-", "") : text) + " " + i.raw_unit;
}

function clock(t) { return t ? new Date(t).toLocaleTimeString() : "—"; }

function token() { return sessionStorage.getItem("plateau-token") || ""; }

function askToken() {
  return new Promise((resolve) => {
    const d = $("token-dialog");
    $("token-input").value = "";
    d.onclose = () => {
      const v = $("token-input").value.trim();
      if (d.returnValue === "ok" && v) { sessionStorage.setItem("plateau-token", v); resolve(v); } else resolve("");
    };
    d.showModal();
  });
}

async function getJSON(path) {
  const r = await fetch(path, { cache: "no-store" });
  if (!r.ok) {
    let msg = r.status + " " + r.statusText;
    try { msg = (await r.json()).error || msg; } catch (_) { /* not JSON */ }
    throw new Error(path + ": " + msg);
  }
  return r.json();
}

// change sends a guarded call; it asks for the token once and again only
// when the daemon refuses the one it has.
async function change(path, body) {
  for (let attempt = 0; attempt < 2; attempt++) {
    let tok = token();
    if (!tok) tok = await askToken();
    if (!tok) return { ok: false, message: "no token given: nothing was sent" };
    const r = await fetch(path, {
      method: "POST",
      headers: { "Content-Type": "application/json", Authorization: "Bearer " + tok },
      body: JSON.stringify(body || {}),
    });
    let reply = {};
    try { reply = await r.json(); } catch (_) { /* empty */ }
    if (r.status === 401 || r.status === 403) { sessionStorage.removeItem("plateau-token"); continue; }
    return { ok: r.ok, status: r.status, message: reply.error || reply.status || reply.run || r.statusText };
  }
  return { ok: false, message: "the daemon refused the token" };
}

// ---- points -----------------------------------------------------------

function pointKey(p) { return [p.cycle, p.direction, p.kind, p.index].join("/"); }

function addPoint(p, fresh) {
  const key = pointKey(p);
  if (state.points.has(key)) return false; // a resumed stream or a refetch: already shown
  state.points.set(key, p);
  if (fresh) state.latestKey = key;
  seenPa(p.nominal_pa); seenPa(p.reference.mean_pa);
  while (state.points.size > POINTS_MAX) state.points.delete(state.points.keys().next().value);
  return true;
}

function renderPoints() {
  const body = $("points").querySelector("tbody");
  const rows = [];
  let n = 0;
  // In capture order, whichever way a point arrived (stream or refetch).
  const byTime = [...state.points].sort((x, y) => Date.parse(x[1].reference.end) - Date.parse(y[1].reference.end));
  for (const [key, p] of byTime) {
    n++;
    const err = p.dut.mean_pa - p.reference.mean_pa;
    const tr = el("tr", { "data-key": key, class: key === state.latestKey ? "fresh" : "" },
      el("td", {}, n), el("td", {}, p.cycle), el("td", {}, seriesName(p)),
      el("td", { class: "num" }, fmt(p.nominal_pa)), el("td", { class: "num" }, fmt(p.reference.mean_pa)),
      el("td", { class: "num" }, fmt(p.dut.mean_pa)), el("td", { class: "num" }, fmt(err)),
      el("td", {}, p.note || ""));
    rows.push(tr);
  }
  for (const [step, why] of state.missed) {
    rows.push(el("tr", { class: "missed" }, el("td", {}, "—"), el("td", {}, ""), el("td", {}, "missed"),
      el("td", { class: "num" }, state.steps.has(step) ? fmt(state.steps.get(step).target) : ""),
      el("td", {}, ""), el("td", {}, ""), el("td", {}, ""), el("td", {}, why)));
  }
  body.replaceChildren(...rows);
  $("points-count").textContent = n ? "(" + n + ")" : "";
}

function seriesName(p) {
  if (p.kind === "zero-before") return "zero, before";
  if (p.kind === "zero-after") return "zero, after";
  return p.direction === "down" ? "falling" : "rising";
}

// ---- plan -------------------------------------------------------------

function renderPlan() {
  const list = $("plan");
  const items = [];
  const idx = [...state.steps.keys()].sort((a, b) => a - b);
  for (const i of idx) {
    const s = state.steps.get(i);
    let cls = i < state.currentStep ? "done" : i === state.currentStep ? "current" : "later";
    if (ended.has(state.runState) && i === state.currentStep) cls = "done";
    if (state.missed.has(i)) cls = "missed";
    items.push(el("li", { value: i + 1, class: cls }, s.text + (state.missed.has(i) ? " — missed: " + state.missed.get(i) : "")));
  }
  const after = state.stepCount - (idx.length ? idx[idx.length - 1] + 1 : 0);
  if (state.stepCount && after > 0 && !ended.has(state.runState)) {
    items.push(el("li", { class: "later" }, after + " more step" + (after === 1 ? "" : "s") + " to come"));
  }
  list.replaceChildren(...items);
  const st = state.status;
  $("plan-summary").textContent = st && st.step ? st.step : state.run ? "run " + state.run + " " + state.runState : "no run";
}

// ---- events -----------------------------------------------------------

function onEvent(ev) {
  state.lastEventId = ev.id;
  const li = el("li", { value: ev.id, class: String(ev.level) }, clock(ev.time) + "  " + ev.message);
  const list = $("events");
  list.prepend(li);
  while (list.children.length > EVENTS_MAX) list.lastChild.remove();

  if (!ev.run) return;
  const run = runName(ev.run);
  if (run !== state.run) {
    // Run ids grow: an event of a later run means a new run began; one of
    // an earlier run (from the tail read at opening) is for the log only.
    if (state.run && run < state.run) return;
    if (ev.type !== "state" && ev.type !== "step") return;
    switchRun(run);
    refetchRun();
  }
  const d = ev.data || {};
  switch (ev.type) {
    case "point":
      if (addPoint(d, true)) { renderPoints(); drawErrors(); state.reportAt = 0; }
      break;
    case "step":
      if (typeof d.step === "number") {
        state.steps.set(d.step, { text: ev.message.replace(/^step \d+\/\d+: /, ""), target: d.target_pa });
        state.currentStep = d.step;
        state.targetPa = d.target_pa;
        seenPa(d.target_pa);
        const m = /^step \d+\/(\d+)/.exec(ev.message);
        if (m) state.stepCount = Number(m[1]);
        while (state.steps.size > POINTS_MAX) state.steps.delete(state.steps.keys().next().value);
        renderPlan();
      }
      break;
    case "missed":
      if (typeof d.step === "number") { state.missed.set(d.step, ev.message); renderPlan(); renderPoints(); }
      break;
    case "state":
      if (d.state) { state.runState = d.state; renderPlan(); if (ended.has(d.state)) { state.reportAt = 0; fetchReport(); state.overviewAt = Date.now(); drawOverview(); } }
      break;
  }
}

function runName(n) { return "r" + String(n).padStart(6, "0"); }

function switchRun(id) {
  state.run = id;
  state.points.clear(); state.missed.clear(); state.steps.clear();
  state.stepCount = 0; state.currentStep = -1; state.targetPa = null; state.result = null;
  state.reportAt = 0; state.overviewAt = 0;
  renderPoints(); renderPlan(); renderVerdict(); drawErrors(); renderReports();
}

// follow opens the event stream. The browser reconnects by itself and
// sends Last-Event-ID; when the stream was refused outright (the daemon
// answered with an error while starting) it is opened again from the last
// id seen. Every reconnect also refetches the run's points, which fills in
// anything that could have been missed; the table keys its rows, so
// nothing shows twice.
function follow() {
  const url = state.lastEventId === null ? "/api/v1/events?tail=1000" : "/api/v1/events?since=" + state.lastEventId;
  const es = new EventSource(url);
  es.onopen = () => { setLink(true); refetchRun(); };
  es.onmessage = (m) => {
    let ev;
    try { ev = JSON.parse(m.data); } catch (e) { console.warn("event not understood", m.data); return; }
    onEvent(ev);
  };
  es.onerror = () => {
    setLink(false);
    if (es.readyState === EventSource.CLOSED) { setTimeout(follow, 2000); }
  };
}

function setLink(up) {
  const l = $("link");
  l.className = "link " + (up ? "up" : "down");
  l.textContent = up ? "live" : "reconnecting";
}

// ---- status -----------------------------------------------------------

async function fetchStatus() {
  try {
    const st = await getJSON("/api/v1/status");
    state.status = st;
    onStatus(st);
  } catch (e) {
    $("run-line").textContent = "daemon not answering";
  }
}

// pollStatus asks again a full interval after each answer, so a slow
// daemon is asked less often, never more.
async function pollStatus() {
  await fetchStatus();
  setTimeout(pollStatus, STATUS_EVERY_MS);
}

function onStatus(st) {
  $("version").textContent = st.version;
  const run = st.run ? st.run.id : st.last ? st.last.id : null;
  if (run && run !== state.run) { switchRun(run); refetchRun(); backfillTrace(run, st); }
  if (st.run) state.runState = st.run.state; else if (st.last && st.last.id === state.run) state.runState = st.last.state;
  for (const inst of st.instruments) {
    state.roles.set(inst.name, inst.role);
    if (inst.last_at && traced(inst.role)) { pushTrace(inst.name, Date.parse(inst.last_at) / 1000, inst.last_pa); seenPa(inst.last_pa); }
  }
  renderHeader(st);
  renderInstruments(st);
  renderAlerts(st);
  renderPlan();
  drawTrace();
  const now = Date.now();
  if (state.run && now - state.overviewAt > OVERVIEW_EVERY_MS) { state.overviewAt = now; drawOverview(); }
  if (state.run && state.points.size && now - state.reportAt > REPORT_EVERY_MS) fetchReport();
  renderReports();
  fillUnits(st);
}

function renderHeader(st) {
  const r = st.run;
  $("run-line").textContent = r ? "run " + r.id + (r.label ? " · " + r.label : "") + " · " + r.state + (st.reason ? " (" + st.reason + ")" : "")
    : st.last ? "idle · last run " + st.last.id + " " + st.last.state + (st.last.verdict ? " · " + st.last.verdict.toUpperCase() : "") : "idle";
  const p = r ? st.progress : st.last && st.last.state === "finished" ? 1 : 0;
  $("progress-bar").style.width = (100 * p).toFixed(1) + "%";
  // Expected end: the daemon's estimate from the plan and the steps so far.
  const cur = st.current;
  if (r && cur && cur.estimated && r.state === "running") {
    $("eta").textContent = Math.round(100 * p) + " % · step ~" + span(cur.step_left_seconds) + " · ends about " +
      new Date(Date.now() + 1000 * cur.run_left_seconds).toLocaleTimeString();
  } else {
    $("eta").textContent = r ? Math.round(100 * p) + " %" : "";
  }
  let target = "";
  if (r && cur && cur.phase) {
    target = "target " + fmt(cur.target_pa);
    const rule = st.settle;
    if (rule) target += " · settled when steady over " + span(rule.window_seconds);
  } else if (!r && st.expected_seconds) {
    target = "a run: " + (st.plan || []).length + " steps, at least " + span(st.expected_seconds) +
      (st.source ? "" : " · no pressure source: pressures are set by hand");
  }
  $("target-line").textContent = target;
}

// span writes a duration in seconds the way people say it: 45 s, 12 min, 2 h 5 min.
function span(s) {
  s = Math.max(0, Math.round(s));
  if (s < 120) return s + " s";
  const m = Math.round(s / 60);
  return m < 120 ? m + " min" : Math.floor(m / 60) + " h " + (m % 60) + " min";
}

function renderInstruments(st) {
  const rows = st.instruments.map((i) => {
    const waiting = !i.up ? (i.last_error || "no reading") : i.waiting ? "waits for a dial reading: " + i.waiting
      : i.settled ? "settled" : i.role === "source" ? "—" : i.why || "waiting to settle";
    // As the instrument gave it, in fixed notation (never 1e-7).
    const asRead = i.last_at && i.raw_unit ? i.raw.toLocaleString("en", { maximumFractionDigits: 9, useGrouping: false }) + " " + i.raw_unit : "—";
    const ambient = i.role === "ambient";
    const reading = !i.last_at ? "—" : ambient && i.raw_unit ? ambientText(i) : fmt(i.last_pa);
    return el("tr", { "data-name": i.name },
      el("td", {}, i.device ? i.name + " (" + i.device + ")" : i.name),
      el("td", {}, (i.role || "") + (i.quantity ? " (" + i.quantity + ")" : "")),
      el("td", { class: "num reading" }, reading),
      el("td", { class: "num raw" }, asRead),
      el("td", { class: i.up ? "up-yes" : "up-no" }, i.up ? "up" : "down"),
      el("td", {}, waiting), el("td", {}, clock(i.last_at)));
  });
  $("instruments").querySelector("tbody").replaceChildren(...rows);
}

function renderAlerts(st) {
  const lines = [];
  if (st.trip) lines.push("Safety trip: " + st.trip + " — no setpoint is sent until someone starts or resumes a run.");
  if (st.store_fault) lines.push("The store cannot write: " + st.store_fault);
  $("alerts").replaceChildren(...lines.map((t) => el("div", {}, t)));
}

function fillUnits(st) {
  const sel = $("entry-unit");
  if (sel.options.length) return;
  for (const u of Object.keys(state.unitsPa).sort()) sel.append(el("option", { value: u }, u));
  sel.value = st.unit || "bar";
}

// refetchRun loads the shown run's points from the store: at start, on a
// new run and after every reconnect.
async function refetchRun() {
  if (!state.run) return;
  const run = state.run;
  try {
    const r = await getJSON("/api/v1/runs/" + run + "/points");
    if (run !== state.run) return;
    let added = false;
    for (const p of r.points) added = addPoint(p, false) || added;
    if (added) { renderPoints(); drawErrors(); }
  } catch (e) {
    console.warn("points of " + run + ": " + e.message);
  }
}

async function fetchReport() {
  if (!state.run) return;
  state.reportAt = Date.now();
  const run = state.run;
  try {
    const rep = await getJSON("/api/v1/runs/" + run + "/report?format=json");
    if (run === state.run) { state.result = rep.result || null; renderVerdict(); drawErrors(); }
  } catch (e) {
    // Too few points for an analysis yet: the band comes later.
  }
}

function renderVerdict() {
  const v = $("verdict");
  const r = state.result;
  if (!r || !ended.has(state.runState)) { v.className = "verdict"; v.textContent = state.run ? "verdict once the run has ended" : ""; return; }
  v.className = "verdict " + r.decision;
  v.textContent = "Verdict: " + r.decision + " · largest error " + fmt(r.max_abs_error_pa);
}

function renderReports() {
  const list = $("reports");
  const id = state.run;
  if (!id || !ended.has(state.runState)) {
    if (list.dataset.run) { list.replaceChildren(el("li", { class: "muted" }, "after a run has ended")); delete list.dataset.run; }
    return;
  }
  if (list.dataset.run === id) return;
  list.dataset.run = id;
  list.replaceChildren(...["html", "csv", "json"].map((f) =>
    el("li", {}, el("a", { href: "/api/v1/runs/" + id + "/report?format=" + f }, "run " + id + " as " + f.toUpperCase()))));
}

// ---- charts -----------------------------------------------------------

function pushTrace(name, t, pa) {
  let tr = state.trace.get(name);
  if (!tr) { tr = { t: [], pa: [] }; state.trace.set(name, tr); }
  if (tr.t.length && t <= tr.t[tr.t.length - 1]) return; // same reading again
  tr.t.push(t); tr.pa.push(pa);
  const cut = t - TRACE_SECONDS;
  let drop = 0;
  while (drop < tr.t.length && tr.t[drop] < cut) drop++;
  drop = Math.max(drop, tr.t.length - TRACE_MAX);
  if (drop > 0) { tr.t.splice(0, drop); tr.pa.splice(0, drop); }
}

// backfillTrace fills the trace with the last minutes the store holds, so
// a page opened mid-run shows them at once: one samples call per
// instrument, a bucket a second. Readings the status brought meanwhile are
// kept after the stored ones.
async function backfillTrace(run, st) {
  for (const inst of st.instruments) {
    if (!traced(inst.role) || !inst.last_at) continue;
    const to = new Date(inst.last_at);
    const from = new Date(to.getTime() - TRACE_SECONDS * 1000);
    let rep;
    try {
      rep = await getJSON("/api/v1/runs/" + run + "/samples?instrument=" + encodeURIComponent(inst.name) +
        "&from=" + from.toISOString() + "&to=" + to.toISOString() + "&buckets=" + TRACE_SECONDS);
    } catch (e) {
      continue; // nothing stored yet for this run
    }
    if (run !== state.run) return;
    const stored = rep.buckets.filter((b) => b.count > 0);
    if (!stored.length) continue;
    const old = state.trace.get(inst.name) || { t: [], pa: [] };
    const first = Date.parse(stored[0].start) / 1000, last = Date.parse(stored[stored.length - 1].start) / 1000;
    const tr = { t: [], pa: [] };
    const keep = (t, pa) => { tr.t.push(t); tr.pa.push(pa); };
    old.t.forEach((t, i) => { if (t < first) keep(t, old.pa[i]); });
    for (const b of stored) keep(Date.parse(b.start) / 1000, b.mean_pa);
    old.t.forEach((t, i) => { if (t > last) keep(t, old.pa[i]); });
    state.trace.set(inst.name, tr);
  }
  drawTrace();
}

let traceChart = null, errorChart = null, overviewChart = null;

function chartWidth(id) { return Math.max(300, $(id).clientWidth - 4); }

// fit keeps a chart as wide as its box, which can change as the page fills.
function fit(chart, id) {
  const w = chartWidth(id);
  if (chart && Math.abs(chart.width - w) > 8) chart.setSize({ width: w, height: chart.height });
}

// traceData merges the instruments' times into one x axis, as the chart
// library wants, with gaps where an instrument has no reading.
function traceData() {
  const names = [...state.trace.keys()].filter((n) => traced(state.roles.get(n)));
  const xs = [...new Set(names.flatMap((n) => state.trace.get(n).t))].sort((a, b) => a - b);
  const pos = new Map(xs.map((x, i) => [x, i]));
  const ys = names.map((n) => {
    const col = new Array(xs.length).fill(null);
    const tr = state.trace.get(n);
    tr.t.forEach((t, i) => { col[pos.get(t)] = toUnit(tr.pa[i]); });
    return col;
  });
  return { names, data: [xs, ...ys] };
}

function colour(name) { return state.roles.get(name) === "reference" ? "#1f5fa8" : "#c2571a"; }

function drawTrace() {
  if (typeof uPlot === "undefined") return;
  const { names, data } = traceData();
  if (!names.length) return;
  const key = names.join(",") + "|" + unit();
  if (!traceChart || traceChart.key !== key) {
    if (traceChart) traceChart.destroy();
    traceChart = new uPlot({
      width: chartWidth("trace"), height: 260,
      scales: { x: { time: true } },
      series: [{}, ...names.map((n) => ({ label: n + " (" + state.roles.get(n) + ")", stroke: colour(n), width: 1.5, spanGaps: true }))],
      axes: [{}, { label: unit(), size: 70 }],
      hooks: { draw: [drawTraceMarks] },
    }, data, $("trace"));
    traceChart.key = key;
  } else {
    traceChart.setData(data);
    fit(traceChart, "trace");
  }
}

// drawTraceMarks shades the windows of the captured points in view and
// draws the current target.
function drawTraceMarks(u) {
  const ctx = u.ctx, top = u.bbox.top, h = u.bbox.height;
  ctx.save();
  ctx.fillStyle = "rgba(47,125,79,0.15)";
  const [x0, x1] = [u.scales.x.min, u.scales.x.max];
  for (const p of state.points.values()) {
    const a = Date.parse(p.reference.start) / 1000, b = Date.parse(p.reference.end) / 1000;
    if (!(b >= x0 && a <= x1)) continue;
    const pa = u.valToPos(Math.max(a, x0), "x", true), pb = u.valToPos(Math.min(b, x1), "x", true);
    ctx.fillRect(pa, top, Math.max(2, pb - pa), h);
  }
  if (state.targetPa !== null && !ended.has(state.runState)) {
    const y = u.valToPos(toUnit(state.targetPa), "y", true);
    if (y >= top && y <= top + h) {
      ctx.strokeStyle = "#1d2430"; ctx.setLineDash([6, 4]); ctx.lineWidth = 1;
      ctx.beginPath(); ctx.moveTo(u.bbox.left, y); ctx.lineTo(u.bbox.left + u.bbox.width, y); ctx.stroke();
    }
  }
  ctx.restore();
}

// errorData puts the points in ascending reference order, rising and
// falling as two series, and the permissible error per nominal as bands.
function errorData() {
  const pts = [...state.points.values()].filter((p) => p.kind === "measure")
    .sort((a, b) => a.reference.mean_pa - b.reference.mean_pa);
  const xs = pts.map((p) => toUnit(p.reference.mean_pa));
  const err = (p) => toUnit(p.dut.mean_pa - p.reference.mean_pa);
  const up = pts.map((p) => (p.direction === "down" ? null : err(p)));
  const down = pts.map((p) => (p.direction === "down" ? err(p) : null));
  const mpe = new Map(((state.result && state.result.points) || []).map((r) => [r.index, r.mpe_pa]));
  const plus = pts.map((p) => (mpe.has(p.index) ? toUnit(mpe.get(p.index)) : null));
  const minus = plus.map((v) => (v === null ? null : -v));
  return [xs, up, down, plus, minus];
}

function drawErrors() {
  if (typeof uPlot === "undefined") return;
  const data = errorData();
  const key = unit();
  const dots = { show: true, size: 8 };
  if (!errorChart || errorChart.key !== key) {
    if (errorChart) errorChart.destroy();
    errorChart = new uPlot({
      width: chartWidth("errors"), height: 260,
      scales: { x: { time: false }, y: { range: (u, lo, hi) => { const m = Math.max(Math.abs(lo || 0), Math.abs(hi || 0)) * 1.2 || 1; return [-m, m]; } } },
      series: [{ label: "reference (" + unit() + ")" },
        { label: "rising", stroke: "#1f5fa8", paths: () => null, points: dots },
        { label: "falling", stroke: "#c2571a", paths: () => null, points: dots },
        { label: "+ permissible", stroke: "#b3261e", dash: [4, 3], width: 1, spanGaps: true, points: { show: false } },
        { label: "− permissible", stroke: "#b3261e", dash: [4, 3], width: 1, spanGaps: true, points: { show: false } }],
      axes: [{ label: "reference, " + unit() }, { label: "error, " + unit(), size: 70 }],
    }, data, $("errors"));
    errorChart.key = key;
  } else {
    errorChart.setData(data);
    fit(errorChart, "errors");
  }
  $("errors").dataset.points = String(data[0].length);
}

async function drawOverview() {
  if (typeof uPlot === "undefined" || !state.run) return;
  const ref = [...state.roles].find(([, r]) => r === "reference");
  if (!ref) return;
  const run = state.run;
  let rep;
  try {
    rep = await getJSON("/api/v1/runs/" + run + "/samples?instrument=" + encodeURIComponent(ref[0]) + "&buckets=" + OVERVIEW_BUCKETS);
  } catch (e) {
    return; // no samples yet
  }
  if (run !== state.run) return;
  const bs = rep.buckets.filter((b) => b.count > 0);
  const data = [bs.map((b) => Date.parse(b.start) / 1000), bs.map((b) => toUnit(b.min_pa)),
    bs.map((b) => toUnit(b.max_pa)), bs.map((b) => toUnit(b.mean_pa))];
  if (!overviewChart) {
    overviewChart = new uPlot({
      width: chartWidth("overview"), height: 200,
      scales: { x: { time: true } },
      series: [{}, { label: "lowest", stroke: "rgba(31,95,168,0.35)" }, { label: "highest", stroke: "rgba(31,95,168,0.35)" },
        { label: ref[0] + " mean", stroke: "#1f5fa8", width: 1.5 }],
      bands: [{ series: [2, 1], fill: "rgba(31,95,168,0.15)" }],
      axes: [{}, { label: unit(), size: 70 }],
    }, data, $("overview"));
  } else {
    overviewChart.setData(data);
    fit(overviewChart, "overview");
  }
}

// ---- controls ---------------------------------------------------------

function say(result) {
  $("control-result").textContent = result.ok ? "done: " + result.message : "refused: " + result.message;
}

// The cautions come before every start: the status lists the polled
// instruments, which need not include the pressure source, so the page
// cannot tell a bench that drives one from a bench that does not.
function confirmSafety() {
  return new Promise((resolve) => {
    const d = $("safety-dialog");
    $("safety-ack").checked = false;
    $("safety-start").disabled = true;
    d.onclose = () => resolve(d.returnValue === "start");
    d.showModal();
  });
}

function wireControls() {
  $("safety-ack").addEventListener("change", (e) => { $("safety-start").disabled = !e.target.checked; });
  $("start-form").addEventListener("submit", async (e) => {
    e.preventDefault();
    if (!(await confirmSafety())) { say({ ok: false, message: "start cancelled" }); return; }
    say(await change("/api/v1/start", { label: $("start-label").value }));
  });
  $("pause-button").addEventListener("click", async () => say(await change("/api/v1/pause")));
  $("resume-button").addEventListener("click", async () => say(await change("/api/v1/resume")));
  $("stop-button").addEventListener("click", async () => {
    const reason = $("stop-reason").value || "stopped from the live page";
    if (!confirm("Stop run " + (state.run || "") + " for good? The source is vented.")) return;
    say(await change("/api/v1/stop", { reason }));
  });
  $("entry-form").addEventListener("submit", async (e) => {
    e.preventDefault();
    const body = { value: Number($("entry-value").value), unit: $("entry-unit").value };
    let r = await change("/api/v1/entry", body);
    if (!r.ok && r.status === 409 && /confirm/i.test(r.message) && confirm(r.message + "\n\nTake this reading all the same?")) {
      r = await change("/api/v1/entry", { ...body, confirm: true });
    }
    say(r);
  });
  $("forget-token").addEventListener("click", () => { sessionStorage.removeItem("plateau-token"); say({ ok: true, message: "token forgotten" }); });
}

// ---- start ------------------------------------------------------------

async function main() {
  wireControls();
  try { state.unitsPa = await getJSON("/api/v1/units"); } catch (e) { console.warn(e.message); }
  $("trace-minutes").textContent = String(TRACE_SECONDS / 60);
  await fetchStatus(); // the run to show, before its events arrive
  follow();
  setTimeout(pollStatus, STATUS_EVERY_MS);
  window.addEventListener("resize", () => {
    for (const [c, id] of [[traceChart, "trace"], [errorChart, "errors"], [overviewChart, "overview"]]) fit(c, id);
  });
}

document.addEventListener("DOMContentLoaded", main);
