// The one state object of the dashboard, and its sync with the page URL.
// URL keys: d (dataset id), drop (removed items, in the order they were removed), rev (reverse-keyed
// override), corr, ext, rot, miss, nf (number of factors), any other served setting under its own name,
// th (flag thresholds k:v,...), v (view), sub (the subscale the board and the alpha curves show),
// cut (heatmap loading cut-off, when not the served default), hord (heatmap row order: pool).
// Settings equal to the served default stay out of the URL.
// The choices, defaults and thresholds come from the server (GET /api/options, in state.options).

export const VIEWS = ["start", "board", "loadings", "correlations", "alpha", "factors", "robustness", "settings", "snapshots", "stability", "confirmation", "workspace"];

// Short URL keys of the settings that had them before the options were served; others use their name.
const URL_KEYS = { correlation: "corr", extraction: "ext", rotation: "rot", missing: "miss", n_factors: "nf" };

export const state = {
  // shared (in the URL)
  dataset: null,          // dataset id
  dropped: [],            // removed item names, in removal order
  reverse: null,          // null = the codebook's reverse-keyed items; else a list of names
  settings: {},           // analysis settings by name (the served defaults, then what the team chose)
  thresholds: {},         // overrides of the flag rules
  view: "start",
  subscale: "",           // "" = whole-pool figures on the board and the alpha curves; else a group of analysis.constructs
  // local to this page
  options: null,          // GET /api/options: {settings: [{name, type, default, choices?, min?, max?, help}], thresholds: [...]}
  optionsError: null,     // why the options could not be read (the settings page says so)
  meta: null,             // dataset record {id, name, n_rows, items: [...], warnings}
  analysis: null,         // last analysis answer
  previous: null,         // the analysis before it (for the change marks)
  pending: false,         // a refit is queued or running
  error: null,            // last analysis error (ApiError)
  lastFlags: {},          // item -> flags seen the last time it was active (for snapshot reasons)
  lastRows: {},           // item -> its board row (+ the alpha of the set) the last time it was active
  structure: false,       // loadings heatmap shows structure instead of pattern
  heat: { cutoff: null, poolOrder: false, row: null }, // heatmap: hide |loading| below (null = served default; URL cut), pool order (URL hord), keyboard row
  sort: { key: "order", dir: 1 },
  filter: { construct: "", flag: "" },
  datasets: [],
  parentSnapshot: null,   // {id, name} of the snapshot last restored: the next save names it as parent
  who: localStorage.getItem("scalewright.who") || "",
  projector: localStorage.getItem("scalewright.projector") === "1",
  live: { listener: null, peers: 0, feed: [] },
  // what each view keeps between renders (views hold no state of their own)
  board: { focus: null },                 // the item row to keep the keyboard focus on
  renders: { loadings: 0, alpha: 0 },     // chart renders, exposed as data-rendered for the tests
  start: { upload: null,                  // {record} or {error} of the last upload
    form: { responses: null, codebook: null, missing: "", idColumn: "", smin: "", smax: "" } },
  snapshots: { list: [], compareWith: null, comparison: null, message: null },
  stability: {
    retest: null, retestAsked: null,        // the last retest answer and the request behind it
    agreement: null, agreementAsked: null,  // the last agreement answer and {ratings, level} behind it
    retestSummary: "", agreementSummary: "",
    pick: { first: null, second: null, itemsSecond: "", score: "sum", level: "ordinal", text: "", file: null, fileText: null,
      source: "current", snapshots: [], snapshotsFor: null, wavesFor: null, byConstruct: false },
  },
  workspace: { onlyThis: false, message: null },
  corr: { mode: "r", cursor: [0, 0], pair: null, residuals: null, busy: null, renders: 0 }, // correlation view: r or residuals, the cursor cell, the open pair, the last residual answer {key, answer|error}, charts drawn
  confirmation: { answer: null, answerFor: null, asked: null, structure: "codebook", split: "0.5", busy: false }, // hold-out card
  // resampling run of the robustness view: the run record (no result), its result when done, the resamples asked,
  // a start or cancel in flight, the last error; dataset and items the run was started for
  robustness: { run: null, result: null, n: 200, busy: false, error: null, forDataset: null, forItems: null, sort: "order" },
};

// ---- settings from the served options
/** The served default of every analysis setting, by name ({} until the options are read). */
export function settingDefaults() {
  return Object.fromEntries((state.options?.settings || []).map((o) => [o.name, o.default ?? null]));
}

/** The served default of every flag threshold, by name. */
/** The served default of every display option (GET /api/options `display`), by name. */
export function displayDefaults() {
  return Object.fromEntries((state.options?.display || []).map((o) => [o.name, o.default ?? null]));
}

/** The heatmap's loading cut-off: the page's choice, else the served default, else 0 (show all). */
export function loadingCutoff() {
  return state.heat.cutoff ?? displayDefaults().loading_cutoff ?? 0;
}

export function thresholdDefaults() {
  return Object.fromEntries((state.options?.thresholds || []).map((t) => [t.name, t.default]));
}

/** What the save-snapshot dialog may include: the last successful comparisons of this page. */
export function lastStability() {
  const st = state.stability;
  const retestOk = st.retest && !st.retest.error && st.retestAsked && st.retestAsked.first === state.dataset;
  const agreementOk = st.agreement && !st.agreement.error;
  return {
    retest: retestOk ? st.retestAsked : null, retestSummary: retestOk ? st.retestSummary : "",
    agreement: agreementOk ? st.agreementAsked : null, agreementSummary: agreementOk ? st.agreementSummary : "",
  };
}

/** The finished resampling result and whether it is for the current dataset and items (null when there is none). */
export function robustnessResult() {
  const r = state.robustness;
  if (!r.result || r.forDataset !== state.dataset) return null;
  const now = keptItems();
  const current = Array.isArray(r.forItems) && r.forItems.length === now.length && r.forItems.every((n, i) => n === now[i]);
  return { result: r.result, current };
}

// ---- undo / redo over the shared part of the state
const past = [];
const future = [];

export function shared() {
  return {
    dropped: [...state.dropped],
    reverse: state.reverse ? [...state.reverse] : null,
    settings: { ...state.settings },
    thresholds: { ...state.thresholds },
  };
}

export function applyShared(s) {
  state.dropped = [...(s.dropped || [])];
  state.reverse = s.reverse ? [...s.reverse] : null;
  state.settings = { ...settingDefaults(), ...(s.settings || {}) };
  state.thresholds = { ...(s.thresholds || {}) };
}

export function remember() {
  past.push(JSON.stringify(shared()));
  if (past.length > 200) past.shift();
  future.length = 0;
}

export function undo() {
  if (!past.length) return false;
  future.push(JSON.stringify(shared()));
  applyShared(JSON.parse(past.pop()));
  return true;
}

export function redo() {
  if (!future.length) return false;
  past.push(JSON.stringify(shared()));
  applyShared(JSON.parse(future.pop()));
  return true;
}

export const canUndo = () => past.length > 0;
export const canRedo = () => future.length > 0;
export function clearHistory() { past.length = 0; future.length = 0; }

// ---- derived
export function allItems() { return state.meta ? state.meta.items.map((it) => it.name) : []; }
export function keptItems() {
  const gone = new Set(state.dropped);
  return allItems().filter((n) => !gone.has(n));
}
// name -> item record of the open dataset, rebuilt when state.meta is replaced (a view asks per item, per render)
const metaIndex = { of: null, byName: new Map() };
export function itemMeta(name) {
  if (!state.meta) return undefined;
  if (metaIndex.of !== state.meta || metaIndex.items !== state.meta.items) {
    metaIndex.byName = new Map();
    for (const it of state.meta.items || []) if (!metaIndex.byName.has(it.name)) metaIndex.byName.set(it.name, it);
    metaIndex.of = state.meta;
    metaIndex.items = state.meta.items;
  }
  return metaIndex.byName.get(name);
}

/** The chosen subscale's block of the analysis (null for the whole pool or when the group is gone). */
export function subscaleBlock(analysis = state.analysis) {
  if (!state.subscale) return null;
  return analysis?.constructs?.[state.subscale] || null;
}

/** The groups the subscale selector offers: the analysis's constructs that carry an item table. */
export function subscaleNames(analysis = state.analysis) {
  return Object.entries(analysis?.constructs || {}).filter(([, b]) => Array.isArray(b?.item_table)).map(([name]) => name);
}

export function analysisRequest() {
  const body = {};
  for (const [k, v] of Object.entries(state.settings)) if (v !== undefined) body[k] = v;
  if (state.dropped.length) body.items = keptItems(); // no items = the whole pool
  if (state.reverse) body.reverse = state.reverse;
  if (Object.keys(state.thresholds).length) body.thresholds = state.thresholds;
  return body;
}

// ---- URL sync
// Item names are joined with commas; a comma or percent sign inside a name is escaped first.
const escName = (n) => String(n).replace(/%/g, "%25").replace(/,/g, "%2C");
const unescName = (n) => n.replace(/%2C/gi, ",").replace(/%25/g, "%");
const list = (v) => (v ? v.split(",").filter(Boolean).map(unescName) : []);
const joinNames = (names) => names.map(escName).join(",");

// A setting's value as read from the URL, by its served type.
function fromUrl(option, raw) {
  if (option.type === "integer" || option.type === "number") {
    const n = Number(raw);
    return Number.isNaN(n) ? option.default ?? null : n;
  }
  if (option.type === "boolean") return raw === "1" || raw === "true";
  return raw;
}

export function readUrl() {
  const q = new URLSearchParams(location.search);
  state.dataset = q.get("d") || null;
  state.dropped = list(q.get("drop"));
  state.reverse = q.has("rev") ? list(q.get("rev")) : null;
  state.settings = {};
  for (const o of state.options?.settings || []) {
    const raw = q.get(URL_KEYS[o.name] || o.name);
    state.settings[o.name] = raw == null || raw === "" ? o.default ?? null : fromUrl(o, raw);
  }
  state.thresholds = {};
  for (const pair of list(q.get("th"))) {
    const [k, v] = pair.split(":");
    if (k && v !== undefined && !Number.isNaN(Number(v))) state.thresholds[k] = Number(v);
  }
  state.subscale = q.get("sub") || "";
  const cut = q.get("cut");
  state.heat.cutoff = cut != null && cut !== "" && !Number.isNaN(Number(cut)) ? Number(cut) : null;
  state.heat.poolOrder = q.get("hord") === "pool";
  const v = q.get("v");
  state.view = VIEWS.includes(v) ? v : state.dataset ? "board" : "start";
}

export function writeUrl(push = false) {
  const q = new URLSearchParams();
  const token = new URLSearchParams(location.search).get("token");
  if (token) q.set("token", token);
  if (state.dataset) q.set("d", state.dataset);
  if (state.dropped.length) q.set("drop", joinNames(state.dropped));
  if (state.reverse) q.set("rev", joinNames(state.reverse));
  const defaults = settingDefaults();
  for (const [k, v] of Object.entries(state.settings)) {
    if (v != null && v !== defaults[k]) q.set(URL_KEYS[k] || k, String(v));
  }
  const th = Object.entries(state.thresholds).map(([k, v]) => `${k}:${v}`);
  if (th.length) q.set("th", th.join(","));
  if (state.view !== "start" || state.dataset) q.set("v", state.view);
  if (state.subscale) q.set("sub", state.subscale);
  if (state.heat.cutoff != null && state.heat.cutoff !== displayDefaults().loading_cutoff) q.set("cut", String(state.heat.cutoff));
  if (state.heat.poolOrder) q.set("hord", "pool");
  const url = `${location.pathname}?${q.toString().replace(/%2C/g, ",").replace(/%3A/g, ":")}`;
  if (url !== location.pathname + location.search) {
    if (push) history.pushState(null, "", url); else history.replaceState(null, "", url);
  }
}

// ---- actions registry: main.js fills it in, views call it (no import cycle)
export const actions = {};
