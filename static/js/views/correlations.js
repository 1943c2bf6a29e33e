// Correlation view: the active items' correlation matrix (or the residuals after the factor model) as a
// k x k heatmap grouped by codebook construct, a keyboard cursor, the largest residuals and a pair panel.
/* global Plotly */
import { api } from "../api.js";
import { DIVERGING, INK, config, esc, fontSize, loadPlotly, wrapText } from "../charts.js";
import { optionLabel } from "../labels.js";
import { actions, allItems, analysisRequest, itemMeta } from "../state.js";
import { clear, fmt, h, note, section } from "./dom.js";

const NO_CONSTRUCT = "no construct";
const MARK = "◆"; // a large residual, in the cell and in the list (not colour alone)

/** Items in construct groups (constructs in pool order of their first item; pool order within; none last). */
export function groupedOrder(items, constructOf, pool) {
  const rank = new Map(pool.map((n, i) => [n, i]));
  const pos = (n) => (rank.has(n) ? rank.get(n) : pool.length + items.indexOf(n));
  const sorted = [...items].sort((a, b) => pos(a) - pos(b));
  const groups = [];
  for (const n of sorted) {
    const c = constructOf(n) || NO_CONSTRUCT;
    let g = groups.find((x) => x.name === c);
    if (!g) { g = { name: c, items: [] }; groups.push(g); }
    g.items.push(n);
  }
  const none = groups.findIndex((g) => g.name === NO_CONSTRUCT);
  if (none >= 0) groups.push(groups.splice(none, 1)[0]);
  return groups;
}

const requestKey = (state) => JSON.stringify([state.dataset, analysisRequest()]);

function residualEntry(state) {
  const r = state.corr.residuals;
  return r && r.key === requestKey(state) ? r : null;
}

async function fetchResiduals(state, rerender) {
  const key = requestKey(state);
  if (state.corr.busy === key) return;
  state.corr.busy = key;
  let entry;
  try { entry = { key, answer: await api.residuals(state.dataset, analysisRequest()) }; } catch (e) { entry = { key, error: e.message }; }
  if (state.corr.busy === key) state.corr.busy = null;
  state.corr.residuals = entry;
  if (key === requestKey(state)) rerender();
}

function rowsByName(analysis) {
  return Object.fromEntries((analysis?.items || []).map((r) => [r.name, r]));
}

function primaryLoading(efa, name) {
  const v = efa?.loadings?.[name];
  if (!Array.isArray(v) || !v.length) return null;
  let best = 0;
  v.forEach((x, j) => { if (Math.abs(x ?? 0) > Math.abs(v[best] ?? 0)) best = j; });
  return { factor: efa.factors?.[best] || `Factor ${best + 1}`, value: v[best] };
}

function pairWords(a, b, r, res) {
  const parts = [`${a} with ${b}`, `r ${fmt(r)}`];
  if (res !== undefined) parts.push(`residual ${fmt(res)}`);
  return parts.join(", ");
}

export function render(container, state) {
  const active = document.activeElement;
  const refocus = active && active.id && container.contains(active) ? active.id : null;
  clear(container);
  const a = state.analysis;
  const corr = a?.correlations;
  if (!corr || !Array.isArray(corr.items) || corr.items.length < 2 || !Array.isArray(corr.matrix)) {
    container.append(section("Correlations", note("At least two active items are needed for a correlation matrix.")));
    return;
  }
  const cs = state.corr;
  const rerender = () => { if (state.view === "correlations" && container.isConnected) render(container, state); };
  const residualMode = cs.mode === "residuals";
  const entry = residualMode ? residualEntry(state) : null;
  if (residualMode && !entry) fetchResiduals(state, rerender);
  const res = entry?.answer || null;

  // the items: those of the residual answer when shown (it may be newer than the analysis on screen)
  const items = res ? res.items : corr.items;
  const rIndex = new Map(corr.items.map((n, i) => [n, i]));
  const rOf = (x, y) => (rIndex.has(x) && rIndex.has(y) ? corr.matrix[rIndex.get(x)][rIndex.get(y)] : null);
  const eIndex = res ? new Map(res.items.map((n, i) => [n, i])) : null;
  const eOf = (x, y) => (eIndex && eIndex.has(x) && eIndex.has(y) ? res.matrix[eIndex.get(x)][eIndex.get(y)] : undefined);
  const rows = rowsByName(a);
  const constructOf = (n) => rows[n]?.construct ?? itemMeta(n)?.construct ?? null;
  const groups = groupedOrder(items, constructOf, allItems());
  const order = groups.flatMap((g) => g.items);
  const k = order.length;
  const large = new Set((res?.large || []).map((x) => x.items.join("\u0000")));
  const isLarge = (x, y) => large.has(`${x}\u0000${y}`) || large.has(`${y}\u0000${x}`);

  cs.cursor = [Math.min(cs.cursor[0], k - 1), Math.min(cs.cursor[1], k - 1)];
  if (cs.pair && !(order.includes(cs.pair[0]) && order.includes(cs.pair[1]))) cs.pair = null;

  const toggle = h("div", { class: "segmented", role: "group", "aria-label": "What the matrix shows" },
    h("button", { id: "corr-show-r", class: residualMode ? "" : "on", "aria-pressed": String(!residualMode), text: "Correlations",
      onclick: () => { cs.mode = "r"; rerender(); } }),
    h("button", { id: "corr-show-residuals", class: residualMode ? "on" : "", "aria-pressed": String(residualMode),
      text: "Residuals after the factor model", onclick: () => { cs.mode = "residuals"; rerender(); } }));

  let status = null;
  if (residualMode && !entry) status = note("Computing the residual correlations…");
  else if (entry?.error) status = h("p", { class: "note error", role: "alert", id: "corr-error", text: entry.error });
  const typeWord = optionLabel("correlation", corr.type); // the served choice label ("Pearson", ...)
  const basis = res
    ? h("p", { class: "muted", id: "corr-basis", text: `${res.basis} Root mean square residual ${fmt(res.rmsr)}; cells marked ${MARK} are at least ${fmt(res.threshold, 2)} away from zero.` })
    : h("p", { class: "muted", id: "corr-basis", text: `Correlations (${typeWord}) of the ${k} active items (n ${corr.n ?? "—"})${corr.smoothed ? ", smoothed to positive definite" : ""}. Items are grouped by their codebook construct.` });

  const live = h("p", { class: "corr-live", id: "corr-cursor-text", "aria-live": "polite" });
  const chart = h("div", { class: "chart corr-chart", id: "corr-chart" });
  const grid = h("div", {
    class: "corr-grid", id: "corr-grid", tabindex: "0", role: "group",
    "aria-label": "Correlation matrix. Arrow keys move between cells; Enter shows the pair.",
    "aria-describedby": "corr-cursor-text",
  }, chart);
  const pairBox = h("div", { id: "corr-pair", class: "corr-pair" });
  const valueAt = (x, y) => (res ? eOf(x, y) : rOf(x, y));

  function announce() {
    const [i, j] = cs.cursor;
    const x = order[j], y = order[i];
    const words = i === j ? `${y}: ${itemMeta(y)?.text || ""} (the item itself)`
      : `${y} “${itemMeta(y)?.text || ""}” with ${x} “${itemMeta(x)?.text || ""}”: r ${fmt(rOf(x, y))}`
        + (res ? `, residual ${fmt(eOf(x, y))}${isLarge(x, y) ? " (large)" : ""}` : "");
    live.textContent = words;
  }

  function openPair(x, y) {
    if (x === y) return;
    cs.pair = [y, x];
    fillPair(pairBox, state, cs.pair, { rOf, eOf: res ? eOf : null, isLarge });
    pairBox.scrollIntoView?.({ block: "nearest" });
  }

  grid.addEventListener("keydown", (ev) => {
    const moves = { ArrowUp: [-1, 0], ArrowDown: [1, 0], ArrowLeft: [0, -1], ArrowRight: [0, 1] };
    if (moves[ev.key]) {
      const [di, dj] = moves[ev.key];
      cs.cursor = [Math.max(0, Math.min(k - 1, cs.cursor[0] + di)), Math.max(0, Math.min(k - 1, cs.cursor[1] + dj))];
      ev.preventDefault();
      announce();
      drawCursor(chart, cs.cursor, boundaryShapes);
    } else if (ev.key === "Home" || ev.key === "End") {
      const to = ev.key === "Home" ? 0 : k - 1;
      cs.cursor = ev.ctrlKey ? [to, to] : [cs.cursor[0], to];
      ev.preventDefault();
      announce();
      drawCursor(chart, cs.cursor, boundaryShapes);
    } else if (ev.key === "Enter" || ev.key === " ") {
      ev.preventDefault();
      openPair(order[cs.cursor[1]], order[cs.cursor[0]]);
    }
  });
  grid.addEventListener("focus", announce);

  const list = largeList(res, (pair) => {
    const i = order.indexOf(pair[0]), j = order.indexOf(pair[1]);
    if (i < 0 || j < 0) return;
    cs.cursor = [i, j];
    announce();
    drawCursor(chart, cs.cursor, boundaryShapes);
    openPair(pair[1], pair[0]);
  });

  container.append(section("Correlations",
    h("div", { class: "toolbar" }, toggle),
    basis, status, grid, live, pairBox, list));

  // ---- the heatmap
  const z = order.map((y) => order.map((x) => (x === y ? null : valueAt(x, y) ?? null)));
  const text = order.map((y) => order.map((x) => {
    if (x === y) return "";
    if (res) return isLarge(x, y) ? MARK : ""; // the value is in the hover, the list and the pair panel
    return k <= 16 ? fmt(rOf(x, y), 2) : "";
  }));
  const hover = order.map((y) => order.map((x) => {
    if (x === y) return `<b>${esc(y)}</b><br>${wrapText(itemMeta(y)?.text || "")}`;
    const lines = [`<b>${esc(y)}</b> (${esc(constructOf(y) || NO_CONSTRUCT)}): ${wrapText(itemMeta(y)?.text || "")}`,
      `<b>${esc(x)}</b> (${esc(constructOf(x) || NO_CONSTRUCT)}): ${wrapText(itemMeta(x)?.text || "")}`,
      `r = ${fmt(rOf(x, y))}`];
    if (res) lines.push(`residual = ${fmt(eOf(x, y))}${isLarge(x, y) ? ` ${MARK} large` : ""}`);
    return lines.join("<br>");
  }));
  let zmax = 1;
  if (res) {
    const flat = z.flat().filter((v) => v != null).map(Math.abs);
    zmax = Math.max(0.2, Math.ceil(Math.max(0, ...flat) * 20) / 20);
  }
  const labels = order.map(esc);
  const trace = {
    type: "heatmap", x: labels, y: labels, z, text, hovertext: hover, hoverinfo: "text",
    texttemplate: "%{text}", textfont: { size: Math.max(12, fontSize() - 1) }, // plotly picks dark or light text per cell
    zmin: -zmax, zmax, zmid: 0, colorscale: DIVERGING, xgap: 1, ygap: 1,
    colorbar: { title: { text: res ? "residual" : "r", side: "right" }, thickness: 10, len: 0.6 },
  };
  // group boundaries and construct names
  const boundaryShapes = [];
  const annotations = [];
  let start = 0;
  for (const [gi, g] of groups.entries()) {
    const end = start + g.items.length;
    if (gi > 0) {
      boundaryShapes.push({ type: "line", xref: "x", yref: "y", x0: start - 0.5, x1: start - 0.5, y0: -0.5, y1: k - 0.5, line: { color: INK, width: 2 } });
      boundaryShapes.push({ type: "line", xref: "x", yref: "y", x0: -0.5, x1: k - 0.5, y0: start - 0.5, y1: start - 0.5, line: { color: INK, width: 2 } });
    }
    annotations.push({ xref: "x", yref: "paper", x: (start + end - 1) / 2, y: 1, yanchor: "bottom", showarrow: false,
      text: `<b>${esc(g.name)}</b>`, font: { size: fontSize(), color: INK }, name: "construct-label" });
    start = end;
  }
  const fs = fontSize();
  const longest = Math.max(3, ...order.map((s) => String(s).length));
  const cell = document.body.classList.contains("projector") ? 30 : 24;
  const layout = {
    font: { family: "system-ui, 'Segoe UI', Roboto, 'DejaVu Sans', sans-serif", size: fs, color: INK },
    paper_bgcolor: "rgba(0,0,0,0)", plot_bgcolor: "rgba(0,0,0,0)",
    hoverlabel: { bgcolor: "#fffdf8", bordercolor: "#e3e0d8", font: { color: INK } },
    width: Math.max(420, k * cell + longest * fs * 0.7 + 140), height: Math.max(360, k * cell + fs * 6),
    margin: { l: 16 + longest * fs * 0.7, r: 20, t: fs * 3, b: 16 + longest * fs * 0.7 },
    xaxis: { tickfont: { size: fs }, tickangle: -90, automargin: true, type: "category" },
    yaxis: { tickfont: { size: fs }, autorange: "reversed", automargin: true, type: "category" },
    shapes: [...boundaryShapes, cursorShape(cs.cursor)], annotations,
  };
  draw(chart, [trace], layout).then((ok) => {
    if (!ok || typeof chart.on !== "function") return;
    cs.renders = (cs.renders || 0) + 1;
    chart.dataset.rendered = String(cs.renders); // drawn charts so far (the tests wait on it)
    chart.on("plotly_click", (ev) => {
      const pt = ev?.points?.[0];
      if (!pt) return;
      const i = pt.pointIndex?.[0], j = pt.pointIndex?.[1];
      if (i == null || j == null) return;
      cs.cursor = [i, j];
      announce();
      drawCursor(chart, cs.cursor, boundaryShapes);
      openPair(order[j], order[i]);
    });
  });
  if (cs.pair) fillPair(pairBox, state, cs.pair, { rOf, eOf: res ? eOf : null, isLarge });
  if (refocus) document.getElementById(refocus)?.focus({ preventScroll: true });
}

function cursorShape([i, j]) {
  return { type: "rect", xref: "x", yref: "y", x0: j - 0.5, x1: j + 0.5, y0: i - 0.5, y1: i + 0.5,
    line: { color: "#9a4f12", width: 3 }, name: "cursor" };
}

function drawCursor(el, cursor, shapes) {
  if (window.Plotly && el.data) Plotly.relayout(el, { shapes: [...shapes, cursorShape(cursor)] });
}

async function draw(el, traces, layout) {
  await loadPlotly(); // inserts plotly's script tag on first need (index.html no longer loads it)
  if (!window.Plotly) { el.textContent = "The chart library did not load."; return false; }
  if (!el.isConnected) return false;
  await Plotly.react(el, traces, layout, config);
  return true;
}

function largeList(res, onPick) {
  if (!res) return null;
  const items = res.large || [];
  return h("div", { class: "corr-large", id: "corr-large" },
    h("h3", { text: `Largest residuals (|residual| at least ${fmt(res.threshold, 2)})` }),
    items.length
      ? h("ol", {}, items.map((x) => h("li", {},
        h("button", { class: "link", type: "button", dataset: { pair: x.items.join(",") },
          text: `${MARK} ${x.items[0]} with ${x.items[1]}: residual ${fmt(x.residual)} (r ${fmt(x.r)})`,
          onclick: () => onPick(x.items) }))))
      : note("No residual reaches the threshold: the factor model reproduces every pair closely."));
}

function fillPair(box, state, [a, b], { rOf, eOf, isLarge }) {
  clear(box);
  const rows = rowsByName(state.analysis);
  const efa = state.analysis?.efa;
  const side = (n) => {
    const row = rows[n] || {};
    const load = primaryLoading(efa, n);
    return h("div", { class: "corr-item", dataset: { item: n } },
      h("h4", {}, h("span", { text: n }), h("span", { class: "muted", text: ` · ${row.construct || itemMeta(n)?.construct || NO_CONSTRUCT}` }),
        row.reverse ? h("span", { class: "rev", text: " · reverse-keyed" }) : null),
      h("p", { class: "corr-wording", text: row.text || itemMeta(n)?.text || "" }),
      h("dl", {},
        h("dt", { text: "item-rest r" }), h("dd", { text: fmt(row.item_rest_r) }),
        h("dt", { text: "primary loading" }), h("dd", { text: load ? `${fmt(load.value)} on ${load.factor}` : "—" })),
      h("button", { type: "button", class: "corr-drop", id: `corr-drop-${n}`.replace(/[^\w-]/g, "_"), text: `Drop ${n}`,
        onclick: () => actions.toggle(n) }));
  };
  const e = eOf ? eOf(b, a) : undefined;
  box.append(h("section", { class: "panel corr-pair-panel", "aria-label": `The pair ${a} and ${b}` },
    h("h3", { text: pairWords(a, b, rOf(b, a), e) + (e !== undefined && isLarge(a, b) ? ` ${MARK} large residual` : "") }),
    h("div", { class: "corr-sides" }, side(a), side(b)),
    h("button", { type: "button", class: "link", text: "Close the pair", onclick: () => { state.corr.pair = null; clear(box); } })));
}
