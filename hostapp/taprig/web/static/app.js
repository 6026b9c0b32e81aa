// taprig dashboard. Shows what the server sends (SI values with their uncertainties and states); converts units
// only at this edge with the factors the server gives; sends one POST per control and shows the board's answer.
"use strict";

const C = { blue: "#0072B2", vermillion: "#D55E00", orange: "#E69F00", sky: "#56B4E9", green: "#009E73",
            purple: "#CC79A7", ink: "#111111", grey: "#888888" };

const params = new URLSearchParams(location.search);
const key = params.get("key") || sessionStorage.getItem("taprig.key") || "";
if (params.get("key")) {               // keep the key for this tab, out of the address bar and of shared screenshots
  sessionStorage.setItem("taprig.key", key);
  params.delete("key");
  history.replaceState(null, "", location.pathname + (params.toString() ? "?" + params : ""));
}
let source = params.get("source") || "live";

const $ = (id) => document.getElementById(id);
const stats = { frames: 0, latencies: [], lastSeq: 0, drawn: 0 };  // read by the browser tests and the benchmark
window.taprig = stats;

let rig = null, role = null, lastFrame = null, charts = {}, unit = localStorage.getItem("taprig.unit") || "Pa";
let trend = [];          // [t_s, q, cl] rows
let pointsVersion = -1;
let sweepVersion = null;  // the page sweep's progress last drawn (points taken, running)

// ---- numbers with their uncertainty -------------------------------------------------------------------------
function sig(u) { return u > 0 && isFinite(u) ? Math.max(0, 1 - Math.floor(Math.log10(u))) : 3; }
function fmtU(p, unitText = "", scale = 1) {
  if (!p || p[0] === null) return null;
  const v = p[0] * scale, u = p[1] === null ? null : Math.abs(p[1] * scale);
  if (u === null) return `${fmt(v)} ${unitText} (uncertainty not available)`;
  const d = Math.min(sig(u), 6);
  return `${v.toFixed(d)} ± ${u.toFixed(d)}${unitText ? " " + unitText : ""}`;
}
function fmt(v, d = 3) {
  if (v === null || v === undefined || !isFinite(v)) return "–";
  const a = Math.abs(v);
  if (a !== 0 && (a >= 1e5 || a < 1e-3)) return v.toExponential(2);
  return v.toFixed(a >= 100 ? 1 : d);
}
function setNum(id, text, why) {
  const el = $(id);
  if (text === null || text === undefined) { el.textContent = why || "–"; el.classList.add("unavailable"); }
  else { el.textContent = text; el.classList.remove("unavailable"); }
}

// ---- talking to the server ----------------------------------------------------------------------------------
async function api(path, body) {
  const opts = { headers: { "X-Taprig-Key": key } };
  if (body !== undefined) {
    opts.method = "POST";
    opts.headers["Content-Type"] = "application/json";
    opts.body = JSON.stringify(body);
  }
  let resp;
  try { resp = await fetch(path, opts); } catch (e) { throw new Error("taprig does not answer (is it still running?)"); }
  const data = await resp.json().catch(() => ({ error: `unexpected answer (${resp.status})` }));
  if (!resp.ok) { const err = new Error(data.error || `refused (${resp.status})`); err.field = data.field; throw err; }
  return data;
}
function say(text, error = false) { const m = $("message"); m.textContent = text; m.classList.toggle("error", error); }
async function control(action, body = {}, what = "") {
  try {
    const out = await api(`/api/live/${action}`, body);
    if (what) say(what);
    return out;
  } catch (e) { say(e.message, true); return null; }
}

// ---- charts (uPlot) -----------------------------------------------------------------------------------------
// Error bars: each series may carry an array of half-widths in series.err (same length as the data).
function errorBars() {
  return { hooks: { draw: [(u) => {
    const ctx = u.ctx;
    u.series.forEach((s, si) => {
      if (!si || !s.show || !s.err) return;
      const xs = u.data[0], ys = u.data[si];
      ctx.save(); ctx.strokeStyle = s._stroke || C.ink; ctx.lineWidth = 1.5 * devicePixelRatio;
      for (let i = 0; i < xs.length; i++) {
        const y = ys[i], e = s.err[i];
        if (y === null || e === null || e === undefined) continue;
        const cx = u.valToPos(xs[i], "x", true), y0 = u.valToPos(y - e, s.scale, true), y1 = u.valToPos(y + e, s.scale, true);
        const w = 4 * devicePixelRatio;
        ctx.beginPath(); ctx.moveTo(cx, y0); ctx.lineTo(cx, y1); ctx.moveTo(cx - w, y0); ctx.lineTo(cx + w, y0);
        ctx.moveTo(cx - w, y1); ctx.lineTo(cx + w, y1); ctx.stroke();
      }
      ctx.restore();
    });
  }] } };
}
// Marks on flagged taps: a cross and the state's first letter above the bar.
function tapMarks() {
  return { hooks: { draw: [(u) => {
    const states = u._states; if (!states) return;
    const ctx = u.ctx; ctx.save(); ctx.fillStyle = C.ink; ctx.font = `${13 * devicePixelRatio}px sans-serif`; ctx.textAlign = "center";
    states.forEach((st, i) => {
      if (st === "ok") return;
      const x = u.valToPos(i, "x", true), y = u.bbox.top + 14 * devicePixelRatio;
      ctx.fillText(st === "saturated" ? "✕ sat" : st === "out of range" ? "✕ range" : st === "left out" ? "– out" : "?", x, y);
    });
    ctx.restore();
  }] } };
}
function sizeOf(el) { const w = Math.max(300, el.clientWidth - 4); return { width: w, height: Math.round(Math.min(340, Math.max(220, w * 0.5))) }; }
const axisFont = "14px system-ui, sans-serif";
function axis(label, extra = {}) { return { label, labelFont: "bold 14px system-ui, sans-serif", font: axisFont, stroke: C.ink, grid: { stroke: "#ddd" }, size: 56, labelSize: 22, ...extra }; }
function pts(stroke, fill, shape, size = 9) {
  return { stroke, fill, width: 0, paths: () => null, points: { show: true, size, width: 2, stroke, fill }, _stroke: stroke, _shape: shape };
}

function makeCpChart() {
  const el = $("cp-chart"), kind = rig.kind, series = [{}];
  let xlabel = "x/c [-]", legend;
  if (kind === "venturi") {
    xlabel = "axial station x [mm]";
    series.push({ label: "measured Cp", ...pts(C.blue, C.blue), scale: "cp" });
    series.push({ label: rig.theory[0] ? rig.theory[0].label : "ideal", stroke: C.ink, width: 2, dash: [8, 5], scale: "cp", points: { show: false } });
    legend = "● measured Cp with its uncertainty; dashed: ideal station Cp from continuity and Bernoulli (theory).";
  } else if (kind === "cylinder") {
    xlabel = "angle from the front θ [°]";
    series.push({ label: "measured Cp", ...pts(C.blue, C.blue), scale: "cp" });
    series.push({ label: "potential flow", stroke: C.ink, width: 2, dash: [8, 5], scale: "cp", points: { show: false } });
    legend = "● measured Cp with its uncertainty; dashed: potential flow 1 − 4 sin²θ (theory).";
  } else {
    series.push({ label: "upper surface", ...pts(C.blue, C.blue), scale: "cp" });
    series.push({ label: "lower surface", ...pts(C.vermillion, "#fff"), scale: "cp" });
    series.push({ label: "fit, upper", stroke: C.blue, width: 2.5, scale: "cp", spanGaps: true, points: { show: false } });
    series.push({ label: "fit, lower", stroke: C.vermillion, width: 2.5, dash: [10, 5], scale: "cp", spanGaps: true, points: { show: false } });
    legend = "● filled: upper surface; ○ open: lower surface; bars: ±1 standard uncertainty; solid / dashed: the shape fit the integrator uses. Negative Cp up.";
  }
  $("cp-legend").textContent = legend;
  $("cp-title").textContent = kind === "venturi" ? "Pressure coefficient along the venturi" :
    kind === "cylinder" ? "Pressure coefficient round the cylinder" : "Pressure coefficient along the chord";
  const opts = { ...sizeOf(el), legend: { show: true, live: false }, cursor: { show: false },
    scales: { x: { time: false }, cp: { dir: kind === "venturi" ? 1 : -1, auto: true } },
    axes: [axis(xlabel), axis("Cp [-]", { scale: "cp" })], series, plugins: [errorBars()] };
  charts.cp = new uPlot(opts, series.map(() => []), el);
}

function makeTapChart() {
  const el = $("tap-chart"), n = rig.taps.length;
  const series = [{}, { label: "tap", stroke: C.sky, fill: C.sky + "cc", width: 1, paths: uPlot.paths.bars({ size: [0.7, 60] }), points: { show: false }, _stroke: C.ink }];
  const opts = { ...sizeOf(el), legend: { show: false }, cursor: { show: false },
    scales: { x: { time: false, range: [-0.6, n - 0.4] }, y: { auto: true } },
    axes: [axis("tap", { values: (u, vals) => vals.map((v) => (Number.isInteger(v) && rig.taps[v] ? rig.taps[v].name : "")), space: 40, rotate: 0 }),
           axis(unitLabel())], series, plugins: [errorBars(), tapMarks()] };
  charts.tap = new uPlot(opts, [[...Array(n).keys()], Array(n).fill(null)], el);
}
function unitLabel() { return unit === "Cp" ? "Cp [-]" : `p − room [${unit}]`; }

function makeTrendChart() {
  const el = $("trend-chart");
  const series = [{}, { label: "q [Pa]", stroke: C.blue, width: 2.5, scale: "q", spanGaps: false, points: { show: false } },
                      { label: "Cl", stroke: C.vermillion, width: 2.5, dash: [10, 5], scale: "cl", spanGaps: false, points: { show: false }, show: rig.kind === "airfoil" }];
  const opts = { ...sizeOf(el), legend: { show: true, live: false }, cursor: { show: false },
    scales: { x: { time: false }, q: { auto: true }, cl: { auto: true } },
    axes: [axis("time [s] (0 = now)"), axis("q [Pa]", { scale: "q" }),
           ...(rig.kind === "airfoil" ? [axis("Cl [-]", { scale: "cl", side: 1, grid: { show: false } })] : [])],
    series };
  charts.trend = new uPlot(opts, [[], [], []], el);
}

function makeLiftChart() {
  const el = $("lift-chart");
  const series = [{}, { label: "Cl (pressures)", ...pts(C.blue, C.blue), scale: "cl" },
    { label: "Cl (balance)", ...pts(C.green, "#fff", "triangle", 10), scale: "cl" },
    { label: "thin-airfoil 2π", stroke: C.ink, width: 2, dash: [8, 5], scale: "cl", spanGaps: true, points: { show: false } },
    { label: "stall (Cl max)", ...pts(C.orange, "rgba(0,0,0,0)", "diamond", 18), scale: "cl" }];
  const opts = { ...sizeOf(el), legend: { show: true, live: false }, cursor: { show: false },
    scales: { x: { time: false }, cl: { auto: true } },
    axes: [axis("α [°]"), axis("Cl [-]", { scale: "cl" })], series, plugins: [errorBars()] };
  charts.lift = new uPlot(opts, series.map(() => []), el);
}

// ---- drawing a frame ----------------------------------------------------------------------------------------
function drawCp(r) {
  const ch = charts.cp, taps = rig.taps, kind = rig.kind;
  const cp = r && r.taps.cp, u = r && r.taps.u_cp;
  if (kind === "venturi" || kind === "cylinder") {
    const xs = taps.map((t) => kind === "venturi" ? t.x_m * 1000 : t.theta_deg);
    const th = rig.theory[0];
    const tx = th ? th.x.map((x) => kind === "venturi" ? x * 1000 : x) : [];
    const all = [...new Set([...xs, ...tx])].sort((a, b) => a - b);
    const at = (arrX, arrY) => { const m = new Map(); arrX.forEach((x, i) => m.set(x, arrY[i])); return all.map((x) => (m.has(x) ? m.get(x) : null)); };
    const meas = at(xs, cp || xs.map(() => null)), err = at(xs, u || xs.map(() => null));
    ch.series[1].err = err;
    ch.setData([all, meas, th ? at(tx, th.y) : all.map(() => null)]);
    return;
  }
  const up = [], lo = [];
  taps.forEach((t, i) => (t.surface === "lower" ? lo : up).push(i));
  const fit = r && r.fit;
  const xsT = taps.map((t) => t.x_c);
  const fx = fit ? fit.x : [];
  const all = [...new Set([...xsT, ...fx])].sort((a, b) => a - b);
  const idx = new Map(all.map((x, i) => [x, i]));
  const col = () => all.map(() => null);
  const sU = col(), sL = col(), eU = col(), eL = col(), fU = col(), fL = col();
  if (cp) taps.forEach((t, i) => {
    const j = idx.get(t.x_c); if (j === undefined || cp[i] === null) return;
    if (t.surface === "lower") { sL[j] = cp[i]; eL[j] = u ? u[i] : null; } else { sU[j] = cp[i]; eU[j] = u ? u[i] : null; }
  });
  if (fit) fit.x.forEach((x, k) => { const j = idx.get(x); (fit.upper[k] ? fU : fL)[j] = fit.cp[k]; });
  ch.series[1].err = eU; ch.series[2].err = eL;
  ch.setData([all, sU, sL, fU, fL]);
}

function drawTaps(r) {
  const ch = charts.tap, n = rig.taps.length;
  let vals = Array(n).fill(null), errs = Array(n).fill(null);
  if (r) {
    if (unit === "Cp") { if (r.taps.cp) { vals = r.taps.cp; errs = r.taps.u_cp; } }
    else {
      const f = rig.units[unit] || 1;
      vals = r.taps.p_pa.value.map((v) => (v === null ? null : v * f));
      errs = r.taps.p_pa.u.map((v) => (v === null ? null : v * f));
    }
    ch._states = r.taps.state;
  }
  ch.series[1].err = errs;
  ch.setData([[...Array(n).keys()], vals]);
  $("tap-legend").textContent = (unit === "Cp" && r && !r.taps.cp) ? `No Cp: ${r.state} (${r.why}).` :
    "bars: ±1 standard uncertainty; ✕ sat: at the converter's rails (left out); ✕ range: beyond the sensor's rated range; – out: left out of the integral.";
}

function drawTrend() {
  if (!trend.length) return;
  const now = trend[trend.length - 1][0];
  const keep = trend.filter((row) => now - row[0] <= 300);
  trend = keep;
  charts.trend.setData([keep.map((r) => r[0] - now), keep.map((r) => r[1]), keep.map((r) => r[2])]);
}

// A calibration that fails its own checks: every number rests on it, so none is shown as if it held.
function shownReading(f) {
  const r = f.reading;
  if (!r || !f.calibration_warning) return r;
  return { ...r, state: "bad calibration", why: f.calibration_warning, coefficients: null, fit: null, venturi: null,
           balance: null, taps: { ...r.taps, cp: null, u_cp: null } };
}

function drawReadings(f, r) {
  const sw = $("state-word");
  const showCoeff = r && r.state === "flow";
  if (!r) { sw.hidden = false; sw.textContent = "no data yet"; }
  else if (r.state !== "flow") { sw.hidden = false; sw.textContent = `${r.state.toUpperCase()}: ${r.why}`; }
  else sw.hidden = true;
  $("window-note").textContent = r ? `mean of ${r.window.used} scans` +
    (r.uncertainty_window && r.uncertainty_window.scan_index[1] !== r.window.scan_index[1]
      ? `; ± from the mean of ${r.uncertainty_window.used} scans ${((r.window.t_ns[1] - r.uncertainty_window.t_ns[1]) / 1e9).toFixed(2)} s earlier` : "") : "";
  const fl = r ? r.flow : {};
  setNum("n-q", r ? fmtU(fl.q_pa, "Pa") : null, r ? r.state : "no data");
  setNum("n-v", showCoeff ? fmtU(fl.v_ms, "m/s") : null, r ? r.state : "–");
  setNum("n-re", showCoeff && fl.re ? `${fl.re[0].toExponential(3)} ± ${fl.re[1] !== null ? fl.re[1].toExponential(1) : "?"}` : null, r ? r.state : "–");
  setNum("n-mach", showCoeff && fl.mach !== null && fl.mach !== undefined ? fl.mach.toFixed(4) : null, rig.medium === "water" ? "n/a in water" : (r ? r.state : "–"));
  setNum("n-rho", r && fl.rho ? `${fl.rho.toFixed(4)} kg/m³ (from room conditions)` : null);
  setNum("n-alpha", r && fl.alpha_deg !== null && fl.alpha_deg !== undefined ? `${fl.alpha_deg.toFixed(2)}° (set)` : null,
         rig.actuators.some((a) => a.kind === "angle") ? "–" : "fixed (no angle actuator)");
  const c = r && r.coefficients;
  const why = r ? (r.state === "flow" ? "no integral for this rig" : r.state) : "no data";
  setNum("n-cl", c ? fmtU(c.cl) : null, why);
  setNum("n-cd", c ? fmtU(c.cd_p) : null, why);
  setNum("n-cm", c ? fmtU(c.cm_qc) : null, why);
  const bal = r && r.balance;
  document.querySelectorAll(".bal").forEach((e) => (e.hidden = !(rig.has_balance)));
  if (rig.has_balance) setNum("n-clb", bal && bal.cl !== null ? `${bal.cl.toFixed(3)} (${fmt(bal.lift_n)} N)` : null, why);
  const ven = r && r.venturi;
  document.querySelectorAll(".ven").forEach((e) => (e.hidden = rig.kind !== "venturi"));
  if (rig.kind === "venturi") {
    const noRate = r && r.state === "flow" ? "no flow rate (see the flags)" : why;
    setNum("n-mdot", ven && ven.mass_flow_kg_s !== null ? fmtU([ven.mass_flow_kg_s * 1000, ven.u_mass_flow_kg_s === null ? null : ven.u_mass_flow_kg_s * 1000], "g/s") : null, noRate);
    setNum("n-qv", ven && ven.volume_flow_m3_s !== null ? fmtU([ven.volume_flow_m3_s * 1000, ven.u_mass_flow_kg_s === null ? null : ven.u_mass_flow_kg_s / ven.mass_flow_kg_s * ven.volume_flow_m3_s * 1000], "L/s at the room's density") : null, noRate);
  }
  const extra = [];
  if (c) extra.push(`coefficients: ${c.method}${c.walls ? ` (wall-corrected; α corrected ${fmt(c.alpha_corrected_deg)}°)` : ""}; trapezoid Cl ${fmt(c.plain_cl)}`);
  if (r && r.flags.length) extra.push(`flags: ${r.flags.join(", ")}`);
  renderAssumptions(extra);
}

function renderAssumptions(extra = []) {
  const ul = $("assumptions"); ul.replaceChildren();
  const f = lastFrame || {};
  const lines = [...(f.assumptions || rig.assumptions),
    ...(f.playback ? [`re-reduced with: ${f.playback.calibration}`] : []),
    `wall corrections: ${rig.wall_corrections ? "on (2-D, solid and wake blockage, streamline curvature)" : "off"}`,
    `air: ${fmt(rig.ambient.pressure_pa / 100, 1)} hPa, ${fmt(rig.ambient.temperature_k - 273.15, 1)} °C, ρ ${fmt(rig.ambient.density, 4)} kg/m³`, ...extra];
  for (const l of lines) { const li = document.createElement("li"); li.textContent = l; ul.appendChild(li); }
}

function chip(id, text, cls) { const el = $(id); el.textContent = text; el.className = "state " + (cls || ""); }

function drawStatus(f, r) {
  const link = f.link || {};
  const age = link.age_s;
  const stale = f.mode === "live" && (age === null || age > 1.0);
  chip("st-flow", r ? (r.state === "flow" ? "FLOW" : r.state.toUpperCase()) : "NO DATA", r && r.state === "flow" ? "good" : "warn");
  if (f.mode === "replay") chip("st-rec", "REPLAY", "good");
  else chip("st-rec", f.recording && f.recording.on ? (f.recording.error ? "NOT RECORDING" : "● REC") : "not recording",
            f.recording && f.recording.on ? (f.recording.error ? "bad" : "on") : "");
  const ls = link.state || "–";
  chip("st-link", `link ${ls}`, ["connected", "restored", "replay"].includes(ls) ? "good" : "bad");
  const b = link.board;
  chip("st-board", b ? `board ${b}` : (f.mode === "replay" ? "recorded" : "board –"), b === "safe" ? "bad" : b === "streaming" ? "good" : "");
  const ageEl = $("st-age");
  ageEl.hidden = !stale; if (stale) chip("st-age", age === null ? "no data" : `data ${age.toFixed(1)} s old`, "bad");
  document.querySelectorAll(".live-plot").forEach((p) => p.classList.toggle("stale", stale || !r || r.state !== "flow"));
  $("halt").hidden = !f.halt; if (f.halt) $("halt-text").textContent = `The board went safe on its own: ${f.halt}. Nothing is sent until you resume.`;
  const c = link.counters || {};
  $("l-fps").textContent = link.rates && link.rates.frames !== undefined ? link.rates.frames.toFixed(0) : "–";
  $("l-crc").textContent = c.crc_errors ?? "–"; $("l-gaps").textContent = c.gaps ?? "–"; $("l-lost").textContent = c.scans_lost ?? "–";
  $("l-log").textContent = link.last_log || "–";
  const lat = stats.latencies.slice(-200).sort((a, b) => a - b);
  $("l-lat").textContent = lat.length ? `${lat[Math.floor(lat.length / 2)].toFixed(0)} ms (arrival at the host → drawn here)` : "–";
  if (f.notices && f.notices.length) {
    const n = f.notices[f.notices.length - 1];
    if (n.host_ns !== stats.lastNotice) { stats.lastNotice = n.host_ns; say(n.text, /fail|ended|refus|cannot/.test(n.text)); }
  }
  if (f.mode === "live") drawControls(f); else drawPlayback(f);
}

function drawControls(f) {
  for (const a of rig.actuators) {
    const now = $(`now-${a.name}`); const sp = f.setpoints[a.name];
    if (now && sp) now.textContent = `now ${fmt(sp.value)} ${a.unit}${sp.safe ? " (safe value)" : ""} — acknowledged by the board`;
  }
  $("b-record").textContent = f.recording && f.recording.on ? "Stop recording" : "Start recording";
  $("b-record").disabled = !rig.can_record;
  const sw = f.sweep || {};
  $("sweep-state").textContent = sw.running ? sweepProgress(sw) : (sw.message || "");
  $("b-sweep").disabled = !!sw.running; $("b-sweep-stop").disabled = !sw.running;
  $("resume-go").disabled = !!sw.running;
  const ask = sw.asking;
  $("sw-hand").hidden = !ask;
  if (ask && stats.handIndex !== ask.index) {  // a new angle to set: show it, and offer it as the answer
    stats.handIndex = ask.index;
    $("sw-hand-text").textContent = `Set the model to α = ${ask.alpha_deg >= 0 ? "+" : ""}${fmt(ask.alpha_deg, 1)}° (${ask.leg}), hands clear, then confirm`;
    $("sw-hand-angle").value = fmt(ask.alpha_deg, 1);
  }
  if (!ask) stats.handIndex = null;
}

function drawPlayback(f) {
  const p = f.playback; if (!p) return;
  $("pb-play").textContent = p.playing ? "Pause" : "Play";
  $("pb-pos").textContent = `${fmt(p.position_s, 1)} of ${fmt(p.duration_s, 1)} s${p.finished ? " (end)" : ""}${p.error ? " — " + p.error : ""}`;
  const seek = $("pb-seek"); if (document.activeElement !== seek) seek.value = p.position_s || 0;
}

function onFrame(f) {
  stats.frames++; stats.lastSeq = f.seq; lastFrame = f;
  if (f.trend && (!trend.length || f.trend[0] / 1e9 > trend[trend.length - 1][0])) trend.push([f.trend[0] / 1e9, f.trend[1], f.trend[2]]);
  const r = shownReading(f);
  drawStatus(f, r); drawReadings(f, r); drawCp(r); drawTaps(r); drawTrend();
  const alpha = r && r.flow && r.flow.alpha_deg !== null && r.flow.alpha_deg !== undefined ? Math.round(r.flow.alpha_deg * 10) / 10 : 0;
  if (alpha !== pictureAlpha) loadPicture(alpha);
  if (stats.frames % 5 === 0) drawRig(r);  // a few times a second is enough for numbers to be read
  if (f.points !== pointsVersion) { pointsVersion = f.points; loadPoints(); }
  const sw = f.sweep;
  const version = sw ? `${sw.taken}/${sw.running}` : null;
  if (sw && version !== sweepVersion) {  // a sweep's point taken, or a sweep started or ended: its results, the list
    sweepVersion = version; loadSweepResults();
    if (!sw.running) loadResumable();
  }
  if (f.host_ns && f.mode === "live") {
    requestAnimationFrame(() => {
      const drawnMs = performance.timeOrigin + performance.now();
      stats.latencies.push(drawnMs - f.host_ns / 1e6);
      if (stats.latencies.length > 5000) stats.latencies.splice(0, 1000);
      stats.drawn++;
      stats.lastDrawn = { seq: f.seq, window: f.reading && f.reading.window,
                          uncertaintyWindow: f.reading && f.reading.uncertainty_window,
                          cl: $("n-cl").textContent, q: $("n-q").textContent };
    });
  }
}

// ---- the rig, to scale, with each tap's live value -------------------------------------------------------------
let picture = null, pictureAlpha = null;
async function loadPicture(alphaDeg) {
  pictureAlpha = alphaDeg;
  try { picture = await api(`/api/${source}/picture?alpha_deg=${alphaDeg}`); } catch (e) { picture = null; return; }
  const ul = $("rig-problems"); ul.replaceChildren();
  for (const q of picture.problems) { const li = document.createElement("li"); li.textContent = "⚠ " + q.text; ul.appendChild(li); }
  for (const n of picture.notes) { const li = document.createElement("li"); li.textContent = n; li.className = "note"; ul.appendChild(li); }
}
function tapValue(r, i) {
  if (!r || i === undefined) return "";
  let value;
  if (unit === "Cp") value = r.taps.cp && r.taps.cp[i] !== null ? r.taps.cp[i].toFixed(2) : "–";
  else { const v = r.taps.p_pa.value[i]; value = v === null ? "–" : fmt(v * (rig.units[unit] || 1), 1); }
  return r.taps.state[i] !== "ok" ? `${value} (${r.taps.state[i]})` : value;
}
// The model fills the drawing; tap labels sit in a row above (taps facing up) and below, in x order, each joined
// to its tap by a thin line, so even a crowded leading edge stays readable.
function drawRig(r) {
  const cv = $("rig-canvas"); if (!picture) return;
  const dpr = window.devicePixelRatio || 1, cssW = Math.max(320, cv.clientWidth), cssH = Math.round(Math.min(460, Math.max(300, cssW * 0.42)));
  if (cv.width !== Math.round(cssW * dpr)) { cv.width = Math.round(cssW * dpr); cv.height = Math.round(cssH * dpr); cv.style.height = cssH + "px"; }
  const ctx = cv.getContext("2d"); ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
  const W = cssW, H = cssH, band = 100, side = 20;
  const placed = picture.taps.filter((t) => t.x !== null);
  const pts = [...picture.outline, ...placed.map((t) => [t.x, t.y]), ...(picture.pivot ? [picture.pivot] : [])];
  if (!pts.length) return;
  let [x0, x1, y0, y1] = [Math.min(...pts.map((p) => p[0])), Math.max(...pts.map((p) => p[0])), Math.min(...pts.map((p) => p[1])), Math.max(...pts.map((p) => p[1]))];
  const mx = 0.06 * (x1 - x0 || 1), my = 0.15 * (y1 - y0 || (x1 - x0) * 0.2 || 1);
  x0 -= mx; x1 += mx; y0 -= my; y1 += my;
  const k = Math.min((W - 2 * side) / (x1 - x0), (H - 2 * band) / (y1 - y0));
  const cx = side + ((W - 2 * side) - (x1 - x0) * k) / 2, cy = band + ((H - 2 * band) - (y1 - y0) * k) / 2;
  const X = (x) => cx + (x - x0) * k, Y = (y) => H - cy - (y - y0) * k;
  ctx.clearRect(0, 0, W, H);
  ctx.save(); ctx.beginPath(); ctx.rect(0, band - 10, W, H - 2 * band + 20); ctx.clip();
  ctx.lineWidth = 3; ctx.strokeStyle = C.ink;
  for (const wall of picture.walls) { ctx.beginPath(); wall.forEach(([x, y], i) => (i ? ctx.lineTo(X(x), Y(y)) : ctx.moveTo(X(x), Y(y)))); ctx.stroke(); }
  if (picture.outline.length) {
    ctx.beginPath(); picture.outline.forEach(([x, y], i) => (i ? ctx.lineTo(X(x), Y(y)) : ctx.moveTo(X(x), Y(y))));
    ctx.closePath(); ctx.fillStyle = "#d8d8d2"; ctx.fill(); ctx.lineWidth = 2; ctx.stroke();
  }
  if (picture.pivot) { ctx.fillStyle = C.ink; ctx.beginPath(); ctx.arc(X(picture.pivot[0]), Y(picture.pivot[1]), 5, 0, 2 * Math.PI); ctx.fill(); }
  ctx.restore();
  const byName = new Map(rig.taps.map((t, i) => [t.name, i]));
  for (const group of [placed.filter((t) => t.ny >= 0), placed.filter((t) => t.ny < 0)]) {
    if (!group.length) continue;
    const top = group[0].ny >= 0;
    group.sort((a, b) => a.x - b.x);
    const slot = (W - 2 * side) / group.length, vertical = slot < 62;
    group.forEach((t, j) => {
      const px = X(t.x), py = Y(t.y), bad = t.problems.length > 0;
      const sx = side + slot * (j + 0.5), sy = top ? band - 8 : H - band + 8;
      ctx.strokeStyle = "#999"; ctx.lineWidth = 1; ctx.beginPath(); ctx.moveTo(px, py); ctx.lineTo(sx, sy); ctx.stroke();
      ctx.fillStyle = bad ? C.vermillion : (t.surface === "lower" ? "#fff" : C.blue);
      ctx.strokeStyle = bad ? C.vermillion : (t.surface === "lower" ? C.vermillion : C.blue); ctx.lineWidth = 2;
      ctx.beginPath(); ctx.arc(px, py, 4.5, 0, 2 * Math.PI); ctx.fill(); ctx.stroke();
      const name = `${t.name}${bad ? " ⚠" : ""}`, value = tapValue(r, byName.get(t.name));
      ctx.save(); ctx.translate(sx, sy); ctx.fillStyle = bad ? C.vermillion : C.ink;
      if (vertical) {
        ctx.rotate(-Math.PI / 2); ctx.textAlign = top ? "left" : "right"; ctx.textBaseline = "middle";
        ctx.font = "12px system-ui, sans-serif"; ctx.fillText(`${name} ${value}`, top ? 2 : -2, 0);
      } else {  // the name next to the tap, the value beyond it
        ctx.textAlign = "center"; ctx.textBaseline = top ? "bottom" : "top";
        const step = top ? -17 : 17;
        ctx.font = "bold 13px system-ui, sans-serif"; ctx.fillText(name, 0, 0);
        ctx.font = "14px system-ui, sans-serif"; ctx.fillText(value, 0, step);
      }
      ctx.restore();
    });
  }
  ctx.fillStyle = "#555"; ctx.font = "13px system-ui, sans-serif"; ctx.textAlign = "right"; ctx.textBaseline = "alphabetic";
  ctx.fillText(`values in ${unit}; flow from left to right`, W - 6, H - 4);
  ctx.textAlign = "left";
}

// ---- points and lift curve ----------------------------------------------------------------------------------
async function loadPoints() {
  let data; try { data = await api(`/api/${source}/points`); } catch (e) { return; }
  const tb = document.querySelector("#points tbody"); tb.replaceChildren();
  for (const p of data.points) {
    const tr = document.createElement("tr");
    const cells = [p.index, p.label, fmt(p.alpha_deg, 2), p.q_pa ? fmtU(p.q_pa) : "–", p.cl ? fmtU(p.cl) : p.state,
                   p.cd_p ? fmtU(p.cd_p) : "–", p.cm_qc ? fmtU(p.cm_qc) : "–", p.state + (p.flags.length ? ` (${p.flags.join(", ")})` : "")];
    for (const c of cells) { const td = document.createElement("td"); td.textContent = c; tr.appendChild(td); }
    tb.appendChild(tr);
  }
  drawLift(data);
}

function drawLift(data) {
  const usable = data.points.filter((p) => p.cl && p.alpha_deg !== null)
    .map((p) => ({ a: p.alpha_corrected_deg ?? p.alpha_deg, cl: p.cl[0], u: p.cl[1], b: p.cl_balance }));
  usable.sort((x, y) => x.a - y.a);
  const lc = data.lift_curve;
  const xs = usable.map((p) => p.a);
  const lo = xs.length ? Math.min(...xs) : -5, hi = xs.length ? Math.max(...xs) : 15;
  const all = [...xs, lo, hi].sort((a, b) => a - b);
  const a0 = lc && lc.alpha_zero_lift_deg !== null ? lc.alpha_zero_lift_deg : 0;
  const slope = rig.thin_airfoil_slope_per_rad ? rig.thin_airfoil_slope_per_rad * Math.PI / 180 : null;
  const map = (fn) => all.map(fn);
  const cl = [], err = [], bal = [];
  const used = new Set();
  all.forEach((x) => {
    const i = usable.findIndex((p, j) => !used.has(j) && p.a === x);
    if (i >= 0) { used.add(i); cl.push(usable[i].cl); err.push(usable[i].u); bal.push(usable[i].b ?? null); } else { cl.push(null); err.push(null); bal.push(null); }
  });
  const theory = slope ? map((x) => slope * (x - a0)) : map(() => null);
  const stall = map(() => null);
  if (lc && lc.stalled) { const j = all.findIndex((x) => x === lc.alpha_cl_max_deg); if (j >= 0) stall[j] = lc.cl_max; }
  charts.lift.series[1].err = err;
  charts.lift.setData([all, cl, bal, theory, stall]);
  // the words are the server's (taprig.analysis.wording, as the terminal and the handout say them)
  $("lift-legend").textContent = lc ? lc.lines.join(" ") +
    (slope ? " Dashed: thin-airfoil theory, 2π per radian, through the measured zero-lift angle." : "")
    : "Capture three or more points with flow for a lift curve. Bars: ±1 standard uncertainty.";
}

// ---- controls -----------------------------------------------------------------------------------------------
async function confirmFirst() {
  if (!lastFrame || !lastFrame.needs_confirmation) return true;
  const dlg = $("confirm");
  $("confirm-text").textContent = rig.safety;
  dlg.showModal();
  const answer = await new Promise((res) => dlg.addEventListener("close", () => res(dlg.returnValue), { once: true }));
  if (answer !== "yes") { say("nothing moved"); return false; }
  return (await control("confirm")) !== null;
}
async function setActuator(a, value) {
  if (!(await confirmFirst())) return;
  const out = await control("setpoint", { actuator: a.name, value: Number(value) });
  if (out) say(`${a.name} → ${value} ${a.unit}: acknowledged by the board`);
}
function buildControls() {
  $("safety").textContent = rig.safety;
  const box = $("actuators"); box.replaceChildren();
  for (const a of rig.actuators) {
    const row = document.createElement("div"); row.className = "actuator";
    const label = document.createElement("label"); label.textContent = `${a.name} (${a.kind}) [${fmt(a.min)} … ${fmt(a.max)} ${a.unit}]`;
    const input = document.createElement("input"); Object.assign(input, { type: "number", min: a.min, max: a.max, step: a.kind === "angle" ? 0.5 : (a.max - a.min) / 100, value: a.safe, id: `in-${a.name}` });
    label.htmlFor = input.id;
    const set = document.createElement("button"); set.textContent = "Set";
    set.addEventListener("click", () => {
      const v = Number(input.value);
      if (!(v >= a.min && v <= a.max)) { say(`${a.name}: ${input.value} is outside ${a.min} … ${a.max} ${a.unit}`, true); return; }
      setActuator(a, v);
    });
    input.addEventListener("input", () => (set.textContent = `Set ${a.name} → ${input.value}`));
    const now = document.createElement("div"); now.className = "now"; now.id = `now-${a.name}`;
    row.append(label, input, set, now); box.appendChild(row);
  }
  const servo = rig.actuators.find((a) => a.kind === "angle");
  const fan = rig.actuators.find((a) => a.kind === "fan");
  const byHand = !servo && rig.kind === "airfoil";  // no servo: the operator sets each angle when asked
  $("sweep").hidden = !servo && !byHand && !fan;
  if (servo) { $("sw-from").value = Math.max(servo.min, -4); $("sw-to").value = Math.min(servo.max, 12); }
  buildSweepForm(servo, fan, byHand);
  $("b-zero").onclick = () => control("zero", {}, "wind-off zero taken");
  $("b-capture").onclick = async () => { const o = await control("capture", { seconds: 1.0 }); if (o) say(`point ${o.point.index} captured (${o.point.state})`); };
  $("b-record").onclick = async () => {
    const on = lastFrame && lastFrame.recording && lastFrame.recording.on;
    const o = await control(on ? "record-stop" : "record-start");
    if (o) say(on ? `recording stopped: ${o.path}` : `recording to ${o.path}`);
  };
  $("b-note").onclick = async () => { const t = $("note").value.trim(); if (!t) return; if (await control("note", { text: t })) { $("note").value = ""; } };
  $("b-sweep").onclick = async () => {
    if (!(await confirmFirst())) return;
    const kind = sweepKind(), past = $("sw-past").value.trim();
    const body = { kind, settle_s: numberOf("sw-settle"), average_s: numberOf("sw-avg"), up_and_down: $("sw-updown").checked };
    if (kind !== "fan") Object.assign(body, { from_deg: numberOf("sw-from"), to_deg: numberOf("sw-to"), step_deg: numberOf("sw-step"),
                                              by_hand: byHand, ...(past === "" ? {} : { past_stall: numberOf("sw-past") }) });
    if (kind !== "angle") Object.assign(body, { fans: $("sw-fans").value, spin_up_s: numberOf("sw-spin") });
    if (kind === "fan" && servo) body.at_deg = numberOf("sw-at");
    const o = await formControl("sweep-start", body);
    if (o) say(`${kind === "fan" ? "fan" : kind === "nested" ? "nested" : "angle"} sweep of ${o.points} points${lastPlanExact() ? "" : " at most"} started`);
  };
  $("sw-hand-ok").onclick = async () => {
    const v = Number($("sw-hand-angle").value);
    if (!($("sw-hand-angle").value.trim() !== "" && v >= -90 && v <= 90)) { say("the angle set must be a number of degrees within −90…90", true); return; }
    if (await control("sweep-hand-angle", { angle_deg: v })) say(`angle set by hand: ${fmt(v, 1)}°`);
  };
  $("sw-hand-stop").onclick = () => control("sweep-hand-angle", { stop: true }, "sweep by hand stopped");
  $("b-sweep-stop").onclick = () => control("sweep-stop", {}, "sweep stops after its current step");
  $("stop").onclick = stopAll;
  $("resume").onclick = () => control("resume", {}, "control resumed: set the fan and the angle again");
}
// ---- sweeps: the form adapts to the rig's actuators; refusals are shown beside their field ------------------------
const FIELD_INPUT = { fans: "sw-fans", fan: "sw-fans", from_deg: "sw-from", to_deg: "sw-to", step_deg: "sw-step", at_deg: "sw-at",
                      past_stall: "sw-past", settle_s: "sw-settle", average_s: "sw-avg", spin_up_s: "sw-spin",
                      up_and_down: "sw-updown", by_hand: "sw-kinds", kind: "sw-kinds", inner: "sw-kinds" };
function numberOf(id) { const t = $(id).value.trim(); return t === "" ? null : Number(t); }
function sweepKind() { const r = document.querySelector('input[name="sw-kind"]:checked'); return r ? r.value : "angle"; }
function lastPlanExact() { return !(lastFrame && lastFrame.sweep && lastFrame.sweep.exact === false); }
function clearFieldErrors() {
  document.querySelectorAll("#sweep .field-error").forEach((e) => e.remove());
  document.querySelectorAll('#sweep [aria-invalid="true"]').forEach((e) => e.removeAttribute("aria-invalid"));
}
function showFieldError(field, text) {
  const input = $(FIELD_INPUT[field] || "sw-kinds");
  input.setAttribute("aria-invalid", "true");
  const note = document.createElement("span"); note.className = "field-error"; note.id = `err-${field}`;
  note.textContent = text; note.setAttribute("role", "alert");
  const at = input.closest("label") || input;
  at.insertAdjacentElement("afterend", note);
}
async function formControl(action, body) {
  clearFieldErrors();
  try { const out = await api(`/api/live/${action}`, body); say(""); return out; }
  catch (e) { if (e.field) showFieldError(e.field, e.message); say(e.message, true); return null; }
}
function buildSweepForm(servo, fan, byHand) {
  const kinds = { angle: !!servo || byHand, fan: !!fan, nested: !!servo && !!fan };
  for (const [k, ok] of Object.entries(kinds)) $(`sw-k-${k}-l`).hidden = !ok;
  const first = ["angle", "fan", "nested"].find((k) => kinds[k]);
  if (first) $(`sw-k-${first}`).checked = true;
  if (fan) {
    const span = fan.max - fan.min, r = (x) => Math.round((fan.min + x * span) * 1000) / 1000;
    $("sw-fans").value = `${r(0.4)}:${r(0.8)}:${r(0.2) - r(0)}`;
    $("sw-fan-unit").textContent = fan.unit;
    $("sw-fan-limits").textContent = `${fan.name}: ${fmt(fan.min)} … ${fmt(fan.max)} ${fan.unit}; safe (off) value ${fmt(fan.safe)}, ` +
      "which a sweep cannot take as a point. Settings as 0.3,0.5,0.8 or FROM:TO:STEP, as taprig sweep --fans takes them.";
  }
  if (servo) $("sw-at").min = servo.min, $("sw-at").max = servo.max;
  const shape = () => {
    const k = sweepKind();
    $("sw-fan-part").hidden = k === "angle"; $("sw-angle-part").hidden = k === "fan";
    $("sw-at-l").hidden = !(k === "fan" && servo); $("sw-past-l").hidden = k === "fan";
    $("sw-fan-caution").hidden = k === "angle";
    $("sw-hand-note").hidden = !(byHand && k !== "fan");
    clearFieldErrors();
  };
  document.querySelectorAll('input[name="sw-kind"]').forEach((r) => r.addEventListener("change", shape));
  shape();
  $("resume-box").hidden = !rig.sessions;
  $("resume-refresh").onclick = loadResumable;
  $("resume-cancel").onclick = () => { $("resume-ask").hidden = true; resumeChoice = null; };
  $("resume-go").onclick = resumeSweep;
}
function sweepProgress(sw) {
  const c = sw.current;
  if (!c) return `${sw.done} of ${sw.exact ? "" : "at most "}${sw.total} points`;
  const fan = rig.actuators.find((a) => a.kind === "fan");
  const parts = [`point ${c.number} of ${sw.exact ? "" : "at most "}${sw.total}`, `leg ${c.leg}`];
  if (c.fan !== null && c.fan !== undefined) parts.push(`fan ${fmt(c.fan)}${fan ? " " + fan.unit : ""}`);
  if (c.alpha_deg !== null && c.alpha_deg !== undefined) parts.push(`α ${c.alpha_deg >= 0 ? "+" : ""}${fmt(c.alpha_deg, 1)}°${c.by_hand ? " (by hand)" : ""}`);
  return parts.join(", ") + ` — ${sw.done} taken`;
}

// ---- resuming an interrupted sweep ---------------------------------------------------------------------------
let resumeChoice = null;
function nextWords(s) {
  const n = s.next; const fan = rig.actuators.find((a) => a.kind === "fan");
  return `point ${n.number} of ${s.past_stall === null ? "" : "at most "}${s.at_most}: ${n.label}` +
    (n.fan !== null && fan ? ` (${fan.name} → ${fmt(n.fan)} ${fan.unit})` : "");
}
async function loadResumable() {
  if (role !== "control" || $("resume-box").hidden) return;
  let data; try { data = await api("/api/live/resumable"); } catch (e) { $("resume-msg").textContent = e.message; return; }
  const tb = document.querySelector("#resumable tbody"); tb.replaceChildren();
  data.sessions.forEach((s, i) => {
    const tr = document.createElement("tr");
    for (const c of [i + 1, s.name, `${s.taken} of ${s.past_stall === null ? "" : "at most "}${s.at_most}`, nextWords(s)]) {
      const td = document.createElement("td"); td.textContent = c; tr.appendChild(td);
    }
    const td = document.createElement("td"); const b = document.createElement("button"); b.textContent = "Resume…"; b.className = "resume";
    b.onclick = () => {
      resumeChoice = s; $("resume-ask").hidden = false; $("resume-msg").textContent = "";
      $("resume-text").textContent = `Go on with the sweep of ${s.name}: its ${s.taken} point${s.taken === 1 ? "" : "s"} are carried into ` +
        `a new recording, and the next point it takes is ${nextWords(s)}. ` + (s.fans.length ? "The fan will run: guards on, hands clear." : "");
    };
    td.appendChild(b); tr.appendChild(td); tb.appendChild(tr);
  });
  $("resume-none").hidden = data.sessions.length > 0;
  if (resumeChoice && !data.sessions.some((s) => s.name === resumeChoice.name)) { resumeChoice = null; $("resume-ask").hidden = true; }
}
async function resumeSweep() {
  if (!resumeChoice || !(await confirmFirst())) return;
  $("resume-msg").textContent = "";
  try {
    const o = await api("/api/live/sweep-resume", { name: resumeChoice.name, zero: $("resume-zero").checked });
    say(`resumed ${resumeChoice.name}: ${o.carried} points carried${o.recording ? ", recording to " + o.recording : ""}`);
    $("resume-ask").hidden = true; resumeChoice = null;
  } catch (e) { $("resume-msg").textContent = e.message; say(e.message, true); }
}

// ---- a sweep's results, as the analysis gives them ---------------------------------------------------------------
async function loadSweepResults() {
  if (rig.mode !== "live") return;
  let data; try { data = await api("/api/live/sweep-results"); } catch (e) { return; }
  stats.sweepResults = data;
  $("results-card").hidden = !data.n;
  if (!data.n) return;
  const fanSweep = data.inner === "fan";
  const venturi = !!data.discharge;
  $("results-title").textContent = venturi ? "Sweep results: discharge coefficient C against Re_D"
    : fanSweep ? "Sweep results: Cl against Re at the held angle" : "Sweep results";
  const lines = $("results-lines"); lines.replaceChildren();
  for (const t of data.lines) { const li = document.createElement("li"); li.textContent = t; lines.appendChild(li); }
  const yOf = (p) => (venturi ? p.c : p.cl);
  $("results-y").textContent = venturi ? "C" : "Cl";
  const tb = document.querySelector("#results tbody"); tb.replaceChildren();
  for (const p of data.points) {
    const tr = document.createElement("tr");
    const cells = [p.number, (p.label || "") + (p.carried ? " (carried)" : ""), p.fan === null ? "–" : fmt(p.fan),
                   p.alpha_deg === null ? "–" : fmt(p.alpha_deg, 1), p.re ? fmtU(p.re) : "–", yOf(p) ? fmtU(yOf(p)) : (venturi && p.c_state) || "–"];
    for (const c of cells) { const td = document.createElement("td"); td.textContent = c; tr.appendChild(td); }
    tb.appendChild(tr);
  }
  const chart = $("results-chart");
  chart.hidden = !(venturi || fanSweep);
  if (chart.hidden) return;
  const pts_ = data.points.filter((p) => p.re && yOf(p)).sort((a, b) => a.re[0] - b.re[0]);
  const xs = pts_.map((p) => p.re[0]), ys = pts_.map((p) => yOf(p)[0]), es = pts_.map((p) => yOf(p)[1]);
  const ref = venturi && data.discharge.iso ? xs.map(() => data.discharge.iso.c) : xs.map(() => null);
  if (!charts.results) {
    const series = [{}, { label: venturi ? "C (measured)" : "Cl (measured)", ...pts(C.blue, C.blue), scale: "y" },
      { label: "ISO 5167-4 machined convergent (stated value)", stroke: C.ink, width: 2, dash: [8, 5], scale: "y", points: { show: false } }];
    charts.results = new uPlot({ ...sizeOf(chart), legend: { show: true, live: false }, cursor: { show: false },
      scales: { x: { time: false }, y: { auto: true } },
      axes: [axis(venturi ? "Re_D [-]" : "Re [-]"), axis(venturi ? "C [-]" : "Cl [-]", { scale: "y" })],
      series, plugins: [errorBars()] }, series.map(() => []), chart);
  }
  charts.results.series[1].err = es;
  charts.results.setData([xs, ys, ref]);
}

async function stopAll() {
  const o = await control("stop");
  if (o) say(o.failed.length ? `STOP sent; not acknowledged: ${o.failed.join("; ")}` : "STOP: every actuator at its safe value (acknowledged)", !!o.failed.length);
}

function buildPlayback() {
  const s = rig.session; $("pb-file").textContent = s.path;
  const sel = $("pb-speed"); sel.replaceChildren();
  for (const v of s.speeds) { const o = document.createElement("option"); o.value = v; o.textContent = v === 0 ? "as fast as possible" : `${v}×`; if (v === 1) o.selected = true; sel.appendChild(o); }
  const seek = $("pb-seek"); seek.max = s.duration_s;
  const pb = (action, body = {}) => api(`/api/${source}/playback/${action}`, body).catch((e) => say(e.message, true));
  $("pb-play").onclick = () => pb(lastFrame && lastFrame.playback && lastFrame.playback.playing ? "pause" : "play");
  sel.onchange = () => pb("speed", { speed: Number(sel.value) });
  seek.onchange = () => pb("seek", { seconds: Number(seek.value) });
  $("pb-own").onclick = () => pb("recalibrate", { calibration: null });
  $("pb-cal").onchange = async () => {
    const file = $("pb-cal").files[0]; if (!file) return;
    const text = await file.text();
    pb("recalibrate", { calibration: text, name: file.name });
  };
}

// The handout PDF of a session (taprig.report): fetched with the key in its header, saved as a download.
async function downloadHandout(name, button) {
  button.disabled = true; say(`writing the handout of ${name} …`);
  try {
    const resp = await fetch(`/api/sessions/handout?name=${encodeURIComponent(name)}`, { headers: { "X-Taprig-Key": key } });
    if (!resp.ok) { const data = await resp.json().catch(() => ({})); throw new Error(data.error || `refused (${resp.status})`); }
    const url = URL.createObjectURL(await resp.blob());
    const a = document.createElement("a"); a.href = url; a.download = name.replace(/\.taprig$/, "") + "-handout.pdf";
    document.body.appendChild(a); a.click(); a.remove();
    setTimeout(() => URL.revokeObjectURL(url), 60000);
    say(`handout of ${name} downloaded`);
  } catch (e) { say(e.message.startsWith("Failed to fetch") ? "taprig does not answer (is it still running?)" : e.message, true); }
  finally { button.disabled = false; }
}

async function loadSessions() {
  let data; try { data = await api("/api/sessions"); } catch (e) { say(e.message, true); return; }
  $("sessions-folder").textContent = data.folder;
  const tb = document.querySelector("#sessions tbody"); tb.replaceChildren();
  for (const s of data.sessions) {
    const tr = document.createElement("tr");
    const cells = [s.name, s.rig || "", (s.started_utc || "").replace("T", " ").slice(0, 19), s.problem ? s.problem : `${fmt(s.duration_s, 1)} s`, s.points ?? ""];
    for (const c of cells) { const td = document.createElement("td"); td.textContent = c; tr.appendChild(td); }
    const td = document.createElement("td");
    if (!s.problem) {
      const open = document.createElement("button"); open.textContent = "Replay";
      open.onclick = async () => { try { const o = await api("/api/sessions/open", { name: s.name }); window.open(`/?source=${o.source}`, "_blank"); } catch (e) { say(e.message, true); } };
      td.appendChild(open);
      for (const fmtName of ["csv", "parquet"]) {
        const b = document.createElement("button"); b.textContent = fmtName.toUpperCase();
        b.onclick = async () => { say(`exporting ${s.name} …`); try { const o = await api("/api/sessions/export", { name: s.name, format: fmtName }); say(`written: ${o.path}`); } catch (e) { say(e.message, true); } };
        td.appendChild(b);
      }
      if (role !== "control") td.replaceChildren(open);
      const pdf = document.createElement("button"); pdf.textContent = "Handout PDF"; pdf.className = "handout";
      pdf.title = "download the session's handout: cover, lift curve or venturi page, Cp of every point, table";
      pdf.onclick = () => downloadHandout(s.name, pdf);
      td.appendChild(pdf);
    }
    tr.appendChild(td); tb.appendChild(tr);
  }
}

function keys() {
  const ul = $("keys"); ul.replaceChildren();
  for (const [k, what] of Object.entries(rig.shortcuts)) {
    if (role !== "control") continue;
    const li = document.createElement("li"); const kb = document.createElement("kbd"); kb.textContent = k === "Escape" ? "Esc" : k;
    li.append(kb, ` ${what}`); ul.appendChild(li);
  }
  if (role !== "control") ul.innerHTML = "<li>view-only link: this page cannot change anything on the rig</li>";
  document.addEventListener("keydown", (e) => {
    if (role !== "control") return;
    if (e.key === "Escape" && rig.mode === "live") { e.preventDefault(); stopAll(); return; }
    if (e.target.closest("input, textarea, select") || e.ctrlKey || e.metaKey || e.altKey) return;
    const act = { z: () => $("b-zero").click(), c: () => $("b-capture").click(), r: () => $("b-record").click(),
                  n: () => $("note").focus(), p: () => $("pb-play").click() }[e.key];
    if (act) { e.preventDefault(); act(); }
  });
}

// ---- start --------------------------------------------------------------------------------------------------
async function start() {
  try { rig = await api(`/api/${source}/describe`); }
  catch (e) {                      // no such display (a sessions-only server, or a replay closed since): the list
    say(e.message, true);
    try { await api("/api/sessions"); $("sessions-card").hidden = false; $("rig-name").textContent = "sessions";
          $("sessions-refresh").onclick = loadSessions; loadSessions(); } catch (e2) { /* the message says why */ }
    return;
  }
  role = rig.role; rig.mode = rig.session ? "replay" : "live";
  $("rig-name").textContent = rig.name; $("mode").textContent = rig.mode === "live" ? (rig.real_board ? "live" : "live, simulated rig") : "replay";
  document.title = `taprig — ${rig.name}`;
  const units = document.getElementById("unit");
  for (const u of [...Object.keys(rig.units), "Cp"]) { const o = document.createElement("option"); o.value = o.textContent = u; units.appendChild(o); }
  if (![...Object.keys(rig.units), "Cp"].includes(unit)) unit = "Pa";
  units.value = unit;
  units.onchange = () => { unit = units.value; localStorage.setItem("taprig.unit", unit); charts.tap.axes[1].label = unitLabel(); charts.tap.redraw(false, true); if (lastFrame) drawTaps(shownReading(lastFrame)); };
  $("lift-card").hidden = rig.kind !== "airfoil";
  const integral = ["airfoil", "cylinder", "bump"].includes(rig.kind);
  document.querySelectorAll(".sect").forEach((e) => { e.hidden = !integral; e.nextElementSibling.hidden = !integral; });
  makeCpChart(); makeTapChart(); makeTrendChart(); makeLiftChart();
  renderAssumptions();
  if (role === "control" && rig.mode === "live") { $("controls").hidden = false; $("stop").hidden = false; buildControls(); }
  if (rig.mode === "replay") { $("playback").hidden = false; buildPlayback(); $("playback").querySelectorAll("button, select, input").forEach((e) => (e.disabled = role !== "control")); }
  if (rig.sessions) { $("sessions-card").hidden = false; $("sessions-refresh").onclick = loadSessions; loadSessions(); }
  keys();
  try { const t = await api(`/api/${source}/trend`); trend = t.trend.map((r) => [r[0] / 1e9, r[1], r[2]]); } catch (e) { }
  const es = new EventSource(`/api/${source}/stream?key=${encodeURIComponent(key)}`);
  es.onmessage = (ev) => { try { onFrame(JSON.parse(ev.data)); } catch (e) { say(`display error: ${e.message}`, true); } };
  es.onerror = () => { say("connection to taprig lost — retrying (has the run ended?)", true); chip("st-link", "page offline", "bad"); };
  es.addEventListener("closed", () => { es.close(); say("the run has ended: this page shows its last state", true); });
  window.addEventListener("resize", () => { for (const [id, ch] of Object.entries(charts)) ch.setSize(sizeOf($(`${id}-chart`))); });
}
start();
