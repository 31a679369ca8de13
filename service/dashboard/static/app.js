// gaitscape dashboard: one small script for every page (no build step, no network but ours).
// The token is asked once per browser session, kept in sessionStorage and sent as a Bearer
// header; pages are filled with DOM nodes (textContent only, never innerHTML with data).
"use strict";

const TOKEN_KEY = "gaitscape-token";
const STUDY_KEY = "gaitscape-study";
// The diverging palette, its sign and every number on the correspondence page come from the
// server (service/report/convention.py via /v1/dashboard/correspondence), as in the report.

function token() { return sessionStorage.getItem(TOKEN_KEY); }
// The study chosen in the header ("" = all studies); lists, correspondence and exports send it.
function study() { return sessionStorage.getItem(STUDY_KEY) || ""; }
function studyParam() { return study() ? "study=" + encodeURIComponent(study()) : ""; }
function scoped(path) {
  const p = studyParam();
  return p ? path + (path.includes("?") ? "&" : "?") + p : path;
}

class AuthError extends Error {}

async function api(path, opts = {}) {
  const headers = Object.assign({ Authorization: "Bearer " + token() }, opts.headers || {});
  const resp = await fetch(path, Object.assign({}, opts, { headers }));
  if (resp.status === 401) {
    sessionStorage.removeItem(TOKEN_KEY);
    throw new AuthError("Token refused");
  }
  if (!resp.ok) {
    let detail = resp.statusText;
    try { detail = (await resp.json()).detail; } catch (e) { /* not JSON */ }
    throw new Error("HTTP " + resp.status + ": " + (typeof detail === "string" ? detail : JSON.stringify(detail)));
  }
  return opts.raw ? resp : resp.json();
}

function el(tag, attrs = {}, ...children) {
  const node = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs)) {
    if (v === null || v === undefined || v === false) continue;
    if (k === "text") node.textContent = v;
    else if (k.startsWith("on")) node.addEventListener(k.slice(2), v);
    else node.setAttribute(k, v === true ? "" : v);
  }
  for (const c of children.flat(Infinity)) {
    if (c !== null && c !== undefined) node.append(c instanceof Node ? c : document.createTextNode(String(c)));
  }
  return node;
}

function fmt(v, digits = 3) {
  if (v === null || v === undefined) return "n/a";
  if (typeof v === "number") {
    if (!isFinite(v)) return "n/a";
    if (Number.isInteger(v)) return String(v);
    return Number(v.toPrecision(digits)).toString();
  }
  return String(v);
}

function table(columns, rows, caption) {
  const head = el("tr", {}, columns.map(c => el("th", { scope: "col", text: c.label })));
  const body = rows.map(r => el("tr", {}, columns.map(c => {
    const v = c.get(r);
    return el("td", { class: c.num ? "num" : null }, v instanceof Node ? v : fmt(v));
  })));
  return el("table", {}, caption ? el("caption", { text: caption }) : null,
    el("thead", {}, head), el("tbody", {}, body));
}

function content() { return document.getElementById("content"); }
function show(...nodes) { const c = content(); c.replaceChildren(...nodes); }
function showError(err) { content().append(el("p", { class: "error", role: "alert", text: String(err.message || err) })); }

async function all(path) {
  const sep = path.includes("?") ? "&" : "?";
  return (await api(path + sep + "limit=1000")).data;
}

// -- login ----------------------------------------------------------------------------------
function loginForm(next) {
  const input = el("input", { type: "password", id: "token", name: "token", autocomplete: "off", required: true, "aria-describedby": "token-help" });
  const msg = el("p", { id: "login-msg", role: "alert" });
  const form = el("form", { class: "login", id: "login-form" },
    el("label", { for: "token" }, "API token", input),
    el("p", { id: "token-help", text: "Kept in this browser tab only (sessionStorage); sent as a Bearer header." }),
    el("button", { type: "submit", text: "Sign in" }), msg);
  form.addEventListener("submit", async ev => {
    ev.preventDefault();
    sessionStorage.setItem(TOKEN_KEY, input.value.trim());
    try {
      await api("/v1/arenas?limit=1");
      location.assign(next || "/ui/arenas");
    } catch (err) {
      sessionStorage.removeItem(TOKEN_KEY);
      msg.className = "error";
      msg.textContent = err instanceof AuthError ? "Token refused: check it and try again." : String(err.message);
    }
  });
  show(form);
  input.focus();
}

// -- study selector -------------------------------------------------------------------------
async function studyPicker() {
  const sel = document.getElementById("study");
  if (!sel) return;
  const studies = await all("/v1/studies");
  // A study chosen earlier may be gone (another store, say): fall back to all studies.
  if (study() && !studies.some(s => s.name === study())) sessionStorage.removeItem(STUDY_KEY);
  sel.replaceChildren(el("option", { value: "", text: "all studies" }),
    ...studies.map(s => el("option", { value: s.name, text: s.name, selected: s.name === study() })));
  sel.addEventListener("change", () => {
    if (sel.value) sessionStorage.setItem(STUDY_KEY, sel.value);
    else sessionStorage.removeItem(STUDY_KEY);
    location.reload();
  });
  document.getElementById("study-pick").hidden = false;
}

// -- pages ----------------------------------------------------------------------------------
const link = (href, text) => el("a", { href }, text);

async function arenasPage() {
  const [arenas, scans, trials] = await Promise.all([all(scoped("/v1/arenas")), all(scoped("/v1/scans")), all(scoped("/v1/trials"))]);
  const nScans = id => scans.filter(s => s.arena_id === id);
  const cols = [
    { label: "id", get: a => a.id, num: true },
    { label: "name", get: a => a.name },
    { label: "kind", get: a => a.kind },
    { label: "animal-scale band (mm)", get: a => a.scale_band_m ? a.scale_band_m.map(v => fmt(v * 1000)).join(" to ") : "whole scan" },
    { label: "scans", get: a => el("span", {}, nScans(a.id).map((s, i) => [i ? ", " : "", link("/ui/scans/" + s.id, "#" + s.id + " " + s.format)])) },
    { label: "trials", get: a => link("/ui/trials?arena_id=" + a.id, String(trials.filter(t => t.arena_id === a.id).length)) },
    { label: "notes", get: a => a.notes },
  ];
  show(table(cols, arenas, arenas.length + " arenas"));
}

async function trialsPage() {
  const params = new URLSearchParams(location.search);
  const [arenas, subjects] = await Promise.all([all(scoped("/v1/arenas")), all(scoped("/v1/subjects"))]);
  const arenaName = Object.fromEntries(arenas.map(a => [a.id, a.name]));
  const subjectName = Object.fromEntries(subjects.map(s => [s.id, s.label]));
  const select = (name, label, options) => el("label", {}, label, el("select", { name, id: "f-" + name },
    el("option", { value: "", text: "any" }),
    options.map(([v, t]) => el("option", { value: v, text: t, selected: params.get(name) === String(v) }))));
  const form = el("form", { class: "filters", id: "trial-filters" },
    select("arena_id", "arena", arenas.map(a => [a.id, a.name])),
    select("subject_id", "subject", subjects.map(s => [s.id, s.label])),
    el("label", {}, "condition", el("input", { name: "condition", id: "f-condition", value: params.get("condition") || "" })),
    el("button", { type: "submit", text: "Filter" }));
  const out = el("div", { id: "trial-table" });
  show(form, out);
  async function load() {
    const q = new URLSearchParams();
    for (const [k, v] of new FormData(form)) if (v) q.set(k, v);
    history.replaceState(null, "", "/ui/trials" + (q.toString() ? "?" + q : ""));
    const rows = await all(scoped("/v1/trials" + (q.toString() ? "?" + q : "")));
    out.replaceChildren(table([
      { label: "id", get: t => link("/ui/trials/" + t.id, "trial " + t.id) },
      { label: "arena", get: t => arenaName[t.arena_id] || t.arena_id },
      { label: "subject", get: t => subjectName[t.subject_id] || t.subject_id },
      { label: "format", get: t => t.format },
      { label: "frames", get: t => t.n_frames, num: true },
      { label: "rate (Hz)", get: t => t.frame_rate_hz, num: true },
      { label: "condition", get: t => t.condition },
      { label: "file", get: t => t.filename },
    ], rows, rows.length + " trials"));
  }
  form.addEventListener("submit", ev => { ev.preventDefault(); load().catch(showError); });
  await load();
}

// A value in SI base units with an SI prefix (um, mm), as the report prints it.
function siValue(v, unit) {
  const plain = !unit || unit === "1" ? "dimensionless" : unit;
  if (typeof v !== "number" || !isFinite(v) || !["m", "s", "m/s"].includes(unit) || v === 0) return [fmt(v), plain];
  const a = Math.abs(v);
  if (unit === "m" && a >= 1000) return [fmt(v / 1000), "km"];  // as the report (convention.si_scale)
  for (const [f, p] of [[1, ""], [1e3, "m"], [1e6, "u"], [1e9, "n"]]) {
    if (a * f >= 1 || f === 1e9) return [fmt(v * f), p + unit];
  }
  return [fmt(v), plain];
}

// One length unit for a whole scene (the axes share a scale): millimetres for a tray or a
// runway, metres for a field site, kilometres for a terrain model, chosen by the extent.
function lengthUnit(...coords) {
  let lo = Infinity, hi = -Infinity;
  for (const c of coords) for (const v of c) if (v !== null && isFinite(v)) { lo = Math.min(lo, v); hi = Math.max(hi, v); }
  const extent = hi - lo;
  if (!(extent < 5)) return extent >= 5000 ? [1e-3, "km"] : [1, "m"];
  return [1000, "mm"];
}

// hash -> "name@version", fetched once (one promise, so parallel callers share it).
let recipeLabels = null;
function recipeLabel(hash) {
  if (recipeLabels === null) {
    recipeLabels = all("/v1/recipes").then(rows => {
      const out = {};
      for (const r of rows) if (!(r.hash in out)) out[r.hash] = r.name + "@" + r.version;
      return out;
    });
  }
  return recipeLabels.then(labels => labels[hash] || (hash || "").slice(0, 10));
}

async function scoreTable(scores) {
  const labels = await Promise.all(scores.map(s => recipeLabel(s.recipe_hash)));
  const rows = scores.map((s, i) => Object.assign({}, s, { label: labels[i], shown: siValue(s.value, s.unit) }));
  return table([
    { label: "measure", get: s => s.measure },
    { label: "value", get: s => s.shown[0], num: true },
    { label: "unit", get: s => s.shown[1] },
    { label: "surrogate z", get: s => s.surrogate_z, num: true },
    { label: "recipe", get: s => s.label },
  ], rows, rows.length + " scores");
}

function kv(obj, keys) {
  return el("dl", { class: "kv" }, keys.map(k => [el("dt", { text: k }), el("dd", { text: fmt(obj[k]) })]));
}

async function trialPage(id) {
  const trial = await api("/v1/trials/" + id);
  const [arena, subject] = await Promise.all([api("/v1/arenas/" + trial.arena_id), api("/v1/subjects/" + trial.subject_id)]);
  document.querySelector("main h1").textContent = "Trial " + id + ": " + subject.label + " on " + arena.name;
  const plot = el("div", { id: "replay", class: "plot", role: "img", "aria-label": "3D replay of the trial's markers over the arena heightmap" });
  const slider = el("input", { type: "range", id: "frame", min: 0, max: 0, value: 0, "aria-label": "frame" });
  // Disabled until the scene is drawn and the controls are wired: a click before that was lost.
  const play = el("button", { type: "button", id: "play", text: "Play", disabled: true });
  const speed = el("select", { id: "speed", "aria-label": "playback speed" },
    [["0.25", "0.25x"], ["0.5", "0.5x"], ["1", "1x (real time)"]].map(([v, t]) => el("option", { value: v, text: t, selected: v === "1" })));
  const exag = el("select", { id: "exaggeration", "aria-label": "vertical exaggeration" },
    [1, 2, 5, 10, 20].map(v => el("option", { value: v, text: v + "x", selected: v === 5 })));
  const clock = el("span", { id: "clock", "aria-live": "off", text: "loading" });
  const facts = { arena: arena.name, subject: subject.label, file: trial.filename, format: trial.format,
    "frame rate (Hz)": trial.frame_rate_hz, frames: trial.n_frames, markers: trial.n_markers,
    "duration (s)": trial.frame_rate_hz ? trial.n_frames / trial.frame_rate_hz : null, condition: trial.condition, recorded: trial.recorded_at };
  show(kv(facts, Object.keys(facts)),
    el("h2", { text: "3D replay" }),
    el("div", { class: "controls" }, play, el("label", {}, "speed", speed), el("label", {}, "vertical exaggeration", exag),
      el("label", {}, "frame", slider), clock), plot,
    el("p", { id: "replay-note" }), el("h2", { text: "Scores" }), el("div", { id: "scores" }));
  const scores = await all("/v1/scores?trial_id=" + id + "&target_kind=trial");
  document.getElementById("scores").replaceChildren(await scoreTable(scores));
  const rep = await api("/v1/dashboard/trials/" + id + "/replay");
  document.getElementById("replay-note").textContent = rep.note + " Markers: " + rep.source + ", every " + rep.frame_step +
    " frame(s). Heights drawn " + exag.value + "x; marker names on hover.";
  const MM = 1000;  // draw in millimetres
  const frameXYZ = f => {
    const m = rep.markers_m[f];
    const g = v => v === null ? null : v * MM;
    return { x: [m.map(p => g(p[0]))], y: [m.map(p => g(p[1]))], z: [m.map(p => g(p[2]))] };
  };
  // The box that holds the ground and the whole path: the camera is fitted to it.
  const xs = [], ys = [], zs = [];
  for (const f of rep.markers_m) for (const p of f) if (p[0] !== null) { xs.push(p[0] * MM); ys.push(p[1] * MM); zs.push(p[2] * MM); }
  const traces = [];
  if (rep.ground) {
    const gz = rep.ground.z_m.map(r => r.map(v => v === null ? null : v * MM));
    traces.push({ type: "surface", x: rep.ground.x_m.map(v => v * MM), y: rep.ground.y_m.map(v => v * MM), z: gz, colorscale: "Cividis",
      showscale: true, colorbar: { title: { text: "height (mm)" } }, name: "ground", opacity: 0.95, hovertemplate: "ground %{z:.2f} mm<extra></extra>" });
    xs.push(rep.ground.x_m[0] * MM, rep.ground.x_m[rep.ground.x_m.length - 1] * MM);
    ys.push(rep.ground.y_m[0] * MM, rep.ground.y_m[rep.ground.y_m.length - 1] * MM);
    for (const r of gz) for (const v of r) if (v !== null) zs.push(v);
  }
  const lo = v => v.reduce((a, b) => Math.min(a, b), Infinity), hi = v => v.reduce((a, b) => Math.max(a, b), -Infinity);
  const box = { x: [lo(xs), hi(xs)], y: [lo(ys), hi(ys)], z: [lo(zs), hi(zs)] };
  const f0 = frameXYZ(0);
  // Labels only on hover: names printed beside 8 markers a few millimetres apart overlap.
  traces.push({ type: "scatter3d", mode: "markers", x: f0.x[0], y: f0.y[0], z: f0.z[0], text: rep.marker_names,
    hovertemplate: "%{text}<br>x %{x:.1f} mm, y %{y:.1f} mm, z %{z:.1f} mm<extra></extra>",
    marker: { size: 4, color: "#D55E00" }, name: "markers (name on hover)" });
  const aspect = () => {
    const w = box.x[1] - box.x[0] || 1;
    return { x: 1, y: (box.y[1] - box.y[0]) / w, z: Math.max((box.z[1] - box.z[0]) / w * Number(exag.value), 0.02) };
  };
  const scene = () => ({ aspectmode: "manual", aspectratio: aspect(),
    xaxis: { title: { text: "x (mm)" }, range: box.x }, yaxis: { title: { text: "y (mm)" }, range: box.y },
    zaxis: { title: { text: "z (mm, " + exag.value + "x)" }, range: box.z },
    camera: { eye: { x: 0.05, y: -0.62, z: 0.32 }, center: { x: 0, y: 0, z: -0.05 } } });
  await Plotly.newPlot(plot, traces, { margin: { l: 0, r: 0, t: 10, b: 0 }, scene: scene(), legend: { x: 0, y: 1 } },
    { responsive: true, displaylogo: false });
  exag.addEventListener("change", () => {
    Plotly.relayout(plot, { "scene.aspectratio": aspect(), "scene.zaxis.title.text": "z (mm, " + exag.value + "x)" });
    document.getElementById("replay-note").textContent = document.getElementById("replay-note").textContent.replace(/Heights drawn [0-9.]+x/, "Heights drawn " + exag.value + "x");
  });
  const last = rep.markers_m.length - 1;
  slider.max = String(last);
  const draw = f => {
    Plotly.restyle(plot, frameXYZ(f), [traces.length - 1]);
    clock.textContent = "t = " + fmt(rep.time_s[f]) + " s";
  };
  slider.addEventListener("input", () => draw(Number(slider.value)));
  // Real-time playback: the frame shown follows the wall clock times the speed (frames are
  // skipped when drawing is slower than the recording), never one frame per timer tick.
  let running = false, t0 = 0, start = 0;
  const tick = now => {
    if (!running) return;
    const t = rep.time_s[start] + (now - t0) / 1000 * Number(speed.value);
    let f = start;
    while (f < last && rep.time_s[f + 1] <= t) f++;
    if (f >= last) f = last;
    if (String(f) !== slider.value) { slider.value = String(f); draw(f); }
    if (f >= last) { running = false; play.textContent = "Play"; return; }
    requestAnimationFrame(tick);
  };
  const begin = () => { start = Number(slider.value) >= last ? 0 : Number(slider.value); t0 = performance.now(); running = true; play.textContent = "Pause"; requestAnimationFrame(tick); };
  play.addEventListener("click", () => { if (running) { running = false; play.textContent = "Play"; } else begin(); });
  speed.addEventListener("change", () => { if (running) begin(); });
  draw(0);
  play.disabled = false;
}

// The movement an arena's ground predicts (the arena left out of the fit), as the report shows it.
async function expectedPanel(node, arenaId) {
  try {
    // The study chosen in the header, as every other page uses it (all arenas when none).
    const out = await api("/v1/arenas/" + arenaId + "/expected-movement?recipe=default" + (study() ? "&" + studyParam() : ""));
    const cols = [
      { label: "movement measure", get: r => r.movement_measure },
      { label: "predicted [95 % PI]", get: r => r.predicted === null ? "n/a" : fmt(r.predicted) + " [" + fmt(r.pi_low) + ", " + fmt(r.pi_high) + "]" },
      { label: "ignoring the ground [95 % PI]", get: r => r.baseline_predicted === null || r.baseline_predicted === undefined ? "n/a" :
        fmt(r.baseline_predicted) + " [" + fmt(r.baseline_pi_low) + ", " + fmt(r.baseline_pi_high) + "]" },
      { label: "arenas", get: r => r.n_arenas, num: true },
      { label: "note", get: r => r.note || "" },
    ];
    const caption = "From " + (out.terrain_measure || "the ground") + " by the arena-level fit of the other arenas" +
      (out.left_out ? " (this arena left out)" : "") +
      // Which scan gave this arena's terrain value: the study table's, not necessarily the scan on this page.
      ((out.scan_policy && out.scan_policy.scan_ids && out.scan_policy.scan_ids.length) ? "; " + out.terrain_measure + " = " + fmt(out.terrain_value) +
        " from scan " + out.scan_policy.scan_ids.join(", ") + " (" + (out.scan_policy.scan_kinds || []).join(", ") + "), scan policy '" + out.scan_policy.rule + "' as in the study table" : "");
    node.replaceChildren(table(cols, out.rows, caption), ...(out.warnings || []).map(w => el("p", { class: "warning", text: w })));
  } catch (err) {
    node.replaceChildren(el("p", { text: "No prediction: " + err.message }));
  }
}

async function scanPage(id) {
  const scan = await api("/v1/scans/" + id);
  const arena = await api("/v1/arenas/" + scan.arena_id);
  document.querySelector("main h1").textContent = "Scan " + id + " of " + arena.name;
  const plot = el("div", { id: "surface", class: "plot", role: "img", "aria-label": "heightmap surface of the scan" });
  const cell = siValue(scan.dx_m, "m");
  const facts = { arena: arena.name, file: scan.filename, format: scan.format, kind: scan.kind, "file units": scan.units,
    points: scan.n_points, "grid (cells)": scan.grid_nx && scan.grid_ny ? scan.grid_nx + " x " + scan.grid_ny : null,
    ["grid spacing (" + cell[1] + ")"]: cell[0], captured: scan.captured_at };
  show(kv(facts, Object.keys(facts)), el("h2", { text: "Heightmap" }), plot,
    el("h2", { text: "Expected movement on this ground" }), el("div", { id: "expected" }),
    el("h2", { text: "Scores" }), el("div", { id: "scores" }));
  expectedPanel(document.getElementById("expected"), scan.arena_id);
  const scores = await all("/v1/scores?scan_id=" + id + "&target_kind=scan");
  document.getElementById("scores").replaceChildren(await scoreTable(scores));
  try {
    const hm = await api("/v1/dashboard/scans/" + id + "/heightmap");
    const [f, u] = lengthUnit(hm.x_m, hm.y_m);
    const scale = v => v === null ? null : v * f;
    await Plotly.newPlot(plot, [{ type: "surface", x: hm.x_m.map(scale), y: hm.y_m.map(scale), z: hm.z_m.map(r => r.map(scale)), colorscale: "Cividis",
      colorbar: { title: { text: "height (" + u + ")" } } }],
      { margin: { l: 0, r: 0, t: 10, b: 0 }, scene: { aspectmode: "data", xaxis: { title: { text: "x (" + u + ")" } },
        yaxis: { title: { text: "y (" + u + ")" } }, zaxis: { title: { text: "z (" + u + ")" } } } }, { responsive: true, displaylogo: false });
  } catch (err) {
    plot.replaceChildren(el("p", { text: "No heightmap yet: " + err.message }));
  }
}

async function jobsPage() {
  const summary = el("p", { id: "job-summary", "aria-live": "polite" });
  const out = el("div", { id: "job-table" });
  show(summary, out);
  async function poll() {
    const jobs = await all("/v1/jobs");
    const counts = {};
    for (const j of jobs) counts[j.state] = (counts[j.state] || 0) + 1;
    summary.textContent = jobs.length + " jobs: " + Object.entries(counts).map(([k, v]) => v + " " + k).join(", ");
    out.replaceChildren(table([
      { label: "id", get: j => j.id, num: true },
      { label: "target", get: j => link("/ui/" + j.target_kind + "s/" + j.target_id, j.target_kind + " " + j.target_id) },
      { label: "state", get: j => j.state },
      { label: "progress", get: j => el("progress", { max: 1, value: j.progress || 0, "aria-label": "job " + j.id + " progress" }, fmt(j.progress)) },
      { label: "message", get: j => j.message },
      { label: "error", get: j => j.error },
    ], jobs));
    const busy = jobs.some(j => j.state === "queued" || j.state === "running");
    setTimeout(() => poll().catch(showError), busy ? 1500 : 5000);
  }
  await poll();
}

async function download(path, filename) {
  const resp = await api(path, { raw: true });
  const url = URL.createObjectURL(await resp.blob());
  const a = el("a", { href: url, download: filename });
  document.body.append(a);
  a.click();
  a.remove();
  setTimeout(() => URL.revokeObjectURL(url), 10000);
}

async function correspondencePage() {
  const recipes = await all("/v1/recipes");
  const names = [...new Set(recipes.map(p => p.name))];
  const prof = el("select", { id: "recipe", name: "recipe" }, names.map(n => el("option", { value: n, text: n })));
  const tSel = el("select", { id: "terrain", multiple: true, size: 6 });
  const mSel = el("select", { id: "movement", multiple: true, size: 6 });
  const run = el("button", { type: "button", id: "run", text: "Compute" });
  const dl = (label, path, file) => el("button", { type: "button", class: "secondary", onclick: () => download(path(), file).catch(showError) }, label);
  const q = () => "recipe=" + encodeURIComponent(prof.value) + (study() ? "&" + studyParam() : "");
  const out = el("div", { id: "corr-out" });
  show(el("div", { class: "controls" }, el("label", {}, "recipe", prof), el("label", {}, "terrain measures", tSel),
    el("label", {}, "movement measures", mSel), run),
    el("div", { class: "controls" },
      dl("Correspondence CSV", () => "/v1/correspondence?format=csv&" + q() + selected(), "correspondence.csv"),
      dl("Scores CSV", () => "/v1/export/scores?format=csv&" + q(), "scores.csv"),
      dl("Scores Parquet", () => "/v1/export/scores?format=parquet&" + q(), "scores.parquet"),
      dl("Report (HTML)", () => "/v1/correspondence/report?" + q(), "report.html")),
    out);
  function selected() {
    const parts = [];
    for (const o of tSel.selectedOptions) parts.push("terrain_measure=" + encodeURIComponent(o.value));
    for (const o of mSel.selectedOptions) parts.push("movement_measure=" + encodeURIComponent(o.value));
    return parts.length ? "&" + parts.join("&") : "";
  }
  async function compute(first) {
    out.replaceChildren(el("p", { id: "corr-busy", text: "Computing (arena permutation test and bootstrap, the report's settings)..." }));
    const v = await api("/v1/dashboard/correspondence?" + q() + selected());
    if (first) {
      const fill = (sel, list) => sel.replaceChildren(...list.map(m => el("option", { value: m, text: m })));
      fill(tSel, v.terrain_measures || []);
      fill(mSel, v.movement_measures || []);
    }
    const warn = (v.warnings || []).length ? el("div", { class: "warnings", role: "alert" }, el("ul", {}, v.warnings.map(w => el("li", { text: w })))) : null;
    const pairKeys = Object.keys(v.pairs || {});
    const pairSel = el("select", { id: "pair", name: "pair" }, pairKeys.map(k => el("option", { value: k, text: k, selected: k === v.default_pair })));
    const main = el("div", { id: "main-result", class: "plot", role: "img", "aria-label": "main result: arena means of the selected pair with intervals, subjects and the arena-level fit" });
    const heat = el("div", { id: "heatmap", class: "plot", role: "img", "aria-label": v.grid.statistic + "; " + v.grid.legend });
    const cols = v.table_columns;
    out.replaceChildren(
      el("p", { id: "corr-study", text: "Study: " + (v.study || "all studies") }),
      el("p", { id: "corr-counts", text: v.counts.arenas + " arenas, " + v.counts.subjects + " subjects, " + v.counts.trials + " trials; " + v.counts.pairs + " pairs shown" }),
      el("p", { id: "corr-settings", text: "Statistics: " + v.settings.text }),
      warn,
      el("h2", { text: "Main result" }),
      el("div", { class: "controls" }, el("label", {}, "pair", pairSel)),
      main,
      el("p", { id: "main-caption", class: "caption" }),
      el("h2", { text: "Strongest pairs" }),
      table(Object.entries(cols).map(([k, label]) => ({ label, get: r => r[k] })), v.strongest),
      el("h2", { text: "Grid" }),
      el("p", { id: "grid-legend", text: v.grid.statistic + ": " + v.grid.legend }),
      heat);
    const drawPair = () => mainResult(main, v.pairs[pairSel.value], v.colours || {});
    pairSel.addEventListener("change", () => drawPair().catch(showError));
    if (pairKeys.length) await drawPair();
    const txt = v.grid.q.map(row => row.map(x => x !== null && x < 0.05 ? "*" : ""));
    await Plotly.newPlot(heat, [{ type: "heatmap", x: v.grid.movement, y: v.grid.terrain, z: v.grid.effect, text: txt,
      texttemplate: "%{text}", colorscale: v.grid.palette, zmin: v.grid.zmin, zmax: v.grid.zmax,
      colorbar: { title: { text: v.grid.statistic + " (dimensionless)" } },
      hovertemplate: "%{y} x %{x}<br>rho = %{z:.2f}<extra></extra>" }],
      { margin: { l: 200, r: 10, t: 10, b: 180 }, height: Math.max(420, 22 * v.grid.terrain.length + 220),
        xaxis: { title: { text: "movement measure" }, tickangle: -60 },
        // Rows top to bottom in the report's order.
        yaxis: { title: { text: "terrain measure" }, automargin: true, autorange: "reversed" } },
      { responsive: true, displaylogo: false });
  }
  run.addEventListener("click", () => compute(false).catch(showError));
  if (names.length) await compute(true);
}

// The main-result figure of one pair view (display units, label positions from the server).
async function mainResult(node, p, colours) {
  if (!p) { node.replaceChildren(el("p", { text: "No pair to show." })); return; }
  const traces = [];
  p.subjects.forEach((s, i) => traces.push({ type: "scatter", mode: "lines", x: s.points.map(q => q[0]), y: s.points.map(q => q[1]),
    line: { color: "rgba(120,120,120,0.45)", width: 1 }, name: "subjects (mean per arena)", legendgroup: "subjects",
    showlegend: i === 0, hovertemplate: s.subject + "<extra></extra>" }));
  if (p.fit_band && p.fit_band.length) {
    traces.push({ type: "scatter", mode: "lines", x: p.fit_band.map(q => q[0]), y: p.fit_band.map(q => q[1]),
      line: { width: 0 }, showlegend: false, hoverinfo: "skip" });
    traces.push({ type: "scatter", mode: "lines", x: p.fit_band.map(q => q[0]), y: p.fit_band.map(q => q[2]),
      line: { width: 0 }, fill: "tonexty", fillcolor: "rgba(0,0,0,0.10)", name: "95 % band of the arena-level fit", hoverinfo: "skip" });
  }
  if (p.fit_line.length) traces.push({ type: "scatter", mode: "lines", x: p.fit_line.map(q => q[0]), y: p.fit_line.map(q => q[1]),
    line: { color: "black", width: 2 }, name: "arena-level fit", hoverinfo: "skip" });
  const a = p.arenas;
  traces.push({ type: "scatter", mode: "markers", x: a.map(r => r.x), y: a.map(r => r.y), name: "arena mean, 95 % interval",
    marker: { symbol: "diamond", size: 10, color: a.map(r => colours[String(r.arena_id)] || "grey"), line: { color: "black", width: 1 } },
    error_y: { type: "data", symmetric: false, array: a.map(r => r.y_high === null ? 0 : r.y_high - r.y),
      arrayminus: a.map(r => r.y_low === null ? 0 : r.y - r.y_low), color: "#444", thickness: 1.5 },
    text: a.map(r => r.name), hovertemplate: "%{text}<br>" + p.x_label + " = %{x:.3g}<br>" + p.y_label + " = %{y:.3g}<extra></extra>" });
  const annotations = a.map(r => r.leader
    ? { x: r.x, y: r.y, ax: r.label_x, ay: r.label_y, axref: "x", ayref: "y", text: r.name, showarrow: true, arrowhead: 0,
        arrowcolor: "#666", arrowwidth: 0.8, font: { size: 11 }, xanchor: r.label_x >= r.x ? "left" : "right" }
    : { x: r.label_x, y: r.label_y, text: r.name, showarrow: false, font: { size: 11 }, xanchor: r.label_x >= r.x ? "left" : "right" });
  document.getElementById("main-caption").textContent = p.title + ". Fit: " + p.fit_source + ". Intervals: 95 % over subjects.";
  await Plotly.newPlot(node, traces, { margin: { l: 70, r: 10, t: 10, b: 55 }, height: 460, annotations,
    xaxis: { title: { text: p.x_label }, range: p.x_range, zeroline: false },
    yaxis: { title: { text: p.y_label }, range: p.y_range, zeroline: false },
    legend: { orientation: "h", y: -0.18 } }, { responsive: true, displaylogo: false });
}

// -- set-up forms ------------------------------------------------------------------------------
// Every form posts to the resource route (which checks the token's scope again); a form the
// token may not use is shown disabled with the scope it needs.
function field(label, input, help) {
  return el("label", { class: "field" }, el("span", { text: label }), input, help ? el("small", { text: help }) : null);
}

function formBox(id, title, scope, me, inputs, submit) {
  const msg = el("p", { class: "form-msg", id: id + "-msg", role: "status" });
  const allowed = me.scopes.includes(scope);
  const form = el("form", { id, class: "setup" }, el("h2", { text: title }),
    allowed ? null : el("p", { class: "note", text: "Needs a token with the '" + scope + "' scope." }),
    el("fieldset", { disabled: !allowed }, inputs, el("button", { type: "submit", text: title })), msg);
  form.addEventListener("submit", async ev => {
    ev.preventDefault();
    msg.className = "form-msg";
    msg.textContent = "Sending...";
    try {
      msg.textContent = await submit();
      msg.className = "form-msg ok";
    } catch (err) {
      msg.className = "form-msg error";
      msg.textContent = String(err.message || err);
    }
  });
  return form;
}

const post = (path, body) => api(path, { method: "POST", headers: { "Content-Type": "application/json" }, body: JSON.stringify(body) });
const num = id => { const v = document.getElementById(id).value.trim(); return v === "" ? null : Number(v); };
const val = id => document.getElementById(id).value.trim();

// The set-up forms offer every record in the store, whichever study the header has chosen.
const everything = path => all(path);

async function setupPage() {
  const [me, arenas, subjects, trials, recipes] = await Promise.all([api("/v1/dashboard/whoami"),
    everything("/v1/arenas"), everything("/v1/subjects"), everything("/v1/trials"), all("/v1/recipes")]);
  const recipeNames = [...new Set(recipes.map(r => r.name))];
  const arenaForm = formBox("arena-form", "Create arena", "upload", me, [
    field("name", el("input", { id: "arena-name", required: true })),
    field("kind", el("select", { id: "arena-kind" }, ["runway", "open_field", "treadmill", "other"].map(k => el("option", { value: k, text: k.replace("_", " ") })))),
    field("animal-scale band, shortest wavelength (mm)", el("input", { id: "arena-band-lo", type: "number", step: "any", min: "0", value: "5" }), "about the foot size"),
    field("animal-scale band, longest wavelength (mm)", el("input", { id: "arena-band-hi", type: "number", step: "any", min: "0", value: "80" }), "about the stride length; leave both empty for the whole scan"),
    field("notes", el("input", { id: "arena-notes" })),
  ], async () => {
    const lo = num("arena-band-lo"), hi = num("arena-band-hi");
    const body = { name: val("arena-name"), kind: val("arena-kind"), notes: val("arena-notes"),
      scale_band_m: lo === null || hi === null ? null : [lo / 1000, hi / 1000] };
    const a = await post("/v1/arenas", body);
    return "Created arena '" + a.name + "' (id " + a.id + ").";
  });
  // Marker roles: pick from the markers of an uploaded trial, or type them.
  const roleIds = ["anterior", "posterior", "LF", "RF", "LH", "RH"];
  const markerList = el("datalist", { id: "marker-names" });
  const trialPick = el("select", { id: "subject-from-trial" }, el("option", { value: "", text: "(type the names)" }),
    trials.map(t => el("option", { value: t.id, text: "trial " + t.id + ": " + t.filename })));
  trialPick.addEventListener("change", () => {
    const t = trials.find(x => String(x.id) === trialPick.value);
    const names = t ? t.marker_names || [] : [];
    markerList.replaceChildren(...names.map(n => el("option", { value: n })));
    for (const r of roleIds) {
      const inp = document.getElementById("role-" + r);
      const guess = names.find(n => n.toLowerCase().includes(r.toLowerCase()) && (r.length > 2 || /foot|toe|paw|_/i.test(n)));
      if (!inp.value && guess) inp.value = guess;
    }
  });
  const subjectForm = formBox("subject-form", "Create subject", "upload", me, [
    field("label", el("input", { id: "subject-label", required: true })),
    field("species", el("input", { id: "subject-species" })),
    field("body length (mm)", el("input", { id: "subject-length", type: "number", step: "any", min: "0" })),
    field("mass (g)", el("input", { id: "subject-mass", type: "number", step: "any", min: "0" })),
    field("markers of trial", trialPick, "fills the marker lists below from an uploaded trial"),
    markerList,
    roleIds.map(r => field(r === "anterior" ? "anterior marker (head end)" : r === "posterior" ? "posterior marker (tail end)" : "foot " + r,
      el("input", { id: "role-" + r, list: "marker-names", required: true }))),
  ], async () => {
    const len = num("subject-length"), mass = num("subject-mass");
    const body = { label: val("subject-label"), species: val("subject-species"),
      marker_roles: { anterior: val("role-anterior"), posterior: val("role-posterior"),
        feet: Object.fromEntries(["LF", "RF", "LH", "RH"].map(f => [f, val("role-" + f)])) },
      body_length_m: len === null ? null : len / 1000, mass_kg: mass === null ? null : mass / 1000 };
    const sj = await post("/v1/subjects", body);
    return "Created subject '" + sj.label + "' (id " + sj.id + ").";
  });
  const multi = (id, rows, text) => el("select", { id, multiple: true, size: Math.min(6, Math.max(2, rows.length)) }, rows.map(r => el("option", { value: r.id, text: text(r) })));
  const studyForm = formBox("study-form", "Create study", "upload", me, [
    field("name", el("input", { id: "study-name", required: true })),
    field("notes", el("input", { id: "study-notes" })),
    field("arenas", multi("study-arenas", arenas, a => a.name)),
    field("subjects", multi("study-subjects", subjects, s => s.label), "their trials on these arenas join the study"),
  ], async () => {
    const st = await post("/v1/studies", { name: val("study-name"), notes: val("study-notes") });
    const ids = sel => [...document.getElementById(sel).selectedOptions].map(o => Number(o.value));
    const m = await post("/v1/studies/" + st.id + "/members", { arena_ids: ids("study-arenas"), subject_ids: ids("study-subjects") });
    return "Created study '" + m.name + "' (id " + m.id + ", " + m.arena_ids.length + " arenas, " + m.subject_ids.length + " subjects).";
  });
  const recipeForm = formBox("recipe-form", "Create recipe", "analyse", me, [
    field("name", el("input", { id: "recipe-name", required: true })),
    field("parameter overrides (JSON by section: movement, terrain, heightmap)",
      el("textarea", { id: "recipe-params", rows: 3, text: "{}" }), "unnamed parameters take today's defaults"),
  ], async () => {
    let params;
    try { params = JSON.parse(val("recipe-params") || "{}"); } catch (e) { throw new Error("parameters are not valid JSON: " + e.message); }
    const r = await post("/v1/recipes", { name: val("recipe-name"), parameters: params });
    return (r.created ? "Created recipe " : "Recipe unchanged: ") + r.name + "@" + r.version + ".";
  });
  const rescoreForm = formBox("rescore-form", "Start rescore", "analyse", me, [
    field("recipe", el("select", { id: "rescore-recipe" }, recipeNames.map(n => el("option", { value: n, text: n })))),
    field("arenas (none selected: every scan and trial)", multi("rescore-arenas", arenas, a => a.name)),
  ], async () => {
    const ids = [...document.getElementById("rescore-arenas").selectedOptions].map(o => Number(o.value));
    const r = await post("/v1/jobs/rescore", ids.length ? { recipe: val("rescore-recipe"), arena_ids: ids } : { recipe: val("rescore-recipe"), all: true });
    return "Queued " + r.count + " scoring jobs under " + r.recipe.name + "@" + r.recipe.version + " (see Jobs).";
  });
  show(el("p", { id: "scopes", text: "This token may: " + me.scopes.join(", ") + "." }),
    el("div", { class: "setup-grid" }, arenaForm, subjectForm, studyForm, recipeForm, rescoreForm));
}

// -- boot -------------------------------------------------------------------------------------
const PAGES = { arenas: arenasPage, trials: trialsPage, trial: trialPage, scan: scanPage, jobs: jobsPage, correspondence: correspondencePage, setup: setupPage };

async function boot() {
  const page = document.body.dataset.page;
  const id = document.body.dataset.id;
  const signout = document.getElementById("signout");
  signout.addEventListener("click", () => { sessionStorage.removeItem(TOKEN_KEY); location.assign("/ui/login"); });
  if (page === "login" || !token()) {
    const next = page === "login" ? new URLSearchParams(location.search).get("next") : location.pathname + location.search;
    loginForm(next && next.startsWith("/ui/") ? next : "/ui/arenas");
    return;
  }
  signout.hidden = false;
  document.getElementById("who").textContent = "signed in";
  try {
    await studyPicker();
    await PAGES[page](id);
  } catch (err) {
    if (err instanceof AuthError) { loginForm(location.pathname + location.search); showError(err); return; }
    showError(err);
  }
}

document.addEventListener("DOMContentLoaded", boot);
