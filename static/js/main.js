// Wiring: load the state from the URL, run the refit queue, route between views, live collaboration.
import { api } from "./api.js";
import { optionLabel, settingName, thresholdLabel, warningText } from "./labels.js";
import {
  VIEWS, actions, allItems, analysisRequest, keptItems, applyShared, canRedo, canUndo, clearHistory, readUrl, redo, remember,
  settingDefaults, shared, state, undo, writeUrl,
} from "./state.js";
import { clear, fmt, h } from "./views/dom.js";
import * as alphaView from "./views/alpha.js";
import * as boardView from "./views/board.js";
import * as confirmationView from "./views/confirmation.js";
import * as correlationsView from "./views/correlations.js";
import * as factorsView from "./views/factors.js";
import * as loadingsView from "./views/loadings.js";
import * as robustnessView from "./views/robustness.js";
import * as settingsView from "./views/settings.js";
import * as snapshotsView from "./views/snapshots.js";
import * as stabilityView from "./views/stability.js";
import * as startView from "./views/start.js";
import * as workspaceView from "./views/workspace.js";

const views = { start: startView, board: boardView, loadings: loadingsView, correlations: correlationsView, alpha: alphaView, factors: factorsView,
  robustness: robustnessView, settings: settingsView, snapshots: snapshotsView, stability: stabilityView, confirmation: confirmationView,
  workspace: workspaceView };
const LABELS = { start: "Start", board: "Items", loadings: "Loadings", correlations: "Correlations", alpha: "Alpha curves", factors: "How many factors",
  robustness: "Robustness", settings: "Settings", snapshots: "Snapshots", stability: "Stability & agreement",
  confirmation: "Hold-out confirmation", workspace: "Workspace & log" };
const NEEDS_ANALYSIS = new Set(["board", "loadings", "correlations", "alpha", "factors"]);

const $ = (sel) => document.querySelector(sel);
const main = () => $("#view");
export const timings = { marks: [] };
window.scalewright = { state, timings };

// ---------------------------------------------------------------- rendering
function renderTabs() {
  const tabHadFocus = Boolean(document.activeElement?.closest?.("#tabs"));
  const nav = clear($("#tabs"));
  const usable = VIEWS.filter((v) => v === "start" || v === "workspace" || state.dataset);
  for (const v of VIEWS) {
    const disabled = !usable.includes(v);
    nav.append(h("button", { role: "tab", id: `tab-${v}`, "aria-selected": String(state.view === v), disabled,
      tabindex: state.view === v ? "0" : "-1", "aria-controls": "view",
      class: state.view === v ? "on" : "", text: LABELS[v], onclick: () => actions.show(v),
      onkeydown: (e) => {
        const i = usable.indexOf(v);
        const next = e.key === "ArrowRight" ? usable[(i + 1) % usable.length] : e.key === "ArrowLeft" ? usable[(i - 1 + usable.length) % usable.length] : null;
        if (next) { e.preventDefault(); actions.show(next); document.getElementById(`tab-${next}`)?.focus(); }
      } }));
  }
  // The tabs are rebuilt on every render: a keyboard user who pressed Enter on one stays on it.
  if (tabHadFocus) document.getElementById(`tab-${state.view}`)?.focus({ preventScroll: true });
}

function renderSummary() {
  hideFollowIfSame();
  const box = clear($("#summary"));
  const a = state.analysis;
  const p = state.previous;
  document.body.classList.toggle("busy", state.pending);
  $("#undo").disabled = !canUndo();
  $("#redo").disabled = !canRedo();
  $("#save-snapshot").disabled = !state.dataset;
  $("#dataset-name").textContent = state.meta ? state.meta.name : "no dataset open";
  document.title = state.meta ? `${state.meta.name} · Scalewright` : "Scalewright";
  if (!state.dataset) return;
  const total = allItems().length;
  const kept = total - state.dropped.length;
  const delta = (key, get) => {
    const now = get(a);
    const before = p ? get(p) : null;
    if (now == null || before == null || Math.abs(now - before) < 0.0005) return null;
    const d = now - before;
    return h("span", { class: `delta ${d > 0 ? "up" : "down"}`, text: `${d > 0 ? "+" : "−"}${fmt(Math.abs(d))}` });
  };
  const rel = a?.reliability || {};
  const stat = (id, label, value, extra) => h("div", { class: "stat", id }, h("span", { class: "label", text: label }),
    h("span", { class: "value", text: value }), extra);
  box.append(...[
    stat("stat-alpha", "α", fmt(rel.alpha), delta("alpha", (x) => x?.reliability?.alpha)),
    stat("stat-ci", "95% CI", rel.alpha_ci ? `${fmt(rel.alpha_ci[0], 2)}–${fmt(rel.alpha_ci[1], 2)}` : "—"),
    stat("stat-omega", "ω", fmt(rel.omega_total), delta("omega", (x) => x?.reliability?.omega_total)),
    rel.omega_hierarchical != null ? stat("stat-omega-h", "ωh", fmt(rel.omega_hierarchical)) : null,
    stat("stat-items", "items", `${kept} / ${total}`),
    stat("stat-factors", "factors", a?.efa?.n_factors != null ? String(a.efa.n_factors) : "—"),
    stat("stat-kmo", "KMO", fmt(a?.factorability?.kmo, 2)),
  ].filter(Boolean));
  if (state.pending) box.append(h("span", { class: "spinner", id: "refitting", role: "status", text: refittingText() }));
  if (state.error) box.append(h("span", { class: "error", role: "alert", text: state.error.message }));
  const warnings = a?.warnings || [];
  const w = clear($("#analysis-warnings"));
  if (warnings.length) {
    w.append(h("details", {}, h("summary", { text: `${warnings.length} note${warnings.length === 1 ? "" : "s"} from the analysis` }),
      h("ul", {}, warnings.map((t) => h("li", { text: warningText(t) })))));
  }
}

function renderView() {
  renderTabs();
  const view = views[state.view] || startView;
  const el = main();
  // A re-render (after every refit) must not throw the keyboard user out of the control they are using.
  const active = document.activeElement;
  const keepFocus = active && active.id && el.contains(active) ? active.id : null;
  el.setAttribute("aria-labelledby", `tab-${state.view}`);
  if (NEEDS_ANALYSIS.has(state.view) && !state.analysis) {
    clear(el).append(state.error ? h("p", { class: "note", text: state.error.message })
      : h("p", { class: "note computing", id: "computing", role: "status" }, computingText(), " ",
        h("span", { id: "computing-elapsed", class: "muted", text: elapsedText() })));
    return;
  }
  view.render(el, state);
  if (keepFocus && !el.contains(document.activeElement)) {
    const again = document.getElementById(keepFocus);
    if (again && el.contains(again)) again.focus({ preventScroll: true });
  }
}

function renderAll() {
  renderSummary();
  renderView();
  writeUrl();
}

// ---------------------------------------------------------------- refit queue (latest state wins)
// A click starts its request at once (no debounce); clicks made while one is in flight coalesce: when it
// ends, runRefit asks again for the state as it is then, so the latest state wins.
let inFlight = false;
let generation = 0;

// While an analysis is pending, the page says what it computes and counts the seconds (nothing looks frozen).
let pendingSince = null;
let ticker = null;
const elapsedSeconds = () => (pendingSince == null ? 0 : Math.floor((performance.now() - pendingSince) / 1000));
const elapsedText = () => { const s = elapsedSeconds(); return s >= 1 ? `${s} s` : ""; };
const refittingText = () => `refitting…${elapsedSeconds() >= 1 ? ` ${elapsedSeconds()} s` : ""}`;
// 12,345 (what toLocaleString("en") prints for a count, without loading the locale data on the first paint)
const thousands = (v) => String(v).replace(/\B(?=(\d{3})+(?!\d))/g, ",");
function computingText() {
  const n = state.meta?.n_rows;
  const k = state.meta ? keptItems().length : null;
  const size = k != null && n != null ? ` (${thousands(k)} items × ${thousands(n)} respondents)` : "";
  return `Computing correlations, factor analysis, parallel analysis…${size}`;
}
function tick() {
  if (!state.pending) { clearInterval(ticker); ticker = null; pendingSince = null; return; }
  const elapsed = document.getElementById("computing-elapsed");
  if (elapsed) elapsed.textContent = elapsedText();
  const spinner = document.getElementById("refitting");
  if (spinner) spinner.textContent = refittingText();
}

// What the server computes for our pending analysis (issue 14): its stage messages on the live channel carry our
// request's id; after 0.5 s a status line in the header says the latest stage and counts the seconds.
let stageFor = null;   // the id of the analysis request in flight
let stageMsg = null;   // its latest stage message
let stageStarted = 0;
let stageTimer = null;
function stageLine() {
  let line = document.getElementById("analysis-stage");
  if (!line) {
    line = h("p", { id: "analysis-stage", class: "analysis-stage spinner", role: "status", "aria-live": "polite", hidden: true },
      h("span", { class: "stage-text" }), " ", h("span", { class: "stage-seconds", "aria-hidden": "true" }));
    $("#summary").after(line);
  }
  return line;
}
function stageWords(msg) {
  if (!msg) return "starting…";
  if (msg.final) return "done, receiving the answer…";
  return `${msg.stage}${msg.total ? `, ${thousands(msg.done ?? 0)} of ${thousands(msg.total)}` : ""}`;
}
function renderStage() {
  const line = stageLine();
  const ms = stageFor ? performance.now() - stageStarted : 0;
  const show = stageFor != null && ms >= 500;
  if (line.hidden === show) line.hidden = !show;
  if (!show) return;
  const text = `Computing: ${stageWords(stageMsg)}`;
  const seconds = ms >= 1000 ? `(${Math.floor(ms / 1000)} s)` : "";
  const [words, secs] = line.children;
  if (words.textContent !== text) words.textContent = text;
  if (secs.textContent !== seconds) secs.textContent = seconds;
}
function startStage() {
  const bytes = crypto.getRandomValues(new Uint8Array(9));
  stageFor = Array.from(bytes, (b) => b.toString(16).padStart(2, "0")).join("");
  stageMsg = null;
  stageStarted = performance.now();
  if (!stageTimer) stageTimer = setInterval(renderStage, 250);
  return stageFor;
}
function stopStage() {
  stageFor = null;
  stageMsg = null;
  clearInterval(stageTimer);
  stageTimer = null;
  renderStage();
}
function analysisProgress(msg) {
  if (!stageFor || msg.request !== stageFor) return; // another page's analysis, or an earlier request of ours
  if (stageMsg && !msg.final && (stageMsg.final || msg.elapsed_s < stageMsg.elapsed_s)) return; // arrived late
  stageMsg = msg;
  renderStage();
}

// Returns whether a refit was asked for. The request leaves first; the summary (busy mark) is drawn while it travels.
function refit() {
  if (!state.dataset || (!state.meta && state.dropped.length)) return false;
  state.pending = true;
  if (!ticker) { pendingSince = performance.now(); ticker = setInterval(tick, 1000); }
  runRefit();
  renderSummary();
  return true;
}

async function runRefit() {
  if (inFlight) return; // the running request re-checks the state when it ends
  inFlight = true;
  const gen = ++generation;
  const dataset = state.dataset;
  const body = analysisRequest();
  const current = () => JSON.stringify([state.dataset, analysisRequest()]);
  const key = JSON.stringify([dataset, body]);
  const started = performance.now();
  let applied = false;
  try {
    const answer = await api.analyse(dataset, body, undefined, startStage());
    performance.mark("refit:answer"); // the answer read and parsed (the page's own share starts here)
    if (current() === key) {
      state.previous = state.analysis;
      state.analysis = answer;
      state.error = null;
      applied = true;
      const flags = answer?.efa?.flags || [];
      const alpha = answer?.reliability?.alpha;
      for (const it of answer?.items || []) {
        state.lastFlags[it.name] = flags.filter((f) => f.item === it.name);
        state.lastRows[it.name] = { ...it, alpha, ...boardView.loadingColumns(answer, it.name, it.construct) }; // also keeps a dropped row in its place on a sorted board
      }
    }
  } catch (e) {
    if (gen === generation) state.error = e;
  } finally {
    inFlight = false;
    stopStage();
  }
  if (!applied && current() !== key) { runRefit(); return; }
  state.pending = false;
  tick(); // stops the seconds
  // The first answer of a dataset may come before its item list: the charts wait for the list (loadDataset draws
  // them when it arrives) instead of being drawn twice, once without the item wording and constructs.
  const deferred = metaLoading && !state.meta;
  if (deferred) { renderSummary(); writeUrl(); } else renderAll();
  performance.mark("refit:rendered");
  const ms = performance.now() - started;
  timings.lastRefitMs = ms;
  if (timings.clickAt) timings.lastClickToUpdateMs = performance.now() - timings.clickAt;
  timings.marks.push({ what: "refit", ms, at: Date.now() });
  if (timings.firstFitMs == null && state.analysis) timings.firstFitMs = performance.now(); // since navigation start
  if (deferred) fittedLater = String(gen); else document.body.dataset.fitted = String(gen);
}
let fittedLater = null; // the mark of an answer drawn only once the item list came (loadDataset)

// ---------------------------------------------------------------- actions
function changed(action, detail, { push = false } = {}) {
  writeUrl(push);
  // The analysis request leaves before anything is drawn (refit draws the summary once it is on its way).
  if (!refit()) renderSummary();
  // The board shows the change at once; charts wait for the new analysis (no stale redraw). The settings
  // form already shows what was just changed: redrawing it now would pull the control from under the
  // keyboard (a Tab out of a threshold lost the focus); it is redrawn when the refit arrives.
  if (state.view === "board" || (!NEEDS_ANALYSIS.has(state.view) && state.view !== "settings")) renderView();
  if (action) broadcast(action, detail);
}

Object.assign(actions, {
  show(view) { state.view = view; writeUrl(true); renderAll(); },
  async openDataset(id) {
    state.dataset = id;
    state.dropped = [];
    state.reverse = null;
    state.analysis = null;
    state.previous = null;
    state.lastFlags = {};
    state.lastRows = {};
    state.parentSnapshot = null;
    state.subscale = "";
    clearHistory();
    state.view = "board";
    writeUrl(true);
    await loadDataset();
  },
  async openDemo() {
    const record = await api.openDemo();
    await refreshDatasets();
    await actions.openDataset(record.id);
  },
  async upload(form, onProgress) {
    const record = await api.upload(form, onProgress);
    await refreshDatasets();
    return record;
  },
  async deleteDataset(id) { // the start page's Delete; an open dataset that goes closes: back to the start view
    await api.deleteDataset(id);
    await refreshDatasets();
    if (state.dataset === id) {
      if (source) source.close();
      source = null; sourceFor = null; $("#follow").hidden = true;
      Object.assign(state, { dataset: null, meta: null, analysis: null, previous: null, error: null, pending: false,
        dropped: [], reverse: null, view: "start" });
      clearHistory();
      writeUrl(true);
    }
    renderAll();
  },
  toggle(name) {
    remember();
    const i = state.dropped.indexOf(name);
    if (i >= 0) state.dropped.splice(i, 1); else state.dropped.push(name);
    timings.clickAt = performance.now();
    changed(i >= 0 ? "restore" : "drop", `${i >= 0 ? "restored" : "dropped"} ${name}`);
  },
  undo() { if (undo()) changed("undo", "undid the last change"); },
  redo() { if (redo()) changed("redo", "redid a change"); },
  sortBy(key) {
    state.sort = state.sort.key === key ? { key, dir: -state.sort.dir } : { key, dir: key === "item_rest_r" ? 1 : ["alpha_if_deleted", "omega_if_deleted", "r_other_max", "primary_loading", "own_loading"].includes(key) ? -1 : 1 };
    renderView();
  },
  filter(part) { Object.assign(state.filter, part); renderView(); },
  setSubscale(name) { state.subscale = name || ""; writeUrl(); renderView(); },
  setStructure(on) { state.structure = on; renderView(); },
  setHeatmap(part) { Object.assign(state.heat, part); writeUrl(); renderView(); },
  setSetting(key, value) { remember(); state.settings[key] = value; changed("settings", settingText(key, value)); },
  setThreshold(key, value) {
    remember();
    if (value == null) delete state.thresholds[key]; else state.thresholds[key] = value;
    const label = thresholdLabel(key);
    changed("settings", value == null ? `set “${label}” back to its default` : `set “${label}” to ${value}`);
  },
  resetThresholds() { remember(); state.thresholds = {}; changed("settings", "set every flag threshold back to its default"); },
  toggleReverse(name) {
    remember();
    const current = new Set(state.reverse ?? state.meta.items.filter((it) => it.reverse).map((it) => it.name));
    if (current.has(name)) current.delete(name); else current.add(name);
    state.reverse = allItems().filter((n) => current.has(n));
    changed("settings", current.has(name) ? `scored ${name} reversed` : `scored ${name} as answered (not reversed)`);
  },
  resetReverse() { remember(); state.reverse = null; changed("settings", "set the reverse-keyed items back to the codebook"); },
  async restoreSnapshot(id) {
    try {
      const r = await api.restoreSnapshot(id);
      const items = r.items || r.kept || [];
      const s = r.settings || {};
      remember();
      const keep = new Set(items);
      const removedOrder = (r.removed || []).map((x) => x.item || x);
      state.dropped = [...removedOrder.filter((n) => !keep.has(n)), ...allItems().filter((n) => !keep.has(n) && !removedOrder.includes(n))];
      const settings = {};
      for (const k of Object.keys(settingDefaults())) if (s[k] !== undefined) settings[k] = s[k];
      applyShared({ dropped: state.dropped, reverse: Array.isArray(s.reverse) ? s.reverse : null,
        thresholds: s.thresholds || {}, settings });
      state.view = "board";
      state.parentSnapshot = { id: r.snapshot_id || id, name: r.name || id };
      changed("restore-snapshot", `restored snapshot “${r.name || id}”`, { push: true });
      toast(`Restored “${r.name || id}”: ${keptItems().length} items kept, ${state.dropped.length} dropped.`);
    } catch (e) {
      toast(`Could not restore: ${e.message}`);
    }
  },
  broadcast: (action, detail) => broadcast(action, detail),
});

// ---------------------------------------------------------------- data loading
async function refreshDatasets() {
  try {
    const got = await api.listDatasets();
    state.datasets = Array.isArray(got) ? got : got.datasets || [];
  } catch (e) {
    state.datasets = [];
  }
}

let metaLoading = false; // the open dataset's record (its item list) is on its way

async function loadDataset() {
  state.meta = null;
  metaLoading = true;
  if (!state.dropped.length) refit({ immediate: true }); // the whole pool: no need to wait for the item list
  try {
    state.meta = await api.getDataset(state.dataset);
    if (!state.meta.items && state.meta.meta) state.meta = { ...state.meta, ...state.meta.meta };
    metaLoading = false;
  } catch (e) {
    metaLoading = false;
    state.meta = null;
    state.dataset = null;
    state.view = "start";
    renderAll();
    toast(e.message);
    return;
  }
  const known = new Set(allItems());
  state.dropped = state.dropped.filter((n) => known.has(n));
  connectLive();
  renderAll();
  if (fittedLater) { document.body.dataset.fitted = fittedLater; fittedLater = null; }
  if (!state.analysis || state.dropped.length) refit({ immediate: true });
}

// ---------------------------------------------------------------- live collaboration
let source = null;
let sourceFor = null;

function connectLive() {
  if (sourceFor === state.dataset && source) return;
  if (source) source.close();
  sourceFor = state.dataset;
  state.live.listener = null;
  source = api.events(state.dataset);
  source.addEventListener("hello", (e) => {
    const msg = JSON.parse(e.data);
    state.live.listener = msg.listener;
    state.live.count = (msg.peers || 0) + 1;
    document.body.dataset.live = "on";
    renderLive();
    offerToFollow(msg.last);
  });
  source.addEventListener("presence", (e) => {
    state.live.count = JSON.parse(e.data).listeners;
    renderLive();
  });
  source.addEventListener("change", (e) => {
    const msg = JSON.parse(e.data);
    if (msg.action === "resampling") { runProgress(msg); return; } // a run's progress: not a teammate's change
    if (msg.action === "analysis_progress") { analysisProgress(msg); return; } // what our own analysis computes
    if (msg.sender && msg.sender === state.live.listener) return; // our own echo
    const s = msg.state || {};
    if (["drop", "restore", "undo", "redo", "settings", "restore-snapshot"].includes(msg.action) && s.dropped) {
      $("#follow").hidden = true; // the page now follows the team; an older offer is stale
      remember();
      const known = new Set(allItems());
      applyShared({ ...s, dropped: (s.dropped || []).filter((n) => known.has(n)) });
      writeUrl();
      renderAll();
      refit({ immediate: true });
    }
    const who = msg.who || "Someone";
    const text = changeText(who, msg);
    state.live.feed.unshift({ text, at: msg.at });
    state.live.feed = state.live.feed.slice(0, 30);
    toast(text);
    renderLive();
  });
  source.onerror = () => { document.body.dataset.live = "off"; renderLive(); };
}

// ---------------------------------------------------------------- resampling runs (the robustness view)
const ACTIVE_RUN = ["queued", "running"];
let runPoll = null;    // the fallback poll of the active run
let runHeardAt = 0;    // when the run last reported (live channel or poll)

function renderRobustness({ board = false } = {}) {
  if (state.view === "robustness" || (board && state.view === "board")) renderView();
}

// A progress message from the live channel ({run_id, done, total, state}); other pages' runs are ignored.
function runProgress(msg) {
  const r = state.robustness;
  if (!r.run || msg.run_id !== r.run.run_id) return;
  runHeardAt = Date.now();
  // a late message of a run cancelled, or marked interrupted (its process was not heard from; see server/runs.py)
  if (["cancelled", "interrupted"].includes(r.run.state) && msg.state !== r.run.state) return;
  r.run = { ...r.run, state: msg.state, progress: { done: msg.done, total: msg.total } };
  if (!ACTIVE_RUN.includes(msg.state)) fetchRun(msg.run_id);
  else renderRobustness();
}

// Reads the run; when it has ended, keeps its result (done) or its error (failed) and stops polling.
async function fetchRun(runId) {
  const r = state.robustness;
  try {
    const got = await api.getRun(runId);
    if (!r.run || r.run.run_id !== runId) return;
    runHeardAt = Date.now();
    const { result, ...run } = got;
    r.run = run;
    if (run.state === "done" && result) r.result = result;
    if (run.state === "failed") r.error = run.error?.message || "The run failed.";
    if (run.state === "interrupted") r.error = run.error?.message || "The server process computing this run stopped. Start the run again.";
  } catch (e) {
    if (r.run && r.run.run_id === runId) r.error = e.message;
  }
  if (!r.run || !ACTIVE_RUN.includes(r.run.state)) stopRunPoll();
  renderRobustness({ board: true });
}

function stopRunPoll() { clearInterval(runPoll); runPoll = null; }

// Every second while the run is active, ask the server if the live channel is off or has been quiet.
function startRunPoll() {
  stopRunPoll();
  runPoll = setInterval(() => {
    const run = state.robustness.run;
    if (!run || !ACTIVE_RUN.includes(run.state)) { stopRunPoll(); return; }
    if (document.body.dataset.live !== "on" || Date.now() - runHeardAt > 2500) fetchRun(run.run_id);
  }, 1000);
}

Object.assign(actions, {
  async startRun() {
    const r = state.robustness;
    if (!state.dataset || r.busy) return;
    r.busy = true; r.error = null;
    renderRobustness();
    const items = keptItems();
    try {
      const { result, ...run } = await api.startRun(state.dataset, { ...analysisRequest(), n_resamples: r.n });
      Object.assign(r, { run, result: null, forDataset: state.dataset, forItems: items });
      runHeardAt = Date.now();
      if (result) r.result = result;
      startRunPoll();
    } catch (e) {
      r.error = e.message;
    }
    r.busy = false;
    renderRobustness();
  },
  async cancelRun() {
    const r = state.robustness;
    if (!r.run || !ACTIVE_RUN.includes(r.run.state)) return;
    r.busy = true;
    renderRobustness();
    try {
      const got = await api.cancelRun(r.run.run_id);
      if (got) { const { result, ...run } = got; r.run = run; } else { // 204: it had just ended, and is now forgotten
        r.run = { ...r.run, state: "cancelled" };
        r.error = "The run had already ended when Cancel arrived; the server has forgotten it.";
      }
    } catch (e) {
      r.error = e.message;
    }
    stopRunPoll();
    r.busy = false;
    renderRobustness();
  },
});

// "Ana dropped O8", "Ben set correlation to polychoric": what teammates read in the toast and the feed.
function settingText(key, value) {
  return `set ${settingName(key)} to ${optionLabel(key, value)}`;
}
function changeText(who, msg) {
  const d = String(msg.detail || "").trim();
  const verbs = /^(dropped|restored|undid|redid|set|scored|saved)\b/;
  if (!d) return `${who}: ${msg.action}`;
  return verbs.test(d) ? `${who} ${d}` : `${who}: ${d}`;
}

let offered = null; // the shared state the follow bar offers
function hideFollowIfSame() {
  const bar = $("#follow");
  if (!bar.hidden && offered && sameShared(offered, shared())) bar.hidden = true;
}

const sameShared = (a, b) => JSON.stringify(normalise(a)) === JSON.stringify(normalise(b));
function normalise(s) {
  return { dropped: [...(s.dropped || [])].sort(), reverse: s.reverse ? [...s.reverse].sort() : null,
    settings: { ...settingDefaults(), ...(s.settings || {}) }, thresholds: s.thresholds || {} };
}

// A stable random id for this browser, shared by its tabs (localStorage), sent with every change: a page
// does not offer to follow a change made in another tab of the same browser.
let pageBrowserId = null;
function browserId() {
  const ok = (v) => typeof v === "string" && /^[A-Za-z0-9_-]{8,64}$/.test(v);
  try {
    const kept = localStorage.getItem("scalewright.browser");
    if (ok(kept)) return kept;
  } catch { /* storage refused: an id for this page only */ }
  if (!pageBrowserId) {
    const bytes = crypto.getRandomValues(new Uint8Array(12));
    pageBrowserId = `b${[...bytes].map((b) => b.toString(16).padStart(2, "0")).join("")}`;
  }
  try { localStorage.setItem("scalewright.browser", pageBrowserId); } catch { /* as above */ }
  return pageBrowserId;
}

// A page that joins late hears the team's last change; if its own state differs, it may follow.
function offerToFollow(last) {
  const bar = clear($("#follow"));
  bar.hidden = true;
  offered = null;
  if (last && last.browser && last.browser === browserId()) return; // our own change, from another tab
  if (!last || !last.state || !Array.isArray(last.state.dropped) || sameShared(last.state, shared())) return;
  offered = last.state;
  const n = last.state.dropped.length;
  // It may be an hour old: say when, not "is working".
  bar.append(h("span", { text: `${last.who || "Someone"} changed this dataset at ${(last.at || "").slice(11, 16)} UTC (${n} item${n === 1 ? "" : "s"} dropped${last.detail ? `; last change: ${last.detail}` : ""}). Your view differs. ` }),
    h("button", { class: "primary", id: "follow-team", text: "Follow the team", onclick: () => {
      bar.hidden = true;
      remember();
      const known = new Set(allItems());
      applyShared({ ...last.state, dropped: last.state.dropped.filter((x) => !known.size || known.has(x)) });
      writeUrl();
      renderAll();
      refit({ immediate: true });
    } }), " ",
    h("button", { text: "Keep my view", onclick: () => { bar.hidden = true; } }));
  bar.hidden = false;
}

function broadcast(action, detail) {
  if (!state.dataset) return;
  api.postEvent(state.dataset, { who: state.who || "", action, detail: String(detail || ""), sender: state.live.listener,
    browser: browserId(), state: shared() }).catch(() => {});
}

function renderLive() {
  const el = clear($("#live"));
  const on = document.body.dataset.live === "on";
  const others = (state.live.count || 1) - 1;
  el.append(h("span", { class: `dot ${on ? "on" : "off"}`, "aria-hidden": "true" }),
    h("span", { id: "live-text", text: on ? `live${others > 0 ? ` · ${others} other page${others === 1 ? "" : "s"}` : ""}` : "offline" }));
  const feed = clear($("#feed"));
  for (const f of state.live.feed.slice(0, 8)) feed.append(h("li", { text: `${(f.at || "").slice(11, 16)} ${f.text}` }));
}

let toastTimer = null;
function toast(text) {
  const t = $("#toast");
  t.textContent = text;
  t.hidden = false;
  clearTimeout(toastTimer);
  toastTimer = setTimeout(() => { t.hidden = true; }, 4000);
}

// ---------------------------------------------------------------- chrome wiring
function wireChrome() {
  $("#undo").addEventListener("click", () => actions.undo());
  $("#redo").addEventListener("click", () => actions.redo());
  $("#save-snapshot").addEventListener("click", () => snapshotsView.openDialog(state));
  const who = $("#who");
  who.value = state.who;
  who.addEventListener("change", () => { state.who = who.value.trim(); localStorage.setItem("scalewright.who", state.who); });
  const proj = $("#projector");
  const applyProjector = () => {
    document.body.classList.toggle("projector", state.projector);
    document.documentElement.classList.toggle("projector", state.projector);
    proj.setAttribute("aria-pressed", String(state.projector));
  };
  applyProjector();
  proj.addEventListener("click", () => {
    state.projector = !state.projector;
    localStorage.setItem("scalewright.projector", state.projector ? "1" : "0");
    applyProjector();
    renderView();
  });
  const dlg = $("#snapshot-dialog");
  dlg.querySelector("form").addEventListener("submit", async (e) => {
    e.preventDefault();
    await snapshotsView.submitDialog(state);
  });
  dlg.querySelector("#snap-cancel").addEventListener("click", () => dlg.close());
  document.addEventListener("keydown", (e) => {
    if (dlg.open) return;
    const inField = ["INPUT", "TEXTAREA", "SELECT"].includes(e.target.tagName);
    const mod = e.ctrlKey || e.metaKey;
    if (mod && !inField && (e.key === "z" || e.key === "Z")) { e.preventDefault(); if (e.shiftKey) actions.redo(); else actions.undo(); }
    else if (mod && !inField && (e.key === "y" || e.key === "Y")) { e.preventDefault(); actions.redo(); }
  });
  window.addEventListener("popstate", async () => {
    const before = state.dataset;
    readUrl();
    if (state.dataset !== before) { if (state.dataset) await loadDataset(); else renderAll(); } else { renderAll(); refit(); }
  });
}

// The choices, defaults and flag thresholds the server accepts: read once, before the URL is.
async function loadOptions() {
  try {
    state.options = await api.options();
    state.optionsError = null;
  } catch (e) {
    state.options = null;
    state.optionsError = e;
  }
}

async function boot() {
  const t0 = performance.now();
  await loadOptions();
  readUrl();
  wireChrome();
  if (state.optionsError) toast(`The analysis settings could not be read from the server: ${state.optionsError.message}`);
  renderAll();
  const lists = refreshDatasets();
  if (state.dataset) await loadDataset();
  await lists;
  if (!state.dataset || state.view === "start" || state.view === "stability") renderAll();
  timings.bootMs = performance.now() - t0;
  document.body.dataset.booted = "1";
}

boot();
