// Every plotly call of the dashboard. plotly.min.js is served by our own server (/vendor/plotly.min.js).
/* global Plotly */

export const INK = "#1d2a33";
const FONT = "system-ui, 'Segoe UI', Roboto, 'DejaVu Sans', sans-serif";
const MUTED = "#56626b";  // the page's --muted grey (5.9:1 on the paper colour)
const GRID = "#e3e0d8";
export const ACCENT = "#23607a";   // deep blue-teal
export const WARM = "#b8621b";     // burnt orange
const OMEGA = "#6a4c93";           // plum
const WARM_TEXT = "#9a4f12";        // burnt orange dark enough for text on white (5.9:1, WCAG 2.1 SC 1.4.3)
// Diverging, colour-blind-safe (blue <-> orange through a warm paper white), centred on 0.
export const DIVERGING = [[0, "#1b4f72"], [0.25, "#6c9ec2"], [0.5, "#f7f5f0"], [0.75, "#e7a35f"], [1, "#8f3f0c"]];

// plotly reads a few HTML-like tags in labels and hover text; user text must stay text.
// It decodes &lt; &gt; &amp; back to characters when it draws, so escaping them is exact.
export const esc = (v) => String(v ?? "").replace(/&/g, "&amp;").replace(/</g, "&lt;").replace(/>/g, "&gt;");

// Long wording in a hover label: escaped, then broken into lines (plotly clips a label at the chart's edge).
export function wrapText(v, width = 56) {
  const words = String(v ?? "").split(/\s+/).filter(Boolean);
  const lines = [];
  let line = "";
  for (const w of words) {
    if (line && line.length + 1 + w.length > width) { lines.push(line); line = w; } else line = line ? `${line} ${w}` : w;
  }
  if (line) lines.push(line);
  return lines.map(esc).join("<br>");
}

export const config = { displaylogo: false, responsive: true, displayModeBar: false };

export function fontSize() { return document.body.classList.contains("projector") ? 17 : 12; }

function base(extra = {}) {
  return {
    font: { family: FONT, size: fontSize(), color: INK },
    paper_bgcolor: "rgba(0,0,0,0)", plot_bgcolor: "rgba(0,0,0,0)",
    margin: { l: 60, r: 20, t: 36, b: 48 },
    hoverlabel: { bgcolor: "#fffdf8", bordercolor: GRID, font: { color: INK } },
    ...extra,
  };
}

// plotly.min.js loads with `async` so the first analysis is requested while it is still being parsed.
const plotlyReady = window.Plotly ? Promise.resolve(true) : new Promise((resolve) => {
  const tag = document.querySelector('script[src$="plotly.min.js"]');
  if (!tag) { resolve(false); return; }
  tag.addEventListener("load", () => resolve(true));
  tag.addEventListener("error", () => resolve(false));
  setTimeout(() => resolve(Boolean(window.Plotly)), 15000);
});

// Axis titles and tick labels get the room they need (they overlapped at projector size).
function withRoom(layout) {
  for (const key of Object.keys(layout)) {
    if (/^[xy]axis\d*$/.test(key)) {
      const ax = layout[key];
      layout[key] = { automargin: true, ...ax };
      if (ax.title && typeof ax.title === "object" && ax.title.standoff == null) layout[key].title = { standoff: 8, ...ax.title };
    }
  }
  return layout;
}

async function draw(el, traces, layout) {
  if (!window.Plotly && !(await plotlyReady)) { el.textContent = "The chart library did not load."; return; }
  if (!el.isConnected) return;
  await Plotly.react(el, traces, withRoom(layout), config);
}

export function purge(el) { if (window.Plotly && el) Plotly.purge(el); }

// Release the charts inside an element before it is emptied (plotly keeps resize handlers per chart).
export function purgeWithin(el) {
  if (!window.Plotly || !el || !el.querySelectorAll) return;
  for (const g of el.querySelectorAll(".js-plotly-plot")) Plotly.purge(g);
}

// Calls onPick(itemName) when a cell or a row is clicked (plotly_click); one handler per element.
function onPoint(el, handler) {
  if (!handler || typeof el.on !== "function") return; // not drawn (left the page before plotly was ready)
  el._scalewrightPick = handler;
  if (el._scalewrightBound) return;
  el._scalewrightBound = true;
  el.on("plotly_click", (ev) => {
    const pt = ev && ev.points && ev.points[0];
    if (pt && el._scalewrightPick) el._scalewrightPick(pt);
  });
}

let measurer = null;
/** The widest of `labels` (plain text) in px at `size` in the charts' font. */
function labelWidth(labels, size) {
  measurer = measurer || document.createElement("canvas").getContext("2d");
  measurer.font = `${size}px ${FONT}`;
  let widest = 0;
  for (const l of labels) widest = Math.max(widest, measurer.measureText(l).width);
  return Math.ceil(widest);
}

// Above this many cells the loadings heatmap prints no value in its cells (the hover and the row read-out
// still give every value): plotly draws and measures each cell's text, 0.4 s for 250 items x 3 factors.
export const MAX_PRINTED_CELLS = 400;
export const cellsPrinted = (nRows, nFactors) => nRows * nFactors <= MAX_PRINTED_CELLS;

// rows: [{name, label?, text, values, cells?, flagged, flagText}]: `label` is the y tick (name and construct),
// `cells` the text shown in each cell ("" hides a small loading; the hover always gives the full value).
// onPick(name) on a click, onHover(name) when the pointer is over a row.
export function loadingsHeatmap(el, { rows, factors, groups = [], title, onPick, onHover, selected = null }) {
  const y = rows.map((r) => esc(`${r.flagged ? "⚑ " : ""}${r.label ?? r.name}`));
  const z = rows.map((r) => r.values);
  const custom = rows.map((r) => factors.map(() => [wrapText(r.text), wrapText(r.flagText)]));
  const hasCells = rows.every((r) => Array.isArray(r.cells));
  const printed = cellsPrinted(rows.length, factors.length);
  const trace = {
    type: "heatmap", x: factors.map(esc), y, z, customdata: custom, zmin: -1, zmax: 1, zmid: 0,
    // No xgap/ygap: with gaps plotly paints a canvas the size of the whole plot, cell by cell, and encodes it
    // as a PNG on every draw (about 25 ms a redraw at 60 items on the test VM, more with more rows); without, it
    // paints one pixel per cell and scales the image up (image-rendering: pixelated). The white lines between
    // the cells are one path shape (gridLines).
    colorscale: DIVERGING,
    ...(!printed ? {} : hasCells ? { text: rows.map((r) => r.cells), texttemplate: "%{text}" } : { texttemplate: "%{z:.2f}" }),
    textfont: { size: fontSize() - 1 },
    hovertemplate: "<b>%{y}</b> on %{x}: %{z:.3f}<br>%{customdata[0]}<br><i>%{customdata[1]}</i><extra></extra>",
    // The colour key is the page's own (heatKey, drawn once): plotly would redraw its colour bar on every refit.
    showscale: false,
  };
  const rowPx = document.body.classList.contains("projector") ? 30 : 22;
  const longest = Math.max(4, ...y.map((s) => s.length));
  // The y labels' room is measured here (a canvas measures a string without a layout pass): plotly's own
  // automargin measures every tick label and then draws the whole chart a second time (1 s at 250 items).
  const left = Math.max(16 + longest * fontSize() * 0.62,
    labelWidth(rows.map((r) => `${r.flagged ? "⚑ " : ""}${r.label ?? r.name}`), fontSize()) + 14);
  // a rule between the groups of items that share a primary factor (or a construct, in pool order)
  const shapes = [];
  for (let i = 1; i < groups.length; i += 1) {
    if (groups[i] !== groups[i - 1]) shapes.push({ type: "line", xref: "paper", x0: -0.02, x1: 1, y0: i - 0.5, y1: i - 0.5, line: { color: INK, width: 2 } });
  }
  el._scalewrightBackdrop = el._scalewrightBackdrop || backdrop(el); // read once per chart (a style pass)
  shapes.unshift(gridLines(rows.length, factors.length, el._scalewrightBackdrop));
  el._scalewrightShapes = shapes;
  const layout = base({
    title: { text: title, x: 0, y: 0.995, yanchor: "top", font: { size: fontSize() + 2 } },
    height: Math.max(260, rows.length * rowPx + 110), shapes: [...shapes, ...rowMark(selected)],
    margin: { l: left, r: 20, t: 70, b: 20 },
    xaxis: { side: "top", tickfont: { size: fontSize() } },
    yaxis: { autorange: "reversed", tickfont: { size: fontSize() }, automargin: false },
  });
  return draw(el, [trace], layout).then(() => {
    if (!window.Plotly) return;
    const nameAt = (pt) => rows[pt.pointIndex?.[0] ?? pt.pointNumber?.[0] ?? 0]?.name;
    onPoint(el, onPick && ((pt) => onPick(nameAt(pt))));
    if (onHover && typeof el.on === "function") {
      el._scalewrightHover = (pt) => onHover(nameAt(pt));
      if (!el._scalewrightHoverBound) {
        el._scalewrightHoverBound = true;
        el.on("plotly_hover", (ev) => { const pt = ev?.points?.[0]; if (pt && el._scalewrightHover) el._scalewrightHover(pt); });
      }
    }
  });
}

// The background the chart sits on (the panel's white): the colour of the lines between the heatmap's cells.
function backdrop(el) {
  for (let node = el; node && node.nodeType === 1; node = node.parentElement) {
    const bg = getComputedStyle(node).backgroundColor;
    if (bg && bg !== "transparent" && !/^rgba\(.*,\s*0\)$/.test(bg)) return bg;
  }
  return "#ffffff";
}

// The 2 px lines between the cells of an nRows x nCols heatmap on category axes, as one path shape (the
// gaps plotly would otherwise leave with xgap/ygap; drawn below the group rules and the selection frame).
function gridLines(nRows, nCols, color) {
  const parts = [];
  for (let i = 1; i < nRows; i += 1) parts.push(`M-0.5,${i - 0.5}L${nCols - 0.5},${i - 0.5}`);
  for (let j = 1; j < nCols; j += 1) parts.push(`M${j - 0.5},-0.5L${j - 0.5},${nRows - 0.5}`);
  return { type: "path", xref: "x", yref: "y", path: parts.join("") || "M-0.5,-0.5", line: { color, width: 2 }, name: "cell-gaps" };
}

// The loadings heatmap's colour key as HTML (a CSS gradient of DIVERGING and its ticks), in place of plotly's
// colour bar. `h` is the page's element helper (views/dom.js).
export function heatKey(h) {
  const stops = DIVERGING.map(([at, colour]) => `${colour} ${at * 100}%`).join(", ");
  return h("div", { class: "heat-key", id: "heat-key", role: "img",
    "aria-label": "Colour key: a loading of −1 is dark blue, 0 is paper white, +1 is dark orange." },
  h("span", { class: "heat-key-title", text: "loading", "aria-hidden": "true" }),
  h("span", { class: "heat-key-bar", "aria-hidden": "true", style: { background: `linear-gradient(to right, ${stops})` } }),
  h("span", { class: "heat-key-ticks", "aria-hidden": "true" }, ["−1", "−.5", "0", ".5", "1"].map((t) => h("span", { text: t }))));
}

// A thick dashed frame around row `index` of the loadings heatmap (the keyboard selection; not colour alone).
function rowMark(index) {
  if (index == null || index < 0) return [];
  return [{ type: "rect", xref: "paper", x0: -0.01, x1: 1.005, y0: index - 0.5, y1: index + 0.5,
    line: { color: INK, width: 3, dash: "dash" }, fillcolor: "rgba(0,0,0,0)" }];
}

/** Move the selection frame of a drawn loadings heatmap to row `index` (null: none). */
export function markHeatRow(el, index) {
  if (!window.Plotly || !el || !el._fullLayout) return Promise.resolve();
  return Plotly.relayout(el, { shapes: [...(el._scalewrightShapes || []), ...rowMark(index)] });
}

export function factorCorrelations(el, { factors: labels, matrix }) {
  const factors = labels.map(esc);
  const fs = fontSize();
  const longest = Math.max(3, ...labels.map((l) => String(l).length));
  const cell = Math.max(56, longest * fs * 0.62 + 12);
  const trace = {
    type: "heatmap", x: factors, y: factors, z: matrix, zmin: -1, zmax: 1, zmid: 0, colorscale: DIVERGING,
    // the dashboard's number style (.33, not 0.33)
    text: matrix.map((row) => row.map((v) => (v == null ? "" : v.toFixed(2).replace(/^(-?)0\./, "$1.")))),
    texttemplate: "%{text}", showscale: false, xgap: 2, ygap: 2,
    hovertemplate: "%{y} with %{x}: %{z:.3f}<extra></extra>",
  };
  const left = 16 + longest * fs * 0.62;
  const layout = base({
    title: { text: "Factor correlations", x: 0, xref: "container", y: 0.98, yanchor: "top", font: { size: fs + 1 } },
    height: 70 + fs * 2 + factors.length * Math.max(40, fs * 2.6), width: left + 20 + factors.length * cell,
    margin: { l: left, r: 10, t: 50 + fs * 1.5, b: 10 },
    xaxis: { side: "top", tickangle: 0 }, yaxis: { autorange: "reversed" },
  });
  return draw(el, [trace], layout);
}

// items: [{name, text, alpha_if_deleted}], alpha: current alpha
export function alphaIfDeleted(el, { items, alpha, onPick, title }) {
  const better = items.map((it) => it.alpha_if_deleted != null && alpha != null && it.alpha_if_deleted > alpha);
  const trace = {
    type: "scatter", mode: "markers+text", x: items.map((it) => esc(it.name)), y: items.map((it) => it.alpha_if_deleted),
    customdata: items.map((it, i) => [wrapText(it.text), better[i] ? "rises without it" : "falls or holds without it"]),
    // Not by colour alone: a rising item is also an upward triangle with the word "rises" above it.
    text: better.map((b) => (b ? "rises" : "")), textposition: "top center", cliponaxis: false,
    textfont: { size: fontSize(), color: WARM_TEXT },
    marker: { size: 11, color: better.map((b) => (b ? WARM : ACCENT)), symbol: better.map((b) => (b ? "triangle-up" : "circle")),
      line: { width: 1, color: "#fff" } },
    hovertemplate: "<b>%{x}</b>: alpha without it %{y:.3f} (%{customdata[1]})<br>%{customdata[0]}<extra></extra>",
    name: "alpha if this item is dropped",
  };
  const shapes = alpha == null ? [] : [{ type: "line", xref: "paper", x0: 0, x1: 1, y0: alpha, y1: alpha,
    line: { color: INK, width: 2, dash: "dash" } }];
  const annotations = alpha == null ? [] : [{ xref: "paper", x: 1, y: alpha, yanchor: "bottom", xanchor: "right",
    text: `current alpha ${alpha.toFixed(3).replace(/^0\./, ".")}`, showarrow: false, font: { color: INK } }];
  // The key to the two marker shapes, in words (the chart has no legend of its own).
  annotations.push({ xref: "paper", yref: "paper", x: 0, y: 1, yanchor: "bottom", xanchor: "left", showarrow: false,
    text: "▲ alpha rises without the item   ● alpha falls or holds", font: { color: INK, size: fontSize() }, name: "alpha-key" });
  const ys = items.map((it) => it.alpha_if_deleted).filter((v) => v != null).concat(alpha == null ? [] : [alpha]);
  const lo = Math.min(...ys);
  const hi = Math.max(...ys);
  const pad = Math.max((hi - lo) * 0.12, 0.002);
  const layout = base({
    title: { text: esc(title || "Alpha if each item is dropped (above the line: the scale is better without it)"), x: 0,
      font: { size: fontSize() + 1 } },
    height: 340, shapes, annotations, showlegend: false, margin: { l: 60, r: 20, t: 40 + fontSize() * 2.6, b: 48 },
    xaxis: { tickangle: -45, gridcolor: GRID },
    yaxis: { title: { text: "alpha without the item" }, gridcolor: GRID, tickformat: ".3f", range: ys.length ? [lo - pad, hi + pad] : undefined },
  });
  return draw(el, [trace], layout).then(() => {
    if (window.Plotly) onPoint(el, onPick && ((pt) => onPick(items[pt.pointIndex]?.name)));
  });
}

// path: [{removed, n_items, alpha, omega_total}] (first entry: the current set, removed null)
export function pruningPath(el, { path, title }) {
  const x = path.map((p) => p.n_items);
  const label = path.map((p) => (p.removed ? `after dropping ${esc(p.removed)}` : "current set"));
  const alpha = { type: "scatter", mode: "lines+markers+text", name: "alpha", x, y: path.map((p) => p.alpha),
    text: path.map((p) => (p.removed ? `−${esc(p.removed)}` : "")), textposition: "top center",
    textfont: { size: fontSize(), color: MUTED }, cliponaxis: false,
    customdata: label, line: { color: ACCENT, width: 3 }, marker: { size: 7 },
    hovertemplate: "%{x} items (%{customdata}): alpha %{y:.3f}<extra></extra>" };
  const omega = { type: "scatter", mode: "lines+markers", name: "omega (one factor)", x, y: path.map((p) => p.omega_total),
    customdata: label, line: { color: OMEGA, width: 2, dash: "dot" }, marker: { size: 6, symbol: "diamond" },
    hovertemplate: "%{x} items (%{customdata}): omega %{y:.3f}<extra></extra>" };
  const layout = base({
    title: { text: esc(title || "Pruning path: dropping the item that costs least, one at a time"), x: 0, font: { size: fontSize() + 1 } },
    height: 340, legend: { orientation: "h", x: 1, xanchor: "right", y: 1.02, yanchor: "bottom" },
    margin: { l: 60, r: 20, t: 64, b: 48 },
    xaxis: { title: { text: "items kept" }, range: [Math.max(...x) + 0.5, Math.min(...x) - 0.5], dtick: 1, gridcolor: GRID },
    yaxis: { title: { text: "coefficient" }, gridcolor: GRID, tickformat: ".2f" },
  });
  return draw(el, [alpha, omega], layout);
}

export function scree(el, { observed, threshold, suggested, chosen }) {
  const x = observed.map((_, i) => i + 1);
  const traces = [
    { type: "scatter", mode: "lines+markers", name: "observed eigenvalues", x, y: observed,
      line: { color: ACCENT, width: 3 }, marker: { size: 8 }, hovertemplate: "factor %{x}: %{y:.3f}<extra></extra>" },
  ];
  if (threshold && threshold.length) {
    traces.push({ type: "scatter", mode: "lines", name: "parallel-analysis threshold (random data)", x, y: threshold,
      line: { color: WARM, width: 2, dash: "dash" }, hovertemplate: "random %{x}: %{y:.3f}<extra></extra>" });
  }
  const shapes = [];
  const annotations = [];
  if (chosen) {
    shapes.push({ type: "line", x0: chosen + 0.5, x1: chosen + 0.5, yref: "paper", y0: 0, y1: 1, line: { color: MUTED, width: 1, dash: "dot" } });
    annotations.push({ x: chosen + 0.5, xanchor: "left", yref: "paper", y: 1, yanchor: "top", showarrow: false,
      text: ` ${chosen} extracted`, font: { color: MUTED, size: fontSize() - 1 } });
  }
  const layout = base({
    title: { text: `Scree against parallel analysis (suggests ${suggested ?? "?"})`, x: 0, font: { size: fontSize() + 1 } },
    height: 360, shapes, annotations, legend: { orientation: "h", x: 0, y: 1.02, yanchor: "bottom" },
    margin: { l: 60, r: 20, t: 70, b: 48 },
    xaxis: { title: { text: "factor" }, dtick: x.length > 30 ? 5 : 1, range: [0.5, x.length + 0.5], gridcolor: GRID },
    yaxis: { title: { text: "eigenvalue" }, gridcolor: GRID, rangemode: "tozero" },
  });
  return draw(el, traces, layout);
}

export function mapCurve(el, { values: all, best }) {
  const values = all.slice(0, Math.max(6, (best ?? 0) * 2 + 3)); // the tail climbs steeply and hides the minimum
  const x = values.map((_, i) => i);
  const trace = { type: "scatter", mode: "lines+markers", x, y: values, line: { color: OMEGA, width: 2 },
    marker: { size: x.map((i) => (i === best ? 13 : 7)), color: x.map((i) => (i === best ? WARM : OMEGA)) },
    hovertemplate: "%{x} factors partialled out: %{y:.4f}<extra></extra>" };
  const layout = base({
    title: { text: `Velicer's MAP (lowest at ${best ?? "?"})`, x: 0, font: { size: fontSize() + 1 } }, height: 360,
    margin: { l: 60, r: 20, t: 70, b: 48 },
    xaxis: { title: { text: "factors partialled out" }, dtick: 1, gridcolor: GRID, range: [-0.3, values.length - 0.7] },
    yaxis: { title: { text: "mean squared partial r" }, gridcolor: GRID, rangemode: "tozero" },
  });
  return draw(el, [trace], layout);
}

export function retestScatter(el, { x, y, ids, labelX, labelY }) {
  const all = x.concat(y).filter((v) => v != null);
  const pad = (Math.max(...all) - Math.min(...all)) * 0.04 || 1;
  const lo = Math.min(...all) - pad;
  const hi = Math.max(...all) + pad;
  const pts = { type: "scatter", mode: "markers", x, y, text: ids.map(esc), name: "respondents",
    marker: { color: ACCENT, size: 7, opacity: 0.6 }, hovertemplate: "%{text}: %{x} then %{y}<extra></extra>" };
  const identity = { type: "scatter", mode: "lines", x: [lo, hi], y: [lo, hi], name: "same score both times",
    line: { color: WARM, dash: "dash", width: 2 }, hoverinfo: "skip" };
  const layout = base({ title: { text: "Score in each wave", x: 0 }, height: 360, legend: { orientation: "h", y: -0.2 },
    xaxis: { title: { text: labelX }, gridcolor: GRID, range: [lo, hi], zeroline: false },
    yaxis: { title: { text: labelY }, gridcolor: GRID, range: [lo, hi], zeroline: false } });
  return draw(el, [pts, identity], layout);
}

export function blandAltman(el, { means, diffs, ids, meanDiff, loa }) {
  const pts = { type: "scatter", mode: "markers", x: means, y: diffs, text: ids.map(esc), name: "respondents",
    marker: { color: ACCENT, size: 7, opacity: 0.6 }, hovertemplate: "%{text}: mean %{x:.2f}, difference %{y:.2f}<extra></extra>" };
  const line = (v, label, dash) => ({ type: "line", xref: "paper", x0: 0, x1: 1, y0: v, y1: v, line: { color: WARM, dash, width: 2 }, name: label });
  const shapes = [];
  const annotations = [];
  if (meanDiff != null) {
    shapes.push(line(meanDiff, "mean difference", "solid"));
    annotations.push({ xref: "paper", x: 1, y: meanDiff, xanchor: "right", yanchor: "bottom", showarrow: false, text: `mean ${meanDiff.toFixed(2)}` });
  }
  for (const v of loa || []) {
    if (v == null) continue;
    shapes.push(line(v, "limit of agreement", "dash"));
    annotations.push({ xref: "paper", x: 1, y: v, xanchor: "right", yanchor: "bottom", showarrow: false, text: `limit ${v.toFixed(2)}` });
  }
  const layout = base({ title: { text: "Bland-Altman: difference against mean", x: 0 }, height: 360, shapes, annotations,
    showlegend: false, xaxis: { title: { text: "mean of the two waves" }, gridcolor: GRID },
    yaxis: { title: { text: "second minus first" }, gridcolor: GRID, zeroline: true } });
  return draw(el, [pts], layout);
}
