// Robustness: a resampling run of the current analysis (bootstrap of the respondents, POST
// /api/datasets/{id}/resampling), its progress, and what it found: how often each flag comes back, how often
// each number of factors is suggested, and intervals of the coefficients and loadings.
import { flagWord, optionLabel, settingName } from "../labels.js";
import { actions, robustnessResult } from "../state.js";
import { clear, fmt, h, note, section, table } from "./dom.js";

// The bounds the server accepts for n_resamples (server/runs.py MIN_RESAMPLES, MAX_RESAMPLES).
const FEWEST = 2;
const MOST = 2000;
const ACTIVE = ["queued", "running"];
const STATE_WORDS = { queued: "waiting to start", running: "running", done: "done", cancelled: "cancelled", failed: "failed",
  interrupted: "interrupted" };
// After these states the count says how the run ended (interrupted: its server process stopped; the message is r.error).
const ENDINGS = { done: " — done", cancelled: " — cancelled", interrupted: " — interrupted" };
const SVG = "http://www.w3.org/2000/svg";

const pctText = (v) => (v == null ? "—" : `${Math.round(v * 100)} %`);

function svg(tag, attrs = {}, ...children) {
  const el = document.createElementNS(SVG, tag);
  for (const [k, v] of Object.entries(attrs)) if (v != null) el.setAttribute(k, String(v));
  for (const c of children) if (c) el.append(c);
  return el;
}

/** The highest flag rate of an item row (0 when it has none). */
const topRate = (row) => Math.max(0, ...Object.values(row.flags || {}));

function runForm(state) {
  const r = state.robustness;
  const run = r.run && r.forDataset === state.dataset ? r.run : null;
  const active = run && ACTIVE.includes(run.state);
  const n = h("input", { type: "number", id: "rob-n", min: String(FEWEST), max: String(MOST), step: "1", value: String(r.n), size: "6",
    oninput: (e) => { const v = Number(e.target.value); if (Number.isInteger(v)) r.n = v; } });
  const bits = [h("div", { class: "toolbar" },
    h("label", { for: "rob-n" }, "Resamples "), n,
    h("span", { class: "muted", text: `(${FEWEST} to ${MOST})` }),
    h("button", { class: "primary", id: "rob-start", text: "Start", disabled: r.busy || active,
      onclick: () => actions.startRun() }),
    active ? h("button", { id: "rob-cancel", text: "Cancel", disabled: r.busy, onclick: () => actions.cancelRun() }) : null)];
  if (run) {
    const done = run.progress?.done ?? 0;
    const total = run.progress?.total ?? run.n_resamples;
    bits.push(h("div", { class: "rob-progress", id: "rob-progress", dataset: { state: run.state } },
      h("label", { for: "rob-bar", text: `Run ${STATE_WORDS[run.state] || run.state}: ` }),
      h("progress", { id: "rob-bar", max: String(total), value: String(done) }),
      h("span", { id: "rob-count", role: "status", text: ` ${done} of ${total} resamples${ENDINGS[run.state] || ""}` })));
  }
  if (r.error) bits.push(note(r.error, "error"));
  return bits;
}

function settingsLine(run, result) {
  const s = run?.settings || {};
  const parts = ["correlation", "extraction", "rotation", "missing"].filter((k) => s[k] != null)
    .map((k) => `${settingName(k)}: ${optionLabel(k, s[k])}`);
  parts.push(`${result.n_factors ?? "no"} factor${result.n_factors === 1 ? "" : "s"}`);
  return `${result.n_resamples} resamples of the respondents (with replacement), seed ${result.seed}, `
    + `${(s.items || []).length || result.items.length} items; ${parts.join("; ")}.`
    + (result.n_failed ? ` ${result.n_failed} resample(s) could not be analysed (${(result.errors || []).join("; ")}).` : "");
}

function flagTable(state, result) {
  const r = state.robustness;
  const sort = r.sort || "order";
  const rows = result.items.map((row, i) => ({ row, i, top: topRate(row) }));
  if (sort === "flag") rows.sort((a, b) => b.top - a.top || a.i - b.i);
  const rerender = (key) => { r.sort = key; const box = document.getElementById("rob-flags"); if (box) box.replaceWith(flagTable(state, result)); };
  const sortButton = h("button", { class: "link", id: "rob-sort-flag", text: "Most frequent flag",
    onclick: () => rerender(sort === "flag" ? "order" : "flag") });
  const prim = (row) => {
    const best = Object.entries(row.primary || {}).sort((a, b) => b[1] - a[1])[0];
    return best ? `${best[0]} in ${pctText(best[1])}` : "—";
  };
  const flagText = (row) => {
    const kinds = Object.entries(row.flags || {}).sort((a, b) => b[1] - a[1]);
    return kinds.length ? kinds.map(([k, v]) => `${flagWord(k)} in ${pctText(v)} of resamples`).join("; ") : "no flag in any resample";
  };
  return h("table", { class: "grid rob-flags", id: "rob-flags" },
    h("caption", { text: `First-quarter removal: among the first ${result.quarter} items the pruning path would remove.` }),
    h("thead", {}, h("tr", {},
      h("th", { scope: "col", text: "Item" }),
      h("th", { scope: "col", text: "Flags on all respondents" }),
      h("th", { scope: "col", "aria-sort": sort === "flag" ? "descending" : "none" }, sortButton),
      h("th", { scope: "col", text: "Primary factor" }),
      h("th", { scope: "col", text: "First-quarter removal" }))),
    h("tbody", {}, rows.map(({ row, top }) => h("tr", { dataset: { item: row.name } },
      h("th", { scope: "row", text: row.name }),
      h("td", { text: (row.flags_full_sample || []).map(flagWord).join(", ") || "none" }),
      h("td", { class: "rob-rate" }, h("span", { class: "rob-top", text: pctText(top) }), " ", h("span", { class: "muted", text: flagText(row) })),
      h("td", { text: prim(row) }),
      h("td", { text: pctText(row.early_removal) })))));
}

function retentionTable(result) {
  const ret = result.retention || {};
  const counts = new Set([...(ret.parallel || []), ...(ret.map || [])].map((d) => d.n_factors));
  const rate = (list, m) => (list || []).find((d) => d.n_factors === m)?.rate ?? 0;
  const bar = (v, kind) => h("span", { class: `rob-bar ${kind}` }, h("span", { class: "fill", style: { width: `${Math.round(v * 100)}%` } }),
    h("span", { class: "num", text: pctText(v) }));
  const full = ret.full_sample || {};
  return table(["Factors", `Parallel analysis (all respondents: ${full.parallel ?? "—"})`, `MAP (all respondents: ${full.map ?? "—"})`],
    [...counts].sort((a, b) => a - b).map((m) => [String(m), bar(rate(ret.parallel, m), "pa"), bar(rate(ret.map, m), "map")]),
    { className: "grid rob-retention", caption: "Share of resamples in which each rule suggests this many factors." });
}

// The coefficients' intervals, one whisker each on a shared scale (dot: all respondents; line: interval).
function whiskers(result) {
  const rows = [["Alpha", result.coefficients?.alpha], ["Omega total", result.coefficients?.omega_total],
    ["Omega hierarchical", result.coefficients?.omega_hierarchical]];
  for (const s of result.subscales || []) rows.push([`${s.name}: alpha`, s.alpha], [`${s.name}: omega`, s.omega]);
  const shown = rows.filter(([, c]) => c);
  const ends = shown.flatMap(([, c]) => [c.percentile?.low, c.percentile?.high, c.bca?.low, c.bca?.high, c.estimate]).filter((v) => v != null);
  const lo = ends.length ? Math.max(-1, Math.floor((Math.min(...ends) - 0.02) * 20) / 20) : 0;
  const hi = ends.length ? Math.min(1, Math.ceil((Math.max(...ends) + 0.02) * 20) / 20) : 1;
  const W = 260; const H = 22; const pad = 8;
  const x = (v) => pad + ((v - lo) / (hi - lo || 1)) * (W - 2 * pad);
  const draw = (c, label) => {
    const p = c.percentile || {};
    const words = `${label}: ${fmt(c.estimate)}, interval ${fmt(p.low)} to ${fmt(p.high)}`;
    if (p.low == null || p.high == null) return h("span", { class: "muted", text: p.reason || "no interval" });
    const g = svg("svg", { class: "rob-whisker", width: W, height: H, viewBox: `0 0 ${W} ${H}`, role: "img", "aria-label": words },
      svg("line", { x1: x(p.low), x2: x(p.high), y1: H / 2, y2: H / 2, class: "arm" }),
      svg("line", { x1: x(p.low), x2: x(p.low), y1: 5, y2: H - 5, class: "arm" }),
      svg("line", { x1: x(p.high), x2: x(p.high), y1: 5, y2: H - 5, class: "arm" }),
      c.estimate != null ? svg("circle", { cx: x(c.estimate), cy: H / 2, r: 4, class: "est" }) : null);
    return g;
  };
  const scale = h("span", { class: "rob-scale muted", text: `scale ${fmt(lo, 2)} to ${fmt(hi, 2)}` });
  return h("table", { class: "grid rob-intervals", id: "rob-intervals" },
    h("caption", { text: `${Math.round((result.level || 0.95) * 100)} % intervals over the resamples; dot: all respondents, line: percentile interval. ${result.bca_note || ""}` }),
    h("thead", {}, h("tr", {}, ["Coefficient", "All respondents", "Percentile interval", "BCa interval"].map((t) => h("th", { scope: "col", text: t })),
      h("th", { scope: "col" }, "Whisker ", scale))),
    h("tbody", {}, shown.map(([label, c]) => h("tr", {},
      h("th", { scope: "row", text: label }),
      h("td", { text: fmt(c.estimate) }),
      h("td", { text: `${fmt(c.percentile?.low)} to ${fmt(c.percentile?.high)}` }),
      h("td", { text: c.bca && c.bca.low != null ? `${fmt(c.bca.low)} to ${fmt(c.bca.high)}` : "—", title: c.bca ? c.bca.reason || "" : c.bca_reason || "" }),
      h("td", {}, draw(c, label))))));
}

function loadingTable(result) {
  const factors = result.factors || [];
  if (!factors.length) return note("No factor model on all respondents, so there are no loading intervals.");
  return h("div", { class: "rob-scroll", tabindex: "0", role: "region", "aria-label": "Loadings with their intervals" },
    table(["Item", ...factors.map((f) => `${f}: loading [interval]`)],
      result.items.map((row) => [row.name, ...factors.map((f) => {
        const l = (row.loadings || []).find((x) => x.factor === f);
        return l ? `${fmt(l.estimate, 2)} [${fmt(l.percentile?.low, 2)}, ${fmt(l.percentile?.high, 2)}]` : "—";
      })]), { className: "grid rob-loadings" }));
}

export function render(container, state) {
  clear(container);
  const r = state.robustness;
  const found = robustnessResult();
  const run = r.run && r.forDataset === state.dataset ? r.run : null;
  const parts = [
    h("p", { class: "muted", text: "Draw the respondents again with replacement many times and repeat the whole analysis with "
      + "the current settings and items on each draw. A flag that comes back in most draws is a firm reason; one that comes and "
      + "goes sits near its threshold. Factors are matched to those of all respondents before they are compared." }),
    ...runForm(state),
  ];
  if (found) {
    const { result, current } = found;
    if (!current) {
      parts.push(note(`This result is for an earlier item set (${(r.forItems || []).length} items); the items have changed since. `
        + "Start a new run for the current items.", "stale"));
    }
    parts.push(h("p", { class: "interpretation", id: "rob-settings", text: `This run: ${settingsLine(run, result)}` }),
      h("h3", { text: "How often each flag comes back" }), flagTable(state, result),
      h("h3", { text: "Number of factors across resamples" }), retentionTable(result),
      h("h3", { text: "Reliability intervals" }), whiskers(result),
      h("h3", { text: "Loading intervals" }), loadingTable(result));
  }
  container.append(section("Robustness", ...parts));
}
