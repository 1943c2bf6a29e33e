// The one state object of the dashboard, and its sync with the page URL.
// URL keys: d (dataset id), drop (removed items, in the order they were removed), rev (reverse-keyed
// override), corr, ext, rot, miss, nf (number of factors), th (flag thresholds k:v,...), v (view).

export const DEFAULT_SETTINGS = Object.freeze({
  correlation: "pearson", extraction: "minres", rotation: "oblimin", missing: "pairwise", n_factors: null,
});

export const VIEWS = ["start", "board", "loadings", "alpha", "factors", "settings", "snapshots", "stability", "workspace"];

export const state = {
  // shared (in the URL)
  dataset: null,          // dataset id
  dropped: [],            // removed item names, in removal order
  reverse: null,          // null = the codebook's reverse-keyed items; else a list of names
  settings: { ...DEFAULT_SETTINGS },
  thresholds: {},         // overrides of the flag rules
  view: "start",
  // local to this page
  meta: null,             // dataset record {id, name, n_rows, items: [...], warnings}
  analysis: null,         // last analysis answer
  previous: null,         // the analysis before it (for the change marks)
  pending: false,         // a refit is queued or running
  error: null,            // last analysis error (ApiError)
  lastFlags: {},          // item -> flags seen the last time it was active (for snapshot reasons)
  lastRows: {},           // item -> its board row (+ the alpha of the set) the last time it was active
  structure: false,       // loadings heatmap shows structure instead of pattern
  sort: { key: "order", dir: 1 },
  filter: { construct: "", flag: "" },
  datasets: [],
  parentSnapshot: null,   // {id, name} of the snapshot last restored: the next save names it as parent
  who: localStorage.getItem("scalewright.who") || "",
  projector: localStorage.getItem("scalewright.projector") === "1",
  live: { listener: null, peers: 0, feed: [] },
};

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
  state.settings = { ...DEFAULT_SETTINGS, ...(s.settings || {}) };
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
export function itemMeta(name) { return state.meta ? state.meta.items.find((it) => it.name === name) : undefined; }

export function analysisRequest() {
  const body = {
    missing: state.settings.missing,
    correlation: state.settings.correlation,
    extraction: state.settings.extraction,
    rotation: state.settings.rotation,
    n_factors: state.settings.n_factors,
  };
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

export function readUrl() {
  const q = new URLSearchParams(location.search);
  state.dataset = q.get("d") || null;
  state.dropped = list(q.get("drop"));
  state.reverse = q.has("rev") ? list(q.get("rev")) : null;
  state.settings = {
    correlation: q.get("corr") || DEFAULT_SETTINGS.correlation,
    extraction: q.get("ext") || DEFAULT_SETTINGS.extraction,
    rotation: q.get("rot") || DEFAULT_SETTINGS.rotation,
    missing: q.get("miss") || DEFAULT_SETTINGS.missing,
    n_factors: q.get("nf") ? Number(q.get("nf")) : null,
  };
  state.thresholds = {};
  for (const pair of list(q.get("th"))) {
    const [k, v] = pair.split(":");
    if (k && v !== undefined && !Number.isNaN(Number(v))) state.thresholds[k] = Number(v);
  }
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
  const s = state.settings;
  if (s.correlation !== DEFAULT_SETTINGS.correlation) q.set("corr", s.correlation);
  if (s.extraction !== DEFAULT_SETTINGS.extraction) q.set("ext", s.extraction);
  if (s.rotation !== DEFAULT_SETTINGS.rotation) q.set("rot", s.rotation);
  if (s.missing !== DEFAULT_SETTINGS.missing) q.set("miss", s.missing);
  if (s.n_factors) q.set("nf", String(s.n_factors));
  const th = Object.entries(state.thresholds).map(([k, v]) => `${k}:${v}`);
  if (th.length) q.set("th", th.join(","));
  if (state.view !== "start" || state.dataset) q.set("v", state.view);
  const url = `${location.pathname}?${q.toString().replace(/%2C/g, ",").replace(/%3A/g, ":")}`;
  if (url !== location.pathname + location.search) {
    if (push) history.pushState(null, "", url); else history.replaceState(null, "", url);
  }
}

// ---- actions registry: main.js fills it in, views call it (no import cycle)
export const actions = {};
