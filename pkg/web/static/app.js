// sluice live page: fetches the series of a campaign, draws it on canvases
// and redraws when the server announces a completed step (server-sent
// events). Hand-written; no external libraries.
"use strict";

// Line colours, chosen to stay distinct for the common red–green colour
// vision deficiencies: they differ in lightness as well as hue (dark blue,
// amber, dark magenta, light sky) and every series also has its own marker.
// Axis units, written as the report's figures write them (pkg/plots Unit…;
// a test in pkg/web holds the two together).
const U = { none: "–", pressure: "kPa", area: "mm²/mm³ of bulk volume", angleDensity: "1/°", meanCurvDensity: "mm/mm³", eulerDensity: "1/mm³", shift: "µm" };

const C = { a: "#1d3f8f", b: "#d98a00", c: "#8c2d73", d: "#4aa3d8", grid: "#e4e4e4", axis: "#555" };

const state = { campaign: null, series: [], steps: [], events: [], rejected: [], accuracy: null, lastStep: null };

// esc makes text from the server safe inside innerHTML (a rejection reason
// quotes file paths, which may hold any character).
function esc(t) { return String(t).replace(/[&<>"']/g, c => ({ "&": "&amp;", "<": "&lt;", ">": "&gt;", '"': "&quot;", "'": "&#39;" })[c]); }

function qs(id) { return document.getElementById(id); }
function num(v) { return (v === null || v === undefined || Number.isNaN(v)) ? null : v; }
function fmt(v, d) { return v === null || v === undefined ? "—" : Number(v).toFixed(d); }
// pm writes a mean with its standard error (block spread; the SE left out when unknown).
function pm(v, se, scale, d) { return v == null ? "—" : fmt(v * scale, d) + (se == null ? "" : " ± " + fmt(se * scale, d)); }

async function getJSON(url) {
  const r = await fetch(url, { cache: "no-store" });
  if (!r.ok) throw new Error(url + ": " + r.status);
  return r.json();
}

// ---- plotting -------------------------------------------------------------

function niceRange(lo, hi) {
  if (lo === hi) { const d = Math.abs(lo) * 0.1 || 1; lo -= d; hi += d; }
  const span = hi - lo, step = Math.pow(10, Math.floor(Math.log10(span / 4)));
  const m = [1, 2, 5, 10].find(k => span / (k * step) <= 6) * step;
  return { lo: Math.floor(lo / m) * m, hi: Math.ceil(hi / m) * m, step: m };
}

// plot draws series = [{name, color, marker, pts: [[x,y],...], line: bool}]
// with labelled axes, and records the number of drawn points on the canvas
// (data-points) so tests and people can tell an empty plot from a full one.
function plot(canvas, series, xlabel, ylabel, opts = {}) {
  const ctx = canvas.getContext("2d"), W = canvas.width, H = canvas.height;
  const L = 70, R = 12, T = 26, B = 40;
  ctx.clearRect(0, 0, W, H);
  const all = series.flatMap(s => s.pts.filter(p => num(p[0]) !== null && num(p[1]) !== null));
  canvas.dataset.points = String(all.length);
  ctx.font = "12px system-ui, sans-serif";
  if (all.length === 0) {
    ctx.fillStyle = C.axis; ctx.fillText("waiting for data…", W / 2 - 50, H / 2); return;
  }
  const xs = niceRange(opts.xmin ?? Math.min(...all.map(p => p[0])), opts.xmax ?? Math.max(...all.map(p => p[0])));
  const ys = niceRange(opts.ymin ?? Math.min(...all.map(p => p[1])), opts.ymax ?? Math.max(...all.map(p => p[1])));
  const X = x => L + (x - xs.lo) / (xs.hi - xs.lo) * (W - L - R);
  const Y = y => H - B - (y - ys.lo) / (ys.hi - ys.lo) * (H - T - B);
  ctx.strokeStyle = C.grid; ctx.fillStyle = C.axis; ctx.lineWidth = 1;
  for (let x = xs.lo; x <= xs.hi + xs.step / 2; x += xs.step) {
    ctx.beginPath(); ctx.moveTo(X(x), T); ctx.lineTo(X(x), H - B); ctx.stroke();
    ctx.fillText(+x.toPrecision(6) + "", X(x) - 10, H - B + 14);
  }
  ctx.textAlign = "right";
  for (let y = ys.lo; y <= ys.hi + ys.step / 2; y += ys.step) {
    ctx.beginPath(); ctx.moveTo(L, Y(y)); ctx.lineTo(W - R, Y(y)); ctx.stroke();
    ctx.fillText(+y.toPrecision(6) + "", L - 5, Y(y) + 4);
  }
  ctx.textAlign = "left";
  ctx.strokeStyle = C.axis; ctx.strokeRect(L, T, W - L - R, H - T - B);
  ctx.fillText(xlabel, L + (W - L - R) / 2 - xlabel.length * 3, H - 6);
  ctx.save(); ctx.translate(13, T + (H - T - B) / 2 + ylabel.length * 3); ctx.rotate(-Math.PI / 2);
  ctx.fillText(ylabel, 0, 0); ctx.restore();
  let lx = L + 8;
  for (const s of series) {
    const pts = s.pts.filter(p => num(p[0]) !== null && num(p[1]) !== null);
    ctx.strokeStyle = s.color; ctx.fillStyle = s.color; ctx.lineWidth = 2;
    if (s.bars) {
      const bw = Math.max(1, (X(xs.lo + 1) - X(xs.lo)) * 0.9);
      ctx.globalAlpha = s.alpha ?? 1;
      for (const p of pts) ctx.fillRect(X(p[0]), Y(p[1]), bw, Y(ys.lo) - Y(p[1]));
      ctx.globalAlpha = 1;
    } else {
      if (s.line !== false && pts.length > 1) {
        ctx.beginPath(); pts.forEach((p, i) => i ? ctx.lineTo(X(p[0]), Y(p[1])) : ctx.moveTo(X(p[0]), Y(p[1]))); ctx.stroke();
      }
      for (const p of pts) marker(ctx, s.marker, X(p[0]), Y(p[1]));
    }
    ctx.fillStyle = s.color; ctx.fillRect(lx, 8, 14, 4); ctx.fillStyle = C.axis; ctx.fillText(s.name, lx + 18, 14);
    lx += 30 + ctx.measureText(s.name).width;
  }
}

function marker(ctx, kind, x, y) {
  ctx.beginPath();
  if (kind === "square") ctx.rect(x - 3, y - 3, 6, 6);
  else if (kind === "triangle") { ctx.moveTo(x, y - 4); ctx.lineTo(x + 4, y + 3); ctx.lineTo(x - 4, y + 3); ctx.closePath(); }
  else if (kind === "diamond") { ctx.moveTo(x, y - 4); ctx.lineTo(x + 4, y); ctx.lineTo(x, y + 4); ctx.lineTo(x - 4, y); ctx.closePath(); }
  else ctx.arc(x, y, 3, 0, 2 * Math.PI);
  ctx.fill();
}

// ---- panels ---------------------------------------------------------------

// timeUnit picks the time axis unit from the campaign's length as the PNG/SVG
// figures do (pkg/plots TimeUnit): s below 10 min, min below 3 h, else h.
function timeUnit() {
  const ts = state.series.map(r => r.time_s).filter(t => num(t) !== null);
  const span = ts.length ? Math.max(...ts) - Math.min(...ts) : 0;
  if (span < 600) return { name: "s", s: 1 };
  if (span < 3 * 3600) return { name: "min", s: 60 };
  return { name: "h", s: 3600 };
}
let TU = { name: "s", s: 1 };
function col(key, scale = 1) { return state.series.map(r => [r.time_s / TU.s, num(r[key]) === null ? null : r[key] * scale]); }
function pair(kx, ky, sy = 1) { return state.series.map(r => [num(r[kx]), num(r[ky]) === null ? null : r[ky] * sy]); }

// profilePts returns the saturation profile of the latest step that has one
// as [distance from the inlet (mm), S_n] points (bin centres; null S_n where a
// bin holds no pore space), with that step's name and the flow axis.
function profilePts(series) {
  for (let i = series.length - 1; i >= 0; i--) {
    const p = series[i].saturation_profile;
    if (p && Array.isArray(p.position_m) && Array.isArray(p.saturation_nonwetting)) {
      return { step: series[i].step, axis: p.axis || "z",
        pts: p.position_m.map((x, k) => [x * 1e3, num(p.saturation_nonwetting[k])]) };
    }
  }
  return { step: "", axis: "z", pts: [] };
}

// fillingPts returns the pore-filling event rates (1/s) of every step as
// [time (s), rate] points for drainage and imbibition (null where a step has
// none), and the event-volume distribution of the latest step with events as
// [log10(bin low edge / µm³), events] points, with that step's name.
function fillingPts(series) {
  const rate = (r, k) => { const p = r.pore_filling; return p && p[k] ? num(p[k].rate_per_s) : null; };
  const out = { drainage: series.map(r => [r.time_s, rate(r, "drainage")]),
    imbibition: series.map(r => [r.time_s, rate(r, "imbibition")]), step: "", histD: [], histI: [] };
  for (let i = series.length - 1; i >= 0; i--) {
    const p = series[i].pore_filling;
    if (!p || !p.drainage || !p.imbibition) continue;
    const d = p.drainage, m = p.imbibition;
    const low = (m.volume_bin_low_m3 || []).length > (d.volume_bin_low_m3 || []).length ? m.volume_bin_low_m3 : d.volume_bin_low_m3;
    if (!low || low.length === 0) continue;
    const hist = h => low.map((v, k) => [Math.log10(v * 1e18), (h && k < h.length) ? h[k] : 0]);
    out.step = series[i].step; out.histD = hist(d.volume_histogram); out.histI = hist(m.volume_histogram);
    break;
  }
  return out;
}

// anglePts returns the contact angles of every step against time (in units of
// tuS seconds), in degrees through the wetting phase: the geometric mean and
// median measured at the contact line, the thermodynamic angle from the
// energy balance with the previous step and the topological angle of the
// trapped ganglia (Gauss–Bonnet; null where not computed).
function anglePts(series, tuS) {
  const at = key => series.map(r => [r.time_s / tuS, num(r[key])]);
  return { mean: at("contact_angle_mean_deg"), median: at("contact_angle_median_deg"),
    thermo: at("contact_angle_thermodynamic_deg"), topo: at("contact_angle_topological_deg") };
}

// trackingPts returns the trapped saturation and the fraction of trapped
// ganglia that moved since the previous step as [time (s), value] points
// (null where a step has no tracking or its object carries a note).
function trackingPts(series) {
  const v = (r, k) => { const g = r.ganglion_tracking; return g && !g.note ? num(g[k]) : null; };
  return { trapped: series.map(r => [r.time_s, v(r, "trapped_saturation")]),
    moved: series.map(r => [r.time_s, v(r, "trapped_moved_fraction")]) };
}

// rigSummary returns the experiment-log items of the summary for a series
// row: pore volumes injected, capillary number and the transducer's
// differential pressure (kPa), "—" where the row has none (no rig log, or
// the step outside its time span).
function rigSummary(r) {
  const ca = num(r.capillary_number);
  return [["PV injected", fmt(num(r.pore_volumes_injected), 3)],
    ["Ca", ca === null ? "—" : ca.toExponential(2)],
    ["Δp transducer", num(r.rig_differential_pressure_pa) === null ? "—" : fmt(r.rig_differential_pressure_pa * 1e-3, 2) + " kPa"]];
}

// accuracyRows pairs the latest step's S_w, a_wn, Pc and θ with the bias ±
// spread of the stored accuracy estimate a (sluice accuracy): S_w absolute,
// a_wn and Pc relative in per cent, θ in degrees.
function accuracyRows(a, r) {
  const bs = (s, scale, d, unit) => (!s || num(s.bias) === null) ? "—" :
    (s.bias >= 0 ? "+" : "") + fmt(s.bias * scale, d) + (num(s.spread) === null ? "" : " ± " + fmt(s.spread * scale, d)) + unit;
  const v = (k, scale, d, unit) => (!r || num(r[k]) === null) ? "—" : fmt(r[k] * scale, d) + unit;
  const L = a.labels_path || {}, G = a.grey_path || {};
  return [["S_w", v("saturation_wetting", 1, 3, ""), bs(L.saturation_wetting_abs, 1, 4, ""), bs(G.saturation_wetting_abs, 1, 4, "")],
    ["a_wn", v("specific_area_wn_per_m", 1e-3, 2, " 1/mm"), bs(L.specific_area_wn_rel, 100, 1, " %"), bs(G.specific_area_wn_rel, 100, 1, " %")],
    ["Pc", v("capillary_pressure_pa", 1e-3, 3, " kPa"), bs(L.capillary_pressure_rel, 100, 1, " %"), bs(G.capillary_pressure_rel, 100, 1, " %")],
    ["θ mean", v("contact_angle_mean_deg", 1, 1, "°"), bs(L.contact_angle_deg, 1, 1, "°"), bs(G.contact_angle_deg, 1, 1, "°")]];
}

function accuracyPanel(last) {
  const a = state.accuracy;
  qs("accuracy-fig").hidden = !a;
  if (!a) return;
  qs("accuracy").querySelector("tbody").innerHTML = accuracyRows(a, last).map(c => `<tr>${c.map(x => `<td>${esc(x)}</td>`).join("")}</tr>`).join("");
  const sc = a.scan || {}, sh = a.region_shape_zyx || [];
  const n = (a.states || []).filter(s => !s.skipped).length;
  qs("accuracy-note").textContent = `${n} state${n === 1 ? "" : "s"} at θ ${fmt(a.theta_prescribed_deg, 0)}° in a ${sh.join("×")} region; ` +
    `noise σ ${fmt(sc.noise_sigma, 0)} (CNR ${fmt(a.cnr, 1)}), blur ${fmt(sc.blur_sigma_voxels, 2)} voxels from step ${a.step}; made ${a.created_at}.`;
}

function draw() {
  TU = timeUnit();
  const tl = `time t (${TU.name})`;
  plot(qs("plot-sat"), [
    { name: "S_w", color: C.a, marker: "circle", pts: col("saturation_wetting") },
    { name: "S_n", color: C.b, marker: "square", pts: col("saturation_nonwetting") }], tl, `saturation (${U.none})`, { ymin: 0, ymax: 1 });
  plot(qs("plot-pc"), [
    { name: "Pc mean", color: C.c, marker: "circle", pts: col("capillary_pressure_pa", 1e-3) },
    { name: "Pc median", color: C.d, marker: "triangle", pts: col("capillary_pressure_median_pa", 1e-3) }], tl, `Pc (${U.pressure})`);
  plot(qs("plot-awn"), [{ name: "a_wn", color: C.a, marker: "diamond", pts: col("specific_area_wn_per_m", 1e-3) }], tl, `a_wn (${U.area})`);
  plot(qs("plot-pcs"), [{ name: "Pc(S_w)", color: C.c, marker: "circle", pts: pair("saturation_wetting", "capillary_pressure_pa", 1e-3) }], `S_w (${U.none})`, `Pc (${U.pressure})`, { xmin: 0, xmax: 1 });
  plot(qs("plot-as"), [{ name: "a_wn(S_w)", color: C.a, marker: "square", pts: pair("saturation_wetting", "specific_area_wn_per_m", 1e-3) }], `S_w (${U.none})`, `a_wn (${U.area})`, { xmin: 0, xmax: 1 });
  const last = state.series[state.series.length - 1];
  const run = new Array(180).fill(0);
  let nrun = 0;
  for (const r of state.series) (r.contact_angle_histogram || []).forEach((c, i) => { run[i] += c; nrun += c; });
  const lh = (last && last.contact_angle_histogram) || [];
  const nl = lh.reduce((a, b) => a + b, 0);
  plot(qs("plot-angle"), [
    { name: "all steps", color: C.d, bars: true, alpha: 0.6, pts: run.map((c, i) => [i, nrun ? c / nrun : 0]) },
    { name: "latest step", color: C.c, marker: "circle", line: true, pts: nl ? lh.map((c, i) => [i + 0.5, c / nl]) : [] }],
    "contact angle θ through wetting phase (°)", `fraction of samples per degree (${U.angleDensity})`, { xmin: 0, xmax: 180, ymin: 0 });
  const ang = anglePts(state.series, TU.s);
  plot(qs("plot-angles"), [
    { name: "geometric mean", color: C.c, marker: "circle", pts: ang.mean },
    { name: "geometric median", color: C.d, marker: "triangle", pts: ang.median },
    { name: "thermodynamic", color: C.a, marker: "square", pts: ang.thermo },
    { name: "topological", color: C.b, marker: "diamond", pts: ang.topo }], tl, "contact angle θ through wetting phase (°)", { ymin: 0, ymax: 180 });
  plot(qs("plot-ganglia"), [{ name: "ganglia", color: C.b, marker: "square", pts: col("ganglia_count") }], tl, `number of ganglia (${U.none})`, { ymin: 0 });
  plot(qs("plot-largest"), [{ name: "largest cluster / all nonwetting", color: C.a, marker: "circle", pts: col("ganglion_largest_fraction") }], tl, `largest ganglion fraction (${U.none})`, { ymin: 0, ymax: 1 });
  plot(qs("plot-front"), [{ name: "front", color: C.c, marker: "square", pts: col("front_position_m", 1e3) }], tl, "front from inlet (mm)", { ymin: 0 });
  const prof = profilePts(state.series);
  qs("profile-step").textContent = prof.step ? `(step ${prof.step})` : "";
  plot(qs("plot-profile"), [{ name: "S_n", color: C.b, marker: "circle", pts: prof.pts }], `distance from inlet along ${prof.axis} (mm)`, `S_n (${U.none})`, { ymin: 0, ymax: 1, xmin: 0 });
  const fill = fillingPts(state.series);
  const perTU = pts => pts.map(([t, v]) => [t / TU.s, v]);
  plot(qs("plot-filling"), [{ name: "drainage (w→n)", color: C.b, marker: "circle", pts: perTU(fill.drainage) },
    { name: "imbibition (n→w)", color: C.a, marker: "square", pts: perTU(fill.imbibition) }], tl, "pore-filling events per second (1/s)", { ymin: 0 });
  qs("filling-step").textContent = fill.step ? `(volumes: step ${fill.step})` : "";
  plot(qs("plot-filling-hist"), [{ name: "drainage", color: C.b, marker: "circle", pts: fill.histD },
    { name: "imbibition", color: C.a, marker: "square", pts: fill.histI }], "event volume log₁₀(V / µm³), bins of ×2", `events per bin (${U.none})`, { ymin: 0 });
  const trk = trackingPts(state.series);
  plot(qs("plot-tracking"), [{ name: "trapped saturation", color: C.b, marker: "circle", pts: perTU(trk.trapped) },
    { name: "trapped ganglia that moved", color: C.a, marker: "square", pts: perTU(trk.moved) }], tl, `fraction (${U.none})`, { ymin: 0, ymax: 1 });
  // Experiment log (rig CSV): transducer Δp next to the image Pc of the connected
  // ganglia (Armstrong, Porter & Wildenschild 2012), and S_w against pore volumes injected.
  plot(qs("plot-rig-p"), [
    { name: "Δp transducer", color: C.a, marker: "circle", pts: col("rig_differential_pressure_pa", 1e-3) },
    { name: "image Pc connected", color: C.b, marker: "square", pts: col("capillary_pressure_connected_pa", 1e-3) }], tl, `pressure (${U.pressure})`);
  // Without a rig log with pumped volumes there is no abscissa: the panel is hidden, not left blank.
  qs("plot-rig-pv").hidden = !state.series.some(r => num(r.pore_volumes_injected) !== null);
  plot(qs("plot-rig-pv"), [{ name: "S_w", color: C.d, marker: "triangle", pts: pair("pore_volumes_injected", "saturation_wetting") }],
    `pore volumes injected (${U.none})`, `S_w (${U.none})`, { xmin: 0, ymin: 0, ymax: 1 });
  // Geometric state (McClure et al. 2018): J_wn and χ_n per bulk volume against S_w.
  plot(qs("plot-jwn"), [{ name: "J_wn(S_w)", color: C.b, marker: "square", pts: pair("saturation_wetting", "specific_mean_curvature_integral_wn_per_m2", 1e-6) }], `S_w (${U.none})`, `J_wn/V (${U.meanCurvDensity})`, { xmin: 0, xmax: 1 });
  plot(qs("plot-chi"), [{ name: "χ_n(S_w)", color: C.d, marker: "triangle", pts: pair("saturation_wetting", "specific_euler_nonwetting_per_m3", 1e-9) }], `S_w (${U.none})`, `χ_n/V (${U.eulerDensity})`, { xmin: 0, xmax: 1 });
  // Drift registration (reference-scan mode): shown once a step has a shift.
  const registered = state.series.some(r => num(r.registration_z_m) !== null);
  qs("registration-fig").hidden = !registered;
  plot(qs("plot-registration"), [
    { name: "z", color: C.a, marker: "circle", pts: col("registration_z_m", 1e6) },
    { name: "y", color: C.b, marker: "square", pts: col("registration_y_m", 1e6) },
    { name: "x", color: C.c, marker: "triangle", pts: col("registration_x_m", 1e6) }], tl, `shift (${U.shift})`);
  const lat = state.steps.filter(s => s.latency_s > 0).map(s => [s.time_s / TU.s, s.latency_s]);
  plot(qs("plot-latency"), [{ name: "step latency", color: C.b, marker: "diamond", pts: lat }], tl, "ingest → series (s)", { ymin: 0 });
  summary(last);
  accuracyPanel(last);
  stepsTable();
  rejectedTable();
  banners();
}

function summary(r) {
  const s = qs("summary");
  if (!r) { s.innerHTML = "<div>No completed step yet.</div>"; return; }
  const items = [
    ["latest step", r.step], ["time", fmt(r.time_s, 0) + " s"], ["porosity", fmt(r.porosity, 3)],
    ["S_w", fmt(r.saturation_wetting, 3)], ["Pc ± SE", r.capillary_pressure_pa === null ? "— (no σ)" : pm(r.capillary_pressure_pa, r.capillary_pressure_se_pa, 1e-3, 2) + " kPa"],
    ["Pc connected ± SE", r.capillary_pressure_connected_pa == null ? "—" : pm(r.capillary_pressure_connected_pa, r.capillary_pressure_connected_se_pa, 1e-3, 2) + " kPa"],
    ["θ mean ± SE (sd)", pm(r.contact_angle_mean_deg, r.contact_angle_mean_se_deg, 1, 1) + "° (" + fmt(r.contact_angle_std_deg, 1) + "°)"],
    ["ganglia", r.ganglia_count], ["percolating", r.nonwetting_percolates ? "yes" : "no"], ["voxel", fmt(r.voxel_size_m * 1e6, 2) + " µm"],
    ...rigSummary(r)];
  if (num(r.registration_z_m) !== null) items.push(["shift z, y, x", [r.registration_z_m, r.registration_y_m, r.registration_x_m].map(v => fmt(v * 1e6, 1)).join(", ") + " µm" + (r.registration_beyond ? " (beyond the limit)" : "")]);
  s.innerHTML = items.map(([k, v]) => `<div>${k}<b>${v}</b></div>`).join("");
}

function stepsTable() {
  const tb = qs("steps").querySelector("tbody");
  tb.innerHTML = state.steps.slice().reverse().map(s =>
    `<tr><td>${s.step}</td><td>${fmt(s.time_s, 0)}</td><td class="${s.status}">${s.status}</td><td>${s.tiles_done}/${s.tiles_total}</td><td>${s.latency_s ? fmt(s.latency_s, 1) : ""}</td><td>${s.reason || ""}</td></tr>`).join("");
}

function rejectedTable() {
  const r = state.rejected;
  qs("rejected-fig").hidden = !r.length;
  qs("rejected").querySelector("tbody").innerHTML = r.map(x =>
    `<tr><td>${esc(x.step)}</td><td>${esc(x.file)}</td><td>${x.attempts}</td><td>${esc(x.at)}</td><td class="failed">${esc(x.reason)}</td></tr>`).join("");
}

function banners() {
  const b = [];
  const failed = state.steps.filter(s => s.status === "failed");
  const inflight = state.steps.filter(s => s.status === "processing" || s.status === "ingested");
  const kindText = {breakthrough: "Breakthrough", steady_state: "Steady state", grey_drift: "Grey-level drift beyond the bound",
    registration_shift: "Sample moved beyond the registration limit"};
  for (const e of state.events) b.push(["banner-event", `${kindText[e.kind] || e.kind} at step ${e.step} (t = ${fmt(e.time_s, 0)} s): ${e.detail || ""}`]);
  for (const f of failed) b.push(["banner-fail", `Step ${f.step} failed: ${f.reason}`]);
  if (state.rejected.length) b.push(["banner-fail", `${state.rejected.length} scan${state.rejected.length > 1 ? "s" : ""} rejected at ingest (not measured): ` +
    state.rejected.map(x => esc(x.step)).join(", ") + " — reasons under “Rejected scans”."]);
  if (inflight.length) b.push(["banner-info", `Processing ${inflight.map(s => s.step + " (" + s.tiles_done + "/" + s.tiles_total + " tiles)").join(", ")}`]);
  else if (state.series.length) b.push(["banner-info", `Up to date: ${state.series.length} steps measured` + (state.rejected.length ? `, ${state.rejected.length} scans rejected.` : ".")]);
  else if (!state.rejected.length) b.push(["banner-info", "Waiting for the first scan."]);
  qs("banners").innerHTML = b.map(([c, t]) => `<div class="${c}">${t}</div>`).join("");
}

// taskName shows a task id (campaign/step/tile/param_hash) as "step tile N".
function taskName(id) { const p = String(id).split("/"); return p.length >= 3 ? `${p[1]} tile ${p[2]}` : String(id); }

async function health() {
  try {
    const h = await getJSON("/api/health");
    const ws = h.worker_list || [];
    qs("health").innerHTML = `<div>workers<b id="workers-count">${h.workers}</b></div><div>queue (live / batch)<b>${h.queue_live} / ${h.queue_batch}</b></div><div>tiles/s<b>${fmt(h.tiles_per_s, 2)}</b></div><div>latest step latency<b>${fmt(h.step_latency_s, 1)} s</b></div><div>version<b>${esc(h.version)}</b></div>`;
    qs("workers").innerHTML = ws.length ? ws.map(w =>
      `<li><b>${esc(w.id)}</b> on ${esc(w.host)}: ${w.tiles_done} tiles done` + (w.tiles_failed ? `, ${w.tiles_failed} failed` : "") +
      `, ${w.current.length ? "working on " + w.current.map(x => esc(taskName(x))).join(", ") : "idle"}; last seen ${fmt(w.last_seen_s_ago, 0)} s ago</li>`).join("")
      : `<li>No worker heard from: tiles wait in the queue until one starts.</li>`;
  } catch (e) { /* shown by the connection pill */ }
}

async function refresh() {
  if (!state.campaign) { health(); return; }
  const c = encodeURIComponent(state.campaign);
  const [series, steps, events, rejected, accuracy] = await Promise.all([
    getJSON(`/api/campaigns/${c}/series.json`).catch(() => []),
    getJSON(`/api/campaigns/${c}/steps`).catch(() => []),
    getJSON(`/api/campaigns/${c}/events`).catch(() => []),
    getJSON(`/api/campaigns/${c}/rejected`).catch(() => []),
    getJSON(`/api/campaigns/${c}/accuracy`).catch(() => null)]);
  state.series = series || []; state.steps = steps || []; state.events = events || []; state.rejected = rejected || [];
  state.accuracy = accuracy || null;
  qs("csv").href = `/api/campaigns/${c}/series.csv`; qs("json").href = `/api/campaigns/${c}/series.json`;
  const last = state.series[state.series.length - 1];
  if (last && last.step !== state.lastStep) {
    state.lastStep = last.step;
    qs("preview").src = `/api/campaigns/${c}/steps/${encodeURIComponent(last.step)}/preview.png?t=${Date.now()}`;
    qs("preview-step").textContent = `(step ${last.step})`;
  }
  draw();
  health();
}

async function campaigns() {
  const list = await getJSON("/api/campaigns").catch(() => []);
  const sel = qs("campaign");
  const want = new URLSearchParams(location.search).get("campaign");
  const names = list.map(c => c.name);
  if (sel.options.length !== names.length) sel.innerHTML = names.map(n => `<option>${n}</option>`).join("");
  if (!state.campaign && names.length) state.campaign = names.includes(want) ? want : names[0];
  sel.value = state.campaign || "";
  qs("campaign-name").textContent = state.campaign || "(no campaign yet)";
}

function connect() {
  const es = new EventSource("/api/stream");
  es.addEventListener("hello", () => { qs("conn").textContent = "live"; qs("conn").className = "pill ok"; });
  es.addEventListener("step", async () => { await campaigns(); refresh(); });
  es.addEventListener("progress", () => refresh());
  es.addEventListener("event", () => refresh());
  es.onerror = () => { qs("conn").textContent = "reconnecting…"; qs("conn").className = "pill bad"; };
}

qs("campaign").addEventListener("change", e => { state.campaign = e.target.value; state.lastStep = null; refresh(); });
(async function main() {
  await campaigns(); await refresh(); connect();
  // A slow poll as well, so the page recovers if an event was missed.
  setInterval(async () => { await campaigns(); refresh(); }, 10000);
})();
