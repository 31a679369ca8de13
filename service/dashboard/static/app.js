// gaitscape dashboard: one small script for every page (no build step, no network but ours).
// The token is asked once per browser session, kept in sessionStorage and sent as a Bearer
// header; pages are filled with DOM nodes (textContent only, never innerHTML with data).
"use strict";

const TOKEN_KEY = "gaitscape-token";
const STUDY_KEY = "gaitscape-study";
const PUOR = [[0, "#2d004b"], [0.125, "#542788"], [0.25, "#8073ac"], [0.375, "#b2abd2"],
  [0.5, "#f7f7f7"], [0.625, "#fdb863"], [0.75, "#e08214"], [0.875, "#b35806"], [1, "#7f3b08"]];

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
    { label: "scale band (m)", get: a => a.scale_band_m ? a.scale_band_m.map(v => fmt(v)).join(" to ") : "whole scan" },
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

function scoreTable(scores) {
  return table([
    { label: "measure", get: s => s.measure },
    { label: "value", get: s => s.value, num: true },
    { label: "unit", get: s => s.unit },
    { label: "surrogate z", get: s => s.surrogate_z, num: true },
    { label: "recipe", get: s => s.recipe || (s.recipe_hash || "").slice(0, 10) },
  ], scores, scores.length + " scores");
}

function kv(obj, keys) {
  return el("dl", { class: "kv" }, keys.map(k => [el("dt", { text: k }), el("dd", { text: fmt(obj[k]) })]));
}

async function trialPage(id) {
  const trial = await api("/v1/trials/" + id);
  const plot = el("div", { id: "replay", class: "plot", role: "img", "aria-label": "3D replay of the trial's markers over the arena heightmap" });
  const slider = el("input", { type: "range", id: "frame", min: 0, max: 0, value: 0, "aria-label": "frame" });
  const play = el("button", { type: "button", id: "play", text: "Play" });
  const clock = el("span", { id: "clock", "aria-live": "off" });
  show(kv(trial, ["id", "arena_id", "subject_id", "filename", "format", "frame_rate_hz", "n_frames", "n_markers", "condition", "recorded_at"]),
    el("h2", { text: "3D replay" }), el("div", { class: "controls" }, play, el("label", {}, "frame", slider), clock), plot,
    el("p", { id: "replay-note" }), el("h2", { text: "Scores" }), el("div", { id: "scores" }));
  const scores = await all("/v1/scores?trial_id=" + id + "&target_kind=trial");
  document.getElementById("scores").replaceChildren(scoreTable(scores));
  const rep = await api("/v1/dashboard/trials/" + id + "/replay");
  document.getElementById("replay-note").textContent = rep.note + " Markers: " + rep.source + ", every " + rep.frame_step + " frame(s).";
  const frameXYZ = f => {
    const m = rep.markers_m[f];
    return { x: [m.map(p => p[0])], y: [m.map(p => p[1])], z: [m.map(p => p[2])] };
  };
  const traces = [];
  if (rep.ground) {
    traces.push({ type: "surface", x: rep.ground.x_m, y: rep.ground.y_m, z: rep.ground.z_m, colorscale: "Cividis",
      showscale: true, colorbar: { title: { text: "height (m)" } }, name: "ground", opacity: 0.95 });
  }
  const f0 = frameXYZ(0);
  traces.push({ type: "scatter3d", mode: "markers+text", x: f0.x[0], y: f0.y[0], z: f0.z[0], text: rep.marker_names,
    textposition: "top center", marker: { size: 4, color: "#D55E00" }, name: "markers" });
  const layout = { margin: { l: 0, r: 0, t: 10, b: 0 }, scene: { aspectmode: "data",
    xaxis: { title: { text: "x (m)" } }, yaxis: { title: { text: "y (m)" } }, zaxis: { title: { text: "z (m)" } } },
    legend: { x: 0, y: 1 } };
  await Plotly.newPlot(plot, traces, layout, { responsive: true, displaylogo: false });
  const last = rep.markers_m.length - 1;
  slider.max = String(last);
  let timer = null;
  const draw = f => {
    Plotly.restyle(plot, frameXYZ(f), [traces.length - 1]);
    clock.textContent = "t = " + fmt(rep.time_s[f]) + " s";
  };
  slider.addEventListener("input", () => draw(Number(slider.value)));
  play.addEventListener("click", () => {
    if (timer) { clearInterval(timer); timer = null; play.textContent = "Play"; return; }
    play.textContent = "Pause";
    const dt = 1000 * rep.frame_step / rep.frame_rate_hz;
    timer = setInterval(() => {
      const f = (Number(slider.value) + 1) % (last + 1);
      slider.value = String(f);
      draw(f);
    }, Math.max(dt, 40));
  });
  draw(0);
}

async function scanPage(id) {
  const scan = await api("/v1/scans/" + id);
  const plot = el("div", { id: "surface", class: "plot", role: "img", "aria-label": "heightmap surface of the scan" });
  show(kv(scan, ["id", "arena_id", "filename", "format", "kind", "units", "n_points", "grid_nx", "grid_ny", "grid_dx_m", "captured_at"]),
    el("h2", { text: "Heightmap" }), plot, el("h2", { text: "Scores" }), el("div", { id: "scores" }));
  const scores = await all("/v1/scores?scan_id=" + id + "&target_kind=scan");
  document.getElementById("scores").replaceChildren(scoreTable(scores));
  try {
    const hm = await api("/v1/dashboard/scans/" + id + "/heightmap");
    await Plotly.newPlot(plot, [{ type: "surface", x: hm.x_m, y: hm.y_m, z: hm.z_m, colorscale: "Cividis",
      colorbar: { title: { text: "height (m)" } } }],
      { margin: { l: 0, r: 0, t: 10, b: 0 }, scene: { aspectmode: "data", xaxis: { title: { text: "x (m)" } },
        yaxis: { title: { text: "y (m)" } }, zaxis: { title: { text: "z (m)" } } } }, { responsive: true, displaylogo: false });
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
    out.replaceChildren(el("p", { text: "Computing (permutation test and bootstrap)..." }));
    const res = await api("/v1/correspondence?" + q() + selected() + "&n_permutations=999&n_boot=499");
    if (first) {
      const fill = (sel, list) => sel.replaceChildren(...list.map(m => el("option", { value: m, text: m })));
      fill(tSel, res.terrain_measures || []);
      fill(mSel, res.movement_measures || []);
    }
    const rows = res.rows || [];
    const tm = [...new Set(rows.map(r => r.terrain_measure))];
    const mm = [...new Set(rows.map(r => r.movement_measure))];
    const z = tm.map(t => mm.map(m => { const r = rows.find(x => x.terrain_measure === t && x.movement_measure === m); return r ? r.spearman_rho : null; }));
    const txt = tm.map(t => mm.map(m => { const r = rows.find(x => x.terrain_measure === t && x.movement_measure === m); return r && r.q_value !== null && r.q_value < 0.05 ? "*" : ""; }));
    const heat = el("div", { id: "heatmap", class: "plot", role: "img", "aria-label": "heatmap of Spearman rho of arena means, stars mark q below 0.05" });
    const best = rows.filter(r => r.q_value !== null).sort((a, b) => a.q_value - b.q_value || a.p_value - b.p_value).slice(0, 25);
    const warn = (res.warnings || []).length ? el("div", { class: "warnings", role: "alert" }, el("ul", {}, res.warnings.map(w => el("li", { text: w })))) : null;
    out.replaceChildren(
      el("p", { id: "corr-study", text: "Study: " + (res.study || "all studies") }),
      el("p", { id: "corr-counts", text: res.n_arenas + " arenas, " + res.n_subjects + " subjects, " + res.n_trials + " trials; " + rows.length + " pairs (quick settings: 999 permutations, 499 bootstrap draws)" }),
      warn, heat, el("h2", { text: "Strongest pairs" }),
      table([
        { label: "terrain", get: r => r.terrain_measure }, { label: "movement", get: r => r.movement_measure },
        { label: "slope", get: r => r.slope, num: true }, { label: "CI low", get: r => r.ci_low, num: true },
        { label: "CI high", get: r => r.ci_high, num: true }, { label: "p", get: r => r.p_value, num: true },
        { label: "q", get: r => r.q_value, num: true }, { label: "rho", get: r => r.spearman_rho, num: true },
      ], best));
    await Plotly.newPlot(heat, [{ type: "heatmap", x: mm, y: tm, z, text: txt, texttemplate: "%{text}", colorscale: PUOR,
      zmin: -1, zmax: 1, colorbar: { title: { text: "Spearman rho (arena means)" } },
      hovertemplate: "%{y} x %{x}<br>rho = %{z:.2f}<extra></extra>" }],
      { margin: { l: 200, r: 10, t: 10, b: 180 }, height: Math.max(420, 22 * tm.length + 220),
        xaxis: { title: { text: "movement measure" }, tickangle: -60 }, yaxis: { title: { text: "terrain measure" }, automargin: true } },
      { responsive: true, displaylogo: false });
  }
  run.addEventListener("click", () => compute(false).catch(showError));
  if (names.length) await compute(true);
}

// -- boot -------------------------------------------------------------------------------------
const PAGES = { arenas: arenasPage, trials: trialsPage, trial: trialPage, scan: scanPage, jobs: jobsPage, correspondence: correspondencePage };

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
