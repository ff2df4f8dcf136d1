// The lab page: controls post to the session, figures are drawn as SVG from /api/view.
"use strict";

const COLOURS = { "mutant-fixed": "#1a9850", "mutant-lost": "#9a9a9a", other: "#e07b00" };
const ALLELE_COLOURS = ["#4e79a7", "#e15759", "#59a14f", "#b07aa1"];
const GROUPS = { resident: "group-resident", mutant: "group-mutant", density: "group-density",
                 tradeoff: "group-tradeoff", invasion: "group-experiment", experiment: "group-experiment",
                 environment: "group-environment" };
const SVGNS = "http://www.w3.org/2000/svg";

let view = null;        // the last answer of the server
let lines = [];         // frequency lines of the last finished replicates (view.lines_kept at most), in order
let seen = 0;           // replicates whose lines have been asked for
let generation = null;
let polling = false;

const $ = (id) => document.getElementById(id);
const idOf = (key) => "ctl-" + key.replaceAll(".", "-");
const esc = (text) => String(text).replace(/[&<>"]/g, (c) => ({ "&": "&amp;", "<": "&lt;", ">": "&gt;", '"': "&quot;" })[c]);
const fmt = (x, d = 3) => (x === null || x === undefined || Number.isNaN(x)) ? "–" : Number(x).toFixed(d);

async function call(method, path, body) {
  const options = { method, headers: { "Content-Type": "application/json" } };
  if (body !== undefined) options.body = JSON.stringify(body);
  const response = await fetch(path, options);
  const answer = await response.json();
  if (!response.ok) throw new Error(answer.message || `${response.status} ${response.statusText}`);
  return answer;
}

// ``changed``: the control whose change this request sends; its box shows the answer even
// while it has the focus (an emptied box then shows the default now in force)
function post(path, body = {}, changed = null) {
  return call("POST", path, { ...body, since: seen, generation }).then((v) => receive(v, changed), refused);
}

// a request the server refused or failed: say why, and show its state as it now is
async function refused(err) {
  receive(await call("GET", `/api/view?since=${seen}&generation=${generation}`));
  $("error").textContent = err.message;
}

// -- controls -----------------------------------------------------------------------
// the controls whose change adds or removes others (the year types' rows; an allele's effort or
// its fecundity and survival, and the trade-off curve)
const RESHAPING = ["environment.years", "environment.switching", "resident.breeding", "mutant.breeding"];

function addControl(c) {
  const row = document.createElement("label");
  row.className = "ctl";
  row.id = "row-" + idOf(c.key);
  const name = document.createElement("span");
  name.textContent = c.label;
  let input;
  if (c.kind === "choice") {
    input = document.createElement("select");
    for (const choice of c.choices) {
      const option = document.createElement("option");
      option.value = choice;
      option.textContent = choice === "" ? c.unset : choice;
      input.appendChild(option);
    }
  } else {
    input = document.createElement("input");
    input.type = "text";
    input.inputMode = c.kind === "integer" ? "numeric" : (c.kind === "names" ? "text" : "decimal");
    if (c.kind === "names") input.placeholder = c.unset;
  }
  input.id = idOf(c.key);
  input.dataset.key = c.key;
  input.addEventListener("change", async () => {
    await post("/api/update", { changes: { [c.key]: input.value } }, c.key);
    if (RESHAPING.includes(c.key)) await rebuildControls();
  });
  const msg = document.createElement("span");
  msg.className = "msg";
  row.append(name, input, msg);
  $(GROUPS[c.key.split(".")[0]]).appendChild(row);
}

async function buildControls() {
  for (const c of await call("GET", "/api/controls")) addControl(c);
  $("fieldset-tradeoff").hidden = !$("group-tradeoff").children.length;
}

// every control again, from the settings now in force (or being edited)
async function rebuildControls() {
  const list = await call("GET", "/api/controls");
  const keep = document.activeElement && document.activeElement.dataset ? document.activeElement.dataset.key : null;
  for (const id of new Set(Object.values(GROUPS))) $(id).replaceChildren();
  for (const c of list) addControl(c);
  $("fieldset-tradeoff").hidden = !$("group-tradeoff").children.length;
  if (view) showControls(view);
  if (keep && $(idOf(keep))) $(idOf(keep)).focus();
}

function showControls(v, changed = null) {
  $("name-resident").textContent = v.resident;
  $("name-mutant").textContent = v.mutant;
  for (const [key, value] of Object.entries(v.settings)) {
    const input = $(idOf(key));
    if (input && (document.activeElement !== input || key === changed)) input.value = value === null ? "" : (Array.isArray(value) ? value.join(", ") : value);
    const row = $("row-" + idOf(key));
    if (row) { row.classList.remove("bad"); row.querySelector(".msg").textContent = ""; }
  }
  const loose = [];
  for (const p of v.problems) {
    const row = p.control && $("row-" + idOf(p.control));
    if (row) { row.classList.add("bad"); row.querySelector(".msg").textContent = p.message; }
    else loose.push(p.message);
  }
  $("problems").replaceChildren(...loose.map((m) => { const d = document.createElement("div"); d.textContent = m; return d; }));
  const blocked = v.running || v.problems.length > 0;
  for (const id of ["btn-season", "btn-replicate", "btn-replicates", "btn-save"]) $(id).disabled = blocked;
  $("btn-stop").disabled = !v.running;
  $("btn-replicates").textContent = `${v.settings["experiment.replicates"]} replicates`;
}

// -- SVG helpers ----------------------------------------------------------------------
function el(name, attrs, parent, text) {
  const node = document.createElementNS(SVGNS, name);
  for (const [k, v] of Object.entries(attrs)) node.setAttribute(k, v);
  if (text !== undefined) node.textContent = text;
  if (parent) parent.appendChild(node);
  return node;
}

function niceTicks(lo, hi, n = 5) {
  const span = hi - lo || 1;
  const step0 = span / n, mag = Math.pow(10, Math.floor(Math.log10(step0)));
  const step = [1, 2, 5, 10].map((m) => m * mag).find((s) => s >= step0);
  const out = [];
  for (let t = Math.ceil(lo / step) * step; t <= hi + 1e-9 * span; t += step) out.push(+t.toPrecision(12));
  return out;
}

// a frame with axes; returns scales and the plotting group
function frame(svg, { xlo, xhi, ylo, yhi, xlabel, ylabel, xticks, m = { l: 52, r: 12, t: 10, b: 36 } }) {
  svg.replaceChildren();
  const [w, h] = svg.getAttribute("viewBox").split(" ").slice(2).map(Number);
  const x = (v) => m.l + (v - xlo) / ((xhi - xlo) || 1) * (w - m.l - m.r);
  const y = (v) => h - m.b - (v - ylo) / ((yhi - ylo) || 1) * (h - m.t - m.b);
  const axes = el("g", {}, svg);
  for (const t of niceTicks(ylo, yhi)) {
    el("line", { x1: m.l, x2: w - m.r, y1: y(t), y2: y(t), stroke: "#eee" }, axes);
    el("text", { x: m.l - 5, y: y(t) + 4, "text-anchor": "end" }, axes, String(t));
  }
  for (const t of xticks || niceTicks(xlo, xhi, 8)) {
    el("text", { x: x(t.v ?? t), y: h - m.b + 14, "text-anchor": "middle" }, axes, String(t.label ?? t));
  }
  el("line", { x1: m.l, x2: w - m.r, y1: h - m.b, y2: h - m.b, stroke: "#555" }, axes);
  el("line", { x1: m.l, x2: m.l, y1: m.t, y2: h - m.b, stroke: "#555" }, axes);
  el("text", { x: (m.l + w - m.r) / 2, y: h - 4, "text-anchor": "middle" }, axes, xlabel);
  el("text", { x: 12, y: (m.t + h - m.b) / 2, transform: `rotate(-90 12 ${(m.t + h - m.b) / 2})`,
               "text-anchor": "middle" }, axes, ylabel);
  return { x, y, g: el("g", {}, svg), w, h, m };
}

function pathOf(xs, ys, x, y) {
  let d = "", pen = false;
  for (let i = 0; i < xs.length; i++) {
    if (ys[i] === null) { pen = false; continue; }
    d += (pen ? "L" : "M") + x(xs[i]).toFixed(1) + "," + y(ys[i]).toFixed(1);
    pen = true;
  }
  return d;
}

// -- figures --------------------------------------------------------------------------
function drawCensus(v) {
  const svg = $("chart-census");
  const shown = v.shown;
  if (!shown) { frame(svg, { xlo: 0, xhi: 1, ylo: 0, yhi: 1, xlabel: "age", ylabel: "individuals", xticks: [] });
                $("census-title").textContent = "census by allele and age"; return; }
  const census = shown.census, nAges = census[0].length, nAlleles = census.length;
  const top = Math.max(1, ...census.flat());
  const xticks = [...Array(nAges).keys()].map((a) => ({ v: a + 0.5, label: a === nAges - 1 ? `${a + 1}+` : `${a + 1}` }));
  const f = frame(svg, { xlo: 0, xhi: nAges, ylo: 0, yhi: top * 1.12, xlabel: "age", ylabel: "individuals", xticks,
                         m: { l: 52, r: 12, t: 24, b: 36 } });
  const slot = (f.x(1) - f.x(0)) * 0.8 / nAlleles;
  census.forEach((row, i) => row.forEach((count, a) => {
    const x0 = f.x(a + 0.1) + i * slot;
    el("rect", { x: x0, y: f.y(count), width: slot - 2, height: f.y(0) - f.y(count), fill: ALLELE_COLOURS[i % 4] }, f.g);
    el("text", { x: x0 + slot / 2, y: f.y(count) - 3, "text-anchor": "middle" }, f.g, String(count));
  }));
  let lx = f.m.l + 8;
  v.alleles.forEach((name, i) => {  // legend in the top margin, clear of the bars
    el("rect", { x: lx, y: 5, width: 10, height: 10, fill: ALLELE_COLOURS[i % 4] }, f.g);
    el("text", { x: lx + 14, y: 14 }, f.g, name);
    lx += 24 + 7 * name.length;
  });
  $("census-title").textContent = `census by allele and age: replicate ${shown.replicate}, season ${shown.season}`;
}

function drawFrequencies(v) {
  const current = v.shown && v.shown.line;
  let xhi = 10;
  for (const l of lines) xhi = Math.max(xhi, l.steps[l.steps.length - 1]);
  if (current) xhi = Math.max(xhi, current.steps[current.steps.length - 1]);
  const f = frame($("chart-freq"), { xlo: 0, xhi, ylo: 0, yhi: 1, xlabel: "season", ylabel: "mutant frequency" });
  for (const l of lines) {
    el("path", { d: pathOf(l.steps, l.freq, f.x, f.y), fill: "none", "stroke-width": 1.2, "stroke-opacity": 0.55,
                 stroke: COLOURS[l.outcome] || COLOURS.other, class: "freq-line" }, f.g);
  }
  if (current) el("path", { d: pathOf(current.steps, current.freq, f.x, f.y), fill: "none", stroke: "#000",
                             "stroke-width": 2 }, f.g);
  $("freq-which").textContent = v.replicates > lines.length
    ? `the last ${lines.length} of ${v.replicates} replicates` : "every replicate";
}

function drawTally(v) {
  const t = v.tally, rt = v.running_tally, th = v.theory, p = th.prediction || {};
  const refs = [["establishment", p.establishment_probability, "#1a9850"],
                ["neutral", p.neutral_expectation, "#555"]];
  if (th.finite_n && th.finite_n.valid) refs.push(["finite N", th.finite_n.value, "#7b3294"]);
  const values = [...rt.high, ...refs.map((r) => r[1]).filter((x) => x !== null && x !== undefined)];
  const yhi = Math.min(1, Math.max(0.05, ...values) * 1.15);
  const f = frame($("chart-tally"), { xlo: 0, xhi: Math.max(10, t.n), ylo: 0, yhi, xlabel: "replicates",
                                      ylabel: "fixed fraction" });
  if (rt.n.length) {
    const band = pathOf(rt.n, rt.high, f.x, f.y) + pathOf([...rt.n].reverse(), [...rt.low].reverse(), f.x, f.y).replace("M", "L") + "Z";
    el("path", { d: band, fill: "#1a9850", "fill-opacity": 0.15, stroke: "none" }, f.g);
    el("path", { d: pathOf(rt.n, rt.fraction, f.x, f.y), fill: "none", stroke: "#000", "stroke-width": 1.5 }, f.g);
  }
  refs.forEach(([name, value, colour], i) => {
    if (value === null || value === undefined) return;
    el("line", { x1: f.m.l, x2: f.w - f.m.r, y1: f.y(value), y2: f.y(value), stroke: colour, "stroke-dasharray": "6 3",
                 "stroke-width": 1.5 }, f.g);
    const above = f.y(value) - 3, below = f.y(value) + 12;  // below the line where it runs along the top
    el("text", { x: f.w - f.m.r - 4 - 110 * (i === 2), y: above < 12 ? below : above, "text-anchor": "end", fill: colour }, f.g,
       `${name} ${fmt(value)}`);
  });
  $("tally").innerHTML = "";
  const span = (id, text, cls) => { const s = document.createElement("span"); s.id = id; s.textContent = text; if (cls) s.className = cls; return s; };
  $("tally").append("replicates ", span("tally-n", t.n), ": ", span("tally-fixed", t.fixed, "fixed"), " fixed, ",
    span("tally-lost", t.lost, "lost"), " lost, ", span("tally-unresolved", t.unresolved, "unresolved"),
    " unresolved; fixed fraction ", span("tally-fraction", fmt(t.fraction)), " [",
    span("tally-low", fmt(t.low)), ", ", span("tally-high", fmt(t.high)), "]");
}

function drawTheory(v) {
  const th = v.theory, p = th.prediction;
  const box = $("theory");
  const cells = [];
  const add = (label, id, text) => cells.push(`<div>${label}: <b id="${id}">${text}</b></div>`);
  if (!p) {
    box.innerHTML = `<div class="error" id="theory-problem">${esc(th.problem)}</div>`;
    return;
  }
  if (th.environment) {  // years vary: the stochastic theory, said before its numbers
    cells.push(`<div style="grid-column: 1 / 4" id="th-environment">years vary (${esc(th.environment)}): `
               + "the stochastic theory, a large population's</div>");
  }
  add("invasion fitness", "th-fitness", fmt(p.invasion_fitness, 4));
  add("verdict", "th-verdict", esc(p.verdict));
  add("threshold " + th.parameter.split(".").pop(), "th-threshold", fmt(th.threshold, 4));
  add("establishment probability", "th-establishment", fmt(p.establishment_probability, 4));
  add("neutral expectation", "th-neutral", fmt(p.neutral_expectation, 4));
  const fn = th.finite_n;
  add("finite-N prediction", "th-finite", !fn ? "not available" : (fn.valid ? fmt(fn.value, 4) : "not valid here"));
  if (fn) cells.push(`<div style="grid-column: 1 / 4" id="th-finite-note">finite N: ${esc(fn.note)}</div>`);
  const cf = th.closed_form;
  const closed = esc(cf ? `${cf.formula} = ${cf.worked} = ${fmt(cf.value, 4)} (${cf.source})` : "no closed form for these schedules");
  cells.push(`<div style="grid-column: 1 / 4">closed form: <b id="th-closed">${closed}</b></div>`);
  if (!cf) cells.push(`<div style="grid-column: 1 / 4" id="th-message">${esc(th.threshold_message)}</div>`);
  box.innerHTML = cells.join("");
}

// -- updates ------------------------------------------------------------------------------
function receive(v, changed = null) {
  // an older answer that arrived late (requests run on concurrent threads): the page shows newer
  if (view && v.session === view.session && v.view < view.view) return;
  if (v.generation !== generation) { lines = []; seen = 0; generation = v.generation; }
  if (v.since === seen) { lines.push(...v.lines); seen = v.replicates; }
  if (lines.length > v.lines_kept) lines = lines.slice(-v.lines_kept);
  view = v;
  showControls(v, changed);
  $("status").textContent = v.running ? v.activity : `idle, ${v.replicates} replicates`;
  $("status").dataset.running = v.running;
  $("error").textContent = v.error;
  drawTheory(v);
  drawCensus(v);
  drawFrequencies(v);
  drawTally(v);
  window.labDraws = (window.labDraws || 0) + 1;  // for timing scripts: when the last answer was drawn
  window.labDrawnAt = performance.now();
  if (v.running && !polling) poll();
}

async function poll() {
  polling = true;
  try {
    while (view && view.running) {
      await new Promise((r) => setTimeout(r, 120));
      receive(await call("GET", `/api/view?since=${seen}&generation=${generation}`));
    }
  } finally { polling = false; }
}

async function start() {
  await buildControls();
  $("btn-season").onclick = () => post("/api/season");
  $("btn-replicate").onclick = () => post("/api/replicate");
  $("btn-replicates").onclick = () => post("/api/replicates");
  $("btn-stop").onclick = () => post("/api/stop");
  $("btn-reset").onclick = () => post("/api/reset");
  $("btn-save").onclick = async () => {
    let answer;
    try { answer = await call("POST", "/api/save", { name: $("save-name").value }); }
    catch (err) { answer = { saved: false, message: err.message }; }
    $("save-msg").textContent = answer.message;
    $("save-msg").className = answer.saved ? "" : "error";
    $("save-msg").dataset.saved = answer.saved;
  };
  receive(await call("GET", "/api/view"));
}

start();
