// benchwright web view: live progress over server-sent events, and small SVG plots.
// Plain JavaScript, no build step, no outside library.
"use strict";

const SVG = "http://www.w3.org/2000/svg";
const QUIET_WARN_S = 120;  // as sequencer/web/live.py

function el(name, attrs, text) {
  const node = document.createElementNS(SVG, name);
  for (const [k, v] of Object.entries(attrs || {})) node.setAttribute(k, v);
  if (text !== undefined) node.textContent = text;
  return node;
}

function fmt(v) {
  if (v === null || v === undefined || !isFinite(v)) return "—";
  const a = Math.abs(v);
  if (a !== 0 && (a < 1e-3 || a >= 1e6)) return v.toExponential(3);
  return Number(v.toPrecision(5)).toString();
}

function duration(s) {
  if (s === null || s === undefined) return "—";
  s = Math.round(s);
  if (s >= 3600) return Math.floor(s / 3600) + " h " + String(Math.floor((s % 3600) / 60)).padStart(2, "0") + " min";
  if (s >= 60) return Math.floor(s / 60) + " min " + String(s % 60).padStart(2, "0") + " s";
  return s + " s";
}

// A line/point plot: opts = {series: [{x, y, label, cls, points}], xLabel, yLabel,
// band: [lo, hi], lines: [{y, cls, label}], hover: (series, i) => text, zoom: bool}
function plot(holder, opts) {
  const W = 640, H = 300, L = 64, R = 12, T = 14, B = 40;
  let xs = [], ys = [];
  for (const s of opts.series) {
    s.x.forEach((x, i) => { if (s.y[i] !== null && isFinite(s.y[i])) { xs.push(x); ys.push(s.y[i]); } });
  }
  for (const v of (opts.band || [])) if (v !== null && v !== undefined) ys.push(v);
  for (const line of (opts.lines || [])) if (line.y !== null && line.y !== undefined) ys.push(line.y);
  if (!xs.length) { holder.textContent = "no points"; return; }
  const full = {x0: Math.min(...xs), x1: Math.max(...xs), y0: Math.min(...ys), y1: Math.max(...ys)};
  let view = Object.assign({}, full);
  function pad(a, b) { const d = (b - a) || Math.abs(a) || 1; return [a - 0.05 * d, b + 0.05 * d]; }
  function draw() {
    holder.textContent = "";
    const [x0, x1] = pad(view.x0, view.x1), [y0, y1] = pad(view.y0, view.y1);
    const sx = (x) => L + (x - x0) / (x1 - x0) * (W - L - R);
    const sy = (y) => H - B - (y - y0) / (y1 - y0) * (H - T - B);
    const svg = el("svg", {viewBox: `0 0 ${W} ${H}`, class: "chart", role: "img"});
    if (opts.title) svg.appendChild(el("title", {}, opts.title));
    const band = opts.band || [];
    if (band.length === 2 && band[0] !== null && band[1] !== null) {
      svg.appendChild(el("rect", {x: L, width: W - L - R, y: sy(band[1]), height: Math.max(0, sy(band[0]) - sy(band[1])), class: "band"}));
    }
    for (const line of (opts.lines || [])) {
      if (line.y === null || line.y === undefined) continue;
      svg.appendChild(el("line", {x1: L, x2: W - R, y1: sy(line.y), y2: sy(line.y), class: line.cls || "ref"}));
    }
    svg.appendChild(el("line", {x1: L, x2: L, y1: T, y2: H - B, class: "axis"}));
    svg.appendChild(el("line", {x1: L, x2: W - R, y1: H - B, y2: H - B, class: "axis"}));
    for (let k = 0; k <= 4; k++) {
      const yv = y0 + (y1 - y0) * k / 4;
      svg.appendChild(el("text", {x: L - 6, y: sy(yv) + 4, class: "tick", "text-anchor": "end"}, fmt(yv)));
    }
    // x ticks: the given values (e.g. run ids), at most 10 of those in view; else 5 even steps
    let xticks = [0, 1, 2, 3, 4].map((k) => x0 + (x1 - x0) * k / 4);
    if (opts.xTicks) {
      const inView = opts.xTicks.filter((v) => v >= x0 && v <= x1);
      const every = Math.max(1, Math.ceil(inView.length / 10));
      xticks = inView.filter((_, i) => i % every === 0);
    }
    for (const xv of xticks) {
      svg.appendChild(el("text", {x: sx(xv), y: H - B + 16, class: "tick", "text-anchor": "middle"}, opts.xTicks ? String(xv) : fmt(xv)));
    }
    svg.appendChild(el("text", {x: (L + W - R) / 2, y: H - 6, class: "label", "text-anchor": "middle"}, opts.xLabel || ""));
    svg.appendChild(el("text", {x: 12, y: (T + H - B) / 2, class: "label", "text-anchor": "middle", transform: `rotate(-90 12 ${(T + H - B) / 2})`}, opts.yLabel || ""));
    const readout = el("text", {x: W - R, y: T + 4, class: "readout", "text-anchor": "end"}, "");
    opts.series.forEach((s, si) => {
      const pts = s.x.map((x, i) => [x, s.y[i], i]).filter((p) => p[1] !== null && p[0] >= x0 && p[0] <= x1);
      if (!s.points) {
        svg.appendChild(el("polyline", {points: pts.map((p) => `${sx(p[0])},${sy(p[1])}`).join(" "), class: "line " + (s.cls || "")}));
      }
      if (s.points) {
        for (const p of pts) {
          const dot = el("circle", {cx: sx(p[0]), cy: sy(p[1]), r: 4, class: "dot " + (s.cls ? s.cls(p[2]) : "")});
          const text = opts.hover ? opts.hover(si, p[2]) : `${fmt(p[0])}, ${fmt(p[1])}`;
          dot.appendChild(el("title", {}, text));
          dot.addEventListener("mouseenter", () => { readout.textContent = text; });
          svg.appendChild(dot);
        }
      }
    });
    svg.appendChild(readout);
    if (opts.zoom) {
      const sel = el("rect", {y: T, height: H - T - B, width: 0, class: "selection"});
      svg.appendChild(sel);
      let start = null;
      const toX = (ev) => { const r = svg.getBoundingClientRect(); return (ev.clientX - r.left) / r.width * W; };
      svg.addEventListener("mousedown", (ev) => { start = toX(ev); sel.setAttribute("x", start); sel.setAttribute("width", 0); });
      svg.addEventListener("mousemove", (ev) => { if (start === null) return; const x = toX(ev); sel.setAttribute("x", Math.min(start, x)); sel.setAttribute("width", Math.abs(x - start)); });
      svg.addEventListener("mouseup", (ev) => {
        if (start === null) return;
        const a = Math.min(start, toX(ev)), b = Math.max(start, toX(ev)); start = null;
        if (b - a < 5) { sel.setAttribute("width", 0); return; }
        const inv = (px) => x0 + (px - L) / (W - L - R) * (x1 - x0);
        view = Object.assign({}, view, {x0: inv(a), x1: inv(b)});
        draw();
      });
      svg.addEventListener("dblclick", () => { view = Object.assign({}, full); draw(); });
    }
    holder.appendChild(svg);
  }
  draw();
}

// -- the live panel of a run -------------------------------------------------------------------

function renderGrid(grid) {
  const table = document.getElementById("verdict-grid");
  if (!table) return;
  table.textContent = "";
  const head = table.createTHead().insertRow();
  head.appendChild(document.createElement("th")).textContent = "channel";
  for (const c of grid.columns) head.appendChild(document.createElement("th")).textContent = c;
  const body = table.createTBody();
  for (const row of grid.rows) {
    const tr = body.insertRow();
    tr.insertCell().textContent = row.channel;
    row.cells.forEach((cell, i) => {
      const td = tr.insertCell();
      td.className = "cell " + (cell ? cell.verdict : "waiting");
      td.dataset.column = grid.columns[i];
      if (cell) {
        td.textContent = cell.n > 1 ? `${cell.verdict} (${cell.n})` : fmt(cell.value);
        td.title = `${grid.columns[i]}: ${fmt(cell.value)} ${cell.unit} — ${cell.verdict}`;
      }
    });
  }
  const board = document.getElementById("board-values");
  if (board) {
    board.textContent = "";
    for (const [k, cell] of Object.entries(grid.board)) {
      const span = document.createElement("span");
      span.className = "cell " + cell.verdict;
      span.textContent = `${k} = ${fmt(cell.value)} ${cell.unit}`;
      board.appendChild(span);
    }
  }
}

function renderSnapshot(s) {
  const bar = document.getElementById("progress-bar");
  const text = document.getElementById("progress-text");
  if (bar) bar.style.width = (s.percent || 0) + "%";
  if (text) {
    let t = s.total !== null ? `${s.done} of ${s.total} steps (${s.percent} %)` : `${s.done} steps done`;
    t += ` · ${s.measurements} values, ${s.failed} out of limits · elapsed ${duration(s.elapsed_s)}`;
    if (s.status === "running") t += s.eta_s !== null ? ` · about ${duration(s.eta_s)} left at the pace so far` : "";
    if (s.plan_problem) t += ` · ${s.plan_problem}`;
    if (s.quiet_s !== null && s.quiet_s > QUIET_WARN_S) t += ` · WARNING: nothing stored for ${duration(s.quiet_s)}: is the bench still running?`;
    text.textContent = t;
  }
  const cur = document.getElementById("current-step");
  if (cur) cur.textContent = s.status === "running" ? (s.current_step ? "now: " + s.current_step : "") : `run ${s.status}${s.reason ? ": " + s.reason : ""}`;
  const st = document.getElementById("run-status");
  if (st) { st.textContent = s.status; st.className = "status " + s.status; }
  const v = document.getElementById("run-verdict");
  if (v) { v.textContent = s.verdict || "not judged yet"; v.className = "verdict " + (s.verdict || "open"); }
  renderGrid(s.grid);
  const tr = document.getElementById("latest-trace");
  if (tr && s.trace) {
    plot(tr, {title: s.trace.path, series: [{x: s.trace.t_ns, y: s.trace.mV}], xLabel: "time (ns) · " + s.trace.path, yLabel: "mV"});
  }
}

function startLive() {
  const section = document.getElementById("live");
  if (!section) return;
  const initial = JSON.parse(document.getElementById("live-initial").textContent);
  renderSnapshot(initial);
  if (section.dataset.running !== "yes") return;
  const source = new EventSource(`/runs/${section.dataset.run}/events`);
  source.addEventListener("snapshot", (ev) => renderSnapshot(JSON.parse(ev.data)));
  source.addEventListener("finished", () => { source.close(); setTimeout(() => location.reload(), 500); });
}

function startLiveList() {
  const body = document.getElementById("running-body");
  if (!body) return;
  const source = new EventSource("/live/events");
  source.addEventListener("runs", (ev) => {
    const runs = JSON.parse(ev.data);
    body.textContent = "";
    if (!runs.length) { const tr = body.insertRow(); tr.className = "none"; const td = tr.insertCell(); td.colSpan = 7; td.textContent = "Nothing is running."; return; }
    for (const r of runs) {
      const tr = body.insertRow();
      const a = document.createElement("a"); a.href = `/runs/${r.run_id}`; a.textContent = r.run_id;
      tr.insertCell().appendChild(a);
      tr.insertCell().textContent = r.board;
      tr.insertCell().textContent = r.procedure;
      tr.insertCell().textContent = r.total !== null ? `${r.done} / ${r.total} (${r.percent} %)` : `${r.done} steps`;
      tr.insertCell().textContent = duration(r.eta_s);
      tr.insertCell().textContent = r.quiet_s > QUIET_WARN_S ? `nothing stored for ${duration(r.quiet_s)}` : r.current_step;
      tr.insertCell().textContent = r.failed ? `${r.failed} of ${r.measurements}` : "";
    }
  });
}

function startCurves() {
  const data = document.getElementById("curves");
  if (!data) return;
  const curves = JSON.parse(data.textContent);
  document.querySelectorAll("figure.curve").forEach((fig) => {
    const c = curves[Number(fig.dataset.curve)];
    const series = c.series === "pulse" ? [{x: c.x, y: c.y}] : [{x: c.x, y: c.y, points: true}, {x: c.x, y: c.y}];
    plot(fig, {title: c.title, series: series,
      xLabel: `${c.title} · x (${c.x_unit})`, yLabel: c.y_unit});
  });
}

function startTrend() {
  const data = document.getElementById("trend-data");
  if (!data) return;
  const t = JSON.parse(data.textContent);
  const x = t.points.map((p) => p.run), y = t.points.map((p) => p.y);
  plot(document.getElementById("trend-plot"), {
    title: t.title, zoom: true, band: t.band, xTicks: x,
    lines: [{y: t.centre, cls: "centre"}, {y: t.limits[0], cls: "limit"}, {y: t.limits[1], cls: "limit"}],
    series: [{x, y}, {x, y, points: true, cls: (i) => (t.points[i].out ? "outside " : "") + t.points[i].verdict}],
    hover: (si, i) => { const p = t.points[i]; return `run ${p.run} · ${p.at} · ${fmt(p.y)} ${t.unit}${p.err ? " ± " + fmt(p.err) : ""} · ${p.verdict}${p.out ? " · outside the band" : ""}`; },
    xLabel: "run id", yLabel: `${t.title} (${t.unit})`,
  });
}

function startStrips() {
  document.querySelectorAll("span.strip").forEach((span) => {
    const values = JSON.parse(span.dataset.values);
    if (!values.length) return;
    const lo = span.dataset.low === "" ? null : Number(span.dataset.low), hi = span.dataset.high === "" ? null : Number(span.dataset.high);
    const all = values.concat([lo, hi].filter((v) => v !== null));
    const a = Math.min(...all), b = Math.max(...all), d = (b - a) || 1;
    const svg = el("svg", {viewBox: "0 0 160 16", class: "strip"});
    for (const lim of [lo, hi]) if (lim !== null) svg.appendChild(el("line", {x1: 4 + (lim - a) / d * 152, x2: 4 + (lim - a) / d * 152, y1: 0, y2: 16, class: "limit"}));
    for (const v of values) svg.appendChild(el("circle", {cx: 4 + (v - a) / d * 152, cy: 8, r: 2, class: "dot"}));
    span.appendChild(svg);
  });
}

function startCertificates() {
  const table = document.getElementById("certificates");
  if (!table) return;
  fetch(`/runs/${table.dataset.run}/certificates`).then((r) => r.json()).then((checks) => {
    for (const c of checks) {
      const row = table.querySelector(`tr[data-name="${CSS.escape(c.name)}"]`);
      if (!row) continue;
      const cell = row.querySelector("td.check");
      cell.className = "check " + (c.ok ? "pass" : "fail");
      cell.textContent = c.ok ? "matches" : "DOES NOT MATCH: " + c.differences.join("; ");
    }
  });
}

document.addEventListener("DOMContentLoaded", () => {
  startLive(); startLiveList(); startCurves(); startTrend(); startStrips(); startCertificates();
});
