// Every chart of the dashboard: plotly's (plotly.min.js, served by our own server at /vendor/plotly.min.js and
// loaded on first need) and the page's own SVG (the loadings heatmap and the factor correlations).
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

// plotly.min.js (1.5 MB of script to run) is loaded by the first chart that needs it, not with the page: the
// loadings heatmap and the factor correlations, the first charts most people see, are the page's own SVG.
let plotlyLoading = null;
/** Inserts plotly's script tag (once); resolves true when window.Plotly is defined, false if it did not load. */
export function loadPlotly() {
  if (window.Plotly) return Promise.resolve(true);
  if (!plotlyLoading) {
    plotlyLoading = new Promise((resolve) => {
      const tag = document.createElement("script");
      tag.src = "/vendor/plotly.min.js";
      tag.addEventListener("load", () => resolve(Boolean(window.Plotly)));
      // a failed load leaves no tag behind, so the next chart asks again
      tag.addEventListener("error", () => { tag.remove(); plotlyLoading = null; resolve(false); });
      document.head.append(tag);
    });
  }
  return plotlyLoading;
}

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
  if (!(await loadPlotly())) { el.textContent = "The chart library did not load."; return; }
  if (!el.isConnected) return;
  await Plotly.react(el, traces, withRoom(layout), config);
}

export function purge(el) {
  if (!el) return;
  if (el._heat) heatResize?.unobserve(el);
  if (window.Plotly) Plotly.purge(el);
}

// Release the charts inside an element before it is emptied (plotly keeps resize handlers per chart; the
// heatmap is watched for its width).
export function purgeWithin(el) {
  if (!el || !el.querySelectorAll) return;
  if (heatResize) for (const g of el.querySelectorAll(".heat-chart")) heatResize.unobserve(g);
  if (!window.Plotly) return;
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
// still give every value): a printed value is one more text node per cell to lay out, and unreadable that small.
export const MAX_PRINTED_CELLS = 400;
export const cellsPrinted = (nRows, nFactors) => nRows * nFactors <= MAX_PRINTED_CELLS;

// ---------------------------------------------------------------- the page's own SVG charts (no plotly)
const SVG_NS = "http://www.w3.org/2000/svg";

function svgNode(tag, attrs, parent) {
  const node = document.createElementNS(SVG_NS, tag);
  for (const [k, v] of Object.entries(attrs || {})) node.setAttribute(k, v);
  if (parent) parent.append(node);
  return node;
}

// An attribute or text is written only when it changed (the value last written is kept on the node, so a
// refit reads nothing back from the page and leaves unchanged nodes alone).
function setAttr(node, name, value) {
  const v = String(value);
  const seen = node._seen || (node._seen = {});
  if (seen[name] !== v) { seen[name] = v; node.setAttribute(name, v); }
}
function setText(node, text) {
  if (node._text !== text) { node._text = text; node.textContent = text; }
}
const px = (v) => Math.round(v * 100) / 100;

// `list` grown (make()) or shrunk (its last nodes removed) to n nodes.
function pool(list, n, make) {
  while (list.length < n) list.push(make());
  while (list.length > n) list.pop().remove();
  return list;
}

const STOPS = DIVERGING.map(([at, hex]) => [at, [1, 3, 5].map((i) => parseInt(hex.slice(i, i + 2), 16))]);
/** The DIVERGING colour of v on [-1, 1] (clamped; centred on 0; linear in RGB between the stops) as [r, g, b]. */
export function divergingRgb(v) {
  const t = Math.min(1, Math.max(0, (v + 1) / 2));
  let k = 1;
  while (k < STOPS.length - 1 && t > STOPS[k][0]) k += 1;
  const [a, from] = STOPS[k - 1];
  const [b, to] = STOPS[k];
  const f = b > a ? (t - a) / (b - a) : 0;
  return from.map((c, i) => Math.round(c + (to[i] - c) * f));
}
const rgbText = (rgb) => `rgb(${rgb[0]}, ${rgb[1]}, ${rgb[2]})`;

// WCAG relative luminance; a cell's value is printed in ink or in white, whichever contrasts more.
function luminance(rgb) {
  const [r, g, b] = rgb.map((c) => { const s = c / 255; return s <= 0.03928 ? s / 12.92 : ((s + 0.055) / 1.055) ** 2.4; });
  return 0.2126 * r + 0.7152 * g + 0.0722 * b;
}
const INK_LUMINANCE = luminance([0x1d, 0x2a, 0x33]);
function textOn(rgb) {
  const l = luminance(rgb);
  return 1.05 / (l + 0.05) > (l + 0.05) / (INK_LUMINANCE + 0.05) ? "#ffffff" : INK;
}

// The heatmaps follow their box's width (the page's column; a window resize or the projector switch).
const heatResize = typeof ResizeObserver === "function" ? new ResizeObserver((entries) => {
  for (const { target } of entries) {
    if (target._heat && target.isConnected && target.clientWidth && target.clientWidth !== target._heat.geo?.width) paintHeat(target);
  }
}) : null;

// rows: [{name, label?, text, values, cells?, flagged, flagText}]: `label` is the row's label (name and construct),
// `cells` the text shown in each cell ("" hides a small loading; the hover always gives the full value).
// onPick(name) on a click on a cell or a label, onHover(name) when the pointer is over a row.
// Drawn at once as SVG; on a refit the same SVG is updated in place. Returns a promise (resolved once drawn).
export function loadingsHeatmap(el, { rows, factors, groups = [], title, onPick, onHover, selected = null }) {
  const fs = fontSize();
  const labels = rows.map((r) => `${r.flagged ? "⚑ " : ""}${r.label ?? r.name}`);
  const longest = Math.max(4, ...labels.map((s) => s.length));
  // The labels' room is measured (a canvas measures a string without a layout pass).
  const left = Math.ceil(Math.max(16 + longest * fs * 0.62, labelWidth(labels, fs) + 14));
  const rowPx = document.body.classList.contains("projector") ? 30 : 22;
  el._heat = { ...el._heat, rows, factors, labels, groups, title, onPick, onHover, selected, fs, left,
    height: Math.max(260, rows.length * rowPx + 110), printed: cellsPrinted(rows.length, factors.length),
    hasCells: rows.every((r) => Array.isArray(r.cells)) };
  if (!el._heatParts) buildHeat(el);
  el._heatParts.tip.box.hidden = true; // new rows: the next pointer move shows the hover again
  el._heatParts.over = "";
  paintHeat(el);
  return Promise.resolve();
}

function buildHeat(el) {
  el.classList.add("heat-chart");
  // the chart's name is the keyboard box's (#heat-keys) and the values are in the row read-out (#heat-row)
  const svg = svgNode("svg", { class: "heat-svg", "aria-hidden": "true", "font-family": FONT, fill: INK });
  const parts = {
    svg,
    title: svgNode("text", { class: "heat-title", x: 0 }, svg),
    cells: svgNode("g", { class: "heat-cells" }, svg),
    gaps: svgNode("path", { class: "heat-gaps", fill: "none", "stroke-width": 2 }, svg),
    values: svgNode("g", { class: "heat-values", "text-anchor": "middle", "dominant-baseline": "central" }, svg),
    rules: svgNode("g", { class: "heat-rules", stroke: INK, "stroke-width": 2 }, svg),
    frame: svgNode("rect", { class: "heat-frame", fill: "none", stroke: INK, "stroke-width": 3, "stroke-dasharray": "9 4" }, svg),
    labels: svgNode("g", { class: "heat-labels", "text-anchor": "end", "dominant-baseline": "central" }, svg),
    factors: svgNode("g", { class: "heat-factors", "text-anchor": "middle" }, svg),
    cellNodes: [], valueNodes: [], ruleNodes: [], labelNodes: [], factorNodes: [], over: "",
  };
  // the hover box: the page's own element, every part of it set as text
  const tip = document.createElement("div");
  tip.className = "heat-tip";
  tip.hidden = true;
  tip.setAttribute("aria-hidden", "true");
  parts.tip = { box: tip, head: document.createElement("strong"), text: document.createElement("span"), flag: document.createElement("em") };
  tip.append(parts.tip.head, parts.tip.text, parts.tip.flag);
  el._heatParts = parts;
  el._heatBackdrop = backdrop(el); // read once per chart (a style pass)
  el.replaceChildren(svg, tip);

  // The row and column under the pointer (column -1: the labels), or null.
  const hit = (ev) => {
    const m = el._heat;
    const g = m.geo;
    const box = svg.getBoundingClientRect();
    const scale = box.width ? g.width / box.width : 1;
    const x = (ev.clientX - box.left) * scale;
    const y = (ev.clientY - box.top) * scale;
    const i = Math.floor((y - g.top) / g.ch);
    if (i < 0 || i >= m.rows.length || x < 0 || x >= g.left + g.plotW) return null;
    return { i, j: x < g.left ? -1 : Math.min(m.factors.length - 1, Math.floor((x - g.left) / g.cw)), x, y };
  };
  const hide = () => { tip.hidden = true; parts.over = ""; };
  svg.addEventListener("pointermove", (ev) => {
    const at = hit(ev);
    if (!at) { hide(); return; }
    const m = el._heat;
    const r = m.rows[at.i];
    const key = `${at.i},${at.j}`;
    if (key !== parts.over) {
      parts.over = key;
      if (at.j < 0) tip.hidden = true;
      else {
        const v = r.values[at.j];
        setText(parts.tip.head, `${m.labels[at.i]} on ${m.factors[at.j]}: ${v == null ? "–" : v.toFixed(3)}`);
        setText(parts.tip.text, r.text || "");
        setText(parts.tip.flag, r.flagText || "");
        tip.hidden = false;
      }
      if (m.onHover) m.onHover(r.name);
    }
    if (!tip.hidden) {
      // beside the pointer, on the side with more room (no layout read)
      tip.style.left = `${Math.round(at.x)}px`;
      tip.style.top = `${Math.round(at.y)}px`;
      tip.classList.toggle("heat-tip-left", at.x > m.geo.width / 2);
    }
  });
  svg.addEventListener("pointerleave", hide);
  svg.addEventListener("click", (ev) => {
    const at = hit(ev);
    const m = el._heat;
    if (at && m.onPick) m.onPick(m.rows[at.i].name);
  });
  heatResize?.observe(el);
}

function paintHeat(el) {
  const m = el._heat;
  const p = el._heatParts;
  const { rows, factors, fs, left, height } = m;
  const nR = rows.length;
  const nC = Math.max(1, factors.length);
  const width = el.clientWidth || 700;
  const top = 70;
  const plotW = Math.max(40, width - left - 20);
  const plotH = height - top - 20;
  const cw = plotW / nC;
  const ch = plotH / Math.max(1, nR);
  m.geo = { width, top, left, plotW, plotH, cw, ch };
  setAttr(p.svg, "width", width);
  setAttr(p.svg, "height", height);
  setAttr(p.svg, "viewBox", `0 0 ${width} ${height}`);
  setAttr(p.svg, "font-size", fs);
  setAttr(p.title, "y", fs + 6);
  setAttr(p.title, "font-size", fs + 2);
  setText(p.title, m.title || "");

  const cellNodes = pool(p.cellNodes, nR * factors.length, () => svgNode("rect", { class: "heat-cell" }, p.cells));
  const valueNodes = pool(p.valueNodes, m.printed ? nR * factors.length : 0, () => svgNode("text", { class: "heat-value" }, p.values));
  setAttr(p.values, "font-size", fs - 1);
  for (let i = 0; i < nR; i += 1) {
    const r = rows[i];
    const y = top + i * ch;
    for (let j = 0; j < factors.length; j += 1) {
      const v = r.values[j];
      const rgb = v == null ? null : divergingRgb(v);
      const cell = cellNodes[i * factors.length + j];
      setAttr(cell, "x", px(left + j * cw));
      setAttr(cell, "y", px(y));
      setAttr(cell, "width", px(cw));
      setAttr(cell, "height", px(ch));
      setAttr(cell, "fill", rgb ? rgbText(rgb) : "none");
      if (m.printed) {
        const t = valueNodes[i * factors.length + j];
        setAttr(t, "x", px(left + (j + 0.5) * cw));
        setAttr(t, "y", px(y + ch / 2));
        setAttr(t, "fill", rgb ? textOn(rgb) : INK);
        setText(t, m.hasCells ? String(r.cells[j] ?? "") : (v == null ? "" : v.toFixed(2)));
      }
    }
  }
  // the lines between the cells, in the colour the chart sits on
  let d = "";
  for (let i = 1; i < nR; i += 1) d += `M${px(left)},${px(top + i * ch)}h${px(plotW)}`;
  for (let j = 1; j < factors.length; j += 1) d += `M${px(left + j * cw)},${top}v${px(plotH)}`;
  setAttr(p.gaps, "d", d || "M0,0");
  setAttr(p.gaps, "stroke", el._heatBackdrop);
  // a rule between the groups of items that share a primary factor (or a construct, in pool order)
  const at = [];
  for (let i = 1; i < nR; i += 1) if (m.groups[i] !== m.groups[i - 1]) at.push(i);
  const ruleNodes = pool(p.ruleNodes, at.length, () => svgNode("line", { class: "heat-rule" }, p.rules));
  at.forEach((i, n) => {
    setAttr(ruleNodes[n], "x1", px(left - 0.02 * plotW));
    setAttr(ruleNodes[n], "x2", px(left + plotW));
    setAttr(ruleNodes[n], "y1", px(top + i * ch));
    setAttr(ruleNodes[n], "y2", px(top + i * ch));
  });
  const labelNodes = pool(p.labelNodes, nR, () => svgNode("text", { class: "heat-label" }, p.labels));
  for (let i = 0; i < nR; i += 1) {
    setAttr(labelNodes[i], "x", left - 10); // clear of the selection frame's left edge
    setAttr(labelNodes[i], "y", px(top + (i + 0.5) * ch));
    setText(labelNodes[i], m.labels[i]);
  }
  const factorNodes = pool(p.factorNodes, factors.length, () => svgNode("text", { class: "heat-factor" }, p.factors));
  factors.forEach((f, j) => {
    setAttr(factorNodes[j], "x", px(left + (j + 0.5) * cw));
    setAttr(factorNodes[j], "y", top - 8);
    setText(factorNodes[j], String(f));
  });
  paintFrame(el);
}

// A thick dashed frame around the selected row (the keyboard selection; not colour alone).
function paintFrame(el) {
  const m = el._heat;
  const { frame } = el._heatParts;
  const g = m.geo;
  const i = m.selected;
  if (i == null || i < 0 || i >= m.rows.length) { setAttr(frame, "display", "none"); return; }
  setAttr(frame, "display", "inline");
  setAttr(frame, "x", px(g.left - 5));
  setAttr(frame, "y", px(g.top + i * g.ch));
  setAttr(frame, "width", px(g.plotW + 5 + 0.005 * g.plotW));
  setAttr(frame, "height", px(g.ch));
}

// The background the chart sits on (the panel's white): the colour of the lines between the heatmap's cells.
function backdrop(el) {
  for (let node = el; node && node.nodeType === 1; node = node.parentElement) {
    const bg = getComputedStyle(node).backgroundColor;
    if (bg && bg !== "transparent" && !/^rgba\(.*,\s*0\)$/.test(bg)) return bg;
  }
  return "#ffffff";
}

// The loadings heatmap's colour key as HTML (a CSS gradient of DIVERGING and its ticks).
// `h` is the page's element helper (views/dom.js).
export function heatKey(h) {
  const stops = DIVERGING.map(([at, colour]) => `${colour} ${at * 100}%`).join(", ");
  return h("div", { class: "heat-key", id: "heat-key", role: "img",
    "aria-label": "Colour key: a loading of −1 is dark blue, 0 is paper white, +1 is dark orange." },
  h("span", { class: "heat-key-title", text: "loading", "aria-hidden": "true" }),
  h("span", { class: "heat-key-bar", "aria-hidden": "true", style: { background: `linear-gradient(to right, ${stops})` } }),
  h("span", { class: "heat-key-ticks", "aria-hidden": "true" }, ["−1", "−.5", "0", ".5", "1"].map((t) => h("span", { text: t }))));
}

/** Move the selection frame of a drawn loadings heatmap to row `index` (null: none). */
export function markHeatRow(el, index) {
  if (el && el._heat && el._heatParts) { el._heat.selected = index; paintFrame(el); }
  return Promise.resolve();
}

// The factor correlations (a small k x k matrix) as SVG: the same colours, the value in each cell, the
// dashboard's number style (.33, not 0.33). Drawn at once; a redraw replaces its few nodes.
export function factorCorrelations(el, { factors: names, matrix }) {
  const labels = names.map(String);
  const fs = fontSize();
  const k = labels.length;
  const longest = Math.max(3, ...labels.map((l) => l.length));
  const cell = Math.round(Math.max(56, longest * fs * 0.62 + 12));
  const rowH = Math.round(Math.max(40, fs * 2.6));
  const left = Math.ceil(Math.max(16 + longest * fs * 0.62, labelWidth(labels, fs) + 14));
  const top = Math.round(fs * 2 + 28);
  const width = left + k * cell + 10;
  const height = top + k * rowH + 6;
  const short = (v) => (v == null ? "" : v.toFixed(2).replace(/^(-?)0\./, "$1."));
  const pairs = [];
  for (let i = 0; i < k; i += 1) for (let j = i + 1; j < k; j += 1) pairs.push(`${labels[i]} with ${labels[j]} ${short(matrix[i]?.[j])}`);
  const svg = svgNode("svg", { class: "phi-svg", width, height, viewBox: `0 0 ${width} ${height}`, role: "img",
    "font-family": FONT, "font-size": fs, fill: INK });
  svg.setAttribute("aria-label", `Factor correlations: ${pairs.join("; ")}.`);
  const title = svgNode("text", { class: "phi-title", x: 0, y: fs + 4, "font-size": fs + 1 }, svg);
  title.textContent = "Factor correlations";
  for (let i = 0; i < k; i += 1) {
    const rowLabel = svgNode("text", { class: "phi-label", x: left - 8, y: top + (i + 0.5) * rowH, "text-anchor": "end", "dominant-baseline": "central" }, svg);
    rowLabel.textContent = labels[i];
    const colLabel = svgNode("text", { class: "phi-label", x: left + (i + 0.5) * cell, y: top - 8, "text-anchor": "middle" }, svg);
    colLabel.textContent = labels[i];
    for (let j = 0; j < k; j += 1) {
      const v = matrix[i]?.[j];
      const rgb = v == null ? null : divergingRgb(v);
      // 1 px of the panel's colour on each side: the 2 px gaps between cells
      const rect = svgNode("rect", { class: "phi-cell", x: left + j * cell + 1, y: top + i * rowH + 1, width: cell - 2, height: rowH - 2,
        fill: rgb ? rgbText(rgb) : "none" }, svg);
      svgNode("title", {}, rect).textContent = `${labels[i]} with ${labels[j]}: ${v == null ? "–" : v.toFixed(3)}`;
      const t = svgNode("text", { class: "phi-value", x: left + (j + 0.5) * cell, y: top + (i + 0.5) * rowH, "text-anchor": "middle",
        "dominant-baseline": "central", fill: rgb ? textOn(rgb) : INK }, svg);
      t.textContent = short(v);
    }
  }
  el.classList.add("phi-chart");
  el.replaceChildren(svg);
  return Promise.resolve();
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
